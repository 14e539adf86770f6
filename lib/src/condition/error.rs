//! Why a frame could not be conditioned.

use core::fmt;

/// Reasons [`condition_frame`](super::condition_frame) or a [`Stack`](super::Stack) refuse a frame.
///
/// Nothing is written to the caller's buffers when one of these is returned, except where a variant says so.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ConditionError {
    /// The frame has no pixels.
    Empty,
    /// The frame has more than [`MAX_PIXELS`](super::MAX_PIXELS) pixels.
    TooManyPixels,
    /// Two buffers that describe the same frame have different lengths.
    LengthMismatch,
    /// More than [`MAX_COADD`](super::MAX_COADD) frames were added to one stack, or a sum claims zero frames.
    FrameCount,
    /// The configuration cannot describe a real sensor (zero full scale or zero integration time).
    BadConfig,
    /// A bad-pixel index lies outside the frame.
    BadPixelIndex,
    /// A gain-table entry is zero or above [`GAIN_MAX_Q14`](super::GAIN_MAX_Q14).
    BadGain,
}

impl fmt::Display for ConditionError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let text = match self {
            Self::Empty => "frame has no pixels",
            Self::TooManyPixels => "frame has more pixels than the supported maximum",
            Self::LengthMismatch => "buffers for one frame differ in length",
            Self::FrameCount => "frame count is zero or above the co-adding limit",
            Self::BadConfig => "full scale or integration time is zero",
            Self::BadPixelIndex => "bad-pixel index lies outside the frame",
            Self::BadGain => "gain-table entry is zero or too large",
        };
        f.write_str(text)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_variant_has_distinct_text() {
        use core::fmt::Write;
        let all = [
            ConditionError::Empty,
            ConditionError::TooManyPixels,
            ConditionError::LengthMismatch,
            ConditionError::FrameCount,
            ConditionError::BadConfig,
            ConditionError::BadPixelIndex,
            ConditionError::BadGain,
        ];
        let mut seen: heapless::Vec<heapless::String<80>, 8> = heapless::Vec::new();
        for e in all {
            let mut s: heapless::String<80> = heapless::String::new();
            write!(s, "{e}").unwrap();
            assert!(!s.is_empty());
            assert!(!seen.contains(&s), "duplicate text {s}");
            seen.push(s).unwrap();
        }
    }
}
