//! Instrument line profile and its exact integral over a pixel.
//!
//! A pseudo-Voigt: (1 − η)·Gaussian + η·Lorentzian, both with the same FWHM and unit area. The Gaussian
//! part integrates through erf and the Lorentzian part through atan, so a pixel receives exactly the
//! light that falls between its edges, however narrow the line.

/// Shape of a line on the sensor in pixel coordinates.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LineProfile {
    /// Full width at half maximum of both parts, in pixels.
    pub fwhm_px: f64,
    /// Lorentzian fraction η in [0, 1]: 0 is a pure Gaussian, small values add far wings.
    pub lorentz_fraction: f64,
}

/// FWHM of a Gaussian divided by its σ: 2·sqrt(2·ln 2).
pub const FWHM_PER_SIGMA: f64 = 2.354_820_045_030_949_3;

impl LineProfile {
    /// Checks the width and the fraction.
    pub fn new(fwhm_px: f64, lorentz_fraction: f64) -> Result<Self, String> {
        if !(fwhm_px.is_finite() && fwhm_px > 0.0) {
            return Err(format!("FWHM must be > 0 px, got {fwhm_px}"));
        }
        if !(0.0..=1.0).contains(&lorentz_fraction) {
            return Err(format!(
                "Lorentzian fraction must lie in [0, 1], got {lorentz_fraction}"
            ));
        }
        Ok(LineProfile {
            fwhm_px,
            lorentz_fraction,
        })
    }

    /// Fraction of the line's light with coordinate below `x` (line centred at 0).
    pub fn cdf(&self, x: f64) -> f64 {
        let sigma = self.fwhm_px / FWHM_PER_SIGMA;
        let g = 0.5 * (1.0 + libm::erf(x / (sigma * core::f64::consts::SQRT_2)));
        let gamma = 0.5 * self.fwhm_px;
        let l = 0.5 + libm::atan(x / gamma) / core::f64::consts::PI;
        (1.0 - self.lorentz_fraction) * g + self.lorentz_fraction * l
    }

    /// Fraction of the light of a line centred at `center_px` that lands on pixel `k`.
    pub fn pixel_fraction(&self, center_px: f64, k: usize) -> f64 {
        let lo = k as f64 - 0.5 - center_px;
        let hi = lo + 1.0;
        // Use the upper tail on the right side so that far pixels do not lose digits to 1 − 1.
        if lo > 0.0 {
            self.cdf(-lo) - self.cdf(-hi)
        } else {
            self.cdf(hi) - self.cdf(lo)
        }
    }

    /// Peak of the continuous profile for unit area, per pixel of width: what a pixel centred on the
    /// line would see in the limit of a narrow pixel.
    pub fn peak_density_per_px(&self) -> f64 {
        let sigma = self.fwhm_px / FWHM_PER_SIGMA;
        let g = 1.0 / (sigma * (2.0 * core::f64::consts::PI).sqrt());
        let l = 2.0 / (core::f64::consts::PI * self.fwhm_px);
        (1.0 - self.lorentz_fraction) * g + self.lorentz_fraction * l
    }

    /// Pixels either side of the centre beyond which a pure Gaussian has nothing left worth adding
    /// (12 σ); with Lorentzian wings every pixel gets its share.
    pub fn reach_px(&self) -> Option<f64> {
        if self.lorentz_fraction > 0.0 {
            None
        } else {
            Some(12.0 * self.fwhm_px / FWHM_PER_SIGMA + 1.0)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The pixel shares of a line well inside the sensor add up to its whole light.
    #[test]
    fn pixel_fractions_sum_to_one() {
        let p = LineProfile::new(3.0, 0.0).unwrap();
        let s: f64 = (0..200).map(|k| p.pixel_fraction(100.3, k)).sum();
        assert!((s - 1.0).abs() < 1e-12, "{s}");
        // Lorentzian wings: a fraction 2/π·atan(2·H/FWHM) of the Lorentzian part falls within ±H.
        let q = LineProfile::new(3.0, 0.2).unwrap();
        let s: f64 = (0..2001).map(|k| q.pixel_fraction(1000.0, k)).sum();
        let lorentz_inside = 2.0 / core::f64::consts::PI * (1000.5f64 / 1.5).atan();
        assert!((s - (0.8 + 0.2 * lorentz_inside)).abs() < 1e-9, "{s}");
    }

    /// Half maximum of the continuous profile sits at ±FWHM/2 (definition of FWHM).
    #[test]
    fn half_maximum_at_half_width() {
        for &eta in &[0.0, 0.3, 1.0] {
            let p = LineProfile::new(4.0, eta).unwrap();
            let h = 1e-6;
            let dens = |x: f64| (p.cdf(x + h) - p.cdf(x - h)) / (2.0 * h);
            let r = dens(2.0) / dens(0.0);
            assert!((r - 0.5).abs() < 1e-6, "eta {eta}: {r}");
            assert!((dens(0.0) - p.peak_density_per_px()).abs() < 1e-6);
        }
    }

    /// A narrow line centred on a pixel puts erf(½/(σ√2)) of its light there.
    #[test]
    fn narrow_gaussian_centre_pixel() {
        let p = LineProfile::new(1.0, 0.0).unwrap();
        let sigma = 1.0 / FWHM_PER_SIGMA;
        let expected = libm::erf(0.5 / (sigma * core::f64::consts::SQRT_2));
        assert!((p.pixel_fraction(5.0, 5) - expected).abs() < 1e-15);
        // Far tail stays positive and tiny, not a rounding-error zero or negative.
        let far = p.pixel_fraction(5.0, 9);
        assert!(far > 0.0 && far < 1e-15, "{far}");
    }
}
