//! The pixel → wavelength map of an instrument.
//!
//! Stored as a polynomial in the normalised pixel x = (p − centre) / half-width, so that x stays in
//! [−1, 1] across the sensor: the coefficients are then all of comparable size (fm) and the fit is
//! well conditioned in fixed point. Reports convert to the plain λ(p) = c0 + c1 p + c2 p² + c3 p³.
use super::error::CalibrateError;

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
    /// A map for a sensor of `pixels` pixels from normalised coefficients; checks degree, width and
    /// that λ is monotone across the sensor (so the inverse exists).
    pub fn new(
        pixels: u16,
        degree: u8,
        coeff_fm: [i64; 4],
    ) -> Result<WavelengthMap, CalibrateError> {
        let half = ((pixels.max(2) as i32 - 1) << 16) / 2;
        Self::with_frame(half, half, degree, coeff_fm, pixels)
    }

    /// Like [`new`](Self::new) with an explicit centre and half-width (px, Q16).
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
    fn check_monotone(&self, pixels: u16) -> Result<(), CalibrateError> {
        let last = (pixels.max(2) as i64 - 1) << 16;
        let sign = self.slope_fm_per_px_q16(0)?.signum();
        if sign == 0 {
            return Err(CalibrateError::NotMonotone);
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
        // A map built by `new` has half-width > 0; a hand-made zero gives x = 0 rather than a fault.
        (((p_px_q16 as i64 - self.center_px_q16 as i64) << 30)
            .checked_div(self.half_width_px_q16 as i64)
            .unwrap_or(0))
        .clamp(-(8 << 30), 8 << 30)
    }

    /// Wavelength at pixel p (px, Q16), femtometres.
    pub fn wavelength_fm(&self, p_px_q16: i32) -> Result<i64, CalibrateError> {
        eval_q30(&self.coeff_fm, self.degree, self.x_q30(p_px_q16))
    }

    /// dλ/dp at pixel p: femtometres per pixel, Q16.
    pub fn slope_fm_per_px_q16(&self, p_px_q16: i32) -> Result<i64, CalibrateError> {
        let x = self.x_q30(p_px_q16) as i128;
        // dλ/dx = c1 + 2 c2 x + 3 c3 x².
        let mut d: i128 = 0;
        for k in (1..=self.degree as usize).rev() {
            let c = *self.coeff_fm.get(k).ok_or(CalibrateError::Overflow)? as i128;
            d = ((d * x) >> 30) + c * k as i128;
        }
        let v = (d << 32)
            .checked_div(self.half_width_px_q16 as i128)
            .ok_or(CalibrateError::Degenerate)?;
        i64::try_from(v).map_err(|_| CalibrateError::Overflow)
    }

    /// Pixel (px, Q16) where the map gives `wavelength_fm`: Newton steps from the linear guess, at most
    /// 12, stopping below 1/65536 px. May lie outside the sensor.
    pub fn pixel_q16(&self, wavelength_fm: i64) -> Result<i32, CalibrateError> {
        let [c0, c1, _, _] = self.coeff_fm.map(|c| c as i128);
        if c1 == 0 {
            return Err(CalibrateError::NotMonotone);
        }
        let x0 = ((wavelength_fm as i128 - c0) << 30)
            .checked_div(c1)
            .ok_or(CalibrateError::NotMonotone)?;
        let mut p = self.center_px_q16 as i128 + ((x0 * self.half_width_px_q16 as i128) >> 30);
        for _ in 0..12 {
            let pc = i32::try_from(p.clamp(i32::MIN as i128 / 2, i32::MAX as i128 / 2))
                .map_err(|_| CalibrateError::Overflow)?;
            let err = self.wavelength_fm(pc)? as i128 - wavelength_fm as i128;
            let slope = self.slope_fm_per_px_q16(pc)? as i128;
            if slope == 0 {
                return Err(CalibrateError::NotMonotone);
            }
            // err fm / (slope fm/px Q16) = px; in Q16: err << 32 / slope.
            let step = (err << 32)
                .checked_div(slope)
                .ok_or(CalibrateError::NotMonotone)?;
            p -= step;
            if step == 0 {
                break;
            }
        }
        i32::try_from(p).map_err(|_| CalibrateError::Overflow)
    }
}

/// Σ c_k x^k by Horner, x in Q30, result in the coefficients' unit.
pub(crate) fn eval_q30(coeff: &[i64; 4], degree: u8, x_q30: i64) -> Result<i64, CalibrateError> {
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
}
