//! Continuum and stray-light removal by iterated clipped smoothing.
//!
//! A triangular moving average (two box passes, windows shrinking symmetrically at the frame edges) of
//! width well above the widest line follows a smooth
//! continuum such as a deuterium lamp's, and stray light, but a line pulls it up. Each round replaces the
//! pixels standing more than [`CLIP_SIGMA`] noise σ above the current baseline by the baseline itself and
//! smooths again, so lines drop out within a few rounds while the continuum stays.

use super::noise::NoiseModel;
use super::smooth::{
    box_narrow, box_narrow_in_place, box_symmetric, box_symmetric_in_place, narrow_limit,
};
use crate::condition::flags;

/// Clipping level above the baseline, in noise σ.
pub const CLIP_SIGMA: i64 = 2;
/// Clip-and-smooth rounds from a plain smoothing; each removes most of what a line still adds to the
/// baseline. Eight keep a 1000-σ line of the widest FWHM within σ/2 of the continuum (tested below;
/// six do not); the centroid bench and the check sweeps are unchanged from sixteen.
pub const ROUNDS: usize = 8;
/// Rounds when starting from an earlier baseline of the same frame (the second look of
/// [`find_peaks`](super::find_peaks), after a better noise estimate): the lines are already out.
pub const ROUNDS_WARM: usize = 4;

/// Writes the baseline of `frame` into `base`, using `tmp` as scratch (both the frame's length).
///
/// With `warm`, `base` already holds a baseline of this frame and only [`ROUNDS_WARM`] rounds run.
/// Untrusted pixels (saturated, repaired) are always replaced by the baseline after the first round.
/// `half` is the box half-width (px, ≤ 63). Loop bound: one O(N) range check, then ≤ [`ROUNDS`] × (one
/// clip pass + 2 box passes) + 2 box passes of O(N), N = `base.len()` (not capped here;
/// [`find_peaks`](super::find_peaks) keeps it ≤ MAX_PIXELS).
pub fn estimate_baseline(
    frame: &[i32],
    flag: &[u8],
    noise: &NoiseModel,
    half: usize,
    warm: bool,
    base: &mut [i32],
    tmp: &mut [i32],
) {
    let limit = narrow_limit(half);
    if frame.iter().all(|&v| i64::from(v).abs() <= limit) {
        // Every ADC frame of ≤ 16 bits (Q4) times a few hundred co-adds: `i32` box sums.
        let from = |src: &[i32], dst: &mut [i32]| box_narrow(half, src, dst);
        rounds(frame, flag, noise, warm, base, tmp, from, |b| {
            box_narrow_in_place(half, b)
        });
    } else {
        let from = |src: &[i32], dst: &mut [i32]| {
            box_symmetric(half, |j| i64::from(src.get(j).copied().unwrap_or(0)), dst)
        };
        rounds(frame, flag, noise, warm, base, tmp, from, |b| {
            box_symmetric_in_place(half, b)
        });
    }
}

/// The clip-and-smooth rounds with a triangle made of `from` (box of a row into another) and `in_place`
/// (box of a row onto itself): the narrow and the wide boxes give the same integers where both apply.
#[allow(clippy::too_many_arguments)]
fn rounds(
    frame: &[i32],
    flag: &[u8],
    noise: &NoiseModel,
    warm: bool,
    base: &mut [i32],
    tmp: &mut [i32],
    from: impl Fn(&[i32], &mut [i32]),
    in_place: impl Fn(&mut [i32]),
) {
    let rounds = if warm {
        ROUNDS_WARM
    } else {
        from(frame, base);
        in_place(base);
        ROUNDS
    };
    for _ in 0..rounds {
        // Clipped frame into tmp, one evaluation per pixel; then its triangle back into base.
        for (((t, &y), &b), &f) in tmp.iter_mut().zip(frame).zip(base.iter()).zip(flag) {
            let r = i64::from(y) - i64::from(b);
            // The variance only where the residual is positive (half the pixels of a flat stretch).
            let high = r > 0 && above_clip(r, noise.var_q8(i64::from(b)));
            *t = if flags::is_untrusted(f) || high { b } else { y };
        }
        from(tmp, base);
        in_place(base);
    }
}

/// Whether a residual `r` stands more than [`CLIP_SIGMA`] σ above the baseline (σ² = `var_q8` / 256):
/// `64·r² > var_q8`, in 32-bit arithmetic for the residuals of ADC frames, exactly
/// [`above_sigmas`](super::math::above_sigmas) otherwise.
#[inline(always)]
fn above_clip(r: i64, var_q8: i64) -> bool {
    match u32::try_from(r) {
        Ok(0) | Err(_) if r <= 0 => false,
        Ok(r32) if r32 < 1 << 12 => i64::from((r32 * r32) << 6) > var_q8,
        // ≥ 2^30 on the left; r < 2^29 keeps 64·r² below 2^64.
        Ok(r32) if r32 < 1 << 29 => {
            (super::math::mul_u32_wide(r32, r32) << 6) > var_q8.max(0).unsigned_abs()
        }
        _ => super::math::above_sigmas(r, CLIP_SIGMA << 8, var_q8),
    }
}

// The narrow clip test is written for 2 σ.
const _: () = assert!(CLIP_SIGMA == 2);

#[cfg(test)]
mod tests {
    use super::super::testkit::{pixel_gauss, Rng};
    use super::*;
    use crate::condition::flags;

    fn model(sd: i64) -> NoiseModel {
        NoiseModel {
            floor_var_q8: sd * sd * 256,
            zero_light_level: 0,
            shot_var_per_unit_q16: 0,
            shot_from_data: false,
        }
    }

    #[test]
    fn clip_test_is_exact() {
        for r in [
            -5i64,
            0,
            1,
            2,
            100,
            4095,
            4096,
            70_000,
            (1 << 29) - 1,
            1 << 29,
            1 << 31,
            1 << 40,
        ] {
            for var in [
                0i64,
                1,
                64,
                6_400,
                1 << 30,
                (1 << 30) + 1,
                1 << 40,
                i64::MAX,
            ] {
                let want = super::super::math::above_sigmas(r, CLIP_SIGMA << 8, var);
                assert_eq!(above_clip(r, var), want, "r {r} var {var}");
            }
        }
    }

    /// The narrow path gives the wide path's integers.
    #[test]
    fn narrow_and_wide_paths_agree() {
        let mut rng = Rng::new(9);
        let n = 900;
        for (sd, kappa) in [(3i64, 0u32), (40, 1 << 16), (200, 5 << 16)] {
            let frame: Vec<i32> = (0..n as i64)
                .map(|i| {
                    (3000
                        + 2 * i
                        + pixel_gauss(i, 40_000, 300 << 16, 150_000)
                        + pixel_gauss(i, 9_000, 610 << 16, 90_000)
                        + rng.gauss(sd << 16)) as i32
                })
                .collect();
            let mut fl = vec![0u8; n];
            fl[450] = flags::SATURATED;
            let nm = NoiseModel {
                floor_var_q8: sd * sd * 256,
                zero_light_level: 100,
                shot_var_per_unit_q16: kappa,
                shot_from_data: false,
            };
            for warm in [false, true] {
                let (mut b1, mut t1) = (vec![0i32; n], vec![0i32; n]);
                let (mut b2, mut t2) = (vec![0i32; n], vec![0i32; n]);
                if warm {
                    b1.fill(3500);
                    b2.fill(3500);
                }
                let narrow = |src: &[i32], dst: &mut [i32]| box_narrow(20, src, dst);
                rounds(&frame, &fl, &nm, warm, &mut b1, &mut t1, narrow, |b| {
                    box_narrow_in_place(20, b)
                });
                let wide = |src: &[i32], dst: &mut [i32]| {
                    box_symmetric(20, |j| i64::from(src.get(j).copied().unwrap_or(0)), dst)
                };
                rounds(&frame, &fl, &nm, warm, &mut b2, &mut t2, wide, |b| {
                    box_symmetric_in_place(20, b)
                });
                assert_eq!(b1, b2, "sd {sd} warm {warm}");
            }
        }
    }

    #[test]
    fn strong_line_drops_out_of_the_baseline() {
        let n = 512;
        let mut rng = Rng::new(3);
        // Sloped continuum + a line of 1000 σ, FWHM ≈ 8 px (σ = 3.4 px).
        let frame: Vec<i32> = (0..n as i64)
            .map(|i| {
                (5000 + 4 * i + pixel_gauss(i, 10_000, 256 << 16, 223_000) + rng.gauss(10 << 16))
                    as i32
            })
            .collect();
        let fl = vec![0u8; n];
        let mut base = vec![0i32; n];
        let mut tmp = vec![0i32; n];
        estimate_baseline(&frame, &fl, &model(10), 24, false, &mut base, &mut tmp);
        for i in [100usize, 240, 256, 270, 400] {
            let truth = 5000 + 4 * i as i32;
            let err = base[i] - truth;
            assert!(err.abs() <= 5, "px {i}: baseline off by {err} (σ = 10)");
        }
    }

    #[test]
    fn follows_a_curved_continuum() {
        let n = 1024;
        // A broad hump 20000 high, 300 px wide (σ), like a lamp continuum.
        let frame: Vec<i32> = (0..n as i64)
            .map(|i| pixel_gauss(i, 20_000, 512 << 16, 300 << 16) as i32)
            .collect();
        let fl = vec![0u8; n];
        let mut base = vec![0i32; n];
        let mut tmp = vec![0i32; n];
        estimate_baseline(&frame, &fl, &model(100), 24, false, &mut base, &mut tmp);
        for i in (0..n).step_by(37) {
            let err = base[i] - frame[i];
            // Curvature bias of the triangle (variance 400 px²): 20000/300² · 400 / 2 ≈ 44 at the top.
            assert!(err.abs() <= 50, "px {i}: off by {err}");
        }
    }
}
