//! `glowsim check`: one trace through the firmware's whole pipeline (condition → find → calibrate or
//! verify → match → judge) with an instrument file and a tube profile; prints the verdict.
//!
//! Every number comes from lib's integer code ([`glowcheck::check::Checker`]); this file reads the
//! files, co-adds the frames and hands over, and [`crate::report_out`] converts the fixed-point report
//! for people and for JSON. Exit status: 0 pass, 1 fail, 3 inconclusive, 2 error.
use crate::instrument::Instrument;
use crate::profile_file;
use crate::report_out;
use crate::trace::{FrameKind, Trace};
use glowcheck::check::{Buffers, Checker, Config};
use glowcheck::condition::{
    ConditionConfig, FrameSum, Stack, MAX_COADD, MAX_PIXELS, SATURATED_SUM,
};
use glowcheck::find::FindConfig;
use glowcheck::judge::{Mode, Report, TubeProfile, Verdict};
use std::path::PathBuf;
use std::process::ExitCode;

const EXAMPLES: &str = "\
Examples:
  glowsim check d2.trace --instrument bench.toml --profile deuterium
  glowsim check h.trace --instrument bench.toml --profile hydrogen --mode calibrate --json
  glowsim check lamp.trace --instrument bench.toml --profile my-lamp.toml --mode blind

Modes: verify trusts the instrument file's scale and checks the tube; calibrate fits the scale to the
tube's lines starting from the stored scale (several nm and ±2 % off is fine) and reports the drift;
blind fits it with no starting scale. A scale fitted to the tube itself cannot tell H from D (their lines
differ by an almost pure scale factor): calibrate on a tube of known fill, verify the unknown one.

Profiles: hydrogen, deuterium, hydrogen-deuterium, helium-ion, or a TOML file (see tests/data/README.md).
Exit status: 0 pass, 1 fail, 3 inconclusive, 2 error.

Safety: tubes run at kilovolts; lines below about 380 nm are UV; hydrogen and deuterium burn in air from
about 4 % to 75 %. Follow local codes and qualified practice.";

/// How the wavelength scale of a check is obtained.
#[derive(clap::ValueEnum, Clone, Copy, Debug, PartialEq, Eq)]
pub enum ModeArg {
    /// Trust the stored scale; check the tube.
    Verify,
    /// Fit the scale to the tube's lines, starting from the stored scale.
    Calibrate,
    /// Fit the scale to the tube's lines with no starting scale.
    Blind,
}

impl ModeArg {
    /// lib's mode.
    pub fn lib(self) -> Mode {
        match self {
            ModeArg::Verify => Mode::Verify,
            ModeArg::Calibrate => Mode::Calibrate,
            ModeArg::Blind => Mode::CalibrateBlind,
        }
    }
}

/// Command-line options.
#[derive(clap::Args)]
#[command(after_help = EXAMPLES)]
pub struct Args {
    /// Trace file: glowtrace or plain CSV.
    trace: PathBuf,
    /// Instrument file (TOML): sensor, stored wavelength scale, line width, air. Default: the
    /// `instrument` of glowsim.toml.
    #[arg(long)]
    instrument: Option<PathBuf>,
    /// Tube profile: a bundled name or a TOML file. Default: the `profile` of glowsim.toml.
    #[arg(long, value_name = "NAME|FILE")]
    profile: Option<String>,
    /// How the wavelength scale is obtained (default: glowsim.toml's `mode`, else verify).
    #[arg(long, value_enum)]
    mode: Option<ModeArg>,
    /// Defaults file (default: glowsim.toml in the working folder, when present).
    #[arg(long)]
    config: Option<PathBuf>,
    /// Dark trace (same integration time), overriding dark frames inside TRACE.
    #[arg(long)]
    dark: Option<PathBuf>,
    /// Print JSON instead of the report text.
    #[arg(long)]
    json: bool,
}

/// lib's configuration from an instrument, a profile and a mode; `integration_us` is the trace's own
/// value when it has one.
pub fn lib_config(
    inst: &Instrument,
    profile: TubeProfile,
    mode: Mode,
    integration_us: Option<u64>,
) -> Result<Config, String> {
    let integration = integration_us
        .unwrap_or(inst.integration_us as u64)
        .clamp(1, u32::MAX as u64) as u32;
    let mut condition = ConditionConfig::new(inst.full_scale_counts(), integration);
    if let Some(g) = inst.electrons_per_count {
        condition.electrons_per_count_q8 = (g * 256.0).round().clamp(1.0, 65_535.0) as u16;
    }
    for &b in &inst.bad_pixels {
        condition
            .bad_pixels
            .push(b)
            .map_err(|_| "too many bad pixels for the firmware's map".to_string())?;
    }
    // Widen the accepted line widths when the instrument's lies outside the defaults (2–12 px).
    let fwhm_q8 = (inst.line_fwhm_px * 256.0).round() as u16;
    let find = FindConfig::for_line_fwhm(fwhm_q8);
    Ok(Config {
        pixels: inst.pixels,
        condition,
        find,
        stored: inst.stored_map()?,
        mode,
        degree: inst.fit_degree,
        air: inst.air,
        line_fwhm_px_q8: fwhm_q8.max(1),
        profile,
    })
}

/// Co-adds frames (each a sum of `coadded` readouts) into `sum`; returns the readouts in it.
fn stack(
    frames: &[&Vec<u32>],
    coadded: u32,
    full_scale: u16,
    sum: &mut [u32],
    what: &str,
) -> Result<u16, String> {
    let reads = (frames.len() as u64).saturating_mul(coadded.max(1) as u64);
    if reads > MAX_COADD as u64 {
        return Err(format!(
            "{what}: {reads} readouts exceed the co-adding limit of {MAX_COADD}"
        ));
    }
    if coadded <= 1 {
        let mut st = Stack::new(sum, full_scale).map_err(|e| format!("{what}: {e}"))?;
        for f in frames {
            let raw: Vec<u16> = f
                .iter()
                .map(|&c| {
                    u16::try_from(c).map_err(|_| {
                        format!("{what}: count {c} does not fit a 16-bit readout (firmware limit)")
                    })
                })
                .collect::<Result<_, _>>()?;
            st.add(&raw).map_err(|e| format!("{what}: {e}"))?;
        }
        return Ok(st.frames());
    }
    // Frames that are sums already: saturation shows as a sum at coadded × full scale.
    let limit = u64::from(full_scale) * u64::from(coadded);
    sum.iter_mut().for_each(|s| *s = 0);
    for f in frames {
        for (s, &c) in sum.iter_mut().zip(f.iter()) {
            *s = if u64::from(c) >= limit || *s == SATURATED_SUM {
                SATURATED_SUM
            } else {
                s.saturating_add(c)
            };
        }
    }
    Ok(reads as u16)
}

/// Runs lib's check on a loaded trace.
pub fn evaluate(
    trace: &Trace,
    dark: Option<&Trace>,
    inst: &Instrument,
    profile: TubeProfile,
    mode: Mode,
) -> Result<Report, String> {
    evaluate_in(
        trace,
        dark,
        inst,
        profile,
        mode,
        &mut Box::new(Buffers::new()),
    )
}

/// The same with caller-owned buffers, which hold the conditioned frame and its baseline afterwards
/// (for plots).
pub fn evaluate_in(
    trace: &Trace,
    dark: Option<&Trace>,
    inst: &Instrument,
    profile: TubeProfile,
    mode: Mode,
    buffers: &mut Buffers<MAX_PIXELS>,
) -> Result<Report, String> {
    let n = trace.pixels;
    if n != inst.pixels as usize {
        return Err(format!(
            "the trace has {n} pixels, the instrument file says {}",
            inst.pixels
        ));
    }
    if let Some(b) = trace.adc_bits {
        if b != inst.adc_bits {
            return Err(format!(
                "the trace has {b}-bit readouts, the instrument file says {}",
                inst.adc_bits
            ));
        }
    }
    let cfg = lib_config(inst, profile, mode, trace.integration_us)?;
    let full = inst.full_scale_counts();
    let signals: Vec<&Vec<u32>> = trace
        .frames_of(FrameKind::Signal)
        .map(|f| &f.counts)
        .collect();
    if signals.is_empty() {
        return Err("the trace has no signal frame".into());
    }
    let (darks, dark_coadded): (Vec<&Vec<u32>>, u32) = match dark {
        Some(d) => {
            if d.pixels != n {
                return Err(format!("dark trace has {} pixels, the trace {n}", d.pixels));
            }
            let labelled: Vec<&Vec<u32>> =
                d.frames_of(FrameKind::Dark).map(|f| &f.counts).collect();
            let all = if labelled.is_empty() {
                d.frames_of(FrameKind::Signal).map(|f| &f.counts).collect()
            } else {
                labelled
            };
            (all, d.coadded)
        }
        None => (
            trace
                .frames_of(FrameKind::Dark)
                .map(|f| &f.counts)
                .collect(),
            trace.coadded,
        ),
    };
    let mut sig = vec![0u32; n];
    let mut drk = vec![0u32; n];
    let s_reads = stack(&signals, trace.coadded, full, &mut sig, "signal")?;
    let d_reads = if darks.is_empty() {
        0
    } else {
        stack(&darks, dark_coadded, full, &mut drk, "dark")?
    };
    let signal = FrameSum::stacked(&sig, s_reads).map_err(|e| format!("signal: {e}"))?;
    let dark_view = if d_reads > 0 {
        Some(FrameSum::stacked(&drk, d_reads).map_err(|e| format!("dark: {e}"))?)
    } else {
        None
    };
    let checker = Checker::new(cfg).map_err(|e| format!("configuration: {e}"))?;
    let mut report = Report::new();
    checker
        .check(signal, dark_view, None, buffers.workspace(n), &mut report)
        .map_err(|e| format!("check: {e}"))?;
    Ok(report)
}

/// Exit status of a verdict.
pub fn exit_code(v: Verdict) -> u8 {
    match v {
        Verdict::Pass => 0,
        Verdict::Fail => 1,
        Verdict::Inconclusive => 3,
    }
}

/// Runs the command; the exit status carries the verdict.
pub fn run(args: &Args) -> Result<ExitCode, String> {
    let defaults = crate::defaults::Defaults::load(args.config.as_deref())?;
    let inst_path = crate::defaults::Defaults::pick(
        &args.instrument,
        &defaults.instrument,
        "--instrument",
        "instrument",
    )?;
    let profile_arg =
        crate::defaults::Defaults::pick(&args.profile, &defaults.profile, "--profile", "profile")?;
    let inst = Instrument::read_path(&inst_path)?;
    let (profile_name, profile) = profile_file::resolve(&profile_arg)?;
    let trace = Trace::read_path(&args.trace)?;
    let dark = match &args.dark {
        Some(p) => Some(Trace::read_path(p)?),
        None => None,
    };
    let mode = defaults.mode_or(args.mode).lib();
    let report = evaluate(&trace, dark.as_ref(), &inst, profile, mode)?;
    let text = if args.json {
        let j = report_out::to_json(&report);
        let mut t = serde_json::to_string(&j).map_err(|e| format!("JSON output: {e}"))?;
        t.push('\n');
        t
    } else {
        report_out::text(&report, &profile_name, inst.name.as_deref())
    };
    crate::trace::write_stdout(&text)?;
    Ok(ExitCode::from(exit_code(report.verdict)))
}
