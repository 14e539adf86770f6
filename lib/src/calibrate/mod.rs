//! Calibrate: the pixel → wavelength map, fitted, checked and inverted.
//!
//! - [`WavelengthMap`]: the polynomial map, its slope and inverse.
//! - [`fit_map`]: weighted least squares with covariance ([`MapFit::sigma_fm_at`]).
//! - [`identify()`]: which peak is which line, from a nominal map that may be several nm off, or blind.
mod error;
mod fit;
pub mod identify;
mod map;
mod muldiv;

pub use error::CalibrateError;
pub use fit::{fit_map, FitPoint, MapFit, MAX_FIT_POINTS};
pub(crate) use fit::{standard_frame, SigmaPoly};
pub use identify::{
    identify, identify_with, Identified, IdentifyConfig, IdentifyWork, ReferenceLine,
    MAX_REFERENCE_LINES,
};
pub(crate) use map::HalfWidth;
pub use map::{WavelengthMap, X_ONE_Q30};
pub(crate) use muldiv::{mul_64x64, mul_div_round, Divisor};
