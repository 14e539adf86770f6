//! Trace files through the `glowsim` binary: synth determinism, CSV import with every separator, and
//! malformed files reported by line.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn glowsim(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_glowsim"))
        .args(args)
        .output()
        .expect("glowsim runs")
}

fn ok(args: &[&str]) -> String {
    let o = glowsim(args);
    assert!(
        o.status.success(),
        "glowsim {args:?} failed: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    String::from_utf8(o.stdout).unwrap()
}

fn tmp(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("glowsim-trace-tests-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

const SYNTH: &[&str] = &[
    "synth",
    "--mix",
    "H=0.1,D=0.9",
    "--pixels",
    "1024",
    "--wavelength-map",
    "380,0.3",
    "--darks",
    "2",
    "--hot-pixels",
    "3",
    "--continuum-e",
    "800",
    "--stray",
    "0.01",
];

#[test]
fn same_seed_byte_identical_files() {
    let (a, b, c) = (tmp("a.trace"), tmp("b.trace"), tmp("c.trace"));
    for (p, seed) in [(&a, "5"), (&b, "5"), (&c, "6")] {
        let mut args = SYNTH.to_vec();
        args.extend(["--seed", seed, "--out", s(p)]);
        ok(&args);
    }
    let (ta, tb, tc) = (
        std::fs::read(&a).unwrap(),
        std::fs::read(&b).unwrap(),
        std::fs::read(&c).unwrap(),
    );
    assert_eq!(ta, tb);
    assert_ne!(ta, tc);
    // Standard output gives the same bytes as the file.
    let mut args = SYNTH.to_vec();
    args.extend(["--seed", "5", "--out", "-"]);
    assert_eq!(ok(&args).into_bytes(), ta);
}

/// The counts of the first signal frame of a glowtrace file (read here independently of glowsim).
fn first_frame(text: &str) -> Vec<u32> {
    let body = text.split("frame signal\n").nth(1).unwrap();
    let body = body.split(['f', 'e']).next().unwrap(); // up to the next "frame" or "end"
    body.split_whitespace()
        .map(|w| w.parse().unwrap())
        .collect()
}

/// A CSV export of the same counts, in each accepted shape, gives exactly the peaks of the native file.
#[test]
fn csv_import_matches_native_for_every_separator() {
    let native = tmp("n.trace");
    ok(&[
        "synth",
        "--nucleus",
        "D",
        "--seed",
        "9",
        "--pixels",
        "2048",
        "--out",
        s(&native),
    ]);
    let counts = first_frame(&std::fs::read_to_string(&native).unwrap());
    assert_eq!(counts.len(), 2048);
    let reference = ok(&["peaks", s(&native), "--json"]);
    assert!(reference.contains("\"peaks\":[{"), "{reference}");

    let shapes: [(&str, &str, bool, bool); 8] = [
        ("comma-pixel-header", ",", true, true),
        ("comma-pixel", ",", true, false),
        ("semicolon-pixel-header", ";", true, true),
        ("semicolon-pixel", ";", true, false),
        ("tab-pixel-header", "\t", true, true),
        ("tab-pixel", "\t", true, false),
        ("one-column-header", "", false, true),
        ("one-column", "", false, false),
    ];
    for (name, sep, pixel_col, header) in shapes {
        let mut text = String::new();
        if header {
            text.push_str(if pixel_col { "pixel" } else { "counts" });
            if pixel_col {
                text.push_str(sep);
                text.push_str("counts");
            }
            text.push('\n');
        }
        for (i, c) in counts.iter().enumerate() {
            if pixel_col {
                text.push_str(&format!("{}{sep}{c}\n", i + 1));
            } else {
                text.push_str(&format!("{c}\n"));
            }
        }
        let p = tmp(&format!("{name}.csv"));
        std::fs::write(&p, text).unwrap();
        let got = ok(&[
            "peaks",
            s(&p),
            "--json",
            "--adc-bits",
            "14",
            "--gain-e",
            "2",
        ]);
        assert_eq!(got, reference, "CSV shape {name}");
    }

    // Decimal counts are rounded: x.4 down, x.6 up (semicolon file with decimal commas).
    let mut text = String::from("px;counts\n");
    for (i, c) in counts.iter().enumerate() {
        let v = if i % 2 == 0 {
            format!("{c},4")
        } else {
            format!("{},6", c - 1)
        };
        text.push_str(&format!("{i};{v}\n"));
    }
    let p = tmp("decimal.csv");
    std::fs::write(&p, text).unwrap();
    let got = ok(&[
        "peaks",
        s(&p),
        "--json",
        "--adc-bits",
        "14",
        "--gain-e",
        "2",
    ]);
    assert_eq!(got, reference, "decimal-comma CSV");
}

fn fails_at(name: &str, text: &str, line: usize, expect: &str) {
    let p = tmp(name);
    std::fs::write(&p, text).unwrap();
    let o = glowsim(&["peaks", s(&p)]);
    assert_eq!(o.status.code(), Some(2), "{name} should fail");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.starts_with("glowsim: error: ")
            && err.contains(&format!("line {line}: "))
            && err.contains(expect),
        "{name}: {err}"
    );
}

#[test]
fn malformed_files_name_the_line() {
    fails_at(
        "bad-count.trace",
        "glowtrace 1\npixels: 2\nadc_bits: 8\nframe signal\n1 q\nend\n",
        5,
        "expected a count",
    );
    fails_at(
        "short.trace",
        "glowtrace 1\npixels: 3\nadc_bits: 8\nframe signal\n1 2\nend\n",
        6,
        "expected 3",
    );
    fails_at("version.trace", "# old\nglowtrace 7\n", 2, "version 7");
    fails_at(
        "bad-csv.csv",
        "pixel,counts\n0,5\n1,6\n2,x\n",
        4,
        "expected a count in column 2",
    );
    fails_at("gap.csv", "0;5\n1;6\n3;7\n", 3, "expected pixel index 2");
    fails_at(
        "fields.csv",
        "5\t6\n7\n",
        2,
        "expected 2 fields separated by tab",
    );
}
