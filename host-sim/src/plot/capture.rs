//! One check with the intermediate frames kept for plotting: the conditioned frame and lib's baseline.
//!
//! Same inputs and same lib calls as [`crate::check_cmd::evaluate`] (a test holds the two reports
//! equal); the difference is that the caller-owned buffers outlive the check, so the plot can show
//! what peak finding saw.
use crate::check_cmd::evaluate_in;
use crate::instrument::Instrument;
use crate::trace::Trace;
use glowcheck::check::Buffers;
use glowcheck::condition::{MAX_PIXELS, OUTPUT_FRAC_BITS};
use glowcheck::judge::{Mode, Report, TubeProfile};

/// A report with the frames behind it, in counts per readout.
pub struct Checked {
    /// lib's report.
    pub report: Report,
    /// Conditioned frame (dark subtracted when there was a dark), counts.
    pub frame_counts: Vec<f64>,
    /// lib's baseline under the peaks, counts.
    pub baseline_counts: Vec<f64>,
    /// The profile checked against.
    pub profile: TubeProfile,
}

/// Checks a loaded trace and keeps the conditioned frame and baseline.
pub fn check_keep(
    trace: &Trace,
    inst: &Instrument,
    profile: TubeProfile,
    mode: Mode,
) -> Result<Checked, String> {
    let n = trace.pixels;
    let mut buffers = Box::new(Buffers::<MAX_PIXELS>::new());
    let report = evaluate_in(trace, None, inst, profile, mode, &mut buffers)?;
    let ws = buffers.workspace(n);
    let unit = f64::from(1u32 << OUTPUT_FRAC_BITS);
    Ok(Checked {
        report,
        frame_counts: ws.frame.iter().map(|&v| f64::from(v) / unit).collect(),
        baseline_counts: ws.scratch[..n]
            .iter()
            .map(|&v| f64::from(v) / unit)
            .collect(),
        profile,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::check_cmd::evaluate;

    /// The plot's check is the command's check.
    #[test]
    fn same_report_as_glowsim_check() {
        let inst = Instrument::parse(include_str!(
            "../../../tests/data/instruments/bench-2048.toml"
        ))
        .unwrap();
        let trace = Trace::parse_any(include_str!(
            "../../../tests/data/demo/traces/d-lamp-0207.trace"
        ))
        .unwrap();
        let p = glowcheck::judge::profile::DEUTERIUM;
        let a = check_keep(&trace, &inst, p, Mode::Verify).unwrap();
        let b = evaluate(&trace, None, &inst, p, Mode::Verify).unwrap();
        assert_eq!(a.report, b);
        assert_eq!(a.frame_counts.len(), 2048);
        // The baseline sits under the frame: its median lies below the frame's largest value.
        let max = a.frame_counts.iter().cloned().fold(f64::MIN, f64::max);
        assert!(a.baseline_counts.iter().all(|&b| b < max));
    }
}
