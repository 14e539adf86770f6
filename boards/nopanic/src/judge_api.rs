//! Public entry points of `glowcheck::judge` and `glowcheck::matching` that take plain inputs.
//!
//! Not yet covered: `matching::{assign, catalogue::build, feature::group, feature::settle,
//! isotope::share_by_profile}`, which need a full frame's catalogue and features; they join when the
//! board runs the whole pipeline (`lib::check`).

use glowcheck::judge::{Reason, Report, TubeProfile, BUNDLED};
use glowcheck::matching::{catalogue, feature, isotope, markers};
use glowcheck::predict::Nucleus;

use crate::probe::{keep, keep_b, keep_error, opaque};

/// Inputs read opaquely.
#[derive(Clone, Copy)]
struct Inputs {
    profile_index: u8,
    lower: u8,
    upper: u8,
    wavelength_fm: i64,
    window_fm: i64,
    prior: (u8, u16),
    reading: (i64, u64, i64, i64),
    systematic_fm: u64,
    dim: (u32, u32),
}

static INPUTS: Inputs = Inputs {
    profile_index: 0,
    lower: 2,
    upper: 3,
    wavelength_fm: 587_561_000,
    window_fm: 200_000,
    prior: (1, 150),
    reading: (656_200_000, 2_000, 656_279_000, 656_100_000),
    systematic_fm: 5_000,
    dim: (300, 2_560),
};

/// Calls each entry point.
// Kept out of line so each module's locals get their own stack frame, not one summed frame in main.
#[inline(never)]
pub fn run() {
    let i = opaque(&INPUTS);

    keep(u64::from(catalogue::kramers_strength(i.lower, i.upper)));
    keep(markers::nearest_marker(i.wavelength_fm, i.window_fm).map_or(0, u64::from));
    let nucleus = Nucleus::ALL
        .get(usize::from(i.prior.0))
        .copied()
        .unwrap_or(Nucleus::H1);
    let priors = [(Nucleus::H1, 1000 - i.prior.1), (nucleus, i.prior.1)];
    keep(u64::from(feature::prior_share(&priors, nucleus)));
    let (measured_fm, sigma_fm, a_fm, b_fm) = i.reading;
    let readings = [isotope::BlendReading {
        measured_fm,
        sigma_fm,
        a_fm,
        b_fm,
    }];
    if let Some(s) = isotope::share_by_position(&readings, i.systematic_fm) {
        keep(s.share_b_ppm as u64 ^ u64::from(s.sigma_ppm));
    }

    let name = BUNDLED
        .get(usize::from(i.profile_index))
        .map_or("", |(n, _)| *n);
    if let Some(p) = TubeProfile::bundled(name) {
        for s in p.expected() {
            keep(u64::from(s.min_share_permille) ^ u64::from(s.max_share_permille));
        }
        keep(p.primary().map_or(0, |n| u64::from(n.z())));
    }

    let mut report = Report::new();
    let (snr_q8, min_q8) = i.dim;
    let reason = Reason::TooDim { snr_q8, min_q8 };
    keep(reason.code().len() as u64);
    keep(reason.severity() as u64);
    keep_error(reason);
    report.note(reason);
    report.note(Reason::NoLines);
    report.decide();
    keep(report.verdict.as_str().len() as u64);
    keep_b(report.truncated);
}
