//! `glowcheck::check`: the whole pipeline behind `Checker::new` and `Checker::check`, on a 256-pixel
//! frame whose content, map, mode and profile the optimiser cannot see.

use glowcheck::calibrate::WavelengthMap;
use glowcheck::check::{Buffers, Checker, Config, StoredMap};
use glowcheck::condition::{ConditionConfig, FrameSum};
use glowcheck::find::FindConfig;
use glowcheck::judge::{Mode, Report, BUNDLED};
use glowcheck::predict::Air;

use crate::probe::{keep, keep_b, keep_error, opaque};

const N: usize = 256;

/// Inputs read opaquely.
#[derive(Clone, Copy)]
struct Inputs {
    frame: [u16; N],
    coeff_fm: [i64; 4],
    sigma_fm: u32,
    mode: u8,
    profile: u8,
    degree: u8,
    fwhm_q8: u16,
}

const fn demo_frame() -> [u16; N] {
    let mut f = [300u16; N];
    // Three bright lines and a little structure.
    let mut i = 0;
    while i < N {
        let d = [i as i32 - 40, i as i32 - 128, i as i32 - 200];
        let mut k = 0;
        while k < 3 {
            let x = d[k].unsigned_abs();
            if x < 4 {
                f[i] += [2400u16, 1500, 420, 60][x as usize];
            }
            k += 1;
        }
        f[i] += (i % 5) as u16;
        i += 1;
    }
    f
}

static INPUTS: Inputs = Inputs {
    frame: demo_frame(),
    coeff_fm: [540_000_000, 160_000_000, -1_000_000, 0],
    sigma_fm: 5_000,
    mode: 1,
    profile: 0,
    degree: 2,
    fwhm_q8: 768,
};

/// Runs one check with every input opaque.
#[inline(never)]
pub fn run() {
    let i = opaque(&INPUTS);
    let map = match WavelengthMap::new(N as u16, i.degree, i.coeff_fm) {
        Ok(m) => m,
        Err(e) => {
            keep_error(e);
            return;
        }
    };
    let mode = match i.mode % 3 {
        0 => Mode::Verify,
        1 => Mode::Calibrate,
        _ => Mode::CalibrateBlind,
    };
    let profile = BUNDLED
        .get(usize::from(i.profile) % BUNDLED.len())
        .map_or(BUNDLED[0].1, |p| p.1);
    let cfg = Config {
        pixels: N as u16,
        condition: ConditionConfig::new(4095, 10_000),
        find: FindConfig::DEFAULT,
        stored: StoredMap {
            map,
            sigma_fm: i.sigma_fm,
        },
        mode,
        degree: i.degree,
        air: Air::Standard,
        line_fwhm_px_q8: i.fwhm_q8,
        profile,
    };
    let checker = match Checker::new(cfg) {
        Ok(c) => c,
        Err(e) => {
            keep_error(e);
            return;
        }
    };
    keep(checker.catalogue().len() as u64);
    let mut buffers = Buffers::<N>::new();
    let mut report = Report::new();
    let Ok(signal) = FrameSum::single(&i.frame) else {
        return;
    };
    match checker.check(signal, None, None, buffers.workspace(N), &mut report) {
        Ok(()) => {
            keep(report.verdict.as_str().len() as u64);
            keep(report.lines.len() as u64);
            keep(report.unexplained.len() as u64);
            keep_b(report.truncated);
            for r in &report.reasons {
                keep_error(r);
                keep(r.code().len() as u64);
            }
            for l in &report.lines {
                keep(l.error_fm() as u64);
            }
        }
        Err(e) => keep_error(e),
    }
    // The traced form, its stages kept (the closure's argument is opaque to the optimiser).
    let mut stages = 0u64;
    let traced = checker.check_traced(signal, None, None, buffers.workspace(N), &mut report, |s| {
        stages = stages.wrapping_mul(5).wrapping_add(s as u64)
    });
    keep(stages);
    if let Err(e) = traced {
        keep_error(e);
    }
    // In place: a blank checker refuses, configure predicts into it.
    let mut again = Checker::blank(checker.config().clone());
    if let Err(e) = again.check(signal, None, None, buffers.workspace(N), &mut report) {
        keep_error(e);
    }
    match again.configure(checker.config().clone()) {
        Ok(()) => keep(again.catalogue().len() as u64),
        Err(e) => keep_error(e),
    }
}
