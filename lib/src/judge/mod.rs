//! Judge: a tube profile and the findings of a frame become pass, fail or inconclusive, with reasons.
pub mod profile;
mod reason;

pub use profile::{ExpectedSpecies, TubeProfile, BUNDLED, MAX_SPECIES};
pub use reason::{Reason, Severity};
