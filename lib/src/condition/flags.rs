//! Per-pixel quality marks that travel with a conditioned frame into peak finding.
//!
//! One `u8` per pixel; the bits below may be combined. Peak finding reads them so that a peak touching a
//! saturated pixel is reported as saturated and repaired pixels carry no weight in the centroid fit.

/// The ADC reached full scale in the signal or the dark (in any co-added frame): the value is a lower bound.
pub const SATURATED: u8 = 0x01;
/// The pixel is in the bad-pixel map; its value was interpolated from neighbours.
pub const REPAIRED: u8 = 0x02;
/// The conditioned value did not fit an `i32` and was clamped.
pub const CLAMPED: u8 = 0x04;

/// Whether a flag byte says the value should not be trusted as a measurement.
pub const fn is_untrusted(flags: u8) -> bool {
    flags & (SATURATED | REPAIRED | CLAMPED) != 0
}

/// Whether any flag byte of a frame says its value should not be trusted: peak finding's clean-frame
/// paths ask once instead of testing each pixel. Or-ing four bytes a step keeps it a few instructions
/// a pixel on the M0. Loop bound: `flags.len()`.
pub(crate) fn any_untrusted(flags: &[u8]) -> bool {
    let mut quads = flags.chunks_exact(4);
    let mut bad = 0u8;
    for q in &mut quads {
        if let [a, b, c, d] = *q {
            bad |= a | b | c | d;
        }
    }
    for &f in quads.remainder() {
        bad |= f;
    }
    is_untrusted(bad)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn any_untrusted_sees_every_position() {
        for n in 0..11 {
            assert!(!any_untrusted(&[0u8; 10][..n]));
            for at in 0..n {
                for bit in [SATURATED, REPAIRED, CLAMPED] {
                    let mut f = [0u8; 10];
                    f[at] = bit;
                    assert!(any_untrusted(&f[..n]), "n {n} at {at} bit {bit}");
                }
            }
        }
        assert!(!any_untrusted(&[0x80u8; 9]));
    }

    #[test]
    fn bits_are_distinct_and_untrusted() {
        assert_eq!(SATURATED & REPAIRED, 0);
        assert_eq!(REPAIRED & CLAMPED, 0);
        assert_eq!(SATURATED & CLAMPED, 0);
        assert!(is_untrusted(SATURATED));
        assert!(is_untrusted(REPAIRED));
        assert!(is_untrusted(CLAMPED));
        assert!(!is_untrusted(0));
    }
}
