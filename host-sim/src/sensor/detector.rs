//! The linear sensor and its readout: photon shot noise, dark current, hot pixels, read noise,
//! bias, full well, ADC quantisation and clipping.

use super::rng::Rng;

/// Largest ADC resolution the model and the trace files accept.
pub const MAX_ADC_BITS: u8 = 24;

/// Dark current doubles about every 6.3 °C in silicon sensors (common practice rule of thumb).
pub const DARK_DOUBLING_C: f64 = 6.3;

/// Readout parameters of one sensor.
#[derive(Clone, Debug, PartialEq)]
pub struct Detector {
    /// ADC resolution; full scale is 2^bits − 1 counts.
    pub adc_bits: u8,
    /// Conversion gain in electrons per count.
    pub gain_e_per_count: f64,
    /// Electronic offset added to every pixel, in counts.
    pub bias_counts: f64,
    /// RMS read noise in electrons.
    pub read_noise_e: f64,
    /// Pixel full-well capacity in electrons; charge above it is lost (saturation).
    pub full_well_e: f64,
    /// Dark current in electrons per second per pixel at 25 °C.
    pub dark_e_per_s_25c: f64,
    /// Sensor temperature in °C.
    pub temperature_c: f64,
    /// Integration time in seconds.
    pub integration_s: f64,
    /// Hot pixels: (index, dark-current multiplier).
    pub hot_pixels: Vec<(usize, f64)>,
}

impl Detector {
    /// ADC full scale in counts.
    pub fn full_scale_counts(&self) -> u32 {
        ((1u64 << self.adc_bits.min(MAX_ADC_BITS)) - 1) as u32
    }

    /// Mean dark electrons per pixel per integration at the sensor temperature.
    pub fn dark_e(&self) -> f64 {
        self.dark_e_per_s_25c
            * libm::exp2((self.temperature_c - 25.0) / DARK_DOUBLING_C)
            * self.integration_s
    }

    /// Places `count` hot pixels at distinct random indices, each with `factor` times the normal dark
    /// current.
    pub fn scatter_hot_pixels(&mut self, pixels: usize, count: usize, factor: f64, rng: &mut Rng) {
        self.hot_pixels.clear();
        let count = count.min(pixels);
        while self.hot_pixels.len() < count {
            let k = rng.below(pixels as u64) as usize;
            if !self.hot_pixels.iter().any(|&(i, _)| i == k) {
                self.hot_pixels.push((k, factor));
            }
        }
        self.hot_pixels.sort_by_key(|&(i, _)| i);
    }

    /// Mean electrons of pixel `k` before noise, given its light.
    pub fn mean_e(&self, k: usize, light_e: f64) -> f64 {
        let hot = self
            .hot_pixels
            .iter()
            .find(|&&(i, _)| i == k)
            .map_or(1.0, |&(_, f)| f);
        light_e.max(0.0) + self.dark_e() * hot
    }

    /// One readout: `light_e` are the mean photo-electrons per pixel (all zeros for a dark frame).
    pub fn read_frame(&self, light_e: &[f64], rng: &mut Rng) -> Vec<u32> {
        let full = self.full_scale_counts() as f64;
        light_e
            .iter()
            .enumerate()
            .map(|(k, &light)| {
                let electrons = (rng.poisson(self.mean_e(k, light)) as f64).min(self.full_well_e);
                let noise = self.read_noise_e * rng.normal();
                let counts = (electrons + noise) / self.gain_e_per_count + self.bias_counts;
                libm::round(counts).clamp(0.0, full) as u32
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn detector() -> Detector {
        Detector {
            adc_bits: 12,
            gain_e_per_count: 2.0,
            bias_counts: 100.0,
            read_noise_e: 0.0,
            full_well_e: 1e6,
            dark_e_per_s_25c: 10.0,
            temperature_c: 25.0 + DARK_DOUBLING_C,
            integration_s: 0.5,
            hot_pixels: vec![],
        }
    }

    #[test]
    fn dark_doubles_per_step() {
        assert!((detector().dark_e() - 10.0).abs() < 1e-12);
    }

    #[test]
    fn adc_clips_at_full_scale_and_zero() {
        let mut d = detector();
        d.dark_e_per_s_25c = 0.0;
        d.bias_counts = -50.0;
        let mut r = Rng::new(1, 0);
        let f = d.read_frame(&[0.0, 1e9, 8000.0], &mut r);
        assert_eq!(f[0], 0);
        assert_eq!(f[1], 4095);
        assert!(f[2] > 3800 && f[2] < 4000, "{}", f[2]);
    }

    #[test]
    fn hot_pixels_distinct_and_hot() {
        let mut d = detector();
        let mut r = Rng::new(5, 9);
        d.scatter_hot_pixels(16, 16, 50.0, &mut r);
        let idx: Vec<usize> = d.hot_pixels.iter().map(|h| h.0).collect();
        assert_eq!(idx, (0..16).collect::<Vec<_>>());
        d.scatter_hot_pixels(100, 3, 50.0, &mut r);
        let f = d.read_frame(&[0.0; 100], &mut r);
        for &(i, _) in &d.hot_pixels {
            assert!(f[i] > 250, "hot pixel {i}: {}", f[i]);
        }
    }
}
