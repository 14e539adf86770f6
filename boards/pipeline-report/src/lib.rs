//! The whole glowcheck pipeline (`Checker::new`, then `Checker::check`) on frames embedded at build
//! time, printed as a compact digest: verdict, reason codes, every matched line's measured wavelength
//! and error, the isotope shares, unexplained peaks, then an FNV-1a 64-bit digest of all of it.
//!
//! QEMU boards (`boards/pipeline`) and the host twin (`boards/pipeline-twin`) print it through this
//! crate, so `boards/check.sh` can diff them byte for byte: same frame, same integers on every core.
//!
//! Safety: the traces stand for discharge tubes that run at kilovolts and emit UV; hydrogen burns.
#![no_std]

pub mod adversarial;
mod case;
pub mod traces;

use core::fmt::{self, Write};

use glowcheck::check::{Buffers, CheckError, Checker, Workspace};
use glowcheck::condition::FrameSum;
use glowcheck::judge::{Mode, Report};
use glowcheck_report::digest::DigestWriter;

pub use case::{config, config_for, Case, BENCH_MAP_FM, CASES};
use traces::PIXELS;

/// Why a case produced no report.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum RunError {
    /// The configuration's map was refused.
    Map,
    /// The check refused the configuration or the buffers.
    Check(CheckError),
    /// The output sink failed.
    Write,
}

impl fmt::Display for RunError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            RunError::Map => f.write_str("the stored map was refused"),
            RunError::Check(e) => write!(f, "check: {e}"),
            RunError::Write => f.write_str("output could not be written"),
        }
    }
}

impl From<fmt::Error> for RunError {
    fn from(_: fmt::Error) -> Self {
        RunError::Write
    }
}

/// Builds the checker of `case` (predicts its lines).
pub fn checker(case: &Case) -> Result<Checker, RunError> {
    let cfg = config(case).map_err(|_| RunError::Map)?;
    Checker::new(cfg).map_err(RunError::Check)
}

/// Checks `case`'s frame into `report`.
pub fn check(
    checker: &Checker,
    case: &Case,
    work: Workspace<'_>,
    report: &mut Report,
) -> Result<(), RunError> {
    let signal = FrameSum::single(case.frame).map_err(|e| RunError::Check(e.into()))?;
    checker
        .check(signal, None, None, work, report)
        .map_err(RunError::Check)
}

/// Runs every case (a fresh checker each, the caller's buffers and report) and prints the digest.
pub fn run<W: Write>(
    out: &mut W,
    buffers: &mut Buffers<PIXELS>,
    report: &mut Report,
) -> Result<u64, RunError> {
    let mut w = DigestWriter::new(out);
    writeln!(w, "# glowcheck pipeline digest v1 (2048 px, demo bench)")?;
    for case in CASES.iter() {
        let checker = checker(case)?;
        check(&checker, case, buffers.workspace(PIXELS), report)?;
        print_report(&mut w, case, checker.catalogue().len(), report)?;
    }
    let digest = w.digest();
    writeln!(out, "digest fnv1a64 {digest:016x}")?;
    Ok(digest)
}

/// The mode's name as the digest prints it.
pub fn mode_name(m: Mode) -> &'static str {
    match m {
        Mode::Verify => "verify",
        Mode::Calibrate => "calibrate",
        Mode::CalibrateBlind => "calibrate-blind",
    }
}

/// One case's digest lines (integers in lib's units: fm, px Q16, ppm, SNR Q8).
pub fn print_report<W: Write>(w: &mut W, case: &Case, catalogue: usize, r: &Report) -> fmt::Result {
    writeln!(
        w,
        "case {} profile {} mode {} catalogue {catalogue}",
        case.name,
        case.profile.0,
        mode_name(r.mode)
    )?;
    write!(w, "verdict {} reasons", r.verdict.as_str())?;
    if r.reasons.is_empty() {
        write!(w, " -")?;
    }
    for (i, reason) in r.reasons.iter().enumerate() {
        write!(w, "{}{}", if i == 0 { " " } else { "," }, reason.code())?;
    }
    writeln!(w)?;
    match &r.map {
        Some(m) => writeln!(
            w,
            "map_fm {} {} {} {} degree {}",
            m.coeff_fm[0], m.coeff_fm[1], m.coeff_fm[2], m.coeff_fm[3], m.degree
        )?,
        None => writeln!(w, "map_fm -")?,
    }
    writeln!(
        w,
        "fit_rms_fm {} drift_fm {} peaks {} noise_q8 {} truncated {}",
        OptU(r.fit_rms_fm),
        OptI(r.drift_fm),
        r.scores.peaks,
        r.scores.noise_q8,
        u8::from(r.truncated)
    )?;
    for l in r.lines.iter() {
        writeln!(
            w,
            "line {} {}-{} measured_fm {} error_fm {} judged_fm {} sigma_fm {} center_px_q16 {} snr_q8 {} flags {}{}{}",
            l.nucleus.symbol(),
            l.lower,
            l.upper,
            l.measured_fm,
            l.error_fm(),
            l.judged_error_fm,
            l.sigma_fm,
            l.center_px_q16,
            l.snr_q8,
            if l.blended { 'b' } else { '-' },
            if l.saturated { 's' } else { '-' },
            if l.crowded { 'c' } else { '-' },
        )?;
    }
    for s in r.shares.iter() {
        writeln!(
            w,
            "share {} ppm {} sigma_ppm {} lines {}",
            s.nucleus.symbol(),
            OptU(s.share_ppm.map(u64::from)),
            OptU(s.sigma_ppm.map(u64::from)),
            s.lines
        )?;
    }
    for u in r.unexplained.iter() {
        writeln!(
            w,
            "unexplained wavelength_fm {} center_px_q16 {} snr_q8 {} hint {}",
            u.wavelength_fm,
            u.center_px_q16,
            u.snr_q8,
            OptU(u.hint.map(u64::from))
        )?;
    }
    Ok(())
}

/// An optional unsigned number, `-` when absent.
struct OptU(Option<u64>);
impl fmt::Display for OptU {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.0 {
            Some(v) => write!(f, "{v}"),
            None => f.write_str("-"),
        }
    }
}

/// An optional signed number, `-` when absent.
struct OptI(Option<i64>);
impl fmt::Display for OptI {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.0 {
            Some(v) => write!(f, "{v}"),
            None => f.write_str("-"),
        }
    }
}
