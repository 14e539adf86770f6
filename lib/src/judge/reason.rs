//! Why a verdict came out as it did, one code per finding.
use crate::calibrate::CalibrateError;
use crate::predict::Nucleus;
use core::fmt;

/// How much a finding weighs in the verdict.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Severity {
    /// Informs; does not change a pass.
    Note,
    /// Prevents a verdict either way.
    Inconclusive,
    /// The tube (or the instrument) is not as it should be.
    Fail,
}

/// One finding. Values carry their unit in the field name.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Reason {
    /// No peak stood out of the noise.
    NoLines,
    /// The strongest matched line is too weak to judge by.
    TooDim {
        /// Its SNR (Q8).
        snr_q8: u32,
        /// The profile's minimum (Q8).
        min_q8: u32,
    },
    /// Peaks reached the ADC full scale.
    Saturated {
        /// How many matched lines are clipped.
        lines: u8,
    },
    /// The lines could not be identified or the map not fitted.
    Calibration(CalibrateError),
    /// Fewer lines of the expected species than the profile needs.
    TooFewLines {
        /// Matched lines.
        found: u8,
        /// Needed.
        needed: u8,
    },
    /// An expected (non-optional) species showed no line.
    SpeciesMissing(Nucleus),
    /// A line lies further from its prediction than allowed.
    LineOffPosition {
        /// Nucleus.
        nucleus: Nucleus,
        /// Lower level.
        lower: u8,
        /// Upper level.
        upper: u8,
        /// measured − predicted, femtometres.
        error_fm: i64,
    },
    /// All lines are shifted alike: the instrument's scale, not the tube, is the likely cause.
    SystematicShift {
        /// Mean error, femtometres.
        mean_error_fm: i64,
    },
    /// Too much light in peaks no predicted line explains.
    ForeignLight {
        /// Share of peak area (‰).
        permille: u16,
    },
    /// An isotope share is outside the profile's range beyond its uncertainty.
    ShareOutOfRange {
        /// Nucleus.
        nucleus: Nucleus,
        /// Estimated share (‰).
        share_permille: u16,
    },
    /// An isotope share cannot be told apart from the range edges at this uncertainty.
    ShareUncertain {
        /// Nucleus.
        nucleus: Nucleus,
    },
    /// Isotopes cannot be told apart here (calibrated on the tube itself, or map not precise enough).
    IsotopeNotDeterminable,
    /// Calibrate mode: the fitted map differs from the stored one by more than allowed.
    InstrumentDrift {
        /// Largest difference across the sensor, femtometres (fitted − stored).
        drift_fm: i64,
    },
    /// More peaks qualified than the list holds; the weakest were dropped.
    PeakListTruncated,
    /// Most of the frame cannot be trusted (saturated signal or dark, repaired or clamped pixels).
    FrameUnusable {
        /// Untrusted pixels (‰).
        untrusted_permille: u16,
    },
}

impl Reason {
    /// The weight of this finding.
    pub fn severity(&self) -> Severity {
        match self {
            Reason::NoLines
            | Reason::TooDim { .. }
            | Reason::Saturated { .. }
            | Reason::Calibration(_)
            | Reason::ShareUncertain { .. }
            | Reason::FrameUnusable { .. } => Severity::Inconclusive,
            Reason::TooFewLines { .. }
            | Reason::SpeciesMissing(_)
            | Reason::LineOffPosition { .. }
            | Reason::ForeignLight { .. }
            | Reason::ShareOutOfRange { .. }
            | Reason::InstrumentDrift { .. } => Severity::Fail,
            Reason::SystematicShift { .. }
            | Reason::IsotopeNotDeterminable
            | Reason::PeakListTruncated => Severity::Note,
        }
    }

    /// A short stable code for logs and machine readers.
    pub fn code(&self) -> &'static str {
        match self {
            Reason::NoLines => "no-lines",
            Reason::TooDim { .. } => "too-dim",
            Reason::Saturated { .. } => "saturated",
            Reason::Calibration(_) => "calibration",
            Reason::TooFewLines { .. } => "too-few-lines",
            Reason::SpeciesMissing(_) => "species-missing",
            Reason::LineOffPosition { .. } => "line-off-position",
            Reason::SystematicShift { .. } => "systematic-shift",
            Reason::ForeignLight { .. } => "foreign-light",
            Reason::ShareOutOfRange { .. } => "share-out-of-range",
            Reason::ShareUncertain { .. } => "share-uncertain",
            Reason::IsotopeNotDeterminable => "isotope-not-determinable",
            Reason::InstrumentDrift { .. } => "instrument-drift",
            Reason::PeakListTruncated => "peak-list-truncated",
            Reason::FrameUnusable { .. } => "frame-unusable",
        }
    }
}

/// Writes a femtometre value as nm with 3 decimals, sign kept.
struct Nm(i64);

impl fmt::Display for Nm {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let sign = if self.0 < 0 { "-" } else { "+" };
        let a = self.0.unsigned_abs();
        let pm = (a + 500) / 1000;
        write!(f, "{sign}{}.{:03} nm", pm / 1000, pm % 1000)
    }
}

impl fmt::Display for Reason {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Reason::NoLines => f.write_str("no lines above the noise: is the tube lit and the light path clear?"),
            Reason::TooDim { snr_q8, min_q8 } => write!(
                f,
                "strongest line has SNR {} (needs {}): lengthen the integration time or co-add frames",
                snr_q8 >> 8,
                min_q8 >> 8
            ),
            Reason::Saturated { lines } => {
                write!(f, "{lines} line(s) saturated: shorten the integration time")
            }
            Reason::Calibration(e) => write!(f, "line pattern not identified: {e}"),
            Reason::TooFewLines { found, needed } => {
                write!(f, "{found} expected line(s) found, {needed} needed")
            }
            Reason::SpeciesMissing(n) => write!(f, "no {} lines found", n.symbol()),
            Reason::LineOffPosition { nucleus, lower, upper, error_fm } => write!(
                f,
                "{} {}->{} is {} from its predicted place",
                nucleus.symbol(),
                upper,
                lower,
                Nm(error_fm)
            ),
            Reason::SystematicShift { mean_error_fm } => write!(
                f,
                "all lines shifted by {} on average: the instrument's wavelength scale may have drifted (calibrate it)",
                Nm(mean_error_fm)
            ),
            Reason::ForeignLight { permille } => write!(
                f,
                "{}.{} % of the light is in unexplained lines (foreign gas or leak?)",
                permille / 10,
                permille % 10
            ),
            Reason::ShareOutOfRange { nucleus, share_permille } => write!(
                f,
                "{} share {}.{} % is outside the profile's range",
                nucleus.symbol(),
                share_permille / 10,
                share_permille % 10
            ),
            Reason::ShareUncertain { nucleus } => {
                write!(f, "{} share too uncertain to decide against the profile's range", nucleus.symbol())
            }
            Reason::IsotopeNotDeterminable => f.write_str(
                "isotope not determinable: the H/D/T shift is a near-pure scale factor and this wavelength scale cannot separate it",
            ),
            Reason::InstrumentDrift { drift_fm } => {
                write!(f, "instrument scale drifted {} from the stored map", Nm(drift_fm))
            }
            Reason::PeakListTruncated => f.write_str("more peaks than the list holds; the weakest were dropped"),
            Reason::FrameUnusable { untrusted_permille } => write!(
                f,
                "{}.{} % of the pixels are saturated or repaired (signal or dark frame): shorten the integration time or retake the dark",
                untrusted_permille / 10,
                untrusted_permille % 10
            ),
        }
    }
}
