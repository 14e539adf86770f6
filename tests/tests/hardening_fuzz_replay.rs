//! Replays fuzz inputs of the `pipeline` target on the stable toolchain (debug build: overflow checks on,
//! as in the fuzz runs with `-a`): the committed seeds (including fixed crash inputs) must pass; inputs that once crashed are kept in
//! `fuzz/regressions/pipeline/` and replayed by the ignored test until the fault is fixed.
use glowcheck::check::Buffers;
use std::path::Path;

#[allow(dead_code)]
#[path = "../../fuzz/src/pipeline_input.rs"]
mod pipeline_input;

/// Runs every input of `dir`; returns how many ran and the failures (file: panic message).
fn replay(dir: &str) -> (usize, Vec<String>) {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("..").join(dir);
    let mut buf = Box::new(Buffers::<4096>::new());
    let mut names: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    names.sort();
    let mut failures = Vec::new();
    for path in &names {
        let data = std::fs::read(path).unwrap();
        let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
            pipeline_input::run(&data, &mut buf)
        }));
        if let Err(e) = r {
            let msg = e
                .downcast_ref::<String>()
                .cloned()
                .or_else(|| e.downcast_ref::<&str>().map(|s| s.to_string()))
                .unwrap_or_default();
            failures.push(format!("{}: {msg}", path.display()));
        }
    }
    (names.len(), failures)
}

#[test]
fn pipeline_seed_corpus_runs_clean() {
    let (n, failures) = replay("fuzz/seeds/pipeline");
    assert!(n >= 3, "{n} seeds");
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn pipeline_regressions_run_clean() {
    let (n, failures) = replay("fuzz/regressions/pipeline");
    assert!(n >= 1);
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
