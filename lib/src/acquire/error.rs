//! Why a readout timing was refused, or a frame could not be read.

use super::SampleErrorKind;
use core::fmt;
use embedded_hal::digital::ErrorKind as PinErrorKind;

/// Reasons [`ArrayTiming::new`](super::ArrayTiming::new) refuses a configuration.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ConfigError {
    /// No pixels, or more than [`MAX_ARRAY_PIXELS`](super::MAX_ARRAY_PIXELS).
    PixelCount,
    /// A clock half period of 0 ns.
    ClockHalfPeriod,
    /// The exposure is shorter than one scan, which every pixel spends integrating anyway.
    IntegrationShorterThanScan,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::PixelCount => "pixel count is zero or above the supported maximum",
            Self::ClockHalfPeriod => "clock half period is zero",
            Self::IntegrationShorterThanScan => "integration time is shorter than one readout scan",
        })
    }
}

/// Reasons [`LinearArray::read_frame`](super::LinearArray::read_frame) stops; the hardware's own
/// errors are handed back as their embedded-hal / sample-source kinds.
///
/// [`ReadError::FrameLength`] is found before any pin moves; after any other error the caller's frame
/// holds a partial readout and the next read starts from idle pins again.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ReadError {
    /// The frame buffer's length differs from the configured pixel count.
    FrameLength,
    /// Driving the start pin failed.
    StartPin(PinErrorKind),
    /// Driving the clock pin failed.
    ClockPin(PinErrorKind),
    /// The sample of pixel `pixel` (0 = first) failed.
    Sample {
        /// Index of the pixel being read.
        pixel: u16,
        /// What the source reported.
        kind: SampleErrorKind,
    },
}

impl fmt::Display for ReadError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::FrameLength => f.write_str("frame buffer length differs from the pixel count"),
            Self::StartPin(k) => write!(f, "start pin: {k}"),
            Self::ClockPin(k) => write!(f, "clock pin: {k}"),
            Self::Sample { pixel, kind } => write!(f, "sample of pixel {pixel}: {kind}"),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use core::fmt::Write;

    fn text(e: impl fmt::Display) -> heapless::String<128> {
        let mut s = heapless::String::new();
        write!(s, "{e}").unwrap();
        s
    }

    #[test]
    fn every_variant_has_distinct_text() {
        let config = [
            text(ConfigError::PixelCount),
            text(ConfigError::ClockHalfPeriod),
            text(ConfigError::IntegrationShorterThanScan),
        ];
        let read = [
            text(ReadError::FrameLength),
            text(ReadError::StartPin(PinErrorKind::Other)),
            text(ReadError::ClockPin(PinErrorKind::Other)),
            text(ReadError::Sample {
                pixel: 7,
                kind: SampleErrorKind::Exhausted,
            }),
        ];
        for (i, a) in config.iter().chain(read.iter()).enumerate() {
            assert!(!a.is_empty());
            for b in config.iter().chain(read.iter()).skip(i + 1) {
                assert_ne!(a, b);
            }
        }
        assert!(read[3].starts_with("sample of pixel 7: "));
    }
}
