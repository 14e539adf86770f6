//! `glowsim peaks`: runs a trace through the firmware's `condition` and `find` stages and lists the peaks.
//!
//! Signal frames of the trace are co-added (up to the firmware's limit); dark frames come from `--dark`
//! or, without it, from the trace itself. All numbers come from lib's integer code; this file only
//! converts their fixed-point scales for display.

use crate::trace::{FrameKind, Trace};
use glowcheck::condition::{
    condition_frame, ConditionConfig, FrameSum, Stack, MAX_COADD, MAX_PIXELS, OUTPUT_FRAC_BITS,
};
use glowcheck::find::{find_peaks, FindConfig, FindReport, FindWork, PeakList, SCRATCH_PER_PIXEL};
use serde::Serialize;
use std::path::PathBuf;

const EXAMPLES: &str = "\
Examples:
  glowsim peaks d2.trace
  glowsim peaks d2.trace --dark dark.trace --json
  glowsim peaks export.csv --adc-bits 16      # plain CSV: one column of counts, or pixel,counts

Pixel 0 is the first value in the file. center_sigma_px is the 1-σ centre uncertainty from the noise
model; noise_counts is the noise σ at the typical baseline level.";

/// Command-line options.
#[derive(clap::Args)]
#[command(after_help = EXAMPLES)]
pub struct Args {
    /// Trace file: glowtrace or plain CSV.
    trace: PathBuf,
    /// Dark trace (same integration time); its dark frames, or all frames when it has none labelled
    /// dark, are averaged and subtracted. Overrides dark frames inside TRACE.
    #[arg(long)]
    dark: Option<PathBuf>,
    /// Print JSON instead of a table.
    #[arg(long)]
    json: bool,
    /// ADC resolution in bits when the file does not say (CSV), or to override it.
    #[arg(long)]
    adc_bits: Option<u8>,
    /// Conversion gain in electrons per count when the file does not say (sharpens the noise model).
    #[arg(long)]
    gain_e: Option<f64>,
    /// Pixels to repair by interpolation (hot or dead), comma-separated.
    #[arg(long, value_delimiter = ',')]
    bad_pixels: Vec<u16>,
    /// Detection threshold in noise σ.
    #[arg(long)]
    threshold_sigma: Option<f64>,
}

/// The JSON contract of `glowsim peaks --json`.
#[derive(Serialize, Debug, PartialEq)]
pub struct PeaksJson {
    /// Pixels per frame.
    pub pixels: usize,
    /// Noise σ at the typical baseline level, in counts per readout.
    pub noise_counts: f64,
    /// More lines qualified than the peak list holds; the weakest were dropped.
    pub truncated: bool,
    /// Peaks sorted by centre.
    pub peaks: Vec<PeakJson>,
}

/// One peak in the JSON contract.
#[derive(Serialize, Debug, PartialEq)]
pub struct PeakJson {
    /// Centre in px (pixel 0 = first value in the file).
    pub center_px: f64,
    /// 1-σ uncertainty of the centre in px.
    pub center_sigma_px: f64,
    /// FWHM in px.
    pub fwhm_px: f64,
    /// Height above the baseline in counts per readout.
    pub height_counts: f64,
    /// Area above the baseline in counts × px per readout.
    pub area_counts: f64,
    /// Height over the noise σ at the peak.
    pub snr: f64,
    /// A pixel of the line reached full scale.
    pub saturated: bool,
    /// Another peak lies within about one FWHM.
    pub blended: bool,
}

/// Everything `peaks` works out, before printing.
pub struct Outcome {
    /// The contract values.
    pub json: PeaksJson,
    /// Nominal wavelength map of the trace, if any.
    pub map_nm: Option<Vec<f64>>,
    /// Readouts co-added into the signal.
    pub signal_reads: u32,
    /// Readouts averaged into the dark, 0 when none.
    pub dark_reads: u32,
    /// Pixels found saturated.
    pub saturated_pixels: u16,
    /// False when the ADC resolution is unknown, so saturation could not be checked.
    pub saturation_checked: bool,
}

const Q16: f64 = 65_536.0;
const COUNT_UNITS: f64 = (1u32 << OUTPUT_FRAC_BITS) as f64;

/// Rounds for display: keeps 5 decimals, which is below the Q16 step of the firmware values.
fn r5(x: f64) -> f64 {
    (x * 1e5).round() / 1e5
}

/// Co-adds frames of one kind into `sum`; returns the readouts summed (0 when there are none).
fn stack_frames(
    frames: &[&Vec<u32>],
    coadded: u32,
    full_scale: u16,
    sum: &mut [u32],
    what: &str,
) -> Result<u16, String> {
    if frames.is_empty() {
        return Ok(0);
    }
    let reads = (frames.len() as u64).saturating_mul(coadded as u64);
    if reads > MAX_COADD as u64 {
        return Err(format!(
            "{what}: {reads} readouts exceed the co-adding limit of {MAX_COADD}"
        ));
    }
    if coadded == 1 {
        let mut stack = Stack::new(sum, full_scale).map_err(|e| format!("{what}: {e}"))?;
        let mut raw = vec![0u16; frames[0].len()];
        for f in frames {
            for (r, &c) in raw.iter_mut().zip(f.iter()) {
                *r = u16::try_from(c).map_err(|_| {
                    format!("{what}: count {c} does not fit a 16-bit readout (firmware limit)")
                })?;
            }
            stack.add(&raw).map_err(|e| format!("{what}: {e}"))?;
        }
        Ok(stack.frames())
    } else {
        // Frames that are already sums: saturation shows as a sum at coadded × full scale.
        let limit = u64::from(full_scale) * u64::from(coadded);
        sum.iter_mut().for_each(|s| *s = 0);
        for f in frames {
            for (s, &c) in sum.iter_mut().zip(f.iter()) {
                if u64::from(c) >= limit || *s == glowcheck::condition::SATURATED_SUM {
                    *s = glowcheck::condition::SATURATED_SUM;
                } else {
                    *s = s.saturating_add(c);
                }
            }
        }
        Ok(reads as u16)
    }
}

fn signal_frames(t: &Trace) -> Vec<&Vec<u32>> {
    t.frames_of(FrameKind::Signal).map(|f| &f.counts).collect()
}

/// Runs conditioning and peak finding on a loaded trace.
pub fn analyse(trace: &Trace, dark: Option<&Trace>, args: &Args) -> Result<Outcome, String> {
    let n = trace.pixels;
    if n > MAX_PIXELS {
        return Err(format!(
            "{n} pixels: the firmware handles at most {MAX_PIXELS}"
        ));
    }
    let adc_bits = args.adc_bits.or(trace.adc_bits);
    if let Some(b) = adc_bits {
        if b == 0 || b > 16 {
            return Err(format!(
                "ADC resolution {b} bits: the firmware takes 1 to 16-bit readouts"
            ));
        }
    }
    let full_scale = adc_bits.map_or(u16::MAX, |b| ((1u32 << b) - 1) as u16);
    let signals = signal_frames(trace);
    if signals.is_empty() {
        return Err("the trace has no signal frame".into());
    }
    let darks: Vec<&Vec<u32>> = match dark {
        Some(d) => {
            if d.pixels != n {
                return Err(format!("dark trace has {} pixels, the trace {n}", d.pixels));
            }
            let labelled: Vec<&Vec<u32>> =
                d.frames_of(FrameKind::Dark).map(|f| &f.counts).collect();
            if labelled.is_empty() {
                signal_frames(d)
            } else {
                labelled
            }
        }
        None => trace
            .frames_of(FrameKind::Dark)
            .map(|f| &f.counts)
            .collect(),
    };
    let dark_coadded = dark.map_or(trace.coadded, |d| d.coadded);

    let mut sig_sum = vec![0u32; n];
    let mut dark_sum = vec![0u32; n];
    let s_reads = stack_frames(&signals, trace.coadded, full_scale, &mut sig_sum, "signal")?;
    let d_reads = stack_frames(&darks, dark_coadded, full_scale, &mut dark_sum, "dark")?;

    let integration_us = trace.integration_us.unwrap_or(1).clamp(1, u32::MAX as u64) as u32;
    let mut cfg = ConditionConfig::new(full_scale, integration_us);
    let gain_e = args.gain_e.or(trace.electrons_per_count);
    if let Some(g) = gain_e {
        if !(g.is_finite() && g > 0.0 && g < 256.0) {
            return Err(format!(
                "conversion gain {g} e-/count: expected a number in (0, 256)"
            ));
        }
        cfg.electrons_per_count_q8 = (g * 256.0).round().max(1.0) as u16;
    }
    for &b in &args.bad_pixels {
        cfg.bad_pixels
            .push(b)
            .map_err(|_| "too many bad pixels for the firmware's map".to_string())?;
    }
    let signal = FrameSum::stacked(&sig_sum, s_reads).map_err(|e| format!("signal: {e}"))?;
    let dark_view = if d_reads > 0 {
        Some(FrameSum::stacked(&dark_sum, d_reads).map_err(|e| format!("dark: {e}"))?)
    } else {
        None
    };
    let mut out = vec![0i32; n];
    let mut flags = vec![0u8; n];
    let info = condition_frame(&cfg, signal, dark_view, None, &mut out, &mut flags)
        .map_err(|e| format!("conditioning: {e}"))?;

    let mut fcfg = FindConfig::DEFAULT;
    fcfg.shot_var_per_unit_q16 = info.shot_var_per_unit_q16;
    if let Some(t) = args.threshold_sigma {
        if !(t.is_finite() && t > 0.0 && t < 255.0) {
            return Err(format!(
                "--threshold-sigma {t}: expected a number in (0, 255)"
            ));
        }
        fcfg.threshold_sigma_q8 = (t * 256.0).round().max(1.0) as u16;
    }
    let mut scratch = vec![0i32; SCRATCH_PER_PIXEL * n];
    let mut peaks = PeakList::new();
    let report: FindReport = find_peaks(
        &fcfg,
        &out,
        &flags,
        &mut scratch,
        &mut FindWork::new(),
        &mut peaks,
    )
    .map_err(|e| format!("peak finding: {e}"))?;

    let json = PeaksJson {
        pixels: n,
        noise_counts: r5(report.noise_typical_q8 as f64 / 256.0 / COUNT_UNITS),
        truncated: report.truncated,
        peaks: peaks
            .iter()
            .map(|p| PeakJson {
                center_px: r5(p.center_px_q16 as f64 / Q16),
                center_sigma_px: r5(p.center_sigma_px_q16 as f64 / Q16),
                fwhm_px: r5(p.fwhm_px_q16 as f64 / Q16),
                height_counts: r5(p.height as f64 / COUNT_UNITS),
                area_counts: r5(p.area as f64 / COUNT_UNITS),
                snr: r5(p.snr_q8 as f64 / 256.0),
                saturated: p.saturated,
                blended: p.blended,
            })
            .collect(),
    };
    Ok(Outcome {
        json,
        map_nm: trace.wavelength_nm.clone(),
        signal_reads: s_reads as u32,
        dark_reads: d_reads as u32,
        saturated_pixels: info.saturated_pixels,
        saturation_checked: adc_bits.is_some(),
    })
}

fn nm_at(c: &[f64], p: f64) -> f64 {
    c.iter().rev().fold(0.0, |acc, &k| acc * p + k)
}

/// The human-readable table.
pub fn table(o: &Outcome) -> String {
    use std::fmt::Write as _;
    let j = &o.json;
    let mut s = String::new();
    let dark = if o.dark_reads > 0 {
        format!("{} dark read(s) subtracted", o.dark_reads)
    } else {
        "no dark frame".into()
    };
    let _ = writeln!(
        s,
        "{} px, {} signal read(s), {dark}; noise {:.2} counts; {} peak(s){}",
        j.pixels,
        o.signal_reads,
        j.noise_counts,
        j.peaks.len(),
        if j.truncated {
            " (list full: weakest dropped)"
        } else {
            ""
        }
    );
    if !o.saturation_checked {
        let _ = writeln!(
            s,
            "ADC resolution unknown: saturation not checked (pass --adc-bits)"
        );
    } else if o.saturated_pixels > 0 {
        let _ = writeln!(s, "{} saturated pixel(s)", o.saturated_pixels);
    }
    if j.peaks.is_empty() {
        return s;
    }
    let with_nm = o.map_nm.is_some();
    let _ = write!(
        s,
        "{:>3}  {:>10}  {:>8}  {:>7}",
        "#", "center px", "± px", "FWHM px"
    );
    if with_nm {
        let _ = write!(s, "  {:>10}", "nominal nm");
    }
    let _ = writeln!(s, "  {:>11}  {:>12}  {:>8}  flags", "height", "area", "SNR");
    for (i, p) in j.peaks.iter().enumerate() {
        let _ = write!(
            s,
            "{:>3}  {:>10.3}  {:>8.4}  {:>7.2}",
            i + 1,
            p.center_px,
            p.center_sigma_px,
            p.fwhm_px
        );
        if let Some(c) = &o.map_nm {
            let _ = write!(s, "  {:>10.3}", nm_at(c, p.center_px));
        }
        let mut flags = Vec::new();
        if p.saturated {
            flags.push("saturated");
        }
        if p.blended {
            flags.push("blended");
        }
        let _ = writeln!(
            s,
            "  {:>11.1}  {:>12.1}  {:>8.1}  {}",
            p.height_counts,
            p.area_counts,
            p.snr,
            flags.join(",")
        );
    }
    s
}

/// Runs the command.
pub fn run(args: &Args) -> Result<(), String> {
    let trace = Trace::read_path(&args.trace)?;
    let dark = match &args.dark {
        Some(p) => Some(Trace::read_path(p)?),
        None => None,
    };
    let o = analyse(&trace, dark.as_ref(), args)?;
    let text = if args.json {
        let mut t = serde_json::to_string(&o.json).map_err(|e| format!("JSON output: {e}"))?;
        t.push('\n');
        t
    } else {
        table(&o)
    };
    crate::trace::write_stdout(&text)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::trace::Frame;
    use clap::Parser;

    #[derive(Parser)]
    struct Cli {
        #[command(flatten)]
        args: Args,
    }

    fn args(extra: &[&str]) -> Args {
        let mut v = vec!["peaks", "unused.trace"];
        v.extend_from_slice(extra);
        Cli::try_parse_from(v).unwrap().args
    }

    fn synth(extra: &[&str]) -> Trace {
        #[derive(Parser)]
        struct S {
            #[command(flatten)]
            args: crate::synth_cmd::Args,
        }
        let mut v = vec!["synth", "--out", "-"];
        v.extend_from_slice(extra);
        crate::synth_cmd::synthesize(&S::try_parse_from(v).unwrap().args).unwrap()
    }

    fn flat(pixels: usize, value: u32) -> Trace {
        let mut t = Trace::new(pixels);
        t.adc_bits = Some(12);
        t.frames.push(Frame {
            kind: FrameKind::Signal,
            counts: vec![value; pixels],
        });
        t
    }

    /// The JSON has exactly the contract's keys, in the contract's order.
    #[test]
    fn json_contract_keys() {
        let t = synth(&["--test-line", "500.3", "--snr", "100"]);
        let o = analyse(&t, None, &args(&[])).unwrap();
        let text = serde_json::to_string(&o.json).unwrap();
        assert!(
            text.starts_with("{\"pixels\":2048,\"noise_counts\":"),
            "{text}"
        );
        let v: serde_json::Value = serde_json::from_str(&text).unwrap();
        let top: Vec<&str> = v.as_object().unwrap().keys().map(|k| k.as_str()).collect();
        let mut want = vec!["noise_counts", "peaks", "pixels", "truncated"];
        want.sort();
        let mut top_sorted = top.clone();
        top_sorted.sort();
        assert_eq!(top_sorted, want);
        let peaks = v["peaks"].as_array().unwrap();
        assert_eq!(peaks.len(), 1);
        let keys: Vec<&str> = peaks[0]
            .as_object()
            .unwrap()
            .keys()
            .map(|k| k.as_str())
            .collect();
        let mut want = vec![
            "center_px",
            "center_sigma_px",
            "fwhm_px",
            "height_counts",
            "area_counts",
            "snr",
            "saturated",
            "blended",
        ];
        want.sort();
        let mut keys = keys;
        keys.sort();
        assert_eq!(keys, want);
        let order = [
            "\"pixels\"",
            "\"noise_counts\"",
            "\"truncated\"",
            "\"peaks\"",
            "\"center_px\"",
            "\"center_sigma_px\"",
            "\"fwhm_px\"",
            "\"height_counts\"",
            "\"area_counts\"",
            "\"snr\"",
            "\"saturated\"",
            "\"blended\"",
        ];
        let at: Vec<usize> = order.iter().map(|k| text.find(k).unwrap()).collect();
        assert!(at.windows(2).all(|w| w[0] < w[1]), "{text}");
        let p = &o.json.peaks[0];
        assert!(
            (p.center_px - 500.3).abs() < 5.0 * p.center_sigma_px.max(0.001),
            "{p:?}"
        );
        assert!((p.fwhm_px - 3.0).abs() < 0.3, "{p:?}");
        assert!(!p.saturated && !p.blended);
    }

    #[test]
    fn saturated_line_is_flagged() {
        let t = synth(&["--nucleus", "D", "--peak-e", "1e6", "--adc-bits", "12"]);
        let o = analyse(&t, None, &args(&[])).unwrap();
        assert!(o.saturated_pixels > 0);
        let strongest = o
            .json
            .peaks
            .iter()
            .max_by(|a, b| a.height_counts.total_cmp(&b.height_counts))
            .unwrap();
        assert!(strongest.saturated, "{strongest:?}");
        assert!(table(&o).contains("saturated"));
    }

    /// Dark frames from a second file subtract exactly as dark frames inside the trace.
    #[test]
    fn dark_file_equals_inline_darks() {
        let both = synth(&[
            "--nucleus",
            "H",
            "--darks",
            "3",
            "--hot-pixels",
            "4",
            "--seed",
            "4",
        ]);
        let mut light = both.clone();
        light.frames.retain(|f| f.kind == FrameKind::Signal);
        let mut darks = both.clone();
        darks.frames.retain(|f| f.kind == FrameKind::Dark);
        let a = analyse(&both, None, &args(&[])).unwrap();
        let b = analyse(&light, Some(&darks), &args(&[])).unwrap();
        assert_eq!(a.json, b.json);
        assert_eq!(a.dark_reads, 3);
    }

    #[test]
    fn edge_frames_give_result_or_clear_error() {
        let e = analyse(&flat(1, 5), None, &args(&[])).err().unwrap();
        assert!(e.contains("too short"), "{e}");
        let zero = analyse(&flat(2048, 0), None, &args(&[])).unwrap();
        assert!(zero.json.peaks.is_empty());
        let full = analyse(&flat(2048, 4095), None, &args(&[])).unwrap();
        assert!(full.json.peaks.is_empty());
        assert_eq!(full.saturated_pixels, 2048);
        let big = synth(&[
            "--pixels",
            "4096",
            "--nucleus",
            "D",
            "--wavelength-map",
            "340,0.09",
        ]);
        assert!(!analyse(&big, None, &args(&[]))
            .unwrap()
            .json
            .peaks
            .is_empty());
        let e = analyse(&flat(4097, 5), None, &args(&[])).err().unwrap();
        assert!(e.contains("at most 4096"), "{e}");
        let mut wide = flat(100, 5);
        wide.adc_bits = Some(20);
        let e = analyse(&wide, None, &args(&[])).err().unwrap();
        assert!(e.contains("16-bit"), "{e}");
    }

    #[test]
    fn csv_without_adc_says_so() {
        let mut t = flat(64, 100);
        t.adc_bits = None;
        let o = analyse(&t, None, &args(&[])).unwrap();
        assert!(table(&o).contains("saturation not checked"));
    }
}
