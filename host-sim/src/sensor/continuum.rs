//! Smooth background light: a lamp continuum and stray light.
//!
//! The continuum shape is an invented demo curve that behaves like a deuterium lamp's molecular
//! continuum on a visible-range sensor: strongest in the near UV, falling smoothly toward the red.
//! It is f(λ) = u^k · exp(k·(1 − u)) with u = λ_peak/λ, which is 1 at λ_peak and has no ripples.

/// A smooth continuum in electrons per pixel.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Continuum {
    /// Electrons per pixel per integration at the peak wavelength.
    pub peak_e: f64,
    /// Wavelength of the maximum in nm.
    pub peak_nm: f64,
    /// Steepness k of the fall-off (larger: faster decline away from the peak).
    pub steepness: f64,
}

impl Continuum {
    /// Electrons on a pixel whose centre sees wavelength `nm` (the shape is smooth on the scale of
    /// a pixel, so the centre value stands for the pixel).
    pub fn electrons_at(&self, nm: f64) -> f64 {
        if self.peak_e <= 0.0 || nm <= 0.0 {
            return 0.0;
        }
        let u = self.peak_nm / nm;
        self.peak_e * libm::pow(u, self.steepness) * libm::exp(self.steepness * (1.0 - u))
    }
}

/// Stray light: a fraction of all light reaching the sensor, spread evenly over its pixels
/// (scatter inside the spectrograph).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StrayLight {
    /// Fraction of the total light that ends up as an even floor, in [0, 1).
    pub fraction: f64,
}

impl StrayLight {
    /// Moves `fraction` of the total out of the image and spreads it evenly.
    pub fn apply(&self, electrons: &mut [f64]) {
        if self.fraction <= 0.0 || electrons.is_empty() {
            return;
        }
        let total: f64 = electrons.iter().sum();
        let floor = self.fraction * total / electrons.len() as f64;
        for e in electrons.iter_mut() {
            *e = *e * (1.0 - self.fraction) + floor;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn continuum_peaks_where_told() {
        let c = Continuum {
            peak_e: 500.0,
            peak_nm: 250.0,
            steepness: 3.0,
        };
        assert!((c.electrons_at(250.0) - 500.0).abs() < 1e-9);
        assert!(c.electrons_at(240.0) < 500.0);
        assert!(c.electrons_at(400.0) > c.electrons_at(600.0));
    }

    #[test]
    fn stray_light_keeps_total() {
        let mut e = vec![0.0, 100.0, 0.0, 0.0];
        StrayLight { fraction: 0.1 }.apply(&mut e);
        assert!((e.iter().sum::<f64>() - 100.0).abs() < 1e-9);
        assert!((e[0] - 2.5).abs() < 1e-12);
        assert!((e[1] - 92.5).abs() < 1e-12);
    }
}
