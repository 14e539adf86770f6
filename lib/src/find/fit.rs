//! Sub-pixel centre of one line: a noise-weighted least-squares Gaussian fit in 32-bit fixed point.
//!
//! Model `m(x) = A·exp(−(x−μ)²/2s²) + c` over a window of ±(2.5 s + 2) px. Each Gauss–Newton step
//! whitens every pixel — its residual and Jacobian row multiplied by `τ = σ_ref/σ_i`, σ_i from the
//! noise model at baseline + line (read floor plus shot noise), σ_ref the noise at the window's lowest
//! model level (at or below every pixel's) — which makes the fit the maximum-likelihood estimate for
//! Gaussian noise and brings the centre scatter to the Cramér–Rao bound. Whitening also keeps the
//! arithmetic small: the whitened Jacobian has |J| ≤ 1 whatever the range of the weights (shot noise
//! makes the core's 10⁻⁴ of the wings'), so every normal-matrix product is one 32-bit multiply and no
//! parameter loses its digits to another; and the whitened noise is the same power of two at every
//! pixel, so the centre's σ needs no square root of a variance. The centre uncertainty comes from the
//! same normal matrix: the centre is eliminated last, so its final pivot is 1 / [M⁻¹]μμ. Saturated and
//! repaired pixels get no weight.
//!
//! Cost on a small core is mostly steps, so the fit is built to need one: it starts at the vertex of
//! the parabola through the logarithms of the three top pixels (exact for a sampled Gaussian) — for
//! a line clear of its noise, with that parabola's width and height too — takes the weights from
//! that start in the same pass as the first step's sums, and stops once a step moved the centre and
//! width by at most four of the centre's own scatters (from the step's normal matrix, shot noise and
//! all) and the height by four noise scatters or 1/128 of itself (a step leaves ~5–10 % of its move,
//! from the clear start less).
//! The 4 × 4 step is eliminated written out, with exact table reciprocals instead of divisions.
//!
//! Parameters are updated in relative form (ΔA/A, Δμ/s, Δs/s, Δc/A). Values are taken in *reduced
//! units*, the frame units shifted right until the window's largest residual is below 2^16 (a shift
//! of 0 for all but the strongest lines of ADC frames; the noise there is far above the step).

use super::math::{
    leading_zeros_u32, leading_zeros_u64, mul_i32_wide, mul_u32_wide, recip_u32_max, Recip,
};
use super::noise::NoiseModel;
use crate::condition::flags;

/// Largest fit half-width (px); with FWHM ≤ 16 px, 2.5 s + 2 < 19 is capped here.
pub const MAX_HALF: usize = 16;
/// Gauss–Newton steps at most.
pub const ITERATIONS: usize = 6;
/// Fewest weighted pixels for a 4-parameter fit.
const MIN_PIXELS: usize = 6;
/// Centre movement (Q16 px) below which a step counts as settled.
const SETTLED_Q16: i64 = 16;
/// Window cells.
const W: usize = W_MAX;
/// Widest window (px): 2 × [`MAX_HALF`] + 1.
pub const W_MAX: usize = 2 * MAX_HALF + 1;
/// Noise scatters a step may move each parameter by and still count as the last (see [`run`]).
const SETTLE_SCATTERS: i64 = 4;

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

/// Largest |residual| (reduced units, < 2^16 for the data) a pixel's gradient term takes: 3 · 2^13.
/// Near a fitted line the residual is noise, far below it; only a wild step or a neighbour's
/// unmodelled wing reaches it, and there the pull is capped rather than the sums overflowing.
const E_LIMIT: i32 = 3 << 13;

/// Marks a pixel of the [`Window`] that gets no weight (saturated or repaired).
const UNUSABLE: i32 = i32::MIN;

/// 2^(−i/64) in Q15 for i = 0 … 64 (Python `decimal`, 50 digits, rounded to nearest).
pub(crate) const EXP2_Q15: [u16; 65] = [
    32768, 32415, 32066, 31720, 31379, 31041, 30706, 30376, 30048, 29725, 29405, 29088, 28774,
    28464, 28158, 27855, 27554, 27258, 26964, 26674, 26386, 26102, 25821, 25543, 25268, 24995,
    24726, 24460, 24196, 23936, 23678, 23423, 23170, 22921, 22674, 22430, 22188, 21949, 21713,
    21479, 21247, 21019, 20792, 20568, 20347, 20127, 19911, 19696, 19484, 19274, 19066, 18861,
    18658, 18457, 18258, 18061, 17867, 17674, 17484, 17296, 17109, 16925, 16743, 16562, 16384,
];
/// log2(e) in Q14.
const LOG2E_Q14: i32 = 23_637;

/// e^(−x) in Q14 for `x` ≥ 0 in Q12 (negative x is taken as 0; beyond 11, where e^(−x) < 2^-15, 0),
/// through 2^(−y): a 64-step table of 2^(−f) with straight-line interpolation, relative error
/// ≲ 10⁻⁴ (y's last bit, the curvature term (ln 2 / 64)² / 8 and the rounding) — far below the noise
/// of any line this fits, and the same on both sides of a line, so it moves no centre. Multiplies and
/// shifts only.
#[inline]
pub fn exp_neg_q14(x_q12: i32) -> i32 {
    if x_q12 >= 11 << 12 {
        return 0;
    }
    let x = x_q12.max(0);
    // x < 2^15.5 and LOG2E_Q14 < 2^14.6: the product stays below 2^31.
    let y = (x * LOG2E_Q14) >> 12; // Q14
    let k = y >> 14;
    let f = (y & 16383) as usize;
    let (i, rem) = (f >> 8, (f & 255) as i32);
    let t0 = i32::from(EXP2_Q15.get(i).copied().unwrap_or(0));
    let t1 = i32::from(EXP2_Q15.get(i + 1).copied().unwrap_or(0));
    let v = t0 - (((t0 - t1) * rem + 128) >> 8);
    ((v + (1 << k)) >> (k + 1)).max(0)
}

/// `1/sqrt(v)` as a mantissa and power of two: `round(2^15·sqrt(64/(t + ½)))` for the top byte `t`
/// ∈ [64, 256) of `v` normalised by an even shift (relative error ≤ 0.4 %: enough for weights, whose
/// error only costs a little efficiency, never a bias). Built at compile time from integers.
const RSQRT_Q15: [u16; 192] = rsqrt_table();

const fn rsqrt_table() -> [u16; 192] {
    let mut t = [0u16; 192];
    let mut i = 0;
    while i < 192 {
        // 2^30 · 64 / (i + 64 + ½) = 2^31 · 64 / (2i + 129).
        let v = (1u128 << 37) / (2 * i as u128 + 129);
        let r = crate::fixed::isqrt_u128(v);
        t[i] = if r > u16::MAX as u128 {
            u16::MAX
        } else {
            r as u16
        };
        i += 1;
    }
    t
}

/// `1/sqrt(v)` ≈ `m · 2^h / 2^46` with `m` in (2^14, 2^15·1.01] (v ≥ 1): `(m, h)`.
#[inline]
fn rsqrt_parts(v: u64) -> (i32, u32) {
    let v = v.max(1);
    // The variances of ADC frames fit 32 bits: 32-bit count and shift (a 64-bit shift is a library
    // call on the M0); the same (m, h) as the general path.
    let (lz, top) = match u32::try_from(v) {
        Ok(v32) => {
            let lz = (leading_zeros_u32(v32) & !1) + 32;
            (lz, ((v32 << (lz - 32)) >> 24) as usize)
        }
        Err(_) => {
            let lz = leading_zeros_u64(v) & !1;
            (lz, ((v << lz) >> 56) as usize)
        }
    };
    // top in [64, 256)
    let m = i32::from(
        RSQRT_Q15
            .get(top.saturating_sub(64))
            .copied()
            .unwrap_or(1 << 14),
    );
    (m, lz / 2)
}

/// A fitted neighbour's profile, ready for evaluation at many pixels (1/s taken once).
#[derive(Clone, Copy)]
struct Shape {
    mu_q16: i64,
    s_q16: i64,
    inv_s: InvSigma,
    height_q8: i64,
}

impl Shape {
    fn new(f: &Fit) -> Self {
        let s = f.sigma_q16.max(1 << 12);
        Self {
            mu_q16: f.center_q16,
            s_q16: s,
            inv_s: InvSigma::new(s),
            height_q8: f.height_q8,
        }
    }

    /// Height at pixel `i` (frame units); 0 beyond 8 σ.
    fn at(&self, i: usize) -> i64 {
        let dx = ((i as i64) << 16) - self.mu_q16;
        if dx.abs() > 8 * self.s_q16 {
            return 0;
        }
        let g = exp_neg_q14(half_square_q12(u_q14(dx, &self.inv_s)));
        // |height| < 2^47 for any frame of i32 values; g ≤ 2^14.
        (self.height_q8.clamp(-(1 << 47), 1 << 47) * i64::from(g)) >> 22
    }
}

/// (x − μ)/s in Q14 from `dx` (Q16 px, |dx| ≤ 8 s) and 1/s (Q14), clamped to ±8 (just inside ±2^17).
///
/// The centre keeps its full Q16 resolution: `dx` is split into 256ths so each 32-bit product stays
/// below 2^26 (|dx| ≤ 8 s gives |dx / 2^8 · 1/s| ≤ 2^25).
#[inline]
fn u_q14(dx_q16: i64, inv: &InvSigma) -> i32 {
    const LIMIT: i32 = (1 << 17) - 1;
    let dx = dx_q16.clamp(-(1 << 30), 1 << 30) as i32;
    let (dh, dl) = (dx >> 8, dx & 255);
    // |dh| < 2^13 (32 px, wider than any window) and 1/s < 2^18 keep dh · 1/s below 2^31; beyond
    // 2^26 (u ≥ 2^18 in Q14) the clamp is reached anyway.
    if dh.unsigned_abs() >= 1 << 13 {
        return if dx < 0 { -LIMIT } else { LIMIT };
    }
    let hi = dh * inv.q14;
    if hi.unsigned_abs() >= 1 << 26 {
        return if dx < 0 { -LIMIT } else { LIMIT };
    }
    let lo = (dl * inv.q14) >> 8;
    ((hi + lo) >> 8).clamp(-LIMIT, LIMIT)
}

/// 1/s in Q14 (s ≥ 2^12 Q16 px, so ≤ 2^18), taken once per fit step.
#[derive(Clone, Copy)]
struct InvSigma {
    q14: i32,
}

impl InvSigma {
    fn new(s_q16: i64) -> Self {
        let q = Recip::new(s_q16.clamp(1 << 12, 1 << 40))
            .and_then(|r| r.scale(1, 30))
            .unwrap_or(1);
        Self {
            q14: i32::try_from(q).unwrap_or(1 << 18).clamp(1, 1 << 18),
        }
    }
}

/// u²/2 in Q12 for u in Q14 (|u| < 2^17): (|u|/2)² < 2^32 fits `u32`.
#[inline]
fn half_square_q12(u: i32) -> i32 {
    let h = u.unsigned_abs() >> 1;
    ((h * h) >> 15) as i32
}

/// The fit window's data, gathered once per fit: the residual after baseline and neighbour profiles
/// (those are fixed during the fit) and the baseline.
struct Window {
    lo: usize,
    len: usize,
    resid: [i32; W],
    base: [i32; W],
    /// Residuals of every pixel, the unusable ones too (they still give a start height: a saturated
    /// core is a lower bound of the line's).
    raw: [i32; W],
    /// The lowest baseline under a usable pixel (frame units; `i32::MAX` when none is usable): the
    /// noise there, without the line, is the least of any pixel's, the weights' reference.
    base_min: i32,
    /// The largest |residual| of a usable pixel: the reduced units' scale.
    big: u32,
}

impl Window {
    const EMPTY: Window = Window {
        lo: 0,
        len: 0,
        resid: [0; W],
        base: [0; W],
        raw: [0; W],
        // All zero, so a `static` holding it stays in `.bss`; `fill` sets it.
        base_min: 0,
        big: 0,
    };

    /// Gathers pixels `lo ..= hi` over whatever the window held. Loop bound: ≤ [`W`] pixels, each
    /// taking ≤ 2 neighbour profiles out.
    /// Cells past `len` keep whatever they held and are never read.
    fn fill(&mut self, d: &FitData<'_>, lo: usize, hi: usize) {
        let w = self;
        w.lo = lo;
        w.len = 0;
        w.base_min = i32::MAX;
        w.big = 0;
        let shapes = d.neighbours.map(|n| n.map(|f| Shape::new(&f)));
        let alone = shapes.iter().all(Option::is_none);
        let cells = w
            .resid
            .iter_mut()
            .zip(w.base.iter_mut())
            .zip(w.raw.iter_mut());
        for (((r, bb), raw), i) in cells.zip(lo..=hi) {
            let b = d.base.get(i).copied().unwrap_or(0);
            let usable = d.flag.get(i).is_some_and(|&f| !flags::is_untrusted(f));
            *raw = if alone {
                // `raw_value` with no profile to take out, without its call.
                let y = d.frame.get(i).copied().unwrap_or(0);
                y.saturating_sub(b).max(i32::MIN + 1)
            } else {
                Self::raw_value(d, &shapes, i)
            };
            *r = if usable { *raw } else { UNUSABLE };
            *bb = b;
            if usable {
                w.base_min = w.base_min.min(b);
                w.big = w.big.max(raw.unsigned_abs());
            }
            w.len += 1;
        }
    }

    /// Pixel `i`'s residual over the baseline, less the neighbours' `shapes`, as `fill` keeps it.
    fn raw_value(d: &FitData<'_>, shapes: &[Option<Shape>; 2], i: usize) -> i32 {
        let y = d.frame.get(i).copied().unwrap_or(0);
        let b = d.base.get(i).copied().unwrap_or(0);
        if shapes.iter().all(Option::is_none) {
            // No profile to take out: the same value in 32 bits.
            return y.saturating_sub(b).max(i32::MIN + 1);
        }
        let mut v = i64::from(y) - i64::from(b);
        for s in shapes.iter().flatten() {
            v = v.saturating_sub(s.at(i));
        }
        v.clamp(i64::from(i32::MIN) + 1, i64::from(i32::MAX)) as i32
    }

    /// Pixel `i`'s raw residual (the unusable ones too); `None` outside the window.
    fn raw_at(&self, i: usize) -> Option<i32> {
        i.checked_sub(self.lo)
            .filter(|&k| k < self.len)
            .and_then(|k| self.raw.get(k).copied())
    }
}

#[derive(Clone, Copy)]
struct Params {
    a_q8: i64,
    mu_q16: i64,
    s_q16: i64,
    c_q8: i64,
}

/// Per-pixel whitening factors τ (Q12, ≤ 2^12 · 1.01) of the fit's weight pass, relative to a
/// reference variance no pixel of the window falls below (the noise at the window's lowest baseline,
/// without the line): `τ_i = sqrt(var_ref / var_i) · 2^12` to the table's 0.4 %, so the whitened noise
/// is the same at every pixel and a power of two, `2^(39 − h_ref)` (frame units × Q12, see
/// [`rsqrt_parts`]) — no square root of a variance is taken.
struct Weights {
    tau: [i32; W],
    /// The exponent of the reference variance's `1/sqrt` ([`rsqrt_parts`]).
    h_ref: u32,
}

impl Weights {
    /// All zero, for [`FitScratch::new`] (a `static` of it stays in `.bss`).
    const ZERO: Weights = Weights {
        tau: [0; W],
        h_ref: 0,
    };
}

/// One fit's window and weights (≈ 0.5 KiB), kept by the caller — inside
/// [`FindWork`](super::FindWork) — so a small core's stack holds only a step's sums. Nothing in it
/// carries over from one fit to the next.
pub struct FitScratch {
    win: Window,
    weights: Weights,
}

impl FitScratch {
    /// Empty (a `const`, so a `static` can hold it; all zero, so it sits in `.bss`).
    pub const fn new() -> Self {
        Self {
            win: Window::EMPTY,
            weights: Weights::ZERO,
        }
    }
}

impl Default for FitScratch {
    fn default() -> Self {
        Self::new()
    }
}

/// Normal equations of one step: `n` = Σ J_w J_wᵀ (parameter order A, μ, s, c; < 2^30 each),
/// `b` = Σ J_w ε.
struct Normal {
    n: [[i32; 4]; 4],
    b: [i64; 4],
    used: usize,
}

/// Fits the line whose highest smoothed pixel is `peak`, starting from σ `s0_q16`; σ is kept within
/// `s_min_q16 … s_max_q16`.
///
/// Loop bounds: one gathering pass over ≤ 2 × [`MAX_HALF`] + 1 pixels (taking ≤ 2 neighbour profiles
/// out of each), then ≤ min(`max_steps`, [`ITERATIONS`]) Gauss–Newton steps, each one pass over the
/// window (the first also weighing its pixels) and a 4 × 4 elimination.
pub fn fit_line(
    d: &FitData<'_>,
    peak: usize,
    s0_q16: i64,
    s_min_q16: i64,
    s_max_q16: i64,
    max_steps: usize,
) -> Fit {
    let mut scratch = FitScratch::new();
    fit_line_in(
        d,
        peak,
        s0_q16,
        s_min_q16,
        s_max_q16,
        max_steps,
        &mut scratch,
    )
}

/// Half-width (px) of a first fit's window for a start σ `s0_q16` (Q16, already within the fit's
/// limits): 2.5 σ + 2, within 2 … [`MAX_HALF`].
pub fn window_half(s0_q16: i64) -> usize {
    ((5 * s0_q16.max(1 << 14)) >> 17)
        .saturating_add(2)
        .clamp(2, MAX_HALF as i64) as usize
}

/// [`fit_line`] with its window and weights in `scratch`. Loop bounds: as [`fit_line`].
pub fn fit_line_in(
    d: &FitData<'_>,
    peak: usize,
    s0_q16: i64,
    s_min_q16: i64,
    s_max_q16: i64,
    max_steps: usize,
    scratch: &mut FitScratch,
) -> Fit {
    let n = d.frame.len();
    // max/min, not clamp: clamp panics on crossed bounds, and these come from the caller.
    let s_max_q16 = s_max_q16.max(s_min_q16);
    let s0 = s0_q16.max(s_min_q16).min(s_max_q16).max(1 << 14);
    let half = window_half(s0);
    let lo = peak.saturating_sub(half);
    let hi = peak.saturating_add(half).min(n.saturating_sub(1));
    if max_steps == 0 {
        // No step to take (a crowded frame past its step budget): the start is the fit, and it
        // needs only three pixels of the window — the same values `fill` would give them.
        let len = (lo..=hi).count().min(W);
        let shapes = d.neighbours.map(|n| n.map(|f| Shape::new(&f)));
        let at = |i: usize| {
            i.checked_sub(lo)
                .filter(|&k| k < len)
                .map(|_| Window::raw_value(d, &shapes, i))
        };
        let start = start_at(peak, s0, at, false);
        return run_none(start, lo, lo + len.saturating_sub(1));
    }
    scratch.win.fill(d, lo, hi);
    let win = &scratch.win;
    let clear = win
        .raw_at(peak)
        .is_some_and(|r0| shape_is_clear(d, peak, r0, s0));
    let mut start = start_at(peak, s0, |i| win.raw_at(i), clear);
    start.s_q16 = start.s_q16.max(s_min_q16).min(s_max_q16).max(1 << 14);
    run(d, scratch, start, s_min_q16, s_max_q16, max_steps)
}

/// Whether the peak pixel `r0` (frame units) over its noise is at least `10 · (1 + s0²)` (s0 in
/// px): where the three top pixels' log curvature is measured to ~10 % or better (its relative
/// scatter grows as s²/SNR — a wide line bends little over ±1 px), so [`start_at`] may take the width
/// and height from it. Below, the half-width search's `s0` is the better start. Compared in squares:
/// `r0² ≥ var · snr_min²`, no root.
fn shape_is_clear(d: &FitData<'_>, peak: usize, r0: i32, s0_q16: i64) -> bool {
    let Ok(r) = u32::try_from(r0) else {
        return false;
    };
    let base = d.base.get(peak).copied().unwrap_or(0);
    let var_q8 = d
        .noise
        .var_q8(i64::from(base) + i64::from(r0))
        .unsigned_abs();
    // snr_min in Q8: 10 · 256 + 10 · s0² (s0 in Q8 px, ≤ 2^11 for the widest σ, so s0² < 2^22).
    let s8 = u32::try_from(s0_q16 >> 8).unwrap_or(u32::MAX).min(1 << 11);
    let snr_min_q8 = 2_560 + ((10 * s8 * s8) >> 8);
    // snr_min² in Q0 (< 2^30 · 2^16 / 2^16), times the variance in frame units².
    let snr2 = mul_u32_wide(snr_min_q8, snr_min_q8) >> 16;
    mul_u32_wide(r, r) >= (var_q8 >> 8).saturating_mul(snr2)
}

/// The fit's start: the peak pixel's residual as height, `s0` as σ and, for the centre, the vertex
/// of the parabola through the logarithms of the peak pixel and its two neighbours (`at`: a pixel's
/// residual in the window, `None` outside) — exact for a noiseless sampled Gaussian, so one
/// Gauss–Newton step lands within a few per cent of the converged fit's scatter even at peak SNR 1000
/// (a parabola through the values themselves is pulled up to 0.1 px toward the pixel's centre, which
/// a step only cuts to 5–10 %). Where one of the three is not positive, the values' own parabola.
///
/// With `shape` (a fit that takes steps), the same log parabola also gives the width and height:
/// its curvature is 1/s² and its top `ln A`, exact for a sampled Gaussian too, where the peak pixel
/// and the half-width search's `s0` are off by up to ~10 % — a start that close lets the first step
/// settle the height and width as well as the centre, and weighs the pixels from a better model.
/// The width is held within ¾ … 4/3 of `s0` (three noisy pixels of a weak line can say anything),
/// the height within 1 … 2 × the peak pixel's.
fn start_at(peak: usize, s0: i64, at: impl Fn(usize) -> Option<i32>, shape: bool) -> Params {
    let r0 = at(peak).unwrap_or(0);
    let rl = peak.checked_sub(1).and_then(&at).unwrap_or(r0);
    let rr = at(peak + 1).unwrap_or(r0);
    start_from(peak, s0, [rl, r0, rr], shape)
}

/// [`start_at`] from the three residuals left of, at and right of `peak` (one copy for every kind
/// of `at`).
#[inline(never)]
fn start_from(peak: usize, s0: i64, [rl, r0, rr]: [i32; 3], shape: bool) -> Params {
    let mut p = Params {
        a_q8: (i64::from(r0) << 8).max(256),
        mu_q16: (peak as i64) << 16,
        s_q16: s0,
        c_q8: 0,
    };
    if !(rl > 0 && r0 > 0 && rr > 0) {
        p.mu_q16 += vertex_q16(rl, r0, rr);
        return p;
    }
    let (l, m, r) = (
        log2_q16(rl.unsigned_abs()),
        log2_q16(r0.unsigned_abs()),
        log2_q16(rr.unsigned_abs()),
    );
    let delta_q16 = vertex_q16(l, m, r);
    p.mu_q16 += delta_q16;
    // The curvature in log2 units (Q16 per px²); logs below 2^22, so no overflow.
    let den = 2 * m - l - r;
    if shape && den > 0 {
        let (s, a_q8) = log_shape(r0, den, delta_q16);
        // 4/3 as 87 381 / 2^16 (a multiply, not a 64-bit division).
        p.s_q16 = s.max((3 * s0) >> 2).min((s0 * 87_381) >> 16);
        p.a_q8 = a_q8.max(p.a_q8);
    }
    p
}

/// sqrt(log2 e) in Q14 (1.2011224…, Python `decimal`, rounded to nearest).
const SQRT_LOG2E_Q14: u32 = 19_679;

/// σ (Q16 px) and height (Q8) of the log parabola with curvature `den` (> 0, log2 units Q16 per
/// px²) and vertex `delta_q16` from the peak pixel of value `r0` (> 0): `s = sqrt(log2 e / den)`
/// through the `1/sqrt` table (0.4 %: a start), and `A = r0 · 2^(δ² · den / 2)` with the exponent
/// held below 1 (δ ≤ ½ px) through the `2^-f` table.
fn log_shape(r0: i32, den: i32, delta_q16: i64) -> (i64, i64) {
    // 1/sqrt(den) = m · 2^h / 2^46; s_q16 = sqrt(log2 e) · 2^24 / sqrt(den) = C_q14 · m · 2^(h − 36).
    let (m, h) = rsqrt_parts(den.unsigned_abs().into());
    let s = i64::from((SQRT_LOG2E_Q14 * m.unsigned_abs()) >> 36u32.saturating_sub(h).min(31));
    // t = δ² · den / 2 in Q16: δ² (Q32, ≤ 2^30: |δ| ≤ ½ px) · den (< 2^23) < 2^53, one split
    // 32-bit product.
    let d = u32::try_from(delta_q16.unsigned_abs())
        .unwrap_or(1 << 15)
        .min(1 << 15);
    let t = (mul_u32_wide(d * d, den.unsigned_abs()) >> 33).min(65_535) as usize;
    // 2^t = 2 · 2^-(1 − t), f = 1 − t in (0, 1] (Q16).
    let f = 65_536 - t;
    let (i, rem) = (f >> 10, ((f >> 2) & 255) as i32);
    let t0 = i32::from(EXP2_Q15.get(i).copied().unwrap_or(0));
    let t1 = i32::from(EXP2_Q15.get(i + 1).copied().unwrap_or(0));
    let v = t0 - (((t0 - t1) * rem) >> 8); // 2^-f, Q15
                                           // A_q8 = r0 · 2 · v / 2^15 · 2^8.
    (s, mul_i32_wide(r0, v) >> 6)
}

/// Offset (Q16 px) of the vertex of the parabola through `(−1, l)`, `(0, m)`, `(1, r)` from the
/// middle: `(r − l) / (2 (2m − l − r))` rounded toward zero, clamped to ±½ px; 0 unless the parabola
/// opens downward. Exact for a curvature `2m − l − r` below 2^30 (beyond, both are rounded to 31
/// bits first). Sixteen restoring-division steps (~100 instructions), not a 64-bit division.
fn vertex_q16(l: i32, m: i32, r: i32) -> i64 {
    // 32-bit values: every sum below is exact in i64.
    let (l, m, r) = (i64::from(l), i64::from(m), i64::from(r));
    let den = 2 * m - l - r;
    if den <= 0 {
        return 0;
    }
    let num = r - l;
    let n = num.unsigned_abs();
    let d = den.unsigned_abs();
    let q = if n >= d {
        // |δ| ≥ ½: the clamp.
        1 << 15
    } else {
        // n < d; 2d below 2^32 after a common shift, so every doubled remainder fits 32 bits.
        let sh = (64 - leading_zeros_u64(d)).saturating_sub(30);
        let (n, d2) = ((n >> sh) as u32, ((d >> sh) as u32) << 1);
        let (mut rem, mut q) = (n, 0u32);
        for _ in 0..16 {
            rem <<= 1;
            q <<= 1;
            if rem >= d2 {
                rem -= d2;
                q |= 1;
            }
        }
        i64::from(q)
    };
    if num < 0 {
        -q
    } else {
        q
    }
}

/// log2(1 + i/64) in Q16 for i = 0 … 63 (Python `decimal`, 50 digits, rounded to nearest); i = 64
/// is 2^16.
const LOG2_Q16: [u16; 64] = [
    0, 1466, 2909, 4331, 5732, 7112, 8473, 9814, 11136, 12440, 13727, 14996, 16248, 17484, 18704,
    19909, 21098, 22272, 23433, 24579, 25711, 26830, 27936, 29029, 30109, 31178, 32234, 33279,
    34312, 35334, 36346, 37346, 38336, 39316, 40286, 41246, 42196, 43137, 44068, 44990, 45904,
    46809, 47705, 48593, 49472, 50344, 51207, 52063, 52911, 53751, 54584, 55410, 56229, 57040,
    57845, 58643, 59434, 60219, 60997, 61769, 62534, 63294, 64047, 64794,
];

/// log2(v) in Q16 for v ≥ 1 (0 for 0): the bit position and a 64-step table of the mantissa with
/// straight-line interpolation, within 2^-14 (the curvature term (1/64)² / 8 / ln 2 and the
/// rounding) — a start's centre moves by less than 10⁻³ px for it. Multiplies and shifts only.
fn log2_q16(v: u32) -> i32 {
    // log2(1) = 0 is also the answer for 0.
    let v = v.max(1);
    let lz = leading_zeros_u32(v);
    let n = v << lz; // top bit at 31
    let (i, rem) = (((n >> 25) & 63) as usize, ((n >> 17) & 255) as i32);
    let t0 = i32::from(LOG2_Q16.get(i).copied().unwrap_or(0));
    let t1 = LOG2_Q16.get(i + 1).map_or(1 << 16, |&t| i32::from(t));
    ((31 - lz as i32) << 16) + t0 + (((t1 - t0) * rem) >> 8)
}

/// What [`run`] returns with no step allowed: the start, its σ as the centre's uncertainty, over
/// the window `lo ..= hi`.
fn run_none(p: Params, lo: usize, hi: usize) -> Fit {
    Fit {
        center_q16: p.mu_q16,
        center_sigma_q16: p.s_q16,
        sigma_q16: p.s_q16,
        height_q8: p.a_q8,
        lo: u16::try_from(lo).unwrap_or(u16::MAX),
        hi: u16::try_from(hi).unwrap_or(u16::MAX),
        converged: false,
        steps: 0,
    }
}

/// Fits a line again from an earlier fit `first` over the same window, e.g. once its neighbours'
/// profiles are known (`d.neighbours`): the start is already close, so it settles in a step or two.
///
/// Loop bounds: as [`fit_line`].
pub fn refit_line(
    d: &FitData<'_>,
    first: &Fit,
    s_min_q16: i64,
    s_max_q16: i64,
    max_steps: usize,
) -> Fit {
    refit_line_in(
        d,
        first,
        s_min_q16,
        s_max_q16,
        max_steps,
        &mut FitScratch::new(),
    )
}

/// [`refit_line`] with its window and weights in `scratch`. Loop bounds: as [`fit_line`].
pub fn refit_line_in(
    d: &FitData<'_>,
    first: &Fit,
    s_min_q16: i64,
    s_max_q16: i64,
    max_steps: usize,
    scratch: &mut FitScratch,
) -> Fit {
    let s_max_q16 = s_max_q16.max(s_min_q16);
    scratch
        .win
        .fill(d, usize::from(first.lo), usize::from(first.hi));
    let start = Params {
        a_q8: first.height_q8.max(256),
        mu_q16: first.center_q16,
        s_q16: first.sigma_q16.max(s_min_q16).min(s_max_q16).max(1 << 14),
        c_q8: 0,
    };
    run(d, scratch, start, s_min_q16, s_max_q16, max_steps)
}

/// The Gauss–Newton steps over a gathered window. Loop bound: ≤ min(`max_steps`, [`ITERATIONS`])
/// steps, each one pass over the window (the first also weighs its pixels) and a 4 × 4 elimination.
fn run(
    d: &FitData<'_>,
    scratch: &mut FitScratch,
    start: Params,
    s_min_q16: i64,
    s_max_q16: i64,
    max_steps: usize,
) -> Fit {
    let FitScratch { win, weights } = scratch;
    let win: &Window = win;
    let (lo, hi) = (win.lo, win.lo + win.len.saturating_sub(1));
    let r0 = start.a_q8 >> 8;
    // Reduced units: the largest residual (or the start height) below 2^16.
    let big = win
        .big
        .max(u32::try_from(r0.unsigned_abs()).unwrap_or(u32::MAX));
    let reduce = (32 - leading_zeros_u32(big)).saturating_sub(16);
    // The weights' reference: the noise at the window's lowest baseline plus the start line's
    // lowest value, at one of its ends — at or below every pixel's level, so at or below every
    // pixel's noise (the noise grows with the level), and close to the least of them, so the largest
    // τ is near 2^12 and keeps its digits. Its σ (× 16, frame units) is v · 1/sqrt(v), a product.
    // The start's model, for the reference and the first step.
    let model0 = Model::new(&start, reduce);
    let var_ref = {
        let model = &model0;
        let (u0, du) = model.u_along(&start, lo);
        let last = (win.len.saturating_sub(1) as i32).wrapping_mul(du);
        let g_end = height_q14(u0).min(height_q14(u0.wrapping_add(last)));
        let level = i64::from(win.base_min).saturating_add(line_units(model, reduce, g_end));
        d.noise.var_q8(level).max(1)
    };
    let (m_ref, h_ref) = rsqrt_parts(var_ref.unsigned_abs());
    weights.h_ref = h_ref;
    let sd_q4 = var_ref.saturating_mul(i64::from(m_ref)) >> (46 - h_ref.min(46));
    // Settling tolerances (see below) from the start: they only need the noise scale.
    let tol_mu = Recip::new(start.a_q8.max(1))
        .and_then(|r| r.scale(start.s_q16.saturating_mul(sd_q4), 4))
        .unwrap_or(0)
        .max(SETTLED_Q16)
        .saturating_mul(SETTLE_SCATTERS);
    let tol_a = (sd_q4 << 4).saturating_mul(SETTLE_SCATTERS);
    let mut p = start;
    let mut converged = false;
    let mut steps = 0u8;
    // The centre's σ from the last step's solution (its centre pivot).
    let mut last_sigma: Option<i64> = None;
    let mut model = model0;
    for _ in 0..max_steps.min(ITERATIONS) {
        steps += 1;
        if steps > 1 {
            model = Model::new(&p, reduce);
        }
        // The first step weighs the pixels from the start model in the same pass as its sums.
        let weigh = (steps == 1).then_some((d.noise, h_ref));
        let nm = normal(win, &p, &model, reduce, &mut weights.tau, weigh);
        if nm.used < MIN_PIXELS {
            break;
        }
        let a_red = reduced(p.a_q8, reduce).max(1);
        let Some(sol) = solve(&nm, a_red) else {
            break;
        };
        let [da, dmu, ds, dc] = sol.x;
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
            last_sigma = None;
            break;
        }
        last_sigma = center_sigma(&sol, h_ref, &p);
        // The centre's own scatter, shot noise and all, from this step's normal matrix: for a
        // strong line far above the reference noise `tol_mu` stands for.
        let tol_c = tol_mu.max(last_sigma.unwrap_or(0).saturating_mul(SETTLE_SCATTERS));
        // Settled: each parameter moved by at most [`SETTLE_SCATTERS`] × its scatter — the centre
        // and the width by the centre's σ from this step (at least s·σ/A with the reference noise
        // σ, taken at the start), the height by σ — or, for the height and width, by 1/128 of
        // themselves. Each Gauss–Newton step leaves ~5–10 % of the distance it moved (a step from a
        // centre 0.1 px off lands 0.005–0.01 px off: the coupled height, width and offset starts; from
        // a clear start's width and height less), so what is left after such a step is a fifth of
        // the scatter, or 0.1 % of the height and width, or less. At least the band the 32-bit
        // model's own rounding leaves a noiseless fit bouncing in (2^-12 px).
        let settled = (p.mu_q16 - before.mu_q16).abs() <= tol_c
            && (p.a_q8 - before.a_q8).abs() <= tol_a.max(before.a_q8 >> 7)
            && (p.s_q16 - before.s_q16).abs() <= tol_c.max(before.s_q16 >> 7);
        if settled {
            converged = true;
            break;
        }
    }
    let center_sigma_q16 = last_sigma.unwrap_or(p.s_q16);
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

/// A pixel's whitening factor τ (Q12) at baseline `base` and model height `g` (Q14):
/// `sqrt(var_ref / var)` from the noise at baseline + line, as the mantissa of `1/sqrt(var)` shifted
/// by its exponent's distance from the reference's `h_ref` (a variance at or above the reference's
/// has an exponent at or below it). Out of line: it runs once per pixel of a fit's first pass only,
/// and the steps' loop stays small.
#[inline(never)]
fn tau_at(noise: &NoiseModel, model: &Model, reduce: u32, h_ref: u32, base: i32, g: i32) -> i32 {
    let line = line_units(model, reduce, g);
    let var = noise.var_q8(i64::from(base).saturating_add(line));
    let (m, h) = rsqrt_parts(var.unsigned_abs());
    (m >> h_ref.saturating_sub(h).min(31)) >> 3
}

/// The model line (without offset) at height `g` (Q14) in frame units, ≥ 0: ⌊a_red · g · 2^reduce /
/// 2^14⌋ (reduce ≤ 16, so < 2^33). a_red ≤ 2^16 and g ≤ 2^14: the product is below 2^31, and one
/// 32-bit shift gives the same value as the 64-bit shift pair (a library call each on the M0).
#[inline(always)]
fn line_units(model: &Model, reduce: u32, g: i32) -> i64 {
    let ag = (model.a_red * g).max(0);
    match reduce {
        0..=14 => i64::from(ag >> (14 - reduce)),
        _ => i64::from(ag) << (reduce.min(16) - 14),
    }
}

/// `v_q8` (frame units, Q8) in reduced units, clamped to ±2^16.
fn reduced(v_q8: i64, reduce: u32) -> i32 {
    (v_q8 >> (8 + reduce).min(63)).clamp(-(1 << 16), 1 << 16) as i32
}

/// The line (without offset) in reduced units at the window's pixels, with its Jacobian, for `p`.
struct Model {
    inv_s: InvSigma,
    a_red: i32,
    c_red: i32,
}

impl Model {
    fn new(p: &Params, reduce: u32) -> Self {
        Self {
            inv_s: InvSigma::new(p.s_q16),
            a_red: reduced(p.a_q8, reduce).max(1),
            c_red: reduced(p.c_q8, reduce),
        }
    }

    /// u = (x − μ)/s in Q14 along the window: the first pixel's (one 64-bit product per pass) and
    /// the step per pixel (1/s in Q14, exactly: x moves by whole pixels). |u| stays below 2^23 over a
    /// window of ≤ 33 px.
    fn u_along(&self, p: &Params, lo: usize) -> (i32, i32) {
        let dx0 = ((lo as i64) << 16) - p.mu_q16;
        let u0 = (dx0.clamp(-(1 << 30), 1 << 30) * i64::from(self.inv_s.q14)) >> 16;
        (u0.clamp(-(1 << 24), 1 << 24) as i32, self.inv_s.q14)
    }
}

/// g alone in Q14 for u in Q14, as [`shape_at`] gives it (out of line: two calls a fit).
#[inline(never)]
fn height_q14(u: i32) -> i32 {
    const LIMIT: i32 = (1 << 17) - 1;
    exp_neg_q14(half_square_q12(u.clamp(-LIMIT, LIMIT)))
}

/// `(g, g·u, g·u²)` in Q14 for u in Q14 (clamped to ±8, where g is 0 anyway).
#[inline]
fn shape_at(u: i32) -> (i32, i32, i32) {
    const LIMIT: i32 = (1 << 17) - 1;
    let u = u.clamp(-LIMIT, LIMIT);
    let g = exp_neg_q14(half_square_q12(u));
    // |g·u| ≤ 2^14 · (2^17 − 1) < 2^31; |g·u| peaks at 0.61 (Q14 < 10^4), so |gu·u| < 2^31 too.
    let gu = (g * u) >> 14;
    let guu = (gu * u) >> 14;
    (g, gu, guu)
}

/// The whitened normal equations at `p`. Each pixel's whitening factor τ is read from `tau`, or,
/// with `weigh` (the noise model and the reference exponent `h_ref`), computed from the model there
/// ([`tau_at`]) and written to `tau`. Bounds: |J| ≤ 2^14 (Q14), τ ≤ 2^12 · 1.01, so |J_w| ≤ 2^12.01
/// and each product < 2^24.03 (sums over ≤ 33 px < 2^30); |ε| = |e·τ| ≤ [`E_LIMIT`] · 2^12.01.
///
/// Loop bound: one pass over the window.
fn normal(
    win: &Window,
    p: &Params,
    model: &Model,
    reduce: u32,
    tau: &mut [i32; W],
    weigh: Option<(&NoiseModel, u32)>,
) -> Normal {
    let (mut u, du) = model.u_along(p, win.lo);
    let sh = reduce.min(31);
    // The ten upper-triangle sums and the gradient, written out, all in 32-bit adds. The residual is
    // held to ±E_LIMIT so that ε = ε_h · 2^13 + ε_l splits each gradient product into two 32-bit
    // ones whose sums over ≤ 33 px stay below 2^31: |ε_h| < 2^13.6 and ε_l < 2^13, times |J_w| <
    // 2^12.01, times 2^5.05 px.
    let (mut n00, mut n01, mut n02, mut n03, mut n11) = (0i32, 0i32, 0i32, 0i32, 0i32);
    let (mut n12, mut n13, mut n22, mut n23, mut n33) = (0i32, 0i32, 0i32, 0i32, 0i32);
    let (mut b0h, mut b1h, mut b2h, mut b3h) = (0i32, 0i32, 0i32, 0i32);
    let (mut b0l, mut b1l, mut b2l, mut b3l) = (0i32, 0i32, 0i32, 0i32);
    let mut used = 0usize;
    let cells = win.resid.iter().zip(win.base.iter()).zip(tau.iter_mut());
    for ((&r, &base), t) in cells.take(win.len) {
        // u moves by 1/s per pixel: the same as the first pixel's u + k/s, in wrapping 32 bits.
        let uk = u;
        u = u.wrapping_add(du);
        if r == UNUSABLE {
            *t = 0;
            continue;
        }
        let (g, gu, guu) = shape_at(uk);
        if let Some((noise, h_ref)) = weigh {
            *t = tau_at(noise, model, reduce, h_ref, base, g);
        }
        let tau = *t;
        if tau == 0 {
            continue;
        }
        let r_red = (r >> sh).clamp(-(1 << 17), 1 << 17);
        let m = ((model.a_red * g) >> 14) + model.c_red;
        let e = (r_red - m).clamp(-E_LIMIT, E_LIMIT);
        let eps = e * tau;
        let (eh, el) = (eps >> 13, eps & 0x1fff);
        let j0 = (g * tau) >> 14;
        let j1 = (gu * tau) >> 14;
        let j2 = (guu * tau) >> 14;
        let j3 = tau;
        n00 += j0 * j0;
        n01 += j0 * j1;
        n02 += j0 * j2;
        n03 += j0 * j3;
        n11 += j1 * j1;
        n12 += j1 * j2;
        n13 += j1 * j3;
        n22 += j2 * j2;
        n23 += j2 * j3;
        n33 += j3 * j3;
        b0h += j0 * eh;
        b1h += j1 * eh;
        b2h += j2 * eh;
        b3h += j3 * eh;
        b0l += j0 * el;
        b1l += j1 * el;
        b2l += j2 * el;
        b3l += j3 * el;
        used += 1;
    }
    let b = |h: i32, l: i32| (i64::from(h) << 13) + i64::from(l);
    Normal {
        n: [
            [n00, n01, n02, n03],
            [n01, n11, n12, n13],
            [n02, n12, n22, n23],
            [n03, n13, n23, n33],
        ],
        b: [b(b0h, b0l), b(b1h, b1l), b(b2h, b2l), b(b3h, b3l)],
        used,
    }
}

/// A solved step: `x` = relative parameter changes (Q16, order A, μ, s, c), and the centre's final
/// pivot: `[N⁻¹]μμ = 2^(2·mu_shift) / mu_pivot`.
struct Solved {
    x: [i64; 4],
    mu_pivot: i64,
    mu_shift: i32,
}

/// `v · 2^-k` for a signed shift (`k` < 0 shifts left), in `i64`.
fn shift_i64(v: i64, k: i32) -> i64 {
    if k >= 0 {
        v >> k.min(63)
    } else {
        v << (-k).min(62)
    }
}

/// Solves the step `N x = b / A` by symmetric Gaussian elimination on `S N S`, S = diag 2^-e putting
/// every diagonal in [2^13, 2^15): a positive-definite matrix's entries and Schur complements then
/// stay below 2^15, so every update is one 32-bit multiply, and each pivot's reciprocal (Q30) is
/// exact without a division ([`pivot_recip_q30`]). 15 significant bits are ample for a Gauss–Newton step (the fixed point is set by
/// the gradient, which is exact), and for the centre's σ: the centre is eliminated last, and its pivot
/// differs from its own diagonal only by its small coupling to the even parameters. `None` when `N`
/// is not positive definite to that precision or a value leaves its range (the fit then ends).
///
/// Loop bound: none — a fixed 4 × 4 elimination written out: four exact pivot reciprocals
/// ([`pivot_recip_q30`]), one reciprocal of A, 22 wide products.
fn solve(nm: &Normal, a_red: i32) -> Option<Solved> {
    // The parameters in elimination order (A, s, c, then μ: the centre last, so its final pivot is
    // 1 / [M⁻¹]μμ of the scaled matrix): row/column 0 = A, 1 = s, 2 = c, 3 = μ.
    let [[n_aa, n_am, n_as, n_ac], [_, n_mm, n_ms, n_mc], [_, _, n_ss, n_sc], [_, _, _, n_cc]] =
        nm.n;
    let [b_a, b_m, b_s, b_c] = nm.b;
    // S = diag 2^-e with each scaled diagonal in [2^13, 2^15).
    let ex = |diag: i32| -> Option<i32> {
        (diag > 0).then(|| (32 - leading_zeros_u32(diag.unsigned_abs()) as i32 - 14) >> 1)
    };
    let (e0, e1, e2, e3) = (ex(n_aa)?, ex(n_ss)?, ex(n_cc)?, ex(n_mm)?);
    // In 32 bits: a scaled entry is below 2^15 (|N_ij| ≤ sqrt(N_ii N_jj), exactly, for these sums),
    // so a left shift keeps every bit — the 64-bit shift's value without its library call.
    let sc = |v: i32, k: i32| {
        if k >= 0 {
            v >> k.min(31)
        } else {
            v << (-k).min(31)
        }
    };
    let (m00, m01, m02, m03) = (
        sc(n_aa, 2 * e0),
        sc(n_as, e0 + e1),
        sc(n_ac, e0 + e2),
        sc(n_am, e0 + e3),
    );
    let (mut m11, mut m12, mut m13) = (sc(n_ss, 2 * e1), sc(n_sc, e1 + e2), sc(n_ms, e1 + e3));
    let (mut m22, mut m23) = (sc(n_cc, 2 * e2), sc(n_mc, e2 + e3));
    let mut m33 = sc(n_mm, 2 * e3);
    // b scaled by S, then by a common power of two below 2^15.
    let (b0, b1, b2, b3) = (
        shift_i64(b_a, e0),
        shift_i64(b_s, e1),
        shift_i64(b_c, e2),
        shift_i64(b_m, e3),
    );
    let bits = |v: i64| 64 - leading_zeros_u64(v.unsigned_abs()) as i32;
    let bs = bits(b0).max(bits(b1)).max(bits(b2)).max(bits(b3)) - 15;
    let bn = |v: i64| i32::try_from(shift_i64(v, bs)).ok();
    let (b0, mut b1, mut b2, mut b3) = (bn(b0)?, bn(b1)?, bn(b2)?, bn(b3)?);
    // Forward elimination, pivot by pivot; l_ip = M_pi / M_pp in Q15 is kept for the back
    // substitution (|l| < 2^16 or refused), and every update is one 32-bit product.
    let f = |m: i32, ip: i32| -> Option<i32> {
        let v = wide_q15(m, ip);
        (v.unsigned_abs() < 1 << 16).then_some(v as i32)
    };
    let u = |f: i32, m: i32| (f * m) >> 15;
    let ub = |f: i32, b: i32| i32::try_from(wide_q15(f, b)).ok();
    let i0 = pivot_recip_q30(m00)?;
    let (l10, l20, l30) = (f(m01, i0)?, f(m02, i0)?, f(m03, i0)?);
    m11 -= u(l10, m01);
    m12 -= u(l10, m02);
    m13 -= u(l10, m03);
    m22 -= u(l20, m02);
    m23 -= u(l20, m03);
    m33 -= u(l30, m03);
    b1 = b1.checked_sub(ub(l10, b0)?)?;
    b2 = b2.checked_sub(ub(l20, b0)?)?;
    b3 = b3.checked_sub(ub(l30, b0)?)?;
    let i1 = pivot_recip_q30(m11)?;
    let (l21, l31) = (f(m12, i1)?, f(m13, i1)?);
    m22 -= u(l21, m12);
    m23 -= u(l21, m13);
    m33 -= u(l31, m13);
    b2 = b2.checked_sub(ub(l21, b1)?)?;
    b3 = b3.checked_sub(ub(l31, b1)?)?;
    let i2 = pivot_recip_q30(m22)?;
    let l32 = f(m23, i2)?;
    m33 -= u(l32, m23);
    b3 = b3.checked_sub(ub(l32, b2)?)?;
    let i3 = pivot_recip_q30(m33)?;
    // Back substitution: y_i = b_i / M_ii − Σ_j l_ji · y_j, in Q15 (|y| < 2^31 or refused).
    let (q, g) = (wide_q15, wide_q15);
    let y3 = i32::try_from(q(b3, i3)).ok()?;
    let y2 = i32::try_from(q(b2, i2) - g(l32, y3)).ok()?;
    let y1 = i32::try_from(q(b1, i1) - g(l21, y2) - g(l31, y3)).ok()?;
    let y0 = i32::try_from(q(b0, i0) - g(l10, y1) - g(l20, y2) - g(l30, y3)).ok()?;
    // x_real = y · 2^(bs − e − 15); the step relative to A in Q16: × 2^16 / A.
    let ra = Recip::new(i64::from(a_red.max(1)))?;
    let x = |y: i32, e: i32| {
        ra.scale(i64::from(y), bs - e + 1)
            .unwrap_or(if y < 0 { -(1 << 40) } else { 1 << 40 })
            .clamp(-(1 << 40), 1 << 40)
    };
    Some(Solved {
        x: [x(y0, e0), x(y3, e3), x(y1, e1), x(y2, e2)],
        mu_pivot: i64::from(m33),
        mu_shift: -e3,
    })
}

/// `a · b / 2^15` in full (floor), one out-of-line wide product: [`solve`] takes 22 of them, and a
/// call is smaller than the product written out.
#[inline(never)]
fn wide_q15(a: i32, b: i32) -> i64 {
    mul_i32_wide(a, b) >> 15
}

/// `⌊2^30 / piv⌋` exactly (the Q30 reciprocal of a pivot in [2^5, 2^15): in (2^15, 2^25]), from
/// the table-and-Newton reciprocal `q` of `piv · 2^k` in [2^15, 2^16), one correction by the
/// remainder and ≤ 3 unit steps — ~40 instructions where a library division takes ~170. `None`
/// outside that range (below 2^5 the matrix is not positive definite to the elimination's
/// precision; a Schur complement is at most its diagonal, so no pivot reaches 2^15).
fn pivot_recip_q30(piv: i32) -> Option<i32> {
    if !(1 << 5..1 << 15).contains(&piv) {
        return None;
    }
    let pu = piv.unsigned_abs();
    let k = leading_zeros_u32(pu).saturating_sub(16).min(10);
    // q ≤ 2^32 / (piv · 2^k) < q + 2, so r = q · 2^(k−2) is at most 2^(k−2) + 1 below 2^30 / piv and
    // the remainder below piv · (2^(k−2) + 1) < 2^15; rem · q / 2^(32−k) (< 2^32) is its quotient by
    // piv, at most 1 short.
    let q = recip_u32_max(pu << k);
    let mut r = (q << k) >> 2;
    let rem = (1u32 << 30).wrapping_sub(r.wrapping_mul(pu));
    r = r.wrapping_add(rem.wrapping_mul(q) >> (32 - k));
    let rem = (1u32 << 30).wrapping_sub(r.wrapping_mul(pu)) as i32;
    i32::try_from(super::math::settle_quotient(r, rem, piv, 3)).ok()
}

/// σ of the centre in px (Q16): `s · σ_ε · sqrt([N⁻¹]μμ) / A` with the whitened noise
/// `σ_ε = 2^(39 − h_ref)` (frame units × Q12, see [`Weights`]) and `[N⁻¹]μμ = 2^(2d) / pivot`; the
/// reduced units cancel. One 32-bit square root (the pivot is below 2^15) and one reciprocal.
fn center_sigma(sol: &Solved, h_ref: u32, p: &Params) -> Option<i64> {
    if sol.mu_pivot <= 0 || sol.mu_pivot >= 1 << 15 || !(-20..=40).contains(&sol.mu_shift) {
        return None;
    }
    // sqrt(pivot) · 2^8, from pivot · 2^16 < 2^31 (a 32-bit root).
    let sp8 = crate::fixed::isqrt_u128(u128::from(u64::try_from(sol.mu_pivot).ok()? << 16)) as i64;
    // With σ (× 16) · τ = 2^(43 − h_ref) and the scales of the sums (Q12 Jacobians, a Q8 height),
    // σ_μ = s_q16 · 2^(55 − h_ref + d) / (sp8 · a_q8): one reciprocal of the product (< 2^62).
    let den = sp8.max(1) * p.a_q8.clamp(1, 1 << 46);
    let k = 55 - i32::try_from(h_ref).ok()? + sol.mu_shift;
    let sig = Recip::new(den)?.scale(p.s_q16.clamp(1, 1 << 21), k)?;
    Some(sig.max(1))
}

/// Height (Q8) × σ (Q16) × sqrt(2π) → area in frame units × px.
///
/// With t = σ · sqrt(2π) = t₁ · 2^24 + t₀ (t₀ < 2^24): ⌊h · t / 2^40⌋ = ⌊(h · t₁ + ⌊h · t₀ / 2^24⌋) / 2^16⌋
/// (nested floors by powers of two), so a height within `i32` and t below 2^55 take three split
/// 32-bit products instead of three 128-bit ones (nine library multiplies on the M0); the same value.
pub fn area(fit: &Fit) -> i64 {
    let (Ok(h), Ok(s), Ok(c)) = (
        i32::try_from(fit.height_q8),
        u32::try_from(fit.sigma_q16),
        u32::try_from(super::math::SQRT_2PI_Q16),
    ) else {
        return area_wide(fit);
    };
    let t = super::math::mul_u32_wide(s, c);
    let Ok(t1) = i32::try_from(t >> 24) else {
        return area_wide(fit);
    };
    let t0 = (t & 0xff_ffff) as i32;
    let low = super::math::mul_i32_wide(h, t0) >> 24;
    (super::math::mul_i32_wide(h, t1) + low) >> 16
}

/// [`area`] through 128-bit products, for any height and σ.
fn area_wide(fit: &Fit) -> i64 {
    let v = i128::from(fit.height_q8)
        * i128::from(fit.sigma_q16)
        * i128::from(super::math::SQRT_2PI_Q16);
    (v >> 40).clamp(i128::from(i64::MIN), i128::from(i64::MAX)) as i64
}

#[cfg(test)]
mod tests {
    use super::super::math::{exp_neg_q16, isqrt_u128};
    use super::super::testkit::{pixel_gauss, Rng};
    use super::*;

    /// The split area is the 128-bit one, for heights and σ either side of the 32-bit limits.
    #[test]
    fn split_area_is_the_wide_one() {
        let mut x = 0x0a7e_a5ee_d123_4567u64;
        let mut cases = std::vec![];
        for h in [
            0i64,
            1,
            -1,
            i32::MAX.into(),
            i32::MIN.into(),
            1 << 31,
            -(1 << 40),
        ] {
            for s in [
                0i64,
                1,
                1 << 16,
                (1 << 21) - 1,
                u32::MAX.into(),
                1 << 32,
                -5,
            ] {
                cases.push((h, s));
            }
        }
        for _ in 0..20_000 {
            crate::test_rng::step64(&mut x);
            // Below 2^54 each: the wide product stays within i128.
            let h = (x as i64) >> (10 + x % 54);
            let s = ((x >> 8) as i64) >> (10 + (x >> 3) % 54);
            cases.push((h, s));
        }
        for (h, s) in cases {
            let f = Fit {
                center_q16: 0,
                center_sigma_q16: 0,
                sigma_q16: s,
                height_q8: h,
                lo: 0,
                hi: 0,
                converged: true,
                steps: 0,
            };
            assert_eq!(area(&f), area_wide(&f), "h {h} s {s}");
        }
    }

    #[test]
    fn exp_table_is_close_to_the_exact_exponential() {
        for x in (0..(1 << 17)).step_by(7) {
            // exp_neg_q16 is accurate to a few Q30 steps.
            let exact = exp_neg_q16(i64::from(x) << 4) >> 16;
            let got = i64::from(exp_neg_q14(x));
            assert!(
                (got - exact).abs() <= 2 + exact / 5_000,
                "x {x}: {got} vs {exact}"
            );
        }
        assert_eq!(exp_neg_q14(0), 1 << 14);
        assert_eq!(exp_neg_q14(-5), 1 << 14);
    }

    #[test]
    fn rsqrt_parts_are_within_half_a_percent() {
        for v in [
            1u64,
            2,
            3,
            63,
            64,
            65,
            1000,
            65_535,
            1 << 20,
            123_456_789,
            u64::MAX / 3,
        ] {
            let (m, h) = rsqrt_parts(v);
            // 1/sqrt(v) = m · 2^h / 2^46.
            let lhs = (m as u128).pow(2) << (2 * h); // m² · 2^2h = 2^92 / v ideally
            let want = (1u128 << 92) / v as u128;
            let err = lhs.abs_diff(want) * 1000 / want;
            assert!(err <= 8, "v {v}: {lhs} vs {want}");
        }
    }

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

    /// With no step allowed the three-pixel start is the window's: the same fit as gathering the
    /// whole window and running no step, near the frame's edges and with neighbours taken out too.
    #[test]
    fn no_step_fit_is_the_gathered_windows() {
        let mut rng = Rng::new(0x7ac1_33f0_9e02_d5b1);
        let nm = noise(10, 0);
        for _ in 0..400 {
            let n = 20 + (rng.next_u64() % 200) as usize;
            let frame: Vec<i32> = (0..n)
                .map(|_| (rng.next_u64() % 70_000) as i32 - 5_000)
                .collect();
            let base: Vec<i32> = (0..n).map(|_| (rng.next_u64() % 3_000) as i32).collect();
            let fl: Vec<u8> = (0..n)
                .map(|_| {
                    if rng.next_u64().is_multiple_of(9) {
                        flags::SATURATED
                    } else {
                        0
                    }
                })
                .collect();
            let peak = (rng.next_u64() % n as u64) as usize;
            let s0 = (1 << 14) + (rng.next_u64() % 600_000) as i64;
            let neighbour = Fit {
                center_q16: ((peak as i64) << 16) + (rng.next_u64() % (20 << 16)) as i64
                    - (10 << 16),
                center_sigma_q16: 1000,
                sigma_q16: 40_000 + (rng.next_u64() % 200_000) as i64,
                height_q8: (rng.next_u64() % (20_000 << 8)) as i64,
                lo: 0,
                hi: 0,
                converged: true,
                steps: 2,
            };
            let with = rng.next_u64().is_multiple_of(2);
            let d = FitData {
                frame: &frame,
                base: &base,
                flag: &fl,
                noise: &nm,
                neighbours: [with.then_some(neighbour), None],
            };
            let mut scratch = FitScratch::new();
            let fast = fit_line_in(&d, peak, s0, 1 << 15, 8 << 16, 0, &mut scratch);
            // The gathered way: fill the window, start from its raw values, run no step.
            let s0c = s0.clamp(1 << 15, 8 << 16);
            let half = ((5 * s0c) >> 17)
                .saturating_add(2)
                .clamp(2, MAX_HALF as i64) as usize;
            let (lo, hi) = (peak.saturating_sub(half), (peak + half).min(n - 1));
            scratch.win.fill(&d, lo, hi);
            let win = &scratch.win;
            let start = start_at(peak, s0c, |i| win.raw_at(i), false);
            let slow = run(&d, &mut scratch, start, 1 << 15, 8 << 16, 0);
            assert_eq!(fast, slow);
        }
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
            // A quarter of the bound: the fit stops once a step moves the centre by less than
            // its scatter, which leaves a few per cent of that step (here ≤ 6 Q16 short of the
            // fixed point, itself ≤ 8 off).
            assert!(err.abs() <= 12, "centre off by {err} (Q16) for s={s}");
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

    #[test]
    fn log2_is_within_its_bound() {
        // round(log2(v) · 2^16), Python `decimal`, 50 digits.
        for (v, want) in [
            (1u32, 0i32),
            (2, 65_536),
            (3, 103_872),
            (1000, 653_118),
            (65_535, 1_048_575),
            (123_456_789, 1_761_570),
            (2_147_483_647, 2_031_616),
        ] {
            let got = log2_q16(v);
            assert!((got - want).abs() <= 4, "log2 {v}: {got} vs {want}");
        }
        // log2(v²) = 2 log2(v) everywhere, to the bound (2^-14 · 2^16 = 4 steps each).
        let mut rng = Rng::new(3);
        for _ in 0..2000 {
            let v = 1 + (rng.next_u64() % 46_340) as u32;
            let (one, two) = (log2_q16(v), log2_q16(v * v));
            assert!((two - 2 * one).abs() <= 12, "v {v}: {two} vs 2 × {one}");
        }
    }

    #[test]
    fn log_parabola_start_finds_a_sampled_gaussian_centre() {
        // Point-sampled Gaussian: ln is a parabola, so the log vertex is exact up to rounding;
        // the values' own parabola is pulled toward the pixel.
        for s in [40_000i64, 70_000, 150_000] {
            for off in [-30_000i64, -9_000, 0, 12_345, 31_000] {
                let at = |i: usize| {
                    let dx = ((i as i64) << 16) - ((50i64 << 16) + off);
                    let u = (dx << 16) / s;
                    Some((exp_neg_q16((u * u) >> 17) >> 10) as i32)
                };
                let p = start_at(50, s, at, false);
                let err = p.mu_q16 - ((50i64 << 16) + off);
                // 0.003 px: the table's 2^-14 over a curvature of ≥ 1/(2.3² · ln 2) per px².
                assert!(err.abs() <= 200, "s {s} off {off}: log vertex off by {err}");
                let (l, m, r) = (at(49).unwrap(), at(50).unwrap(), at(51).unwrap());
                let plain = vertex_q16(l, m, r);
                if off.abs() > 5_000 && s < 100_000 {
                    assert!((plain - off).abs() > err.abs(), "s {s} off {off}");
                }
            }
        }
    }

    /// The log parabola's width and height against the wide arithmetic they stand for:
    /// `s = sqrt(log2 e / den)` and `A = r0 · e^(ln 2 · δ² · den / 2)`, with log2 e = 1.442695040…
    /// and ln 2 = 0.693147180… in Q30 (Python `decimal`, 50 digits, rounded) and the exponential
    /// from [`exp_neg_q16`].
    #[test]
    fn log_shape_matches_the_wide_formula() {
        const LOG2E_Q30: u128 = 1_549_082_005;
        const LN2_Q30: i128 = 744_261_118;
        let mut rng = Rng::new(37);
        let mut checked = 0;
        for _ in 0..5_000 {
            let den = 64 + (rng.next_u64() % ((1 << 22) - 64)) as i32;
            let delta = (rng.next_u64() % (1 << 16)) as i64 - (1 << 15);
            let r0 = 1 + (rng.next_u64() % (1 << 30)) as i32;
            let (s, a) = log_shape(r0, den, delta);
            // s_q16² = log2 e · 2^48 / den.
            let want_s = isqrt_u128((LOG2E_Q30 << 18) / den as u128) as i64;
            assert!(
                (s - want_s).abs() * 1_000 <= want_s * 5 + 2_000,
                "den {den}: s {s} vs {want_s}"
            );
            // The exponent δ² · den / 2 in log2 units is held below 1.
            let wide = i128::from(delta) * i128::from(delta) * i128::from(den);
            if wide >= 1 << 49 {
                continue;
            }
            let y_q16 = ((wide * LN2_Q30) >> 63) as i64;
            let e_q30 = i128::from(exp_neg_q16(y_q16));
            let want_a = ((i128::from(r0) << 38) / e_q30) as i64;
            assert!(
                (a - want_a).abs() * 10_000 <= want_a * 4 + 256,
                "r0 {r0} den {den} δ {delta}: A {a} vs {want_a}"
            );
            checked += 1;
        }
        assert!(checked > 1_000, "only {checked} heights checked");
    }

    /// A noiseless point-sampled Gaussian: the clear start's width and height are the line's.
    #[test]
    fn clear_start_takes_width_and_height_from_the_log_parabola() {
        for s in [60_000i64, 90_000, 140_000] {
            for off in [-30_000i64, -8_000, 0, 21_000] {
                let amp = 1i64 << 20;
                let at = |i: usize| {
                    let dx = ((i as i64) << 16) - ((50i64 << 16) + off);
                    let u = (dx << 16) / s;
                    Some(((amp * exp_neg_q16((u * u) >> 17)) >> 30) as i32)
                };
                // A half-width start 20 % wide: the parabola's σ replaces it.
                let p = start_at(50, s + s / 5, at, true);
                assert!(
                    (p.s_q16 - s).abs() * 100 <= s,
                    "s {s} off {off}: {}",
                    p.s_q16
                );
                let a8 = amp << 8;
                assert!(
                    (p.a_q8 - a8).abs() * 500 <= a8,
                    "s {s} off {off}: A {}",
                    p.a_q8
                );
                // Without `shape`, the half-width σ and the peak pixel stay.
                let q = start_at(50, s + s / 5, at, false);
                assert_eq!((q.s_q16, q.mu_q16), (s + s / 5, p.mu_q16));
                assert_eq!(q.a_q8, i64::from(at(50).unwrap()) << 8);
            }
        }
    }

    /// The clear-shape test is `r0² ≥ var · (10 (1 + s0²))²` in wide arithmetic, up to the
    /// truncations of its 32-bit form (within 2 % of the boundary).
    #[test]
    fn clear_shape_test_is_the_wide_comparison() {
        let nm = noise(3, 41_943);
        let mut rng = Rng::new(41);
        let (mut yes, mut no) = (0, 0);
        for _ in 0..20_000 {
            let b = (rng.next_u64() % 5_000) as i32;
            let r0 = (rng.next_u64() % 400_000) as i32 >> (rng.next_u64() % 12) as u32;
            let r0 = if rng.next_u64().is_multiple_of(16) {
                -r0
            } else {
                r0
            };
            let s0 = (1 << 14) + (rng.next_u64() % ((8 << 16) - (1 << 14))) as i64;
            let frame = std::vec![b + r0; 8];
            let base = std::vec![b; 8];
            let fl = std::vec![0u8; 8];
            let d = FitData {
                frame: &frame,
                base: &base,
                flag: &fl,
                noise: &nm,
                neighbours: [None, None],
            };
            let got = shape_is_clear(&d, 3, r0, s0);
            // r0² · 2^72 ≥ var_q8 · (10 · 2^32 + 10 · s0²)².
            let var = i128::from(nm.var_q8(i64::from(b) + i64::from(r0)));
            let k = 10 * (1i128 << 32) + 10 * i128::from(s0) * i128::from(s0);
            let lhs = if r0 > 0 {
                (i128::from(r0) * i128::from(r0)) << 72
            } else {
                -1
            };
            let rhs = var * k * k;
            let want = lhs >= rhs;
            if got != want {
                assert!((lhs - rhs).abs() * 50 <= rhs, "r0 {r0} s0 {s0} b {b}");
            }
            if got {
                yes += 1;
            } else {
                no += 1;
            }
        }
        assert!(yes > 2_000 && no > 2_000, "{yes} clear, {no} not");
    }

    #[test]
    fn vertex_matches_division() {
        let mut rng = Rng::new(17);
        for _ in 0..20_000 {
            // Magnitudes from a few units to 2^31, peaks and dips alike.
            let bits = 3 + rng.next_u64() % 28;
            let mut v = || (rng.next_u64() % (1 << bits)) as i64 - (1 << (bits - 2));
            let m = v();
            let (l, r) = (m - v(), m - v());
            let den = 2 * m - l - r;
            let got = vertex_q16(l as i32, m as i32, r as i32);
            if den <= 0 {
                assert_eq!(got, 0);
                continue;
            }
            let exact = (i128::from(r - l) << 16) / (2 * i128::from(den));
            let exact = exact.clamp(-(1 << 15), 1 << 15) as i64;
            if den < 1 << 30 {
                assert_eq!(got, exact, "{l} {m} {r}");
            } else {
                assert!((got - exact).abs() <= 1, "{l} {m} {r}: {got} vs {exact}");
            }
        }
    }

    #[test]
    fn pivot_reciprocal_matches_division() {
        for piv in (1 << 5)..(1 << 15) {
            assert_eq!(pivot_recip_q30(piv), Some((1 << 30) / piv), "{piv}");
        }
        assert_eq!(pivot_recip_q30(31), None);
        assert_eq!(pivot_recip_q30(1 << 15), None);
    }

    #[test]
    fn whitening_factor_is_the_square_root_ratio() {
        let nm = noise(3, 41_943);
        let mut rng = Rng::new(23);
        for _ in 0..2000 {
            let base = (rng.next_u64() % 5_000) as i32;
            let a_red = 1 + (rng.next_u64() % 65_536) as i32;
            let g = (rng.next_u64() % 16_385) as i32;
            let reduce = (rng.next_u64() % 5) as u32;
            let model = Model {
                inv_s: InvSigma { q14: 1 << 14 },
                a_red,
                c_red: 0,
            };
            // The reference: the noise at the baseline alone, below the pixel's.
            let var_ref = nm.var_q8(i64::from(base));
            let (_, h_ref) = rsqrt_parts(var_ref.unsigned_abs());
            let tau = tau_at(&nm, &model, reduce, h_ref, base, g);
            let line = ((i64::from(a_red) * i64::from(g)) << reduce) >> 14;
            let var = nm.var_q8(i64::from(base) + line);
            // τ = 2^43 / (sqrt(var) · 2^h_ref) ideally (1/sqrt(var) = m · 2^h / 2^46, τ = m ·
            // 2^(h − h_ref) / 8): τ² · var = 2^86 / 2^(2 h_ref).
            let lhs = i128::from(tau) * i128::from(tau) * i128::from(var);
            let want = (1i128 << 86) >> (2 * h_ref);
            let err = (lhs - want).abs() * 1000 / want;
            // 0.4 % in 1/sqrt (twice in a square), and τ's truncation (≤ 1/64: 1.6 % squared).
            assert!(
                err <= 8 + 2000 / i128::from(tau.max(1)),
                "base {base} line {line}: τ {tau}, {lhs} vs {want}"
            );
        }
    }

    #[test]
    fn centre_sigma_matches_the_square_root_formula() {
        let mut rng = Rng::new(29);
        let mut checked = 0;
        for _ in 0..2000 {
            let sol = Solved {
                x: [0; 4],
                mu_pivot: (1 << 5) + (rng.next_u64() % ((1 << 15) - 32)) as i64,
                mu_shift: (rng.next_u64() % 20) as i32 - 8,
            };
            let h_ref = 12 + (rng.next_u64() % 18) as u32;
            let p = Params {
                a_q8: (1 << 10) + (rng.next_u64() % (1 << 30)) as i64,
                mu_q16: 0,
                s_q16: (1 << 14) + (rng.next_u64() % (1 << 20)) as i64,
                c_q8: 0,
            };
            let Some(got) = center_sigma(&sol, h_ref, &p) else {
                continue;
            };
            // s · σ_ε · 2^d / (sqrt(pivot) · A) with σ_ε = 2^(39 − h_ref) (Q12, frame units) and
            // the sums' scales: s_q16 · 2^(47 − h_ref + d) / (sqrt(pivot) · a_q8), taken as
            // s_q16² · 2^(2 (47 − h_ref + d)) / (pivot · a_q8²) under one exact square root.
            let k = 2 * (47 - h_ref as i32 + sol.mu_shift);
            if k > 80 {
                continue; // beyond i128 for the check
            }
            let num = i128::from(p.s_q16) * i128::from(p.s_q16);
            let den = i128::from(sol.mu_pivot) * i128::from(p.a_q8) * i128::from(p.a_q8);
            let sq = if k >= 0 {
                (num << k) / den
            } else {
                (num >> -k) / den
            };
            let want = isqrt_u128(sq as u128) as i64;
            if want < 64 {
                continue;
            }
            // The pivot's root to 2^-10.5, two reciprocals to 2^-28, truncations.
            assert!(
                (got - want).abs() * 250 <= want + 250,
                "pivot {} d {} h {h_ref}: {got} vs {want}",
                sol.mu_pivot,
                sol.mu_shift
            );
            checked += 1;
        }
        assert!(checked > 500, "only {checked} checked");
    }

    /// The elimination [`solve`] writes out, as loops with an exact 32-bit division per pivot —
    /// the form it replaced.
    #[allow(clippy::needless_range_loop)]
    fn solve_by_loops(nm: &Normal, a_red: i32) -> Option<Solved> {
        const ORDER: [usize; 4] = [0, 2, 3, 1];
        let at = |r: usize, c: usize| nm.n[r][c];
        let mut e = [0i32; 4];
        for (ek, &p) in e.iter_mut().zip(ORDER.iter()) {
            if at(p, p) <= 0 {
                return None;
            }
            *ek = (32 - at(p, p).leading_zeros() as i32 - 14) >> 1;
        }
        let mut m = [[0i32; 4]; 4];
        for i in 0..4 {
            for j in i..4 {
                m[i][j] = shift_i64(i64::from(at(ORDER[i], ORDER[j])), e[i] + e[j]) as i32;
            }
        }
        let mut b: [i64; 4] = core::array::from_fn(|i| shift_i64(nm.b[ORDER[i]], e[i]));
        let top = b
            .iter()
            .map(|v| 64 - v.unsigned_abs().leading_zeros())
            .max()? as i32;
        let bs = top - 15;
        for v in b.iter_mut() {
            *v = shift_i64(*v, bs);
        }
        let (mut f, mut inv) = ([[0i32; 4]; 4], [0i32; 4]);
        for p in 0..4 {
            let piv = m[p][p];
            if !(1 << 5..1 << 15).contains(&piv) {
                return None;
            }
            inv[p] = ((1u32 << 30) / piv as u32) as i32;
            let bp = i32::try_from(b[p]).ok()?;
            for i in p + 1..4 {
                let fi = mul_i32_wide(m[p][i], inv[p]) >> 15;
                if fi.unsigned_abs() >= 1 << 16 {
                    return None;
                }
                f[i][p] = fi as i32;
                for j in i..4 {
                    m[i][j] -= (f[i][p] * m[p][j]) >> 15;
                }
                b[i] -= mul_i32_wide(f[i][p], bp) >> 15;
            }
        }
        let mut y = [0i32; 4];
        for i in (0..4).rev() {
            let mut acc = mul_i32_wide(i32::try_from(b[i]).ok()?, inv[i]) >> 15;
            for j in i + 1..4 {
                acc -= mul_i32_wide(f[j][i], y[j]) >> 15;
            }
            y[i] = i32::try_from(acc).ok()?;
        }
        let ra = Recip::new(i64::from(a_red.max(1)))?;
        let mut x = [0i64; 4];
        for i in 0..4 {
            let q = ra.scale(i64::from(y[i]), bs - e[i] + 1).unwrap_or(1 << 40);
            x[ORDER[i]] = q.clamp(-(1 << 40), 1 << 40);
        }
        Some(Solved {
            x,
            mu_pivot: i64::from(m[3][3]),
            mu_shift: -e[3],
        })
    }

    #[test]
    fn solve_matches_the_elimination_by_loops() {
        // Normal matrices of whitened Gaussian rows (as `normal` builds them) and random gradients.
        let mut rng = Rng::new(31);
        let mut checked = 0;
        for _ in 0..2000 {
            let n_px = 6 + (rng.next_u64() % 26) as i32;
            let inv = 2_000 + (rng.next_u64() % 14_000) as i32; // 1/s in Q14
            let mu = (rng.next_u64() % (1 << 14)) as i32;
            let mut n = [[0i32; 4]; 4];
            for k in 0..n_px {
                let (g, gu, guu) = shape_at((k - n_px / 2) * inv - mu);
                let tau = 500 + (rng.next_u64() % 3_600) as i32;
                let j = [(g * tau) >> 14, (gu * tau) >> 14, (guu * tau) >> 14, tau];
                for (r, row) in n.iter_mut().enumerate() {
                    for (c, cell) in row.iter_mut().enumerate() {
                        *cell += j[r] * j[c];
                    }
                }
            }
            let b: [i64; 4] =
                core::array::from_fn(|_| (rng.next_u64() % (1 << 34)) as i64 - (1 << 33));
            let nm = Normal {
                n,
                b,
                used: n_px as usize,
            };
            let a_red = 1 + (rng.next_u64() % 60_000) as i32;
            let (fast, slow) = match (solve(&nm, a_red), solve_by_loops(&nm, a_red)) {
                (Some(f), Some(s)) => (f, s),
                (None, None) => continue,
                (f, s) => panic!("refused by one only: {} {}", f.is_some(), s.is_some()),
            };
            // The same arithmetic, written out: the same step, bit for bit.
            assert_eq!(fast.mu_shift, slow.mu_shift);
            assert_eq!(fast.mu_pivot, slow.mu_pivot);
            assert_eq!(fast.x, slow.x);
            checked += 1;
        }
        assert!(checked > 1_500, "only {checked} systems solved");
    }
}
