//! The whole pipeline (`Checker::new` + `Checker::check`) on arbitrary frames and configurations:
//! never a panic, and an error only from the configuration or buffers (the frame's content alone must
//! give a report). Repeating a check gives the identical report (determinism). Decoding in
//! `src/pipeline_input.rs`.
#![no_main]
use glowcheck::check::Buffers;
use libfuzzer_sys::fuzz_target;

#[path = "../src/pipeline_input.rs"]
mod pipeline_input;

static BUF: std::sync::Mutex<Option<Box<Buffers<4096>>>> = std::sync::Mutex::new(None);

fuzz_target!(|data: &[u8]| {
    let mut guard = BUF.lock().unwrap();
    let buf = guard.get_or_insert_with(|| Box::new(Buffers::new()));
    pipeline_input::run(data, buf);
});
