//! The sensor facts conditioning needs: full scale, exposure, conversion gain, bad pixels, linearity.

use super::ConditionError;
use heapless::Vec;

/// Capacity of the bad-pixel map; cheap linear sensors ship with a handful, a sensor needing more is scrap.
pub const MAX_BAD_PIXELS: usize = 32;
/// Capacity of the linearity curve.
pub const MAX_LINEARITY_KNOTS: usize = 8;
/// 1.0 in the Q14 factors used by the linearity curve and the gain table.
pub const ONE_Q14: u16 = 1 << 14;

/// One point of the response-linearity correction curve.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LinearityKnot {
    /// Mean raw level of one readout at which the factor applies (ADC counts).
    pub level_counts: u16,
    /// Multiplier that makes the response linear at that level (Q14: 16384 = 1.0, must be > 0).
    pub factor_q14: u16,
}

/// How one sensor's frames are turned into linear, dark-free counts; part of the instrument configuration.
///
/// Dark frames must be taken at the same integration time and temperature as the signal; their co-add
/// count may differ.
#[derive(Debug, Clone, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ConditionConfig {
    /// Raw readouts at or above this many counts are saturated (e.g. 4095 for a 12-bit ADC).
    pub full_scale_counts: u16,
    /// Exposure of each readout (µs, > 0).
    pub integration_us: u32,
    /// Exposure the output is scaled to (µs); 0 keeps the output per readout at the actual exposure.
    pub reference_us: u32,
    /// Sensor conversion gain (electrons per ADC count, Q8: 256 = 1 e⁻/count); 0 if unknown. Lets the
    /// conditioned frame carry its shot-noise slope to peak finding.
    pub electrons_per_count_q8: u16,
    /// Pixels to replace by interpolation (hot or dead), any order.
    pub bad_pixels: Vec<u16, MAX_BAD_PIXELS>,
    /// Linearity curve sorted by `level_counts`; empty means the sensor is taken as linear. Between knots
    /// the factor is interpolated linearly; outside, the end factor holds.
    pub linearity: Vec<LinearityKnot, MAX_LINEARITY_KNOTS>,
}

impl ConditionConfig {
    /// A linear sensor without bad pixels, output per readout, conversion gain unknown.
    pub fn new(full_scale_counts: u16, integration_us: u32) -> Self {
        Self {
            full_scale_counts,
            integration_us,
            reference_us: 0,
            electrons_per_count_q8: 0,
            bad_pixels: Vec::new(),
            linearity: Vec::new(),
        }
    }

    /// Checks the values against a frame of `pixels` pixels.
    pub(crate) fn check(&self, pixels: usize) -> Result<(), ConditionError> {
        if self.full_scale_counts == 0 || self.integration_us == 0 {
            return Err(ConditionError::BadConfig);
        }
        if self.bad_pixels.iter().any(|&b| usize::from(b) >= pixels) {
            return Err(ConditionError::BadPixelIndex);
        }
        let sorted = self
            .linearity
            .windows(2)
            .all(|w| matches!(w, [a, b] if a.level_counts < b.level_counts));
        if !sorted || self.linearity.iter().any(|k| k.factor_q14 == 0) {
            return Err(ConditionError::BadConfig);
        }
        Ok(())
    }

    /// Linearity factor (Q14) at a mean raw level given as `sum / frames` counts.
    ///
    /// Loop bound: [`MAX_LINEARITY_KNOTS`].
    pub(crate) fn linearity_q14(&self, sum: u32, frames: u16) -> u32 {
        let frames = u64::from(frames.max(1));
        let (first, last) = match (self.linearity.first(), self.linearity.last()) {
            (Some(f), Some(l)) => (f, l),
            _ => return u32::from(ONE_Q14),
        };
        // Level in Q8 counts keeps sub-count precision of co-added frames.
        let level_q8 = (u64::from(sum) << 8) / frames;
        let at = |k: &LinearityKnot| u64::from(k.level_counts) << 8;
        if level_q8 <= at(first) {
            return u32::from(first.factor_q14);
        }
        for w in self.linearity.windows(2) {
            if let [a, b] = w {
                if level_q8 <= at(b) {
                    let span = at(b).saturating_sub(at(a)).max(1);
                    let t = level_q8.saturating_sub(at(a));
                    let fa = i64::from(a.factor_q14);
                    let fb = i64::from(b.factor_q14);
                    // t <= span, so the product stays within i64.
                    let f = fa + (fb - fa) * (t as i64) / (span as i64);
                    return f.clamp(1, i64::from(u16::MAX)) as u32;
                }
            }
        }
        u32::from(last.factor_q14)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rejects_impossible_sensors() {
        assert_eq!(
            ConditionConfig::new(0, 10).check(4),
            Err(ConditionError::BadConfig)
        );
        assert_eq!(
            ConditionConfig::new(10, 0).check(4),
            Err(ConditionError::BadConfig)
        );
        let mut c = ConditionConfig::new(4095, 1000);
        assert_eq!(c.check(4), Ok(()));
        c.bad_pixels.push(4).unwrap();
        assert_eq!(c.check(4), Err(ConditionError::BadPixelIndex));
        assert_eq!(c.check(5), Ok(()));
        let mut c = ConditionConfig::new(4095, 1000);
        let k = |l, f| LinearityKnot {
            level_counts: l,
            factor_q14: f,
        };
        c.linearity.push(k(100, ONE_Q14)).unwrap();
        c.linearity.push(k(50, ONE_Q14)).unwrap();
        assert_eq!(c.check(4), Err(ConditionError::BadConfig));
    }

    #[test]
    fn linearity_interpolates_between_knots_and_holds_outside() {
        let mut c = ConditionConfig::new(4095, 1000);
        assert_eq!(c.linearity_q14(12345, 3), 16384);
        let k = |l, f| LinearityKnot {
            level_counts: l,
            factor_q14: f,
        };
        c.linearity.push(k(1000, 16384)).unwrap();
        c.linearity.push(k(3000, 18384)).unwrap();
        assert_eq!(c.linearity_q14(500, 1), 16384);
        assert_eq!(c.linearity_q14(2000, 1), 17384);
        // Mean of 4 readouts summing to 8000 is level 2000.
        assert_eq!(c.linearity_q14(8000, 4), 17384);
        assert_eq!(c.linearity_q14(4000, 1), 18384);
    }
}
