//! Weighted least-squares fit of a [`WavelengthMap`] to identified lines, with its covariance.
//!
//! Normal equations in the normalised pixel x ∈ [−1, 1] are well conditioned for degree ≤ 3, so a
//! Gauss–Jordan solve in Q60 with 256-bit intermediate products loses nothing that matters (the
//! coefficients come out to 1 fm). Weights are 1/σ² from the centroid uncertainties; the covariance
//! is scaled by the Birge ratio χ²/dof when that exceeds 1 (common practice: the scatter, not only
//! the centroid noise, sets the uncertainty).
use super::error::CalibrateError;
use super::map::{HalfWidth, WavelengthMap, X_ONE_Q30};
use super::muldiv::{mul_64x64, mul_div_round, Divisor};
use crate::find::math::{mul_i32_wide, mul_u32_wide};
use crate::fixed::{isqrt_u128, mul_div_i128};

/// Most points one fit takes.
pub const MAX_FIT_POINTS: usize = 64;

const Q60: i128 = 1 << 60;

/// One identified line: where it was seen and where it should be.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FitPoint {
    /// Measured centre (px, Q16).
    pub center_px_q16: i32,
    /// Its 1-σ uncertainty (px, Q16, > 0).
    pub sigma_px_q16: u32,
    /// Predicted wavelength, femtometres.
    pub wavelength_fm: i64,
}

/// A fitted map with what is known about its accuracy.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MapFit {
    /// The map.
    pub map: WavelengthMap,
    /// RMS of the fit residuals weighted by 1/σ² like the fit itself, femtometres.
    pub rms_residual_fm: u64,
    /// χ² per degree of freedom with the centroid σ as noise (Q8); 0 when there is no freedom left.
    pub chi2_per_dof_q8: u32,
    /// Points used.
    pub points: u8,
    /// Inverse of the normalised normal matrix (Q40) times σ_ref² × max(1, χ²/dof): see
    /// [`sigma_fm_at`](Self::sigma_fm_at).
    inverse_q40: [[i128; 4]; 4],
    /// Variance scale of the inverse: σ_ref² (fm²) including the Birge factor.
    variance_scale_fm2: u64,
}

impl MapFit {
    /// All zero: a placeholder for a fit not made yet (so a `static` holding one stays in `.bss`).
    pub(crate) const ZERO: MapFit = MapFit {
        map: WavelengthMap::ZERO,
        rms_residual_fm: 0,
        chi2_per_dof_q8: 0,
        points: 0,
        inverse_q40: [[0; 4]; 4],
        variance_scale_fm2: 0,
    };

    /// 1-σ uncertainty of the map's wavelength at pixel p (px, Q16), femtometres.
    ///
    /// Work: fixed, ≤ 4 × 4 terms of two rounded products each (64-bit on the sensor, else
    /// [`mul_div_i128`]) and one square root (≤ 64 steps).
    pub fn sigma_fm_at(&self, p_px_q16: i32) -> u64 {
        self.sigma_fm_at_x(self.map.x_q30(p_px_q16))
    }

    /// [`sigma_fm_at`](Self::sigma_fm_at) at the map's normalised x (Q30) of the pixel, for a caller
    /// that has it already (one 64-bit division less).
    pub(crate) fn sigma_fm_at_x(&self, x: i64) -> u64 {
        let q = self
            .quadratic_form_narrow(x)
            .unwrap_or_else(|| self.quadratic_form(x));
        let var = scale_variance(q.max(0), self.variance_scale_fm2).unwrap_or(i128::MAX);
        // A map σ below 65 pm takes the root in 32-bit steps (`isqrt_u128` narrows by itself).
        isqrt_u128(var.max(0) as u128) as u64
    }

    /// The map σ² as one polynomial in x, for the many pixels of one check: `None` when a
    /// coefficient reaches 2^58 (see [`SigmaPoly`]).
    pub(crate) fn sigma_poly(&self) -> Option<SigmaPoly> {
        let d = (self.map.degree as usize).min(3) + 1;
        let mut sums = [0i128; 7];
        for (r, row) in self.inverse_q40.iter().enumerate().take(d) {
            for (c, &m) in row.iter().enumerate().take(d) {
                let slot = sums.get_mut(r + c)?;
                *slot = slot.checked_add(m)?;
            }
        }
        let mut coeff_q40 = [0i64; 7];
        for (out, &v) in coeff_q40.iter_mut().zip(sums.iter()) {
            *out = i64::try_from(v)
                .ok()
                .filter(|c| c.unsigned_abs() < 1 << 58)?;
        }
        Some(SigmaPoly {
            coeff_q40,
            top: 2 * (d - 1),
            scale_fm2: self.variance_scale_fm2,
        })
    }

    /// q = vᵀ M⁻¹ v (Q40) with v = (1, x, x², x³) in Q30, each term rounded twice as
    /// [`mul_div_i128`] rounds a division by 2^30 (half away from zero).
    fn quadratic_form(&self, x: i64) -> i128 {
        let x = x as i128;
        let d = self.map.degree as usize;
        let mut v = [0i128; 4];
        let mut xk: i128 = X_ONE_Q30 as i128;
        for slot in v.iter_mut().take(d + 1) {
            *slot = xk;
            xk = (xk * x) >> 30;
        }
        // q = vᵀ M⁻¹ v: v in Q30, M⁻¹ in Q40 → Q100; bring to Q40 per term.
        let mut q: i128 = 0;
        for (r, vr) in v.iter().enumerate().take(d + 1) {
            for (c, vc) in v.iter().enumerate().take(d + 1) {
                let m = self
                    .inverse_q40
                    .get(r)
                    .and_then(|row| row.get(c))
                    .copied()
                    .unwrap_or(0);
                let t = mul_div_i128(mul_div_i128(m, *vr, 1 << 30).unwrap_or(0), *vc, 1 << 30)
                    .unwrap_or(0);
                q = q.saturating_add(t);
            }
        }
        q
    }

    /// [`quadratic_form`](Self::quadratic_form) in 64-bit pieces, for the usual case of a pixel on
    /// the sensor (|x| ≤ 1, so |v_k| ≤ 2^30) and every |M⁻¹| entry below 2^62: each product then
    /// splits into two 32 × 32-bit ones and every rounded term fits `i64`, the same integers
    /// without 128-bit products (16 terms per call, about 40 calls per frame). `None` outside
    /// that range.
    fn quadratic_form_narrow(&self, x: i64) -> Option<i128> {
        if x.unsigned_abs() > 1 << 30 {
            return None;
        }
        let d = (self.map.degree as usize).min(3) + 1;
        let mut v = [0i64; 4];
        let mut xk: i64 = X_ONE_Q30;
        for slot in v.iter_mut().take(d) {
            *slot = xk;
            // |xk|, |x| ≤ 2^30: the product fits, and `>>` floors as the 128-bit shift does.
            xk = (xk * x) >> 30;
        }
        let mut q: i128 = 0;
        for (row, &vr) in self.inverse_q40.iter().zip(v.iter()).take(d) {
            for (&m, &vc) in row.iter().zip(v.iter()).take(d) {
                if m.unsigned_abs() >= 1 << 62 {
                    return None;
                }
                let t1 = mul_q30_round(m as i64, vr);
                q += mul_q30_round(t1, vc) as i128;
            }
        }
        Some(q)
    }
}

/// The map σ of a fit as a polynomial: q(x) = vᵀ M⁻¹ v = Σ_k s_k x^k with s_k the sum of the
/// inverse's entries on anti-diagonal k (Q40), evaluated by Horner with one rounding per step
/// instead of 18 rounded products per pixel. The same σ to the last femtometre but rarely (the
/// two roundings of q differ by a few 2^-40 of it; tested).
#[derive(Clone, Copy, Debug)]
pub(crate) struct SigmaPoly {
    /// s_0 … s_6 (Q40), each below 2^58 in size (so every Horner partial stays below 2^61).
    coeff_q40: [i64; 7],
    /// Highest power used: twice the map's degree.
    top: usize,
    /// The fit's variance scale (fm²).
    scale_fm2: u64,
}

impl SigmaPoly {
    /// 1-σ of the map at normalised x (Q30) on the sensor (|x| ≤ 1), femtometres; `None` off it.
    ///
    /// Work: ≤ 6 split 64 × 32-bit products, one 64 × 64-bit product and one square root.
    pub(crate) fn sigma_fm_at_x(&self, x: i64) -> Option<u64> {
        if x.unsigned_abs() > 1 << 30 {
            return None;
        }
        let mut acc = *self.coeff_q40.get(self.top)?;
        for k in (0..self.top).rev() {
            // |acc| < 7 · 2^58 and |x| ≤ 1: mul_q30_round's bounds hold, and so does the sum.
            acc = mul_q30_round(acc, x) + *self.coeff_q40.get(k)?;
        }
        let var = scale_variance(i128::from(acc.max(0)), self.scale_fm2).unwrap_or(i128::MAX);
        Some(isqrt_u128(var.max(0) as u128) as u64)
    }

    /// A bound on [`sigma_fm_at_x`](Self::sigma_fm_at_x) over the sensor (|x| ≤ 1), femtometres;
    /// `None` where the variance it would need overflows.
    ///
    /// Each Horner step's product is at most |acc| + 1 in size (|x| ≤ 1, rounded), so the sum is at
    /// most Σ |s_k| + `top`; the variance scaling and the root are non-decreasing in it.
    pub(crate) fn sigma_max_fm(&self) -> Option<u64> {
        let mut bound: i128 = self.top as i128;
        for &c in self.coeff_q40.iter().take(self.top + 1) {
            bound += c.unsigned_abs() as i128;
        }
        let var = scale_variance(bound, self.scale_fm2)?;
        Some(isqrt_u128(var.max(0) as u128) as u64)
    }
}

/// [`mul_div_i128`]`(q, scale, 2^40)` for q ≥ 0: the product rounded half up at bit 40. Below
/// 2^64 for q (every real map) that is one 64 × 64-bit product and a shift, the same integer
/// (`mul_div_i128` rounds r ≥ c − r up, which for c = 2^40 is adding 2^39 before the shift);
/// else the general routine.
fn scale_variance(q: i128, scale: u64) -> Option<i128> {
    let fast = u64::try_from(q)
        .ok()
        .and_then(|a| mul_64x64(a, scale).checked_add(1 << 39))
        .map(|v| (v >> 40) as i128);
    match fast {
        Some(v) => Some(v),
        None => mul_div_i128(q, scale as i128, 1 << 40),
    }
}

/// a · v / 2^30 rounded half away from zero (as [`mul_div_i128`] with c = 2^30), for |a| < 2^63 and
/// |v| ≤ 2^30: |a| = h · 2^32 + l, so |a| · |v| = 4 · (h|v|) · 2^30 + l|v|, both products 64-bit.
/// The result's magnitude is at most |a| + 1, so it fits `i64` (|a| < 2^62 keeps it below 2^62 + 1).
fn mul_q30_round(a: i64, v: i64) -> i64 {
    // v = 1 (x⁰): a · 2^30 / 2^30 is a, exactly.
    if v == X_ONE_Q30 {
        return a;
    }
    let (ua, uv) = (a.unsigned_abs(), v.unsigned_abs().min(1 << 30));
    let hi = mul_u32_wide((ua >> 32) as u32, uv as u32);
    let lo = mul_u32_wide(ua as u32, uv as u32);
    let mag = (hi << 2) + ((lo + (1 << 29)) >> 30);
    let m = mag.min(i64::MAX as u64) as i64;
    if (a < 0) != (v < 0) {
        -m
    } else {
        m
    }
}

/// Fits a polynomial of `degree` (1…3) through `points` for a sensor of `pixels` pixels.
///
/// Work: three passes over the points (≤ [`MAX_FIT_POINTS`]: weights, normal sums, residuals), a fixed
/// 4 × 4 × 9 Gauss–Jordan, and the 66-slope monotonicity check of [`WavelengthMap::with_frame`].
pub fn fit_map(points: &[FitPoint], degree: u8, pixels: u16) -> Result<MapFit, CalibrateError> {
    let mut fit = MapFit::ZERO;
    fit_map_into(points, degree, pixels, &mut fit, &mut FitScratch::new())?;
    Ok(fit)
}

/// The frame (centre, half-width) every fitted map of a `pixels`-pixel sensor has: x = ±1 at its
/// ends. Coefficients zero, degree 1: for x only.
pub(crate) fn standard_frame(pixels: u16) -> WavelengthMap {
    let half = ((pixels.max(2) as i32 - 1) << 16) / 2;
    WavelengthMap {
        center_px_q16: half,
        half_width_px_q16: half,
        degree: 1,
        coeff_fm: [0; 4],
    }
}

/// A fit's working memory: the normal equations (576 B) and each point's residual weight
/// (0.5 KiB), overwritten by every fit; in the caller's memory, not on a small core's stack.
pub(crate) struct FitScratch {
    normal: [[i128; 9]; 4],
    weights_q20: heapless::Vec<Option<u32>, MAX_FIT_POINTS>,
    /// [`fit_correction`]'s exact sums (Σ w x^j, Σ w x^r δ in Q60), L and L⁻¹ (Q40), off the stack.
    sums60: [i128; 11],
    tri: [[[i64; 4]; 4]; 2],
}

impl FitScratch {
    /// Empty (all zero: a `static` holding one stays in `.bss`).
    pub(crate) const fn new() -> FitScratch {
        FitScratch {
            normal: [[0; 9]; 4],
            weights_q20: heapless::Vec::new(),
            sums60: [0; 11],
            tri: [[[0; 4]; 4]; 2],
        }
    }
}

/// [`fit_map`] written into `out` (its content is unspecified after an error), with its working
/// memory in `scratch`: both in the caller's memory, not on a small core's stack.
/// Work: as [`fit_map`].
pub(crate) fn fit_map_into(
    points: &[FitPoint],
    degree: u8,
    pixels: u16,
    out: &mut MapFit,
    scratch: &mut FitScratch,
) -> Result<(), CalibrateError> {
    fit_map_at(points, None, degree, pixels, out, scratch, None)
}

/// [`fit_map_into`] with each point's x already known: `xs[k]` is `points[k]`'s x on
/// [`standard_frame`]`(pixels)` (as [`WavelengthMap::x_q30`] gives it there), so neither the normal
/// sums nor the residuals divide by the half-width again; the same fit. A slice of another length
/// is not used. After a successful fit `evals[k]` (where there is one) holds the fitted map's
/// (λ, slope) at `points[k]`, as [`WavelengthMap::wavelength_and_slope_by`] gives them there (the
/// residuals need them anyway). Out of line: its frame is not under [`fit_correction`]'s.
#[inline(never)]
pub(crate) fn fit_map_at(
    points: &[FitPoint],
    xs: Option<&[i64]>,
    degree: u8,
    pixels: u16,
    out: &mut MapFit,
    scratch: &mut FitScratch,
    evals: Option<&mut [(i64, i64)]>,
) -> Result<(), CalibrateError> {
    let FitScratch {
        normal: m,
        weights_q20,
        ..
    } = scratch;
    if !(1..=3).contains(&degree) || points.len() < degree as usize + 1 {
        return Err(CalibrateError::TooFewPoints);
    }
    if points.len() > MAX_FIT_POINTS {
        return Err(CalibrateError::TooManyPoints);
    }
    let d = degree as usize + 1;
    let frame = WavelengthMap {
        degree,
        ..standard_frame(pixels)
    };
    let half = frame.center_px_q16;
    // Relative weights (σ_min / σ)² in Q30.
    let sigma_min = points
        .iter()
        .map(|p| p.sigma_px_q16.max(1))
        .min()
        .unwrap_or(1) as i128;
    *m = [[0; 9]; 4];
    // The frame's (and the fitted map's) half-width divides every point's x: its reciprocal once.
    let hw = HalfWidth::forward(&frame);
    let xs = xs.filter(|v| v.len() == points.len());
    let x_of = |k: usize, pt: &FitPoint| match xs.and_then(|v| v.get(k)) {
        Some(&x) => x,
        None => frame.x_q30_by(pt.center_px_q16, &hw),
    };
    // Each point's residual weight (Q20), found with its fit weight (Q30) from one division.
    weights_q20.clear();
    for (k, pt) in points.iter().enumerate() {
        let s = pt.sigma_px_q16.max(1) as i128;
        let w = match both_weights(sigma_min as u64, s as u64) {
            Some((w30, w20)) => {
                let _ = weights_q20.push(Some(w20));
                w30 as i128
            }
            None => {
                let _ = weights_q20.push(None);
                mul_div_round(sigma_min * sigma_min, 1 << 30, s * s)
                    .ok_or(CalibrateError::Overflow)?
            }
        };
        let x = x_of(k, pt);
        if x.unsigned_abs() <= 1 << 30 && (0..=1 << 30).contains(&w) {
            accumulate_narrow(m, d, w as i64, x, pt.wavelength_fm);
        } else {
            accumulate(m, d, w, x, pt.wavelength_fm)?;
        }
    }
    for (r, row) in m.iter_mut().enumerate().take(d) {
        row[5 + r] = Q60;
    }
    gauss_jordan(m, d)?;
    let mut coeff = [0i64; 4];
    out.inverse_q40 = [[0; 4]; 4];
    for (r, ((row, c_out), inv_row)) in m
        .iter()
        .zip(coeff.iter_mut())
        .zip(out.inverse_q40.iter_mut())
        .enumerate()
        .take(d)
    {
        let piv = row.get(r).copied().unwrap_or(0);
        let rhs = row.get(4).copied().unwrap_or(0);
        // One reciprocal for the row's four quotients (the same integers as dividing each).
        let by_piv = Divisor::new(piv);
        let div = |a: i128, b: i128| match &by_piv {
            Some(dv) => dv.mul_div_round(a, b),
            None => mul_div_round(a, b, piv),
        };
        *c_out = i64::try_from(div(rhs, 1).ok_or(CalibrateError::Overflow)?)
            .map_err(|_| CalibrateError::Overflow)?;
        for (inv, &cell) in inv_row.iter_mut().zip(row.iter().skip(5)).take(d) {
            // (Q60 / Q60) → scale to Q40.
            *inv = div(cell, 1 << 40).ok_or(CalibrateError::Overflow)?;
        }
    }
    let map = WavelengthMap::with_frame(half, half, degree, coeff, pixels)?;
    finish(points, &x_of, map, &hw, weights_q20, sigma_min, out, evals)
}

/// A fit's residuals into `out` with its map: weighted RMS, χ² per degree of freedom, the variance
/// scale, and (where `evals` has room) the map's (λ, slope) at each point. `x_of` gives a point's
/// x on the map's frame, `weights_q20` the residual weights ([`both_weights`]' second, `None`
/// where it had none), `sigma_min` the smallest point σ (px, Q16). Work: one pass over the points.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn finish(
    points: &[FitPoint],
    x_of: &impl Fn(usize, &FitPoint) -> i64,
    map: WavelengthMap,
    hw: &HalfWidth,
    weights_q20: &[Option<u32>],
    sigma_min: i128,
    out: &mut MapFit,
    mut evals: Option<&mut [(i64, i64)]>,
) -> Result<(), CalibrateError> {
    let d = map.degree as usize + 1;
    let half = map.center_px_q16;
    // Residuals, χ² with σ in fm = σ_px · slope.
    // The RMS is weighted like the fit (1/σ²): faint lines near a series limit would otherwise
    // swamp what the strong lines say about the map.
    let mut sum_wr2: i128 = 0;
    let mut sum_w: i128 = 0;
    let mut chi2_q8: i128 = 0;
    for (k, pt) in points.iter().enumerate() {
        // λ and slope share the pixel's x. (The weight below cannot fail: σ_min ≤ σ, so the first
        // error is the map's either way.)
        // map shares the frame: x is the pixel's x on it (wavelength_and_slope_by's own steps).
        let x = x_of(k, pt);
        let lam = map.wavelength_at_x(x)?;
        let slope = map.slope_at_x_by(x, hw)?;
        if let Some(slot) = evals.as_deref_mut().and_then(|e| e.get_mut(k)) {
            *slot = (lam, slope);
        }
        let r = (lam - pt.wavelength_fm) as i128;
        let s = pt.sigma_px_q16.max(1) as i128;
        let w = match weights_q20.get(k).copied().flatten() {
            Some(w20) => w20 as i128,
            None => mul_div_round(sigma_min * sigma_min, 1 << 20, s * s)
                .ok_or(CalibrateError::Overflow)?,
        };
        // w ≤ 2^20 (σ_min ≤ σ) and |r| < 2^21: w · r² < 2^62 needs neither 128 bits nor saturation.
        let wr2 = if r.unsigned_abs() < 1 << 21 && (0..=1 << 20).contains(&w) {
            ((w as i64) * (r as i64 * r as i64)) as i128
        } else {
            w.saturating_mul(r * r)
        };
        sum_wr2 = sum_wr2.saturating_add(wr2);
        sum_w += w;
        // σ (< 2^32) · |slope| (< 2^64) and the squares below: the same integers from 64-bit
        // products where they fit (r < 2^21 and s_fm < 2^31 on any real fit).
        let s_fm =
            ((mul_64x64(pt.sigma_px_q16.max(1) as u64, slope.unsigned_abs()) >> 32) as i128).max(1);
        let r2 = match i32::try_from(r) {
            Ok(r32) => mul_i32_wide(r32, r32) as i128,
            Err(_) => r * r,
        };
        let s2 = match u32::try_from(s_fm) {
            Ok(s32) => mul_u32_wide(s32, s32) as i128,
            Err(_) => s_fm * s_fm,
        };
        chi2_q8 += mul_div_round(r2, 256, s2).ok_or(CalibrateError::Overflow)?;
    }
    let n = points.len() as i128;
    let dof = n - d as i128;
    let rms = isqrt_u128(div_nonnegative(sum_wr2, sum_w).unwrap_or(0).max(0) as u128) as u64;
    let chi2_per_dof_q8 = if dof > 0 {
        div_nonnegative(chi2_q8, dof)
            .unwrap_or(0)
            .clamp(0, u32::MAX as i128) as u32
    } else {
        0
    };
    let slope_mid = map.slope_fm_per_px_q16(half)?.unsigned_abs() as i128;
    let sref_fm = ((sigma_min * slope_mid) >> 32).max(1);
    let birge_q8 = (chi2_per_dof_q8 as i128).max(256);
    let variance_scale = (sref_fm * sref_fm * birge_q8) >> 8;
    out.variance_scale_fm2 = u64::try_from(variance_scale).map_err(|_| CalibrateError::Overflow)?;
    out.map = map;
    out.rms_residual_fm = rms;
    out.chi2_per_dof_q8 = chi2_per_dof_q8;
    out.points = points.len() as u8;
    Ok(())
}

/// [`fit_map_at`] for points near a `nominal` map on the fit's frame, in 64-bit arithmetic: the
/// same weighted least squares, fitted to the differences δ = λ − u (u: `nominal_fm`, the nominal
/// map's wavelength at each point) and added to the nominal's coefficients (the nominal's
/// polynomial lies in the fit's span, so the solution is the same). A map that drifted by a few nm
/// leaves |δ| below 2^24 fm: the normal sums are exact 32 × 32-bit products summed in Q60, taken to
/// Q40 (Q30 for the right-hand side), and the ≤ 4 × 4 system is solved by LDLᵀ in `i64` with each
/// pivot's normalised reciprocal ([`Pivot`]: no division at all), where the general fit eliminates
/// a 4 × 9 system through 128-bit quotients (about 100 k instructions on the Cortex-M0 for the
/// hydrogen tube's 12 lines). Against the general fit (tested): the map to 160 fm (10⁻³ px) and 5 %
/// of its own σ, the covariance to 10⁻⁵; on badly conditioned point sets it is the nearer of the
/// two to the exact solution (see the test). Residuals, RMS, χ² and the variance scale are
/// [`fit_map_at`]'s own steps on the map found.
///
/// `None` (nothing written that the caller keeps) where it does not apply: the nominal off the fit
/// frame or of a higher degree, a slice of another length, a point off the sensor or a difference
/// of 2^24 fm or more, a weight [`both_weights`] cannot give, an ill-conditioned system (see
/// [`ldl`]) or a value past `i64`; then the general fit is the one to run. Errors of the fitted map
/// (not monotone) are returned as the general fit returns them. Work: ≤ 64 points × ≤ 9 split
/// products and one 64-bit division (the weights), a fixed ≤ 4 × 4 factorisation, then one
/// residual pass.
#[allow(clippy::too_many_arguments)]
#[inline(never)]
pub(crate) fn fit_correction(
    points: &[FitPoint],
    xs: &[i64],
    nominal_fm: &[i64],
    nominal: &WavelengthMap,
    degree: u8,
    pixels: u16,
    out: &mut MapFit,
    scratch: &mut FitScratch,
    evals: Option<&mut [(i64, i64)]>,
) -> Option<Result<(), CalibrateError>> {
    let n = points.len();
    if !(1..=3).contains(&degree)
        || n < degree as usize + 1
        || n > MAX_FIT_POINTS
        || xs.len() != n
        || nominal_fm.len() != n
        || nominal.degree > degree
    {
        return None;
    }
    let frame = WavelengthMap {
        degree,
        ..standard_frame(pixels)
    };
    if (nominal.center_px_q16, nominal.half_width_px_q16)
        != (frame.center_px_q16, frame.half_width_px_q16)
    {
        return None;
    }
    let d = degree as usize + 1;
    let FitScratch {
        weights_q20,
        sums60,
        tri: [l, nm],
        ..
    } = scratch;
    weights_q20.clear();
    *sums60 = [0; 11];
    let (s60, t60) = sums60.split_at_mut(7);
    let sigma_min = points
        .iter()
        .map(|p| p.sigma_px_q16.max(1))
        .min()
        .unwrap_or(1) as u64;
    // Σ w x^j (j ≤ 6) and Σ w x^r δ (r ≤ 3) summed exactly in Q60 (each w x^j a 32 × 32-bit
    // product: |x|, w ≤ 1 in Q30), then taken to Q40 and Q30: below 2^46 and 2^61 for |δ| < 2^24.
    for ((pt, &x), &u) in points.iter().zip(xs.iter()).zip(nominal_fm.iter()) {
        let delta = pt.wavelength_fm.checked_sub(u)?;
        if x.unsigned_abs() > 1 << 30 || delta.unsigned_abs() >= 1 << 24 {
            return None;
        }
        let (w30, w20) = both_weights(sigma_min, pt.sigma_px_q16.max(1) as u64)?;
        let _ = weights_q20.push(Some(w20));
        let (w, x) = (w30 as i32, x as i32);
        let mut p = 1i64 << 30;
        for (j, slot) in s60.iter_mut().enumerate().take(2 * d - 1) {
            let wp = mul_i32_wide(w, p as i32);
            *slot += wp as i128;
            if let Some(tj) = t60.get_mut(j).filter(|_| j < d) {
                *tj += wide_by_narrow(wp, delta);
            }
            p = mul_i32_wide(p as i32, x) >> 30;
        }
    }
    let mut s = [0i64; 7];
    for (o, &v) in s.iter_mut().zip(s60.iter()) {
        *o = i64::try_from(v >> 20).ok()?;
    }
    let mut t = [0i64; 4];
    for (o, &v) in t.iter_mut().zip(t60.iter()) {
        *o = i64::try_from(v >> 30).ok()?;
    }
    let inv = ldl(&s, d, l)?;
    let l: &[[i64; 4]; 4] = l;
    // L y = t (Q30 fm), z = y / D (Q8 fm), Lᵀ c = z.
    let mut y = [0i64; 4];
    for i in 0..d {
        let mut v = *t.get(i)?;
        for k in 0..i {
            v = v.checked_sub(mul_q40(*l.get(i)?.get(k)?, *y.get(k)?)?)?;
        }
        *y.get_mut(i)? = v;
    }
    let mut c = [0i64; 4];
    for i in (0..d).rev() {
        let mut v = inv.get(i)?.div(*y.get(i)?, 18)?;
        for k in i + 1..d {
            v = v.checked_sub(mul_q40(*l.get(k)?.get(i)?, *c.get(k)?)?)?;
        }
        *c.get_mut(i)? = v;
    }
    let mut coeff = nominal.coeff_fm;
    for (out_c, &cq8) in coeff.iter_mut().zip(c.iter()).take(d) {
        *out_c = out_c.checked_add(cq8.checked_add(128)? >> 8)?;
    }
    // M⁻¹ = L⁻ᵀ D⁻¹ L⁻¹ (Q40), with N = L⁻¹ (unit lower triangular, Q40).
    *nm = [[0i64; 4]; 4];
    for j in 0..d {
        *nm.get_mut(j)?.get_mut(j)? = 1 << 40;
        for i in j + 1..d {
            let mut v = 0i64;
            for k in j..i {
                v = v.checked_sub(mul_q40(*l.get(i)?.get(k)?, *nm.get(k)?.get(j)?)?)?;
            }
            *nm.get_mut(i)?.get_mut(j)? = v;
        }
    }
    out.inverse_q40 = [[0; 4]; 4];
    for r in 0..d {
        for cc in r..d {
            let mut v = 0i128;
            for k in cc..d {
                let row = nm.get(k)?;
                let p = mul_q40(*row.get(r)?, *row.get(cc)?)?;
                v += inv.get(k)?.div(p, 40)? as i128;
            }
            *out.inverse_q40.get_mut(r)?.get_mut(cc)? = v;
            *out.inverse_q40.get_mut(cc)?.get_mut(r)? = v;
        }
    }
    let map = match WavelengthMap::with_frame(
        frame.center_px_q16,
        frame.half_width_px_q16,
        degree,
        coeff,
        pixels,
    ) {
        Ok(m) => m,
        Err(e) => return Some(Err(e)),
    };
    let hw = HalfWidth::forward(&frame);
    let x_of = |k: usize, _: &FitPoint| xs.get(k).copied().unwrap_or(0);
    Some(finish(
        points,
        &x_of,
        map,
        &hw,
        weights_q20,
        sigma_min as i128,
        out,
        evals,
    ))
}

/// LDLᵀ of the normal matrix M_rc = s[r + c] (Q40, d ≤ 4): L (unit lower, Q40) into `l`, and each
/// pivot D_j as a [`Pivot`]; `None` for a pivot below 2^-20 or 2^-12 of its diagonal entry, or a value
/// past `i64`.
fn ldl(s: &[i64; 7], d: usize, l: &mut [[i64; 4]; 4]) -> Option<[Pivot; 4]> {
    *l = [[0i64; 4]; 4];
    let mut dg = [0i64; 4];
    let mut inv = [Pivot { v: 0, shift: 0 }; 4];
    for j in 0..d.min(4) {
        let mut dj = *s.get(2 * j)?;
        for k in 0..j {
            let ljk = *l.get(j)?.get(k)?;
            dj = dj.checked_sub(mul_q40(mul_q40(ljk, ljk)?, *dg.get(k)?)?)?;
        }
        // A pivot below 2^-20, or below 2^-12 of its diagonal entry (the points barely fix this
        // coefficient: sums rounded to 2^-40 would move the map), is left to the general fit.
        if dj < 1 << 20 || dj < *s.get(2 * j)? >> 12 {
            return None;
        }
        *dg.get_mut(j)? = dj;
        let pivot = Pivot::new(dj as u64);
        *inv.get_mut(j)? = pivot;
        for i in j + 1..d.min(4) {
            let mut v = *s.get(i + j)?;
            for k in 0..j {
                let p = mul_q40(*l.get(i)?.get(k)?, *l.get(j)?.get(k)?)?;
                v = v.checked_sub(mul_q40(p, *dg.get(k)?)?)?;
            }
            *l.get_mut(i)?.get_mut(j)? = pivot.div(v, 40)?;
        }
    }
    Some(inv)
}

/// A positive pivot D (Q40) by its normalised reciprocal: D · 2^shift has its top bit set and
/// 2^64 + v = ⌊(2^128 − 1) / (D · 2^shift)⌋ ([`reciprocal_word`]), so a / D ≈ a (2^64 + v) /
/// 2^(128 − shift) to 2^-63 of the quotient, without a division.
#[derive(Clone, Copy)]
struct Pivot {
    v: u64,
    shift: u32,
}

impl Pivot {
    fn new(d: u64) -> Pivot {
        // d > 0 (a pivot at least 2^20): the shift is below 64.
        let shift = d.leading_zeros().min(63);
        Pivot {
            v: super::muldiv::reciprocal_word(d << shift),
            shift,
        }
    }

    /// a · 2^k / D rounded toward zero (a Q40 value over D gives Q`k`), `None` past `i64`.
    fn div(&self, a: i64, k: u32) -> Option<i64> {
        let ua = a.unsigned_abs();
        // |a| < 2^63 and v < 2^64: a · 2^64 + a · v < 2^128.
        let n = ((ua as u128) << 64).checked_add(mul_64x64(ua, self.v))?;
        let m = n >> 128u32.checked_sub(self.shift.checked_add(k)?)?.min(127);
        let m = i64::try_from(m).ok()?;
        Some(if a < 0 { -m } else { m })
    }
}

/// (a · b) >> 40 rounded toward zero, `None` past `i64`: one split 64 × 64-bit product.
fn mul_q40(a: i64, b: i64) -> Option<i64> {
    let m = mul_64x64(a.unsigned_abs(), b.unsigned_abs()) >> 40;
    let m = i64::try_from(m).ok()?;
    Some(if (a < 0) != (b < 0) { -m } else { m })
}

/// `a.checked_div(b)`, through the 64-bit division when both are in 0 … 2^64 − 1 (the sums of
/// squares and weights of any real fit): for a ≥ 0 and b > 0 the truncated quotients agree, and
/// b = 0 is `None` either way. A 128-bit division is a long library routine on the Cortex-M0.
fn div_nonnegative(a: i128, b: i128) -> Option<i128> {
    match (u64::try_from(a), u64::try_from(b)) {
        (Ok(ua), Ok(ub)) => ua.checked_div(ub).map(i128::from),
        _ => a.checked_div(b),
    }
}

/// The fit and residual weights (σ_min / σ)² in Q30 and Q20, rounded half up as [`mul_div_round`]
/// rounds them, from one 64-bit division: with n = σ_min² · 2^30 = q · σ² + r, the Q20 quotient is
/// q >> 10 and its remainder ((q mod 2^10) · σ² + r) / 2^10 (exact: n / 2^10 = (q >> 10) σ² + that).
/// `None` outside σ_min ≤ σ, σ_min < 2^17 and σ < 2^25 (σ_min² · 2^30 < 2^64 and σ² < 2^50 keep
/// every product in `u64`; a real centroid σ is a small fraction of a pixel, below 2^16).
fn both_weights(sigma_min: u64, sigma: u64) -> Option<(u64, u32)> {
    if sigma_min == 0 || sigma_min > sigma || sigma_min >= 1 << 17 || sigma >= 1 << 25 {
        return None;
    }
    let (n, d) = ((sigma_min * sigma_min) << 30, sigma * sigma);
    let (q, r) = (n / d, n % d);
    let w30 = q + u64::from(r >= d - r);
    let (q20, t) = (q >> 10, q & 1023);
    let r20 = (t * d + r) >> 10;
    let w20 = q20 + u64::from(r20 >= d - r20);
    // σ_min ≤ σ: both at most 2^30 and 2^20.
    Some((w30, u32::try_from(w20).ok()?))
}

/// One point's terms of the normal equations (Q60): w · x^(r+c) and w · x^r · λ, x and w in Q30.
fn accumulate(
    m: &mut [[i128; 9]; 4],
    d: usize,
    w: i128,
    x: i64,
    wavelength_fm: i64,
) -> Result<(), CalibrateError> {
    let x = x as i128;
    let mut pw = [0i128; 7]; // x^k in Q30
    let mut xk: i128 = 1 << 30;
    for slot in pw.iter_mut() {
        *slot = xk;
        xk = (xk * x) >> 30;
    }
    for (r, row) in m.iter_mut().enumerate().take(d) {
        for (c, cell) in row.iter_mut().enumerate().take(d) {
            *cell += w * pw.get(r + c).copied().unwrap_or(0); // Q60
        }
        let wx = w * pw.get(r).copied().unwrap_or(0);
        row[4] += wx
            .checked_mul(wavelength_fm as i128)
            .ok_or(CalibrateError::Overflow)?;
    }
    Ok(())
}

/// [`accumulate`] for |x| ≤ 1 (Q30) and a weight 0 ≤ w ≤ 1 (Q30), the same integers: every
/// product but the last fits `i64` there (each is at most 2^60), and that one is a single widening
/// product of at most 2^123, so the checked product of the general path cannot fail.
///
/// w · x^r · λ splits into two 32 × 32 → 64-bit products (λ below 2^32 in size; a 128-bit
/// product otherwise): the same integers without the 128-bit library product. The other products
/// have both factors in `i32` by the bounds alone, so they take [`mul_i32_wide`] without a range
/// test (cheaper than the library's 64-bit product on the Cortex-M0, measured).
fn accumulate_narrow(m: &mut [[i128; 9]; 4], d: usize, w: i64, x: i64, wavelength_fm: i64) {
    // |x^k|, |x|, w ≤ 2^30 all fit `i32`: each product is one from 32-bit pieces.
    let q30 = |a: i64, b: i64| mul_i32_wide(a as i32, b as i32);
    let mut pw = [0i64; 7];
    let mut xk: i64 = 1 << 30;
    for slot in pw.iter_mut() {
        *slot = xk;
        xk = q30(xk, x) >> 30;
    }
    // Cell (r, c) takes w · x^(r+c): the 2d − 1 distinct products once each.
    let mut wp = [0i64; 7];
    for (slot, &p) in wp.iter_mut().zip(pw.iter()).take((2 * d).saturating_sub(1)) {
        *slot = q30(w, p);
    }
    for (r, row) in m.iter_mut().enumerate().take(d) {
        for (c, cell) in row.iter_mut().enumerate().take(d) {
            *cell += wp.get(r + c).copied().unwrap_or(0) as i128;
        }
        let wx = q30(w, pw.get(r).copied().unwrap_or(0));
        row[4] += wide_by_narrow(wx, wavelength_fm);
    }
}

/// a · b in `i128` for |b| < 2^32: |a| = h · 2^32 + l, so |a| · |b| = (h|b|) · 2^32 + l|b|, two
/// 32 × 32 → 64-bit products (h < 2^31 for `i64`); the 128-bit product otherwise.
fn wide_by_narrow(a: i64, b: i64) -> i128 {
    let Ok(ub) = u32::try_from(b.unsigned_abs()) else {
        return a as i128 * b as i128;
    };
    let ua = a.unsigned_abs();
    let hi = mul_u32_wide((ua >> 32) as u32, ub) as u128;
    let lo = mul_u32_wide(ua as u32, ub) as u128;
    let mag = ((hi << 32) + lo) as i128;
    if (a < 0) != (b < 0) {
        -mag
    } else {
        mag
    }
}

/// In-place Gauss–Jordan with partial pivoting on the first `d` (≤ 4) columns of a 4 × 9 system.
fn gauss_jordan(m: &mut [[i128; 9]; 4], d: usize) -> Result<(), CalibrateError> {
    let d = d.min(4);
    for col in 0..d {
        let mag = |m: &[[i128; 9]; 4], r: usize| {
            m.get(r)
                .and_then(|row| row.get(col))
                .map_or(0, |v| v.unsigned_abs())
        };
        let mut best = col;
        for r in col + 1..d {
            if mag(m, r) > mag(m, best) {
                best = r;
            }
        }
        m.swap(col.min(3), best.min(3));
        let pivot_row = m.get(col).copied().unwrap_or([0; 9]);
        let piv = pivot_row.get(col).copied().unwrap_or(0);
        // A pivot below 2^-40 of the matrix scale means the points do not fix this coefficient.
        if piv.unsigned_abs() < (1u128 << 20) {
            return Err(CalibrateError::Degenerate);
        }
        // Every elimination of this column divides by the same pivot: its reciprocal once.
        let by_piv = Divisor::new(piv);
        for (r, row) in m.iter_mut().enumerate().take(d) {
            let f = row.get(col).copied().unwrap_or(0);
            if r == col || f == 0 {
                continue;
            }
            for (k, (cell, &p)) in row.iter_mut().zip(pivot_row.iter()).enumerate().skip(col) {
                // A zero in the pivot row (unused columns, the identity block early on) changes
                // nothing: 0 · f / piv is 0 exactly, without the 128-bit long division.
                if p == 0 {
                    continue;
                }
                // The pivot's own column: piv · f / piv is f exactly, and the cell is f, so it
                // becomes 0 (the value the division would give, without it).
                if k == col {
                    *cell = 0;
                    continue;
                }
                let delta = match &by_piv {
                    Some(dv) => dv.mul_div_round(p, f),
                    None => mul_div_round(p, f, piv),
                }
                .ok_or(CalibrateError::Overflow)?;
                *cell = cell.checked_sub(delta).ok_or(CalibrateError::Overflow)?;
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn narrow_division_is_the_wide_one() {
        let mut next = crate::test_rng::xorshift(0x5be0_cd19_137e_2179u64);
        let mut narrow = 0;
        for _ in 0..100_000 {
            let wide = |v: u64, w: u64, bits: u64| -> i128 {
                let m = (((v as u128) << 64 | w as u128) >> (128 - bits.clamp(1, 127))) as i128;
                if v & 1 == 1 && w.is_multiple_of(4) {
                    -m
                } else {
                    m
                }
            };
            let (a, b) = (
                wide(next(), next(), next() % 100),
                wide(next(), next(), next() % 70),
            );
            narrow += usize::from((0..1 << 64).contains(&a) && (0..1 << 64).contains(&b));
            assert_eq!(div_nonnegative(a, b), a.checked_div(b), "{a} {b}");
        }
        assert!(narrow > 20_000, "{narrow}");
        for (a, b) in [
            (0, 0),
            (5, 0),
            (u64::MAX as i128, 1),
            (u64::MAX as i128, 7),
            (-9, 2),
        ] {
            assert_eq!(div_nonnegative(a, b), a.checked_div(b), "{a} {b}");
        }
    }

    #[test]
    fn both_weights_from_one_division_are_the_rounded_quotients() {
        let mut bits = crate::test_rng::xorshift(0x0123_4567_89ab_cdefu64);
        let mut next = move |m: u64| bits() % m;
        let mut checked = 0;
        for round in 0..200_000 {
            let top = if round % 3 == 0 { 1 << 25 } else { 1 << 14 };
            let (a, b) = (1 + next(top), 1 + next(top));
            let (smin, s) = (a.min(b), a.max(b));
            let (n, d) = ((smin * smin) as i128, (s * s) as i128);
            let want = (
                mul_div_round(n, 1 << 30, d).unwrap() as u64,
                mul_div_round(n, 1 << 20, d).unwrap() as u32,
            );
            match both_weights(smin, s) {
                Some(got) => {
                    assert_eq!(got, want, "{smin} {s}");
                    checked += 1;
                }
                None => assert!(s >= 1 << 25 || smin >= 1 << 17),
            }
        }
        assert!(checked > 120_000, "{checked}");
        // Exact halves: σ_min² · 2^20 an odd multiple of σ² / 2.
        assert_eq!(both_weights(1, 2), Some((1 << 28, 1 << 18)));
        assert_eq!(both_weights(3, 3), Some((1 << 30, 1 << 20)));
        assert_eq!(both_weights(2, 1), None);
    }

    #[test]
    fn split_product_is_the_wide_one() {
        let mut next = crate::test_rng::xorshift(0x6a09_e667_bb67_ae85u64);
        let signed = |v: u64, bits: u64| {
            let m = (v >> (64 - bits)) as i64;
            if v & 1 == 1 {
                -m
            } else {
                m
            }
        };
        for _ in 0..200_000 {
            let (w, l) = (
                signed(next(), 1 + next() % 63),
                signed(next(), 1 + next() % 40),
            );
            assert_eq!(wide_by_narrow(w, l), w as i128 * l as i128, "{w} {l}");
        }
        for (a, b) in [
            (1 << 30, 1 << 30),
            (-(1 << 30), 1 << 30),
            (i64::MAX, 3),
            (i64::MIN, -1),
        ] {
            assert_eq!(wide_by_narrow(a, b), a as i128 * b as i128);
        }
    }

    #[test]
    fn variance_scaling_is_the_general_rounded_quotient() {
        let mut next = crate::test_rng::xorshift(0x9e37_79b9_7f4a_7c15u64);
        for _ in 0..100_000 {
            let q = (((next() as u128) << 64 | next() as u128) >> (next() % 128)) as i128 >> 1;
            let scale = next() >> (next() % 64);
            // Exact halves too: q · scale an odd multiple of 2^39.
            let (q, scale) = if next().is_multiple_of(8) {
                ((2 * (next() % 1_000_000) as i128 + 1) << 39, 1)
            } else {
                (q, scale)
            };
            assert_eq!(
                scale_variance(q, scale),
                mul_div_i128(q, scale as i128, 1 << 40),
                "{q} {scale}"
            );
        }
        for (q, scale) in [
            (0, 0),
            (u64::MAX as i128, u64::MAX),
            (1 << 64, 3),
            (i128::MAX, 2),
        ] {
            assert_eq!(
                scale_variance(q, scale),
                mul_div_i128(q, scale as i128, 1 << 40)
            );
        }
    }

    fn truth(p: i64) -> i64 {
        // 380 … 720 nm over 2048 px with curvature: λ = 380 nm + 0.17 nm·p − 1e-6 nm·p² (in fm).
        380_000_000 + 170_000 * p - p * p
    }

    #[test]
    fn exact_points_give_back_the_polynomial() {
        let pts: heapless::Vec<FitPoint, 8> = [100i64, 400, 800, 1200, 1600, 1900]
            .iter()
            .map(|&p| FitPoint {
                center_px_q16: (p << 16) as i32,
                sigma_px_q16: 1 << 12,
                wavelength_fm: truth(p),
            })
            .collect();
        let fit = fit_map(&pts, 2, 2048).unwrap();
        for p in [0i64, 333, 1024, 2047] {
            let got = fit.map.wavelength_fm((p << 16) as i32).unwrap();
            assert!((got - truth(p)).abs() <= 3, "p={p}: {got} vs {}", truth(p));
        }
        assert!(fit.rms_residual_fm <= 2);
        // Uncertainty at the centre: σ 1/16 px × 0.17 nm/px / sqrt(6) ≈ 4.3 pm order; finite and small.
        let s = fit.sigma_fm_at(1024 << 16);
        assert!(s > 500 && s < 20_000, "{s}");
    }

    #[test]
    fn sigma_polynomial_gives_the_term_by_term_sigma() {
        let mut bits = crate::test_rng::xorshift(0x5851_f42d_4c95_7f2du64);
        let mut next = move |m: u64| bits() % m;
        let (mut checked, mut same, mut wide) = (0u32, 0u32, 0u32);
        for _ in 0..300 {
            let degree = 1 + next(3) as u8;
            let n = degree as usize + 2 + next(10) as usize;
            let pts: std::vec::Vec<FitPoint> = (0..n)
                .map(|_| {
                    let p = next(2048) as i64;
                    FitPoint {
                        center_px_q16: (p << 16) as i32 + next(65_536) as i32,
                        sigma_px_q16: 200 + next(20_000) as u32,
                        wavelength_fm: truth(p) + next(20_000) as i64 - 10_000,
                    }
                })
                .collect();
            let Ok(fit) = fit_map(&pts, degree, 2048) else {
                continue;
            };
            // Badly conditioned fits (few points bunched together) may have an inverse too large
            // for the polynomial: the term-by-term σ serves them.
            let Some(poly) = fit.sigma_poly() else {
                wide += 1;
                continue;
            };
            for k in 0..=64i64 {
                let x = (k - 32) << 25;
                let (a, b) = (poly.sigma_fm_at_x(x).unwrap(), fit.sigma_fm_at_x(x));
                assert!(a.abs_diff(b) <= 1, "degree {degree} x {x}: {a} vs {b}");
                same += u32::from(a == b);
                checked += 1;
            }
            assert_eq!(poly.sigma_fm_at_x((1 << 30) + 1), None);
        }
        assert!(checked > 10_000 && wide < 30, "{checked} {wide}");
        assert!(same * 100 > checked * 95, "{same} of {checked}");
    }

    #[test]
    fn too_few_or_coincident_points_are_refused() {
        let one = [FitPoint {
            center_px_q16: 0,
            sigma_px_q16: 1 << 12,
            wavelength_fm: 400_000_000,
        }];
        assert_eq!(
            fit_map(&one, 1, 2048).unwrap_err(),
            CalibrateError::TooFewPoints
        );
        let same = [one[0], one[0], one[0]];
        assert_eq!(
            fit_map(&same, 1, 2048).unwrap_err(),
            CalibrateError::Degenerate
        );
    }

    #[test]
    fn noisy_points_report_their_scatter() {
        let offs = [3_000i64, -2_000, 1_000, -4_000, 2_000, 0, -1_000, 1_500];
        let pts: heapless::Vec<FitPoint, 8> = offs
            .iter()
            .enumerate()
            .map(|(i, o)| {
                let p = 100 + 250 * i as i64;
                FitPoint {
                    center_px_q16: (p << 16) as i32,
                    sigma_px_q16: 1 << 10,
                    wavelength_fm: truth(p) + o,
                }
            })
            .collect();
        let fit = fit_map(&pts, 2, 2048).unwrap();
        assert!(
            fit.rms_residual_fm > 1_000 && fit.rms_residual_fm < 3_000,
            "{}",
            fit.rms_residual_fm
        );
        // σ 1/64 px × 170 pm = 2.7 pm per point, scatter ~2 pm: χ²/dof of order 1.
        assert!(
            fit.chi2_per_dof_q8 > 64 && fit.chi2_per_dof_q8 < 1024,
            "{}",
            fit.chi2_per_dof_q8
        );
    }

    #[test]
    fn narrow_quadratic_form_gives_the_wide_integers() {
        let mut next = crate::test_rng::xorshift(0x9e37_79b9_7f4a_7c15u64);
        let base = fit_map(
            &[100i64, 400, 800, 1200, 1600, 1900].map(|p| FitPoint {
                center_px_q16: (p << 16) as i32,
                sigma_px_q16: 1 << 12,
                wavelength_fm: truth(p),
            }),
            3,
            2048,
        )
        .unwrap();
        let mut narrow = 0;
        for case in 0..300 {
            let mut f = base;
            f.map.degree = 1 + (case % 3) as u8;
            if case > 0 {
                // Entries of every size up to 2^62 and past it, either sign.
                for cell in f.inverse_q40.iter_mut().flatten() {
                    let bits = next() % 64;
                    let mag = (next() >> (64 - bits.max(1))) as i128;
                    *cell = if next() & 1 == 1 { -mag } else { mag };
                }
            }
            for _ in 0..20 {
                let x = (next() % (1 << 31)) as i64 - (1 << 30) + (next() % 3) as i64 - 1;
                if let Some(q) = f.quadratic_form_narrow(x) {
                    assert_eq!(q, f.quadratic_form(x), "{f:?} x={x}");
                    narrow += 1;
                }
            }
        }
        assert!(narrow > 3_000, "{narrow}");
        for x in [-(1i64 << 30), 1 << 30, 0, 1, -1] {
            assert_eq!(base.quadratic_form_narrow(x), Some(base.quadratic_form(x)));
        }
    }

    #[test]
    fn narrow_accumulation_gives_the_wide_sums() {
        let mut next = crate::test_rng::xorshift(0x51_7cc1_b727_220au64);
        for case in 0..2_000 {
            let d = 2 + case % 3;
            let (mut a, mut b) = ([[0i128; 9]; 4], [[0i128; 9]; 4]);
            for _ in 0..8 {
                let x = (next() % (1 << 31)) as i64 - (1 << 30) + (next() % 3) as i64 - 1;
                let x = x.clamp(-(1 << 30), 1 << 30);
                let w = (next() % ((1 << 30) + 1)) as i64;
                let lam = (next() >> 1) as i64 * if next() & 1 == 1 { -1 } else { 1 };
                accumulate_narrow(&mut a, d, w, x, lam);
                accumulate(&mut b, d, w as i128, x, lam).unwrap();
            }
            assert_eq!(a, b);
        }
        // The bounds themselves: x = ±1 and w = 0 or 1 (Q30), every power at ±2^30.
        for d in 2..=4 {
            for x in [-(1i64 << 30), 1 << 30, -1, 0, 1] {
                for w in [0i64, 1, 1 << 30] {
                    let (mut a, mut b) = ([[0i128; 9]; 4], [[0i128; 9]; 4]);
                    accumulate_narrow(&mut a, d, w, x, -(1 << 62));
                    accumulate(&mut b, d, w as i128, x, -(1 << 62)).unwrap();
                    assert_eq!(a, b, "{d} {x} {w}");
                }
            }
        }
    }

    #[test]
    fn fit_with_known_x_is_the_fit() {
        let mut next = crate::test_rng::xorshift(0x6a09_e667_f3bc_c908u64);
        let mut fitted = 0;
        for round in 0..600 {
            let pixels = [16u16, 2048, 4096][round % 3];
            let n = 2 + (next() % 20) as usize;
            let pts: std::vec::Vec<FitPoint> = (0..n)
                .map(|_| {
                    // Some beyond the sensor's ends (|x| > 1), some wide σ.
                    let p = (next() % (pixels as u64 * 3 / 2)) as i64 - pixels as i64 / 8;
                    FitPoint {
                        center_px_q16: ((p << 16) + (next() % 65_536) as i64) as i32,
                        sigma_px_q16: (64 + next() % 20_000) as u32 >> (next() % 3),
                        wavelength_fm: truth(p) + (next() % 20_001) as i64 - 10_000,
                    }
                })
                .collect();
            let frame = standard_frame(pixels);
            let xs: std::vec::Vec<i64> = pts.iter().map(|p| frame.x_q30(p.center_px_q16)).collect();
            let degree = 1 + (next() % 3) as u8;
            let (mut a, mut b) = (MapFit::ZERO, MapFit::ZERO);
            let mut m = FitScratch::new();
            let plain = fit_map_into(&pts, degree, pixels, &mut a, &mut m);
            let mut evals = [(0i64, 0i64); 24];
            let known = fit_map_at(
                &pts,
                Some(&xs),
                degree,
                pixels,
                &mut b,
                &mut m,
                Some(&mut evals),
            );
            assert_eq!(plain, known);
            if plain.is_ok() {
                assert_eq!(a, b);
                fitted += 1;
                let hw = HalfWidth::forward(&b.map);
                for (pt, e) in pts.iter().zip(evals) {
                    assert_eq!(b.map.wavelength_and_slope_by(pt.center_px_q16, &hw), Ok(e));
                }
            }
            // A slice of another length is ignored.
            let short = fit_map_at(&pts, Some(&xs[1..]), degree, pixels, &mut b, &mut m, None);
            assert_eq!(plain, short);
        }
        assert!(fitted > 300, "{fitted}");
    }

    /// The 64-bit fit of the differences from a nominal map is the general fit: the same
    /// map to 160 fm (10⁻³ px) and 5 % of its σ, the same residual figures and covariance to 10⁻⁵
    /// (σ to 0.1 %: the Birge factor follows the residuals), on random
    /// point sets around maps several nm and per cent off the nominal (and it declines rather than
    /// guesses where it does not apply).
    #[test]
    fn correction_fit_is_the_general_fit() {
        let mut next = crate::test_rng::xorshift(0x2545_f491_4f6c_dd1du64);
        let (mut taken, mut worst_c) = (0, 0i64);
        for round in 0..3000 {
            let pixels = 2048u16;
            let nominal = WavelengthMap::new(
                pixels,
                2,
                [
                    535_000_000,
                    165_000_000,
                    -1_500_000 + (next() % 3_000_000) as i64,
                    0,
                ],
            )
            .unwrap();
            let off = (next() % 16_000_000) as i64 - 8_000_000;
            let scale_ppm = (next() % 40_000) as i64 - 20_000;
            let mut c = nominal.coeff_fm;
            c[0] += off;
            c[1] += c[1] * scale_ppm / 1_000_000;
            c[2] += (next() % 200_000) as i64 - 100_000;
            let truth = WavelengthMap::new(pixels, 2, c).unwrap();
            let n = 3 + (next() % 40) as usize;
            let degree = 1 + (round % 3) as u8;
            let mut pts = std::vec::Vec::new();
            for _ in 0..n {
                let p = ((next() % (2047 << 16)) as i32).max(1);
                let lam = truth.wavelength_fm(p).unwrap() + (next() % 4000) as i64 - 2000;
                let sigma = 200 + (next() % 20_000) as u32;
                pts.push(FitPoint {
                    center_px_q16: p,
                    sigma_px_q16: sigma,
                    wavelength_fm: lam,
                });
            }
            let frame = standard_frame(pixels);
            let xs: std::vec::Vec<i64> = pts.iter().map(|p| frame.x_q30(p.center_px_q16)).collect();
            let us: std::vec::Vec<i64> = xs
                .iter()
                .map(|&x| nominal.wavelength_at_x(x).unwrap())
                .collect();
            let mut want = MapFit::ZERO;
            let mut got = MapFit::ZERO;
            let mut scratch = FitScratch::new();
            let mut ev_want = [(0i64, 0i64); 64];
            let mut ev_got = [(0i64, 0i64); 64];
            let general = fit_map_at(
                &pts,
                Some(&xs),
                degree,
                pixels,
                &mut want,
                &mut scratch,
                Some(&mut ev_want),
            );
            let quick = fit_correction(
                &pts,
                &xs,
                &us,
                &nominal,
                degree,
                pixels,
                &mut got,
                &mut scratch,
                Some(&mut ev_got),
            );
            if degree < 2 {
                assert!(quick.is_none(), "degree {degree} below the nominal's");
                continue;
            }
            let Some(quick) = quick else {
                continue;
            };
            match (general, quick) {
                (Ok(()), Ok(())) => {}
                (Err(a), Err(b)) => {
                    assert_eq!(a, b);
                    continue;
                }
                (a, b) => panic!("round {round}: {a:?} vs {b:?}"),
            }
            taken += 1;
            // The maps agree across the sensor to 160 fm (10⁻³ px here) plus 5 % of the map's own
            // σ there: on an ill-conditioned system (a few points, one of them weighing 10⁴ times
            // the others) the general fit's own rounding moves it that far, and the correction fit
            // is the nearer one to the exact solution (checked with 50-digit arithmetic, mpmath
            // 1.3, on such a case: 4 fm against 800 fm).
            let mut apart = 0;
            for i in 0..=16 {
                let p = (2047 << 16) / 16 * i;
                let dl =
                    (got.map.wavelength_fm(p).unwrap() - want.map.wavelength_fm(p).unwrap()).abs();
                let bar = 160 + want.sigma_fm_at(p) as i64 / 20;
                worst_c = worst_c.max(dl);
                apart = apart.max(dl as u64);
                assert!(dl <= bar, "round {round} px {p}: {dl} > {bar}");
            }
            assert_eq!(got.points, want.points);
            // Residuals move by at most what the maps differ.
            let d_rms = got.rms_residual_fm.abs_diff(want.rms_residual_fm);
            assert!(d_rms <= 8 + apart, "round {round}: {d_rms}");
            // χ² per dof (Q8) to 2 units and 0.1 %.
            let (cg, cw) = (got.chi2_per_dof_q8, want.chi2_per_dof_q8);
            assert!(
                cg.abs_diff(cw) <= 2 + cw / 1000,
                "round {round}: {cg} vs {cw}"
            );
            // The covariance to 10⁻⁵ of its size (the entry, or its row's diagonal).
            for r in 0..4 {
                for cc in 0..4 {
                    let (a, b) = (got.inverse_q40[r][cc], want.inverse_q40[r][cc]);
                    let size = b.abs().max(want.inverse_q40[r][r].abs()).max(1);
                    assert!(
                        (a - b).abs() * 100_000 <= size,
                        "round {round} ({r},{cc}): {a} vs {b}"
                    );
                }
            }
            for k in 0..n {
                assert!(
                    (ev_got[k].0 - ev_want[k].0).unsigned_abs() <= 8 + apart,
                    "round {round}"
                );
            }
            for p in [0, 700 << 16, 2047 << 16] {
                let (a, b) = (got.sigma_fm_at(p), want.sigma_fm_at(p));
                assert!(a.abs_diff(b) <= 1 + b / 1000, "round {round}: {a} vs {b}");
            }
        }
        assert!(taken > 1200, "{taken} ({worst_c} fm)");
        // Points on a map of the fit's degree (λ rounded to 1 fm): the fit finds that map to
        // 10⁻³ px.
        let mut exact = 0;
        for round in 0..500 {
            let nominal =
                WavelengthMap::new(2048, 2, [535_000_000, 165_000_000, -1_500_000, 0]).unwrap();
            let c3 = if round % 2 == 0 {
                0
            } else {
                (next() % 400_000) as i64 - 200_000
            };
            let truth = WavelengthMap::new(
                2048,
                3,
                [
                    535_000_000 + (next() % 16_000_000) as i64 - 8_000_000,
                    165_000_000 + (next() % 6_000_000) as i64 - 3_000_000,
                    -1_500_000 + (next() % 2_000_000) as i64 - 1_000_000,
                    c3,
                ],
            )
            .unwrap();
            let frame = standard_frame(2048);
            let n = 6 + (next() % 30) as usize;
            let pts: std::vec::Vec<FitPoint> = (0..n)
                .map(|_| {
                    let p = (next() % (2047 << 16)) as i32;
                    FitPoint {
                        center_px_q16: p,
                        sigma_px_q16: 500 + (next() % 8000) as u32,
                        wavelength_fm: truth.wavelength_at_x(frame.x_q30(p)).unwrap(),
                    }
                })
                .collect();
            let xs: std::vec::Vec<i64> = pts.iter().map(|p| frame.x_q30(p.center_px_q16)).collect();
            let us: std::vec::Vec<i64> = xs
                .iter()
                .map(|&x| nominal.wavelength_at_x(x).unwrap())
                .collect();
            let (mut got, mut sc) = (MapFit::ZERO, FitScratch::new());
            let Some(Ok(())) =
                fit_correction(&pts, &xs, &us, &nominal, 3, 2048, &mut got, &mut sc, None)
            else {
                continue;
            };
            exact += 1;
            for i in 0..=16 {
                let p = (2047 << 16) / 16 * i;
                let dl =
                    (got.map.wavelength_fm(p).unwrap() - truth.wavelength_fm(p).unwrap()).abs();
                assert!(dl <= 160, "round {round} px {p}: {dl}");
            }
        }
        assert!(exact > 300, "{exact}");
        // Off the fit frame, or with a difference of 2^24 fm: declined.
        let pts = [FitPoint {
            center_px_q16: 1 << 16,
            sigma_px_q16: 1000,
            wavelength_fm: 400_000_000,
        }; 4];
        let xs = [-1 << 30, 0, 1 << 29, 1 << 30];
        let m = WavelengthMap::new(2048, 2, [535_000_000, 165_000_000, 0, 0]).unwrap();
        let far = [400_000_000 - (1 << 24); 4];
        let (mut out, mut sc) = (MapFit::ZERO, FitScratch::new());
        assert!(fit_correction(&pts, &xs, &far, &m, 2, 2048, &mut out, &mut sc, None).is_none());
        let other = WavelengthMap::with_frame(900 << 16, 1100 << 16, 2, m.coeff_fm, 2048).unwrap();
        let near = [400_000_000; 4];
        assert!(
            fit_correction(&pts, &xs, &near, &other, 2, 2048, &mut out, &mut sc, None).is_none()
        );
    }
}
