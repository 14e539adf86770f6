//! Check: the whole job for one frame behind one call.
//!
//! ```ignore
//! let checker = Checker::new(config)?;                 // predicts the lines once
//! let mut buffers = Buffers::<2048>::new();            // or a `static`
//! let mut report = Report::new();
//! checker.check(FrameSum::single(&raw)?, None, None, buffers.workspace(2048), &mut report)?;
//! match report.verdict { Verdict::Pass => led_green(), _ => show(&report.reasons) }
//! ```
mod config;
mod error;
mod line_shift;
mod pipeline;
mod stage;
mod workspace;

pub use config::{Config, StoredMap};
pub use error::CheckError;
pub use pipeline::Checker;
pub use stage::Stage;
pub use workspace::{Buffers, MatchWork, Workspace};

#[cfg(test)]
mod scenario_tests;
