//! glowcheck: decides on the spot whether a hydrogen-like light source is the right gas and isotope,
//! whether its lines sit where physics puts them, and whether the instrument's wavelength scale holds.
//!
//! The crate is `no_std`, allocation-free, panic-free and float-free: every value is an integer with its
//! unit and scale in its name or type, so the same frame gives bit-identical results on a host and on a
//! Cortex-M0 without an FPU.
//!
//! The modules follow the data through the pipeline:
//! - [`predict`]: hydrogen-like line positions from first principles (reduced-mass Rydberg levels, Dirac
//!   fine structure with recoil, blend centroids, vacuum-to-air refraction).
//! - [`condition`]: raw sensor frame → clean, dark-corrected counts.
//! - [`find`]: baseline removal, peak detection and sub-pixel centroids.
//! - [`calibrate`]: the pixel → wavelength map: identification of lines, fit, uncertainty.
//! - [`matching`]: predicted lines to peaks, isotope shares, unexplained peaks.
//! - [`judge`]: tube profiles, reasons and the verdict.
//!
//! [`check::Checker`] runs them all: one configuration value, one call per frame, one report.
#![cfg_attr(not(test), no_std)]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

pub mod acquire;
pub mod bounded;
pub mod calibrate;
pub mod check;
pub mod condition;
pub mod find;
pub mod fixed;
pub mod judge;
pub mod matching;
pub mod predict;
pub mod sort;
#[cfg(test)]
mod test_rng;
