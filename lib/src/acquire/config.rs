//! Readout timing of a clocked linear photodiode array, and its one-time validation.
//!
//! All times are integers: nanoseconds (`_ns`) for the clock and the sample, microseconds (`_us`) for
//! the exposure. [`ArrayTiming::new`] checks a [`ArrayConfig`] once and works out the wait between the
//! two scans of a frame; afterwards nothing about the timing can fail.

use super::ConfigError;

/// Largest pixel count the driver accepts (the widest frame conditioning takes,
/// [`crate::condition::MAX_PIXELS`]).
pub const MAX_ARRAY_PIXELS: u16 = crate::condition::MAX_PIXELS as u16;

/// How a board's sensor is clocked; plain values, checked by [`ArrayTiming::new`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ArrayConfig {
    /// Pixels read per frame (1 ..= [`MAX_ARRAY_PIXELS`]); the caller's frame buffer has this length.
    pub pixels: u16,
    /// Exposure of every pixel (µs): from the clock edge that empties it to the one that reads it.
    pub integration_us: u32,
    /// Half a pixel-clock period (ns, ≥ 1): the time the clock stays high, and then low. Also the start
    /// pulse's setup and hold around its clock edge, and the settle time before a sample.
    pub clock_half_period_ns: u32,
    /// Clock pulses after the last pixel that some arrays need to finish a readout (0 if none).
    pub trailing_clocks: u16,
    /// How long one [`SampleSource::read_sample`](super::SampleSource::read_sample) takes on the board
    /// (ns; e.g. an ADC's conversion time). The emptying scan waits this long instead of sampling, so
    /// both scans of a frame run at the same pace and every pixel gets the same exposure.
    pub sample_time_ns: u32,
}

impl ArrayConfig {
    /// A config with no trailing clocks and an instantaneous sample; set the fields the sensor needs.
    pub const fn new(pixels: u16, integration_us: u32, clock_half_period_ns: u32) -> Self {
        Self {
            pixels,
            integration_us,
            clock_half_period_ns,
            trailing_clocks: 0,
            sample_time_ns: 0,
        }
    }

    /// Duration of one scan (start pulse, every pixel, trailing clocks), in ns: 3 half periods for the
    /// start pulse, 2 per pixel and per trailing clock, plus one sample time per pixel. Saturates
    /// instead of overflowing (a saturated scan is refused as longer than any exposure).
    pub const fn scan_ns(&self) -> u64 {
        let halves = 3 + 2 * self.pixels as u64 + 2 * self.trailing_clocks as u64;
        let clocked = halves.saturating_mul(self.clock_half_period_ns as u64);
        let sampled = (self.pixels as u64).saturating_mul(self.sample_time_ns as u64);
        clocked.saturating_add(sampled)
    }

    /// The shortest exposure this timing allows (µs, rounded up): one whole scan, since a pixel is
    /// emptied by one scan and read by the next.
    pub const fn min_integration_us(&self) -> u64 {
        self.scan_ns().div_ceil(1000)
    }
}

/// An [`ArrayConfig`] that describes a readout this driver can run, with its inter-scan wait worked out.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ArrayTiming {
    config: ArrayConfig,
    wait_ns: u64,
}

impl ArrayTiming {
    /// Checks `config`: pixel count in range, a clock half period of at least 1 ns, and an exposure no
    /// shorter than one scan.
    pub fn new(config: ArrayConfig) -> Result<Self, ConfigError> {
        if config.pixels == 0 || config.pixels > MAX_ARRAY_PIXELS {
            return Err(ConfigError::PixelCount);
        }
        if config.clock_half_period_ns == 0 {
            return Err(ConfigError::ClockHalfPeriod);
        }
        let exposure_ns = u64::from(config.integration_us).saturating_mul(1000);
        let wait_ns = exposure_ns
            .checked_sub(config.scan_ns())
            .ok_or(ConfigError::IntegrationShorterThanScan)?;
        Ok(Self { config, wait_ns })
    }

    /// The checked values.
    pub const fn config(&self) -> &ArrayConfig {
        &self.config
    }

    /// Pixels per frame.
    pub const fn pixels(&self) -> u16 {
        self.config.pixels
    }

    /// Exposure of every pixel (µs).
    pub const fn integration_us(&self) -> u32 {
        self.config.integration_us
    }

    /// Wait between the end of the emptying scan and the start pulse of the reading scan (ns):
    /// exposure − one scan.
    pub const fn wait_ns(&self) -> u64 {
        self.wait_ns
    }

    /// The same timing with another exposure (µs), checked like [`ArrayTiming::new`].
    pub fn with_integration_us(&self, integration_us: u32) -> Result<Self, ConfigError> {
        let mut config = self.config;
        config.integration_us = integration_us;
        Self::new(config)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scan_time_counts_every_half_period_and_sample() {
        let mut c = ArrayConfig::new(4, 100, 500);
        // start pulse 3 halves + 4 pixels × 2 halves = 11 halves of 500 ns
        assert_eq!(c.scan_ns(), 5_500);
        c.trailing_clocks = 2;
        c.sample_time_ns = 2_000;
        // + 2 trailing × 2 halves, + 4 samples × 2 µs
        assert_eq!(c.scan_ns(), 15 * 500 + 4 * 2_000);
        assert_eq!(c.min_integration_us(), 16); // 15.5 µs rounded up
    }

    #[test]
    fn wait_fills_the_exposure_after_one_scan() {
        let t = ArrayTiming::new(ArrayConfig::new(4, 100, 500)).unwrap();
        assert_eq!(t.wait_ns(), 100_000 - 5_500);
        assert_eq!(t.pixels(), 4);
        let longer = t.with_integration_us(1_000).unwrap();
        assert_eq!(longer.wait_ns(), 1_000_000 - 5_500);
        assert_eq!(longer.integration_us(), 1_000);
        // The original is unchanged.
        assert_eq!(t.integration_us(), 100);
    }

    #[test]
    fn exposure_of_exactly_one_scan_is_accepted_and_waits_nothing() {
        // 1 pixel, half period 200 ns: 5 halves = 1 µs.
        let t = ArrayTiming::new(ArrayConfig::new(1, 1, 200)).unwrap();
        assert_eq!(t.wait_ns(), 0);
    }

    #[test]
    fn refuses_timings_it_cannot_run() {
        assert_eq!(
            ArrayTiming::new(ArrayConfig::new(0, 100, 500)),
            Err(ConfigError::PixelCount)
        );
        assert_eq!(
            ArrayTiming::new(ArrayConfig::new(MAX_ARRAY_PIXELS + 1, 100_000, 500)),
            Err(ConfigError::PixelCount)
        );
        assert_eq!(
            ArrayTiming::new(ArrayConfig::new(4, 100, 0)),
            Err(ConfigError::ClockHalfPeriod)
        );
        assert_eq!(
            ArrayTiming::new(ArrayConfig::new(4, 5, 500)),
            Err(ConfigError::IntegrationShorterThanScan)
        );
        let t = ArrayTiming::new(ArrayConfig::new(4, 100, 500)).unwrap();
        assert_eq!(
            t.with_integration_us(0),
            Err(ConfigError::IntegrationShorterThanScan)
        );
    }

    #[test]
    fn largest_values_stay_in_range() {
        let mut c = ArrayConfig::new(MAX_ARRAY_PIXELS, u32::MAX, u32::MAX);
        c.trailing_clocks = u16::MAX;
        c.sample_time_ns = u32::MAX;
        let halves = 3 + 2 * u64::from(MAX_ARRAY_PIXELS) + 2 * u64::from(u16::MAX);
        assert_eq!(
            c.scan_ns(),
            halves * u64::from(u32::MAX) + u64::from(MAX_ARRAY_PIXELS) * u64::from(u32::MAX)
        );
        // The longest exposure (u32::MAX µs ≈ 71 min) is still shorter than that scan.
        assert_eq!(
            ArrayTiming::new(c),
            Err(ConfigError::IntegrationShorterThanScan)
        );
    }
}
