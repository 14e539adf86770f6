//! Every public entry point of `glowcheck::find`: the whole stage and its public building blocks.

use glowcheck::find::{
    baseline, detect, find_peaks, fit, mask::LineMask, math, noise, FindConfig, FindWork, PeakList,
    SCRATCH_PER_PIXEL,
};
use heapless::Vec;

use crate::condition_api::{Conditioned, PIXELS};
use crate::probe::{keep, keep_b, keep_error, keep_i, opaque};

/// Knobs read opaquely.
#[derive(Clone, Copy)]
struct Knobs {
    config: FindConfig,
    half: usize,
    reach: usize,
    mark: (usize, usize),
    sigma_q16: (i64, i64, i64),
    wide: i128,
    den: i128,
}

static KNOBS: Knobs = Knobs {
    config: FindConfig::DEFAULT,
    half: 24,
    reach: 48,
    mark: (40, 6),
    sigma_q16: (2 << 16, 1 << 16, 5 << 16),
    wide: 1 << 80,
    den: 3,
};

/// Calls each entry point on the conditioned frame; returns the peaks for [`crate::calibrate_api`].
// Kept out of line so each module's locals get their own stack frame, not one summed frame in main.
#[inline(never)]
pub fn run(c: &Conditioned) -> PeakList {
    let k = opaque(&KNOBS);
    let mut cfg = k.config;
    cfg.shot_var_per_unit_q16 = c.shot_var_per_unit_q16;

    let mut scratch = [0i32; SCRATCH_PER_PIXEL * PIXELS];
    let mut peaks = PeakList::new();
    match find_peaks(
        &cfg,
        &c.values,
        &c.flags,
        &mut scratch,
        &mut FindWork::new(),
        &mut peaks,
    ) {
        Ok(r) => {
            keep(u64::from(r.pixels) ^ u64::from(r.untrusted_pixels) ^ u64::from(r.candidates));
            keep(u64::from(r.noise_floor_q8) ^ u64::from(r.noise_typical_q8));
            keep(u64::from(r.shot_var_per_unit_q16));
            keep_b(r.shot_from_data);
            keep_b(r.truncated);
        }
        Err(e) => keep_error(e),
    }
    for p in peaks.iter() {
        keep(p.center_px_q16 as u64 ^ u64::from(p.center_sigma_px_q16) ^ u64::from(p.fwhm_px_q16));
        keep(p.height as u64 ^ p.area as u64 ^ u64::from(p.snr_q8));
        keep_b(p.saturated ^ p.blended);
    }

    building_blocks(c, &k);
    peaks
}

/// The stage's public parts, called one by one as a caller composing its own search would.
fn building_blocks(c: &Conditioned, k: &Knobs) {
    let mut mask = LineMask::new();
    mask.mark(k.mark.0, k.mark.1);
    keep_b(mask.is_set(k.mark.0));

    let nm = noise::estimate(&c.values, &c.flags, &mask, c.shot_var_per_unit_q16)
        .unwrap_or(noise::fallback(c.shot_var_per_unit_q16));
    let mut blocks = noise::NoiseBlocks::measure(&c.values, &c.flags, &LineMask::new());
    blocks.remeasure_masked(&c.values, &c.flags, &mask);
    let mut cleared = mask.clone();
    cleared.clear();
    let mut fresh = noise::NoiseBlocks::new();
    fresh.measure_in_place(&c.values, &c.flags, &cleared);
    keep_b(fresh.model(None).is_some());
    let again = blocks
        .model(c.shot_var_per_unit_q16)
        .unwrap_or(noise::fallback(None));
    keep_b(noise::within_eighth(&nm, &again));
    keep(mask.word(k.mark.0 / 64));
    keep(nm.var_q8(i64::from(k.config.fwhm_max_px_q8)) as u64);
    keep(nm.sigma(i64::from(k.config.fwhm_min_px_q8)) as u64);
    keep(nm.floor_var_q8 as u64 ^ u64::from(nm.shot_var_per_unit_q16));
    keep_b(nm.shot_from_data);

    let mut base = [0i32; PIXELS];
    let mut tmp = [0i32; PIXELS];
    baseline::estimate_baseline(&c.values, &c.flags, &nm, k.half, &mut base, &mut tmp);
    keep(baseline::coarse_cells(k.half) as u64);
    detect::smooth_residual(&c.values, &base, &mut tmp);

    let mut cands: Vec<detect::Candidate, { detect::MAX_CANDIDATES }> = Vec::new();
    keep_b(detect::find_candidates(
        &tmp, &base, &nm, &k.config, k.reach, &mut cands,
    ));
    let extra = detect::Candidate {
        pos: k.mark.0,
        strength: i32::from(k.config.threshold_sigma_q8),
    };
    keep_b(detect::push_strongest(&mut cands, extra));
    detect::thin(&mut cands, k.config.min_separation_px_q8);

    let data = fit::FitData {
        frame: &c.values,
        base: &base,
        flag: &c.flags,
        noise: &nm,
        neighbours: [None, None],
    };
    let (s0, s_min, s_max) = k.sigma_q16;
    for cand in cands.iter() {
        let f = fit::fit_line(&data, cand.pos, s0, s_min, s_max, k.reach);
        keep(f.center_q16 as u64 ^ f.center_sigma_q16 as u64 ^ f.sigma_q16 as u64);
        keep(f.height_q8 as u64 ^ f.lo as u64 ^ f.hi as u64);
        keep_b(f.converged);
        keep(u64::from(f.steps));
        keep(fit::area(&f) as u64);
        let again = fit::refit_line(&data, &f, s_min, s_max, k.reach);
        keep(again.center_q16 as u64 ^ again.center_sigma_q16 as u64);
        keep(fit::exp_neg_q14(k.mark.1 as i32) as u64);
        let mut scratch = fit::FitScratch::new();
        let g = fit::fit_line_in(&data, cand.pos, s0, s_min, s_max, k.reach, &mut scratch);
        let h = fit::refit_line_in(&data, &g, s_min, s_max, k.reach, &mut scratch);
        keep(g.center_q16 as u64 ^ h.center_q16 as u64);
    }

    keep(math::exp_neg_q16(s0) as u64);
    keep(math::mul_u32_wide(k.wide as u32, (k.wide >> 32) as u32));
    keep(math::mul_i32_wide(k.wide as i32, (k.wide >> 32) as i32) as u64);
    keep_b(math::above_sigmas(s0, s_min, s_max));
    keep_i(math::isqrt_u128(k.wide as u128) as i128);
    keep(math::isqrt_i64(s_max) as u64);
    keep_i(math::div_round_i128(k.wide, k.den));
    keep(math::div_round_i64(s0, k.den as i64) as u64);
    keep(math::clamp_i64(k.wide) as u64);
    keep(math::clamp_i32(s_max) as u64);
    let r = math::Recip::new(k.den as i64).unwrap_or(math::Recip::ONE);
    keep(r.scale(s0, (s_min & 63) as i32 - 32).unwrap_or(0) as u64);
}
