//! `glowsim demo`: incoming inspection of a delivery of tubes at the (invented) Tallowmere Instrument
//! Lab, bench 3. Every tube's trace was made by `glowsim synth` with a fixed seed (see [`SCENARIOS`]
//! and `tests/data/demo/README.md`); the demo checks each against its profile, prints a table, and
//! writes a PNG and an SVG plot per tube and a JSON report into the output folder.
//!
//! `glowsim demo --regenerate DIR` writes the traces again from the recipes below; a test holds them
//! byte-identical to the committed files.
use crate::check_cmd::ModeArg;
use crate::defaults::{write_atomic, Defaults};
use crate::instrument::Instrument;
use crate::plot::capture::{check_keep, Checked};
use crate::plot::{self, PlotMeta};
use crate::profile_file;
use crate::report_out::{self, CheckJson, SAFETY};
use crate::synth_cmd;
use crate::trace::{FrameKind, Trace};
use clap::Parser;
use glowcheck::predict::Air;
use rayon::prelude::*;
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

const EXAMPLES: &str = "\
Examples:
  glowsim demo                         # checks the bundled delivery, writes out/demo/
  glowsim demo --out /tmp/inspection --json
  glowsim demo --regenerate tests/data/demo   # rewrite the demo traces from their recipes

Exit status: 0 when every verdict is the one the scenario intends (or a documented lib issue),
1 otherwise, 2 on errors.

Safety: the tubes of a real inspection run from kilovolt supplies (switch off and discharge before
touching the tube or its leads); lines below about 380 nm are UV (shield the lamp, wear UV-rated eye
protection); hydrogen and deuterium burn in air from about 4 % to 75 % (ventilate, no open flames).";

/// Command-line options.
#[derive(clap::Args)]
#[command(after_help = EXAMPLES)]
pub struct Args {
    /// Output folder (default `out/demo`, or `demo.out` of the config file).
    #[arg(long)]
    out: Option<PathBuf>,
    /// Folder with `bench-3.toml` and `traces/` (default: the repository's tests/data/demo).
    #[arg(long)]
    data: Option<PathBuf>,
    /// Print the JSON report instead of the table (the files are written either way).
    #[arg(long)]
    json: bool,
    /// Skip the plots (table and JSON only).
    #[arg(long)]
    no_plots: bool,
    /// Write the demo traces into DIR/traces from their recipes and stop.
    #[arg(long, value_name = "DIR", conflicts_with_all = ["out", "json", "no_plots"])]
    regenerate: Option<PathBuf>,
}

/// The lab of the story.
pub const LAB: &str = "Tallowmere Instrument Lab, bench 3 (invented)";

/// One tube of the delivery.
pub struct Scenario {
    /// Tube id as the table shows it (also the plot file names).
    pub tube: &'static str,
    /// What the scenario stands for.
    pub about: &'static str,
    /// Trace file under `traces/`.
    pub file: &'static str,
    /// Profile name.
    pub profile: &'static str,
    /// Mode of the check.
    pub mode: ModeArg,
    /// The verdict the scenario intends.
    pub intent: &'static str,
    /// `glowsim synth` options of the trace (without `--out`).
    pub synth: &'static str,
    /// Options of a second `glowsim synth` run whose signal counts are added (foreign light with its
    /// own shot noise and no bias, dark or read noise, so the sum is one exposure of both sources).
    pub add: Option<&'static str>,
    /// Known lib behaviour that gives another verdict (documented in tests/data/demo/README.md).
    pub known_issue: Option<&'static str>,
}

/// The delivery. N₂ band heads of the air leak: 357.69, 380.49, 391.44 (N₂⁺), 399.84, 427.81 (N₂⁺) nm
/// (Pearse & Gaydon, 4th ed. 1976, from memory), placed at their pixels on the bench's nominal scale.
pub const SCENARIOS: &[Scenario] = &[
    Scenario {
        tube: "h-tube-0113",
        about: "hydrogen tube, first of lot 24-11",
        file: "h-tube-0113.trace",
        profile: "hydrogen",
        mode: ModeArg::Verify,
        intent: "pass",
        synth: "--nucleus H --seed 113",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "h-tube-0114",
        about: "hydrogen tube, 4 readouts and 2 dark frames, 3 hot pixels",
        file: "h-tube-0114.trace",
        profile: "hydrogen",
        mode: ModeArg::Verify,
        intent: "pass",
        synth: "--nucleus H --seed 114 --frames 4 --darks 2 --hot-pixels 3 --peak-e 6000",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "d-lamp-0207",
        about: "deuterium lamp with its UV continuum, 2 dark frames",
        file: "d-lamp-0207.trace",
        profile: "deuterium",
        mode: ModeArg::Verify,
        intent: "pass",
        synth: "--nucleus D --seed 207 --continuum-e 3000 --darks 2",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "d-lamp-0208",
        about: "deuterium lamp, warm sensor (35 °C), 2 dark frames",
        file: "d-lamp-0208.trace",
        profile: "deuterium",
        mode: ModeArg::Verify,
        intent: "pass",
        synth: "--nucleus D --seed 208 --temp-c 35 --darks 2",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "hd-ref-0301",
        about: "H+D reference tube, half of the line light each",
        file: "hd-ref-0301.trace",
        profile: "hydrogen-deuterium",
        mode: ModeArg::Verify,
        intent: "pass",
        synth: "--mix H=0.5,D=0.5 --seed 301 --peak-e 9000",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "d-lamp-0209",
        about: "deuterium lamp with 30 % hydrogen (contaminated fill)",
        file: "d-lamp-0209.trace",
        profile: "deuterium",
        mode: ModeArg::Verify,
        intent: "fail",
        synth: "--mix H=0.3,D=0.7 --seed 209 --peak-e 12000",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "h-tube-0115",
        about: "labelled hydrogen, filled with deuterium (mix-up)",
        file: "h-tube-0115.trace",
        profile: "hydrogen",
        mode: ModeArg::Verify,
        intent: "fail",
        synth: "--nucleus D --seed 115",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "h-tube-0116",
        about: "hydrogen tube with an air leak (N2 and N2+ bands)",
        file: "h-tube-0116.trace",
        profile: "hydrogen",
        mode: ModeArg::Verify,
        intent: "fail",
        synth: "--nucleus H --seed 116",
        add: Some(
            "--test-line 98.6:3000 --test-line 226.66:2500 --test-line 288.55:4000 \
             --test-line 336.21:1500 --test-line 496.04:2000 --seed 1116 --bias 0 --read-noise-e 0 \
             --dark-e-per-s 0",
        ),
        known_issue: None,
    },
    Scenario {
        tube: "h-tube-0117",
        about: "hydrogen tube near the end of its life: dim",
        file: "h-tube-0117.trace",
        profile: "hydrogen",
        mode: ModeArg::Verify,
        intent: "inconclusive",
        synth: "--nucleus H --seed 117 --peak-e 150",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "d-lamp-0210",
        about: "deuterium lamp, integration far too long: saturated",
        file: "d-lamp-0210.trace",
        profile: "deuterium",
        mode: ModeArg::Verify,
        intent: "inconclusive",
        synth: "--nucleus D --seed 210 --peak-e 60000",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "h-tube-0118",
        about: "good hydrogen tube; bench 3 was knocked and its scale moved 0.35 nm",
        file: "h-tube-0118.trace",
        profile: "hydrogen",
        mode: ModeArg::Verify,
        intent: "fail",
        synth: "--nucleus H --seed 118 --true-map 340.35,0.18,-6e-6",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "h-tube-0118-recal",
        about: "the same trace, bench recalibrated on the tube (drift reported)",
        file: "h-tube-0118.trace",
        profile: "hydrogen",
        mode: ModeArg::Calibrate,
        intent: "pass",
        synth: "--nucleus H --seed 118 --true-map 340.35,0.18,-6e-6",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "heii-tube-0401",
        about: "helium discharge hot enough for He II lines",
        file: "heii-tube-0401.trace",
        profile: "helium-ion",
        mode: ModeArg::Verify,
        intent: "pass",
        synth: "--nucleus He4 --seed 401",
        add: None,
        known_issue: None,
    },
    Scenario {
        tube: "h-tube-0119",
        about: "hydrogen tube that did not strike (no light)",
        file: "h-tube-0119.trace",
        profile: "hydrogen",
        mode: ModeArg::Verify,
        intent: "inconclusive",
        synth: "--no-lines --seed 119 --darks 1",
        add: None,
        known_issue: None,
    },
];

#[derive(Parser)]
struct SynthCli {
    #[command(flatten)]
    args: synth_cmd::Args,
}

/// The trace of a recipe, exactly as `glowsim synth OPTIONS` (plus the added run) writes it.
pub fn synthesize(s: &Scenario) -> Result<Trace, String> {
    let parse = |opts: &str| -> Result<Trace, String> {
        let mut argv = vec!["synth", "--out", "-"];
        argv.extend(opts.split_whitespace());
        let cli = SynthCli::try_parse_from(argv).map_err(|e| format!("{}: {e}", s.tube))?;
        synth_cmd::synthesize(&cli.args)
    };
    let mut t = parse(s.synth)?;
    t.notes.push(format!("demo tube {}: {}", s.tube, s.about));
    if let Some(add) = s.add {
        let extra = parse(add)?;
        let full = t.max_count();
        let theirs: Vec<&Vec<u32>> = extra
            .frames_of(FrameKind::Signal)
            .map(|f| &f.counts)
            .collect();
        let ours = t.frames.iter_mut().filter(|f| f.kind == FrameKind::Signal);
        let mut used = 0;
        for (f, add) in ours.zip(theirs.iter().cycle()) {
            for (c, &a) in f.counts.iter_mut().zip(add.iter()) {
                *c = (u64::from(*c) + u64::from(a)).min(full) as u32;
            }
            used += 1;
        }
        if used != theirs.len() {
            return Err(format!(
                "{}: the added run needs as many signal frames",
                s.tube
            ));
        }
        t.notes.push(format!(
            "signal counts include those of: glowsim synth {add}"
        ));
        for (k, v) in extra.extras.iter().filter(|(k, _)| k == "synth.line") {
            t.extras.push((format!("{k}.added"), v.clone()));
        }
    }
    Ok(t)
}

/// Where the demo's files are when `--data` is not given.
fn default_data() -> PathBuf {
    let here = Path::new(env!("CARGO_MANIFEST_DIR")).join("../tests/data/demo");
    if here.join("bench-3.toml").is_file() {
        here
    } else {
        PathBuf::from("tests/data/demo")
    }
}

fn regenerate(dir: &Path) -> Result<(), String> {
    let traces = dir.join("traces");
    std::fs::create_dir_all(&traces)
        .map_err(|e| format!("cannot create {}: {e}", traces.display()))?;
    let mut done: Vec<&str> = Vec::new();
    for s in SCENARIOS {
        if done.contains(&s.file) {
            continue;
        }
        done.push(s.file);
        let t = synthesize(s)?;
        let text = crate::trace::native::to_text(&t).map_err(|e| e.to_string())?;
        write_atomic(&traces.join(s.file), text.as_bytes())?;
    }
    println!("wrote {} demo traces to {}", done.len(), traces.display());
    Ok(())
}

/// One row of the JSON report.
#[derive(Serialize)]
pub struct TubeJson {
    /// Tube id.
    pub tube: &'static str,
    /// What the scenario stands for.
    pub about: &'static str,
    /// Trace file.
    pub trace: String,
    /// Profile name.
    pub profile: &'static str,
    /// verify | calibrate | blind.
    pub mode: &'static str,
    /// The verdict the scenario intends.
    pub intended: &'static str,
    /// The verdict of the check.
    pub verdict: &'static str,
    /// verdict == intended.
    pub as_intended: bool,
    /// A documented lib issue explains a different verdict.
    pub known_issue: Option<&'static str>,
    /// Code of the most severe reason (null when every rule is met).
    pub main_reason_code: Option<&'static str>,
    /// Its sentence.
    pub main_reason: Option<String>,
    /// Plot files (null with --no-plots).
    pub png: Option<String>,
    /// SVG plot.
    pub svg: Option<String>,
    /// The full check, as `glowsim check --json` prints it.
    pub check: CheckJson,
}

/// The JSON report of the demo.
#[derive(Serialize)]
pub struct DemoJson {
    /// The lab of the story.
    pub lab: &'static str,
    /// Instrument name.
    pub instrument: Option<String>,
    /// Tubes in table order.
    pub tubes: Vec<TubeJson>,
    /// Tubes whose verdict differs from the intent without a documented reason.
    pub unexpected: usize,
    /// The safety caution.
    pub safety: &'static str,
}

fn mode_word(m: ModeArg) -> &'static str {
    match m {
        ModeArg::Verify => "verify",
        ModeArg::Calibrate => "calibrate",
        ModeArg::Blind => "blind",
    }
}

fn medium(air: Air) -> &'static str {
    match air {
        Air::Vacuum => "vacuum",
        Air::Standard => "standard air",
        _ => "measured air",
    }
}

fn check_one(
    s: &'static Scenario,
    data: &Path,
    inst: &Instrument,
    out: &Path,
    plots: bool,
) -> Result<TubeJson, String> {
    let path = data.join("traces").join(s.file);
    let trace = Trace::read_path(&path)?;
    let (_, profile) = profile_file::resolve(s.profile)?;
    let checked: Checked =
        check_keep(&trace, inst, profile, s.mode.lib()).map_err(|e| format!("{}: {e}", s.tube))?;
    let (png, svg) = if plots {
        let png = out.join(format!("{}.png", s.tube));
        let svg = out.join(format!("{}.svg", s.tube));
        let title = format!(
            "{} ({}) — profile {}, {}",
            s.tube,
            s.about,
            s.profile,
            mode_word(s.mode)
        );
        let meta = PlotMeta {
            title: &title,
            stored_nm: inst.coefficients_nm,
            medium: medium(inst.air),
        };
        plot::write(&checked, &meta, &png, &svg)?;
        (
            Some(png.display().to_string()),
            Some(svg.display().to_string()),
        )
    } else {
        (None, None)
    };
    let r = &checked.report;
    let verdict = r.verdict.as_str();
    Ok(TubeJson {
        tube: s.tube,
        about: s.about,
        trace: path.display().to_string(),
        profile: s.profile,
        mode: mode_word(s.mode),
        intended: s.intent,
        verdict,
        as_intended: verdict == s.intent,
        known_issue: s.known_issue.filter(|_| verdict != s.intent),
        main_reason_code: r.reasons.first().map(|x| x.code()),
        main_reason: r.reasons.first().map(|x| x.to_string()),
        png,
        svg,
        check: report_out::to_json(r),
    })
}

fn table(d: &DemoJson) -> String {
    use std::fmt::Write as _;
    let mut s = String::new();
    let _ = writeln!(s, "Incoming inspection — {LAB}");
    let _ = writeln!(
        s,
        "instrument: {}\n",
        d.instrument.as_deref().unwrap_or("(unnamed)")
    );
    let _ = writeln!(
        s,
        "{:<18} {:<19} {:<9} {:<13} {:<13} main reason",
        "tube", "profile", "mode", "verdict", "intended"
    );
    for t in &d.tubes {
        let mark = if t.as_intended {
            ""
        } else if t.known_issue.is_some() {
            " (known lib issue)"
        } else {
            " (UNEXPECTED)"
        };
        let why = t
            .main_reason
            .clone()
            .unwrap_or_else(|| "every rule of the profile is met".into());
        let _ = writeln!(
            s,
            "{:<18} {:<19} {:<9} {:<13} {:<13} {why}{mark}",
            t.tube,
            t.profile,
            t.mode,
            t.verdict.to_uppercase(),
            t.intended
        );
    }
    s
}

/// Runs the command.
pub fn run(args: &Args, defaults: &Defaults) -> Result<ExitCode, String> {
    if let Some(dir) = &args.regenerate {
        regenerate(dir)?;
        return Ok(ExitCode::SUCCESS);
    }
    let started = std::time::Instant::now();
    let data = args.data.clone().unwrap_or_else(default_data);
    let out = args
        .out
        .clone()
        .or_else(|| defaults.demo_out.clone())
        .unwrap_or_else(|| PathBuf::from("out/demo"));
    std::fs::create_dir_all(&out).map_err(|e| format!("cannot create {}: {e}", out.display()))?;
    let inst = Instrument::read_path(&data.join("bench-3.toml"))?;
    let plots = !args.no_plots;
    let tubes: Vec<TubeJson> = SCENARIOS
        .par_iter()
        .map(|s| check_one(s, &data, &inst, &out, plots))
        .collect::<Result<_, _>>()?;
    let unexpected = tubes
        .iter()
        .filter(|t| !t.as_intended && t.known_issue.is_none())
        .count();
    let report = DemoJson {
        lab: LAB,
        instrument: inst.name.clone(),
        tubes,
        unexpected,
        safety: SAFETY,
    };
    let json = serde_json::to_string_pretty(&report).map_err(|e| e.to_string())? + "\n";
    let report_path = out.join("report.json");
    write_atomic(&report_path, json.as_bytes())?;
    if args.json {
        crate::trace::write_stdout(&json)?;
    } else {
        let mut text = table(&report);
        let n = report.tubes.len();
        let files = if plots {
            format!("{n} PNG + {n} SVG plots and report.json")
        } else {
            "report.json".into()
        };
        text.push_str(&format!(
            "\n{n} tubes checked in {:.1} s; {files} in {}\n",
            started.elapsed().as_secs_f64(),
            out.display()
        ));
        if report.unexpected > 0 {
            text.push_str(&format!(
                "{} verdict(s) differ from the scenario's intent!\n",
                report.unexpected
            ));
        }
        text.push_str(&format!("\n{SAFETY}\n"));
        crate::trace::write_stdout(&text)?;
    }
    Ok(if report.unexpected == 0 {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every recipe's options parse and a shared trace file has one recipe.
    #[test]
    fn recipes_are_consistent() {
        for a in SCENARIOS {
            for b in SCENARIOS {
                if a.file == b.file {
                    assert_eq!(
                        (a.synth, a.add),
                        (b.synth, b.add),
                        "{} / {}",
                        a.tube,
                        b.tube
                    );
                }
            }
            assert!(["pass", "fail", "inconclusive"].contains(&a.intent));
            assert!(profile_file::resolve(a.profile).is_ok());
        }
    }

    /// The air-leak trace holds more counts than its hydrogen part alone: the added run landed.
    #[test]
    fn added_light_is_in_the_trace() {
        let s = SCENARIOS.iter().find(|s| s.add.is_some()).unwrap();
        let with = synthesize(s).unwrap();
        let alone = Scenario { add: None, ..*s };
        let without = synthesize(&alone).unwrap();
        let sum = |t: &Trace| -> u64 { t.frames[0].counts.iter().map(|&c| u64::from(c)).sum() };
        assert!(sum(&with) > sum(&without) + 10_000);
        assert!(with.extra("synth.line.added").count() == 5);
    }
}
