//! Serial-link receiver: arbitrary bytes in arbitrary chunks never panic, every closed packet lands in
//! exactly one counter, and a valid packet spliced after the garbage (behind a resync zero) still
//! comes through intact.
#![no_main]
use libfuzzer_sys::fuzz_target;

#[allow(dead_code)]
#[path = "../../host-sim/src/link/mod.rs"]
mod link;

use link::decode::Receiver;
use link::encode::{encode_packet, max_packet_len, max_record_len, FrameHeader};

fuzz_target!(|data: &[u8]| {
    let (split, bytes) = match data.split_first() {
        Some((s, rest)) => (usize::from(*s).max(1), rest),
        None => (1, data),
    };
    let mut rx = Receiver::new();
    let mut got = 0u64;
    for chunk in bytes.chunks(split) {
        got += rx.push(chunk).len() as u64;
    }
    assert_eq!(got, rx.stats.ok);
    // Resynchronise, then one good packet must arrive unchanged.
    let counts: Vec<u32> = bytes
        .iter()
        .take(64)
        .map(|&b| u32::from(b) * 1000)
        .collect();
    let counts = if counts.is_empty() { vec![7] } else { counts };
    let header = FrameHeader {
        sequence: 5,
        kind: link::KIND_DARK,
        adc_bits: 16,
        integration_us: 1234,
        sensor_temp_mc: -250,
        coadded: 3,
    };
    let mut scratch = vec![0u8; max_record_len(counts.len())];
    let mut out = vec![0u8; max_packet_len(counts.len())];
    let n = encode_packet(&header, &counts, &mut scratch, &mut out).expect("encodes");
    let mut packet = vec![0u8];
    packet.extend_from_slice(&out[..n]);
    let frames = rx.push(&packet);
    assert_eq!(
        frames.len(),
        1,
        "a good packet after garbage and a zero arrives"
    );
    assert_eq!(frames[0].counts, counts);
    assert_eq!(frames[0].sequence, 5);
    let s = rx.finish();
    assert_eq!(s.truncated, 0);
});
