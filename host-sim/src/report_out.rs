//! lib's fixed-point check report for people (text) and for programs (the JSON contract of
//! `glowsim check --json`). Only unit conversions happen here: fm → nm, Q16 px → px, Q8 SNR → SNR,
//! ppm → fraction, and the normalised map → plain λ(p) coefficients.
use crate::labels::line_label;
use crate::map_convert::{self, FM_PER_NM};
use glowcheck::judge::{Mode, Report, Severity};
use glowcheck::matching::MARKERS;
use serde::Serialize;
use std::fmt::Write as _;

/// The closing caution of every report.
pub const SAFETY: &str = "Safety: discharge tubes run from kilovolt supplies (switch off and discharge before touching \
the tube or its leads); lines below about 380 nm are UV (shield the lamp, wear UV-rated eye protection); \
hydrogen and deuterium burn in air from about 4 % to 75 % (ventilate, no open flames). Follow local \
codes and qualified practice.";

/// The JSON contract of `glowsim check --json` (keys in this order; the ones after `unexplained` are
/// extras beyond the contract).
#[derive(Serialize, Debug, PartialEq)]
pub struct CheckJson {
    /// "pass", "fail" or "inconclusive".
    pub verdict: &'static str,
    /// Findings, most severe first, as sentences.
    pub reasons: Vec<String>,
    /// The scale the lines were measured with.
    pub calibration: CalibrationJson,
    /// Isotope shares of the considered species.
    pub species: Vec<SpeciesJson>,
    /// Matched lines by wavelength.
    pub lines: Vec<LineJson>,
    /// Peaks no predicted line explains.
    pub unexplained: Vec<UnexplainedJson>,
    /// Extra: "verify", "calibrate" or "blind".
    pub mode: &'static str,
    /// Extra: stable codes of `reasons`, same order.
    pub reason_codes: Vec<&'static str>,
    /// Extra: the safety caution.
    pub safety: &'static str,
}

/// The scale part of the contract.
#[derive(Serialize, Debug, PartialEq)]
pub struct CalibrationJson {
    /// λ(p) = c0 + c1·p + c2·p² + c3·p³ in nm, p the pixel index from 0; null when calibration failed.
    pub coefficients_nm: Option<[f64; 4]>,
    /// Calibrate modes: RMS fit residual; verify: RMS line error (nm); null when nothing was matched.
    pub rms_residual_nm: Option<f64>,
    /// Calibrate modes: largest (fitted − stored) difference across the sensor (nm); verify: the same
    /// when the stored scale was found shifted; else null.
    pub drift_nm: Option<f64>,
}

/// One species.
#[derive(Serialize, Debug, PartialEq)]
pub struct SpeciesJson {
    /// Symbol (H, D, T, He4, ...).
    pub nucleus: &'static str,
    /// Share of its element's line light, 0..1; null when not determinable.
    pub fraction: Option<f64>,
    /// 1-σ of the share; null when not determinable.
    pub fraction_sigma: Option<f64>,
}

/// One matched line.
#[derive(Serialize, Debug, PartialEq)]
pub struct LineJson {
    /// Symbol of the (dominant) nucleus.
    pub nucleus: &'static str,
    /// Lower level.
    pub lower: u8,
    /// Upper level.
    pub upper: u8,
    /// Predicted wavelength (blend centre at the reported shares), nm.
    pub predicted_nm: f64,
    /// Wavelength at the peak centre on the report's scale, nm.
    pub measured_nm: f64,
    /// Peak centre, px (pixel 0 = first count).
    pub center_px: f64,
    /// measured − predicted, nm.
    pub error_nm: f64,
    /// Extra: label in the trade's notation (Hα, Dβ, He II 4->3).
    pub label: String,
    /// Extra: 1-σ of measured_nm.
    pub sigma_nm: f64,
    /// Extra: peak SNR.
    pub snr: f64,
    /// Extra: several predicted lines share the peak, or peak finding flagged it blended.
    pub blended: bool,
    /// Extra: the peak reached full scale.
    pub saturated: bool,
}

/// One unexplained peak.
#[derive(Serialize, Debug, PartialEq)]
pub struct UnexplainedJson {
    /// Wavelength on the report's scale, nm.
    pub wavelength_nm: f64,
    /// Peak SNR.
    pub snr: f64,
    /// A foreign line nearby, if any.
    pub hint: Option<&'static str>,
    /// Extra: peak centre, px.
    pub center_px: f64,
}

fn nm(fm: i64) -> f64 {
    fm as f64 / FM_PER_NM
}

fn px(q16: i32) -> f64 {
    (q16 as f64 / 65_536.0 * 1e5).round() / 1e5
}

fn snr(q8: u32) -> f64 {
    (q8 as f64 / 256.0 * 100.0).round() / 100.0
}

/// Mode name as the command line spells it.
pub fn mode_name(m: Mode) -> &'static str {
    match m {
        Mode::Verify => "verify",
        Mode::Calibrate => "calibrate",
        Mode::CalibrateBlind => "blind",
    }
}

/// RMS of the contract: fit residual in calibrate modes, line error in verify.
fn rms_fm(r: &Report) -> Option<u64> {
    match r.mode {
        Mode::Verify => (!r.lines.is_empty()).then_some(r.scores.rms_error_fm),
        _ => r.fit_rms_fm,
    }
}

/// The contract values of a report.
pub fn to_json(r: &Report) -> CheckJson {
    CheckJson {
        verdict: r.verdict.as_str(),
        reasons: r.reasons.iter().map(|x| x.to_string()).collect(),
        calibration: CalibrationJson {
            coefficients_nm: r.map.as_ref().map(map_convert::to_plain),
            rms_residual_nm: rms_fm(r).map(|v| nm(v as i64)),
            drift_nm: r.drift_fm.map(nm),
        },
        species: r
            .shares
            .iter()
            .map(|s| SpeciesJson {
                nucleus: s.nucleus.symbol(),
                fraction: s.share_ppm.map(|v| v as f64 / 1e6),
                fraction_sigma: s.share_ppm.and(s.sigma_ppm).map(|v| v as f64 / 1e6),
            })
            .collect(),
        lines: r
            .lines
            .iter()
            .map(|l| LineJson {
                nucleus: l.nucleus.symbol(),
                lower: l.lower,
                upper: l.upper,
                predicted_nm: nm(l.predicted_fm),
                measured_nm: nm(l.measured_fm),
                center_px: px(l.center_px_q16),
                error_nm: nm(l.error_fm()),
                label: line_label(l.nucleus, l.lower, l.upper),
                sigma_nm: nm(l.sigma_fm.min(i64::MAX as u64) as i64),
                snr: snr(l.snr_q8),
                blended: l.blended,
                saturated: l.saturated,
            })
            .collect(),
        unexplained: r
            .unexplained
            .iter()
            .map(|u| UnexplainedJson {
                wavelength_nm: nm(u.wavelength_fm),
                snr: snr(u.snr_q8),
                hint: u.hint.and_then(|i| MARKERS.get(i as usize)).map(|m| m.name),
                center_px: px(u.center_px_q16),
            })
            .collect(),
        mode: mode_name(r.mode),
        reason_codes: r.reasons.iter().map(|x| x.code()).collect(),
        safety: SAFETY,
    }
}

fn signed(x: f64, digits: usize) -> String {
    format!("{x:+.digits$}")
}

/// The report for people.
pub fn text(r: &Report, profile: &str, instrument: Option<&str>) -> String {
    let j = to_json(r);
    let mut s = String::new();
    let inst = instrument.map_or(String::new(), |n| format!(", instrument {n}"));
    let _ = writeln!(
        s,
        "verdict: {}   (profile {profile}, mode {}{inst})",
        j.verdict.to_uppercase(),
        j.mode
    );
    if r.reasons.is_empty() {
        let _ = writeln!(s, "  every rule of the profile is met");
    }
    for reason in &r.reasons {
        let tag = match reason.severity() {
            Severity::Fail => "fail",
            Severity::Inconclusive => "inconclusive",
            Severity::Note => "note",
        };
        let _ = writeln!(s, "  [{tag}] {reason} ({})", reason.code());
    }
    match &j.calibration.coefficients_nm {
        Some(c) => {
            let _ = write!(
                s,
                "scale: λ(p) = {:.6} {} nm/px·p {} nm/px²·p² {} nm/px³·p³",
                c[0],
                signed(c[1], 9),
                format_args!("{:+.4e}", c[2]),
                format_args!("{:+.4e}", c[3])
            );
        }
        None => {
            let _ = write!(s, "scale: none (calibration failed)");
        }
    }
    if let Some(v) = j.calibration.rms_residual_nm {
        let what = if r.mode == Mode::Verify {
            "RMS line error"
        } else {
            "fit RMS"
        };
        let _ = write!(s, "; {what} {v:.4} nm");
    }
    if let Some(d) = j.calibration.drift_nm {
        let _ = write!(s, "; drift from stored scale {} nm", signed(d, 3));
    }
    let _ = writeln!(s);
    if !j.species.is_empty() {
        let parts: Vec<String> = j
            .species
            .iter()
            .map(|sp| match (sp.fraction, sp.fraction_sigma) {
                (Some(f), Some(e)) => {
                    format!("{} {:.1} % ± {:.1} %", sp.nucleus, f * 100.0, e * 100.0)
                }
                (Some(f), None) => format!("{} {:.1} %", sp.nucleus, f * 100.0),
                _ => format!("{} not determinable", sp.nucleus),
            })
            .collect();
        let _ = writeln!(s, "species: {}", parts.join(", "));
    }
    if j.lines.is_empty() {
        let _ = writeln!(s, "no predicted line matched");
    } else {
        let _ = writeln!(
            s,
            "{:<10} {:>12} {:>12} {:>10} {:>9} {:>8}  flags",
            "line", "predicted nm", "measured nm", "center px", "error nm", "SNR"
        );
        for l in &j.lines {
            let mut flags = Vec::new();
            if l.blended {
                flags.push("blended");
            }
            if l.saturated {
                flags.push("saturated");
            }
            let _ = writeln!(
                s,
                "{:<10} {:>12.4} {:>12.4} {:>10.3} {:>9} {:>8.1}  {}",
                l.label,
                l.predicted_nm,
                l.measured_nm,
                l.center_px,
                signed(l.error_nm, 4),
                l.snr,
                flags.join(",")
            );
        }
    }
    if !j.unexplained.is_empty() {
        let _ = writeln!(s, "unexplained peaks:");
        for u in &j.unexplained {
            let hint = u.hint.map_or(String::new(), |h| format!("  near {h}"));
            let _ = writeln!(
                s,
                "  {:>10.3} nm  (px {:>9.2})  SNR {:>7.1}{hint}",
                u.wavelength_nm, u.center_px, u.snr
            );
        }
    }
    let _ = writeln!(s, "{SAFETY}");
    s
}
