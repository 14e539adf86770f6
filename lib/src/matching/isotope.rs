//! How much of the hydrogen light comes from each isotope.
//!
//! H, D and T lines differ by almost a pure scale factor (2.7 × 10⁻⁴ from H to D), which a wrong
//! dispersion mimics exactly. Two ways out, and an honest "not determinable" when neither applies:
//! - **Profile**: when the pair is resolved or partly resolved (separation ≳ ½ FWHM), fit two copies of
//!   the instrument line shape with the known separation to the frame: the share is B / (A + B), whatever
//!   the absolute scale. A common shift of both is searched, so this works on a self-calibrated map too.
//! - **Position**: when unresolved, the blend centre moves linearly with the share. This needs a map
//!   that does not come from the tube itself and is precise well below the shift; its stated
//!   uncertainty enters as a systematic term common to all lines.
use crate::calibrate::{mul_div_round, Divisor};
use crate::find::math::{mul_i32_wide, Recip};
use crate::fixed::{isqrt_u128, mul_div_i128};

/// Largest share uncertainty (ppm) still reported as a determination: 15 percentage points.
pub const MAX_SHARE_SIGMA_PPM: u32 = 150_000;

/// A share estimate of nucleus b against nucleus a of one element.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ShareEstimate {
    /// Share of b in the pair's photons, ppm; may stray slightly outside 0 … 10⁶ with noise.
    pub share_b_ppm: i32,
    /// Its 1-σ uncertainty, ppm.
    pub sigma_ppm: u32,
}

/// One unresolved blend seen by the position method.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct BlendReading {
    /// Measured blend wavelength, femtometres.
    pub measured_fm: i64,
    /// Its random uncertainty (centroid and fit), femtometres.
    pub sigma_fm: u64,
    /// Wavelength of the line of nucleus a, femtometres.
    pub a_fm: i64,
    /// Wavelength of the line of nucleus b, femtometres.
    pub b_fm: i64,
}

/// Share from blend positions; `systematic_fm` is the map's own uncertainty, common to every line.
/// `None` when no reading has a usable shift.
///
/// Work: one pass over the readings. The rounded quotients are `mul_div_round`'s: the same as
/// `mul_div_i128`, through one 64-bit division where the operands allow (they do for any real
/// blend), not the 128-bit long division.
pub fn share_by_position(readings: &[BlendReading], systematic_fm: u64) -> Option<ShareEstimate> {
    let mut sum_w: i128 = 0;
    let mut sum_wx: i128 = 0;
    let mut sum_w_delta: i128 = 0;
    for r in readings {
        let delta = (r.b_fm - r.a_fm) as i128;
        if delta == 0 {
            continue;
        }
        let x_ppm = mul_div_round((r.measured_fm - r.a_fm) as i128, 1_000_000, delta)?;
        let s_ppm = mul_div_round(r.sigma_fm.max(1) as i128, 1_000_000, delta.abs())?.max(1);
        let w = mul_div_round(1_000_000_000_000_000_000, 1, s_ppm * s_ppm)?.max(1);
        sum_w += w;
        sum_wx += w * x_ppm;
        sum_w_delta += w * delta.abs();
    }
    if sum_w == 0 {
        return None;
    }
    let share = sum_wx.checked_div(sum_w)?;
    let var_stat = mul_div_round(1_000_000_000_000_000_000, 1, sum_w)?;
    let mean_delta = sum_w_delta.checked_div(sum_w)?.max(1);
    let sys_ppm = mul_div_round(systematic_fm as i128, 1_000_000, mean_delta)?;
    let var = var_stat + sys_ppm * sys_ppm;
    Some(ShareEstimate {
        share_b_ppm: share.clamp(i32::MIN as i128, i32::MAX as i128) as i32,
        sigma_ppm: isqrt_u128(var.max(0) as u128).min(u32::MAX as u128) as u32,
    })
}

/// The frame around a pair and the line shape to fit it with.
pub struct PairWindow<'a> {
    /// Frame values (frame units).
    pub frame: &'a [i32],
    /// Baseline under them (same units and length).
    pub base: &'a [i32],
    /// Expected centre of the a line (px, Q16).
    pub a_px_q16: i32,
    /// Expected centre of the b line (px, Q16).
    pub b_px_q16: i32,
    /// Gaussian σ of the instrument line shape (px, Q16).
    pub sigma_px_q16: i32,
    /// Common shift searched, ± this (px, Q16); steps of 1/16 px, at most ± 4 px.
    pub shift_range_px_q16: i32,
}

/// Share from a two-Gaussian fit with fixed separation. `None` when the frame does not constrain it
/// (no signal, singular fit).
///
/// Work: ≤ 129 + 3 × 11 + 257 = 419 pair steps and ≤ 214 + 5 × 11 = 269 single-line steps, each
/// over ≤ 64 px, then one 3 × 3 Fisher pass. On the 1/16- and 1/32-px grids the line shapes come
/// from ≤ 16 + 32 row pairs and ≤ 16 rows of ≤ 40 values (one row per phase of a grid, moved by
/// whole pixels); elsewhere a pixel costs ≤ 2 pixel-averaged Gaussians of 3 exponentials.
pub fn share_by_profile(w: &PairWindow<'_>) -> Option<ShareEstimate> {
    let sigma = w.sigma_px_q16.max(1 << 12) as i64;
    let lo_c = w.a_px_q16.min(w.b_px_q16) as i64;
    let hi_c = w.a_px_q16.max(w.b_px_q16) as i64;
    // The window also covers the mirrored pair (b reflected about a) of the line-shape test below.
    let mirror_c = 2 * w.a_px_q16 as i64 - w.b_px_q16 as i64;
    let (win_lo, win_hi) = (lo_c.min(mirror_c), hi_c.max(mirror_c));
    let reach = 3 * sigma + w.shift_range_px_q16.unsigned_abs() as i64;
    let n = w.frame.len().min(w.base.len()) as i64;
    let top = n.saturating_sub(1).max(0);
    let first = ((win_lo - reach) >> 16).max(0).min(top);
    let last = ((win_hi + reach + 65_535) >> 16)
        .max(0)
        .min(top)
        .min(first + 63);
    if last - first < 4 {
        return None;
    }
    let range = (w.shift_range_px_q16 as i64).clamp(0, 4 << 16);
    // Σ r² is the same for every shift, width and the mirrored pair (same frame and window).
    let srr = rr_sum(w, first, last)?;
    let (chi2, s, shift, shape) = best_pair(w, first, last, sigma, range, srr)?;
    let (a, b) = s.amplitudes_q8()?;
    let n = last - first + 1;
    let total = a + b;
    if total <= 0 || n <= 3 {
        return None;
    }
    let s2 = (chi2.max(0) / (n as i128 - 3)).max(1);
    // A searched shift as wide as the separation lets one line of either isotope sit anywhere
    // the pair could: then only a second line in the frame tells a mix. If one free line fits nearly as
    // well as the pair (Δχ² < 25 s², a 5 σ test for the second line), the frame shows a single line of
    // unknown isotope.
    let sep = (hi_c - lo_c).max(1);
    if 4 * range >= 3 * sep {
        let single = best_lone_line(w, first, last, (lo_c, hi_c), range, &shape, srr)?;
        if single.is_some_and(|x| x.saturating_sub(chi2) < 25 * s2) {
            return None;
        }
    }
    // A companion on the wrong side — the minor line reflected about the major one — fitting about as
    // well (Δχ² < 25 s²) means the fit used the companion for line-shape mismatch (wings, width), not
    // for a second isotope. Position-free, that leaves one line of unknown isotope.
    let best_mirror = best_mirrored(w, a.abs() >= b.abs(), first, last, range, &shape, srr)?;
    let companion_is_shape = best_mirror.is_some_and(|m| m.saturating_sub(chi2) < 25 * s2);
    if companion_is_shape && 4 * range >= 3 * sep {
        return None;
    }
    share_of_fit(w, first, last, shift, &shape, (a, b), range > 0, s2)
}

/// The pair fit's least χ² over shift and width: its sums, shift (px, Q16) and line shape. Out of
/// line, like the two tests after it, so the caller's frame and theirs do not stack.
#[inline(never)]
fn best_pair(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    sigma: i64,
    range: i64,
    srr: i128,
) -> Option<(i128, Sums, i64, LineShape)> {
    let steps = 2 * range / 4096;
    let mut best: Option<(i128, Sums, i64)> = None;
    // One line shape per width searched (each takes two reciprocals).
    let widths = [sigma * 23 / 25, sigma, sigma * 27 / 25].map(LineShape::new);
    let [_, shape, _] = widths;
    // Visited phase by phase (see [`scan_pairs`]): the first least χ² in ascending shift order is
    // the least (χ², shift).
    scan_pairs(
        w,
        first,
        last,
        &shape,
        srr,
        -range,
        4096,
        steps,
        |shift, sums| {
            let chi = sums.chi2();
            if best
                .as_ref()
                .is_none_or(|(c, _, at)| chi < *c || (chi == *c && shift < *at))
            {
                best = Some((chi, *sums, shift));
            }
        },
    )?;
    // Refine the shift on a 1/256-px grid around the best coarse step: an off-grid shift would
    // otherwise leak into the share (share × separation mimics a shift).
    // The width is refined too (±8 %): a width off by a few per cent biases the share far more than
    // the noise does.
    let (_, _, coarse) = best?;
    let mut shape_best = shape;
    for shape in widths {
        let fine = if range > 0 { 16i64 } else { 0 };
        let (chi, sums, s) = least_near(fine, |s| {
            let sums = sums_at(w, first, last, coarse + s * 256, &shape, srr)?;
            Some((sums.chi2(), sums))
        })?;
        if best.as_ref().is_none_or(|(c, _, _)| chi < *c) {
            best = Some((chi, sums, coarse + s * 256));
            shape_best = shape;
        }
    }
    let (chi2, sums, shift) = best?;
    Some((chi2, sums, shift, shape_best))
}

/// Least χ² of one free line of either isotope anywhere the pair `lo_c ..= hi_c` (px, Q16) could sit
/// over the shift `range`, with its own width freedom (±16 % of `shape`'s σ: a line slightly wider
/// than configured must not pass for a pair).
#[inline(never)]
fn best_lone_line(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    (lo_c, hi_c): (i64, i64),
    range: i64,
    shape: &LineShape,
    srr: i128,
) -> Option<Option<i128>> {
    let mut single: Option<(i128, i64)> = None;
    let (c0, c1) = (lo_c - range, hi_c + range);
    let count = (c1 - c0).max(0) / 4096;
    scan_singles(w, first, last, shape, srr, c0, 4096, count, |c, chi| {
        if single.is_none_or(|(x, at)| chi < x || (chi == x && c < at)) {
            single = Some((chi, c));
        }
    })?;
    if let Some((_, at)) = single {
        let sigma = shape.sigma_q16;
        for sg in [
            sigma * 21 / 25,
            sigma * 23 / 25,
            sigma,
            sigma * 27 / 25,
            sigma * 29 / 25,
        ] {
            let shape = LineShape::new(sg);
            let (chi, (), st) = least_near(16, |st| {
                Some((single_chi2(w, first, last, at + st * 256, &shape, srr)?, ()))
            })?;
            if single.is_none_or(|(x, _)| chi < x) {
                single = Some((chi, at + st * 256));
            }
        }
    }
    Some(single.map(|(x, _)| x))
}

/// Least χ² over the shift `range` of the pair with its minor line reflected about the major one
/// (`a_major`: a is the major line), on the 1/32-px grid from −range on (the coarse steps ± 1/32 px).
#[inline(never)]
fn best_mirrored(
    w: &PairWindow<'_>,
    a_major: bool,
    first: i64,
    last: i64,
    range: i64,
    shape: &LineShape,
    srr: i128,
) -> Option<Option<i128>> {
    let mirror = if a_major {
        PairWindow {
            b_px_q16: 2 * w.a_px_q16 - w.b_px_q16,
            ..*w
        }
    } else {
        PairWindow {
            a_px_q16: 2 * w.b_px_q16 - w.a_px_q16,
            ..*w
        }
    };
    let mut best_mirror: Option<i128> = None;
    scan_pairs(
        &mirror,
        first,
        last,
        shape,
        srr,
        -range,
        2048,
        2 * range / 2048,
        |_, sums| {
            let c = sums.chi2();
            best_mirror = Some(best_mirror.map_or(c, |m: i128| m.min(c)));
        },
    )?;
    Some(best_mirror)
}

/// The share and its σ of the best pair fit (amplitudes `a`, `b` in Q8, residual variance `s2`).
/// Out of line: its 128-bit covariance work keeps a large frame, which the searches above (and
/// their division chains) then do not stack on.
#[inline(never)]
#[allow(clippy::too_many_arguments)]
fn share_of_fit(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    shift: i64,
    shape: &LineShape,
    (a, b): (i128, i128),
    with_shift: bool,
    s2: i128,
) -> Option<ShareEstimate> {
    let total = a + b;
    // The shift is a third parameter when it is searched: its freedom is what makes an unresolved
    // pair undeterminable, so the covariance comes from the full 3 × 3 Fisher matrix.
    let f = fisher_at(w, first, last, shift, shape, a >> 8, b >> 8, with_shift)?;
    // Variances in Q16 (the square of the amplitudes' Q8).
    let (var_a, var_b, cov_ab) = amplitude_covariance(&f, s2 << 16)?;
    let share = mul_div_i128(b, 1_000_000, total)?;
    // var(B/T) = (B² VarA + A² VarB − 2AB Cov) / T⁴; with x = 10⁶ B/T, y = 10⁶ A/T it is
    // (x² VarA + y² VarB − 2xy Cov) / T² in ppm², each term through a wide product.
    let x = share.clamp(-10_000_000, 10_000_000);
    let y = mul_div_i128(a, 1_000_000, total)?.clamp(-10_000_000, 10_000_000);
    let t2 = total.checked_mul(total)?;
    let var_ppm = mul_div_i128(x * x, var_a, t2)?
        .saturating_add(mul_div_i128(y * y, var_b, t2)?)
        .saturating_sub(mul_div_i128(2 * x * y, cov_ab, t2)?);
    let sigma_ppm = isqrt_u128(var_ppm.max(0) as u128).min(u32::MAX as u128) as u32;
    Some(ShareEstimate {
        share_b_ppm: share.clamp(i32::MIN as i128, i32::MAX as i128) as i32,
        sigma_ppm,
    })
}

/// JᵀJ for the model A·g_a + B·g_b shifted by δ, columns g_a, g_b (Q15) and ∂/∂δ (frame units/px,
/// Q15); with `with_shift` false the third column is left out (identity row).
#[allow(clippy::too_many_arguments)]
fn fisher_at(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    shift: i64,
    shape: &LineShape,
    a: i128,
    b: i128,
    with_shift: bool,
) -> Option<[[i128; 3]; 3]> {
    let mut f = [[0i128; 3]; 3];
    let (ca, cb) = (w.a_px_q16 as i64 + shift, w.b_px_q16 as i64 + shift);
    // Pixels where both shapes are 0 add nothing (every column is 0 there).
    let (lo, hi) = shape.support(first, last, ca.min(cb), ca.max(cb));
    for i in lo..=hi {
        let p = i << 16;
        let (ga64, gb64) = (shape.g(p, ca), shape.g(p, cb));
        let (ga, gb) = (i128::from(ga64), i128::from(gb64));
        // ∂g/∂c = g (p − c) / σ² (per px): Q15 × Q16 / Q32 × 2^16 keeps Q15 (|g·(p − c)| < 2^38).
        let da = i128::from(shape.per_s2(ga64 * (p - ca).clamp(-(1 << 22), 1 << 22)));
        let db = i128::from(shape.per_s2(gb64 * (p - cb).clamp(-(1 << 22), 1 << 22)));
        let m = if with_shift { a * da + b * db } else { 0 };
        let col = [ga, gb, m];
        for (r, row) in f.iter_mut().enumerate() {
            for (c, cell) in row.iter_mut().enumerate() {
                *cell = cell.checked_add(col[r].checked_mul(col[c])?)?;
            }
        }
    }
    if !with_shift {
        f[2][2] = 1;
    }
    let _ = w.frame.get(last as usize)?;
    Some(f)
}

/// (Var A, Var B, Cov AB) = s² (JᵀJ)⁻¹ restricted to the amplitudes, through the correlation form
/// (columns scaled to unit norm, Q40) so that a nearly singular matrix keeps enough digits: an
/// unresolved pair has a determinant near 10⁻⁸ and must not come out larger than it is.
fn amplitude_covariance(f: &[[i128; 3]; 3], s2: i128) -> Option<(i128, i128, i128)> {
    const ONE: i128 = 1 << 40;
    let d: [i128; 3] = [
        isqrt_u128(f[0][0].max(1) as u128) as i128,
        isqrt_u128(f[1][1].max(1) as u128) as i128,
        isqrt_u128(f[2][2].max(1) as u128) as i128,
    ];
    let mut c = [[0i128; 3]; 3];
    for (r, row) in c.iter_mut().enumerate() {
        for (k, cell) in row.iter_mut().enumerate() {
            *cell = mul_div_i128(f[r][k], ONE, d[r].max(1) * d[k].max(1))?;
        }
    }
    let q = |x: i128, y: i128| mul_div_i128(x, y, ONE);
    let cof = |r0: usize, r1: usize, c0: usize, c1: usize| -> Option<i128> {
        Some(q(c[r0][c0], c[r1][c1])? - q(c[r0][c1], c[r1][c0])?)
    };
    let adj00 = cof(1, 2, 1, 2)?;
    let adj11 = cof(0, 2, 0, 2)?;
    let adj01 = -(q(c[0][1], c[2][2])? - q(c[0][2], c[2][1])?);
    let det = q(c[0][0], adj00)? - q(c[0][1], cof(1, 2, 0, 2)?)? + q(c[0][2], cof(1, 2, 0, 1)?)?;
    // Below 2^-30 the pair is degenerate at this precision.
    if det <= ONE >> 30 {
        return None;
    }
    // (C⁻¹)_ij in Q40, then (F⁻¹)_ij = (C⁻¹)_ij / (d_i d_j).
    let inv = |adj: i128| mul_div_i128(adj, ONE, det);
    let var_a = mul_div_i128(s2, inv(adj00)?, d[0] * d[0] * (ONE >> 30))?;
    let var_b = mul_div_i128(s2, inv(adj11)?, d[1] * d[1] * (ONE >> 30))?;
    let cov_ab = mul_div_i128(s2, inv(adj01)?, d[0] * d[1] * (ONE >> 30))?;
    Some((var_a, var_b, cov_ab))
}

/// Residual sum of squares of the best single line of `shape` centred at `c_q16`; `srr` =
/// [`rr_sum`] of the same window.
fn single_chi2(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    c_q16: i64,
    shape: &LineShape,
    srr: i128,
) -> Option<i128> {
    // Pixels where the shape is 0 add nothing to Σg² and Σrg.
    let (lo, hi) = shape.support(first, last, c_q16, c_q16);
    single_from(w, lo, hi, srr, |i| shape.g(i << 16, c_q16))
}

/// [`single_chi2`] over the pixels `lo ..= hi` with the shape's value at pixel `i` from `g`.
fn single_from(
    w: &PairWindow<'_>,
    lo: i64,
    hi: i64,
    srr: i128,
    g: impl Fn(i64) -> i64,
) -> Option<i128> {
    // As in [`sums_from`]: g² ≤ 2^30 and |r·g| < 2^47 a pixel, so i64 sums are exact.
    let (mut sgg, mut srg) = (0i64, 0i64);
    for i in lo..=hi {
        let r = i64::from(*w.frame.get(i as usize)?) - i64::from(*w.base.get(i as usize)?);
        let g = g(i);
        sgg += g * g;
        srg += r * g;
    }
    let (sgg, srg) = (i128::from(sgg), i128::from(srg));
    if sgg == 0 {
        return Some(srr);
    }
    // Σg² < 2^36 (≤ 64 px of a Q15 shape): its reciprocal gives the long division's quotient.
    let fitted = match Divisor::new(sgg) {
        Some(d) => d.mul_div_round(srg, srg)?,
        None => mul_div_i128(srg, srg, sgg)?,
    };
    Some(srr - fitted)
}

/// Sums of the linear 2 × 2 problem at one shift. g in Q15, r in frame units.
#[derive(Clone, Copy)]
struct Sums {
    saa: i128,
    sab: i128,
    sbb: i128,
    sra: i128,
    srb: i128,
    srr: i128,
}

/// A unit-height Gaussian as a pixel sees it: the mean over the pixel (Simpson's rule on its two
/// edges and centre), Q15. Sampling the centre alone misdraws lines of 2–3 px FWHM enough for a pair
/// fit to invent a few-per-cent companion.
#[cfg(test)]
fn gauss_q15(p_q16: i64, c_q16: i64, sigma_q16: i64) -> i64 {
    LineShape::new(sigma_q16).g(p_q16, c_q16)
}

/// `x / 6` for 0 ≤ x ≤ 6 · 2^15 (Simpson's weights of three Q15 values) as a 32-bit multiply:
/// ⌊x / 6⌋ = ⌊⌊x / 2⌋ / 3⌋, and ⌊y / 3⌋ = (y · 43 691) >> 17 for y < 2^17 (43 691 · 3 = 2^17 + 1),
/// the product below 2^32 up to y = 98 303 (the one larger y, 98 304 = 3 · 2^15, is taken as it
/// is). Exact over that range (tested), where a division is a ~170-instruction library call and
/// a 64-bit product a ~40-instruction one on the Cortex-M0.
fn sixth(x: i64) -> i64 {
    if (0..=6 << 15).contains(&x) {
        let y = (x >> 1) as u32;
        if y == 3 << 15 {
            return 1 << 15;
        }
        i64::from(y.wrapping_mul(43_691) >> 17)
    } else {
        x / 6
    }
}

/// e^(−x) in Q15 for `x` ≥ 0 in Q16, through 2^(−y): the 65-step table of the fit's exponential
/// ([`crate::find::fit::EXP2_Q15`]) with straight-line interpolation; within ~3·10⁻⁵ relative (the
/// Q15 step of the result), like the exact exponential rounded to Q15 that it replaces, at a tenth of
/// its instructions. Beyond x = 11 (e^-11 < 2^-15) it is 0.
fn exp_neg_q16_q15(x_q16: i64) -> i64 {
    if x_q16 >= 11 << 16 {
        return 0;
    }
    let x = x_q16.max(0) as u32; // < 2^20
                                 // y = x · log2(e) in Q16 (94 548 = log2(e) · 2^16): < 2^37, a 32 × 32 → 64-bit product.
    let y = crate::find::math::mul_u32_wide(x, 94_548) >> 16;
    let k = (y >> 16) as u32;
    let f = (y & 0xffff) as usize;
    let (i, rem) = (f >> 10, (f & 1023) as i64);
    let t0 = i64::from(crate::find::fit::EXP2_Q15.get(i).copied().unwrap_or(0));
    let t1 = i64::from(crate::find::fit::EXP2_Q15.get(i + 1).copied().unwrap_or(0));
    // 0 ≤ t0 − t1 ≤ 2^15 and rem < 2^10: the product fits i32 (a single multiply instruction).
    let v = t0 - i64::from((((t0 - t1) as i32) * (rem as i32) + 512) >> 10);
    if k >= 16 {
        0
    } else {
        (v + ((1 << k) >> 1)) >> k
    }
}

/// The line shape of one width, with 1/σ taken once: a pixel costs one split 32-bit product for
/// u = (p − c)/σ (the half-pixel Simpson points are u ∓ ½/σ), three squares and three table
/// exponentials — no division (a 64-bit one is ~730 instructions on the Cortex-M0). 1/σ² for the
/// slope factor is a [`Recip`] taken once as well.
#[derive(Clone, Copy)]
struct LineShape {
    /// The σ it was made for (px, Q16), as given: the lone-line test widens it.
    sigma_q16: i64,
    /// 1/σ in Q14 (σ ≥ 2^12 Q16 px, so ≤ 2^18).
    inv_s_q14: i64,
    inv_s2: Recip,
    /// From this distance on (px, Q16) the shape is exactly 0 (see [`reach_q16`]).
    reach_q16: i64,
}

/// Smallest |v| (u in Q14) at which [`LineShape::g`]'s exponential is 0: (|v|/2)² / 2^11 reaches
/// 11 · 2^16 from 38 424 = ⌈√(11 · 2^27)⌉ on (checked in the tests).
const ZERO_FROM_U_Q14: i64 = 2 * 38_424;
// The first half-u whose exponent reaches 11, and the one before does not.
const _: () = {
    let h = ZERO_FROM_U_Q14 / 2;
    assert!((h * h) >> 11 >= 11 << 16 && ((h - 1) * (h - 1)) >> 11 < 11 << 16);
};

/// Distance (px, Q16) from the centre beyond which the shape with 1/σ = `inv_s_q14` is 0: all three
/// Simpson points need |u ∓ ½/σ| ≥ [`ZERO_FROM_U_Q14`], i.e. |u| ≥ that + ½/σ, and u = ⌊d · inv /
/// 2^16⌋ gets there from |d| ≥ ⌈(that + ½/σ) · 2^16 / inv⌉ (for d < 0 the floor only adds to |u|; the
/// clamp of u at ±16 lies beyond it). One division per shape.
fn reach_q16(inv_s_q14: i64) -> i64 {
    let inv = inv_s_q14.max(1);
    let need = ZERO_FROM_U_Q14 + (inv >> 1);
    ((need << 16) + inv - 1) / inv
}

impl LineShape {
    fn new(sigma_q16: i64) -> Self {
        let s = sigma_q16.clamp(1 << 12, 1 << 40);
        let inv = Recip::new(s).and_then(|r| r.scale(1, 30)).unwrap_or(1);
        let s2 = s.saturating_mul(s).clamp(1, (1 << 62) - 1);
        let inv_s_q14 = inv.clamp(1, 1 << 18);
        Self {
            sigma_q16,
            inv_s_q14,
            inv_s2: Recip::new(s2).unwrap_or(Recip::ONE),
            reach_q16: reach_q16(inv_s_q14),
        }
    }

    /// The pixels of `first ..= last` where a shape centred anywhere in `c_lo ..= c_hi` (px, Q16)
    /// may be non-zero (a pixel or so more, never fewer); empty (lo > hi) when there are none.
    fn support(&self, first: i64, last: i64, c_lo: i64, c_hi: i64) -> (i64, i64) {
        let lo = (c_lo.saturating_sub(self.reach_q16) >> 16).max(first);
        let hi = ((c_hi.saturating_add(self.reach_q16) >> 16) + 1).min(last);
        (lo, hi)
    }

    /// [`gauss_q15`]: the pixel-averaged unit Gaussian at pixel position `p_q16` for centre `c_q16`.
    fn g(&self, p_q16: i64, c_q16: i64) -> i64 {
        // u = d/σ in Q14, clamped to ±16 (far beyond e^-11, where the exponential is 0).
        const LIMIT: i64 = 16 << 14;
        let d = (p_q16 - c_q16).clamp(-(1 << 30), 1 << 30);
        // |d| ≤ 2^30 and 1/σ ≤ 2^18 fit i32: the split product, not a 64-bit library multiply.
        let prod = match i32::try_from(self.inv_s_q14) {
            Ok(inv) => mul_i32_wide(d as i32, inv),
            Err(_) => d.saturating_mul(self.inv_s_q14),
        };
        let u = (prod >> 16).clamp(-LIMIT, LIMIT);
        let half = self.inv_s_q14 >> 1; // ½ px in u
        let at = |u: i64| {
            // u²/2 in Q16: (u/2)² >> 11. From h = 38 424 on the exponent is ≥ 11, where the
            // exponential is 0 (see ZERO_FROM_U_Q14); below it h² < 2^31, a 32-bit product.
            let h = u.abs() >> 1;
            if h >= ZERO_FROM_U_Q14 >> 1 {
                return 0;
            }
            let h = h as u32;
            exp_neg_q16_q15(i64::from(h.wrapping_mul(h) >> 11))
        };
        sixth(at(u - half) + 4 * at(u) + at(u + half))
    }

    /// `v · 2^16 / σ²` (the Gaussian's slope factor), for |v| < 2^46.
    fn per_s2(&self, v: i64) -> i64 {
        self.inv_s2.scale(v, 16).unwrap_or(0)
    }
}

/// The pair sums at one shift and width; `srr` = [`rr_sum`] of the same window (taken once).
fn sums_at(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    shift: i64,
    shape: &LineShape,
    srr: i128,
) -> Option<Sums> {
    let (ca, cb) = (w.a_px_q16 as i64 + shift, w.b_px_q16 as i64 + shift);
    // Pixels where both shapes are 0 add nothing to any sum (Σr² is taken over the whole window).
    let (lo, hi) = shape.support(first, last, ca.min(cb), ca.max(cb));
    sums_over(w, lo, hi, ca, cb, shape, srr)
}

/// [`sums_at`] over the pixels `lo ..= hi` for centres `ca`, `cb` (px, Q16).
fn sums_over(
    w: &PairWindow<'_>,
    lo: i64,
    hi: i64,
    ca: i64,
    cb: i64,
    shape: &LineShape,
    srr: i128,
) -> Option<Sums> {
    sums_from(w, lo, hi, srr, |i| {
        (shape.g(i << 16, ca), shape.g(i << 16, cb))
    })
}

/// [`sums_over`] with the two shapes' values at pixel `i` from `g`.
fn sums_from(
    w: &PairWindow<'_>,
    lo: i64,
    hi: i64,
    srr: i128,
    g: impl Fn(i64) -> (i64, i64),
) -> Option<Sums> {
    // Per pixel g² ≤ 2^30 and |r·g| < 2^47 (r is a difference of two i32): the sums of any window
    // under 2^16 px fit i64, the same integers as i128 sums, and half the M0 instructions.
    let (mut saa, mut sab, mut sbb, mut sra, mut srb) = (0i64, 0i64, 0i64, 0i64, 0i64);
    for i in lo..=hi {
        let r = i64::from(*w.frame.get(i as usize)?) - i64::from(*w.base.get(i as usize)?);
        // g ≤ 2^15 (so g·g < 2^31): the residual's products are 32 × 32-bit where r fits 32 bits
        // (all ADC frames).
        let (ga, gb) = g(i);
        let (ga, gb) = (ga as i32, gb as i32);
        saa += i64::from(ga * ga);
        sab += i64::from(ga * gb);
        sbb += i64::from(gb * gb);
        let (ra, rb) = match i32::try_from(r) {
            Ok(r32) => (mul_i32_wide(r32, ga), mul_i32_wide(r32, gb)),
            Err(_) => (r * i64::from(ga), r * i64::from(gb)),
        };
        sra += ra;
        srb += rb;
    }
    Some(Sums {
        saa: saa.into(),
        sab: sab.into(),
        sbb: sbb.into(),
        sra: sra.into(),
        srb: srb.into(),
        srr,
    })
}

/// The least `f(s)` over s = −`reach` ..= `reach` (a power of two, or 0) with its value and s,
/// by halving steps: from the best so far, try ± `reach`, then ± `reach`/2, …, ± 1. Where f falls
/// and then rises over the range (χ² of a shift or width within 1/16 px of a coarse minimum) that is
/// the least of all 2·reach + 1 values (tested against the full scan), from 2·log2(reach) + 3
/// evaluations instead of 2·reach + 1; ties keep the first found.
fn least_near<T>(
    reach: i64,
    mut f: impl FnMut(i64) -> Option<(i128, T)>,
) -> Option<(i128, T, i64)> {
    let (c, t) = f(0)?;
    let mut best = (c, t, 0i64);
    let mut h = reach;
    while h > 0 {
        let at = best.2;
        for s in [at - h, at + h] {
            if s.abs() <= reach {
                let (c, t) = f(s)?;
                if c < best.0 {
                    best = (c, t, s);
                }
            }
        }
        h >>= 1;
    }
    Some(best)
}

/// Longest row of shape values a grid scan keeps (px): a line of σ up to about 4 px (FWHM 9.5 px)
/// over the window and the grid's whole-pixel moves; a wider line's scan falls back to the shape
/// itself. Two rows are on the stack of the check's deepest path.
const ROW_PX: usize = 40;

/// A shape's values G(m) = g(m · 2^16, c0) (Q15) at whole pixels m = `lo` …: a centre moved by
/// j whole pixels sees G(i − j) at pixel i, so every shift of a grid in one phase (the same
/// fraction of a pixel) reads one row instead of three exponentials a pixel.
struct Row {
    lo: i64,
    len: usize,
    vals: [u16; ROW_PX],
}

impl Row {
    const EMPTY: Row = Row {
        lo: 0,
        len: 0,
        vals: [0; ROW_PX],
    };

    /// Fills the row for centre `c0` over pixels `m_lo ..= m_hi`, kept only where the shape can be
    /// non-zero; false (and the row empty) when that is longer than [`ROW_PX`]. In place: a row
    /// is ~100 B of stack.
    fn fill(&mut self, shape: &LineShape, c0: i64, m_lo: i64, m_hi: i64) -> bool {
        let (lo, hi) = shape.support(m_lo, m_hi, c0, c0);
        let len = usize::try_from(hi - lo + 1).unwrap_or(0);
        self.lo = lo;
        if len > ROW_PX {
            self.len = 0;
            return false;
        }
        self.len = len;
        for (k, v) in self.vals.iter_mut().take(len).enumerate() {
            // 0 ≤ g ≤ 2^15.
            *v = shape.g((lo + k as i64) << 16, c0).clamp(0, 1 << 15) as u16;
        }
        true
    }

    /// G(m); 0 off the row (where the shape is 0).
    fn at(&self, m: i64) -> i64 {
        match usize::try_from(m - self.lo) {
            Ok(k) if k < self.len => i64::from(self.vals.get(k).copied().unwrap_or(0)),
            _ => 0,
        }
    }
}

/// [`sums_at`] at every shift `lo_shift + s · step`, s = 0 ..= `count`, for `step` dividing 2^16,
/// each handed to `visit` with its shift. The shifts are visited phase by phase (s ≡ φ mod
/// 2^16 / step, ascending within a phase): one pair of [`Row`]s per phase gives every shift of it.
/// The sums are those of [`sums_at`] (tested).
#[allow(clippy::too_many_arguments)]
fn scan_pairs(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    shape: &LineShape,
    srr: i128,
    lo_shift: i64,
    step: i64,
    count: i64,
    mut visit: impl FnMut(i64, &Sums),
) -> Option<()> {
    let phases = (65_536 / step.max(1)).max(1);
    let (mut ra, mut rb) = (Row::EMPTY, Row::EMPTY);
    for phase in 0..phases.min(count.saturating_add(1)) {
        let moves = (count - phase) / phases;
        let sh0 = lo_shift + phase * step;
        let (ca0, cb0) = (w.a_px_q16 as i64 + sh0, w.b_px_q16 as i64 + sh0);
        let rows =
            ra.fill(shape, ca0, first - moves, last) && rb.fill(shape, cb0, first - moves, last);
        for j in 0..=moves {
            let shift = sh0 + j * 65_536;
            let sums = if rows {
                let (ca, cb) = (ca0 + j * 65_536, cb0 + j * 65_536);
                let (lo, hi) = shape.support(first, last, ca.min(cb), ca.max(cb));
                sums_from(w, lo, hi, srr, |i| (ra.at(i - j), rb.at(i - j)))?
            } else {
                sums_at(w, first, last, shift, shape, srr)?
            };
            visit(shift, &sums);
        }
    }
    Some(())
}

/// [`single_chi2`] at every centre `lo_c + s · step`, s = 0 ..= `count`, phase by phase as in
/// [`scan_pairs`] (tested to be the same values).
#[allow(clippy::too_many_arguments)]
fn scan_singles(
    w: &PairWindow<'_>,
    first: i64,
    last: i64,
    shape: &LineShape,
    srr: i128,
    lo_c: i64,
    step: i64,
    count: i64,
    mut visit: impl FnMut(i64, i128),
) -> Option<()> {
    let phases = (65_536 / step.max(1)).max(1);
    let mut row = Row::EMPTY;
    for phase in 0..phases.min(count.saturating_add(1)) {
        let moves = (count - phase) / phases;
        let c0 = lo_c + phase * step;
        let filled = row.fill(shape, c0, first - moves, last);
        for j in 0..=moves {
            let c = c0 + j * 65_536;
            let chi = if filled {
                let (lo, hi) = shape.support(first, last, c, c);
                single_from(w, lo, hi, srr, |i| row.at(i - j))?
            } else {
                single_chi2(w, first, last, c, shape, srr)?
            };
            visit(c, chi);
        }
    }
    Some(())
}

/// Σ r² over the window (it does not depend on the shift or width searched).
fn rr_sum(w: &PairWindow<'_>, first: i64, last: i64) -> Option<i128> {
    let mut srr = 0i128;
    for i in first..=last {
        let r = i64::from(*w.frame.get(i as usize)?) - i64::from(*w.base.get(i as usize)?);
        srr += if r.unsigned_abs() < 1 << 31 {
            i128::from(r * r)
        } else {
            i128::from(r) * i128::from(r)
        };
    }
    Some(srr)
}

impl Sums {
    fn det(&self) -> i128 {
        self.saa * self.sbb - self.sab * self.sab
    }

    /// Amplitudes A, B of the least-squares solution, frame units in Q8.
    fn amplitudes_q8(&self) -> Option<(i128, i128)> {
        let det = self.det();
        if det <= 0 {
            return None;
        }
        let a = mul_div_i128(self.sbb * self.sra - self.sab * self.srb, 1 << 23, det)?;
        let b = mul_div_i128(self.saa * self.srb - self.sab * self.sra, 1 << 23, det)?;
        Some((a, b))
    }

    /// Residual sum of squares after the fit (frame units²), from the exact projection
    /// Σr² − (rᵀG)(GᵀG)⁻¹(Gᵀr) rather than from rounded amplitudes; `i128::MAX` when singular.
    fn chi2(&self) -> i128 {
        let det = self.det();
        if det <= 0 {
            return i128::MAX;
        }
        let ia = self.sbb * self.sra - self.sab * self.srb;
        let ib = self.saa * self.srb - self.sab * self.sra;
        // Both quotients divide by det: by its reciprocal where det < 2^64 (the same rounded
        // quotients as `mul_div_i128`, without two 128-bit long divisions per trial shift).
        let proj = match Divisor::new(det) {
            Some(d) => d
                .mul_div_round(self.sra, ia)
                .zip(d.mul_div_round(self.srb, ib)),
            None => mul_div_i128(self.sra, ia, det).zip(mul_div_i128(self.srb, ib, det)),
        };
        match proj {
            Some((x, y)) => self.srr - x - y,
            None => i128::MAX,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// χ² through the determinant's reciprocal is the one through two 128-bit divisions.
    #[test]
    fn chi2_by_reciprocal_is_the_long_division() {
        let mut next = crate::test_rng::xorshift(0x2545_f491_4f6c_dd1du64);
        let mut checked = 0;
        for _ in 0..20_000 {
            let mut v = || ((next() >> (next() % 40)) as i64) as i128;
            let (saa, sbb) = (v().abs() + 1, v().abs() + 1);
            let sab = v() % (saa.min(sbb));
            let s = Sums {
                saa,
                sab,
                sbb,
                sra: v() - v(),
                srb: v() - v(),
                srr: v().abs() << 20,
            };
            let det = s.det();
            if det <= 0 {
                continue;
            }
            let ia = s.sbb * s.sra - s.sab * s.srb;
            let ib = s.saa * s.srb - s.sab * s.sra;
            let slow = match mul_div_i128(s.sra, ia, det).zip(mul_div_i128(s.srb, ib, det)) {
                Some((x, y)) => s.srr - x - y,
                None => i128::MAX,
            };
            assert_eq!(s.chi2(), slow, "{saa} {sab} {sbb} {} {}", s.sra, s.srb);
            checked += 1;
        }
        assert!(checked > 10_000, "{checked}");
    }

    #[test]
    fn sixth_is_exact_over_simpsons_range() {
        for x in 0..=(6i64 << 15) {
            assert_eq!(sixth(x), x / 6, "{x}");
        }
        assert_eq!(sixth(-12), -2);
    }

    /// The table exponential stays within two Q15 steps of the exact one rounded to Q15.
    #[test]
    fn table_exponential_matches_the_exact_one() {
        for x in (0..(12 << 16)).step_by(997) {
            let exact = crate::find::math::exp_neg_q16(x) >> 15;
            let got = exp_neg_q16_q15(x);
            assert!((got - exact).abs() <= 2, "x {x}: {got} vs {exact}");
        }
        assert_eq!(exp_neg_q16_q15(0), 1 << 15);
        assert_eq!(exp_neg_q16_q15(-7), 1 << 15);
    }

    /// The line shape as first written, in 64-bit arithmetic throughout.
    fn g_wide(shape: &LineShape, p_q16: i64, c_q16: i64) -> i64 {
        let d = (p_q16 - c_q16).clamp(-(1 << 30), 1 << 30);
        let u = ((d * shape.inv_s_q14) >> 16).clamp(-(16 << 14), 16 << 14);
        let half = shape.inv_s_q14 >> 1;
        let exp = |x_q16: i64| {
            if x_q16 >= 11 << 16 {
                return 0;
            }
            let y = (x_q16.max(0) * 94_548) >> 16;
            let (k, f) = (y >> 16, (y & 0xffff) as usize);
            let (i, rem) = (f >> 10, (f & 1023) as i64);
            let t0 = i64::from(crate::find::fit::EXP2_Q15[i]);
            let t1 = i64::from(crate::find::fit::EXP2_Q15[i + 1]);
            let v = t0 - (((t0 - t1) * rem + 512) >> 10);
            if k >= 16 {
                0
            } else {
                (v + ((1 << k) >> 1)) >> k
            }
        };
        let at = |u: i64| {
            let h = u.abs() >> 1;
            exp((h * h) >> 11)
        };
        ((at(u - half) + 4 * at(u) + at(u + half)) * 174_763) >> 20
    }

    #[test]
    fn shape_in_32_bit_steps_is_the_wide_one() {
        for sigma in [1 << 12, 9_999, 65_536, 78_643, 123_457, 400_000] {
            let shape = LineShape::new(sigma);
            let c = (30 << 16) + 4_321;
            let far = [
                -(1i64 << 40),
                -(1 << 31),
                -(1 << 30) - 1,
                (1 << 30) + 1,
                1 << 33,
            ];
            for d in (-(12 << 16)..(12 << 16)).step_by(61).chain(far) {
                assert_eq!(
                    shape.g(c + d, c),
                    g_wide(&shape, c + d, c),
                    "σ {sigma} d {d}"
                );
            }
        }
    }

    // The reach constant: the first half-u whose exponent reaches 11 (and the one before does not).
    const HALF_REACH: i64 = ZERO_FROM_U_Q14 / 2;
    const _: () = assert!((HALF_REACH * HALF_REACH) >> 11 >= 11 << 16);
    const _: () = assert!(((HALF_REACH - 1) * (HALF_REACH - 1)) >> 11 < 11 << 16);

    #[test]
    fn shape_is_zero_from_its_reach_on() {
        assert_eq!(exp_neg_q16_q15(11 << 16), 0);
        for sigma in [
            1 << 12,
            5_000,
            30_000,
            65_536,
            78_643,
            150_000,
            400_000,
            3 << 20,
        ] {
            let shape = LineShape::new(sigma);
            let r = shape.reach_q16;
            let c = (40 << 16) + 12_345;
            for d in (r - 70_000..r + 70_000).step_by(7) {
                for p in [c + d, c - d] {
                    if d >= r {
                        assert_eq!(shape.g(p, c), 0, "σ {sigma} d {d} reach {r}");
                    }
                }
            }
            // Not much farther out than needed: non-zero a pixel or a σ inside the reach.
            let inside = r - sigma.max(65_536);
            assert!(shape.g(c + inside, c) > 0, "{sigma}");
        }
    }

    /// A 100-px frame and baseline of random values, and a pair: a at `a_px.0 + [0, a_px.1)` px,
    /// b within ±3 px of it, σ = 4 096 + [0, `sigma_span`) (Q16).
    #[allow(clippy::type_complexity)]
    fn random_pair(
        next: &mut impl FnMut(u64) -> u64,
        a_px: (i32, u64),
        sigma_span: u64,
    ) -> (std::vec::Vec<i32>, std::vec::Vec<i32>, (i32, i32, i32)) {
        let f = (0..100).map(|_| next(60_000) as i32 - 1_000).collect();
        let base = (0..100).map(|_| next(2_000) as i32).collect();
        let a = (a_px.0 << 16) + next(a_px.1 << 16) as i32;
        let b = a + next(6 << 16) as i32 - (3 << 16);
        (f, base, (a, b, 4_096 + next(sigma_span) as i32))
    }

    fn window<'a>(f: &'a [i32], base: &'a [i32], a: i32, b: i32, sigma: i32) -> PairWindow<'a> {
        PairWindow {
            frame: f,
            base,
            a_px_q16: a,
            b_px_q16: b,
            sigma_px_q16: sigma,
            shift_range_px_q16: 0,
        }
    }

    #[test]
    fn sums_over_the_support_are_the_whole_window_sums() {
        let mut bits = crate::test_rng::xorshift(0x1f83_d9ab_fb41_bd6bu64);
        let mut next = move |m: u64| bits() % m;
        for _ in 0..300 {
            let (f, base, (a, b, sigma)) = random_pair(&mut next, (10, 80), 200_000);
            let w = window(&f, &base, a, b, sigma);
            let shape = LineShape::new(w.sigma_px_q16 as i64);
            let (first, last) = (next(40) as i64, 60 + next(40) as i64);
            let srr = rr_sum(&w, first, last).unwrap();
            let shift = next(8 << 16) as i64 - (4 << 16);
            let (ca, cb) = (w.a_px_q16 as i64 + shift, w.b_px_q16 as i64 + shift);
            let part = sums_at(&w, first, last, shift, &shape, srr).unwrap();
            let whole = sums_over(&w, first, last, ca, cb, &shape, srr).unwrap();
            let fields = |s: &Sums| (s.saa, s.sab, s.sbb, s.sra, s.srb, s.srr);
            assert_eq!(fields(&part), fields(&whole));
            // The single line and the Fisher matrix skip the same zero pixels.
            let mut sgg = 0i128;
            let mut srg = 0i128;
            for i in first..=last {
                let r = (f[i as usize] - base[i as usize]) as i128;
                let g = shape.g(i << 16, ca) as i128;
                sgg += g * g;
                srg += r * g;
            }
            let single = if sgg == 0 {
                srr
            } else {
                srr - mul_div_i128(srg, srg, sgg).unwrap()
            };
            assert_eq!(single_chi2(&w, first, last, ca, &shape, srr), Some(single));
        }
    }

    /// Halving steps find the least value of every sequence that falls and then rises (a convex one
    /// and one with a plateau), as the full scan does, and at most 11 values are asked for.
    #[test]
    fn halving_search_finds_the_least_of_a_valley() {
        let mut next = crate::test_rng::xorshift(0x3c79_ac49_2ba7_b653u64);
        for _ in 0..2000 {
            let m = (next() % 33) as i64 - 16;
            let k = 1 + (next() % 50) as i128;
            let flat = (next() % 4) as i64;
            let v = |s: i64| k * i128::from(((s - m).abs() - flat).max(0)).pow(2);
            let mut asked = 0;
            let (c, (), s) = least_near(16, |s| {
                asked += 1;
                Some((v(s), ()))
            })
            .unwrap();
            let full = (-16..=16).map(v).min().unwrap();
            assert_eq!(c, full, "m {m} flat {flat}");
            assert_eq!(v(s), c);
            assert!(asked <= 11);
        }
        // reach 0: the one value.
        assert_eq!(
            least_near(0, |s| Some((i128::from(s) + 5, ()))).map(|r| r.0),
            Some(5)
        );
    }

    /// The phase-by-phase grid scans give, at every shift of the grid and in a visit of each, the
    /// sums and χ² of the shift-by-shift calls (narrow lines through rows, wide ones through the
    /// shape itself).
    #[test]
    fn grid_scans_are_the_shift_by_shift_sums() {
        let mut bits = crate::test_rng::xorshift(0x6c8e_9cf5_7093_2b1du64);
        let mut next = move |m: u64| bits() % m;
        let fields = |s: &Sums| (s.saa, s.sab, s.sbb, s.sra, s.srb, s.srr);
        let (mut by_rows, mut by_shape) = (0, 0);
        for _ in 0..200 {
            let (f, base, (a, b, sigma)) = random_pair(&mut next, (20, 60), 1_500_000);
            let w = window(&f, &base, a, b, sigma);
            let shape = LineShape::new(w.sigma_px_q16 as i64);
            let (first, last) = (next(30) as i64, 40 + next(59) as i64);
            let srr = rr_sum(&w, first, last).unwrap();
            let step = [2048i64, 4096][next(2) as usize];
            let count = next(257) as i64;
            let lo = next(8 << 16) as i64 - (4 << 16);
            let mut probe = Row::EMPTY;
            if probe.fill(&shape, w.a_px_q16 as i64 + lo, first - 8, last) {
                by_rows += 1;
            } else {
                by_shape += 1;
            }
            let mut seen = std::vec::Vec::new();
            scan_pairs(
                &w,
                first,
                last,
                &shape,
                srr,
                lo,
                step,
                count,
                |shift, sums| {
                    let one = sums_at(&w, first, last, shift, &shape, srr).unwrap();
                    assert_eq!(fields(sums), fields(&one), "shift {shift}");
                    seen.push(shift);
                },
            )
            .unwrap();
            seen.sort_unstable();
            let want: std::vec::Vec<i64> = (0..=count).map(|s| lo + s * step).collect();
            assert_eq!(seen, want);
            let mut seen = std::vec::Vec::new();
            scan_singles(
                &w,
                first,
                last,
                &shape,
                srr,
                lo + a as i64,
                step,
                count,
                |c, chi| {
                    assert_eq!(
                        Some(chi),
                        single_chi2(&w, first, last, c, &shape, srr),
                        "c {c}"
                    );
                    seen.push(c);
                },
            )
            .unwrap();
            assert_eq!(seen.len() as i64, count + 1);
        }
        // Both ways were taken.
        assert!(by_rows > 50 && by_shape > 10, "{by_rows} {by_shape}");
    }

    /// Two Gaussians of σ = 1.2 px, 2.4 px apart, heights 3000 (a) and 1000 (b), on a flat base.
    fn frame(a_h: i64, b_h: i64, sep_q16: i64, noise: i32) -> ([i32; 80], [i32; 80]) {
        let mut f = [0i32; 80];
        let base = [500i32; 80];
        let s = 78_643; // 1.2 px
        for (i, v) in f.iter_mut().enumerate() {
            let p = (i as i64) << 16;
            let a = (a_h * gauss_q15(p, 40 << 16, s)) >> 15;
            let b = (b_h * gauss_q15(p, (40 << 16) + sep_q16, s)) >> 15;
            *v = (500 + a + b) as i32 + noise * [3, -2, 1, -4, 2, 0, -1, 4, -3, 0, 2][i % 11];
        }
        (f, base)
    }

    #[test]
    fn resolved_pair_gives_its_share() {
        let (f, base) = frame(3000, 1000, 157_286, 1); // 2.4 px
        let w = PairWindow {
            frame: &f,
            base: &base,
            a_px_q16: (40 << 16) + 20_000,
            b_px_q16: (40 << 16) + 20_000 + 157_286,
            sigma_px_q16: 78_643,
            shift_range_px_q16: 1 << 16,
        };
        let e = share_by_profile(&w).unwrap();
        assert!((e.share_b_ppm - 250_000).abs() < 10_000, "{e:?}");
        assert!(e.sigma_ppm < 10_000, "{e:?}");
    }

    #[test]
    fn unresolved_pair_without_a_map_is_not_determinable() {
        // 0.1 px apart at SNR ~100: the fit cannot split them; the uncertainty says so.
        let (f, base) = frame(3000, 1000, 6_554, 10);
        let w = PairWindow {
            frame: &f,
            base: &base,
            a_px_q16: 40 << 16,
            b_px_q16: (40 << 16) + 6_554,
            sigma_px_q16: 78_643,
            shift_range_px_q16: 1 << 16,
        };
        let e = share_by_profile(&w);
        assert!(e.is_none_or(|e| e.sigma_ppm > MAX_SHARE_SIGMA_PPM), "{e:?}");
    }

    #[test]
    fn blend_positions_give_the_share_with_a_good_map() {
        // Hα/Dα and Hβ/Dβ blends at a 70 % D share, measured to 2 pm with a 3 pm map.
        let r = [
            BlendReading {
                measured_fm: 656_279_000 - 126_900,
                sigma_fm: 2_000,
                a_fm: 656_279_000,
                b_fm: 656_100_000,
            },
            BlendReading {
                measured_fm: 486_133_000 - 92_400,
                sigma_fm: 2_000,
                a_fm: 486_133_000,
                b_fm: 486_001_000,
            },
        ];
        let e = share_by_position(&r, 3_000).unwrap();
        assert!((e.share_b_ppm - 705_000).abs() < 10_000, "{e:?}");
        assert!(e.sigma_ppm > 10_000 && e.sigma_ppm < 40_000, "{e:?}");
    }
}
