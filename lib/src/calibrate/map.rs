//! The pixel → wavelength map of an instrument.
//!
//! Stored as a polynomial in the normalised pixel x = (p − centre) / half-width, so that x stays in
//! [−1, 1] across the sensor: the coefficients are then all of comparable size (fm) and the fit is
//! well conditioned in fixed point. Reports convert to the plain λ(p) = c0 + c1 p + c2 p² + c3 p³.
use super::error::CalibrateError;
use crate::find::math::{mul_i32_wide, mul_u32_wide};

/// Q30 scale of the normalised pixel coordinate x.
pub const X_ONE_Q30: i64 = 1 << 30;

/// Pixel → vacuum-or-air wavelength map (whichever medium its points were in; glowcheck uses air).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct WavelengthMap {
    /// Pixel at x = 0 (px, Q16).
    pub center_px_q16: i32,
    /// Pixels from the centre to x = ±1 (px, Q16, > 0).
    pub half_width_px_q16: i32,
    /// Polynomial degree, 1…3.
    pub degree: u8,
    /// λ(x) = Σ coeff_fm\[k\] · x^k, femtometres; entries above `degree` are 0.
    pub coeff_fm: [i64; 4],
}

impl WavelengthMap {
    /// All zero (degree 0): a placeholder before a map is known, so a `static` holding one stays
    /// in `.bss`. Not a usable map.
    pub(crate) const ZERO: WavelengthMap = WavelengthMap {
        center_px_q16: 0,
        half_width_px_q16: 0,
        degree: 0,
        coeff_fm: [0; 4],
    };

    /// A map for a sensor of `pixels` pixels from normalised coefficients; checks degree, width and
    /// that λ is monotone across the sensor (so the inverse exists).
    ///
    /// Work: the monotonicity check evaluates the slope 66 times (2 up to degree 2; ≤ 3 Horner steps
    /// each).
    pub fn new(
        pixels: u16,
        degree: u8,
        coeff_fm: [i64; 4],
    ) -> Result<WavelengthMap, CalibrateError> {
        let half = ((pixels.max(2) as i32 - 1) << 16) / 2;
        Self::with_frame(half, half, degree, coeff_fm, pixels)
    }

    /// Like [`new`](Self::new) with an explicit centre and half-width (px, Q16).
    ///
    /// Work: the monotonicity check evaluates the slope 66 times (2 up to degree 2; ≤ 3 Horner steps
    /// each).
    pub fn with_frame(
        center_px_q16: i32,
        half_width_px_q16: i32,
        degree: u8,
        mut coeff_fm: [i64; 4],
        pixels: u16,
    ) -> Result<WavelengthMap, CalibrateError> {
        if !(1..=3).contains(&degree) {
            return Err(CalibrateError::TooFewPoints);
        }
        if half_width_px_q16 <= 0 {
            return Err(CalibrateError::Degenerate);
        }
        for c in coeff_fm.iter_mut().skip(degree as usize + 1) {
            *c = 0;
        }
        let map = WavelengthMap {
            center_px_q16,
            half_width_px_q16,
            degree,
            coeff_fm,
        };
        map.check_monotone(pixels)?;
        Ok(map)
    }

    /// Monotone (strictly, one sign of slope) over pixels 0 … pixels−1, checked at 65 points.
    ///
    /// Up to degree 2 the computed slope is a monotone function of the pixel (x is a floor quotient,
    /// c1 + ⌊2c2·x / 2^30⌋ and the floor division by the half-width are monotone), so its sign and
    /// size at the 65 points are bounded by the two ends: checking those gives the same answer, and
    /// the same error, with 2 slopes instead of 66 (the walk stays for degree 3 and for an end that
    /// fails).
    fn check_monotone(&self, pixels: u16) -> Result<(), CalibrateError> {
        let last = (pixels.max(2) as i64 - 1) << 16;
        let sign = self.slope_fm_per_px_q16(0)?.signum();
        if sign == 0 {
            return Err(CalibrateError::NotMonotone);
        }
        if self.degree <= 2 {
            // An error at the far end may hide a sign change before it: then walk the points.
            if let Ok(s) = self.slope_fm_per_px_q16(last as i32) {
                return if s.signum() == sign {
                    Ok(())
                } else {
                    Err(CalibrateError::NotMonotone)
                };
            }
        }
        for i in 0..=64i64 {
            let p = (last * i / 64) as i32;
            if self.slope_fm_per_px_q16(p)?.signum() != sign {
                return Err(CalibrateError::NotMonotone);
            }
        }
        Ok(())
    }

    /// x of pixel p (px, Q16) in Q30.
    pub fn x_q30(&self, p_px_q16: i32) -> i64 {
        self.x_q30_by(p_px_q16, &HalfWidth::plain(self))
    }

    /// [`x_q30`](Self::x_q30) dividing through `hw` (this map's half-width). One copy (not inlined):
    /// its division is inlined into it.
    #[inline(never)]
    pub(crate) fn x_q30_by(&self, p_px_q16: i32, hw: &HalfWidth) -> i64 {
        // A map built by `new` has half-width > 0; a hand-made zero gives x = 0 rather than a fault.
        // |p − centre| < 2^32, so the shifted value is below 2^62.
        hw.div_shl(p_px_q16 as i64 - self.center_px_q16 as i64, 30)
            .unwrap_or(0)
            .clamp(-(8 << 30), 8 << 30)
    }

    /// Wavelength at pixel p (px, Q16), femtometres.
    ///
    /// Loop bound: `degree` + 1 ≤ 4 Horner steps (a hand-made degree above 3 fails on the first).
    pub fn wavelength_fm(&self, p_px_q16: i32) -> Result<i64, CalibrateError> {
        self.wavelength_at_x(self.x_q30(p_px_q16))
    }

    /// Wavelength at normalised pixel x (Q30), femtometres.
    pub(crate) fn wavelength_at_x(&self, x_q30: i64) -> Result<i64, CalibrateError> {
        eval_q30(&self.coeff_fm, self.degree, x_q30)
    }

    /// dλ/dp at pixel p: femtometres per pixel, Q16.
    ///
    /// Loop bound: `degree` ≤ 3 Horner steps (a hand-made degree above 3 fails on the first).
    pub fn slope_fm_per_px_q16(&self, p_px_q16: i32) -> Result<i64, CalibrateError> {
        self.slope_at_x(self.x_q30(p_px_q16))
    }

    /// [`wavelength_fm`](Self::wavelength_fm) and [`slope_fm_per_px_q16`](Self::slope_fm_per_px_q16)
    /// at one pixel, sharing the pixel's x and dividing through `hw` (made for this map); the first
    /// error of the two.
    pub(crate) fn wavelength_and_slope_by(
        &self,
        p_px_q16: i32,
        hw: &HalfWidth,
    ) -> Result<(i64, i64), CalibrateError> {
        let x = self.x_q30_by(p_px_q16, hw);
        let lam = eval_q30(&self.coeff_fm, self.degree, x)?;
        Ok((lam, self.slope_at_x_by(x, hw)?))
    }

    /// dλ/dp at normalised pixel x (Q30): femtometres per pixel, Q16.
    pub(crate) fn slope_at_x(&self, x: i64) -> Result<i64, CalibrateError> {
        self.slope_at_x_by(x, &HalfWidth::plain(self))
    }

    /// [`slope_at_x`](Self::slope_at_x) dividing through `hw` (this map's half-width).
    pub(crate) fn slope_at_x_by(&self, x: i64, hw: &HalfWidth) -> Result<i64, CalibrateError> {
        // dλ/dx = c1 + 2 c2 x + 3 c3 x².
        let d: i128 = if x.unsigned_abs() <= 1 << 30 && self.narrow_slope() {
            // On the sensor (|x| ≤ 1) with every k·c_k below 2^31, |d| stays below 3 · 2^31 and
            // d · x below 2^63: the same integers in i64.
            // Horner from the top term (the first step of the general loop, (0 · x) >> 30 + k c_k,
            // is that term), k · c_k by shifts and adds.
            let deg = self.degree as usize;
            let kc = |k: usize| -> Result<i64, CalibrateError> {
                let c = *self.coeff_fm.get(k).ok_or(CalibrateError::Overflow)?;
                Ok(match k {
                    1 => c,
                    2 => c << 1,
                    _ => (c << 1) + c,
                })
            };
            let mut d = kc(deg)?;
            for k in (1..deg).rev() {
                d = (mul_by_x(d, x) >> 30) + kc(k)?;
            }
            d as i128
        } else {
            let x = x as i128;
            let mut d: i128 = 0;
            for k in (1..=self.degree as usize).rev() {
                let c = *self.coeff_fm.get(k).ok_or(CalibrateError::Overflow)? as i128;
                d = ((d * x) >> 30) + c * k as i128;
            }
            d
        };
        let v = if d.unsigned_abs() < 1 << 31 {
            // d · 2^32 fits i64: the same truncating division, without the 128-bit routine.
            hw.div_shl(d as i64, 32).ok_or(CalibrateError::Degenerate)? as i128
        } else {
            (d << 32)
                .checked_div(self.half_width_px_q16 as i128)
                .ok_or(CalibrateError::Degenerate)?
        };
        i64::try_from(v).map_err(|_| CalibrateError::Overflow)
    }

    /// The smallest |dλ/dp| (fm per px, Q16) [`slope_at_x_by`](Self::slope_at_x_by) gives on the
    /// sensor (|x| ≤ 1), for maps of degree ≤ 2 on its 64-bit path; `None` for others, or where an
    /// end's slope fails or the ends' signs differ.
    ///
    /// Up to degree 2 that slope is c1 + ⌊2c2 · x / 2^30⌋ divided (truncating) by the half-width:
    /// non-decreasing or non-increasing in x, so between its values at the ends, which share a sign.
    pub(crate) fn min_abs_slope_on_sensor(&self, hw: &HalfWidth) -> Option<u64> {
        if self.degree > 2 || !self.narrow_slope() {
            return None;
        }
        let lo = self.slope_at_x_by(-X_ONE_Q30, hw).ok()?;
        let hi = self.slope_at_x_by(X_ONE_Q30, hw).ok()?;
        (lo.signum() == hi.signum()).then(|| lo.unsigned_abs().min(hi.unsigned_abs()))
    }

    /// Whether [`slope_at_x_by`](Self::slope_at_x_by) at the x of pixel `p_px_q16` (px, Q16) is
    /// sure to succeed: on the sensor frame (|p − centre| ≤ half-width, so |x| ≤ 1), with
    /// [`narrow_slope`](Self::narrow_slope) coefficients and a half-width of at least 3 (Q16), its
    /// derivative is below 3 · 2^31 in size and the quotient by the half-width below 2^63.
    pub(crate) fn slope_sure_at(&self, p_px_q16: i32) -> bool {
        self.half_width_px_q16 >= 3
            && (p_px_q16 as i64 - self.center_px_q16 as i64).abs() <= self.half_width_px_q16 as i64
            && self.narrow_slope()
    }

    /// Degree ≤ 3 and |k · c_k| < 2^31 for k ≥ 1 (every real sensor: c_1 is half the span in fm).
    ///
    /// k · |c_k| < 2^31 is |c_k| ≤ ⌊(2^31 − 1) / k⌋: compared against those constants, as a product
    /// that could overflow would need a 64 × 64-bit multiply on a 32-bit core at every slope.
    fn narrow_slope(&self) -> bool {
        const LIMIT: [u64; 4] = [0, (1 << 31) - 1, ((1 << 31) - 1) / 2, ((1 << 31) - 1) / 3];
        let [_, c1, c2, c3] = self.coeff_fm;
        self.degree <= 3
            && c1.unsigned_abs() <= LIMIT[1]
            && c2.unsigned_abs() <= LIMIT[2]
            && c3.unsigned_abs() <= LIMIT[3]
    }

    /// Pixel (px, Q16) where the map gives `wavelength_fm`: a series-reversion guess and one step
    /// along the reversion's own slope, then (when that step was over 1/64 px) Newton steps, at most
    /// 12, stopping after a step of at most 1/64 px (the step after it would be below 1/65536 px on
    /// any map whose slope changes by less than 6 % per pixel). May lie outside the sensor.
    pub fn pixel_q16(&self, wavelength_fm: i64) -> Result<i32, CalibrateError> {
        self.pixel_q16_by(wavelength_fm, &HalfWidth::reciprocal(self))
    }

    /// [`pixel_q16`](Self::pixel_q16) with this map's half-width reciprocal made already (for many
    /// inversions on one map: one division for all of them, and the reversion ratios once).
    ///
    /// Work: the guess (≤ 9 products), then usually one λ and two products (no slope, no
    /// division); else ≤ 12 Newton steps (λ, slope and one division each).
    pub(crate) fn pixel_q16_by(
        &self,
        wavelength_fm: i64,
        hw: &HalfWidth,
    ) -> Result<i32, CalibrateError> {
        let t = self.first_x_q30(wavelength_fm, hw)?;
        let Some((r, (x, dx_dt_q30))) = hw
            .reversion
            .and_then(|r| r.refine_with_slope(t).map(|g| (r, g)))
        else {
            let p = self.center_px_q16 as i128 + ((t * self.half_width_px_q16 as i128) >> 30);
            return self.newton_from(p, wavelength_fm, hw, FINE_STEP_PX_Q16);
        };
        // |x| < 2^32 and half-width < 2^31: the product fits i64.
        let p = self.center_px_q16 as i64 + ((x * self.half_width_px_q16 as i64) >> 30);
        let pc = p.clamp(i32::MIN as i64 / 2, i32::MAX as i64 / 2) as i32;
        let lam = self.wavelength_at_x(self.x_q30_by(pc, hw))?;
        let err = lam - wavelength_fm;
        if err.unsigned_abs() >= 1 << 24 {
            return self.newton_from(pc as i128, wavelength_fm, hw, FINE_STEP_PX_Q16);
        }
        // dp/dλ = half-width · (dx/dt) / c1 (Q30; |dp/dλ| < 2^30 and |dx/dt| < 2^31 keep the
        // product below 2^61), then the step err · dp/dλ rounded to Q16 (|err| < 2^24: below 2^56).
        let dp_dlam_q30 = (r.dp_dlam_q30 * dx_dt_q30) >> 30;
        let step = (err * dp_dlam_q30 + (1 << 29)) >> 30;
        let p = pc as i64 - step;
        if step.unsigned_abs() <= FINE_STEP_PX_Q16 as u64 {
            return i32::try_from(p).map_err(|_| CalibrateError::Overflow);
        }
        self.newton_from(p as i128, wavelength_fm, hw, FINE_STEP_PX_Q16)
    }

    /// The linear guess x = (λ − c0) / c1 (Q30).
    fn first_x_q30(&self, wavelength_fm: i64, hw: &HalfWidth) -> Result<i128, CalibrateError> {
        let [c0, c1, _, _] = self.coeff_fm.map(|c| c as i128);
        if c1 == 0 {
            return Err(CalibrateError::NotMonotone);
        }
        let off = wavelength_fm as i128 - c0;
        Ok(
            if off.unsigned_abs() < 1 << 32 && c1.unsigned_abs() < 1 << 63 {
                // off · 2^30 fits i64: the same truncating division.
                hw.div_c1_shl(off as i64, 30)
                    .ok_or(CalibrateError::NotMonotone)? as i128
            } else {
                (off << 30)
                    .checked_div(c1)
                    .ok_or(CalibrateError::NotMonotone)?
            },
        )
    }

    /// Newton steps on λ(p) = `wavelength_fm` from pixel `p` (px, Q16), at most 12, until a step is
    /// at most `done_px_q16` in size (0: until a step is zero).
    fn newton_from(
        &self,
        mut p: i128,
        wavelength_fm: i64,
        hw: &HalfWidth,
        done_px_q16: u128,
    ) -> Result<i32, CalibrateError> {
        for _ in 0..12 {
            let pc = i32::try_from(p.clamp(i32::MIN as i128 / 2, i32::MAX as i128 / 2))
                .map_err(|_| CalibrateError::Overflow)?;
            let (lam, slope) = self.wavelength_and_slope_by(pc, hw)?;
            let err = lam as i128 - wavelength_fm as i128;
            let slope = slope as i128;
            if slope == 0 {
                return Err(CalibrateError::NotMonotone);
            }
            // err fm / (slope fm/px Q16) = px; in Q16: err << 32 / slope.
            let step = if err.unsigned_abs() < 1 << 31 {
                // err · 2^32 fits i64 (and slope is an i64): the same truncating division.
                ((err as i64) << 32)
                    .checked_div(slope as i64)
                    .ok_or(CalibrateError::NotMonotone)? as i128
            } else {
                (err << 32)
                    .checked_div(slope)
                    .ok_or(CalibrateError::NotMonotone)?
            };
            p -= step;
            if step.unsigned_abs() <= done_px_q16 {
                break;
            }
        }
        i32::try_from(p).map_err(|_| CalibrateError::Overflow)
    }

    /// The inverse as it was first made: Newton steps from the linear guess until a step is zero
    /// (the reference the faster [`pixel_q16_by`](Self::pixel_q16_by) is tested against).
    #[cfg(test)]
    pub(crate) fn pixel_q16_full_newton(&self, wavelength_fm: i64) -> Result<i32, CalibrateError> {
        let hw = HalfWidth::reciprocal(self);
        let x0 = self.first_x_q30(wavelength_fm, &hw)?;
        let p = self.center_px_q16 as i128 + ((x0 * self.half_width_px_q16 as i128) >> 30);
        self.newton_from(p, wavelength_fm, &hw, 0)
    }
}

/// Newton on the map converges quadratically: after a step of at most 1/64 px (1 024 in Q16) the
/// error left is about (λ''/2λ') · (1/64 px)², below 1/65536 px while the slope changes by less
/// than 6 % per pixel (a real sensor's changes by well under 0.1 % per pixel), so the step that
/// would follow is 0 or ±1 and is not taken. The first step, along the reversion's slope rather
/// than the map's, leaves (1 − λ' · (dp/dλ)) of the guess' error besides: the reversion's slope is
/// the map's at the root to its own accuracy (~10⁻⁵ of it), so after a step of ≤ 1/64 px that is
/// below 10⁻⁶ px too.
const FINE_STEP_PX_Q16: u128 = 1 << 10;

/// Series reversion of the map, for the inverse's first guess: with λ = c0 + c1 (x + k2 x² + k3 x³)
/// and t = (λ − c0) / c1, x ≈ t − k2 t² + (2 k2² − k3) t³ − 5 (k2³ − k2 k3) t⁴ (Abramowitz and
/// Stegun, Handbook of Mathematical Functions (1964), 3.6.25, reversion of series; from memory).
/// On a real sensor (|k2|, |k3| ≲ 0.05) the guess is within a few thousandths of a pixel, so one
/// step finishes the inversion.
#[derive(Clone, Copy)]
pub(crate) struct Reversion {
    /// c2 / c1 (Q30).
    k2_q30: i64,
    /// 2 k2² − k3 (Q30).
    t3_q30: i64,
    /// 5 (k2³ − k2 k3) (Q30).
    t4_q30: i64,
    /// dp/dx / dλ/dt = half-width / c1: Q16 pixels per femtometre, in Q30.
    dp_dlam_q30: i64,
}

impl Reversion {
    /// `None` when c1 is 0 or either ratio reaches 1/16 (no real sensor; the linear guess and Newton
    /// steps then).
    fn new(map: &WavelengthMap) -> Option<Reversion> {
        let [_, c1, c2, c3] = map.coeff_fm;
        let ratio = |c: i64| -> Option<i64> {
            let q = shl30_div(c, c1)?;
            (q.unsigned_abs() < 1 << 26).then_some(q as i64)
        };
        let (k2, k3) = (ratio(c2)?, ratio(c3)?);
        // Q16 px per fm in Q30, kept below 2^30 (a sensor with over 1 px per fm is no sensor).
        let dp = shl30_div(map.half_width_px_q16 as i64, c1)?;
        let dp = i64::try_from(dp)
            .ok()
            .filter(|d| d.unsigned_abs() < 1 << 30)?;
        // |k2|, |k3| < 2^26: every product below is under 2^52 before its shift.
        let k2k2 = (k2 * k2) >> 30;
        Some(Reversion {
            k2_q30: k2,
            t3_q30: 2 * k2k2 - k3,
            t4_q30: 5 * (((k2k2 * k2) >> 30) - ((k2 * k3) >> 30)),
            dp_dlam_q30: dp,
        })
    }

    /// The reversion guess x from the linear one t (Q30), and dx/dt there (Q30, the series'
    /// derivative 1 − 2 k2 t + 3 (2 k2² − k3) t² − 4 · 5 (k2³ − k2 k3) t³); `None` for |t| > 1.5
    /// (a quarter of the sensor beyond its ends, where Newton steps take over).
    fn refine_with_slope(&self, t: i128) -> Option<(i64, i64)> {
        if t.unsigned_abs() > 3 << 29 {
            return None;
        }
        let t = t as i64;
        // |t| ≤ 1.5 · 2^30, so t² < 2^31.2 (its square below 2^62.4), t³ < 2^31.8 and t⁴ < 2^32.4;
        // |k2|, |k3| < 2^26 keep the coefficients below 2^26.2 (t3) and 2^24.4 (t4): each product
        // below stays under 2^60.
        let t2 = (t * t) >> 30;
        let t3 = (t2 * t) >> 30;
        let t4 = (t2 * t2) >> 30;
        let x = t - ((self.k2_q30 * t2) >> 30) + ((self.t3_q30 * t3) >> 30)
            - ((self.t4_q30 * t4) >> 30);
        let d = (1 << 30) - ((2 * self.k2_q30 * t) >> 30) + ((3 * self.t3_q30 * t2) >> 30)
            - ((4 * self.t4_q30 * t3) >> 30);
        Some((x, d))
    }
}

/// `((n as i128) << 30).checked_div(d as i128)`, in `i64` when |n| < 2^32 (n · 2^30 then fits, and
/// the truncated quotient is the same; the 128-bit division costs twice the 64-bit one on the
/// Cortex-M0), except for d = −1 with n · 2^30 = −2^62 … (no overflow: |n · 2^30| < 2^62).
fn shl30_div(n: i64, d: i64) -> Option<i128> {
    if n.unsigned_abs() < 1 << 32 {
        return (n << 30).checked_div(d).map(i128::from);
    }
    ((n as i128) << 30).checked_div(d as i128)
}

/// A map's divisors (its half-width, and c1 for the inverse's first guess). Each divides as
/// `checked_div` does, or (when made with reciprocals) gives the same truncated quotient through a
/// multiply by m = ⌊(2^64 − 1) / |d|⌋: for |n| < 2^63, q' = ⌊|n| · m / 2^64⌋ satisfies
/// |n|/|d| − 1 < q' ≤ |n|/|d| (as m · |d| > 2^64 − 1 − |d| and |n| (1 + |d|) / (|d| · 2^64) ≤ 1),
/// so one correction step gives ⌊|n| / |d|⌋, and the signs give the truncated quotient. That is
/// two 64-bit products where the division costs a few hundred instructions on a core without a
/// divider.
pub(crate) struct HalfWidth {
    hw: i64,
    /// (|hw|, m) when made with reciprocals and hw ≠ 0.
    recip: Option<(u64, u64)>,
    c1: i64,
    /// (|c1|, m) when made for inversion and 0 < |c1| < 2^63.
    recip_c1: Option<(u64, u64)>,
    /// The map's reversion ratios when made for inversion.
    reversion: Option<Reversion>,
}

impl HalfWidth {
    /// All zero: a placeholder until a map is known (a `static` holding one stays in `.bss`).
    pub(crate) const ZERO: HalfWidth = HalfWidth {
        hw: 0,
        recip: None,
        c1: 0,
        recip_c1: None,
        reversion: None,
    };

    /// Plain `checked_div` (one use).
    fn plain(map: &WavelengthMap) -> HalfWidth {
        HalfWidth {
            hw: map.half_width_px_q16 as i64,
            recip: None,
            c1: map.coeff_fm[1],
            recip_c1: None,
            reversion: None,
        }
    }

    /// With the half-width's reciprocal, for evaluating `map` (or a map with the same half-width) at
    /// several pixels: one division to make it.
    pub(crate) fn forward(map: &WavelengthMap) -> HalfWidth {
        HalfWidth {
            recip: reciprocal(map.half_width_px_q16 as i64),
            ..HalfWidth::plain(map)
        }
    }

    /// With the reciprocals of the half-width and of c1 and the reversion ratios, for inverting
    /// `map` several times: four divisions to make them. Only for `map`.
    pub(crate) fn reciprocal(map: &WavelengthMap) -> HalfWidth {
        HalfWidth {
            recip_c1: reciprocal(map.coeff_fm[1]),
            reversion: Reversion::new(map),
            ..HalfWidth::forward(map)
        }
    }

    /// `(a << k).checked_div(hw)` for |a| < 2^32 and k ≤ 32 with |a| · 2^k < 2^63.
    #[inline(always)]
    fn div_shl(&self, a: i64, k: u32) -> Option<i64> {
        divide_shl(a, k, self.hw, self.recip)
    }

    /// `(a << k).checked_div(c1)`, as [`div_shl`](Self::div_shl).
    #[inline(always)]
    fn div_c1_shl(&self, a: i64, k: u32) -> Option<i64> {
        divide_shl(a, k, self.c1, self.recip_c1)
    }
}

/// (|d|, ⌊(2^64 − 1) / |d|⌋) for 0 < |d| < 2^63.
fn reciprocal(d: i64) -> Option<(u64, u64)> {
    (d != 0 && d != i64::MIN).then(|| (d.unsigned_abs(), u64::MAX / d.unsigned_abs()))
}

/// `(a << k).checked_div(d)` for |a| < 2^32, k ≤ 32 and |a| · 2^k < 2^63, through `recip`
/// (= [`reciprocal`]`(d)`) when there is one (see [`HalfWidth`]). With n = |a| · 2^k the estimate
/// ⌊n · m / 2^64⌋ is ⌊|a| · m / 2^(64 − k)⌋, and with m = m_hi · 2^32 + m_lo that is
/// ⌊(|a| · m_hi + ⌊|a| · m_lo / 2^32⌋) / 2^(32 − k)⌋: two 32 × 32-bit products, no 128-bit one.
///
/// Inlined where it is called (x of a pixel, the slope, the inverse's first guess), so each copy
/// shifts by its constant k: a variable 64-bit shift is a library call on the Cortex-M0.
#[inline(always)]
fn divide_shl(a: i64, k: u32, d: i64, recip: Option<(u64, u64)>) -> Option<i64> {
    let n = a << k;
    let fits = k <= 32 && a.unsigned_abs() < 1 << 32 && a.unsigned_abs() < 1 << (63 - k);
    let (Some((ud, m)), true) = (recip, fits) else {
        return n.checked_div(d);
    };
    let ua = a.unsigned_abs();
    let u = n.unsigned_abs();
    // |a| < 2^32 and m_hi < 2^32: |a| · m_hi + 2^32 stays below 2^64.
    let hi = mul_u32_wide(ua as u32, (m >> 32) as u32) + (mul_u32_wide(ua as u32, m as u32) >> 32);
    let mut q = hi >> (32 - k);
    // q · ud ≤ u < 2^63: in one 32 × 32 → 64-bit product when both fit 32 bits (x of a pixel).
    let qd = match (u32::try_from(q), u32::try_from(ud)) {
        (Ok(q32), Ok(d32)) => mul_u32_wide(q32, d32),
        _ => q * ud,
    };
    let mut r = u - qd;
    // One step suffices (see `HalfWidth`); a second costs nothing and bounds the loop anyway.
    for _ in 0..2 {
        if r >= ud {
            q += 1;
            r -= ud;
        }
    }
    // q ≤ |n| < 2^63.
    Some(if (n < 0) != (d < 0) {
        -(q as i64)
    } else {
        q as i64
    })
}

/// a · x for |x| ≤ 2^30 and a product that fits `i64` (the narrow Horner steps): from 32-bit
/// pieces ([`mul_i32_wide`]) when a fits `i32` too, else the 64-bit product; the same integer.
#[inline(always)]
fn mul_by_x(a: i64, x: i64) -> i64 {
    match (i32::try_from(a), i32::try_from(x)) {
        (Ok(a), Ok(x)) => mul_i32_wide(a, x),
        _ => a * x,
    }
}

/// Σ c_k x^k by Horner, x in Q30, result in the coefficients' unit.
pub(crate) fn eval_q30(coeff: &[i64; 4], degree: u8, x_q30: i64) -> Result<i64, CalibrateError> {
    let narrow = x_q30.unsigned_abs() <= 1 << 30
        && degree <= 3
        && coeff.first().is_some_and(|c| c.unsigned_abs() <= 1 << 62)
        && coeff.iter().skip(1).all(|c| c.unsigned_abs() < 1 << 31);
    if narrow {
        // |x| ≤ 1 and |c_k| < 2^31 (k ≥ 1): the accumulator stays below 2^33 before the last
        // product, so every step is the same integer in i64.
        // From the top coefficient: the general loop's first step, ((0 · x + 2^29) >> 30) + c, is
        // c.
        let mut acc: i64 = *coeff.get(degree as usize).ok_or(CalibrateError::Overflow)?;
        for k in (0..degree as usize).rev() {
            let c = *coeff.get(k).ok_or(CalibrateError::Overflow)?;
            acc = ((mul_by_x(acc, x_q30) + (1 << 29)) >> 30) + c;
        }
        return Ok(acc);
    }
    let x = x_q30 as i128;
    let mut acc: i128 = 0;
    for k in (0..=degree as usize).rev() {
        let c = *coeff.get(k).ok_or(CalibrateError::Overflow)? as i128;
        acc = ((acc * x + (1 << 29)) >> 30) + c;
    }
    i64::try_from(acc).map_err(|_| CalibrateError::Overflow)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo_map() -> WavelengthMap {
        // 2048 px from 400 to 700 nm with a little curvature.
        WavelengthMap::new(
            2048,
            2,
            [550_000_000_000 / 1000, 150_000_000, -2_000_000, 0],
        )
        .unwrap()
    }

    #[test]
    fn ends_and_centre_evaluate_to_the_coefficients() {
        let m = demo_map();
        let c = m.center_px_q16;
        assert_eq!(m.wavelength_fm(c).unwrap(), 550_000_000);
        let last = 2047 << 16;
        assert_eq!(
            m.wavelength_fm(last).unwrap(),
            550_000_000 + 150_000_000 - 2_000_000
        );
        assert_eq!(
            m.wavelength_fm(0).unwrap(),
            550_000_000 - 150_000_000 - 2_000_000
        );
    }

    #[test]
    fn inverse_round_trips_to_a_sixty_thousandth_of_a_pixel() {
        let m = demo_map();
        for p in [
            0i32,
            100 << 16,
            1023 << 16,
            (1500 << 16) + 12_345,
            2047 << 16,
        ] {
            let lam = m.wavelength_fm(p).unwrap();
            let back = m.pixel_q16(lam).unwrap();
            assert!((back - p).abs() <= 2, "{p} → {lam} → {back}");
        }
    }

    /// λ, slope and inverse through 128-bit arithmetic only, as the map first computed them.
    fn reference(m: &WavelengthMap, p: i32) -> (Option<i64>, Option<i64>) {
        let x = m.x_q30(p) as i128;
        let mut acc: i128 = 0;
        for k in (0..=m.degree as usize).rev() {
            acc = ((acc * x + (1 << 29)) >> 30) + m.coeff_fm[k] as i128;
        }
        let mut d: i128 = 0;
        for k in (1..=m.degree as usize).rev() {
            d = ((d * x) >> 30) + m.coeff_fm[k] as i128 * k as i128;
        }
        let v = (d << 32).checked_div(m.half_width_px_q16 as i128);
        (
            i64::try_from(acc).ok(),
            v.and_then(|v| i64::try_from(v).ok()),
        )
    }

    fn reference_pixel(m: &WavelengthMap, w: i64) -> Option<i32> {
        let [c0, c1, _, _] = m.coeff_fm.map(|c| c as i128);
        let x0 = ((w as i128 - c0) << 30).checked_div(c1)?;
        let mut p = m.center_px_q16 as i128 + ((x0 * m.half_width_px_q16 as i128) >> 30);
        for _ in 0..12 {
            let pc = i32::try_from(p.clamp(i32::MIN as i128 / 2, i32::MAX as i128 / 2)).ok()?;
            let (lam, slope) = reference(m, pc);
            let err = lam? as i128 - w as i128;
            let step = (err << 32).checked_div(slope? as i128)?;
            p -= step;
            if step == 0 {
                break;
            }
        }
        i32::try_from(p).ok()
    }

    #[test]
    fn horner_step_product_is_the_64_bit_one() {
        let mut next = crate::test_rng::xorshift(0x9b05_688c_2b3e_6c1fu64);
        let mut short = 0;
        for _ in 0..100_000 {
            let v = next();
            // |a| up to 2^33 (past i32 as the narrow steps allow), |x| ≤ 2^30.
            let a = (v as i64) >> (30 + v % 8);
            let x = ((next() % ((1 << 31) + 1)) as i64) - (1 << 30);
            short += usize::from(i32::try_from(a).is_ok());
            assert_eq!(mul_by_x(a, x), a * x, "{a} {x}");
        }
        assert!(short > 10_000 && short < 95_000, "{short}");
    }

    #[test]
    fn narrow_arithmetic_gives_the_wide_results() {
        let mut bits = crate::test_rng::xorshift(0x1234_5678_9abc_def1u64);
        let mut next = move |m: u64| bits() % m;
        let mut checked = 0;
        for round in 0..3000 {
            let big = round % 7 == 0;
            let c1 = 1 + next(if big { 1 << 40 } else { 400_000_000 }) as i64;
            let c0 = next(2_000_000_000) as i64;
            let coeff = curved(&mut next, c0, c1);
            let degree = 1 + next(3) as u8;
            let pixels = 16 + next(4000) as u16;
            let Ok(m) = WavelengthMap::new(pixels, degree, coeff) else {
                continue;
            };
            for _ in 0..8 {
                let p = next(u64::from(pixels) << 17) as i32 - (i32::from(pixels) << 15);
                let (lam, slope) = reference(&m, p);
                assert_eq!(m.wavelength_fm(p).ok(), lam, "{m:?} at {p}");
                assert_eq!(m.slope_fm_per_px_q16(p).ok(), slope, "{m:?} at {p}");
                if let Some(w) = lam {
                    let w = w + next(2_000_001) as i64 - 1_000_000;
                    assert_eq!(
                        m.pixel_q16_full_newton(w).ok(),
                        reference_pixel(&m, w),
                        "{m:?} λ {w}"
                    );
                }
                checked += 1;
            }
        }
        assert!(checked > 10_000, "{checked}");
    }

    /// Coefficients c0 + c1·x + c2·x² + c3·x³ with a random curvature up to 1/40 of the slope term
    /// and a cubic up to 1/400 (drawn in that order).
    fn curved(next: &mut impl FnMut(u64) -> u64, c0: i64, c1: i64) -> [i64; 4] {
        let c2 = next(2 * c1 as u64 / 40 + 1) as i64 - c1 / 40;
        let c3 = next(c1 as u64 / 200 + 1) as i64 - c1 / 400;
        [c0, c1, c2, c3]
    }

    #[test]
    fn reversion_guess_gives_the_full_newton_pixel_to_the_rounding_of_lambda() {
        let mut bits = crate::test_rng::xorshift(0x2545_f491_4f6c_dd1du64);
        let mut next = move |m: u64| bits() % m;
        let (mut checked, mut same, mut worst) = (0u32, 0u32, 0i64);
        for _ in 0..3000 {
            // Sensors of 100–400 nm span: curvature up to 1/40 of the slope term, cubic 1/400.
            let c1 = 50_000_000 + next(150_000_000) as i64;
            let c0 = 300_000_000 + next(500_000_000) as i64;
            let coeff = curved(&mut next, c0, c1);
            let degree = 1 + next(3) as u8;
            let pixels = 256 + next(3840) as u16;
            let Ok(m) = WavelengthMap::new(pixels, degree, coeff) else {
                continue;
            };
            for _ in 0..8 {
                // From a quarter of the sensor below it to a quarter above.
                let p = next((u64::from(pixels) * 3) << 15) as i32 - (i32::from(pixels) << 14);
                let Ok(w) = m.wavelength_fm(p) else { continue };
                let w = w + next(2_001) as i64 - 1_000;
                let (fast, full) = (m.pixel_q16(w), m.pixel_q16_full_newton(w));
                assert_eq!(fast.is_ok(), full.is_ok(), "{m:?} λ {w}");
                if let (Ok(a), Ok(b)) = (fast, full) {
                    let d = (a as i64 - b as i64).abs();
                    // The full iteration stops at any pixel whose λ is within one Q16 step's
                    // worth of wavelength of w, and λ itself is rounded to 1 fm: two or three
                    // neighbouring pixels qualify. The fast answer must be as close in λ.
                    let fm_per_px = (m.slope_fm_per_px_q16(b).unwrap().abs() >> 16).max(1);
                    let step_fm = fm_per_px / 65_536 + 1;
                    let miss = (m.wavelength_fm(a).unwrap() - w).abs();
                    assert!(miss <= step_fm + 2, "{m:?} λ {w}: {a} misses by {miss} fm");
                    assert!(d <= 2 + (2 << 16) / fm_per_px, "{m:?} λ {w}: {a} vs {b}");
                    worst = worst.max(d);
                    same += u32::from(d == 0);
                    checked += 1;
                }
            }
        }
        assert!(checked > 15_000, "{checked}");
        // Straight maps far beyond the sensor (|x| up to 3): the guess is then the linear one and
        // Newton steps finish, as in the full iteration.
        for _ in 0..500 {
            let c1 = 50_000_000 + next(150_000_000) as i64;
            let m = WavelengthMap::new(2048, 1, [500_000_000, c1, 0, 0]).unwrap();
            let w = 500_000_000 + next(6 * c1 as u64) as i64 - 3 * c1;
            let (a, b) = (m.pixel_q16(w).unwrap(), m.pixel_q16_full_newton(w).unwrap());
            let miss = (m.wavelength_fm(a).unwrap() - w).abs();
            assert!(
                miss <= c1 / 1023 / 65_536 + 3,
                "λ {w}: {a} vs {b}, misses by {miss} fm"
            );
        }
        // Most inversions give the very same integer (about two thirds here); the rest another of
        // the pixels the full iteration may stop at.
        assert!(same * 2 > checked, "{same} of {checked} (worst {worst})");
    }

    #[test]
    fn non_monotone_maps_are_refused() {
        // Strong curvature folds the map back on itself inside the sensor.
        assert_eq!(
            WavelengthMap::new(2048, 2, [550_000_000, 10_000_000, 50_000_000, 0]),
            Err(CalibrateError::NotMonotone)
        );
        assert_eq!(
            WavelengthMap::new(2048, 0, [1, 0, 0, 0]),
            Err(CalibrateError::TooFewPoints)
        );
    }

    /// The 65-point walk every degree once took.
    fn walk(m: &WavelengthMap, pixels: u16) -> Result<(), CalibrateError> {
        let last = (pixels.max(2) as i64 - 1) << 16;
        let sign = m.slope_fm_per_px_q16(0)?.signum();
        if sign == 0 {
            return Err(CalibrateError::NotMonotone);
        }
        for i in 0..=64i64 {
            if m.slope_fm_per_px_q16((last * i / 64) as i32)?.signum() != sign {
                return Err(CalibrateError::NotMonotone);
            }
        }
        Ok(())
    }

    #[test]
    fn end_test_of_degree_two_gives_what_the_walk_gives() {
        // Rising, falling, turning inside the sensor, flat, and slopes past i64 at one end.
        let mut seed = 0x2545_f491u64;
        let mut next = |span: i64| {
            crate::test_rng::step64(&mut seed);
            (seed % (2 * span as u64 + 1)) as i64 - span
        };
        let mut cases: std::vec::Vec<(u16, [i64; 4])> = std::vec![
            (2048, [550_000_000, 150_000_000, -2_000_000, 0]),
            (2048, [550_000_000, 150_000_000, 80_000_000, 0]),
            (2048, [550_000_000, -150_000_000, -74_999_999, 0]),
            (2048, [550_000_000, 0, 0, 0]),
            (4096, [0, 1 << 40, 1 << 45, 0]),
            (16, [0, 3, -2, 0]),
        ];
        for _ in 0..400 {
            let c1 = next(200_000_000);
            let c2 = next(c1.abs() + 10);
            cases.push((2048, [next(1 << 40), c1, c2, 0]));
        }
        let mut refused = 0;
        for (pixels, c) in cases {
            for degree in 1..=2u8 {
                let half = ((pixels as i32 - 1) << 16) / 2;
                let m = WavelengthMap {
                    center_px_q16: half,
                    half_width_px_q16: half,
                    degree,
                    coeff_fm: [c[0], c[1], if degree == 2 { c[2] } else { 0 }, 0],
                };
                let got = m.check_monotone(pixels);
                assert_eq!(got, walk(&m, pixels), "{m:?}");
                refused += usize::from(got.is_err());
            }
        }
        // Both answers are exercised.
        assert!((100..700).contains(&refused), "{refused}");
    }

    #[test]
    fn narrow_slope_limits_are_the_product_test() {
        let product = |m: &WavelengthMap| {
            m.degree <= 3
                && m.coeff_fm
                    .iter()
                    .enumerate()
                    .skip(1)
                    .all(|(k, c)| c.unsigned_abs().saturating_mul(k as u64) < 1 << 31)
        };
        let edges = [
            0i64,
            1,
            (1 << 31) - 1,
            1 << 31,
            ((1 << 31) - 1) / 2,
            (1 << 30),
            ((1 << 31) - 1) / 3,
            ((1 << 31) - 1) / 3 + 1,
            i64::MAX,
            i64::MIN,
            -(1 << 31),
            -((1 << 31) - 1),
        ];
        let mut m = demo_map();
        for &a in &edges {
            for &b in &edges {
                for &c in &edges {
                    for degree in 1..=3 {
                        m.degree = degree;
                        m.coeff_fm = [0, a, b, c];
                        assert_eq!(m.narrow_slope(), product(&m), "{m:?}");
                    }
                }
            }
        }
    }

    #[test]
    fn shift_division_in_64_bits_is_the_wide_one() {
        let mut next = crate::test_rng::xorshift(0x428a_2f98_d728_ae22u64);
        let edges = [
            0i64,
            1,
            -1,
            2,
            (1 << 32) - 1,
            1 << 32,
            -(1 << 32) + 1,
            i64::MAX,
            i64::MIN,
        ];
        for round in 0..200_000 {
            let draw = |n: &mut dyn FnMut() -> u64| {
                let v = n();
                if v.is_multiple_of(5) {
                    edges[(v >> 8) as usize % edges.len()]
                } else {
                    (v as i64) >> (v % 63)
                }
            };
            let (n, d) = (draw(&mut next), draw(&mut next));
            let want = ((n as i128) << 30).checked_div(d as i128);
            assert_eq!(shl30_div(n, d), want, "{n} {d} {round}");
        }
    }

    #[test]
    fn a_sure_slope_succeeds() {
        let mut next = crate::test_rng::xorshift(0x1f83_d9ab_fb41_bd6bu64);
        let edges = [
            0i64,
            1,
            ((1 << 31) - 1) / 3,
            ((1 << 31) - 1) / 2,
            (1 << 31) - 1,
            1 << 40,
        ];
        let mut sure = 0;
        for round in 0..200_000 {
            let pick = |n: &mut dyn FnMut() -> u64| {
                let e = edges[(n() % edges.len() as u64) as usize];
                if n().is_multiple_of(2) {
                    -e
                } else {
                    e
                }
            };
            let m = WavelengthMap {
                center_px_q16: (next() % (1 << 31)) as i32 - (1 << 30),
                half_width_px_q16: [0, 1, 3, 4, 1 << 16, 1 << 26, i32::MAX][round % 7],
                degree: 1 + (next() % 3) as u8,
                coeff_fm: [
                    pick(&mut next),
                    pick(&mut next),
                    pick(&mut next),
                    pick(&mut next),
                ],
            };
            let p = m
                .center_px_q16
                .saturating_add((next() % (1 << 28)) as i32 - (1 << 27))
                .saturating_add(if round % 3 == 0 {
                    m.half_width_px_q16
                } else {
                    0
                });
            if m.slope_sure_at(p) {
                let hw = HalfWidth::forward(&m);
                assert!(
                    m.slope_at_x_by(m.x_q30_by(p, &hw), &hw).is_ok(),
                    "{m:?} {p}"
                );
                sure += 1;
            }
        }
        assert!(sure > 10_000, "{sure}");
    }

    #[test]
    fn half_width_reciprocal_gives_the_plain_quotients() {
        let mut next = crate::test_rng::xorshift(0xdead_beef_cafe_f00du64);
        let mut m = demo_map();
        for _ in 0..2_000 {
            m.half_width_px_q16 = match next() % 4 {
                0 => (next() % 64) as i32 + 1,
                1 => (next() >> 33) as i32,
                _ => (next() % (1 << 28)) as i32 + 1,
            };
            m.coeff_fm[1] = match next() % 4 {
                0 => (next() % 64) as i64 - 32,
                1 => (next() >> 1) as i64 * if next() & 1 == 1 { -1 } else { 1 },
                2 => i64::MIN,
                _ => (next() % (1 << 30)) as i64 - (1 << 29),
            };
            let (plain, fast) = (HalfWidth::plain(&m), HalfWidth::reciprocal(&m));
            let c1 = m.coeff_fm[1];
            let agree = |n: i64| {
                let (a, k) = (n >> 32, (n as u64 % 33) as u32);
                assert_eq!(
                    fast.div_shl(a, k),
                    (a << k).checked_div(m.half_width_px_q16 as i64),
                    "{a} << {k} / {}",
                    m.half_width_px_q16
                );
                assert_eq!(
                    fast.div_c1_shl(a, k),
                    (a << k).checked_div(c1),
                    "{a} << {k} / {c1}"
                );
                assert_eq!(fast.div_shl(a, k), plain.div_shl(a, k));
            };
            for _ in 0..50 {
                let n = (next() >> (next() % 64)) as i64 * if next() & 1 == 1 { -1 } else { 1 };
                agree(n);
            }
            let edges = [
                0,
                1,
                -1,
                i64::MAX,
                i64::MIN,
                i64::MIN + 1,
                c1,
                -c1.max(-i64::MAX),
            ];
            for n in edges.into_iter().chain([m.half_width_px_q16 as i64]) {
                agree(n);
            }
        }
        // The inverse through the reciprocal matches the 128-bit reference above.
        let m = demo_map();
        for w in [400_000_000i64, 455_555_555, 550_000_001, 699_999_999] {
            assert_eq!(m.pixel_q16_full_newton(w).ok(), reference_pixel(&m, w));
            let fast = m.pixel_q16(w).unwrap();
            assert!((fast - reference_pixel(&m, w).unwrap()).abs() <= 1, "{w}");
        }
    }
}
