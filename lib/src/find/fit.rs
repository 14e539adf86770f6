//! Sub-pixel centre of one line: a noise-weighted least-squares Gaussian fit in 32-bit fixed point.
//!
//! Model `m(x) = A·exp(−(x−μ)²/2s²) + c` over a window of ±(2.5 s + 2) px. Each Gauss–Newton step
//! whitens every pixel — its residual and Jacobian row multiplied by `τ = σ_min/σ_i`, σ_i from the noise
//! model at baseline + line (read floor plus shot noise) — which makes the fit the maximum-likelihood
//! estimate for Gaussian noise and brings the centre scatter to the Cramér–Rao bound. Whitening also
//! keeps the arithmetic small: the whitened Jacobian has |J| ≤ 1 whatever the range of the weights
//! (shot noise makes the core's 10⁻⁴ of the wings'), so every normal-matrix product is one 32-bit
//! multiply and no parameter loses its digits to another. The centre uncertainty comes from the same
//! normal matrix: the centre is eliminated last, so its final pivot is 1 / [M⁻¹]μμ. Saturated and
//! repaired pixels get no weight.
//!
//! Parameters are updated in relative form (ΔA/A, Δμ/s, Δs/s, Δc/A). Values are taken in *reduced
//! units*, the frame units shifted right until the window's largest residual is below 2^16 (a shift
//! of 0 for all but the strongest lines of ADC frames; the noise there is far above the step).

use super::math::{mul_i32_wide, Recip};
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
const W: usize = 2 * MAX_HALF + 1;
/// Steps that take the weights from the current model: the first, from the start (three-pixel
/// parabola and half-width), which is within a few per cent of the final line; weights that are off
/// by that cost a fraction of a per cent of efficiency and no bias.
const WEIGHT_STEPS: u8 = 1;

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

/// `1/sqrt(v)` ≈ `m · 2^h / 2^47` with `m` in (2^14, 2^15·1.01] (v ≥ 1): `(m, h)`.
#[inline]
fn rsqrt_parts(v: u64) -> (i32, u32) {
    let v = v.max(1);
    // The variances of ADC frames fit 32 bits: 32-bit count and shift (a 64-bit shift is a library
    // call on the M0); the same (m, h) as the general path.
    let (lz, top) = match u32::try_from(v) {
        Ok(v32) => {
            let lz = (v32.leading_zeros() & !1) + 32;
            (lz, ((v32 << (lz - 32)) >> 24) as usize)
        }
        Err(_) => {
            let lz = v.leading_zeros() & !1;
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
}

impl Window {
    const EMPTY: Window = Window {
        lo: 0,
        len: 0,
        resid: [0; W],
        base: [0; W],
        raw: [0; W],
    };

    /// Gathers pixels `lo ..= hi` over whatever the window held. Loop bound: ≤ [`W`] pixels, each
    /// taking ≤ 2 neighbour profiles out.
    fn fill(&mut self, d: &FitData<'_>, lo: usize, hi: usize) {
        let w = self;
        w.lo = lo;
        w.len = 0;
        w.resid = [UNUSABLE; W];
        w.base = [0; W];
        w.raw = [0; W];
        let shapes = d.neighbours.map(|n| n.map(|f| Shape::new(&f)));
        for (k, i) in (lo..=hi).enumerate().take(W) {
            let b = d.base.get(i).copied().unwrap_or(0);
            let usable = d.flag.get(i).is_some_and(|&f| !flags::is_untrusted(f));
            if let (Some(r), Some(bb), Some(raw)) =
                (w.resid.get_mut(k), w.base.get_mut(k), w.raw.get_mut(k))
            {
                *raw = Self::raw_value(d, &shapes, i);
                *r = if usable { *raw } else { UNUSABLE };
                *bb = b;
            }
            w.len = k + 1;
        }
    }

    /// Pixel `i`'s residual over the baseline, less the neighbours' `shapes`, as `fill` keeps it.
    fn raw_value(d: &FitData<'_>, shapes: &[Option<Shape>; 2], i: usize) -> i32 {
        let y = i64::from(d.frame.get(i).copied().unwrap_or(0));
        let b = d.base.get(i).copied().unwrap_or(0);
        let mut v = y - i64::from(b);
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

    fn resid_at(&self, k: usize) -> Option<i32> {
        self.resid.get(k).copied().filter(|&r| r != UNUSABLE)
    }
}

#[derive(Clone, Copy)]
struct Params {
    a_q8: i64,
    mu_q16: i64,
    s_q16: i64,
    c_q8: i64,
}

/// Per-pixel whitening factors τ (Q12, ≤ 4096) of one weight pass and the noise scale they imply.
struct Weights {
    tau: [i32; W],
    /// Variance (Q8, frame units) and τ of the pixel with the largest τ: σ_ε of the whitened
    /// residual is `sqrt(var_ref / 256) · τ_ref / 2^reduce` in reduced units × Q12.
    var_ref_q8: i64,
    tau_ref: i32,
}

impl Weights {
    /// Where a weight pass starts: no pixel weighed yet.
    const START: Weights = Weights {
        tau: [0; W],
        var_ref_q8: 1,
        tau_ref: 0,
    };
    /// All zero, for [`FitScratch::new`] (a `static` of it stays in `.bss`); never read as weights.
    const ZERO: Weights = Weights {
        tau: [0; W],
        var_ref_q8: 0,
        tau_ref: 0,
    };
}

/// The weight pass's per-pixel rows: 1/sqrt(var) as (mantissa, exponent), and the variances.
struct WeighRows {
    parts: [(i32, u32); W],
    vars: [i64; W],
}

/// One fit's window, weights and weight rows (≈ 1.2 KiB), kept by the caller — inside
/// [`FindWork`](super::FindWork) — so a small core's stack holds only a step's sums. Nothing in it
/// carries over from one fit to the next.
pub struct FitScratch {
    win: Window,
    weights: Weights,
    rows: WeighRows,
}

impl FitScratch {
    /// Empty (a `const`, so a `static` can hold it; all zero, so it sits in `.bss`).
    pub const fn new() -> Self {
        Self {
            win: Window::EMPTY,
            weights: Weights::ZERO,
            rows: WeighRows {
                parts: [(0, 0); W],
                vars: [0; W],
            },
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
/// window (the first with a weight pass) and a 4 × 4 elimination.
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
    let half = ((5 * s0) >> 17).saturating_add(2).clamp(2, MAX_HALF as i64) as usize;
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
        let start = start_at(peak, s0, at);
        return run_none(start, lo, lo + len.saturating_sub(1));
    }
    scratch.win.fill(d, lo, hi);
    let win = &scratch.win;
    let start = start_at(peak, s0, |i| win.raw_at(i));
    run(d, scratch, start, s_min_q16, s_max_q16, max_steps)
}

/// The fit's start: the peak pixel's residual as height, the parabola through it and its two
/// neighbours (`at`: a pixel's residual in the window, `None` outside) for the centre, `s0` as σ.
fn start_at(peak: usize, s0: i64, at: impl Fn(usize) -> Option<i32>) -> Params {
    let r0 = i64::from(at(peak).unwrap_or(0));
    let rl = peak.checked_sub(1).and_then(&at).map_or(r0, i64::from);
    let rr = at(peak + 1).map_or(r0, i64::from);
    // Parabola through three pixels: δ = (rl − rr) / (2 (rl − 2 r0 + rr)), within ±0.5 px.
    let den = rl - 2 * r0 + rr;
    let delta_q16 = if den < 0 {
        ((rl - rr) << 16)
            .checked_div(2 * den)
            .unwrap_or(0)
            .clamp(-(1 << 15), 1 << 15)
    } else {
        0
    };
    Params {
        a_q8: (r0 << 8).max(256),
        mu_q16: ((peak as i64) << 16) + delta_q16,
        s_q16: s0,
        c_q8: 0,
    }
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
/// steps, each one pass over the window (the first [`WEIGHT_STEPS`] with a weight pass) and a 4 × 4
/// elimination.
fn run(
    d: &FitData<'_>,
    scratch: &mut FitScratch,
    start: Params,
    s_min_q16: i64,
    s_max_q16: i64,
    max_steps: usize,
) -> Fit {
    let FitScratch { win, weights, rows } = scratch;
    let win: &Window = win;
    let (lo, hi) = (win.lo, win.lo + win.len.saturating_sub(1));
    let r0 = start.a_q8 >> 8;
    // Reduced units: the largest residual (or the start height) below 2^16.
    let big = (0..win.len)
        .filter_map(|k| win.resid_at(k))
        .map(|r| r.unsigned_abs())
        .max()
        .unwrap_or(0)
        .max(u32::try_from(r0.unsigned_abs()).unwrap_or(u32::MAX));
    let reduce = (32 - big.leading_zeros()).saturating_sub(16);
    let mut p = start;
    let mut converged = false;
    let mut steps = 0u8;
    // Whether `weights` holds this fit's weights yet.
    let mut weighed = false;
    // Settling tolerances for the centre (Q16 px) and the height (Q8), set with the first weights.
    let (mut tol_mu, mut tol_a) = (SETTLED_Q16, 0i64);
    // The last step's centre pivot (and its scale) and the weights it used: the centre's σ.
    let mut last: Option<(Solved, i64)> = None;
    for _ in 0..max_steps.min(ITERATIONS) {
        steps += 1;
        let model = Model::new(&p, reduce);
        if steps <= WEIGHT_STEPS || !weighed {
            weigh(win, d.noise, &p, &model, reduce, rows, weights);
            let w: &Weights = weights;
            if steps == 1 {
                // Settling tolerances (see below) from the start: they only need the noise scale.
                let sd_q4 = super::math::isqrt_i64(w.var_ref_q8);
                tol_mu = Recip::new(start.a_q8.max(1))
                    .and_then(|r| r.scale(start.s_q16 * sd_q4, 4))
                    .unwrap_or(0)
                    .max(SETTLED_Q16);
                tol_a = sd_q4 << 4;
            }
            weighed = true;
        }
        let wt: &Weights = weights;
        let nm = normal(win, wt, &p, &model, reduce);
        if nm.used < MIN_PIXELS {
            break;
        }
        let a_red = reduced(p.a_q8, reduce).max(1);
        let Some(sol) = solve(&nm, a_red) else {
            break;
        };
        let [da, dmu, ds, dc] = sol.x;
        last = Some((sol, wt.var_ref_q8.saturating_mul(i64::from(wt.tau_ref))));
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
        // Settled: each parameter moved by less than its noise scatter (σ/A of a relative parameter:
        // the centre and the width by s·σ/A, the height by σ, taken at the start). Gauss–Newton
        // converges quadratically here, so after such a step what is left is far below the noise:
        // against 1/4 of the scatter no cell of the centroid bench moved by more than 0.003 in
        // RMS/CRLB (the bar's cells by ≤ 0.001; σ/CRLB by ≤ 0.009) and `find` took 13 % fewer
        // instructions. At least the
        // band the 32-bit model's own rounding leaves a noiseless fit bouncing in (2^-12 px, 2^-10
        // relative).
        let settled = (p.mu_q16 - before.mu_q16).abs() <= tol_mu
            && (p.a_q8 - before.a_q8).abs() <= tol_a.max(before.a_q8 >> 10)
            && (p.s_q16 - before.s_q16).abs() <= tol_mu.max(before.s_q16 >> 10);
        if settled {
            converged = true;
            break;
        }
    }
    let center_sigma_q16 = last
        .as_ref()
        .and_then(|(sol, _)| center_sigma(sol, weighed.then_some(&*weights)?, &p))
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

/// g alone in Q14 for u in Q14.
#[inline]
fn height_at(u: i32) -> i32 {
    const LIMIT: i32 = (1 << 17) - 1;
    exp_neg_q14(half_square_q12(u.clamp(-LIMIT, LIMIT)))
}

/// Whitening factors from the noise model at baseline + current line: τ ∝ 1/σ, the largest 4096-ish.
///
/// Loop bound: 2 passes over the window.
fn weigh(
    win: &Window,
    noise: &NoiseModel,
    p: &Params,
    model: &Model,
    reduce: u32,
    rows: &mut WeighRows,
    w: &mut Weights,
) {
    let (u0, du) = model.u_along(p, win.lo);
    let WeighRows { parts, vars } = rows;
    *parts = [(0, 0); W];
    *vars = [0; W];
    let mut top = 0u32;
    for (k, ((part, var), &base)) in parts
        .iter_mut()
        .zip(vars.iter_mut())
        .zip(win.base.iter())
        .enumerate()
        .take(win.len)
    {
        if win.resid_at(k).is_none() {
            continue;
        }
        let g = height_at(u0.wrapping_add((k as i32).wrapping_mul(du)));
        // The line in frame units: reduced units × 2^reduce (reduce ≤ 16, so < 2^46); a 32-bit
        // shift where the product leaves room.
        let ag = model.a_red * g;
        let line = if reduce == 0 {
            i64::from(ag >> 14)
        } else {
            (i64::from(ag) << reduce.min(16)) >> 14
        };
        *var = noise.var_q8(i64::from(base).saturating_add(line.max(0)));
        *part = rsqrt_parts(var.unsigned_abs());
        top = top.max(part.1);
    }
    *w = Weights::START;
    for ((t, &(m, h)), &var) in w.tau.iter_mut().zip(parts.iter()).zip(vars.iter()) {
        if m == 0 {
            continue;
        }
        let drop = top - h;
        *t = if drop >= 31 { 0 } else { (m >> drop) >> 3 };
        if *t > w.tau_ref {
            w.tau_ref = *t;
            w.var_ref_q8 = var;
        }
    }
}

/// The whitened normal equations at `p`. Bounds: |J| ≤ 2^14 (Q14), τ ≤ 2^12, so |J_w| ≤ 2^12 and
/// each product < 2^24 (sums over ≤ 33 px < 2^30); |ε| = |e·τ| < 2^17 · 2^12.
///
/// Loop bound: one pass over the window.
fn normal(win: &Window, wt: &Weights, p: &Params, model: &Model, reduce: u32) -> Normal {
    let (u0, du) = model.u_along(p, win.lo);
    let mut nm = Normal {
        n: [[0; 4]; 4],
        b: [0; 4],
        used: 0,
    };
    // The ten upper-triangle sums and the gradient, written out so they stay in registers and
    // 32-bit adds. ε = ε_h · 2^13 + ε_l splits each gradient product into two 32-bit ones: the
    // high sums (< 2^28 per pixel) add into i64, the low ones (< 2^25) into i32.
    let (mut n00, mut n01, mut n02, mut n03, mut n11) = (0i32, 0i32, 0i32, 0i32, 0i32);
    let (mut n12, mut n13, mut n22, mut n23, mut n33) = (0i32, 0i32, 0i32, 0i32, 0i32);
    let mut bh = [0i64; 4];
    let mut bl = [0i32; 4];
    for (k, (&r, &tau)) in win
        .resid
        .iter()
        .zip(wt.tau.iter())
        .enumerate()
        .take(win.len)
    {
        if r == UNUSABLE || tau == 0 {
            continue;
        }
        let (g, gu, guu) = shape_at(u0.wrapping_add((k as i32).wrapping_mul(du)));
        let r_red = (r >> reduce.min(31)).clamp(-(1 << 17), 1 << 17);
        let m = ((model.a_red * g) >> 14) + model.c_red;
        let e = (r_red - m).clamp(-(1 << 17), 1 << 17);
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
        for ((h, l), j) in bh.iter_mut().zip(bl.iter_mut()).zip([j0, j1, j2, j3]) {
            *h += i64::from(j * eh);
            *l += j * el;
        }
        nm.used += 1;
    }
    nm.n = [
        [n00, n01, n02, n03],
        [n01, n11, n12, n13],
        [n02, n12, n22, n23],
        [n03, n13, n23, n33],
    ];
    for ((b, &h), &l) in nm.b.iter_mut().zip(bh.iter()).zip(bl.iter()) {
        *b = (h << 13) + i64::from(l);
    }
    nm
}

/// Order in which the parameters are eliminated (A, s, c, then μ): the centre last, so its final
/// pivot is 1 / [M⁻¹]μμ of the scaled matrix.
const ORDER: [usize; 4] = [0, 2, 3, 1];

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
/// stay below 2^15, so every update is one 32-bit multiply, and each pivot's reciprocal (Q30) is one
/// 32-bit division. 15 significant bits are ample for a Gauss–Newton step (the fixed point is set by
/// the gradient, which is exact), and for the centre's σ: the centre is eliminated last, and its pivot
/// differs from its own diagonal only by its small coupling to the even parameters. `None` when `N`
/// is not positive definite to that precision or a value leaves its range (the fit then ends).
///
/// Loop bound: a fixed 4 × 4 elimination — four 32-bit divisions, one reciprocal of A, ~20 wide
/// products.
fn solve(nm: &Normal, a_red: i32) -> Option<Solved> {
    let at = |r: usize, c: usize| nm.n.get(r).and_then(|row| row.get(c)).copied().unwrap_or(0);
    let mut e = [0i32; 4];
    for (ek, &p) in e.iter_mut().zip(ORDER.iter()) {
        let diag = at(p, p);
        if diag <= 0 {
            return None;
        }
        *ek = (32 - diag.leading_zeros() as i32 - 14) >> 1;
    }
    let mut m = [[0i32; 4]; 4];
    for (i, row) in m.iter_mut().enumerate() {
        for (j, cell) in row.iter_mut().enumerate().skip(i) {
            let (pi, pj) = (ORDER.get(i).copied()?, ORDER.get(j).copied()?);
            let k = e.get(i)? + e.get(j)?;
            *cell = shift_i64(i64::from(at(pi, pj)), k) as i32;
        }
    }
    // b scaled by S, then by a common power of two below 2^15.
    let mut b = [0i64; 4];
    for (i, bv) in b.iter_mut().enumerate() {
        *bv = shift_i64(nm.b.get(ORDER.get(i).copied()?).copied()?, *e.get(i)?);
    }
    let top = b
        .iter()
        .map(|v| 64 - v.unsigned_abs().leading_zeros())
        .max()? as i32;
    let bs = top - 15;
    for v in b.iter_mut() {
        *v = shift_i64(*v, bs);
    }
    // Forward elimination; f[i][p] = M_pi / M_pp in Q15 is kept for the back substitution.
    let mut f = [[0i32; 4]; 4];
    let mut inv = [0i32; 4];
    for p in 0..4 {
        let piv = m.get(p)?.get(p).copied()?;
        if piv < 1 << 5 {
            return None;
        }
        // 2^30 / piv in (2^15, 2^25].
        let ip = i32::try_from((1u32 << 30) / piv.unsigned_abs()).ok()?;
        *inv.get_mut(p)? = ip;
        let bp = i32::try_from(b.get(p).copied()?).ok()?;
        for i in p + 1..4 {
            let fi = mul_i32_wide(m.get(p)?.get(i).copied()?, ip) >> 15;
            if fi.unsigned_abs() >= 1 << 16 {
                return None;
            }
            let fi = fi as i32;
            *f.get_mut(i)?.get_mut(p)? = fi;
            for j in i..4 {
                let upd = (fi * m.get(p)?.get(j).copied()?) >> 15;
                let cell = m.get_mut(i)?.get_mut(j)?;
                *cell -= upd;
            }
            *b.get_mut(i)? -= mul_i32_wide(fi, bp) >> 15;
        }
    }
    // Back substitution: y_i = b_i / M_ii − Σ_j f[j][i] · y_j, in Q15 (|y| < 2^31 or refused).
    let mut y = [0i32; 4];
    for i in (0..4).rev() {
        let bi = i32::try_from(b.get(i).copied()?).ok()?;
        let mut acc = mul_i32_wide(bi, inv.get(i).copied()?) >> 15;
        for j in i + 1..4 {
            acc -= mul_i32_wide(f.get(j)?.get(i).copied()?, y.get(j).copied()?) >> 15;
        }
        *y.get_mut(i)? = i32::try_from(acc).ok()?;
    }
    // x_real = y · 2^(bs − e − 15); the step relative to A in Q16: × 2^16 / A.
    let ra = Recip::new(i64::from(a_red.max(1)))?;
    let mut x = [0i64; 4];
    for (i, &yi) in y.iter().enumerate() {
        let k = bs - e.get(i)? + 1;
        let q = ra
            .scale(i64::from(yi), k)
            .unwrap_or(if yi < 0 { -(1 << 40) } else { 1 << 40 });
        *x.get_mut(ORDER.get(i).copied()?)? = q.clamp(-(1 << 40), 1 << 40);
    }
    Some(Solved {
        x,
        mu_pivot: i64::from(m.get(3)?.get(3).copied()?),
        mu_shift: -e.get(3).copied()?,
    })
}

/// σ of the centre in px (Q16): `s · σ_ε · sqrt([N⁻¹]μμ) / A` with `σ_ε = sqrt(var_ref) · τ_ref` the
/// whitened noise, `[N⁻¹]μμ = 2^(2d) / pivot`; everything in frame units (reduced units cancel).
#[inline(never)]
fn center_sigma(sol: &Solved, wt: &Weights, p: &Params) -> Option<i64> {
    if sol.mu_pivot <= 0 || sol.mu_pivot >= 1 << 30 || !(-20..=40).contains(&sol.mu_shift) {
        return None;
    }
    // sqrt(var_q8) = σ × 16 (frame units, < 2^26) and sqrt(pivot · 2^32) = sqrt(pivot) · 2^16 as
    // 64-bit roots; in Q16, σ_μ = s_q16 · sqrt(var_q8) · τ_ref · 2^(d + 20) / (sqrt(pivot · 2^32) · a_q8).
    let sv = crate::fixed::isqrt_u128(u128::try_from(wt.var_ref_q8.max(1)).ok()?) as i64;
    let sp = crate::fixed::isqrt_u128(u128::try_from(sol.mu_pivot).ok()? << 32) as i64;
    // s < 2^21 and τ ≤ 2^12: s·τ < 2^33; × sv (< 2^26) < 2^59.
    let num = (p.s_q16.clamp(1, 1 << 21) * i64::from(wt.tau_ref.clamp(0, 1 << 12)))
        .checked_mul(sv.min(1 << 26))?;
    let q = Recip::new(sp.max(1))?.scale(num, 10)?;
    let sig = Recip::new(p.a_q8.max(1))?.scale(q, sol.mu_shift + 10)?;
    Some(sig.max(1))
}

/// Height (Q8) × σ (Q16) × sqrt(2π) → area in frame units × px.
pub fn area(fit: &Fit) -> i64 {
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
            let start = start_at(peak, s0c, |i| win.raw_at(i));
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
