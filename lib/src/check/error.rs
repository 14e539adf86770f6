//! Why a check could not produce a report at all (as opposed to an inconclusive one).
use crate::condition::ConditionError;
use crate::find::FindError;
use crate::matching::MatchError;
use core::fmt;

/// Failures of the configuration or of the buffers handed in; the frame's content never causes one
/// (a dark, saturated or foreign frame gives a report with reasons instead).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum CheckError {
    /// Frame conditioning refused the frame or the configuration.
    Condition(ConditionError),
    /// Peak finding refused the frame or the configuration.
    Find(FindError),
    /// Building the line catalogue failed.
    Match(MatchError),
    /// Degree outside 1…3, line width 0, or a profile with no species.
    BadConfig,
    /// The frame's length differs from the configured pixel count.
    WrongPixelCount,
    /// The checker has no predicted lines: made with `Checker::blank`, or its last `configure` failed.
    NotConfigured,
}

impl fmt::Display for CheckError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CheckError::Condition(e) => write!(f, "frame conditioning: {e}"),
            CheckError::Find(e) => write!(f, "peak finding: {e}"),
            CheckError::Match(e) => write!(f, "line catalogue: {e}"),
            CheckError::BadConfig => f.write_str(
                "configuration: degree must be 1-3, line width > 0, profile with a species",
            ),
            CheckError::WrongPixelCount => {
                f.write_str("frame length differs from the configured pixel count")
            }
            CheckError::NotConfigured => {
                f.write_str("checker not configured: no predicted lines to check against")
            }
        }
    }
}

impl From<ConditionError> for CheckError {
    fn from(e: ConditionError) -> Self {
        CheckError::Condition(e)
    }
}
impl From<FindError> for CheckError {
    fn from(e: FindError) -> Self {
        CheckError::Find(e)
    }
}
impl From<MatchError> for CheckError {
    fn from(e: MatchError) -> Self {
        CheckError::Match(e)
    }
}
