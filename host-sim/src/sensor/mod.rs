//! Sensor model for synthetic traces: what a grating spectrograph with a cheap linear sensor would
//! record from a set of emission lines.
//!
//! The chain, each step in its own file: lines at wavelengths → [`dispersion`] (pixel ↔ nm) →
//! [`profile`] (instrument line shape, exactly integrated per pixel) → [`continuum`] (lamp continuum and
//! stray light) → [`scene`] (mean electrons per pixel) → [`detector`] (shot noise, dark current, hot
//! pixels, read noise, bias, full well, ADC). [`rng`] makes every random draw reproducible from a seed.
//!
//! All of it is f64 on the host: it only makes test data for the float-free firmware code.

pub mod continuum;
pub mod detector;
pub mod dispersion;
pub mod emission;
pub mod profile;
pub mod rng;
pub mod scene;
