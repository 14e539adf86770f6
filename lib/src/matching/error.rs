//! Why matching could not run.
use core::fmt;

/// Matching failures; all come from the configuration or from ranges, not from the frame's content.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum MatchError {
    /// The line predictor refused (a range or overflow inside prediction).
    Predict(crate::predict::PredictError),
    /// The wavelength map could not be evaluated or inverted.
    Map(crate::calibrate::CalibrateError),
    /// No predicted line of the profile's species falls on the sensor.
    NoLinesOnSensor,
}

impl fmt::Display for MatchError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            MatchError::Predict(e) => write!(f, "line prediction failed: {e}"),
            MatchError::Map(e) => write!(f, "wavelength map unusable: {e}"),
            MatchError::NoLinesOnSensor => {
                f.write_str("no predicted line of the profile falls on the sensor")
            }
        }
    }
}

impl From<crate::predict::PredictError> for MatchError {
    fn from(e: crate::predict::PredictError) -> Self {
        MatchError::Predict(e)
    }
}

impl From<crate::calibrate::CalibrateError> for MatchError {
    fn from(e: crate::calibrate::CalibrateError) -> Self {
        MatchError::Map(e)
    }
}
