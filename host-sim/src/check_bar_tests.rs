//! The acceptance bar of `glowsim check` on seeded synthetic traces from host-sim's sensor model.
//!
//! Each test sweeps cells (line SNR × FWHM × map × seeds), runs the same path as the command
//! ([`evaluate`]) and prints a compact table (`cargo test -p glowcheck-sim check_bar -- --nocapture`).
//!
//! Two levels per sweep: the default tests assert what must never break (no wrong pass, calibration
//! found, degenerate cases flagged where the isotope pair is unresolved, ...) and print the rest; the
//! `check_bar_strict_*` tests (ignored; `-- --ignored`) assert the whole bar and fail on the
//! lib issues listed in their ignore reasons. `GLOWCHECK_BAR_DUMP=DIR` writes every cell's trace and
//! instrument file for replay with `glowsim check`.
//!
//! "Line SNR" of a cell is the peak SNR of the third-strongest Balmer transition on the sensor
//! (isotope components summed), so that at least three lines reach it; foreign peaks and the other
//! lines scale with it. Truth is what the scene was drawn with: the predicted air wavelengths (the
//! predictor itself is checked against CODATA 2022 and NIST ASD elsewhere) placed with the true map.
use crate::check_cmd::evaluate;
use crate::instrument::Instrument;
use crate::sensor::continuum::StrayLight;
use crate::sensor::detector::Detector;
use crate::sensor::dispersion::WavelengthMap as TrueMap;
use crate::sensor::emission::relative_photon_rate;
use crate::sensor::profile::LineProfile;
use crate::sensor::rng::Rng;
use crate::sensor::scene::{Scene, SceneLine};
use crate::trace::{Frame, FrameKind, Trace};
use glowcheck::judge::{profile, Mode, Report, TubeProfile, Verdict};
use std::fmt::Write as _;

/// Appends a table row to a test's buffer: parallel tests print whole tables, not interleaved rows.
macro_rules! row {
    ($out:expr, $($t:tt)*) => {
        let _ = writeln!($out, $($t)*);
    };
}
use glowcheck::predict::{self, Air, Lines, Nucleus};

/// Dark (5 e⁻) plus read noise² (8 e⁻ rms) under every line: the background of the SNR definition.
const BACKGROUND_E: f64 = 5.0 + 64.0;

/// One synthetic frame's recipe.
#[derive(Clone)]
struct Case {
    pixels: usize,
    /// True map, plain λ(p) coefficients in nm.
    map: [f64; 4],
    fwhm_px: f64,
    mix: Vec<(Nucleus, f64)>,
    /// Foreign lines: air nm and peak relative to the SNR-setting line.
    foreign: Vec<(f64, f64)>,
    /// Peak SNR of the transition ranked `rank` (0 = strongest).
    snr: f64,
    rank: usize,
    seed: u64,
}

/// A line as drawn.
#[derive(Clone, Debug)]
struct Drawn {
    nucleus: Nucleus,
    lower: u8,
    upper: u8,
    nm: f64,
    px: f64,
}

fn peak_for_snr(snr: f64, b: f64) -> f64 {
    let s2 = snr * snr;
    0.5 * (s2 + (s2 * s2 + 4.0 * s2 * b).sqrt())
}

/// Renders the case into a one-frame trace (16-bit ADC, 2 e⁻/count) and lists the drawn lines.
fn render(c: &Case) -> (Trace, Vec<Drawn>) {
    let map = TrueMap::new(&c.map, c.pixels).unwrap();
    let air = Air::Standard;
    let margin = 6.0 * c.fwhm_px;
    let lo = map.nm_at(-0.5 - margin) * 0.999 * 1e6;
    let hi = map.nm_at(c.pixels as f64 - 0.5 + margin) * 1.001 * 1e6;
    let mut drawn = Vec::new();
    let mut weights = Vec::new();
    for &(nu, frac) in &c.mix {
        for l in Lines::new(nu, lo as u64, hi as u64, &air).unwrap() {
            let l = l.unwrap();
            let nm = l.air_fm.unwrap() as f64 / 1e6;
            let Some(px) = map.px_at(nm, c.pixels, margin) else {
                continue;
            };
            let upper_ev = predict::line(nu, 1, l.upper, &air).unwrap().energy_nev as f64 * 1e-9;
            let w = frac * relative_photon_rate(nu.z(), l.lower, l.upper, upper_ev, 20_000.0);
            drawn.push(Drawn {
                nucleus: nu,
                lower: l.lower,
                upper: l.upper,
                nm,
                px,
            });
            weights.push(w);
        }
    }
    // Transition strengths with isotopes summed, on the sensor only.
    let mut by_transition: Vec<((u8, u8, u8), f64)> = Vec::new();
    for (d, &w) in drawn.iter().zip(&weights) {
        if d.px < -0.5 || d.px > c.pixels as f64 - 0.5 {
            continue;
        }
        let key = (d.nucleus.z(), d.lower, d.upper);
        match by_transition.iter_mut().find(|(k, _)| *k == key) {
            Some((_, s)) => *s += w,
            None => by_transition.push((key, w)),
        }
    }
    by_transition.sort_by(|a, b| b.1.total_cmp(&a.1));
    let w_ref = by_transition[c.rank].1;
    let profile = LineProfile::new(c.fwhm_px, 0.0).unwrap();
    let peak_ref = peak_for_snr(c.snr, BACKGROUND_E);
    let k = peak_ref / (w_ref * profile.peak_density_per_px());
    let mut lines: Vec<SceneLine> = drawn
        .iter()
        .zip(&weights)
        .map(|(d, &w)| SceneLine {
            center_px: d.px,
            area_e: k * w,
        })
        .collect();
    for &(nm, rel) in &c.foreign {
        let px = map
            .px_at(nm, c.pixels, 0.0)
            .expect("foreign line on the sensor");
        lines.push(SceneLine {
            center_px: px,
            area_e: rel * k * w_ref,
        });
    }
    let scene = Scene {
        pixels: c.pixels,
        map,
        profile,
        lines,
        continuum: None,
        stray: StrayLight { fraction: 0.0 },
    };
    let det = Detector {
        adc_bits: 16,
        gain_e_per_count: 2.0,
        bias_counts: 100.0,
        read_noise_e: 8.0,
        full_well_e: f64::INFINITY,
        dark_e_per_s_25c: 50.0,
        temperature_c: 25.0,
        integration_s: 0.1,
        hot_pixels: Vec::new(),
    };
    let mut rng = Rng::new(c.seed, 2);
    let counts = det.read_frame(&scene.render(), &mut rng);
    let mut t = Trace::new(c.pixels);
    t.adc_bits = Some(16);
    t.integration_us = Some(100_000);
    t.electrons_per_count = Some(2.0);
    t.frames.push(Frame {
        kind: FrameKind::Signal,
        counts,
    });
    (t, drawn)
}

/// The instrument the case is checked with: stored map, its σ, fit degree.
fn instrument(c: &Case, stored: [f64; 4], sigma_nm: f64, degree: u8) -> Instrument {
    Instrument {
        name: None,
        pixels: c.pixels as u16,
        adc_bits: 16,
        integration_us: 100_000,
        electrons_per_count: Some(2.0),
        bad_pixels: Vec::new(),
        coefficients_nm: stored,
        sigma_nm,
        fit_degree: degree,
        line_fwhm_px: c.fwhm_px,
        air: Air::Standard,
    }
}

fn run(c: &Case, inst: &Instrument, p: TubeProfile, mode: Mode, tag: &str) -> (Report, Vec<Drawn>) {
    let (t, drawn) = render(c);
    dump(tag, &t, inst);
    (evaluate(&t, None, inst, p, mode).unwrap(), drawn)
}

/// With `GLOWCHECK_BAR_DUMP=DIR`, writes each cell's trace and instrument file to DIR so that a case can
/// be replayed with `glowsim check DIR/TAG.trace --instrument DIR/TAG.toml --profile … --mode …`.
fn dump(tag: &str, t: &Trace, inst: &Instrument) {
    let Some(dir) = std::env::var_os("GLOWCHECK_BAR_DUMP") else {
        return;
    };
    let dir = std::path::PathBuf::from(dir);
    std::fs::create_dir_all(&dir).unwrap();
    let name: String = tag
        .chars()
        .map(|ch| {
            if ch.is_ascii_alphanumeric() || ch == '.' || ch == '-' {
                ch
            } else {
                '_'
            }
        })
        .collect();
    t.write_path(&dir.join(format!("{name}.trace"))).unwrap();
    let c = inst.coefficients_nm;
    let toml =
        format!(
        "[sensor]\npixels = {}\nadc_bits = {}\nintegration_us = {}\nelectrons_per_count = 2.0\n\
         [scale]\ncoefficients_nm = [{:?}, {:?}, {:?}, {:?}]\nsigma_nm = {:?}\nfit_degree = {}\n\
         line_fwhm_px = {:?}\n",
        inst.pixels, inst.adc_bits, inst.integration_us, c[0], c[1], c[2], c[3], inst.sigma_nm,
        inst.fit_degree, inst.line_fwhm_px
    );
    std::fs::write(dir.join(format!("{name}.toml")), toml).unwrap();
}

fn has(r: &Report, code: &str) -> bool {
    r.reasons.iter().any(|x| x.code() == code)
}

fn share(r: &Report, n: Nucleus) -> Option<f64> {
    r.shares
        .iter()
        .find(|s| s.nucleus == n)
        .and_then(|s| s.share_ppm)
        .map(|v| v as f64 / 1e6)
}

/// Map error at the true positions of the report's matched lines, in px of the true dispersion:
/// (RMS over all matched lines, RMS over those with SNR ≥ 20, count).
fn map_error_px(r: &Report, drawn: &[Drawn], truth: &[f64; 4], pixels: usize) -> (f64, f64, usize) {
    let m = r.map.expect("report has a map");
    let tm = TrueMap::new(truth, pixels).unwrap();
    let (mut all, mut strong, mut n_all, mut n_strong) = (0.0, 0.0, 0usize, 0usize);
    for l in &r.lines {
        let Some(d) = drawn
            .iter()
            .find(|d| d.nucleus == l.nucleus && d.lower == l.lower && d.upper == l.upper)
        else {
            continue;
        };
        let fitted_nm = m.wavelength_fm((d.px * 65_536.0).round() as i32).unwrap() as f64 / 1e6;
        let e = (fitted_nm - d.nm) / tm.slope_nm_per_px(d.px);
        all += e * e;
        n_all += 1;
        if l.snr_q8 >= 20 << 8 {
            strong += e * e;
            n_strong += 1;
        }
    }
    (
        (all / n_all.max(1) as f64).sqrt(),
        (strong / n_strong.max(1) as f64).sqrt(),
        n_all,
    )
}

/// Three instruments of different dispersion and offset (2048–3648 px, 0.10–0.18 nm/px).
const MAPS: [(usize, [f64; 4]); 3] = [
    (2048, [340.0, 0.18, -6e-6, 0.0]),
    (2048, [372.0, 0.155, -4e-6, 0.0]),
    (3648, [355.0, 0.10, -1.5e-6, 0.0]),
];
const SNRS: [f64; 3] = [20.0, 40.0, 80.0];
const FWHMS: [f64; 3] = [2.5, 4.0, 8.0];
const SEEDS: [u64; 3] = [1, 2, 3];

/// Species and isotope verdicts in verify mode with a good stored map, for one tube against the three
/// hydrogen profiles; returns (checks, wrong verdicts, wrong passes) and writes pass counts per cell.
fn verdict_sweep(
    tube: &str,
    mix: &[(Nucleus, f64)],
    want: [Verdict; 3],
    out: &mut String,
) -> (usize, Vec<String>, Vec<String>) {
    let profiles = [
        ("hydrogen", profile::HYDROGEN),
        ("deuterium", profile::DEUTERIUM),
        ("hydrogen-deuterium", profile::HYDROGEN_DEUTERIUM),
    ];
    let mut wrong = Vec::new();
    let mut false_pass = Vec::new();
    let mut total = 0;
    row!(
        out,
        "verify-mode verdicts, tube {tube}: correct/checks per cell (3 seeds × 3 profiles)"
    );
    row!(
        out,
        "{:>12} {:>6} {:>6} {:>8}",
        "map",
        "SNR",
        "FWHM",
        "correct"
    );
    for (mi, &(pixels, map)) in MAPS.iter().enumerate() {
        for &snr in &SNRS {
            for &fwhm in &FWHMS {
                let mut ok = 0;
                let mut n = 0;
                for &seed in &SEEDS {
                    let c = Case {
                        pixels,
                        map,
                        fwhm_px: fwhm,
                        mix: mix.to_vec(),
                        foreign: Vec::new(),
                        snr,
                        rank: 2,
                        seed,
                    };
                    let (t, _) = render(&c);
                    let inst = instrument(&c, map, 0.003, 2);
                    let tag =
                        format!("verdict tube {tube} map {mi} SNR {snr} FWHM {fwhm} seed {seed}");
                    dump(&tag, &t, &inst);
                    for ((pname, p), w) in profiles.iter().zip(want) {
                        let r = evaluate(&t, None, &inst, *p, Mode::Verify).unwrap();
                        n += 1;
                        total += 1;
                        if r.verdict == w {
                            ok += 1;
                        } else {
                            let codes: Vec<String> =
                                r.reasons.iter().map(|x| x.to_string()).collect();
                            if r.verdict == Verdict::Pass {
                                false_pass.push(format!("tube {tube} map {mi} SNR {snr} FWHM {fwhm} seed {seed} profile {pname}"));
                            }
                            wrong.push(format!(
                                "tube {tube} map {mi} SNR {snr} FWHM {fwhm} seed {seed} profile {pname}: \
                                 {:?}, want {w:?}; {codes:?}; shares {:?}",
                                r.verdict,
                                r.shares.iter().map(|s| (s.nucleus.symbol(), s.share_ppm, s.sigma_ppm)).collect::<Vec<_>>()
                            ));
                        }
                    }
                }
                row!(out, "{:>12} {:>6} {:>6} {:>5}/{}", mi, snr, fwhm, ok, n);
            }
        }
    }
    (total, wrong, false_pass)
}

/// Never a wrong pass; with `strict`, every verdict right (the bar).
fn assert_sweep(tube: &str, mix: &[(Nucleus, f64)], want: [Verdict; 3], strict: bool) {
    let mut out = String::new();
    let (total, wrong, false_pass) = verdict_sweep(tube, mix, want, &mut out);
    row!(
        out,
        "tube {tube}: {} of {total} verdicts correct, {} wrong passes",
        total - wrong.len(),
        false_pass.len()
    );
    print!("{out}");
    assert!(
        false_pass.is_empty(),
        "wrong passes:\n{}",
        false_pass.join("\n")
    );
    if strict {
        assert!(
            wrong.is_empty(),
            "{} wrong:\n{}",
            wrong.len(),
            wrong.join("\n")
        );
    } else if !wrong.is_empty() {
        println!(
            "{} verdicts not as wanted (lib issues, see the strict test):\n{}",
            wrong.len(),
            wrong.join("\n")
        );
    }
}

const H_TUBE: &[(Nucleus, f64)] = &[(Nucleus::H1, 1.0)];
const D_TUBE: &[(Nucleus, f64)] = &[(Nucleus::H2, 0.99), (Nucleus::H1, 0.01)];
const HD_TUBE: &[(Nucleus, f64)] = &[(Nucleus::H1, 0.5), (Nucleus::H2, 0.5)];
/// Wanted verdicts against (hydrogen, deuterium, hydrogen-deuterium).
const H_WANT: [Verdict; 3] = [Verdict::Pass, Verdict::Fail, Verdict::Fail];
const D_WANT: [Verdict; 3] = [Verdict::Fail, Verdict::Pass, Verdict::Fail];
const HD_WANT: [Verdict; 3] = [Verdict::Fail, Verdict::Fail, Verdict::Pass];

#[test]
fn check_bar_verdicts_hydrogen_tube() {
    assert_sweep("H", H_TUBE, H_WANT, true);
}

#[test]
fn check_bar_verdicts_deuterium_tube() {
    assert_sweep("D", D_TUBE, D_WANT, true);
}

#[test]
fn check_bar_verdicts_mixed_tube() {
    assert_sweep("H+D 50/50", HD_TUBE, HD_WANT, true);
}

/// A stored map off the true one by `offset_nm` at the sensor centre and by `scale` in dispersion
/// (about the centre): what a bumped or re-aligned instrument looks like.
fn perturbed(truth: &[f64; 4], pixels: usize, offset_nm: f64, scale: f64) -> [f64; 4] {
    let tm = TrueMap::new(truth, pixels).unwrap();
    let centre = tm.nm_at((pixels as f64 - 1.0) / 2.0);
    let mut c = truth.map(|x| x * (1.0 + scale));
    c[0] += offset_nm - scale * centre;
    c
}

/// Largest (a − b) over 17 points across the sensor, nm (the same sampling lib's drift uses).
fn max_diff_nm(a: &[f64; 4], b: &[f64; 4], pixels: usize) -> f64 {
    let (ma, mb) = (
        TrueMap::new(a, pixels).unwrap(),
        TrueMap::new(b, pixels).unwrap(),
    );
    (0..=16)
        .map(|i| {
            let p = (pixels as f64 - 1.0) * i as f64 / 16.0;
            ma.nm_at(p) - mb.nm_at(p)
        })
        .fold(0.0, |w: f64, d| if d.abs() > w.abs() { d } else { w })
}

/// Calibrate mode from a stored map several nm and up to 2 % off: the fitted map lies within 0.1 px
/// of the truth at the lines (SNR ≥ 20), the reported drift matches the true one, the drift fails the
/// tube-independent check, and the isotope is reported not determinable.
#[test]
fn check_bar_calibrate_from_an_offset_map() {
    calibrate_sweep(true);
}

fn calibrate_sweep(strict: bool) {
    let mut out = String::new();
    let mut known = Vec::new();
    let offsets = [(-6.0, -0.02), (-3.0, 0.01), (2.0, -0.01), (6.0, 0.02)];
    row!(
        out,
        "calibrate mode, H tube, stored map off by (nm at centre, dispersion):"
    );
    row!(
        out,
        "{:>4} {:>5} {:>5} {:>14} {:>6} {:>12} {:>12} {:>14}",
        "map",
        "SNR",
        "FWHM",
        "offset",
        "found",
        "max rms px",
        "rms px ≥20",
        "max drift err"
    );
    let mut bad = Vec::new();
    for (mi, &(pixels, map)) in MAPS.iter().enumerate() {
        for &snr in &[20.0, 80.0] {
            for &fwhm in &FWHMS {
                for &(o, s) in &offsets {
                    let (mut found, mut worst_all, mut worst_strong, mut worst_drift) =
                        (0, 0.0f64, 0.0f64, 0.0f64);
                    for &seed in &SEEDS[..2] {
                        let c = Case {
                            pixels,
                            map,
                            fwhm_px: fwhm,
                            mix: vec![(Nucleus::H1, 1.0)],
                            foreign: Vec::new(),
                            snr,
                            rank: 2,
                            seed,
                        };
                        let stored = perturbed(&map, pixels, o, s);
                        let inst = instrument(&c, stored, 0.003, 2);
                        let tag =
                            format!("map {mi} SNR {snr} FWHM {fwhm} off ({o}, {s}) seed {seed}");
                        let (r, drawn) = run(
                            &c,
                            &inst,
                            profile::HYDROGEN,
                            Mode::Calibrate,
                            &format!("calibrate {tag}"),
                        );
                        if r.map.is_none() || r.lines.len() < 3 {
                            bad.push(format!("{tag}: no calibration: {:?}", r.reasons));
                            continue;
                        }
                        let (all, strong, _) = map_error_px(&r, &drawn, &map, pixels);
                        let true_drift = max_diff_nm(&map, &stored, pixels);
                        let drift_err = r
                            .drift_fm
                            .map_or(f64::INFINITY, |d| d as f64 / 1e6 - true_drift);
                        found += 1;
                        worst_all = worst_all.max(all);
                        worst_strong = worst_strong.max(strong);
                        worst_drift = worst_drift.max(drift_err.abs());
                        if strong > 0.1 {
                            known.push(format!(
                                "{tag}: map {strong:.3} px RMS from truth at SNR≥20 lines"
                            ));
                        }
                        if drift_err.abs() > 1.0 {
                            bad.push(format!("{tag}: drift off by {drift_err:.4} nm"));
                        } else if drift_err.abs() > 0.05 {
                            known.push(format!("{tag}: drift off by {drift_err:.4} nm"));
                        }
                        if r.verdict != Verdict::Fail || !has(&r, "instrument-drift") {
                            bad.push(format!("{tag}: {:?} {:?}", r.verdict, r.reasons));
                        }
                        if !has(&r, "isotope-not-determinable") {
                            known.push(format!(
                                "{tag}: isotope claimed from a self-calibration: {:?}",
                                r.shares
                            ));
                        }
                    }
                    row!(
                out,
                        "{mi:>4} {snr:>5} {fwhm:>5} {:>14} {found:>4}/2 {worst_all:>12.4} {worst_strong:>12.4} {worst_drift:>11.4} nm",
                        format!("{o:+} nm {:+}%", s * 100.0)
                    );
                }
            }
        }
    }
    print!("{out}");
    if strict {
        bad.append(&mut known);
    } else if !known.is_empty() {
        println!(
            "{} known lib issues (see the strict test):\n{}",
            known.len(),
            known.join("\n")
        );
    }
    assert!(
        bad.is_empty(),
        "{} problems:\n{}",
        bad.len(),
        bad.join("\n")
    );
}

/// Blind calibration (no starting map) with only Hγ, Hβ, Hα on the sensor plus two strong foreign
/// lines (Hg I 546.07 nm and He I 587.56 nm, NIST ASD strong lines, values from memory): the right
/// lines are identified, the map lies within 0.1 px of the truth at them, and the foreign peaks are
/// listed unexplained with a hint.
#[test]
fn check_bar_blind_three_balmer_lines_and_two_foreign_peaks() {
    blind_sweep(false, &[(546.074, 2.0), (587.562, 1.0)]);
}

/// The same with both foreign lines brighter than Hα (20× and 15× the Hγ peak; Hα is a few times
/// Hγ): the strongest peaks a blind search starts from are then not the lamp's own, and the right
/// lines must still be found from the weaker Balmer peaks.
#[test]
fn check_bar_blind_foreign_peaks_brighter_than_the_balmer_lines() {
    blind_sweep(false, &[(546.074, 20.0), (587.562, 15.0)]);
}

#[test]
#[ignore = "the issue-4 bar, noise-limited: at lib df07a0e one cell was 0.1005 px from truth (SNR 20, FWHM 8 px, 3 lines); at 0014cf1 every cell is within 0.0996 px"]
fn check_bar_strict_blind_three_balmer_lines_and_two_foreign_peaks() {
    blind_sweep(true, &[(546.074, 2.0), (587.562, 1.0)]);
}

/// `foreign`: (vacuum nm, peak relative to Hγ's) of each foreign line.
fn blind_sweep(strict: bool, foreign: &[(f64, f64)]) {
    let mut out = String::new();
    let mut known = Vec::new();
    let maps: [(usize, [f64; 4]); 3] = [
        (2048, [418.0, 0.14, -2e-6, 0.0]),
        (2048, [421.0, 0.135, -1.5e-6, 0.0]),
        (3000, [424.0, 0.09, -5e-7, 0.0]),
    ];
    row!(
        out,
        "blind calibration: 3 Balmer lines + Hg 546.07 ({}× Hγ peak) + He 587.56 ({}× Hγ peak)",
        foreign.first().map_or(0.0, |f| f.1),
        foreign.get(1).map_or(0.0, |f| f.1)
    );
    row!(
        out,
        "{:>4} {:>5} {:>5} {:>9} {:>12} {:>10}",
        "map",
        "SNR",
        "FWHM",
        "right",
        "max rms px",
        "hints"
    );
    let mut bad = Vec::new();
    for (mi, &(pixels, map)) in maps.iter().enumerate() {
        for &snr in &SNRS {
            for &fwhm in &FWHMS {
                let (mut right, mut worst, mut hints) = (0, 0.0f64, 0);
                for &seed in &SEEDS {
                    let c = Case {
                        pixels,
                        map,
                        fwhm_px: fwhm,
                        mix: vec![(Nucleus::H1, 1.0)],
                        foreign: foreign.to_vec(),
                        snr,
                        rank: 2,
                        seed,
                    };
                    // The stored map only bounds the catalogue in blind mode: give a poor one.
                    let stored = perturbed(&map, pixels, 7.0, 0.03);
                    let inst = instrument(&c, stored, 0.003, 2);
                    let tag = format!("map {mi} SNR {snr} FWHM {fwhm} seed {seed}");
                    let (r, drawn) = run(
                        &c,
                        &inst,
                        profile::HYDROGEN,
                        Mode::CalibrateBlind,
                        &format!("blind {tag}"),
                    );
                    let balmer: Vec<u8> = r
                        .lines
                        .iter()
                        .filter(|l| l.nucleus == Nucleus::H1 && l.lower == 2)
                        .map(|l| l.upper)
                        .collect();
                    // Where 2 × (Dα–Hα separation) ≥ FWHM lib fits the α pair even on a blind map: a lib
                    // issue (the isotope shift is not separable from the scale there), kept apart.
                    let tm = TrueMap::new(&map, pixels).unwrap();
                    let alpha_px = tm.px_at(656.28, pixels, 0.0).unwrap();
                    let known_here = 2.0 * 0.179 / tm.slope_nm_per_px(alpha_px) >= fwhm;
                    if r.map.is_none() || balmer != [5, 4, 3] {
                        (if known_here { &mut known } else { &mut bad })
                            .push(format!("{tag}: lines {balmer:?}, reasons {:?}", r.reasons));
                        continue;
                    }
                    let (e, _, _) = map_error_px(&r, &drawn, &map, pixels);
                    worst = worst.max(e);
                    let h = r.unexplained.iter().filter(|u| u.hint.is_some()).count();
                    hints += h.min(2);
                    if e > 0.1 {
                        known.push(format!("{tag}: map {e:.3} px RMS from truth"));
                    } else {
                        right += 1;
                    }
                    if h < 2 {
                        (if known_here { &mut known } else { &mut bad }).push(format!(
                            "{tag}: foreign peaks without hints: {:?}",
                            r.unexplained
                        ));
                    }
                }
                row!(
                    out,
                    "{mi:>4} {snr:>5} {fwhm:>5} {right:>7}/3 {worst:>12.4} {hints:>8}/6"
                );
            }
        }
    }
    print!("{out}");
    if strict {
        bad.append(&mut known);
    } else if !known.is_empty() {
        println!(
            "{} known lib issues (see the strict test):\n{}",
            known.len(),
            known.join("\n")
        );
    }
    assert!(
        bad.is_empty(),
        "{} problems:\n{}",
        bad.len(),
        bad.join("\n")
    );
}

/// The D fraction when Dα and Hα are (partly) resolved: high-resolution instruments with a 2.5–3 px
/// FWHM against 2.6–3.8 px of Dα–Hα separation; within 3 percentage points of the drawn mix.
#[test]
fn check_bar_deuterium_fraction_when_resolved() {
    fraction_sweep(true);
}

/// Without `strict`: the nearly pure tubes (D 5 % and 95 %) within 3 points; with it, every mix.
fn fraction_sweep(strict: bool) {
    let mut out = String::new();
    let mut known = Vec::new();
    // (pixels, map, FWHM px, SNR-setting transition rank, fewest lines)
    let setups: [(usize, [f64; 4], f64, usize, u8); 3] = [
        (4096, [400.0, 0.07, 0.0, 0.0], 2.5, 2, 3),
        (4096, [470.0, 0.047, 0.0, 0.0], 2.5, 1, 2),
        (4096, [470.0, 0.047, 0.0, 0.0], 3.0, 1, 2),
    ];
    let fractions = [0.05, 0.25, 0.5, 0.75, 0.95];
    row!(
        out,
        "D fraction, verify mode, resolved α pair: |measured − drawn| in percentage points"
    );
    row!(
        out,
        "{:>5} {:>6} {:>5} {:>6} {:>5} {:>9} {:>9} {:>9}",
        "setup",
        "sep/FW",
        "SNR",
        "D",
        "n",
        "max err",
        "rms err",
        "mean σ"
    );
    let mut bad = Vec::new();
    for (si, &(pixels, map, fwhm, rank, min_lines)) in setups.iter().enumerate() {
        let tm = TrueMap::new(&map, pixels).unwrap();
        let sep_px = 0.179 / tm.slope_nm_per_px(3500.0);
        let p = TubeProfile {
            min_lines,
            ..profile::HYDROGEN_DEUTERIUM
        };
        for &snr in &SNRS {
            for &f in &fractions {
                let (mut worst, mut sum2, mut sig, mut n) = (0.0f64, 0.0, 0.0, 0);
                for &seed in &SEEDS {
                    let c = Case {
                        pixels,
                        map,
                        fwhm_px: fwhm,
                        mix: vec![(Nucleus::H1, 1.0 - f), (Nucleus::H2, f)],
                        foreign: Vec::new(),
                        snr,
                        rank,
                        seed,
                    };
                    let inst = instrument(&c, map, 0.003, 2);
                    let tag = format!("setup {si} SNR {snr} D {f} seed {seed}");
                    let (r, _) = run(&c, &inst, p, Mode::Verify, &format!("fraction {tag}"));
                    let known_here = (0.1..=0.9).contains(&f);
                    let Some(d) = share(&r, Nucleus::H2) else {
                        (if known_here { &mut known } else { &mut bad })
                            .push(format!("{tag}: no D fraction: {:?}", r.reasons));
                        continue;
                    };
                    let e = (d - f) * 100.0;
                    worst = worst.max(e.abs());
                    sum2 += e * e;
                    n += 1;
                    sig += r
                        .shares
                        .iter()
                        .find(|s| s.nucleus == Nucleus::H2)
                        .and_then(|s| s.sigma_ppm)
                        .unwrap_or(0) as f64
                        / 1e4;
                    if e.abs() > 3.0 {
                        (if known_here { &mut known } else { &mut bad })
                            .push(format!("{tag}: D {d:.4}, {e:+.2} pp"));
                    }
                }
                let rms = (sum2 / n.max(1) as f64).sqrt();
                row!(
                    out,
                    "{si:>5} {:>6.2} {snr:>5} {f:>6} {n:>3}/3 {worst:>7.2}pp {rms:>7.2}pp {:>7.2}pp",
                    sep_px / fwhm,
                    sig / n.max(1) as f64
                );
            }
        }
    }
    print!("{out}");
    if strict {
        bad.append(&mut known);
    } else if !known.is_empty() {
        println!(
            "{} known lib issues (see the strict test):\n{}",
            known.len(),
            known.join("\n")
        );
    }
    assert!(
        bad.is_empty(),
        "{} problems:\n{}",
        bad.len(),
        bad.join("\n")
    );
}

/// Degenerate cases say so: a scale fitted to the tube itself (calibrate or blind on a pure D tube),
/// and a stored scale too imprecise for the 2.7e-4 isotope shift (σ 0.2 nm), report "isotope not
/// determinable" with no fraction; the deuterium profile, which needs the isotope, is inconclusive.
#[test]
fn check_bar_degenerate_cases_report_isotope_not_determinable() {
    degenerate_sweep(true);
}

/// Without `strict`: the instruments where the α pair is unresolved (2·separation < FWHM); with it,
/// also the resolving ones.
fn degenerate_sweep(strict: bool) {
    let mut out = String::new();
    let mut known = Vec::new();
    let mut bad = Vec::new();
    let mut n = 0;
    let cases: Vec<(usize, [f64; 4], f64)> = MAPS
        .iter()
        .map(|&(p, m)| (p, m, 3.0))
        .chain([(4096, [400.0, 0.07, 0.0, 0.0], 2.5)])
        .collect();
    for (pixels, map, fwhm) in cases {
        let sep_px = 0.179
            / TrueMap::new(&map, pixels)
                .unwrap()
                .slope_nm_per_px(pixels as f64 * 0.9);
        let resolving = 2.0 * sep_px >= fwhm;
        for &seed in &SEEDS {
            let c = Case {
                pixels,
                map,
                fwhm_px: fwhm,
                mix: vec![(Nucleus::H2, 1.0)],
                foreign: Vec::new(),
                snr: 40.0,
                rank: 2,
                seed,
            };
            let nominal = perturbed(&map, pixels, 2.0, 0.005);
            let runs = [
                (
                    "calibrate",
                    instrument(&c, nominal, 0.003, 2),
                    Mode::Calibrate,
                ),
                (
                    "blind",
                    instrument(&c, nominal, 0.003, 2),
                    Mode::CalibrateBlind,
                ),
                ("imprecise map", instrument(&c, map, 0.2, 2), Mode::Verify),
            ];
            for (what, inst, mode) in runs {
                for (pname, p) in [
                    ("deuterium", profile::DEUTERIUM),
                    ("hydrogen", profile::HYDROGEN),
                ] {
                    n += 1;
                    let tag = format!("{pixels} px FWHM {fwhm} seed {seed} {what} profile {pname}");
                    let (r, _) = run(&c, &inst, p, mode, &format!("degenerate {tag}"));
                    let known_here = resolving;
                    if !has(&r, "isotope-not-determinable") {
                        (if known_here { &mut known } else { &mut bad }).push(format!(
                            "{tag}: no isotope-not-determinable; {:?} shares {:?}",
                            r.reasons, r.shares
                        ));
                    }
                    if r.shares
                        .iter()
                        .any(|s| s.nucleus.z() == 1 && s.share_ppm.is_some())
                    {
                        (if known_here { &mut known } else { &mut bad })
                            .push(format!("{tag}: a fraction was claimed: {:?}", r.shares));
                    }
                    if pname == "deuterium" && r.verdict == Verdict::Pass {
                        (if known_here { &mut known } else { &mut bad }).push(format!(
                            "{tag}: passes the deuterium profile without an isotope"
                        ));
                    }
                }
            }
        }
    }
    row!(out, "degenerate cases: {n} checks, {} problems on unresolving instruments, {} on resolving ones", bad.len(), known.len());
    print!("{out}");
    if strict {
        bad.append(&mut known);
    } else if !known.is_empty() {
        println!(
            "{} known lib issues (see the strict test):\n{}",
            known.len(),
            known.join("\n")
        );
    }
    assert!(
        bad.is_empty(),
        "{} problems:\n{}",
        bad.len(),
        bad.join("\n")
    );
}
