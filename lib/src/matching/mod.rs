//! Match: predicted lines to peaks, isotope shares, and what is left unexplained.
//!
//! - [`catalogue`]: the predicted lines of the considered nuclei that fall on the sensor.
//! - [`feature`]: lines closer than the instrument resolves become one feature.
//! - [`assign()`]: each feature takes the nearest free peak within its window.
//! - [`isotope`]: the share of each hydrogen isotope, or "not determinable".
//! - [`markers`]: hints for unexplained peaks (foreign gases, leaks).
pub mod assign;
pub mod catalogue;
mod error;
pub mod feature;
pub mod isotope;
pub(crate) mod line_pixels;
pub mod markers;

pub use assign::{assign, Pair};
pub use catalogue::{CatalogueLine, MAX_CATALOGUE};
pub use error::MatchError;
pub use feature::{Feature, MAX_FEATURES};
pub use isotope::{ShareEstimate, MAX_SHARE_SIGMA_PPM};
pub use markers::{Marker, MARKERS};
