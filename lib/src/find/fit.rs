//! Sub-pixel centre of one line: a weighted least-squares Gaussian fit in fixed point.
//!
//! Model `m(x) = A·exp(−(x−μ)²/2s²) + c` over a window of ±(2.5 s + 1) px. Each Gauss–Newton step
//! weights pixels by the inverse of the modelled variance at baseline + line (read floor plus shot
//! noise), which makes the fit the maximum-likelihood estimate for Gaussian noise and brings the centre
//! scatter to the Cramér–Rao bound. The centre uncertainty comes from the inverse of the same normal
//! matrix (the Fisher information of the noise model). Saturated and repaired pixels get no weight.
//!
//! Parameters are updated in relative form (ΔA/A, Δμ/s, Δs/s, Δc/A). The normal sums are kept unrounded
//! (Q60) and each parameter is rescaled by a power of two before the 4×4 Cramer solve in `i128`
//! (`Scaled`), so the solve keeps ≥ 24 significant bits per row even when shot noise makes the core
//! weights 10⁴× smaller than the wing weights, and cannot overflow (scaled entries < 2^26).

use super::math::{
    clamp_i32, clamp_i64, div_round_i128, exp_neg_q16, isqrt_u128, mul_i32_i64, mul_i32_wide,
    mul_u32_wide, ONE_Q30,
};
use super::noise::NoiseModel;
use crate::condition::flags;

/// Largest fit half-width (px); with FWHM ≤ 16 px, 2.5 s + 1 < 19 is capped here.
pub const MAX_HALF: usize = 16;
/// Gauss–Newton steps at most.
pub const ITERATIONS: usize = 6;
/// Fewest weighted pixels for a 4-parameter fit.
const MIN_PIXELS: usize = 6;

/// Result of one fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Fit {
    /// Centre (px, Q16).
    pub center_q16: i64,
    /// Centre 1-σ (px, Q16).
    pub center_sigma_q16: i64,
    /// Gaussian σ as sampled (px, Q16).
    pub sigma_q16: i64,
    /// Height (frame units, Q8).
    pub height_q8: i64,
    /// First pixel of the window (frames are ≤ 4096 px).
    pub lo: u16,
    /// Last pixel of the window.
    pub hi: u16,
    /// Whether the Gauss–Newton steps settled within [`ITERATIONS`]; otherwise the last step is reported.
    pub converged: bool,
    /// Gauss–Newton steps taken (≤ [`ITERATIONS`]).
    pub steps: u8,
}

/// Data the fit reads: the frame, its baseline, flags and noise model.
#[derive(Clone, Copy)]
pub struct FitData<'a> {
    /// Frame values (frame units).
    pub frame: &'a [i32],
    /// Baseline under the frame (frame units).
    pub base: &'a [i32],
    /// Pixel flags.
    pub flag: &'a [u8],
    /// Noise model.
    pub noise: &'a NoiseModel,
    /// Already fitted neighbours whose profiles are taken out of the data first (≤ 2 are used).
    pub neighbours: [Option<Fit>; 2],
}

impl FitData<'_> {
    fn resid(&self, i: usize) -> i64 {
        let y = self.frame.get(i).copied().unwrap_or(0);
        let b = self.base.get(i).copied().unwrap_or(0);
        let mut r = i64::from(y) - i64::from(b);
        for f in self.neighbours.iter().flatten() {
            r = r.saturating_sub(profile(f, i));
        }
        r
    }

    fn base_at(&self, i: usize) -> i64 {
        i64::from(self.base.get(i).copied().unwrap_or(0))
    }

    fn usable(&self, i: usize) -> bool {
        self.flag.get(i).is_some_and(|&f| !flags::is_untrusted(f))
    }
}

/// Marks a pixel of the [`Window`] that gets no weight (saturated or repaired).
const UNUSABLE: i64 = i64::MIN;

/// The fit window's data, gathered once per fit: the residual after baseline and neighbour profiles
/// (those are fixed during the fit, and each costs an exponential per pixel) and the baseline.
struct Window {
    lo: usize,
    len: usize,
    /// Smallest modelled variance at the baseline over the window (Q8, ≥ 1).
    vref: i64,
    resid: [i64; 2 * MAX_HALF + 1],
    base: [i64; 2 * MAX_HALF + 1],
}

impl Window {
    /// Loop bound: ≤ 2 × [`MAX_HALF`] + 1 pixels.
    fn new(d: &FitData<'_>, lo: usize, hi: usize) -> Self {
        let mut w = Window {
            lo,
            len: 0,
            vref: i64::MAX,
            resid: [UNUSABLE; 2 * MAX_HALF + 1],
            base: [0; 2 * MAX_HALF + 1],
        };
        for (k, i) in (lo..=hi).enumerate().take(2 * MAX_HALF + 1) {
            if let (Some(r), Some(b)) = (w.resid.get_mut(k), w.base.get_mut(k)) {
                *r = if d.usable(i) {
                    d.resid(i).max(UNUSABLE + 1)
                } else {
                    UNUSABLE
                };
                *b = d.base_at(i);
                w.vref = w.vref.min(d.noise.var_q8(*b));
            }
            w.len = k + 1;
        }
        w.vref = if w.len == 0 { 1 } else { w.vref.max(1) };
        w
    }
}

#[derive(Clone, Copy)]
struct Params {
    a_q8: i64,
    mu_q16: i64,
    s_q16: i64,
    c_q8: i64,
}

type Mat = [[i128; 4]; 4];

/// Fits the line whose highest smoothed pixel is `peak`, starting from σ `s0_q16`; σ is kept within
/// `s_min_q16 … s_max_q16`.
///
/// Loop bounds: ≤ min(`max_steps`, [`ITERATIONS`]) + 2 passes (Gauss–Newton steps, the covariance
/// pass, the weight-reference pass) over ≤ 2 × [`MAX_HALF`] + 1 pixels, plus one gathering pass taking
/// ≤ 2 neighbour profiles out of each pixel.
pub fn fit_line(
    d: &FitData<'_>,
    peak: usize,
    s0_q16: i64,
    s_min_q16: i64,
    s_max_q16: i64,
    max_steps: usize,
) -> Fit {
    let n = d.frame.len();
    let r0 = d.resid(peak);
    let rl = peak.checked_sub(1).map_or(r0, |j| d.resid(j));
    let rr = if peak.saturating_add(1) < n {
        d.resid(peak + 1)
    } else {
        r0
    };
    // Parabola through three pixels: δ = (rl − rr) / (2 (rl − 2 r0 + rr)), within ±0.5 px.
    let den = rl - 2 * r0 + rr;
    let delta_q16 = if den < 0 {
        ((i128::from(rl) - i128::from(rr)) << 16)
            .checked_div(2 * i128::from(den))
            .unwrap_or(0)
            .clamp(-(1 << 15), 1 << 15) as i64
    } else {
        0
    };
    // max/min, not clamp: clamp panics on crossed bounds, and these come from the caller.
    let s_max_q16 = s_max_q16.max(s_min_q16);
    let s0 = s0_q16.max(s_min_q16).min(s_max_q16).max(1 << 14);
    let half = ((5 * s0) >> 17).saturating_add(2).clamp(2, MAX_HALF as i64) as usize;
    let lo = peak.saturating_sub(half);
    let hi = peak.saturating_add(half).min(n.saturating_sub(1));
    let start = Params {
        a_q8: (r0 << 8).max(256),
        mu_q16: ((peak as i64) << 16) + delta_q16,
        s_q16: s0,
        c_q8: 0,
    };
    let win = Window::new(d, lo, hi);
    // Weights are relative to the smallest variance in the window so none exceeds 1.
    let vref = win.vref;
    let mut p = start;
    let mut converged = false;
    let mut steps = 0u8;
    // The normal matrix of the last step and the parameters it was taken at: its inverse gives the
    // centre's σ (a settled fit moved < 2^-14 px since, and a pass per fit is saved).
    let mut last: Option<(Mat, Params)> = None;
    for _ in 0..max_steps.min(ITERATIONS) {
        steps += 1;
        let Some((m, b)) = normal(&win, d.noise, &p, vref) else {
            break;
        };
        last = Some((m, p));
        let Some(scaled) = Scaled::new(&m) else {
            break;
        };
        let step = scaled.solve(&b);
        let [da, dmu, ds, dc] = step;
        let da = da.clamp(-(1 << 15), 1 << 15);
        let dmu = dmu.clamp(-(1 << 15), 1 << 15);
        let ds = ds.clamp(-(1 << 14) - (1 << 12), 1 << 14);
        let dc = dc.clamp(-(1 << 16), 1 << 16);
        let before = p;
        p.a_q8 = (p.a_q8 + ((p.a_q8 * da) >> 16)).max(16);
        p.mu_q16 += (p.s_q16 * dmu) >> 16;
        p.s_q16 = (p.s_q16 + ((p.s_q16 * ds) >> 16))
            .max(s_min_q16)
            .min(s_max_q16);
        p.c_q8 += (p.a_q8 * dc) >> 16;
        // The centre must stay inside the window, or the fit has wandered onto something else.
        if p.mu_q16 < (lo as i64) << 16 || p.mu_q16 > (hi as i64) << 16 {
            p = start;
            last = None;
            break;
        }
        // Settled: centre moved < 2^-14 px, height and σ by < 2^-12 relative.
        let settled = (p.mu_q16 - before.mu_q16).abs() <= 4
            && ((p.a_q8 - before.a_q8).abs() << 12) <= before.a_q8
            && ((p.s_q16 - before.s_q16).abs() << 12) <= before.s_q16;
        if settled {
            converged = true;
            break;
        }
    }
    let center_sigma_q16 = match last {
        Some((m, q)) => center_sigma(&m, &q, vref),
        None => normal(&win, d.noise, &p, vref).and_then(|(m, _)| center_sigma(&m, &p, vref)),
    }
    .unwrap_or(p.s_q16);
    Fit {
        center_q16: p.mu_q16,
        center_sigma_q16,
        sigma_q16: p.s_q16,
        height_q8: p.a_q8,
        lo: u16::try_from(lo).unwrap_or(u16::MAX),
        hi: u16::try_from(hi).unwrap_or(u16::MAX),
        converged,
        steps,
    }
}

/// Normal matrix `Σ w J Jᵀ` (Q60) and gradient `Σ w J e` (Q54), with weights `vref / var`, unrounded.
///
/// Weights and Jacobian are Q30 and the residual Q24 relative to the height; the sums stay at full
/// precision in `i128` and are only rescaled per parameter in [`Scaled`]. Rounding them to one common
/// Q-format instead loses the centre: where shot noise dominates, the core weights are ~1e-4 of the wing
/// weights, so the centre's rows shrink to a few hundred Q16 steps while the background's stay O(1), and a
/// gradient rounded to whole steps stops Gauss–Newton short by about one Cramér–Rao σ at SNR 1000.
/// Magnitudes: w·J·J ≤ 2^60 per pixel, |w·J·e| ≤ 2^70 (e clamped to 2^16 relative), ≤ 33 pixels.
fn normal(win: &Window, noise: &NoiseModel, p: &Params, vref: i64) -> Option<(Mat, [i128; 4])> {
    let mut m: Mat = [[0; 4]; 4];
    let mut b = [0i128; 4];
    let mut used = 0usize;
    let s = p.s_q16.max(1);
    let a = p.a_q8.max(1);
    // The line's own products stay in i64 (a library call each on the M0, where an i128 product is
    // several); only the sums over the window are i128. Bounds (Q30 units): 0 < g ≤ 2^30; |g·u| and
    // |g·u²| peak at 0.61 and 0.74 × 2^30; w ≤ 2^30 (vref ≤ var); so every w·J and w·J·J < 2^60.
    let a64 = i128::from(a);
    // Per-pixel divisions become multiplies by reciprocals taken once per pass (the M0 divides in
    // software, ~100 instructions each): 1/s in Q24 (s ≥ 2^13 from the FWHM floor of 1 px, so
    // < 2^27), and 1/a as a 32-bit mantissa `inv_a / 2^(31 + bits(a))`. Relative error < 2^-26.
    let inv_s_q24 = i32::try_from((1i64 << 40).checked_div(s).unwrap_or(0)).ok();
    let a_bits = 64 - a.unsigned_abs().leading_zeros();
    let a_top = a.unsigned_abs() >> a_bits.saturating_sub(31);
    let top_bits = 64 - a_top.leading_zeros();
    let inv_a =
        ((1u64 << (31 + top_bits)).checked_div(a_top).unwrap_or(0)).min(u64::from(u32::MAX)) as u32;
    for (k, (&resid, &base)) in win.resid.iter().zip(&win.base).take(win.len).enumerate() {
        if resid == UNUSABLE {
            continue;
        }
        let i = win.lo + k;
        let dx = ((i as i64) << 16) - p.mu_q16;
        let u = match (inv_s_q24, i32::try_from(dx)) {
            (Some(inv), Ok(dx)) => mul_i32_wide(dx, inv) >> 24,
            _ => (dx << 16).checked_div(s).unwrap_or(0),
        };
        let u32w = clamp_i32(u);
        let g30 = exp_neg_q16(mul_i32_wide(u32w, u32w) >> 17);
        let line_q8 = match i32::try_from(a) {
            Ok(a32) => i128::from(mul_i32_wide(a32, clamp_i32(g30)) >> 30),
            Err(_) => (a64 * i128::from(g30)) >> 30,
        };
        // |u| < 2^24 (≤ 33 px at σ ≥ 1/5 px, Q16), so g·u < 2^54 and (g·u >> 16)·u < 2^62.
        let gu = round_shift_i64(mul_i32_wide(clamp_i32(g30), u32w), 16);
        let guu = round_shift_i64(mul_i32_wide(clamp_i32(gu), u32w), 16);
        let model_q8 = line_q8 + i128::from(p.c_q8);
        let level = base + (line_q8 >> 8) as i64;
        let var = noise.var_q8(level).max(1);
        let w = weight_q30(vref, var);
        let e = (i128::from(resid) << 8) - model_q8;
        let e_rel = match i32::try_from(e) {
            // e / a · 2^24 = e · inv_a / 2^(7 + bits(a)); |e| < 2^31 and inv_a < 2^32 keep it in 64 bits.
            Ok(e32) => {
                let q = (mul_u32_wide(e32.unsigned_abs(), inv_a) >> (7 + a_bits).min(63)) as i64;
                if e32 < 0 {
                    -q
                } else {
                    q
                }
            }
            Err(_) => clamp_i64((e << 24).checked_div(a64).unwrap_or(0)),
        }
        .clamp(-(1 << 40), 1 << 40);
        // Every factor below is within ±2^31 (bounds above), so the 32 × 32 → 64-bit product serves.
        let j = [g30, gu, guu, 1 << 30].map(clamp_i32);
        let w32 = clamp_i32(w);
        let wj = j.map(|jr| clamp_i32(round_shift_i64(mul_i32_wide(w32, jr), 30)));
        // Upper triangle only; the lower one is mirrored after the loop.
        for (r, (row, &wjr)) in m.iter_mut().zip(&wj).enumerate() {
            for (cell, &jc) in row.iter_mut().zip(&j).skip(r) {
                *cell += i128::from(mul_i32_wide(wjr, jc));
            }
        }
        for (bv, &wjr) in b.iter_mut().zip(&wj) {
            // |w·J| ≤ 2^30: a 32 × 32-bit product when |e_rel| < 2^31 (all but wild starts).
            *bv += match i32::try_from(e_rel) {
                Ok(e32) => i128::from(mul_i32_wide(wjr, e32)),
                Err(_) => i128::from(wjr) * i128::from(e_rel),
            };
        }
        used += 1;
    }
    for r in 1..4 {
        for c in 0..r {
            let upper = m.get(c).and_then(|row| row.get(r)).copied().unwrap_or(0);
            if let Some(cell) = m.get_mut(r).and_then(|row| row.get_mut(c)) {
                *cell = upper;
            }
        }
    }
    (used >= MIN_PIXELS).then_some((m, b))
}

/// Fit weight `vref / var` in Q30 (`0 < vref ≤ var`) from a 16-bit reciprocal of `var`'s mantissa: one
/// 32-bit division, good to 2^-16 relative whatever `vref / var` is (shot noise makes the core's
/// weights 10⁻⁴ of the wings', and those must keep their digits); wide operands divide in `i128`.
fn weight_q30(vref: i64, var: i64) -> i64 {
    let var = var.max(1);
    if let (Ok(v), Ok(r)) = (u32::try_from(var), u32::try_from(vref.max(0))) {
        // var = v16 · 2^sh with v16 in [2^15, 2^16); inv ≈ 2^32 / v16 in (2^16, 2^17].
        let sh = 16 - v.leading_zeros() as i32;
        let v16 = if sh >= 0 { v >> sh } else { v << -sh };
        let inv = u32::MAX.checked_div(v16).unwrap_or(0);
        // vref · inv = vref · 2^(32 + sh) / var, so shifting by sh + 2 leaves vref · 2^30 / var.
        let p = mul_u32_wide(r, inv);
        let w = if sh + 2 >= 0 {
            p >> (sh + 2)
        } else {
            p << -(sh + 2)
        };
        return i64::try_from(w).unwrap_or(i64::MAX).min(1 << 30);
    }
    clamp_i64(
        (i128::from(vref) << 30)
            .checked_div(i128::from(var))
            .unwrap_or(0),
    )
}

/// `v / 2^k` rounded to nearest, ties away from zero, so positive and negative terms err alike.
#[inline(never)]
fn round_shift(v: i128, k: u32) -> i128 {
    if k == 0 {
        return v;
    }
    if k > 126 {
        return 0;
    }
    let half = 1i128 << (k - 1);
    if v >= 0 {
        (v.saturating_add(half)) >> k
    } else {
        -((v.saturating_neg().saturating_add(half)) >> k)
    }
}

/// [`round_shift`] for `i64` (the same integers).
fn round_shift_i64(v: i64, k: u32) -> i64 {
    if k == 0 {
        return v;
    }
    if k > 62 {
        return 0;
    }
    let half = 1i64 << (k - 1);
    if v >= 0 {
        (v.saturating_add(half)) >> k
    } else {
        -((v.saturating_neg().saturating_add(half)) >> k)
    }
}

/// Bits needed for |v|.
fn bit_len(v: i128) -> u32 {
    128 - v.unsigned_abs().leading_zeros()
}

/// Rounded `num · 2^sh / den` for `den > 0`, saturating near `±2^125`; 0 when `den ≤ 0`.
///
/// The shift is split between the numerator (as far as it has headroom) and the denominator, so large
/// determinants keep ≥ 60 significant bits instead of overflowing.
fn scaled_div(num: i128, den: i128, sh: i32) -> i128 {
    if den <= 0 {
        return 0;
    }
    let room = 125i32.saturating_sub(bit_len(num) as i32).max(0);
    let (up, down) = if sh >= 0 {
        let up = sh.min(room);
        (up, sh - up)
    } else {
        (0, sh)
    };
    let n = num << up.clamp(0, 125);
    if down > 0 {
        let d = den >> down.clamp(0, 127);
        if d == 0 {
            return if n >= 0 { 1 << 125 } else { -(1 << 125) };
        }
        return div_round_i128(n, d);
    }
    // down ≤ 0: multiply the denominator, or divide the numerator when the denominator has no room.
    let k = down.unsigned_abs();
    let droom = 125u32.saturating_sub(bit_len(den));
    if k <= droom {
        div_round_i128(n, den << k)
    } else {
        div_round_i128(round_shift(n, k - droom), den << droom)
    }
}

/// Normal equations with each parameter rescaled by a power of two so every diagonal entry lies in
/// [2^24, 2^26): `M' = D⁻¹ M D⁻¹` with `D = diag(2^k)`. Exact and deterministic (shifts only), and it
/// keeps ≥ 24 significant bits in every row whatever the weights, while 4×4 Cramer products stay below
/// 2^110 (Hadamard: |det| ≤ Π diagonal).
struct Scaled {
    shift: [u32; 4],
    det: i128,
    /// Cofactors `C[i][k] = (−1)^(i+k) det(minor(i, k))` of the scaled matrix, computed once: the
    /// determinant, every Cramer numerator `Σ_i b_i C[i][k]` and `[M⁻¹]μμ` are exact integer sums of
    /// them (the same integers as expanding each determinant afresh, at a quarter of the products).
    cof: Mat,
}

impl Scaled {
    /// `None` when `m` (Q60) is not positive definite.
    fn new(m: &Mat) -> Option<Self> {
        let mut shift = [0u32; 4];
        for (k, (sh, row)) in shift.iter_mut().zip(m.iter()).enumerate() {
            let diag = row.get(k).copied().unwrap_or(0);
            if diag <= 0 {
                return None;
            }
            *sh = bit_len(diag).saturating_sub(25) / 2;
        }
        let mut out: Mat = [[0; 4]; 4];
        for ((orow, row), &si) in out.iter_mut().zip(m.iter()).zip(&shift) {
            for ((o, &v), &sj) in orow.iter_mut().zip(row.iter()).zip(&shift) {
                *o = round_shift(v, si + sj);
            }
        }
        let cof = cofactors(&out);
        let det: i128 = out[0].iter().zip(&cof[0]).map(|(&v, &c)| v * c).sum();
        (det > 0).then_some(Self { shift, det, cof })
    }

    /// Solves `M x = b` (b in Q54) by Cramer's rule on the scaled matrix; `x` in Q16.
    fn solve(&self, b: &[i128; 4]) -> [i64; 4] {
        // b' = D⁻¹ b in the scaled matrix's Q60, then one common shift keeps |b'| ≤ 2^36 (Cramer
        // numerators then stay below 2^36 · 6 · 2^78 · 4 < 2^120).
        let mut bs = [0i128; 4];
        for ((o, &v), &k) in bs.iter_mut().zip(b).zip(&self.shift) {
            *o = round_shift(v.saturating_mul(1 << 6), k);
        }
        let big = bs.iter().map(|&v| bit_len(v)).max().unwrap_or(0);
        let extra = big.saturating_sub(36);
        for v in bs.iter_mut() {
            *v = round_shift(*v, extra);
        }
        let mut x = [0i64; 4];
        for (k, (xk, &sk)) in x.iter_mut().zip(&self.shift).enumerate() {
            // det of M with column k replaced by b, expanded along that column.
            let num: i128 = bs
                .iter()
                .zip(self.cof.iter())
                .map(|(&bv, row)| bv * row.get(k).copied().unwrap_or(0))
                .sum();
            // x = x'' / 2^k with x'' = det_k / det, then × 2^extra, in Q16.
            let sh = 16 + extra as i32 - sk as i32;
            *xk = clamp_i64(scaled_div(num, self.det, sh));
        }
        x
    }

    /// `[M⁻¹]μμ` of the unscaled Q60 matrix as a real number, in Q32.
    fn inv_mu_q32(&self) -> Option<i128> {
        let cof = self.cof[1][1];
        if cof <= 0 {
            return None;
        }
        // [M⁻¹]μμ = cof'/det' · 2^(60 − 2k).
        let k = self.shift.get(1).copied().unwrap_or(0);
        Some(scaled_div(cof, self.det, 92 - 2 * k as i32))
    }
}

/// The other three indices of 0..4, for each one left out.
const OTHERS: [[usize; 3]; 4] = [[1, 2, 3], [0, 2, 3], [0, 1, 3], [0, 1, 2]];

/// Cofactors of a symmetric 4 × 4 matrix: the 10 of the upper triangle, mirrored (the same integers
/// as expanding all 16, since `C[i][k] = C[k][i]` for a symmetric matrix). Entries within ±2^31 (the
/// scaled normal matrix's are < 2^26) are read straight from an `i32` copy; others take the general path.
fn cofactors(m: &Mat) -> Mat {
    let mut cof: Mat = [[0; 4]; 4];
    let small = m
        .iter()
        .flatten()
        .all(|v| (-(1i128 << 31)..(1 << 31)).contains(v));
    let m32 = m.map(|r| r.map(|v| v as i32));
    for i in 0..4 {
        for k in i..4 {
            let d = match (small, OTHERS.get(i), OTHERS.get(k)) {
                (true, Some(&[r0, r1, r2]), Some(&[c0, c1, c2])) => {
                    let at = |r: usize, c: usize| {
                        m32.get(r).and_then(|x| x.get(c)).copied().unwrap_or(0)
                    };
                    let p = mul_i32_wide;
                    let m1 = p(at(r1, c1), at(r2, c2)) - p(at(r1, c2), at(r2, c1));
                    let m2 = p(at(r1, c0), at(r2, c2)) - p(at(r1, c2), at(r2, c0));
                    let m3 = p(at(r1, c0), at(r2, c1)) - p(at(r1, c1), at(r2, c0));
                    mul_i32_i64(at(r0, c0), m1) - mul_i32_i64(at(r0, c1), m2)
                        + mul_i32_i64(at(r0, c2), m3)
                }
                _ => det3(minor(m, i, k)),
            };
            let d = if (i + k) % 2 == 0 { d } else { -d };
            if let Some(c) = cof.get_mut(i).and_then(|row| row.get_mut(k)) {
                *c = d;
            }
            if let Some(c) = cof.get_mut(k).and_then(|row| row.get_mut(i)) {
                *c = d;
            }
        }
    }
    cof
}

#[inline(never)]
fn det3(m: [[i128; 3]; 3]) -> i128 {
    let small = |v: &i128| (-(1i128 << 31)..(1 << 31)).contains(v);
    if m.iter().flatten().all(small) {
        // Scaled entries are < 2^26: the 2 × 2 minors are exact in i64 (< 2^63), and only the three
        // outer products need i128. The same integer as the general form below.
        // 32 × 32 → 64 and 32 × 64 → 96-bit products from 32-bit multiplies (the M0 has no wider one).
        let [[a, b, c], [d, e, f], [g, h, i]] = m.map(|r| r.map(|v| v as i32));
        let p = mul_i32_wide;
        let m1 = p(e, i) - p(f, h);
        let m2 = p(d, i) - p(f, g);
        let m3 = p(d, h) - p(e, g);
        return mul_i32_i64(a, m1) - mul_i32_i64(b, m2) + mul_i32_i64(c, m3);
    }
    let [[a, b, c], [d, e, f], [g, h, i]] = m;
    a * (e * i - f * h) - b * (d * i - f * g) + c * (d * h - e * g)
}

fn minor(m: &Mat, skip_r: usize, skip_c: usize) -> [[i128; 3]; 3] {
    let mut out = [[0i128; 3]; 3];
    let rows = m.iter().enumerate().filter(|(r, _)| *r != skip_r);
    for (orow, (_, row)) in out.iter_mut().zip(rows) {
        let cols = row.iter().enumerate().filter(|(c, _)| *c != skip_c);
        for (o, (_, &v)) in orow.iter_mut().zip(cols) {
            *o = v;
        }
    }
    out
}

/// σ of the centre in px (Q16): `s · sqrt(vref · [M⁻¹]μμ) / A`.
#[inline(never)]
fn center_sigma(m: &Mat, p: &Params, vref: i64) -> Option<i64> {
    let inv_q32 = Scaled::new(m)?.inv_mu_q32()?;
    // vref is Q8, so sqrt(vref · inv) is Q20 in frame units.
    let sv_q20 = isqrt_u128((vref as u128).checked_mul(u128::try_from(inv_q32).ok()?)?) as i128;
    let a = i128::from(p.a_q8.max(1));
    let sig = (i128::from(p.s_q16) * sv_q20).checked_div(a << 12)?;
    Some(sig.clamp(1, i128::from(i64::MAX)) as i64)
}

/// A fitted line's height at pixel `i` (frame units); 0 beyond 6 σ.
fn profile(f: &Fit, i: usize) -> i64 {
    let dx = ((i as i64) << 16) - f.center_q16;
    let s = f.sigma_q16.max(1);
    if dx.abs() > 6 * s {
        return 0;
    }
    let u = (dx << 16).checked_div(s).unwrap_or(0);
    let g30 = exp_neg_q16((u * u) >> 17);
    ((i128::from(f.height_q8) * i128::from(g30)) >> 38) as i64
}

/// Height (Q8) × σ (Q16) × sqrt(2π) → area in frame units × px.
pub fn area(fit: &Fit) -> i64 {
    let v = i128::from(fit.height_q8)
        * i128::from(fit.sigma_q16)
        * i128::from(super::math::SQRT_2PI_Q16);
    (v >> 40).clamp(i128::from(i64::MIN), i128::from(i64::MAX)) as i64
}

#[allow(dead_code)]
const _: () = assert!(ONE_Q30 == 1 << 30);

#[cfg(test)]
mod tests {
    use super::super::testkit::{pixel_gauss, Rng};
    use super::*;

    fn noise(sd: i64, k_q16: u32) -> NoiseModel {
        NoiseModel {
            floor_var_q8: sd * sd * 256,
            zero_light_level: 0,
            shot_var_per_unit_q16: k_q16,
            shot_from_data: false,
        }
    }

    fn fit_one(frame: &[i32], nm: &NoiseModel, sigma0: i64) -> Fit {
        let base = vec![0i32; frame.len()];
        let fl = vec![0u8; frame.len()];
        let peak = (0..frame.len()).max_by_key(|&i| frame[i]).unwrap();
        let d = FitData {
            frame,
            base: &base,
            flag: &fl,
            noise: nm,
            neighbours: [None, None],
        };
        fit_line(&d, peak, sigma0, 1 << 15, 8 << 16, ITERATIONS)
    }

    #[test]
    #[allow(clippy::needless_range_loop)] // index arithmetic is the point of the test
    fn cofactors_equal_the_expansion() {
        let mut x = 0x7777_1234u64;
        for _ in 0..200 {
            let mut m: Mat = [[0; 4]; 4];
            for i in 0..4 {
                for k in i..4 {
                    x ^= x << 13;
                    x ^= x >> 7;
                    x ^= x << 17;
                    let v = (x % (1 << 27)) as i128 - (1 << 26);
                    m[i][k] = v;
                    m[k][i] = v;
                }
            }
            let got = cofactors(&m);
            for i in 0..4 {
                for k in 0..4 {
                    let d = det3(minor(&m, i, k));
                    let want = if (i + k) % 2 == 0 { d } else { -d };
                    assert_eq!(got[i][k], want);
                }
            }
        }
    }

    #[test]
    fn weights_keep_their_digits_at_every_ratio() {
        for var in [
            1i64,
            2,
            3,
            255,
            256,
            65_535,
            65_536,
            1 << 20,
            (1 << 28) + 12_345,
            u32::MAX as i64,
        ] {
            for vref in [1i64, 7, var / 10_000 + 1, var / 3 + 1, var] {
                let vref = vref.min(var);
                let exact = ((vref as i128) << 30) / var as i128;
                let got = weight_q30(vref, var) as i128;
                // 2^-15 relative, plus one step for the truncations.
                assert!(
                    (got - exact).abs() <= exact / 32_768 + 1,
                    "{vref}/{var}: {got} vs {exact}"
                );
            }
        }
        assert_eq!(
            weight_q30(5, 1 << 40),
            ((5i128 << 30) / (1i128 << 40)) as i64
        );
    }

    #[test]
    fn noiseless_line_centre_is_exact() {
        for (c, s) in [
            (100i64 << 16, 70_000i64),
            ((100 << 16) + 20_000, 100_000),
            ((100 << 16) - 32_000, 222_000),
        ] {
            let frame: Vec<i32> = (0..200)
                .map(|i| pixel_gauss(i, 50_000, c, s) as i32)
                .collect();
            let f = fit_one(&frame, &noise(10, 0), s);
            assert!(f.converged);
            let err = f.center_q16 - c;
            // 0.002 px: pixel integration is symmetric, so only rounding is left.
            assert!(err.abs() < 131, "centre off by {err} (Q16) for s={s}");
            // Sampled σ² ≈ s² + 1/12 px² for a pixel-integrated Gaussian.
            let want = isqrt_u128((s * s + (1i64 << 32) / 12) as u128) as i64;
            assert!(
                (f.sigma_q16 - want).abs() * 100 < want,
                "σ {} want {want}",
                f.sigma_q16
            );
        }
    }

    #[test]
    fn shot_limited_strong_line_centre_is_exact() {
        // Peak 40 000 counts (Q4: 640 000 units) at 25 e⁻/count: κ = 16/25 units, read σ 6 units. The
        // core weights are ~1e-4 of the wings'; the Cramér–Rao σ of such a line is ≈ 0.0007 px (46 Q16),
        // so the noiseless fit must land far inside that.
        for (c, s) in [
            ((100i64 << 16) + 9_000, 83_000i64),
            ((100 << 16) - 27_000, 83_000),
            ((100 << 16) + 31_000, 140_000),
            ((100 << 16) + 4_321, 57_000),
        ] {
            let frame: Vec<i32> = (0..200)
                .map(|i| pixel_gauss(i, 640_000, c, s) as i32)
                .collect();
            let f = fit_one(&frame, &noise(6, 41_943), s);
            let err = f.center_q16 - c;
            assert!(err.abs() <= 8, "centre off by {err} (Q16) for s={s}");
        }
    }

    #[test]
    fn saturated_core_is_skipped() {
        let c = (60i64 << 16) + 9_000;
        let s = 150_000;
        let frame: Vec<i32> = (0..120)
            .map(|i| pixel_gauss(i, 40_000, c, s).min(30_000) as i32)
            .collect();
        let base = vec![0i32; 120];
        let fl: Vec<u8> = frame
            .iter()
            .map(|&v| if v >= 30_000 { flags::SATURATED } else { 0 })
            .collect();
        let nm = noise(10, 0);
        let d = FitData {
            frame: &frame,
            base: &base,
            flag: &fl,
            noise: &nm,
            neighbours: [None, None],
        };
        let f = fit_line(&d, 60, s, 1 << 15, 8 << 16, ITERATIONS);
        assert!(f.converged);
        assert!(
            (f.center_q16 - c).abs() < 700,
            "off by {}",
            f.center_q16 - c
        );
        assert!(
            f.height_q8 > 35_000 << 8,
            "height should come back above the clip"
        );
    }

    #[test]
    fn scatter_matches_reported_sigma_and_read_noise_bound() {
        // Read noise only, SNR 50, FWHM ≈ 4 px. Bound: σμ² = σn² · 2 s_e / (A² √π) with
        // s_e² = s² + 1/12 (Gaussian Fisher information, standard result, from memory).
        let s = 111_300i64; // 1.698 px
        let (amp, sd) = (5_000i64, 100i64);
        let mut rng = Rng::new(11);
        let trials = 400;
        let (mut sum_sq, mut sum_sig) = (0i128, 0i128);
        for t in 0..trials {
            let c = (64i64 << 16) + (t * 4093) % 65536 - 32768;
            let frame: Vec<i32> = (0..128)
                .map(|i| (pixel_gauss(i, amp, c, s) + rng.gauss(sd << 16)) as i32)
                .collect();
            let f = fit_one(&frame, &noise(sd, 0), s);
            let e = (f.center_q16 - c) as i128;
            sum_sq += e * e;
            sum_sig += f.center_sigma_q16 as i128;
        }
        let rms = isqrt_u128((sum_sq / trials as i128) as u128) as i64;
        let mean_sig = (sum_sig / trials as i128) as i64;
        // s_e² in Q32, bound² = sd² · 2 · s_e / (A² · 1.7725) px².
        let se_q16 = isqrt_u128((s * s + (1i64 << 32) / 12) as u128) as i64;
        let bound_sq_q32 = (sd * sd) as i128 * 2 * (se_q16 as i128) * 65536 * 10_000
            / ((amp * amp) as i128 * 17_725);
        let bound = isqrt_u128(bound_sq_q32 as u128) as i64;
        assert!(rms * 100 <= bound * 120, "rms {rms} vs bound {bound} (Q16)");
        assert!(
            mean_sig * 100 >= bound * 90 && mean_sig * 100 <= bound * 115,
            "sigma {mean_sig} vs bound {bound}"
        );
    }
}
