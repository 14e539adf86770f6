//! `glowsim batch`: many traces through the same check, in parallel, with a progress bar, one JSON
//! result per trace and a summary in JSON and CSV.
//!
//! Inputs are only read. Every output goes through a temporary file and a rename, so a file in the
//! output folder is always complete; a rerun skips traces whose result is already there (with the same
//! instrument, profile and mode) unless `--force`. Ctrl-C stops handing out work, lets the checks in
//! flight finish their writes, removes temporaries and leaves no summary (exit status 130); rerun to
//! continue.
use crate::check_cmd::{evaluate, exit_code, ModeArg};
use crate::defaults::{is_temp_name, write_atomic, Defaults};
use crate::instrument::Instrument;
use crate::plot::{self, capture::check_keep, PlotMeta};
use crate::profile_file;
use crate::report_out::{self, SAFETY};
use crate::trace::Trace;
use glowcheck::judge::{Mode, TubeProfile, Verdict};
use indicatif::{ProgressBar, ProgressStyle};
use rayon::prelude::*;
use serde::Serialize;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

const EXAMPLES: &str = "\
Examples:
  glowsim batch traces/ --instrument bench.toml --profile deuterium --out out/lot-24-11
  glowsim batch 'incoming/*.trace' --instrument bench.toml --profile hydrogen --out out/h --json
  glowsim batch traces/ --out out/lot --force --jobs 2 --plots
  glowsim batch traces/            # instrument, profile, mode and out from glowsim.toml

Inputs: trace files (glowtrace or CSV), folders (their *.trace and *.csv files, not recursive) or
patterns with * and ? in the file name (quote them, or let the shell expand them).
Outputs in --out: one <name>.json per trace (as `glowsim check --json`, wrapped with the trace and
settings), with --plots <name>.png and <name>.svg, then summary.json and summary.csv.
Exit status: 1 when any tube fails, else 2 when a trace could not be checked, else 3 when any is
inconclusive, else 0; 130 after Ctrl-C (partial results kept, no partial files; rerun to continue).

Safety: discharge tubes run from kilovolt supplies; lines below about 380 nm are UV; hydrogen and
deuterium burn in air from about 4 % to 75 %.";

/// Command-line options.
#[derive(clap::Args)]
#[command(after_help = EXAMPLES)]
pub struct Args {
    /// Trace files, folders or file-name patterns.
    #[arg(required = true, value_name = "DIR|GLOB|FILE")]
    inputs: Vec<String>,
    /// Instrument file (default: `instrument` of the config file).
    #[arg(long)]
    instrument: Option<PathBuf>,
    /// Tube profile, a bundled name or a TOML file (default: `profile` of the config file).
    #[arg(long, value_name = "NAME|FILE")]
    profile: Option<String>,
    /// How the wavelength scale is obtained (default: `mode` of the config file, else verify).
    #[arg(long, value_enum)]
    mode: Option<ModeArg>,
    /// Output folder (default: `batch.out` of the config file).
    #[arg(long)]
    out: Option<PathBuf>,
    /// Check again traces whose result is already in the output folder.
    #[arg(long)]
    force: bool,
    /// Parallel checks (default: one per core).
    #[arg(long)]
    jobs: Option<usize>,
    /// Also write a PNG and an SVG plot per trace.
    #[arg(long)]
    plots: bool,
    /// Print the summary as JSON instead of text.
    #[arg(long)]
    json: bool,
}

/// Matches `*` (any run) and `?` (one character) against a whole file name.
pub fn wildcard(pattern: &str, name: &str) -> bool {
    let (p, n): (Vec<char>, Vec<char>) = (pattern.chars().collect(), name.chars().collect());
    let (mut i, mut j, mut star, mut mark) = (0, 0, None, 0);
    while j < n.len() {
        if i < p.len() && (p[i] == '?' || p[i] == n[j]) {
            i += 1;
            j += 1;
        } else if i < p.len() && p[i] == '*' {
            star = Some(i);
            mark = j;
            i += 1;
        } else if let Some(s) = star {
            i = s + 1;
            mark += 1;
            j = mark;
        } else {
            return false;
        }
    }
    p[i..].iter().all(|&c| c == '*')
}

fn is_trace_name(p: &Path) -> bool {
    matches!(
        p.extension().and_then(|e| e.to_str()),
        Some("trace" | "csv")
    )
}

fn list_dir(dir: &Path, keep: impl Fn(&str) -> bool) -> Result<Vec<PathBuf>, String> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(|e| format!("cannot list {}: {e}", dir.display()))?
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.is_file())
        .filter(|p| {
            p.file_name()
                .and_then(|n| n.to_str())
                .is_some_and(|n| !is_temp_name(n) && keep(n))
        })
        .collect();
    v.sort();
    Ok(v)
}

/// The trace files an input list names, sorted within each input, duplicates removed.
pub fn expand(inputs: &[String]) -> Result<Vec<PathBuf>, String> {
    let mut out: Vec<PathBuf> = Vec::new();
    for i in inputs {
        let p = Path::new(i);
        let found = if i.contains(['*', '?']) {
            let dir = p
                .parent()
                .filter(|d| !d.as_os_str().is_empty())
                .unwrap_or(Path::new("."));
            let pat = p.file_name().and_then(|n| n.to_str()).unwrap_or("");
            if dir.to_string_lossy().contains(['*', '?']) {
                return Err(format!(
                    "{i}: patterns only in the file name, not in folders"
                ));
            }
            list_dir(dir, |n| wildcard(pat, n))?
        } else if p.is_dir() {
            list_dir(p, |n| is_trace_name(Path::new(n)))?
        } else if p.is_file() {
            vec![p.to_path_buf()]
        } else {
            return Err(format!("{i}: no such file or folder"));
        };
        if found.is_empty() {
            return Err(format!("{i}: no trace files (*.trace, *.csv) there"));
        }
        for f in found {
            if !out.contains(&f) {
                out.push(f);
            }
        }
    }
    Ok(out)
}

/// One trace's outcome.
#[derive(Clone, Debug, Serialize)]
pub struct ItemJson {
    /// Input file.
    pub trace: String,
    /// Result file in the output folder (null for errors).
    pub result: Option<String>,
    /// pass | fail | inconclusive | error.
    pub verdict: String,
    /// Most severe reason's code, or the error message.
    pub main_reason_code: Option<String>,
    /// Most severe reason's sentence.
    pub main_reason: Option<String>,
    /// Taken from an earlier run.
    pub reused: bool,
}

/// The summary.
#[derive(Serialize)]
pub struct SummaryJson {
    /// Instrument, profile and mode of the run.
    pub settings: String,
    /// Traces.
    pub total: usize,
    /// Passed.
    pub pass: usize,
    /// Failed.
    pub fail: usize,
    /// Inconclusive.
    pub inconclusive: usize,
    /// Could not be checked.
    pub error: usize,
    /// Results reused from an earlier run.
    pub reused: usize,
    /// Per trace, in input order.
    pub items: Vec<ItemJson>,
    /// The safety caution.
    pub safety: &'static str,
}

struct Job<'a> {
    inst: &'a Instrument,
    profile: TubeProfile,
    mode: Mode,
    settings: String,
    out: &'a Path,
    force: bool,
    plots: bool,
}

fn result_name(trace: &Path) -> String {
    trace
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "trace".into())
}

/// An earlier run's result for these settings, if complete.
fn reuse(path: &Path, settings: &str) -> Option<(String, Option<String>, Option<String>)> {
    let v: Value = serde_json::from_slice(&std::fs::read(path).ok()?).ok()?;
    if v.get("settings")?.as_str()? != settings {
        return None;
    }
    let s = |k: &str| v.get(k).and_then(|x| x.as_str()).map(str::to_string);
    Some((s("verdict")?, s("main_reason_code"), s("main_reason")))
}

fn one(job: &Job<'_>, trace_path: &Path) -> ItemJson {
    let name = result_name(trace_path);
    let result = job.out.join(format!("{name}.json"));
    let mut item = ItemJson {
        trace: trace_path.display().to_string(),
        result: Some(result.display().to_string()),
        verdict: "error".into(),
        main_reason_code: None,
        main_reason: None,
        reused: false,
    };
    if !job.force {
        if let Some((v, code, why)) = reuse(&result, &job.settings) {
            item.verdict = v;
            item.main_reason_code = code;
            item.main_reason = why;
            item.reused = true;
            return item;
        }
    }
    let done = (|| -> Result<(String, Option<&'static str>, Option<String>), String> {
        let trace = Trace::read_path(trace_path)?;
        let report = if job.plots {
            let c = check_keep(&trace, job.inst, job.profile, job.mode)?;
            let title = format!("{name} — {}", job.settings);
            let meta = PlotMeta {
                title: &title,
                stored_nm: job.inst.coefficients_nm,
                medium: "see instrument file",
            };
            plot::write(
                &c,
                &meta,
                &job.out.join(format!("{name}.png")),
                &job.out.join(format!("{name}.svg")),
            )?;
            c.report
        } else {
            evaluate(&trace, None, job.inst, job.profile, job.mode)?
        };
        let code = report.reasons.first().map(|r| r.code());
        let why = report.reasons.first().map(|r| r.to_string());
        let doc = serde_json::json!({
            "trace": trace_path.display().to_string(),
            "settings": job.settings,
            "verdict": report.verdict.as_str(),
            "main_reason_code": code,
            "main_reason": why,
            "check": report_out::to_json(&report),
        });
        let text = serde_json::to_string_pretty(&doc).map_err(|e| e.to_string())? + "\n";
        write_atomic(&result, text.as_bytes())?;
        Ok((report.verdict.as_str().to_string(), code, why))
    })();
    match done {
        Ok((v, code, why)) => {
            item.verdict = v;
            item.main_reason_code = code.map(str::to_string);
            item.main_reason = why;
        }
        Err(e) => {
            item.result = None;
            item.main_reason = Some(e);
        }
    }
    item
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

fn summary_csv(items: &[ItemJson]) -> String {
    let mut s = String::from("trace,verdict,main_reason_code,main_reason,result,reused\n");
    for i in items {
        s.push_str(&format!(
            "{},{},{},{},{},{}\n",
            csv_field(&i.trace),
            i.verdict,
            csv_field(i.main_reason_code.as_deref().unwrap_or("")),
            csv_field(i.main_reason.as_deref().unwrap_or("")),
            csv_field(i.result.as_deref().unwrap_or("")),
            i.reused
        ));
    }
    s
}

/// Removes temporaries this process may have left (a plot in flight at the interrupt).
fn remove_own_temps(out: &Path) {
    let tag = format!(".tmp.{}", std::process::id());
    if let Ok(rd) = std::fs::read_dir(out) {
        for e in rd.flatten() {
            let n = e.file_name().to_string_lossy().into_owned();
            if is_temp_name(&n) && n.contains(&tag) {
                let _ = std::fs::remove_file(e.path());
            }
        }
    }
}

/// Runs the command; the exit status tells the worst outcome.
pub fn run(args: &Args, defaults: &Defaults) -> Result<ExitCode, String> {
    let inst_path = Defaults::pick(
        &args.instrument,
        &defaults.instrument,
        "--instrument",
        "instrument",
    )?;
    let profile_arg = Defaults::pick(&args.profile, &defaults.profile, "--profile", "profile")?;
    let out = Defaults::pick(&args.out, &defaults.batch_out, "--out", "batch.out")?;
    let mode = defaults.mode_or(args.mode);
    let inst = Instrument::read_path(&inst_path)?;
    let (profile_name, profile) = profile_file::resolve(&profile_arg)?;
    let traces = expand(&args.inputs)?;
    let mut names: Vec<(String, &PathBuf)> = traces.iter().map(|t| (result_name(t), t)).collect();
    names.sort();
    if let Some(w) = names.windows(2).find(|w| w[0].0 == w[1].0) {
        return Err(format!(
            "{} and {} would both write {}.json; rename one or run them separately",
            w[0].1.display(),
            w[1].1.display(),
            w[0].0
        ));
    }
    std::fs::create_dir_all(&out).map_err(|e| format!("cannot create {}: {e}", out.display()))?;
    let stop = Arc::new(AtomicBool::new(false));
    {
        let stop = stop.clone();
        ctrlc::set_handler(move || stop.store(true, Ordering::SeqCst))
            .map_err(|e| format!("cannot catch Ctrl-C: {e}"))?;
    }
    let job = Job {
        inst: &inst,
        profile,
        mode: mode.lib(),
        settings: format!(
            "instrument {} | profile {profile_name} | mode {}",
            inst_path.display(),
            report_out::mode_name(mode.lib())
        ),
        out: &out,
        force: args.force,
        plots: args.plots,
    };
    let bar = ProgressBar::new(traces.len() as u64);
    bar.set_style(
        ProgressStyle::with_template("{bar:40} {pos}/{len} traces  {per_sec}  eta {eta}")
            .map_err(|e| e.to_string())?,
    );
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(args.jobs.unwrap_or(0))
        .build()
        .map_err(|e| e.to_string())?;
    let items: Vec<Option<ItemJson>> = pool.install(|| {
        traces
            .par_iter()
            .map(|t| {
                if stop.load(Ordering::SeqCst) {
                    return None;
                }
                let item = one(&job, t);
                bar.inc(1);
                Some(item)
            })
            .collect()
    });
    bar.finish_and_clear();
    if stop.load(Ordering::SeqCst) {
        remove_own_temps(&out);
        let done = items.iter().flatten().count();
        eprintln!(
            "glowsim batch: interrupted; {done} of {} traces have results in {}, no summary written; rerun to continue",
            traces.len(),
            out.display()
        );
        return Ok(ExitCode::from(130));
    }
    let items: Vec<ItemJson> = items.into_iter().flatten().collect();
    let count = |v: &str| items.iter().filter(|i| i.verdict == v).count();
    let summary = SummaryJson {
        settings: job.settings.clone(),
        total: items.len(),
        pass: count(Verdict::Pass.as_str()),
        fail: count(Verdict::Fail.as_str()),
        inconclusive: count(Verdict::Inconclusive.as_str()),
        error: count("error"),
        reused: items.iter().filter(|i| i.reused).count(),
        items,
        safety: SAFETY,
    };
    let json = serde_json::to_string_pretty(&summary).map_err(|e| e.to_string())? + "\n";
    write_atomic(&out.join("summary.json"), json.as_bytes())?;
    write_atomic(
        &out.join("summary.csv"),
        summary_csv(&summary.items).as_bytes(),
    )?;
    if args.json {
        crate::trace::write_stdout(&json)?;
    } else {
        let mut s = format!(
            "{} traces: {} pass, {} fail, {} inconclusive, {} error ({} reused from an earlier run)\n",
            summary.total, summary.pass, summary.fail, summary.inconclusive, summary.error, summary.reused
        );
        let not_passed: Vec<&ItemJson> = summary
            .items
            .iter()
            .filter(|i| i.verdict != "pass")
            .collect();
        for i in not_passed.iter().take(20) {
            s.push_str(&format!(
                "  {:<12} {}  {}\n",
                i.verdict,
                i.trace,
                i.main_reason.as_deref().unwrap_or("")
            ));
        }
        if not_passed.len() > 20 {
            s.push_str(&format!(
                "  … and {} more (see summary.csv)\n",
                not_passed.len() - 20
            ));
        }
        s.push_str(&format!(
            "summary: {0}/summary.json, {0}/summary.csv\n{SAFETY}\n",
            out.display()
        ));
        crate::trace::write_stdout(&s)?;
    }
    let code = if summary.fail > 0 {
        exit_code(Verdict::Fail)
    } else if summary.error > 0 {
        2
    } else if summary.inconclusive > 0 {
        exit_code(Verdict::Inconclusive)
    } else {
        0
    };
    Ok(ExitCode::from(code))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wildcards() {
        assert!(wildcard("*.trace", "a.trace"));
        assert!(wildcard("lot-??-*.trace", "lot-24-0113.trace"));
        assert!(!wildcard("*.trace", "a.trace.json"));
        assert!(!wildcard("lot-?.trace", "lot-12.trace"));
        assert!(wildcard("*", ""));
        assert!(wildcard("a*b*c", "aXXbYYc"));
        assert!(!wildcard("a*b*c", "aXXbYY"));
    }

    #[test]
    fn csv_quotes_what_needs_it() {
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"x\""), "\"say \"\"x\"\"\"");
        assert_eq!(csv_field("plain"), "plain");
    }
}
