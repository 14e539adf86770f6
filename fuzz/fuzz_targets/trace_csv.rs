//! Plain CSV import: never a panic; a result holds one signal frame of 1..=MAX_PIXELS counts.
#![no_main]
use libfuzzer_sys::fuzz_target;

#[path = "../../host-sim/src/excerpt.rs"]
mod excerpt;
#[allow(dead_code)]
#[path = "../../host-sim/src/trace/mod.rs"]
mod trace;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    if let Ok(t) = trace::csv::parse(text) {
        assert_eq!(t.frames.len(), 1);
        assert!((1..=trace::MAX_PIXELS).contains(&t.pixels));
        assert_eq!(t.frames[0].counts.len(), t.pixels);
    }
});
