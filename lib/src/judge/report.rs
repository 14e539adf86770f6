//! The one report a frame produces: verdict, reasons, map, shares, lines and leftovers.
use super::reason::Reason;
use crate::calibrate::WavelengthMap;
use crate::predict::Nucleus;
use heapless::Vec;

/// Most findings one report lists.
pub const MAX_REASONS: usize = 12;
/// Most matched lines one report lists.
pub const MAX_REPORT_LINES: usize = 40;
/// Most unexplained peaks one report lists (the strongest when there are more).
pub const MAX_UNEXPLAINED: usize = 24;

/// The outcome.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Verdict {
    /// The tube is what the profile says and the instrument agrees with it.
    Pass = 1,
    /// Something is wrong with the tube or the instrument; see the reasons.
    Fail = 2,
    /// The frame does not allow a decision; see the reasons for what to change.
    ///
    /// The zero value, so an empty [`Report`] is all zeros and a firmware's `static` report sits
    /// in `.bss` (no copy in flash).
    #[default]
    Inconclusive = 0,
}

impl Verdict {
    /// Lower-case name as reports print it.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Pass => "pass",
            Verdict::Fail => "fail",
            Verdict::Inconclusive => "inconclusive",
        }
    }
}

/// How the wavelength map of this report was obtained.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Mode {
    /// The stored instrument map was trusted; the tube is being checked.
    #[default]
    Verify,
    /// The map was fitted to this tube's lines starting from the stored map.
    Calibrate,
    /// The map was fitted to this tube's lines with no starting map.
    CalibrateBlind,
}

/// A line matched to a peak.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MatchedLine {
    /// The feature's dominant nucleus.
    pub nucleus: Nucleus,
    /// Lower level.
    pub lower: u8,
    /// Upper level.
    pub upper: u8,
    /// Predicted wavelength (blend centre at the reported shares), femtometres.
    pub predicted_fm: i64,
    /// Wavelength at the peak's centre on the report's map, femtometres.
    pub measured_fm: i64,
    /// Peak centre (px, Q16).
    pub center_px_q16: i32,
    /// 1-σ uncertainty of `measured_fm` (centroid and map together), femtometres.
    pub sigma_fm: u64,
    /// The error the verdict weighs, femtometres: measured − predicted, except for an unresolved
    /// blend of unknown share, where it is the distance to the range of positions the profile's
    /// shares allow (0 inside it).
    pub judged_error_fm: i64,
    /// Peak SNR (Q8).
    pub snr_q8: u32,
    /// Several predicted lines share this peak (an unresolved isotope blend, or the peak was flagged
    /// blended by peak finding).
    pub blended: bool,
    /// The peak touched the ADC full scale.
    pub saturated: bool,
    /// Another feature lies within 2.5 line widths (series-limit crowding) or shares the peak: the
    /// centre is pulled by it, so the position is reported but not judged.
    pub crowded: bool,
}

impl MatchedLine {
    /// measured − predicted, femtometres.
    pub fn error_fm(&self) -> i64 {
        self.measured_fm - self.predicted_fm
    }
}

/// A peak no predicted line explains.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct UnexplainedPeak {
    /// Wavelength on the report's map, femtometres.
    pub wavelength_fm: i64,
    /// Peak centre (px, Q16).
    pub center_px_q16: i32,
    /// SNR (Q8).
    pub snr_q8: u32,
    /// Index into [`MARKERS`](crate::matching::MARKERS) of a foreign line nearby, if any.
    pub hint: Option<u8>,
}

/// One nucleus' share of its element's line photons.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SpeciesShare {
    /// The nucleus.
    pub nucleus: Nucleus,
    /// Share, ppm (clamped to 0 … 10⁶); `None` when not determinable.
    pub share_ppm: Option<u32>,
    /// 1-σ of the share, ppm; `None` when not determinable.
    pub sigma_ppm: Option<u32>,
    /// Lines of this nucleus (alone or dominant in a blend) that were matched.
    pub lines: u8,
}

/// Figures behind the verdict.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Scores {
    /// Peaks found in the frame.
    pub peaks: u8,
    /// Lines of the expected species matched.
    pub lines_matched: u8,
    /// Largest |measured − predicted| over matched lines, femtometres.
    pub max_abs_error_fm: u64,
    /// RMS of measured − predicted, femtometres.
    pub rms_error_fm: u64,
    /// Share of peak area in unexplained peaks (‰).
    pub unexplained_permille: u16,
    /// SNR of the strongest matched line (Q8).
    pub best_snr_q8: u32,
    /// Noise σ at the typical baseline level, frame units (Q8).
    pub noise_q8: u32,
}

/// Everything one frame's check found.
#[derive(Clone, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Report {
    /// Pass, fail or inconclusive.
    pub verdict: Verdict,
    /// Why, most severe first.
    pub reasons: Vec<Reason, MAX_REASONS>,
    /// How the map was obtained.
    pub mode: Mode,
    /// The map the lines were measured with (`None` when calibration failed and none was stored).
    pub map: Option<WavelengthMap>,
    /// RMS residual of the calibration fit (calibrate modes), femtometres.
    pub fit_rms_fm: Option<u64>,
    /// Calibrate mode: largest (fitted − stored) difference across the sensor, femtometres.
    pub drift_fm: Option<i64>,
    /// Isotope shares of the considered hydrogen isotopes (and other species seen).
    pub shares: Vec<SpeciesShare, 4>,
    /// Matched lines, by wavelength.
    pub lines: Vec<MatchedLine, MAX_REPORT_LINES>,
    /// Unexplained peaks, by wavelength.
    pub unexplained: Vec<UnexplainedPeak, MAX_UNEXPLAINED>,
    /// Figures.
    pub scores: Scores,
    /// Peak finding dropped peaks because its list was full.
    pub truncated: bool,
}

impl Report {
    /// An empty, inconclusive report (to be filled by a check).
    pub const fn new() -> Report {
        Report {
            verdict: Verdict::Inconclusive,
            reasons: Vec::new(),
            mode: Mode::Verify,
            map: None,
            fit_rms_fm: None,
            drift_fm: None,
            shares: Vec::new(),
            lines: Vec::new(),
            unexplained: Vec::new(),
            scores: Scores {
                peaks: 0,
                lines_matched: 0,
                max_abs_error_fm: 0,
                rms_error_fm: 0,
                unexplained_permille: 0,
                best_snr_q8: 0,
                noise_q8: 0,
            },
            truncated: false,
        }
    }

    /// Empties the report in place, as [`Report::new`] would, without building a second report on
    /// the stack of a small core.
    pub fn clear(&mut self) {
        let Report {
            verdict,
            reasons,
            mode,
            map,
            fit_rms_fm,
            drift_fm,
            shares,
            lines,
            unexplained,
            scores,
            truncated,
        } = self;
        *verdict = Verdict::Inconclusive;
        reasons.clear();
        *mode = Mode::Verify;
        *map = None;
        *fit_rms_fm = None;
        *drift_fm = None;
        shares.clear();
        lines.clear();
        unexplained.clear();
        *scores = Report::new().scores;
        *truncated = false;
    }

    /// Adds a finding (ignored when the list is full: the verdict already holds the worst ones).
    pub fn note(&mut self, reason: Reason) {
        let _ = self.reasons.push(reason);
    }

    /// Sets the verdict from the findings: any fail → fail, else any inconclusive → inconclusive, else
    /// pass; and orders the reasons most severe first.
    ///
    /// Work: insertion sort of ≤ [`MAX_REASONS`] reasons (≤ 66 comparisons).
    pub fn decide(&mut self) {
        crate::sort::sort_by_key(&mut self.reasons, |r| core::cmp::Reverse(r.severity()));
        let worst = self.reasons.first().map(|r| r.severity());
        self.verdict = match worst {
            Some(super::reason::Severity::Fail) => Verdict::Fail,
            Some(super::reason::Severity::Inconclusive) => Verdict::Inconclusive,
            _ => Verdict::Pass,
        };
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::calibrate::WavelengthMap;

    /// A used report, cleared in place, equals a new one field for field.
    #[test]
    fn clear_gives_a_new_report() {
        let mut r = Report::new();
        r.verdict = Verdict::Fail;
        r.note(Reason::NoLines);
        r.mode = Mode::Calibrate;
        r.map = WavelengthMap::new(2048, 1, [500_000_000, 100_000_000, 0, 0]).ok();
        r.fit_rms_fm = Some(7);
        r.drift_fm = Some(-3);
        let _ = r.unexplained.push(UnexplainedPeak {
            wavelength_fm: 1,
            center_px_q16: 2,
            snr_q8: 3,
            hint: Some(0),
        });
        r.scores.peaks = 9;
        r.scores.noise_q8 = 11;
        r.truncated = true;
        assert!(r.map.is_some());
        assert_ne!(r, Report::new());
        r.clear();
        assert_eq!(r, Report::new());
    }
}
