//! The frames the firmware checks, embedded at build time (`traces/*.bin`, 2048 little-endian u16
//! counts each; `traces/regenerate.sh` rewrites them from seeded `glowsim synth` runs).

/// Pixels of every embedded frame (the demo bench instrument, `tests/data/instruments/bench-2048.toml`).
pub const PIXELS: usize = 2048;

/// Little-endian u16 counts → frame, at compile time.
const fn decode(bytes: &[u8; 2 * PIXELS]) -> [u16; PIXELS] {
    let mut out = [0u16; PIXELS];
    let mut i = 0;
    while i < PIXELS {
        out[i] = u16::from_le_bytes([bytes[2 * i], bytes[2 * i + 1]]);
        i += 1;
    }
    out
}

/// Hydrogen tube, `glowsim synth --nucleus H --seed 11`.
pub static H_TUBE: [u16; PIXELS] = decode(include_bytes!("../traces/h-tube.bin"));
/// Deuterium lamp, `glowsim synth --nucleus D --seed 12`.
pub static D_LAMP: [u16; PIXELS] = decode(include_bytes!("../traces/d-lamp.bin"));
/// Hydrogen tube with an air leak (N₂/N₂⁺ band heads), the demo trace `h-tube-0116`.
pub static AIR_LEAK: [u16; PIXELS] = decode(include_bytes!("../traces/air-leak.bin"));

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frames_are_lit_and_distinct() {
        for f in [&H_TUBE, &D_LAMP, &AIR_LEAK] {
            let max = f.iter().copied().max().unwrap_or(0);
            let min = f.iter().copied().min().unwrap_or(0);
            assert!(max > min + 1000, "a frame with lines: {min}..{max}");
        }
        assert_ne!(H_TUBE, D_LAMP);
        assert_ne!(H_TUBE, AIR_LEAK);
    }
}
