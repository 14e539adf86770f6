//! Predict: where every line of a one-electron ion lies, from first principles.
//!
//! Levels are Dirac energies with reduced mass and the leading recoil terms ([`level`]); a line is the
//! photon-weighted centroid of its fine-structure components ([`line()`], [`Components`]); air
//! wavelengths follow IAU standard air or measured room air ([`Air`]). [`Lines`] walks a wavelength
//! window in order.
//!
//! Scales: wavelengths in femtometres (`_fm`, u64), wavenumbers in nanokayser (`_nk`, 10⁻⁹ cm⁻¹),
//! energies in nano-electronvolts (`_nev`); internal level energies in Q80 units of mₑc².
//!
//! ```
//! use glowcheck::predict::{line, Air, Nucleus};
//! let d_alpha = line(Nucleus::H2, 2, 3, &Air::Standard)?;
//! assert_eq!(d_alpha.air_fm.map(|fm| fm / 10_000_000), Some(65)); // 656.1 nm
//! # Ok::<(), glowcheck::predict::PredictError>(())
//! ```
mod air;
#[rustfmt::skip]
mod blend_table;
mod component;
pub mod constants;
mod error;
pub mod level;
mod line;
mod nucleus;
mod strength;
#[rustfmt::skip]
mod strength_table;
mod units;
#[rustfmt::skip]
mod vapour_table;
mod window;

pub use air::{Air, AirConditions, AIR_MIN_VACUUM_FM};
pub use component::{Component, Components};
pub use error::PredictError;
pub use line::{line, Line};
pub use nucleus::Nucleus;
pub use window::Lines;
