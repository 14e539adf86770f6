//! The light image on the sensor before readout: lines, continuum and stray light, in mean
//! photo-electrons per pixel.

use super::continuum::{Continuum, StrayLight};
use super::dispersion::WavelengthMap;
use super::profile::LineProfile;

/// One line as it lands on the sensor.
#[derive(Clone, Debug, PartialEq)]
pub struct SceneLine {
    /// Centre in pixel coordinates (0 = centre of the first pixel).
    pub center_px: f64,
    /// Total photo-electrons of the line per integration (its area).
    pub area_e: f64,
}

/// Everything that shapes the light image.
#[derive(Clone, Debug)]
pub struct Scene {
    /// Pixel count.
    pub pixels: usize,
    /// The true pixel → wavelength relation (may differ from the nominal one a trace reports).
    pub map: WavelengthMap,
    /// Instrument profile.
    pub profile: LineProfile,
    /// Lines to draw.
    pub lines: Vec<SceneLine>,
    /// Lamp continuum, if any.
    pub continuum: Option<Continuum>,
    /// Scattered light.
    pub stray: StrayLight,
}

impl Scene {
    /// Mean photo-electrons per pixel, exactly integrated over each pixel for the lines.
    pub fn render(&self) -> Vec<f64> {
        let mut e = vec![0.0; self.pixels];
        if let Some(c) = &self.continuum {
            for (k, v) in e.iter_mut().enumerate() {
                *v += c.electrons_at(self.map.nm_at(k as f64));
            }
        }
        for line in &self.lines {
            let (lo, hi) = match self.profile.reach_px() {
                Some(r) => (
                    (line.center_px - r).floor().max(0.0) as usize,
                    ((line.center_px + r).ceil().max(0.0) as usize).min(self.pixels),
                ),
                None => (0, self.pixels),
            };
            for (k, v) in e.iter_mut().enumerate().take(hi).skip(lo) {
                *v += line.area_e * self.profile.pixel_fraction(line.center_px, k);
            }
        }
        self.stray.apply(&mut e);
        e
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_area_lands_on_sensor() {
        let s = Scene {
            pixels: 64,
            map: WavelengthMap::new(&[400.0, 0.1], 64).unwrap(),
            profile: LineProfile::new(2.5, 0.0).unwrap(),
            lines: vec![SceneLine {
                center_px: 30.2,
                area_e: 1000.0,
            }],
            continuum: None,
            stray: StrayLight { fraction: 0.0 },
        };
        let e = s.render();
        assert!((e.iter().sum::<f64>() - 1000.0).abs() < 1e-9);
        let (kmax, _) = e
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.total_cmp(b.1))
            .unwrap();
        assert_eq!(kmax, 30);
        assert!(e[31] > e[29]);
    }
}
