//! Hostile frames for the on-target work bound: each must give a report or a clear error, and its
//! instruction count per pixel must stay within 2 × that of the typical frame (the `h-tube` trace) in
//! the same mode. `boards/measure.sh` runs them in the `measure` build and prints the ratios.
//!
//! Integer generators only (the firmware builds them in RAM); the frames are invented for the test.
//! Mirrors the host-side set in `tests/tests/hardening_adversarial.rs`.
use crate::traces::{H_TUBE, PIXELS};

/// Largest frame of the set.
pub const MAX_ADVERSARY_PIXELS: usize = 2 * PIXELS;
/// Full scale of the demo bench's 14-bit ADC.
pub const FULL_SCALE: u16 = (1 << 14) - 1;

/// What is wrong with a frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Adversary {
    /// Uniform random counts over the whole ADC range, with every pixel at the largest gain.
    NoiseAtMaxGain,
    /// 1000 single-pixel spikes, one every 4 px, on a 4096-px frame.
    SpikeComb4096,
    /// Every other pixel lit: 1024 spikes.
    SpikeEveryOther,
    /// Every pixel at full scale.
    AllSaturated,
    /// Every pixel 0.
    AllZero,
    /// The first 16 px of the typical frame (the shortest frame lib accepts).
    Short16,
    /// One pixel (refused with a clear error).
    OnePixel,
    /// The typical frame on 4096 px (each pixel twice).
    Long4096,
    /// Steps of 1024 counts every 128 px.
    Staircase,
    /// 0 and full scale alternating.
    AlternatingExtremes,
    /// A narrow line every 10 px: 204 lines, more than the peak list holds.
    DenseLines,
    /// One pixel at full scale, the rest 0.
    SingleLitPixel,
    /// The typical frame with a dark frame brighter than it.
    DarkAboveSignal,
    /// The typical frame with a saturated dark frame and the largest gain.
    SaturatedDark,
    /// A random walk over the ADC range.
    RandomWalk,
}

/// Every adversary, in print order.
pub const ADVERSARIES: [Adversary; 15] = [
    Adversary::NoiseAtMaxGain,
    Adversary::SpikeComb4096,
    Adversary::SpikeEveryOther,
    Adversary::AllSaturated,
    Adversary::AllZero,
    Adversary::Short16,
    Adversary::OnePixel,
    Adversary::Long4096,
    Adversary::Staircase,
    Adversary::AlternatingExtremes,
    Adversary::DenseLines,
    Adversary::SingleLitPixel,
    Adversary::DarkAboveSignal,
    Adversary::SaturatedDark,
    Adversary::RandomWalk,
];

/// How the frame is checked besides its counts.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Extras {
    /// Dark frame value on every pixel, if a dark frame is subtracted.
    pub dark: Option<u16>,
    /// Whether every pixel gets the largest gain-table factor.
    pub max_gain: bool,
}

/// xorshift64, seeded: the same frames on every core.
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        self.0
    }
}

impl Adversary {
    /// Short name (no spaces) for the measurement output.
    pub fn name(self) -> &'static str {
        match self {
            Adversary::NoiseAtMaxGain => "noise-at-max-gain",
            Adversary::SpikeComb4096 => "spike-comb-1000-4096px",
            Adversary::SpikeEveryOther => "spike-every-other-px",
            Adversary::AllSaturated => "all-saturated",
            Adversary::AllZero => "all-zero",
            Adversary::Short16 => "16px",
            Adversary::OnePixel => "1px",
            Adversary::Long4096 => "4096px",
            Adversary::Staircase => "staircase",
            Adversary::AlternatingExtremes => "alternating-extremes",
            Adversary::DenseLines => "204-narrow-lines",
            Adversary::SingleLitPixel => "single-lit-pixel",
            Adversary::DarkAboveSignal => "dark-above-signal",
            Adversary::SaturatedDark => "saturated-dark-max-gain",
            Adversary::RandomWalk => "random-walk",
        }
    }

    /// Dark frame and gain of the check.
    pub fn extras(self) -> Extras {
        match self {
            Adversary::NoiseAtMaxGain => Extras {
                dark: None,
                max_gain: true,
            },
            Adversary::DarkAboveSignal => Extras {
                dark: Some(FULL_SCALE - 1),
                max_gain: false,
            },
            Adversary::SaturatedDark => Extras {
                dark: Some(FULL_SCALE),
                max_gain: true,
            },
            _ => Extras {
                dark: None,
                max_gain: false,
            },
        }
    }

    /// Writes the frame into the start of `out` (≥ [`MAX_ADVERSARY_PIXELS`] long) and returns its length.
    pub fn fill(self, out: &mut [u16]) -> usize {
        let mut rng = Rng(0xadd5_eed5);
        let typical = |i: usize| H_TUBE.get(i).copied().unwrap_or(0);
        let n = match self {
            Adversary::SpikeComb4096 | Adversary::Long4096 => MAX_ADVERSARY_PIXELS,
            Adversary::Short16 => 16,
            Adversary::OnePixel => 1,
            _ => PIXELS,
        };
        let mut walk: i32 = 8000;
        for (i, v) in out.iter_mut().take(n).enumerate() {
            *v = match self {
                Adversary::NoiseAtMaxGain => (rng.next() % (u64::from(FULL_SCALE) + 1)) as u16,
                Adversary::SpikeComb4096 => {
                    if i % 4 == 1 && i < 4000 {
                        FULL_SCALE - 400
                    } else {
                        200
                    }
                }
                Adversary::SpikeEveryOther => {
                    if i % 2 == 0 {
                        12_000
                    } else {
                        400
                    }
                }
                Adversary::AllSaturated => FULL_SCALE,
                Adversary::AllZero => 0,
                Adversary::Short16 | Adversary::OnePixel => typical(i),
                Adversary::Long4096 => typical(i / 2),
                Adversary::Staircase => (i / 128 * 1024).min(usize::from(FULL_SCALE)) as u16,
                Adversary::AlternatingExtremes => {
                    if i % 2 == 0 {
                        0
                    } else {
                        FULL_SCALE
                    }
                }
                // exp(−d²/2) × 8000 for d = −5 … 4, on a 1200-count pedestal.
                Adversary::DenseLines => {
                    1200 + [0, 3, 89, 1083, 4852, 8000, 4852, 1083, 89, 3][i % 10]
                }
                Adversary::SingleLitPixel => {
                    if i == 1000 {
                        FULL_SCALE
                    } else {
                        0
                    }
                }
                Adversary::DarkAboveSignal | Adversary::SaturatedDark => typical(i),
                Adversary::RandomWalk => {
                    walk = (walk + (rng.next() % 401) as i32 - 200).clamp(0, i32::from(FULL_SCALE));
                    walk as u16
                }
            };
        }
        n
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frames_have_their_lengths_and_stay_in_range() {
        let mut buf = [0u16; MAX_ADVERSARY_PIXELS];
        for a in ADVERSARIES {
            let n = a.fill(&mut buf);
            assert!((1..=MAX_ADVERSARY_PIXELS).contains(&n), "{}", a.name());
            assert!(buf[..n].iter().all(|&v| v <= FULL_SCALE), "{}", a.name());
        }
        assert_eq!(Adversary::SpikeComb4096.fill(&mut buf), 4096);
        assert_eq!(buf[..4096].iter().filter(|&&v| v > 1000).count(), 1000);
        assert_eq!(Adversary::OnePixel.fill(&mut buf), 1);
        let n = Adversary::Long4096.fill(&mut buf);
        assert!((0..n).all(|i| buf[i] == H_TUBE[i / 2]));
    }
}
