//! Why peak finding refused a frame.

use core::fmt;

/// Reasons [`find_peaks`](super::find_peaks) returns no result; the peak list is left empty.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum FindError {
    /// Fewer than [`MIN_PIXELS`](super::MIN_PIXELS) pixels: no noise estimate is possible.
    TooFewPixels,
    /// More than [`MAX_PIXELS`](crate::condition::MAX_PIXELS) pixels.
    TooManyPixels,
    /// `flags` differs in length from the frame.
    LengthMismatch,
    /// `scratch` is shorter than [`SCRATCH_PER_PIXEL`](super::SCRATCH_PER_PIXEL) × pixels.
    ScratchTooSmall,
    /// A configuration value is out of range (see [`FindConfig`](super::FindConfig)).
    BadConfig,
}

impl fmt::Display for FindError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::TooFewPixels => "frame too short to estimate noise",
            Self::TooManyPixels => "frame has more pixels than the supported maximum",
            Self::LengthMismatch => "flag buffer length differs from the frame",
            Self::ScratchTooSmall => "scratch buffer too small for the frame",
            Self::BadConfig => "peak-finding configuration out of range",
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn texts_differ() {
        let all = [
            FindError::TooFewPixels,
            FindError::TooManyPixels,
            FindError::LengthMismatch,
            FindError::ScratchTooSmall,
            FindError::BadConfig,
        ];
        for (i, a) in all.iter().enumerate() {
            for b in all.iter().skip(i + 1) {
                assert_ne!(format!("{a}"), format!("{b}"));
            }
        }
    }
}
