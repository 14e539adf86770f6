//! glowtrace (and, through `parse_any`, CSV) text: never a panic; what parses and can be written must
//! read back identical (the format's lossless promise, `host-sim/src/trace/mod.rs`).
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
    let Ok(t) = trace::Trace::parse_any(text) else {
        return;
    };
    assert!(!t.frames.is_empty(), "a parsed trace has a frame");
    for f in &t.frames {
        assert_eq!(f.counts.len(), t.pixels, "every frame has `pixels` counts");
        assert!(f.counts.iter().all(|&c| u64::from(c) <= t.max_count()));
    }
    if let Ok(written) = trace::native::to_text(&t) {
        let back = trace::native::parse(&written).expect("written trace reads back");
        assert_eq!(back, t, "write then read is lossless");
    }
});
