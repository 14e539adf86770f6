//! Judge: a tube profile and the findings of a frame become pass, fail or inconclusive, with reasons.
pub mod profile;
mod reason;
mod report;

pub use profile::{ExpectedSpecies, TubeProfile, BUNDLED, MAX_SPECIES};
pub use reason::{Reason, Severity};
pub use report::{
    MatchedLine, Mode, Report, Scores, SpeciesShare, UnexplainedPeak, Verdict, MAX_REASONS,
    MAX_REPORT_LINES, MAX_UNEXPLAINED,
};
