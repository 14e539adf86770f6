//! `glowsim batch` over 1000 small traces: Ctrl-C mid-run leaves only complete result files and
//! byte-identical inputs; the rerun resumes, reuses what was done and gives the right summary.
use nix::sys::signal::{kill, Signal};
use nix::unistd::Pid;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

const INSTRUMENT: &str = "\
name = \"small test bench\"
[sensor]
pixels = 256
adc_bits = 14
integration_us = 100000
electrons_per_count = 2.0
[scale]
coefficients_nm = [380.0, 1.2, 0.0]
sigma_nm = 0.01
line_fwhm_px = 3.0
";

fn glowsim() -> Command {
    Command::new(env!("CARGO_BIN_EXE_glowsim"))
}

fn files(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// Verdict of one template trace by `glowsim check` (exit status 0/1/3).
fn verdict_of(trace: &Path, inst: &Path) -> &'static str {
    let st = glowsim()
        .arg("check")
        .arg(trace)
        .arg("--instrument")
        .arg(inst)
        .args(["--profile", "hydrogen"])
        .stdout(Stdio::null())
        .status()
        .unwrap();
    match st.code() {
        Some(0) => "pass",
        Some(1) => "fail",
        Some(3) => "inconclusive",
        c => panic!("check failed: {c:?}"),
    }
}

#[test]
fn interrupt_leaves_no_partial_files_and_rerun_resumes() {
    let root = std::env::temp_dir().join(format!("glowsim-batch-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&root);
    let input = root.join("in");
    let out = root.join("out");
    std::fs::create_dir_all(&input).unwrap();
    let inst = root.join("small.toml");
    std::fs::write(&inst, INSTRUMENT).unwrap();
    // Two templates: hydrogen (the profile's own gas) and deuterium (a mislabelled tube).
    let mut templates: Vec<(PathBuf, &str)> = Vec::new();
    for (name, nucleus, seed) in [("h", "H", "5"), ("d", "D", "6")] {
        let p = root.join(format!("{name}.trace"));
        let st = glowsim()
            .args([
                "synth",
                "--pixels",
                "256",
                "--wavelength-map",
                "380,1.2",
                "--nucleus",
                nucleus,
                "--seed",
                seed,
                "--out",
            ])
            .arg(&p)
            .stdout(Stdio::null())
            .status()
            .unwrap();
        assert!(st.success());
        templates.push((p, verdict_of(&root.join(format!("{name}.trace")), &inst)));
    }
    let mut originals = Vec::new();
    for i in 0..1000 {
        let (t, _) = &templates[i % 2];
        let dest = input.join(format!("tube-{i:04}.trace"));
        std::fs::copy(t, &dest).unwrap();
        originals.push((dest.clone(), std::fs::read(&dest).unwrap()));
    }
    let batch = |extra: &[&str]| {
        let mut c = glowsim();
        c.arg("batch")
            .arg(&input)
            .arg("--instrument")
            .arg(&inst)
            .args(["--profile", "hydrogen", "--out"])
            .arg(&out);
        c.args(extra);
        c
    };

    // Start, wait until some results exist, interrupt.
    let child = batch(&["--jobs", "2"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    loop {
        let n = if out.is_dir() {
            files(&out).iter().filter(|f| f.ends_with(".json")).count()
        } else {
            0
        };
        if n >= 30 {
            break;
        }
        assert!(
            t0.elapsed() < Duration::from_secs(120),
            "batch made no progress"
        );
        std::thread::sleep(Duration::from_millis(5));
    }
    kill(Pid::from_raw(child.id() as i32), Signal::SIGINT).unwrap();
    let o = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(130), "{stderr}");
    assert!(stderr.contains("interrupted"), "{stderr}");
    let after = files(&out);
    assert!(
        !after.iter().any(|f| f.starts_with("summary")),
        "summary written after an interrupt"
    );
    assert!(
        after.len() < 1000,
        "the interrupt came too late to test anything ({} results)",
        after.len()
    );
    for f in &after {
        assert!(
            f.ends_with(".json") && !f.contains(".tmp."),
            "stray file {f}"
        );
        let v: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join(f)).unwrap())
            .unwrap_or_else(|e| panic!("{f} is not complete JSON: {e}"));
        assert!(v["verdict"].is_string(), "{f}");
    }
    let done_before = after.len();
    for (p, bytes) in &originals {
        assert!(
            &std::fs::read(p).unwrap() == bytes,
            "{} was modified",
            p.display()
        );
    }
    println!("interrupted after {done_before} of 1000 results");

    // Rerun: resumes, and the summary covers every trace.
    let o = batch(&["--json"]).output().unwrap();
    let s: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let expect = |v: &str| templates.iter().filter(|t| t.1 == v).count() * 500;
    assert_eq!(s["total"], 1000);
    assert_eq!(s["reused"].as_u64().unwrap() as usize, done_before);
    for v in ["pass", "fail", "inconclusive"] {
        assert_eq!(s[v].as_u64().unwrap() as usize, expect(v), "{v}");
    }
    assert_eq!(s["error"], 0);
    let code = if expect("fail") > 0 {
        1
    } else if expect("inconclusive") > 0 {
        3
    } else {
        0
    };
    assert_eq!(o.status.code(), Some(code));
    let csv = std::fs::read_to_string(out.join("summary.csv")).unwrap();
    assert_eq!(csv.lines().count(), 1001);
    assert!(csv
        .lines()
        .skip(1)
        .all(|l| l.starts_with(input.to_str().unwrap())));
    // Once more: everything reused; --force checks all again.
    let o = batch(&["--json"]).output().unwrap();
    let s: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(s["reused"], 1000);
    let o = batch(&["--json", "--force"]).output().unwrap();
    let s: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(s["reused"], 0);
    for (p, bytes) in &originals {
        assert!(
            &std::fs::read(p).unwrap() == bytes,
            "{} was modified",
            p.display()
        );
    }
    std::fs::remove_dir_all(&root).unwrap();
}
