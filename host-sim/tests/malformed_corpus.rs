//! The malformed-input corpus (`tests/malformed/`, table in `tests/malformed/EXPECTED.tsv`): every broken
//! trace, CSV, instrument or profile file gets its clear error (exit 2, the expected text, never a panic
//! message); the few accepted controls give a verdict. Rows noted `bug:` are known wrong answers, run
//! only by `known_bugs_in_the_corpus_are_fixed` (marked `#[ignore]` while such a row is open; none is now).
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// One row of EXPECTED.tsv.
struct Row {
    file: String,
    command: String,
    exit: String,
    text: String,
    note: String,
}

fn rows() -> Vec<Row> {
    let table = std::fs::read_to_string(repo().join("tests/malformed/EXPECTED.tsv")).unwrap();
    table
        .lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
        .map(|l| {
            let f: Vec<&str> = l.split('\t').collect();
            assert!(
                f.len() >= 3,
                "EXPECTED.tsv row needs file, command, exit: {l:?}"
            );
            Row {
                file: f[0].to_string(),
                command: f[1].to_string(),
                exit: f[2].to_string(),
                text: f.get(3).unwrap_or(&"").to_string(),
                note: f.get(4).unwrap_or(&"").to_string(),
            }
        })
        .collect()
}

fn glowsim(args: &[&std::ffi::OsStr]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_glowsim"))
        .args(args)
        // Away from any glowsim.toml of the checkout.
        .current_dir(std::env::temp_dir())
        .output()
        .unwrap()
}

fn run_row(r: &Row) -> Output {
    run_file(&repo().join("tests/malformed").join(&r.file), &r.command)
}

/// Runs one command of EXPECTED.tsv on `file`.
fn run_file(file: &Path, command: &str) -> Output {
    let trace = repo().join("tests/data/demo/traces/d-lamp-0207.trace");
    let inst = repo().join("tests/data/instruments/bench-2048.toml");
    let (f, t, i) = (file.as_os_str(), trace.as_os_str(), inst.as_os_str());
    let s = |x: &'static str| std::ffi::OsStr::new(x);
    match command {
        "peaks" => glowsim(&[s("peaks"), f]),
        "peaks-json" => glowsim(&[s("peaks"), s("--json"), f]),
        "instrument" => glowsim(&[
            s("check"),
            t,
            s("--instrument"),
            f,
            s("--profile"),
            s("deuterium"),
        ]),
        "profile" => glowsim(&[s("check"), t, s("--instrument"), i, s("--profile"), f]),
        c => panic!("{}: unknown command {c:?} in EXPECTED.tsv", file.display()),
    }
}

/// What is wrong with the answer to a row, if anything.
fn verdict_on(r: &Row, out: &Output) -> Option<String> {
    let code = out.status.code();
    let stderr = String::from_utf8_lossy(&out.stderr);
    let stdout = String::from_utf8_lossy(&out.stdout);
    if stderr.contains("panicked") || stderr.contains("RUST_BACKTRACE") {
        return Some(format!("panic message reached the user: {stderr}"));
    }
    let code_ok = match r.exit.as_str() {
        "verdict" => matches!(code, Some(0 | 1 | 3)),
        e => code == e.parse::<i32>().ok(),
    };
    if !code_ok {
        return Some(format!(
            "exit {code:?}, expected {}; stderr: {stderr}",
            r.exit
        ));
    }
    if r.exit == "2" {
        if !stderr.starts_with("glowsim: error: ") || stderr.lines().count() > 12 {
            return Some(format!("not one clear error: {stderr}"));
        }
        if !stderr.contains(&r.text) {
            return Some(format!("stderr lacks {:?}: {stderr}", r.text));
        }
    } else if !stdout.contains(&r.text) {
        return Some(format!("stdout lacks {:?}: {stdout}", r.text));
    }
    None
}

#[test]
fn every_corpus_file_gets_its_expected_answer() {
    let rows = rows();
    // The table and the folder agree, both ways.
    let mut files = Vec::new();
    for dir in ["trace", "csv", "instrument", "profile"] {
        for e in std::fs::read_dir(repo().join("tests/malformed").join(dir)).unwrap() {
            files.push(format!(
                "{dir}/{}",
                e.unwrap().file_name().to_string_lossy()
            ));
        }
    }
    files.sort();
    let mut listed: Vec<String> = rows.iter().map(|r| r.file.clone()).collect();
    listed.sort();
    assert_eq!(
        files, listed,
        "tests/malformed/* and EXPECTED.tsv list the same files"
    );
    let errors = rows.iter().filter(|r| r.exit == "2").count();
    assert!(
        errors >= 30,
        "at least 30 kinds of malformed input, got {errors}"
    );
    let mut failures = Vec::new();
    for r in rows.iter().filter(|r| !r.note.starts_with("bug:")) {
        if let Some(why) = verdict_on(r, &run_row(r)) {
            failures.push(format!("{}: {why}", r.file));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// A row noted `bug:` is kept out of the test above so that a known wrong answer can be recorded before
/// its fix; while one is open, this test carries `#[ignore]`.
#[test]
fn known_bugs_in_the_corpus_are_fixed() {
    let mut failures = Vec::new();
    for r in rows().iter().filter(|r| r.note.starts_with("bug:")) {
        if let Some(why) = verdict_on(r, &run_row(r)) {
            failures.push(format!("{} ({}): {why}", r.file, r.note));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// Inputs too big to commit, written to a temporary folder.
#[test]
fn oversized_inputs_get_clear_errors() {
    let dir = std::env::temp_dir().join(format!("glowcheck-malformed-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let cases: Vec<(&str, String, &str)> = vec![
        // A 4 MiB line of digits after a good row (as the first row it would pass for a header).
        (
            "huge-line.csv",
            format!("5\n{}\n", "7".repeat(4 << 20)),
            "line 2: expected a count in column 1",
        ),
        // One line holding far more counts than `pixels`.
        (
            "huge-frame-line.trace",
            format!(
                "glowtrace 1\npixels: 16\nadc_bits: 12\nframe signal\n{}\nend\n",
                "1 ".repeat(200_000)
            ),
            "has more than 16 counts",
        ),
        // More rows than any trace may hold.
        (
            "too-many-rows.csv",
            "5\n".repeat(65_537),
            "more than 65536 pixels",
        ),
        // A well-formed trace wider than lib's frame limit.
        (
            "wider-than-lib.trace",
            format!(
                "glowtrace 1\npixels: 65536\nadc_bits: 12\nframe signal\n{}\nend\n",
                "9 ".repeat(65_536)
            ),
            "65536 pixels: the firmware handles at most 4096",
        ),
        // A huge note line is fine for the format; the 4-pixel frame is what lib refuses.
        (
            "huge-note.trace",
            format!(
                "glowtrace 1\npixels: 4\nadc_bits: 8\nnote: {}\nframe signal\n1 2 3 4\nend\n",
                "x".repeat(1 << 20)
            ),
            "frame too short",
        ),
    ];
    let mut failures = Vec::new();
    for (name, text, want) in &cases {
        let path = dir.join(name);
        std::fs::write(&path, text).unwrap();
        let out = glowsim(&["peaks".as_ref(), path.as_os_str()]);
        let r = Row {
            file: name.to_string(),
            command: "peaks".into(),
            exit: "2".into(),
            text: want.to_string(),
            note: String::new(),
        };
        if let Some(why) = verdict_on(&r, &out) {
            failures.push(format!("{name}: {why}"));
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// A 4 MiB field in every kind of file: the error quotes a short excerpt and gives the length.
#[test]
fn errors_quote_a_bounded_excerpt() {
    let dir = std::env::temp_dir().join(format!("glowcheck-excerpt-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let big = 4usize << 20;
    let sevens = "7".repeat(big);
    let xs = "x".repeat(big);
    let inst =
        std::fs::read_to_string(repo().join("tests/data/instruments/bench-2048.toml")).unwrap();
    let species = "[[species]]\nnucleus = \"H\"\nshare = [0.9, 1.0]\n";
    // (file name, content, command as in EXPECTED.tsv, text the error must contain)
    let cases: Vec<(&str, String, &str, String)> = vec![
        (
            "huge-field.csv",
            format!("5\n{sevens}x\n"),
            "peaks",
            format!(
                "line 2: expected a count in column 1, found \"{}…\" ({} bytes)",
                "7".repeat(40),
                big + 1
            ),
        ),
        (
            "huge-pixel.csv",
            format!("0,5\n{sevens}x,6\n"),
            "peaks",
            "line 2: expected a pixel index in column 1, found \"7777".into(),
        ),
        (
            "huge-count.trace",
            format!("glowtrace 1\npixels: 3\nadc_bits: 8\nframe signal\n1 {sevens}\nend\n"),
            "peaks",
            "line 5: expected a count (whole number 0..=255), found \"7777".into(),
        ),
        (
            "huge-header-line.trace",
            format!("glowtrace 1\npixels: 3\n{xs}\n"),
            "peaks",
            "line 3: expected 'key: value', 'frame signal' or 'frame dark', found \"xxxx".into(),
        ),
        (
            "huge-magic-tail.trace",
            format!("glowtrace 1 {xs}\n"),
            "peaks",
            format!(
                "line 1: unexpected text after the version: \"{}…\" ({big} bytes)",
                "x".repeat(40)
            ),
        ),
        (
            "huge-string.toml",
            inst.replace("medium = \"standard\"", &format!("medium = \"{xs}\"")),
            "instrument",
            format!("`air.medium` = \"{}…\" ({big} bytes)", "x".repeat(40)),
        ),
        (
            "huge-line.toml",
            inst.replace("pixels = 2048", &format!("pixels = {sevens}")),
            "instrument",
            "not valid TOML: TOML parse error at line 6, column 10: ".into(),
        ),
        (
            "huge-key.toml",
            inst.replace("pixels = 2048", &format!("pixels = 2048\n{xs} = 1")),
            "instrument",
            format!(
                "unknown key `sensor.{}…` ({} bytes)",
                "x".repeat(33),
                big + 7
            ),
        ),
        (
            "huge-nucleus.toml",
            species.replace("\"H\"", &format!("\"{xs}\"")),
            "profile",
            format!(
                "`species[0].nucleus` = \"{}…\" ({big} bytes)",
                "x".repeat(40)
            ),
        ),
    ];
    let mut failures = Vec::new();
    for (name, text, command, want) in &cases {
        std::fs::write(dir.join(name), text).unwrap();
        let r = Row {
            file: name.to_string(),
            command: command.to_string(),
            exit: "2".into(),
            text: want.clone(),
            note: String::new(),
        };
        let out = run_file(&dir.join(name), command);
        if out.stderr.len() > 400 {
            failures.push(format!(
                "{name}: error message of {} bytes",
                out.stderr.len()
            ));
        } else if let Some(why) = verdict_on(&r, &out) {
            failures.push(format!("{name}: {why}"));
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
