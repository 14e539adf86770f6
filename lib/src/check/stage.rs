//! The points of [`Checker::check_traced`](super::Checker::check_traced) between pipeline stages, so a
//! caller can time or log each stage without lib knowing clocks.

/// A stage [`Checker::check_traced`](super::Checker::check_traced) has just finished. Stages a frame
/// never reaches (no peaks, an unusable frame, a failed calibration) are not reported.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Stage {
    /// Dark, gain and flags applied.
    Conditioned,
    /// Peaks found and centred.
    PeaksFound,
    /// The map to judge by is known (stored, or fitted in the calibrate modes).
    Calibrated,
    /// Peaks matched to lines, isotope shares estimated, leftovers listed.
    Matched,
    /// Verdict and reasons decided; `report` is complete.
    Judged,
}
