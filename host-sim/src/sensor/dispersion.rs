//! Grating dispersion: pixel coordinate ↔ wavelength.
//!
//! Pixel coordinate `p` is measured in pixels with the centre of the first pixel in the file at 0 and
//! its edges at ±0.5, so a line "at 1234.5" falls on the border of pixels 1234 and 1235.

/// λ(p) = c0 + c1·p + c2·p² + c3·p³ in nm, degree ≤ 3.
#[derive(Clone, Debug, PartialEq)]
pub struct WavelengthMap {
    /// Coefficients c0..c3 (nm, nm/px, nm/px², nm/px³); trailing zeros for a lower degree.
    pub coeffs_nm: [f64; 4],
}

impl WavelengthMap {
    /// Builds a map from 1 to 4 coefficients and checks that it rises monotonically over
    /// `pixels` pixels (a folded map has no inverse and means a typo in the coefficients).
    pub fn new(coeffs: &[f64], pixels: usize) -> Result<Self, String> {
        if coeffs.is_empty() || coeffs.len() > 4 {
            return Err(format!(
                "a wavelength map has 1 to 4 coefficients (c0,c1,c2,c3 in nm/px^k), got {}",
                coeffs.len()
            ));
        }
        if coeffs.iter().any(|c| !c.is_finite()) {
            return Err("wavelength map coefficients must be finite numbers".into());
        }
        let mut c = [0.0; 4];
        c[..coeffs.len()].copy_from_slice(coeffs);
        let map = WavelengthMap { coeffs_nm: c };
        let last = pixels.saturating_sub(1) as f64;
        // Check the derivative at the ends and at the stationary point of the quadratic derivative.
        let mut probes = vec![-0.5, last + 0.5];
        if c[3] != 0.0 {
            let p = -c[2] / (3.0 * c[3]);
            if p > -0.5 && p < last + 0.5 {
                probes.push(p);
            }
        }
        if probes.iter().any(|&p| map.slope_nm_per_px(p) <= 0.0) {
            return Err(format!(
                "wavelength map {:?} does not rise over pixels 0..{}: dλ/dp must stay > 0",
                coeffs, pixels
            ));
        }
        Ok(map)
    }

    /// λ in nm at pixel coordinate `p`.
    pub fn nm_at(&self, p: f64) -> f64 {
        let c = &self.coeffs_nm;
        c[0] + p * (c[1] + p * (c[2] + p * c[3]))
    }

    /// dλ/dp in nm per pixel at `p`.
    pub fn slope_nm_per_px(&self, p: f64) -> f64 {
        let c = &self.coeffs_nm;
        c[1] + p * (2.0 * c[2] + p * 3.0 * c[3])
    }

    /// Pixel coordinate of wavelength `nm`, by Newton steps from the linear guess; `None` when the
    /// wavelength lies outside [−margin, pixels − 1 + margin] or the iteration does not settle.
    pub fn px_at(&self, nm: f64, pixels: usize, margin_px: f64) -> Option<f64> {
        let lo = -0.5 - margin_px;
        let hi = pixels as f64 - 0.5 + margin_px;
        if nm < self.nm_at(lo) || nm > self.nm_at(hi) {
            return None;
        }
        // Bisection bracket keeps Newton honest on strongly curved maps.
        let (mut a, mut b) = (lo, hi);
        let mut p = (nm - self.coeffs_nm[0]) / self.coeffs_nm[1].max(1e-12);
        if !(a..=b).contains(&p) {
            p = 0.5 * (a + b);
        }
        for _ in 0..100 {
            let f = self.nm_at(p) - nm;
            if f > 0.0 {
                b = p;
            } else {
                a = p;
            }
            let step = f / self.slope_nm_per_px(p);
            let mut next = p - step;
            if !(a..=b).contains(&next) {
                next = 0.5 * (a + b);
            }
            if (next - p).abs() < 1e-12 {
                return Some(next);
            }
            p = next;
        }
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inverse_matches_forward() {
        let m = WavelengthMap::new(&[340.0, 0.18, -6e-6, 1e-10], 2048).unwrap();
        for &p in &[0.0, 0.25, 511.3, 1500.75, 2047.0] {
            let nm = m.nm_at(p);
            let back = m.px_at(nm, 2048, 0.0).unwrap();
            assert!((back - p).abs() < 1e-9, "{p} -> {nm} -> {back}");
        }
        assert!(m.px_at(100.0, 2048, 10.0).is_none());
    }

    #[test]
    fn folded_map_rejected() {
        assert!(WavelengthMap::new(&[400.0, 0.1, -1e-4], 2048).is_err());
        assert!(WavelengthMap::new(&[], 2048).is_err());
        assert!(WavelengthMap::new(&[1.0, 1.0, 0.0, 0.0, 0.0], 2048).is_err());
    }
}
