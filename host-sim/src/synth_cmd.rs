//! `glowsim synth`: a synthetic sensor trace from predicted lines and the sensor model.
//!
//! Lines come from `glowcheck::predict` (air wavelengths unless `--vacuum`), their relative strengths
//! from [`crate::sensor::emission`], and the sensor from [`crate::sensor`]. Everything random derives
//! from `--seed`, so the same command writes the same bytes. The true line positions and the settings
//! go into the trace header under `synth.*` keys for tests and benchmarks to compare against.

use crate::sensor::continuum::{Continuum, StrayLight};
use crate::sensor::detector::{Detector, MAX_ADC_BITS};
use crate::sensor::dispersion::WavelengthMap;
use crate::sensor::emission::relative_photon_rate;
use crate::sensor::profile::LineProfile;
use crate::sensor::rng::Rng;
use crate::sensor::scene::{Scene, SceneLine};
use crate::trace::{Frame, FrameKind, Trace, MAX_PIXELS};
use glowcheck::predict::{self, Air, AirConditions, Lines, Nucleus};
use std::path::PathBuf;

/// Random streams of one seed, kept apart so one option does not reshuffle another.
const STREAM_HOT_PIXELS: u64 = 1;
const STREAM_FRAMES: u64 = 2;

/// Default nominal wavelength map: about 340–683 nm over 2048 px.
const DEFAULT_MAP: &str = "340,0.18,-6e-6";

const EXAMPLES: &str = "\
Examples:
  # a deuterium lamp, two dark frames, 5 hot pixels
  glowsim synth --nucleus D --seed 7 --darks 2 --hot-pixels 5 --out d2.trace
  # a tube with 10 % hydrogen in deuterium, strong continuum, stray light, 12-bit ADC
  glowsim synth --mix H=0.1,D=0.9 --continuum-e 3000 --stray 0.01 --adc-bits 12 --out mix.trace
  # test lines at chosen pixels with peak SNR 50 and FWHM 3 px (for benchmarks)
  glowsim synth --test-line 300.25 --test-line 900.6 --snr 50 --fwhm-px 3 --seed 1 --out t.trace
  # noise only (false-peak checks)
  glowsim synth --no-lines --seed 3 --out noise.trace

Safety: real tubes run at kilovolts, lines below about 380 nm are UV (shield the lamp, wear UV-rated
eye protection), and hydrogen/deuterium burn in air from about 4 % to 75 %.";

/// Command-line options.
#[derive(clap::Args)]
#[command(after_help = EXAMPLES)]
pub struct Args {
    /// Emitting species by symbol (H, D, T, He3, He4, Li7, ...).
    #[arg(long, conflicts_with = "mix")]
    nucleus: Option<String>,
    /// Isotope/species mix as SYMBOL=FRACTION pairs, e.g. H=0.1,D=0.9 (fractions of line light).
    #[arg(long)]
    mix: Option<String>,
    /// Draw a test line at this pixel coordinate instead of predicted lines; repeatable.
    /// PX or PX:PEAK_E (peak electrons; default from --peak-e / --snr).
    #[arg(long = "test-line", value_name = "PX[:PEAK_E]")]
    test_lines: Vec<String>,
    /// No lines at all (noise, dark, continuum only).
    #[arg(long, conflicts_with_all = ["nucleus", "mix", "test_lines"])]
    no_lines: bool,
    /// Seed of every random draw.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Sensor pixel count.
    #[arg(long, default_value_t = 2048)]
    pixels: usize,
    /// Output trace file (glowtrace format); "-" writes to standard output.
    #[arg(long)]
    out: PathBuf,
    /// Nominal wavelength map written to the trace: c0,c1 and optionally c2,c3, with λ(p) = Σ ck·p^k in nm.
    #[arg(long, default_value = DEFAULT_MAP, value_name = "C0,C1,..")]
    wavelength_map: String,
    /// True wavelength map of the simulated instrument, if it differs from the nominal one.
    #[arg(long, value_name = "C0,C1,..")]
    true_map: Option<String>,
    /// Use vacuum wavelengths (instrument in vacuum or purged).
    #[arg(long, conflicts_with_all = ["air_temp_c", "air_pressure_hpa", "air_humidity_pct"])]
    vacuum: bool,
    /// Air temperature in °C (default: IAU standard air).
    #[arg(long)]
    air_temp_c: Option<f64>,
    /// Air pressure in hPa (with --air-temp-c; default 1013.25).
    #[arg(long)]
    air_pressure_hpa: Option<f64>,
    /// Relative humidity in % (with --air-temp-c; default 0).
    #[arg(long)]
    air_humidity_pct: Option<f64>,
    /// Instrument line width (FWHM) in pixels.
    #[arg(long, default_value_t = 3.0)]
    fwhm_px: f64,
    /// Lorentzian fraction of the line profile (0 = pure Gaussian; 0.05 gives visible far wings).
    #[arg(long, default_value_t = 0.0)]
    lorentz: f64,
    /// Peak photo-electrons per pixel of the strongest line.
    #[arg(long, default_value_t = 20_000.0)]
    peak_e: f64,
    /// Peak SNR of the strongest line instead of --peak-e: peak / sqrt(peak + background + read²).
    #[arg(long, conflicts_with = "peak_e")]
    snr: Option<f64>,
    /// Excitation temperature in K of the line-strength model (sets the Balmer decrement).
    #[arg(long, default_value_t = 20_000.0)]
    excitation_k: f64,
    /// Lamp continuum: electrons per pixel at its peak (0 = none).
    #[arg(long, default_value_t = 0.0)]
    continuum_e: f64,
    /// Wavelength of the continuum peak in nm.
    #[arg(long, default_value_t = 250.0)]
    continuum_peak_nm: f64,
    /// Steepness of the continuum's fall-off.
    #[arg(long, default_value_t = 3.0)]
    continuum_steepness: f64,
    /// Fraction of all light scattered evenly over the sensor.
    #[arg(long, default_value_t = 0.0)]
    stray: f64,
    /// ADC resolution in bits.
    #[arg(long, default_value_t = 14)]
    adc_bits: u8,
    /// Conversion gain, electrons per count.
    #[arg(long, default_value_t = 2.0)]
    gain_e: f64,
    /// Electronic offset in counts.
    #[arg(long, default_value_t = 100.0)]
    bias: f64,
    /// Read noise in electrons RMS.
    #[arg(long, default_value_t = 8.0)]
    read_noise_e: f64,
    /// Full-well capacity in electrons (default: no limit before the ADC clips).
    #[arg(long)]
    full_well_e: Option<f64>,
    /// Dark current in electrons per second per pixel at 25 °C.
    #[arg(long, default_value_t = 50.0)]
    dark_e_per_s: f64,
    /// Sensor temperature in °C (dark current doubles every 6.3 °C).
    #[arg(long, default_value_t = 25.0)]
    temp_c: f64,
    /// Integration time in milliseconds.
    #[arg(long, default_value_t = 100.0)]
    integration_ms: f64,
    /// Number of hot pixels.
    #[arg(long, default_value_t = 0)]
    hot_pixels: usize,
    /// Dark-current multiplier of a hot pixel.
    #[arg(long, default_value_t = 200.0)]
    hot_factor: f64,
    /// Signal frames to write.
    #[arg(long, default_value_t = 1)]
    frames: usize,
    /// Dark frames to write (same integration, no light).
    #[arg(long, default_value_t = 0)]
    darks: usize,
    /// Free note for the trace header; repeatable.
    #[arg(long)]
    note: Vec<String>,
}

/// A line to draw, before scaling.
struct Planned {
    label: String,
    /// Wavelength in nm and whether it is an air value.
    nm: Option<(f64, bool)>,
    center_px: f64,
    /// Relative strength (predicted lines) or peak electrons (test lines with an explicit value).
    weight: f64,
    explicit_peak_e: bool,
}

fn parse_list(text: &str, what: &str) -> Result<Vec<f64>, String> {
    text.split(',')
        .map(|w| {
            w.trim()
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| format!("{what}: expected numbers separated by commas, found {w:?}"))
        })
        .collect()
}

fn parse_mix(args: &Args) -> Result<Vec<(Nucleus, f64)>, String> {
    let pairs: Vec<(String, f64)> = match (&args.nucleus, &args.mix) {
        (Some(n), None) => vec![(n.clone(), 1.0)],
        (None, Some(m)) => m
            .split(',')
            .map(|p| {
                let (s, f) = p.split_once('=').ok_or_else(|| {
                    format!("--mix: expected SYMBOL=FRACTION pairs like H=0.1,D=0.9, found {p:?}")
                })?;
                let f: f64 = f
                    .trim()
                    .parse()
                    .ok()
                    .filter(|x: &f64| x.is_finite() && *x >= 0.0)
                    .ok_or_else(|| {
                        format!("--mix: expected a fraction >= 0 after '=', found {f:?}")
                    })?;
                Ok((s.trim().to_string(), f))
            })
            .collect::<Result<_, String>>()?,
        _ => return Ok(Vec::new()),
    };
    let total: f64 = pairs.iter().map(|p| p.1).sum();
    if total <= 0.0 {
        return Err("--mix: the fractions add up to zero".into());
    }
    pairs
        .into_iter()
        .map(|(s, f)| {
            Nucleus::from_symbol(&s)
                .map(|n| (n, f / total))
                .map_err(|e| format!("unknown species {s:?}: {e}"))
        })
        .collect()
}

fn air(args: &Args) -> Result<Air, String> {
    if args.vacuum {
        return Ok(Air::Vacuum);
    }
    let Some(t) = args.air_temp_c else {
        if args.air_pressure_hpa.is_some() || args.air_humidity_pct.is_some() {
            return Err("--air-pressure-hpa and --air-humidity-pct need --air-temp-c".into());
        }
        return Ok(Air::Standard);
    };
    let p = args.air_pressure_hpa.unwrap_or(1013.25);
    let h = args.air_humidity_pct.unwrap_or(0.0);
    if !(-100.0..=100.0).contains(&t) || !(1.0..=2000.0).contains(&p) || !(0.0..=100.0).contains(&h)
    {
        return Err("air conditions out of range (°C −100..100, hPa 1..2000, % 0..100)".into());
    }
    let c = AirConditions::new(
        (t * 1000.0).round() as i32,
        (p * 100.0).round() as u32,
        (h * 10.0).round() as u16,
    )
    .map_err(|e| format!("air conditions: {e}"))?;
    Ok(Air::Conditions(c))
}

/// Predicted lines of the mix that land on the sensor (or close enough to throw light on it).
fn predicted_lines(
    args: &Args,
    map: &WavelengthMap,
    margin_px: f64,
) -> Result<Vec<Planned>, String> {
    let mix = parse_mix(args)?;
    let air = air(args)?;
    let lo_nm = map.nm_at(-0.5 - margin_px);
    let hi_nm = map.nm_at(args.pixels as f64 - 0.5 + margin_px);
    // Vacuum window a little wider than the air window: refraction shifts by < 0.03 %.
    let from_fm = ((lo_nm * 0.999).max(1.0) * 1e6) as u64;
    let to_fm = (hi_nm * 1.001 * 1e6) as u64;
    let mut out = Vec::new();
    for (nucleus, fraction) in mix {
        let lines = Lines::new(nucleus, from_fm, to_fm, &air)
            .map_err(|e| format!("predicting {} lines: {e}", nucleus.symbol()))?;
        for line in lines {
            let line = line.map_err(|e| format!("predicting {} lines: {e}", nucleus.symbol()))?;
            let fm = line.air_fm.unwrap_or(line.vacuum_fm);
            let nm = fm as f64 / 1e6;
            let Some(px) = map.px_at(nm, args.pixels, margin_px) else {
                continue;
            };
            let upper_ev = predict::line(nucleus, 1, line.upper, &air)
                .map(|l| l.energy_nev as f64 * 1e-9)
                .map_err(|e| {
                    format!("level energy of {} n={}: {e}", nucleus.symbol(), line.upper)
                })?;
            let rate = relative_photon_rate(
                nucleus.z(),
                line.lower,
                line.upper,
                upper_ev,
                args.excitation_k,
            );
            out.push(Planned {
                label: format!("{} {}-{}", nucleus.symbol(), line.upper, line.lower),
                nm: Some((nm, line.air_fm.is_some())),
                center_px: px,
                weight: fraction * rate,
                explicit_peak_e: false,
            });
        }
    }
    Ok(out)
}

fn test_lines(args: &Args) -> Result<Vec<Planned>, String> {
    args.test_lines
        .iter()
        .map(|t| {
            let (px, peak) = match t.split_once(':') {
                Some((a, b)) => (a, Some(b)),
                None => (t.as_str(), None),
            };
            let px: f64 = px
                .trim()
                .parse()
                .ok()
                .filter(|x: &f64| x.is_finite())
                .ok_or_else(|| format!("--test-line: expected PX or PX:PEAK_E, found {t:?}"))?;
            let peak: Option<f64> = peak
                .map(|p| {
                    p.trim()
                        .parse()
                        .ok()
                        .filter(|x: &f64| x.is_finite() && *x >= 0.0)
                        .ok_or_else(|| {
                            format!("--test-line: expected peak electrons >= 0, found {p:?}")
                        })
                })
                .transpose()?;
            Ok(Planned {
                label: "test".into(),
                nm: None,
                center_px: px,
                weight: peak.unwrap_or(1.0),
                explicit_peak_e: peak.is_some(),
            })
        })
        .collect()
}

/// Peak electrons that give peak SNR `snr` over background `b_e` (electrons incl. read noise²):
/// solves s = p / sqrt(p + b) for p.
fn peak_for_snr(snr: f64, b_e: f64) -> f64 {
    let s2 = snr * snr;
    0.5 * (s2 + (s2 * s2 + 4.0 * s2 * b_e).sqrt())
}

fn check_args(args: &Args) -> Result<(), String> {
    if args.pixels == 0 || args.pixels > MAX_PIXELS {
        return Err(format!("--pixels must be 1..={MAX_PIXELS}"));
    }
    if args.adc_bits == 0 || args.adc_bits > MAX_ADC_BITS {
        return Err(format!("--adc-bits must be 1..={MAX_ADC_BITS}"));
    }
    let positive = [
        ("--gain-e", args.gain_e),
        ("--integration-ms", args.integration_ms),
        ("--excitation-k", args.excitation_k),
        ("--continuum-peak-nm", args.continuum_peak_nm),
    ];
    for (name, v) in positive {
        if !(v.is_finite() && v > 0.0) {
            return Err(format!("{name} must be > 0, got {v}"));
        }
    }
    let non_negative = [
        ("--peak-e", args.peak_e),
        ("--read-noise-e", args.read_noise_e),
        ("--dark-e-per-s", args.dark_e_per_s),
        ("--continuum-e", args.continuum_e),
        ("--continuum-steepness", args.continuum_steepness),
        ("--hot-factor", args.hot_factor),
        ("--snr", args.snr.unwrap_or(0.0)),
        ("--full-well-e", args.full_well_e.unwrap_or(0.0)),
    ];
    for (name, v) in non_negative {
        if !(v.is_finite() && v >= 0.0) {
            return Err(format!("{name} must be >= 0, got {v}"));
        }
    }
    if !(0.0..1.0).contains(&args.stray) {
        return Err(format!("--stray must lie in [0, 1), got {}", args.stray));
    }
    if !(args.temp_c.is_finite() && args.bias.is_finite()) {
        return Err("--temp-c and --bias must be finite".into());
    }
    if args.frames + args.darks == 0 {
        return Err("nothing to write: --frames and --darks are both 0".into());
    }
    if !args.no_lines && args.nucleus.is_none() && args.mix.is_none() && args.test_lines.is_empty()
    {
        return Err("say what emits: --nucleus, --mix, --test-line or --no-lines".into());
    }
    Ok(())
}

/// Builds the whole trace (no file output), so that tests can call it directly.
pub fn synthesize(args: &Args) -> Result<Trace, String> {
    check_args(args)?;
    let nominal_coeffs = parse_list(&args.wavelength_map, "--wavelength-map")?;
    WavelengthMap::new(&nominal_coeffs, args.pixels)?;
    let true_coeffs = match &args.true_map {
        Some(t) => parse_list(t, "--true-map")?,
        None => nominal_coeffs.clone(),
    };
    let true_map = WavelengthMap::new(&true_coeffs, args.pixels)?;
    let profile = LineProfile::new(args.fwhm_px, args.lorentz)?;
    let margin_px = 6.0 * args.fwhm_px;

    let mut planned = if args.no_lines {
        Vec::new()
    } else if !args.test_lines.is_empty() {
        test_lines(args)?
    } else {
        predicted_lines(args, &true_map, margin_px)?
    };

    let mut detector = Detector {
        adc_bits: args.adc_bits,
        gain_e_per_count: args.gain_e,
        bias_counts: args.bias,
        read_noise_e: args.read_noise_e,
        full_well_e: args.full_well_e.unwrap_or(f64::INFINITY),
        dark_e_per_s_25c: args.dark_e_per_s,
        temperature_c: args.temp_c,
        integration_s: args.integration_ms * 1e-3,
        hot_pixels: Vec::new(),
    };
    let mut hot_rng = Rng::new(args.seed, STREAM_HOT_PIXELS);
    detector.scatter_hot_pixels(args.pixels, args.hot_pixels, args.hot_factor, &mut hot_rng);

    let continuum = (args.continuum_e > 0.0).then_some(Continuum {
        peak_e: args.continuum_e,
        peak_nm: args.continuum_peak_nm,
        steepness: args.continuum_steepness,
    });

    // Scale: the strongest line gets --peak-e, or the peak that gives --snr over its background.
    let strongest = planned
        .iter()
        .filter(|p| !p.explicit_peak_e)
        .map(|p| p.weight)
        .fold(0.0, f64::max);
    let density = profile.peak_density_per_px();
    let background_e = |px: f64| {
        let c = continuum.map_or(0.0, |c| c.electrons_at(true_map.nm_at(px)));
        c + detector.dark_e() + args.read_noise_e * args.read_noise_e
    };
    let mut lines = Vec::new();
    let mut truth = Vec::new();
    for p in planned.iter_mut() {
        let peak_e = if p.explicit_peak_e {
            p.weight
        } else if strongest > 0.0 {
            let full = match args.snr {
                Some(s) => peak_for_snr(s, background_e(p.center_px)),
                None => args.peak_e,
            };
            full * p.weight / strongest
        } else {
            0.0
        };
        let area_e = peak_e / density;
        let b = background_e(p.center_px);
        let snr = if peak_e > 0.0 {
            peak_e / (peak_e + b).sqrt()
        } else {
            0.0
        };
        lines.push(SceneLine {
            center_px: p.center_px,
            area_e,
        });
        let nm = p.nm.map_or(String::new(), |(nm, in_air)| {
            format!(" {}_nm={nm:?}", if in_air { "air" } else { "vacuum" })
        });
        truth.push(format!(
            "{}{nm} px={:?} peak_e={:?} area_e={:?} snr={:.3}",
            p.label.replace(' ', "_"),
            p.center_px,
            peak_e,
            area_e,
            snr
        ));
    }
    let scene = Scene {
        pixels: args.pixels,
        map: true_map,
        profile,
        lines,
        continuum,
        stray: StrayLight {
            fraction: args.stray,
        },
    };
    let light = scene.render();
    let dark = vec![0.0; args.pixels];

    let mut frame_rng = Rng::new(args.seed, STREAM_FRAMES);
    let mut trace = Trace::new(args.pixels);
    trace.adc_bits = Some(args.adc_bits);
    trace.integration_us = Some((args.integration_ms * 1000.0).round() as u64);
    trace.sensor_temp_mc = Some((args.temp_c * 1000.0).round() as i64);
    trace.wavelength_nm = Some(nominal_coeffs);
    trace.electrons_per_count = Some(args.gain_e);
    trace.notes = args.note.clone();
    trace.notes.push(
        "synthetic trace made by glowsim synth (invented sensor and lamp model, for tests and demos)"
            .into(),
    );
    let mut extra = |k: &str, v: String| trace.extras.push((format!("synth.{k}"), v));
    extra("seed", args.seed.to_string());
    extra("true_map_nm", join(&true_coeffs));
    extra("fwhm_px", format!("{:?}", args.fwhm_px));
    extra("lorentz", format!("{:?}", args.lorentz));
    extra("bias_counts", format!("{:?}", args.bias));
    extra("read_noise_e", format!("{:?}", args.read_noise_e));
    extra("dark_e", format!("{:?}", detector.dark_e()));
    extra("continuum_e", format!("{:?}", args.continuum_e));
    extra("stray", format!("{:?}", args.stray));
    let hot: Vec<String> = detector
        .hot_pixels
        .iter()
        .map(|h| h.0.to_string())
        .collect();
    if !hot.is_empty() {
        extra("hot_pixels", hot.join(" "));
    }
    for t in truth {
        extra("line", t);
    }
    for _ in 0..args.frames {
        let counts = detector.read_frame(&light, &mut frame_rng);
        trace.frames.push(Frame {
            kind: FrameKind::Signal,
            counts,
        });
    }
    for _ in 0..args.darks {
        let counts = detector.read_frame(&dark, &mut frame_rng);
        trace.frames.push(Frame {
            kind: FrameKind::Dark,
            counts,
        });
    }
    Ok(trace)
}

fn join(c: &[f64]) -> String {
    c.iter()
        .map(|x| format!("{x:?}"))
        .collect::<Vec<_>>()
        .join(" ")
}

/// Runs the command.
pub fn run(args: &Args) -> Result<(), String> {
    let trace = synthesize(args)?;
    let on_sensor = trace
        .extra("synth.line")
        .filter(|l| {
            l.split_whitespace()
                .find_map(|w| w.strip_prefix("px="))
                .and_then(|v| v.parse::<f64>().ok())
                .is_some_and(|px| px >= -0.5 && px < trace.pixels as f64 - 0.5)
        })
        .count();
    let summary = format!(
        "{} px, {} signal + {} dark frame(s), {} line(s) on the sensor, seed {}",
        trace.pixels, args.frames, args.darks, on_sensor, args.seed
    );
    if args.out.as_os_str() == "-" {
        let text = crate::trace::native::to_text(&trace).map_err(|e| e.to_string())?;
        crate::trace::write_stdout(&text)?;
        eprintln!("glowsim synth: {summary}");
    } else {
        trace.write_path(&args.out)?;
        println!("wrote {}: {summary}", args.out.display());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::trace::native::{parse, to_text};
    use clap::Parser;

    #[derive(Parser)]
    struct Cli {
        #[command(flatten)]
        args: Args,
    }

    fn args(extra: &[&str]) -> Args {
        let mut v = vec!["synth", "--out", "-"];
        v.extend_from_slice(extra);
        Cli::try_parse_from(v).unwrap().args
    }

    fn text(extra: &[&str]) -> String {
        to_text(&synthesize(&args(extra)).unwrap()).unwrap()
    }

    #[test]
    fn same_seed_same_bytes() {
        let a = [
            "--mix",
            "H=0.1,D=0.9",
            "--seed",
            "11",
            "--darks",
            "2",
            "--hot-pixels",
            "4",
        ];
        assert_eq!(text(&a), text(&a));
        let b = [
            "--mix",
            "H=0.1,D=0.9",
            "--seed",
            "12",
            "--darks",
            "2",
            "--hot-pixels",
            "4",
        ];
        assert_ne!(text(&a), text(&b));
    }

    #[test]
    fn file_round_trip_is_lossless() {
        let t = synthesize(&args(&[
            "--nucleus",
            "D",
            "--darks",
            "1",
            "--continuum-e",
            "500",
        ]))
        .unwrap();
        assert_eq!(parse(&to_text(&t).unwrap()).unwrap(), t);
    }

    /// Dα in standard air at 656.10 nm (handbook value, from memory) lands where the map puts it.
    #[test]
    fn predicted_line_positions() {
        let t = synthesize(&args(&["--nucleus", "D"])).unwrap();
        let d_alpha = t
            .extra("synth.line")
            .find(|l| l.starts_with("D_3-2 "))
            .unwrap();
        let field = |k: &str| -> f64 {
            d_alpha
                .split_whitespace()
                .find_map(|w| w.strip_prefix(k))
                .unwrap()
                .parse()
                .unwrap()
        };
        let nm = field("air_nm=");
        assert!((nm - 656.10).abs() < 0.01, "{nm}");
        let map = WavelengthMap::new(&[340.0, 0.18, -6e-6], 2048).unwrap();
        assert!((map.nm_at(field("px=")) - nm).abs() < 1e-9);
        assert!((field("peak_e=") - 20_000.0).abs() < 1e-9);
        // Hα of hydrogen sits about 0.18 nm longer (isotope shift, from memory): absent without H.
        assert!(t.extra("synth.line").all(|l| !l.starts_with("H_")));
    }

    #[test]
    fn test_lines_reach_their_snr() {
        let t = synthesize(&args(&[
            "--test-line",
            "100.25",
            "--test-line",
            "700.5:5000",
            "--snr",
            "40",
        ]))
        .unwrap();
        let lines: Vec<&str> = t.extra("synth.line").collect();
        assert_eq!(lines.len(), 2);
        assert!(
            lines[0].contains("px=100.25 ") && lines[0].ends_with("snr=40.000"),
            "{}",
            lines[0]
        );
        assert!(lines[1].contains("peak_e=5000.0 "), "{}", lines[1]);
        let s = peak_for_snr(40.0, 69.0);
        assert!((s / (s + 69.0).sqrt() - 40.0).abs() < 1e-9);
    }

    #[test]
    fn saturation_and_hot_pixels() {
        let t = synthesize(&args(&[
            "--nucleus",
            "H",
            "--peak-e",
            "1e6",
            "--adc-bits",
            "12",
            "--hot-pixels",
            "3",
        ]))
        .unwrap();
        let f = &t.frames[0].counts;
        assert_eq!(*f.iter().max().unwrap(), 4095);
        let hot: Vec<usize> = t
            .extra("synth.hot_pixels")
            .next()
            .unwrap()
            .split(' ')
            .map(|w| w.parse().unwrap())
            .collect();
        assert_eq!(hot.len(), 3);
        // Default dark: 5 e⁻ per read; a hot pixel has 200× that, i.e. ~500 counts above a 100 bias at 2 e/count.
        for h in hot {
            assert!(f[h] > 400, "hot pixel {h}: {}", f[h]);
        }
    }

    #[test]
    fn bad_options_explained() {
        let e = synthesize(&args(&["--mix", "H=0.1,Q=0.9"])).unwrap_err();
        assert!(e.contains("\"Q\""), "{e}");
        let e = synthesize(&args(&[])).unwrap_err();
        assert!(e.contains("--nucleus"), "{e}");
        let e = synthesize(&args(&[
            "--nucleus",
            "D",
            "--wavelength-map",
            "400,0.1,-1e-4",
        ]))
        .unwrap_err();
        assert!(e.contains("does not rise"), "{e}");
        let e = synthesize(&args(&["--nucleus", "D", "--stray", "1.5"])).unwrap_err();
        assert!(e.contains("--stray"), "{e}");
    }
}
