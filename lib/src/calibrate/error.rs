//! Why a wavelength map could not be built or used.
use core::fmt;

/// Calibration failures. None of them is transient: the same peaks give the same error.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum CalibrateError {
    /// Fewer matched lines than the polynomial needs (degree + 1), or degree outside 1…3.
    TooFewPoints,
    /// The points do not pin the polynomial down (all at one pixel, or numerically singular).
    Degenerate,
    /// The map is not monotone over the sensor, or a coefficient left its range.
    NotMonotone,
    /// A value left the fixed-point range.
    Overflow,
    /// No pattern of predicted lines explains at least three peaks.
    NoConsistentPattern,
    /// More points than the fit holds ([`MAX_FIT_POINTS`](super::MAX_FIT_POINTS)).
    TooManyPoints,
}

impl fmt::Display for CalibrateError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            CalibrateError::TooFewPoints => {
                "too few identified lines for the wavelength polynomial"
            }
            CalibrateError::Degenerate => {
                "identified lines do not determine the wavelength polynomial"
            }
            CalibrateError::NotMonotone => "wavelength map is not monotone across the sensor",
            CalibrateError::Overflow => "fixed-point overflow in the wavelength map",
            CalibrateError::NoConsistentPattern => {
                "no consistent line pattern found (fewer than 3 lines agree)"
            }
            CalibrateError::TooManyPoints => "more calibration points than the fit holds",
        })
    }
}
