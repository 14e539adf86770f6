//! What can go wrong when asking the predictor for a line.
use core::fmt;

/// Why a prediction was refused. Every variant is a caller error or a range limit; none is transient.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum PredictError {
    /// The nucleus symbol is not one the predictor knows.
    UnknownNucleus,
    /// A principal quantum number is 0 or above [`MAX_N`](super::constants::MAX_N).
    LevelOutOfRange,
    /// The upper level is not above the lower one.
    UpperNotAboveLower,
    /// The wavelength window ends before it starts.
    InvertedWindow,
    /// Air temperature outside −20 … +50 °C.
    AirTemperatureOutOfRange,
    /// Air pressure outside 50 … 120 kPa.
    AirPressureOutOfRange,
    /// Relative humidity above 100 %.
    AirHumidityOutOfRange,
    /// An intermediate value left the fixed-point range (not expected for valid inputs).
    Overflow,
}

impl fmt::Display for PredictError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            PredictError::UnknownNucleus => {
                "unknown nucleus (known: H, D, T, He3, He4, Li6, Li7, Be9, B11, C12, N14, O16)"
            }
            PredictError::LevelOutOfRange => "principal quantum number must be 1 to 40",
            PredictError::UpperNotAboveLower => "upper level must be above the lower level",
            PredictError::InvertedWindow => "wavelength window ends before it starts",
            PredictError::AirTemperatureOutOfRange => "air temperature must be -20 to +50 degC",
            PredictError::AirPressureOutOfRange => "air pressure must be 50 000 to 120 000 Pa",
            PredictError::AirHumidityOutOfRange => "relative humidity must be 0 to 100 %",
            PredictError::Overflow => "fixed-point overflow in line prediction",
        })
    }
}
