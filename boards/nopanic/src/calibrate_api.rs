//! Every public entry point of `glowcheck::calibrate`, on the found peaks and predicted lines.

use glowcheck::calibrate::{
    fit_map, identify, identify_with, FitPoint, IdentifyConfig, IdentifyWork, ReferenceLine,
    WavelengthMap, MAX_REFERENCE_LINES,
};
use glowcheck::find::Peak;
use glowcheck::predict::{Air, Lines, Nucleus};
use heapless::Vec;

use crate::condition_api::PIXELS;
use crate::probe::{keep, keep_error, opaque};

/// Map settings read opaquely.
#[derive(Clone, Copy)]
struct Settings {
    degree: u8,
    coeff_fm: [i64; 4],
    center_px_q16: i32,
    half_width_px_q16: i32,
    probe_px_q16: i32,
    probe_fm: i64,
    window_fm: (u64, u64),
}

static SETTINGS: Settings = Settings {
    degree: 2,
    coeff_fm: [500_000_000, 150_000_000, -2_000_000, 0],
    center_px_q16: 64 << 16,
    half_width_px_q16: 64 << 16,
    probe_px_q16: 40 << 16,
    probe_fm: 486_000_000,
    window_fm: (380_000_000, 700_000_000),
};

/// Calls each entry point.
// Kept out of line so each module's locals get their own stack frame, not one summed frame in main.
#[inline(never)]
pub fn run(peaks: &[Peak]) {
    let s = opaque(&SETTINGS);
    let pixels = PIXELS as u16;

    let map = match WavelengthMap::new(pixels, s.degree, s.coeff_fm) {
        Ok(m) => Some(m),
        Err(e) => {
            keep_error(e);
            None
        }
    };
    match WavelengthMap::with_frame(
        s.center_px_q16,
        s.half_width_px_q16,
        s.degree,
        s.coeff_fm,
        pixels,
    ) {
        Ok(m) => probe_map(&m, &s),
        Err(e) => keep_error(e),
    }

    // Reference lines from the predictor, as the pipeline builds them.
    let mut lines: Vec<ReferenceLine, MAX_REFERENCE_LINES> = Vec::new();
    if let Ok(found) = Lines::new(Nucleus::H1, s.window_fm.0, s.window_fm.1, &Air::Standard) {
        for line in found.flatten() {
            let fm = line.air_fm.unwrap_or(line.vacuum_fm);
            let strength = u32::from(line.upper);
            let _ = lines.push(ReferenceLine {
                wavelength_fm: i64::try_from(fm).unwrap_or(i64::MAX),
                strength,
            });
        }
    }

    let cfg = IdentifyConfig::new(pixels, s.degree, map);
    match identify(peaks, &lines, &cfg) {
        Ok(id) => {
            keep(id.fit.rms_residual_fm ^ u64::from(id.fit.chi2_per_dof_q8));
            keep(u64::from(id.fit.points) ^ id.pairs.len() as u64);
            probe_map(&id.fit.map, &s);
        }
        Err(e) => keep_error(e),
    }
    let mut work = IdentifyWork::new();
    match identify_with(peaks, &lines, &cfg, &mut work) {
        Ok(id) => keep(id.fit.rms_residual_fm ^ id.pairs.len() as u64),
        Err(e) => keep_error(e),
    }

    let mut points: Vec<FitPoint, 8> = Vec::new();
    for (p, r) in peaks.iter().zip(lines.iter()) {
        let _ = points.push(FitPoint {
            center_px_q16: p.center_px_q16,
            sigma_px_q16: p.center_sigma_px_q16,
            wavelength_fm: r.wavelength_fm,
        });
    }
    match fit_map(&points, s.degree, pixels) {
        Ok(f) => {
            keep(f.sigma_fm_at(s.probe_px_q16));
            keep(f.rms_residual_fm);
            probe_map(&f.map, &s);
        }
        Err(e) => keep_error(e),
    }
}

/// Evaluates a map both ways.
fn probe_map(m: &WavelengthMap, s: &Settings) {
    keep(m.x_q30(s.probe_px_q16) as u64);
    match m.wavelength_fm(s.probe_px_q16) {
        Ok(fm) => keep(fm as u64),
        Err(e) => keep_error(e),
    }
    match m.slope_fm_per_px_q16(s.probe_px_q16) {
        Ok(v) => keep(v as u64),
        Err(e) => keep_error(e),
    }
    match m.pixel_q16(s.probe_fm) {
        Ok(p) => keep(p as u64),
        Err(e) => keep_error(e),
    }
}
