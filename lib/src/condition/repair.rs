//! Replacing hot and dead pixels by their neighbours so one broken pixel cannot pose as a line.

use super::flags::{REPAIRED, SATURATED};

/// How far (pixels) a repair looks for a good neighbour on each side.
pub const MAX_REPAIR_REACH: usize = 8;

/// Interpolates every pixel listed in `bad` linearly from the nearest unlisted pixels on each side.
///
/// All listed pixels are marked [`REPAIRED`] first, so a run of adjacent bad pixels is bridged from its
/// good ends. A repaired pixel next to a saturated source is marked [`SATURATED`] too. With no good
/// neighbour within [`MAX_REPAIR_REACH`] the value becomes 0 (still marked).
/// Loop bound: `bad.len()` × 2 × [`MAX_REPAIR_REACH`]. Indices past the frame are skipped (the config
/// check rejects them earlier).
pub(crate) fn repair_bad_pixels(bad: &[u16], values: &mut [i32], flags: &mut [u8]) -> u16 {
    let mut repaired: u16 = 0;
    for &b in bad {
        if let Some(f) = flags.get_mut(usize::from(b)) {
            *f = REPAIRED;
        }
    }
    for &b in bad {
        let i = usize::from(b);
        if i >= values.len() {
            continue;
        }
        let left = (1..=MAX_REPAIR_REACH).find_map(|d| good(i.checked_sub(d)?, values, flags, d));
        let right = (1..=MAX_REPAIR_REACH).find_map(|d| good(i.checked_add(d)?, values, flags, d));
        let (value, sat) = match (left, right) {
            (Some((vl, dl, sl)), Some((vr, dr, sr))) => {
                // Distance-weighted mean; distances are <= MAX_REPAIR_REACH so the sums fit i64.
                let (vl, vr, dl, dr) = (i64::from(vl), i64::from(vr), dl as i64, dr as i64);
                let num = vl * dr + vr * dl;
                let den = dl + dr;
                (div_round(num, den), sl || sr)
            }
            (Some((v, _, s)), None) | (None, Some((v, _, s))) => (v, s),
            (None, None) => (0, false),
        };
        if let Some(v) = values.get_mut(i) {
            *v = value;
        }
        if let Some(f) = flags.get_mut(i) {
            *f = if sat { REPAIRED | SATURATED } else { REPAIRED };
        }
        repaired = repaired.saturating_add(1);
    }
    repaired
}

fn good(j: usize, values: &[i32], flags: &[u8], d: usize) -> Option<(i32, usize, bool)> {
    let f = *flags.get(j)?;
    if f & REPAIRED != 0 {
        return None;
    }
    Some((*values.get(j)?, d, f & SATURATED != 0))
}

/// Rounds `num / den` half away from zero; `den` must be > 0 (callers pass small positive sums).
fn div_round(num: i64, den: i64) -> i32 {
    if den <= 0 {
        return 0;
    }
    let q = if num >= 0 {
        (num + den / 2) / den
    } else {
        -((-num + den / 2) / den)
    };
    q.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bridges_single_and_runs() {
        let mut v = [10, 9999, 30, 40, -500, -500, 70];
        let mut f = [0u8; 7];
        let n = repair_bad_pixels(&[1, 4, 5], &mut v, &mut f);
        assert_eq!(n, 3);
        assert_eq!(v, [10, 20, 30, 40, 50, 60, 70]);
        assert_eq!(f, [0, REPAIRED, 0, 0, REPAIRED, REPAIRED, 0]);
    }

    #[test]
    fn edges_copy_and_saturation_spreads() {
        let mut v = [0, 5, 6, 100];
        let mut f = [0, 0, 0, SATURATED];
        repair_bad_pixels(&[0, 2], &mut v, &mut f);
        assert_eq!(v, [5, 5, 53, 100]);
        assert_eq!(f[0], REPAIRED);
        assert_eq!(f[2], REPAIRED | SATURATED);
    }

    #[test]
    fn nothing_good_in_reach_gives_zero() {
        let mut v = [7i32; 3];
        let mut f = [0u8; 3];
        repair_bad_pixels(&[0, 1, 2, 9], &mut v, &mut f);
        assert_eq!(v, [0, 0, 0]);
        assert!(f.iter().all(|&x| x == REPAIRED));
    }
}
