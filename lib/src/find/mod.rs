//! Peak finding: baseline removal, noise estimate, detection, sub-pixel centroids.
//!
//! Turns a conditioned frame into a list of lines with centres good to a small fraction of a pixel:
//! 1. [`noise`]: a noise model `floor + κ·level` estimated from the frame's second differences.
//! 2. [`baseline`]: continuum and stray light removed by iterated clipped smoothing of 16-px block
//!    means, interpolated back to the pixels, O(N).
//! 3. [`detect`]: local maxima of the smoothed residual above a σ-scaled threshold, with prominence and
//!    minimum separation.
//! 4. [`fit`]: a noise-weighted (whitened) Gaussian fit per line in 32-bit fixed point, giving centre,
//!    its Fisher σ, FWHM, height, area.
//!
//! Every per-pixel pass runs in 32-bit arithmetic on ADC frames (values within ±2^23), and a clean
//! frame is read once for its noise blocks, the baseline's block levels and its range: the M0 build
//! spends ~270 instructions per pixel on a 2048-px frame of a dozen lines, a third of them in the
//! per-line fits (`bash boards/measure.sh` prints the pieces as `find_parts`).
//!
//! # Scales
//! Centres and widths are px in Q16 (pixel 0 = first value, pixel i spans i − 0.5 … i + 0.5); heights and
//! areas are in the frame's own units (Q4 counts after [`condition`](crate::condition), so divide by 16
//! for counts); SNR is Q8.
//!
//! # Usage
//! ```
//! use glowcheck::find::{find_peaks, FindConfig, FindWork, PeakList, SCRATCH_PER_PIXEL};
//!
//! // A conditioned frame (frame units) with one line near pixel 40 on a sloping continuum.
//! let mut frame = [0i32; 128];
//! for (i, v) in frame.iter_mut().enumerate() {
//!     let x = i as i32 - 40;
//!     *v = 2000 + 3 * i as i32 + [4000, 2500, 700, 80, 5][x.unsigned_abs().min(4) as usize];
//!     *v += [3, -5, 2, 0, -2, 4, -3][i % 7]; // a little noise
//! }
//! let flags = [0u8; 128];
//! let mut scratch = [0i32; SCRATCH_PER_PIXEL * 128];
//! let mut work = FindWork::new(); // ≈ 8 KiB: a `static` on a microcontroller
//! let mut peaks = PeakList::new();
//! let report =
//!     find_peaks(&FindConfig::DEFAULT, &frame, &flags, &mut scratch, &mut work, &mut peaks).unwrap();
//! assert_eq!(peaks.len(), 1);
//! let p = peaks[0];
//! assert!((p.center_px_q16 - (40 << 16)).abs() < 1 << 12); // within 1/16 px
//! assert!(!report.truncated && !p.saturated && !p.blended);
//! ```
//! With [`condition`](crate::condition), pass its output and flags, and set
//! `FindConfig::shot_var_per_unit_q16` from `ConditionedInfo::shot_var_per_unit_q16` when the sensor's
//! conversion gain is known.

pub mod baseline;
pub mod config;
pub mod detect;
pub mod error;
pub mod fit;
pub mod mask;
pub mod math;
pub mod noise;
pub mod peak;
pub mod report;
mod smooth;
#[cfg(test)]
mod testkit;
pub mod work;

pub use config::FindConfig;
pub use error::FindError;
pub use peak::{Peak, PeakList, MAX_PEAKS};
pub use report::FindReport;
pub use work::FindWork;

use crate::condition::{flags, MAX_PIXELS};
use math::{isqrt_i64, FWHM_PER_SIGMA_Q16};

/// Shortest frame peak finding accepts (pixels): the noise estimate needs a dozen second differences.
pub const MIN_PIXELS: usize = 16;
/// Gauss–Newton steps per frame at full allowance (16 lines × 3½ steps): the strongest lines are
/// fitted first; once the budget is spent every further first fit gets [`MIN_STEPS`] and no neighbour
/// refit. The boards' typical frames (a dozen lines) give the same results at 40 as at 64; the
/// centroid bench's frames of 16 strong 2-px lines need ~50 (at 48, 2 of its 320 lines went without
/// a step, reporting their half-width σ). Crowded frames (204 narrow lines, a random walk) spend it
/// all, and wide windows also meet [`STEP_BUDGET_WINDOW_PX`]: their whole checks must stay within
/// 2 × a typical frame's (1.97 × at most now; `bash boards/measure.sh` prints the ratios).
pub const STEP_BUDGET: usize = 56;
/// Window pixels per step the frame's steps may cover in all ([`STEP_BUDGET`] × this is the second
/// budget, in pixel-steps; a step's work is one pass over its window): a step of a 21-px window (an
/// 8-px FWHM line, the widest the centroid bench has) costs 21, so frames of such lines and narrower
/// keep their [`STEP_BUDGET`] steps (1 176 ≥ 56 × 21); only windows wider than 21 px on average — a
/// crowded frame of lines at the widest FWHM, a random walk — run out of it first, at ~35 steps of a
/// 33-px window instead of 56 (each ~7.9 k instructions on the M0).
pub const STEP_BUDGET_WINDOW_PX: usize = 21;
/// Gauss–Newton steps a line gets once the budget is spent: none — it keeps its three-pixel parabola
/// centre and half-width σ, and reports its σ as its centre uncertainty, so the checks downstream
/// weigh it accordingly. Only crowded frames (more than ~25 lines) get there; one step each would cost
/// them several times the budget's work.
pub const MIN_STEPS: usize = 0;
// `find_peaks` passes the remaining budget as each fit's allowance, which is MIN_STEPS past it.
const _: () = assert!(MIN_STEPS == 0);
/// `i32` scratch cells needed per frame pixel (baseline and one work row).
pub const SCRATCH_PER_PIXEL: usize = 2;
/// Fits narrower than this fraction of `FindConfig::fwhm_min_px_q8` (Q8: 5/8) are dropped as single-pixel
/// spikes (a hot pixel left over after dark subtraction, a cosmic-ray hit), not lines. A lone pixel fits
/// at the σ floor, FWHM = ½ of the minimum (1.0 px at the default 2 px), or a little above it in noise
/// (≤ 1.25 px seen); a true 1.5-px line fits at ≥ 1.35 px from SNR 15, a 2-px line at ≥ 1.3 px from SNR 8
/// (measured on `glowsim synth` traces).
pub const SPIKE_FWHM_Q8: u32 = 160;

/// FWHM (px, Q16, saturating) of a fitted σ (px, Q16): ⌊σ · 2.3548⌋ from a split 32-bit product
/// where σ fits `u32` (every fit: σ is bounded by the search), the 64-bit one otherwise.
fn fwhm_of_sigma_q16(sigma_q16: i64) -> u32 {
    let wide = match u32::try_from(sigma_q16) {
        Ok(s) => (math::mul_u32_wide(s, FWHM_PER_SIGMA_Q16 as u32) >> 16) as i64,
        Err(_) => sigma_q16.saturating_mul(FWHM_PER_SIGMA_Q16) >> 16,
    };
    u32::try_from(wide).unwrap_or(u32::MAX)
}

/// Pixels in a fit's window (the pixels each of its steps passes over).
fn fit_width(f: &fit::Fit) -> usize {
    usize::from(f.hi.saturating_sub(f.lo)) + 1
}

/// The steps a fit over a window of `width()` px may take: the steps left, and the pixel-steps left
/// over the width — as `run` takes at most [`fit::ITERATIONS`], no width and no division while that
/// many at the widest window ([`fit::W_MAX`]) fit the pixel-steps left (every frame but crowded ones).
#[inline(always)]
fn step_allowance(budget: usize, px_budget: usize, width: impl FnOnce() -> usize) -> usize {
    if px_budget >= fit::ITERATIONS * fit::W_MAX {
        budget
    } else {
        budget.min(px_budget / width().max(1))
    }
}

/// Finds the peaks of `frame` (any linear units, e.g. [`condition`](crate::condition) output) into `out`,
/// sorted by centre.
///
/// `flags` are the per-pixel marks from conditioning (all 0 if none); `scratch` needs
/// [`SCRATCH_PER_PIXEL`] × `frame.len()` cells; `work` holds the fixed-size tables (nothing in it
/// carries over between calls). `out` is cleared first. When more than [`MAX_PEAKS`]
/// lines qualify, the strongest are kept and the report says `truncated`. Peaks narrower than
/// [`SPIKE_FWHM_Q8`] × the configured minimum FWHM are single-pixel spikes and are left out.
///
/// On return (also `Ok` with no peaks) the first `frame.len()` cells of `scratch` hold the baseline the
/// peaks stand on (frame units), for callers that need the continuum; the rest is work space.
///
/// Loop bounds, with N = `frame.len()` ≤ [`MAX_PIXELS`] and W = FWHMmax ≤ 16 px: one O(N) flag pass
/// and one O(N) read of a clean frame for the noise blocks, block levels and range, or else one range
/// check O(N) and one noise measurement O(N); a second noise measurement over the blocks the line
/// mask touches (≤ O(N)), each followed by a block fit (see [`noise::NoiseBlocks`]); one baseline
/// (one O(N) block pass, or only the partial last block when the levels are in,
/// ≤ [`baseline::ROUNDS`] + 1 rounds over ⌈N/16⌉ block means, one O(N) interpolation); one O(N)
/// smoothing and ≤ 2 detections of O(N) plus ≤ 2 × 4W px of prominence search per local maximum
/// above threshold and ≤ 128 steps per candidate arriving at a full list; masking ≤ 128 candidates
/// × (≤ 2W + 6W + 1 px); thinning ≤ 128² comparisons; ≤ 2 × 64 fits over ≤ 33 px, each ≤ 6
/// Gauss–Newton steps (one pass and a fixed 4 × 4 elimination each, the first with a weight pass),
/// ≤ [`STEP_BUDGET`] + 2 × 64 × [`MIN_STEPS`] steps in all, over ≤ [`STEP_BUDGET`] ×
/// [`STEP_BUDGET_WINDOW_PX`] window pixels (the first fits after a ≤ 2W px width
/// search, the refits only for lines with a neighbour in reach, taking ≤ 2 neighbour profiles out);
/// ≤ 64 × 33 px saturation checks; blend marking ≤ 64 comparisons; one O(N) count of untrusted
/// pixels; insertion sorts of ≤ 64 fits and ≤ 64 peaks and a selection median of ≤ 256 baseline
/// samples (≤ 256² steps, ~800 typical), all without panic paths.
pub fn find_peaks(
    cfg: &FindConfig,
    frame: &[i32],
    flag: &[u8],
    scratch: &mut [i32],
    work: &mut FindWork,
    out: &mut PeakList,
) -> Result<FindReport, FindError> {
    out.clear();
    let n = frame.len();
    if n < MIN_PIXELS {
        return Err(FindError::TooFewPixels);
    }
    if n > MAX_PIXELS {
        return Err(FindError::TooManyPixels);
    }
    if flag.len() != n {
        return Err(FindError::LengthMismatch);
    }
    cfg.check()?;
    let (base, rest) = scratch
        .split_at_mut_checked(n)
        .ok_or(FindError::ScratchTooSmall)?;
    let tmp = rest.get_mut(..n).ok_or(FindError::ScratchTooSmall)?;

    let fwhm_max_px = usize::from(cfg.fwhm_max_px_q8.div_ceil(256));
    // σ limits from the FWHM range: half the narrowest, the widest (Q8 px → Q16 σ).
    let s_min = ((i64::from(cfg.fwhm_min_px_q8) << 24) / FWHM_PER_SIGMA_Q16) >> 1;
    let s_max = (i64::from(cfg.fwhm_max_px_q8) << 24) / FWHM_PER_SIGMA_Q16;
    let shot = cfg.shot_var_per_unit_q16;
    let FindWork {
        blocks,
        cands,
        mask,
        fits,
        fit: scratch_fit,
    } = work;
    mask.clear();
    // A clean frame (no untrusted pixel, values within ±2^23) is read once for the noise blocks,
    // the baseline's block levels (into `tmp`) and its range; any other takes a range pass and the
    // careful block passes. The range serves both 32-bit paths: the noise blocks' (±2^23) and the
    // smoothing's (±2^25).
    let (span, levels_ready) = match blocks.measure_clean(frame, flag, tmp) {
        Some(span) => (span, true),
        None => {
            let span = math::magnitude_span(frame);
            blocks.measure_known(frame, flag, mask, span < 1 << 23);
            (span, false)
        }
    };
    let mut nm = blocks.model(shot).unwrap_or(noise::fallback(shot));
    let mut truncated = false;
    // Two looks: the first finds the lines, the second re-estimates the noise away from them (dense
    // strong lines inflate every block's second differences) and, when that moved the model by more
    // than 1/8, detects again with the better thresholds.
    let narrow = span < detect::NARROW.unsigned_abs();
    // The first measurement saw every flag; the second (masked) one may not.
    let all_trusted = blocks.all_trusted();
    // The baseline and the smoothed residual are taken once: the noise model only sets the
    // baseline's clip level, which the lines clear by far, while detection thresholds follow it.
    // Without the levels the frame is not clean (measure_clean's tests are clean_levels').
    let levels = if levels_ready {
        baseline::Levels::Ready
    } else {
        baseline::Levels::NotClean
    };
    baseline::estimate_baseline_known(frame, flag, &nm, 2 * fwhm_max_px, base, tmp, levels);
    // The baseline is made of means of frame values: within the frame's range.
    detect::smooth_residual_known(frame, base, tmp, narrow);
    // When the looks end after the first, the fits start from the mask's half-width σ (Q16 px,
    // before clamping), kept in `tmp` at each candidate's pixel: the same width search, not repeated.
    let mut sigma_in_tmp = false;
    for look in 0..2 {
        cands.clear();
        truncated = detect::find_candidates(tmp, base, &nm, cfg, 4 * fwhm_max_px, cands);
        if look == 1 || cands.is_empty() {
            break;
        }
        mask.clear();
        let data = fit::FitData {
            frame,
            base,
            flag,
            noise: &nm,
            neighbours: [None, None],
        };
        let mut all_kept = true;
        for c in cands.iter() {
            let raw = half_width_sigma(&data, c.pos, fwhm_max_px);
            let s0 = raw.max(s_min).min(s_max);
            let half = usize::try_from((3 * s0) >> 16).unwrap_or(0) + 2;
            mask.mark(c.pos, half.min(3 * fwhm_max_px));
            // The cell held `c.strength` (put back below if a second look reads the row).
            match (i32::try_from(raw), tmp.get_mut(c.pos)) {
                (Ok(v), Some(cell)) => *cell = v,
                _ => all_kept = false,
            }
        }
        // Only the blocks the lines touch change.
        blocks.remeasure_masked(frame, flag, mask);
        match blocks.model(shot) {
            Some(better) => {
                // A model within 1/8 of the first would move thresholds too little to look again.
                let close = noise::within_eighth(&nm, &better);
                nm = better;
                if close {
                    sigma_in_tmp = all_kept;
                    break;
                }
            }
            None => {
                sigma_in_tmp = all_kept;
                break;
            }
        }
        // The second look reads the smoothed row: a candidate's value there is its strength.
        for c in cands.iter() {
            if let Some(cell) = tmp.get_mut(c.pos) {
                *cell = c.strength;
            }
        }
    }
    let candidates = u16::try_from(cands.len()).unwrap_or(u16::MAX);
    // The mask is free once the looks are done: it holds the kept candidates' pixels.
    detect::thin_marked(cands, cfg.min_separation_px_q8, mask);
    if cands.len() > MAX_PEAKS {
        truncated = true;
        cands.truncate(MAX_PEAKS);
    }

    let mut data = fit::FitData {
        frame,
        base,
        flag,
        noise: &nm,
        neighbours: [None, None],
    };
    // First fits, each line alone, in centre order.
    fits.clear();
    let mut budget = STEP_BUDGET;
    let mut px_budget = STEP_BUDGET * STEP_BUDGET_WINDOW_PX;
    for c in cands.iter() {
        let fresh = || half_width_sigma(&data, c.pos, fwhm_max_px);
        let raw = match tmp.get(c.pos) {
            Some(&v) if sigma_in_tmp => i64::from(v),
            _ => fresh(),
        };
        // Tests hold the kept σ to the search it stands for.
        #[cfg(test)]
        assert_eq!(raw, fresh(), "kept half-width σ at {}", c.pos);
        let s0 = raw.max(s_min).min(s_max);
        // Past the budget a line gets MIN_STEPS = 0 steps: the budget alone is the allowance.
        let steps = step_allowance(budget, px_budget, || 2 * fit::window_half(s0) + 1);
        let f = fit::fit_line_in(&data, c.pos, s0, s_min, s_max, steps, scratch_fit);
        budget = budget.saturating_sub(usize::from(f.steps));
        px_budget = px_budget.saturating_sub(usize::from(f.steps) * fit_width(&f));
        // Capacity: at most MAX_PEAKS candidates remain.
        let _ = fits.push((f, u16::try_from(c.pos).unwrap_or(u16::MAX)));
    }
    crate::sort::merge_sort_by_key(fits, |(f, _)| f.center_q16);
    // Lines whose windows reach a neighbour are fitted again with the neighbours' first fits taken out:
    // the next line's is still in `fits`, the previous line's is kept aside before it is replaced.
    let mut prev_first: Option<fit::Fit> = None;
    for k in 0..fits.len() {
        let Some(&(f, _)) = fits.get(k) else {
            break;
        };
        let next = fits.get(k + 1).map(|(n, _)| *n);
        let touches = |n: &fit::Fit| {
            let reach = (i64::from(f.hi) - i64::from(f.lo)) << 15;
            (n.center_q16 - f.center_q16).abs() < reach + 3 * n.sigma_q16
        };
        let prev = prev_first.filter(touches);
        let next = next.filter(touches);
        prev_first = Some(f);
        let w = fit_width(&f);
        let steps = step_allowance(budget, px_budget, || w);
        if steps > 0 && (prev.is_some() || next.is_some()) {
            data.neighbours = [prev, next];
            // From the first fit, over its window: only the neighbours' share of the data changed.
            let refit = fit::refit_line_in(&data, &f, s_min, s_max, steps, scratch_fit);
            budget = budget.saturating_sub(usize::from(refit.steps));
            px_budget = px_budget.saturating_sub(usize::from(refit.steps) * w);
            if let Some(slot) = fits.get_mut(k) {
                slot.0 = refit;
            }
        }
    }
    let spike_limit_q16 = u32::from(cfg.fwhm_min_px_q8) * 256 * SPIKE_FWHM_Q8 / 256;
    for (f, pos) in fits.iter() {
        let pos = &usize::from(*pos);
        let fwhm_px_q16 = fwhm_of_sigma_q16(f.sigma_q16);
        if fwhm_px_q16 < spike_limit_q16 {
            continue;
        }
        // Saturated pixels are untrusted: none when the noise pass found every pixel trusted.
        let saturated = !all_trusted
            && (usize::from(f.lo)..=usize::from(f.hi))
                .any(|i| flag.get(i).is_some_and(|&x| x & flags::SATURATED != 0));
        let sd_q4 = isqrt_i64(nm.var_q8(data_base(&data, *pos))).max(1); // σ × 16
        let peak = Peak {
            center_px_q16: math::clamp_i32(f.center_q16),
            center_sigma_px_q16: u32::try_from(f.center_sigma_q16.max(0)).unwrap_or(u32::MAX),
            fwhm_px_q16,
            height: math::clamp_i32(f.height_q8 >> 8),
            area: fit::area(f),
            snr_q8: math::Recip::new(sd_q4)
                .and_then(|r| r.scale(f.height_q8, 4))
                .and_then(|v| u32::try_from(v).ok())
                .unwrap_or(u32::MAX),
            saturated,
            blended: false,
        };
        let _ = out.push(peak);
    }
    crate::sort::sort_by_key(out, |p| p.center_px_q16);
    mark_blends(out, cfg.blend_fwhm_q8);

    let untrusted = if all_trusted {
        0
    } else {
        flag.iter().filter(|&&f| flags::is_untrusted(f)).count()
    };
    let mid_level = median_of_base(base, tmp);
    Ok(FindReport {
        pixels: u16::try_from(n).unwrap_or(u16::MAX),
        untrusted_pixels: u16::try_from(untrusted).unwrap_or(u16::MAX),
        noise_floor_q8: sigma_q8(nm.var_q8(nm.zero_light_level)),
        noise_typical_q8: sigma_q8(nm.var_q8(mid_level)),
        shot_var_per_unit_q16: nm.shot_var_per_unit_q16,
        shot_from_data: nm.shot_from_data,
        candidates,
        truncated,
    })
}

fn data_base(d: &fit::FitData<'_>, i: usize) -> i64 {
    i64::from(d.base.get(i).copied().unwrap_or(0))
}

fn sigma_q8(var_q8: i64) -> u32 {
    // sqrt(var_q8 · 2^8) = σ · 2^8.
    u32::try_from(isqrt_i64(var_q8.saturating_mul(256))).unwrap_or(u32::MAX)
}

/// Baseline level at the middle of the sorted baseline samples (every 16th pixel, ≤ 256 samples;
/// a selection, ≤ 256² steps).
fn median_of_base(base: &[i32], work: &mut [i32]) -> i64 {
    // The samples go into the free work row (≥ base.len() / 16 cells), not onto the stack.
    let mut k = 0usize;
    for (slot, &b) in work.iter_mut().zip(base.iter().step_by(16)) {
        *slot = b;
        k += 1;
    }
    let s = work.get_mut(..k).unwrap_or(&mut []);
    i64::from(crate::sort::select_kth(s, k / 2).unwrap_or(0))
}

/// σ (Q16 px) from the half-maximum width of the residual around `pos`, searched ≤ `max_px` each way.
///
/// Residuals are 32-bit saturating differences: exact for every frame within ±2^30 (ADC frames by
/// far), clipped at ±2^31 beyond, where only the fits' starting width can move.
fn half_width_sigma(d: &fit::FitData<'_>, pos: usize, max_px: usize) -> i64 {
    let r = |i: usize| {
        let f = d.frame.get(i).copied().unwrap_or(0);
        f.saturating_sub(d.base.get(i).copied().unwrap_or(0))
    };
    let top = r(pos);
    let half = top / 2;
    let n = d.frame.len().min(d.base.len());
    let (left_f, left_b) = (
        d.frame.get(..pos.min(n)).unwrap_or(&[]),
        d.base.get(..pos.min(n)).unwrap_or(&[]),
    );
    let from = pos.saturating_add(1).min(n);
    let (right_f, right_b) = (
        d.frame.get(from..n).unwrap_or(&[]),
        d.base.get(from..n).unwrap_or(&[]),
    );
    let fwhm_q16 = half_crossing_q16(left_f, left_b, true, top, half, max_px)
        + half_crossing_q16(right_f, right_b, false, top, half, max_px);
    // σ = FWHM / 2.3548 as a multiply: 2^32 / FWHM_PER_SIGMA_Q16 = 27 830.6 (relative error < 2·10⁻⁵).
    // 0 ≤ FWHM ≤ 2^30 after the clamp: a split 32-bit product (no 64-bit library multiply).
    let f = fwhm_q16.clamp(0, 1 << 30) as u32;
    (math::mul_u32_wide(f, SIGMA_PER_FWHM_Q16 as u32) >> 16) as i64
}

/// Distance (Q16 px) from the top to the half-maximum crossing along one side's frame and baseline
/// values (`from_end`: nearest last, the left side), half of `max_px` when the residual stays above
/// `half` that far (or the frame ends first). A plain index loop over rows of one length, no
/// 64-bit step (iterator adapters cost ~18 instructions a step on the M0, 64-bit residuals
/// ~10 more; a random walk's full candidate list walks 128 × 2 × 16 px). Loop bound: ≤ `max_px` steps.
fn half_crossing_q16(
    frame: &[i32],
    base: &[i32],
    from_end: bool,
    top: i32,
    half: i32,
    max_px: usize,
) -> i64 {
    let len = frame.len().min(base.len());
    let (Some(frame), Some(base)) = (frame.get(..len), base.get(..len)) else {
        return (max_px as i64) << 15;
    };
    let steps = max_px.min(len);
    // The index walks down from the end (the left side) or up from 0, one wrapping add a step.
    let (mut j, dir) = if from_end {
        (len.wrapping_sub(1), usize::MAX)
    } else {
        (0, 1)
    };
    let mut prev = top;
    for step in 0..steps {
        let (Some(&f), Some(&b)) = (frame.get(j), base.get(j)) else {
            break;
        };
        let v = f.saturating_sub(b);
        if v <= half {
            let (num, drop) = (
                i64::from(prev) - i64::from(half),
                i64::from(prev) - i64::from(v),
            );
            return ((step as i64) << 16) + crossing_q16(num, drop);
        }
        prev = v;
        j = j.wrapping_add(dir);
    }
    (max_px as i64) << 15
}

/// The fraction `num / drop` of a step in Q16 (0 ≤ `num` ≤ `drop`, else clamped to 0 … 2^16), from one
/// 32-bit division: both are first shifted right until `drop` < 2^16, so `num · 2^16` fits 32 bits —
/// exact for steps below 2^16 frame units, within 2^-15 of the step beyond (a starting width needs
/// no more). The ~170-instruction reciprocal this replaces cost more than the whole width search;
/// steps below 2^16 (ADC frames' lines) skip the shift's two leading-zero counts.
fn crossing_q16(num: i64, drop: i64) -> i64 {
    let drop = drop.max(1).unsigned_abs();
    let num = num.clamp(0, drop as i64).unsigned_abs();
    let (num, drop) = if drop < 1 << 16 {
        // No shift: 64 − leading zeros ≤ 16.
        (num as u32, drop as u32)
    } else {
        let shift = (64 - drop.leading_zeros()).saturating_sub(16);
        ((num >> shift) as u32, ((drop >> shift) as u32).max(1))
    };
    i64::from((num << 16).checked_div(drop).unwrap_or(0).min(1 << 16))
}

/// 2^32 / [`FWHM_PER_SIGMA_Q16`], rounded: σ per FWHM in Q16.
const SIGMA_PER_FWHM_Q16: i64 = 27_831;
const _: () = assert!((1i64 << 32) / FWHM_PER_SIGMA_Q16 == SIGMA_PER_FWHM_Q16 - 1);

/// Marks both members of every neighbouring pair closer than `blend_q8` × the wider FWHM.
///
/// Loop bound: `peaks.len()` − 1 pairs (peaks sorted by centre).
fn mark_blends(peaks: &mut PeakList, blend_q8: u16) {
    for k in 1..peaks.len() {
        let (Some(a), Some(b)) = (peaks.get(k - 1).copied(), peaks.get(k).copied()) else {
            continue;
        };
        let gap = i64::from(b.center_px_q16) - i64::from(a.center_px_q16);
        let width = i64::from(a.fwhm_px_q16.max(b.fwhm_px_q16));
        if gap.saturating_mul(256) < width.saturating_mul(i64::from(blend_q8)) {
            for j in [k - 1, k] {
                if let Some(p) = peaks.get_mut(j) {
                    p.blended = true;
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::math::isqrt_u128;
    use super::testkit::{pixel_gauss, Rng};
    use super::*;

    /// The split FWHM and σ products are the 64-bit ones.
    #[test]
    fn split_width_products_are_the_wide_ones() {
        let mut x = 0x1234_5678_9abc_def1u64;
        let mut vals = std::vec![
            0i64,
            1,
            -1,
            1 << 30,
            (1 << 30) + 1,
            u32::MAX.into(),
            1 << 32
        ];
        for _ in 0..20_000 {
            crate::test_rng::step64(&mut x);
            vals.push(((x as i64) >> 20) >> (x % 44));
        }
        for v in vals {
            let plain = u32::try_from((v * FWHM_PER_SIGMA_Q16) >> 16).unwrap_or(u32::MAX);
            assert_eq!(fwhm_of_sigma_q16(v), plain, "σ {v}");
            let f = v.clamp(0, 1 << 30);
            let plain = (f * SIGMA_PER_FWHM_Q16) >> 16;
            let split = (math::mul_u32_wide(f as u32, SIGMA_PER_FWHM_Q16 as u32) >> 16) as i64;
            assert_eq!(split, plain, "FWHM {v}");
        }
    }

    /// The shortcut allowance takes as many steps as the plain one (both capped at a fit's most).
    #[test]
    fn step_allowance_takes_the_plain_number_of_steps() {
        for budget in 0..=STEP_BUDGET {
            for px in 0..=STEP_BUDGET * STEP_BUDGET_WINDOW_PX {
                for w in 1..=fit::W_MAX {
                    let plain = budget.min(px / w).min(fit::ITERATIONS);
                    let got = step_allowance(budget, px, || w).min(fit::ITERATIONS);
                    assert_eq!(got, plain, "budget {budget} px {px} w {w}");
                }
            }
        }
    }

    /// A synthetic line: centre (px, Q16), peak height (frame units), Gaussian σ (px, Q16).
    type Line = (i64, i64, i64);

    /// The half-width walk as it was, in 64-bit residuals.
    fn half_crossing_wide(
        frame: &[i32],
        base: &[i32],
        from_end: bool,
        top: i64,
        half: i64,
        max_px: usize,
    ) -> i64 {
        let len = frame.len().min(base.len());
        let mut prev = top;
        for step in 0..max_px.min(len) {
            let j = if from_end { len - 1 - step } else { step };
            let v = i64::from(frame[j]) - i64::from(base[j]);
            if v <= half {
                return ((step as i64) << 16) + crossing_q16(prev - half, prev - v);
            }
            prev = v;
        }
        (max_px as i64) << 15
    }

    /// The 32-bit half-width walk gives the 64-bit one's integers on rows within ±2^30 (lines,
    /// plateaus that never fall to half so the walk runs out, both directions), and a bounded
    /// width, no panic, on rows at the i32 limits.
    #[test]
    fn half_crossing_is_the_wide_one() {
        let mut rng = Rng::new(77);
        for k in 0..5000usize {
            let len = rng.u16() as usize % 40;
            let wide = k % 10 == 9;
            let lim = if wide {
                i64::from(i32::MAX)
            } else {
                (1 << 30) - 1
            };
            let scale = [3i64, 1000, 1 << 20, lim][k % 4];
            let pick =
                |rng: &mut Rng| ((rng.u16() - 32768) * scale / 32768).clamp(-lim, lim) as i32;
            let mut frame: std::vec::Vec<i32> = (0..len).map(|_| pick(&mut rng)).collect();
            let base: std::vec::Vec<i32> = (0..len).map(|_| pick(&mut rng) / 2).collect();
            let mut top = pick(&mut rng) / 2 * 2;
            if k % 5 == 0 {
                // A plateau above half the top everywhere: the walk runs out.
                let up = (scale / 4 + 1) as i32;
                frame = base.iter().map(|&b| b.saturating_add(up)).collect();
                top = (scale / 2) as i32;
            }
            let max_px = rng.u16() as usize % 24;
            for from_end in [false, true] {
                let got = half_crossing_q16(&frame, &base, from_end, top, top / 2, max_px);
                if wide {
                    assert!((0..=(max_px as i64) << 16).contains(&got), "case {k}");
                    continue;
                }
                let want = half_crossing_wide(
                    &frame,
                    &base,
                    from_end,
                    i64::from(top),
                    i64::from(top / 2),
                    max_px,
                );
                assert_eq!(got, want, "case {k} from_end {from_end}");
            }
        }
    }

    /// The step fraction is the exact floor below 2^16 frame units a step, within 2^-15 beyond.
    #[test]
    fn crossing_fraction_is_the_quotient() {
        let mut rng = Rng::new(31);
        for k in 0..50_000u32 {
            let drop = (rng.u16() << (k % 40)) + i64::from(k % 3);
            let num = if k % 7 == 0 {
                drop
            } else {
                ((i128::from(rng.u16()) * i128::from(drop.max(1))) >> 16) as i64
            };
            let want = (i128::from(num) << 16) / i128::from(drop.max(1));
            let got = i128::from(crossing_q16(num, drop));
            if drop < 1 << 16 {
                assert_eq!(got, want, "{num}/{drop}");
            } else {
                assert!((got - want).abs() <= 3, "{num}/{drop}: {got} vs {want}");
            }
        }
        assert_eq!(crossing_q16(-5, 10), 0);
        assert_eq!(crossing_q16(50, 10), 1 << 16);
        assert_eq!(crossing_q16(0, 0), 0);
    }

    /// Frame of pixel-integrated lines on `continuum`, noise variance `read_sd² + κ·level`
    /// (κ in Q16), all integer.
    fn synth(
        rng: &mut Rng,
        n: usize,
        lines: &[Line],
        continuum: impl Fn(i64) -> i64,
        read_sd: i64,
        kappa_q16: i64,
    ) -> std::vec::Vec<i32> {
        (0..n as i64)
            .map(|i| {
                let level = continuum(i)
                    + lines
                        .iter()
                        .map(|&(c, h, s)| pixel_gauss(i, h, c, s))
                        .sum::<i64>();
                let var_q16 = ((read_sd * read_sd) << 16) + kappa_q16 * level.max(0);
                let sd_q16 = isqrt_u128((var_q16 as u128) << 16) as i64;
                (level + rng.gauss(sd_q16)) as i32
            })
            .collect()
    }

    fn run(cfg: &FindConfig, frame: &[i32]) -> (PeakList, FindReport) {
        run_flagged(cfg, frame, &std::vec![0u8; frame.len()])
    }

    fn run_flagged(cfg: &FindConfig, frame: &[i32], fl: &[u8]) -> (PeakList, FindReport) {
        let mut scratch = std::vec![0i32; SCRATCH_PER_PIXEL * frame.len()];
        let mut out = PeakList::new();
        let rep = find_peaks(cfg, frame, fl, &mut scratch, &mut FindWork::new(), &mut out).unwrap();
        (out, rep)
    }

    /// σ (px) for a FWHM (px), both Q16.
    fn sigma_of_fwhm(fwhm_q16: i64) -> i64 {
        (fwhm_q16 << 16) / FWHM_PER_SIGMA_Q16
    }

    /// Cramér–Rao bound (px, Q16) of the centre of one pixel-integrated line under Gaussian noise of
    /// variance read² + κ·level: 1 / sqrt(Σ (∂m_i/∂μ)² / var_i), derivative by central difference of
    /// ±1/64 px (standard Fisher-information method for a known profile).
    fn crlb_q16(center: i64, height: i64, s: i64, level: i64, read_sd: i64, kappa_q16: i64) -> i64 {
        let big = 1i64 << 30;
        let h = 1i64 << 10;
        let mut fisher_q16: i128 = 0; // Σ (∂m/∂μ)² / var in px⁻², Q16
        let lo = (center >> 16) - 40;
        for i in lo..lo + 81 {
            let d_big = pixel_gauss(i, big, center + h, s) - pixel_gauss(i, big, center - h, s);
            // ∂m/∂μ in frame units per px: d_big / big · height / (2h / 2^16).
            let m = pixel_gauss(i, height, center, s);
            let var_q16 = ((read_sd * read_sd) << 16) + kappa_q16 * (level + m).max(0);
            let deriv_q16 =
                (d_big as i128 * height as i128 * 65536 * 65536) / (big as i128 * 2 * h as i128);
            fisher_q16 += deriv_q16 * deriv_q16 / var_q16 as i128;
        }
        // σ = 1/sqrt(F): σ_q16 = 2^16 / sqrt(F_q16 / 2^16) = 2^24 / sqrt(F_q16).
        ((1u128 << 24) / isqrt_u128(fisher_q16 as u128).max(1)) as i64
    }

    struct Stats {
        rms_q16: i64,
        bias_q16: i64,
        crlb_q16: i64,
        mean_sigma_q16: i64,
        found: usize,
        trials: usize,
    }

    /// Lines of one FWHM and SNR at random sub-pixel positions, 4 per 256-px frame, on a flat continuum.
    fn centroid_trial(
        fwhm_q16: i64,
        snr: i64,
        read_sd: i64,
        kappa_q16: i64,
        level: i64,
        frames: usize,
        seed: u64,
    ) -> Stats {
        let mut rng = Rng::new(seed);
        let s = sigma_of_fwhm(fwhm_q16);
        // SNR = height / σ of the noise at the baseline.
        let base_sd = isqrt_u128((((read_sd * read_sd) << 16) + kappa_q16 * level) as u128) as i64; // σ·2^8
        let height = (snr * base_sd) >> 8;
        let mut cfg = FindConfig::DEFAULT;
        cfg.shot_var_per_unit_q16 = Some(kappa_q16 as u32);
        let (mut ss, mut sum, mut sig, mut found, mut trials, mut crlb_ss) =
            (0i128, 0i128, 0i128, 0usize, 0usize, 0i128);
        for _ in 0..frames {
            let lines: std::vec::Vec<Line> = (0..4)
                .map(|k| (((32 + 64 * k) << 16) + (rng.u16() - 32768), height, s))
                .collect();
            let frame = synth(&mut rng, 256, &lines, |_| level, read_sd, kappa_q16);
            let (peaks, _) = run(&cfg, &frame);
            for &(c, h, _) in &lines {
                trials += 1;
                let b = crlb_q16(c, h, s, level, read_sd, kappa_q16) as i128;
                crlb_ss += b * b;
                if let Some(p) = peaks
                    .iter()
                    .find(|p| (i64::from(p.center_px_q16) - c).abs() < 1 << 16)
                {
                    let e = (i64::from(p.center_px_q16) - c) as i128;
                    ss += e * e;
                    sum += e;
                    sig += i128::from(p.center_sigma_px_q16);
                    found += 1;
                }
            }
        }
        let f = found.max(1) as i128;
        Stats {
            rms_q16: isqrt_u128((ss / f) as u128) as i64,
            bias_q16: (sum / f) as i64,
            crlb_q16: isqrt_u128((crlb_ss / trials as i128) as u128) as i64,
            mean_sigma_q16: (sig / f) as i64,
            found,
            trials,
        }
    }

    fn check_centroid(fwhm_q8: i64, snr: i64, read_sd: i64, kappa_q16: i64, level: i64, seed: u64) {
        let st = centroid_trial(fwhm_q8 << 8, snr, read_sd, kappa_q16, level, 60, seed);
        std::eprintln!(
            "FWHM/256 {fwhm_q8} SNR {snr} κ {kappa_q16}: rms {} crlb {} ratio×100 {} bias {} σ̂ {} found {}/{}",
            st.rms_q16, st.crlb_q16, st.rms_q16 * 100 / st.crlb_q16.max(1), st.bias_q16,
            st.mean_sigma_q16, st.found, st.trials
        );
        assert_eq!(st.found, st.trials, "every line at SNR {snr} must be found");
        // Bar: RMS ≤ 1.2 × CRLB (the sampling error of an RMS over 240 lines is ≈ 4.6 %).
        assert!(st.rms_q16 * 100 <= st.crlb_q16 * 120, "rms/crlb too high");
        // Reported σ within 25 % of the bound.
        assert!(
            (st.mean_sigma_q16 - st.crlb_q16).abs() * 4 <= st.crlb_q16,
            "reported σ off"
        );
        // Bias well inside the scatter.
        assert!(st.bias_q16.abs() * 3 <= st.crlb_q16, "biased");
    }

    #[test]
    fn centroid_near_crlb_read_noise() {
        for (fwhm_q8, snr) in [(640, 30), (640, 300), (1024, 30), (2048, 30), (2048, 1000)] {
            check_centroid(fwhm_q8, snr, 50, 0, 1000, 21 + snr as u64);
        }
    }

    #[test]
    fn centroid_near_crlb_shot_noise() {
        // Shot-dominated: κ = 16 (Q4 counts, 1 e⁻ per count), read σ = 2 counts = 32 units.
        for (fwhm_q8, snr) in [(640, 30), (640, 300), (1024, 100), (2048, 1000)] {
            check_centroid(fwhm_q8, snr, 32, 16 << 16, 16 * 50, 90 + snr as u64);
        }
    }

    #[test]
    fn centroid_near_crlb_when_the_core_dominates_the_noise() {
        // A bright narrow line on a dark background, like the bench's SNR-1000 cells: height 4·10⁵ units
        // of shot noise (κ = 1) over a read floor of 2 units, so the core pixels' variance is ~10⁵ ×
        // the wings' and their fit weights must keep their digits (a 16-bit weight quotient once gave
        // 14–79 × CRLB). "SNR" here is relative to the floor: the peak's own SNR is ~630.
        for fwhm_q8 in [512, 640, 1536] {
            check_centroid(fwhm_q8, 200_000, 2, 1 << 16, 0, 300 + fwhm_q8 as u64);
        }
    }

    #[test]
    fn weak_lines_are_found() {
        // ≥ 99 % of SNR-8 lines, FWHM 2.5–8 px, at random sub-pixel positions.
        let mut rng = Rng::new(5);
        let (mut found, mut total) = (0, 0);
        for k in 0..60 {
            let fwhm_q16 = (640 + (k % 6) * 281) << 8;
            let s = sigma_of_fwhm(fwhm_q16);
            let lines: std::vec::Vec<Line> = (0..5)
                .map(|j| (((40 + 90 * j) << 16) + rng.u16(), 8 * 40, s))
                .collect();
            let frame = synth(&mut rng, 512, &lines, |i| 3000 + i, 40, 0);
            let (peaks, _) = run(&FindConfig::DEFAULT, &frame);
            for &(c, _, _) in &lines {
                total += 1;
                if peaks
                    .iter()
                    .any(|p| (i64::from(p.center_px_q16) - c).abs() < 1 << 16)
                {
                    found += 1;
                }
            }
        }
        std::eprintln!("SNR 8: found {found}/{total}");
        assert!(found * 100 >= total * 99, "found {found}/{total}");
    }

    #[test]
    fn pure_noise_gives_almost_no_peaks() {
        // Bar: ≤ 1 false peak per 10 noise-only 2048-px frames.
        let mut rng = Rng::new(77);
        let mut false_peaks = 0;
        for f in 0..20 {
            let frame = synth(
                &mut rng,
                2048,
                &[],
                |i| 500 + (i * (f + 1)) / 64,
                30,
                1 << 16,
            );
            let (peaks, rep) = run(&FindConfig::DEFAULT, &frame);
            false_peaks += peaks.len();
            assert!(!rep.truncated);
        }
        std::eprintln!("false peaks in 20 noise frames: {false_peaks}");
        assert!(false_peaks <= 2, "{false_peaks} false peaks in 20 frames");
    }

    #[test]
    fn strong_continuum_with_stray_light() {
        // A deuterium-like continuum: a broad hump 30000 high plus a linear stray-light ramp, lines of
        // SNR ~50 on top; shot noise κ = 16 (Q4 counts, 1 e⁻/count) from the data.
        let mut rng = Rng::new(41);
        let s = sigma_of_fwhm(3 << 16);
        let lines: std::vec::Vec<Line> = [300i64, 700, 1100, 1500]
            .iter()
            .map(|&p| ((p << 16) + 20_000, 40_000, s))
            .collect();
        let cont = |i: i64| pixel_gauss(i, 30_000, 900 << 16, 400 << 16) + 2000 + i;
        let frame = synth(&mut rng, 2048, &lines, cont, 32, 16 << 16);
        let (peaks, rep) = run(&FindConfig::DEFAULT, &frame);
        assert!(rep.shot_from_data);
        let k = rep.shot_var_per_unit_q16;
        assert!((10 << 16..22 << 16).contains(&k), "κ estimate {k}");
        assert_eq!(peaks.len(), 4, "{peaks:?}");
        for (p, l) in peaks.iter().zip(&lines) {
            let err = i64::from(p.center_px_q16) - l.0;
            assert!(
                err.abs() < 3 * i64::from(p.center_sigma_px_q16) + 300,
                "err {err}"
            );
            assert!((p.height - 40_000).abs() < 2_000, "height {}", p.height);
        }
    }

    #[test]
    fn saturated_line_is_flagged_and_centred_from_its_flanks() {
        let mut rng = Rng::new(12);
        let s = sigma_of_fwhm(5 << 16);
        let c = (100i64 << 16) + 12_345;
        let mut frame = synth(&mut rng, 256, &[(c, 60_000, s)], |_| 1000, 30, 0);
        let clip = 40_000;
        let fl: std::vec::Vec<u8> = frame
            .iter_mut()
            .map(|v| {
                if *v >= clip {
                    *v = clip;
                    flags::SATURATED
                } else {
                    0
                }
            })
            .collect();
        let (out, _) = run_flagged(&FindConfig::DEFAULT, &frame, &fl);
        assert_eq!(out.len(), 1);
        assert!(out[0].saturated);
        assert!((i64::from(out[0].center_px_q16) - c).abs() < 1 << 11);
    }

    #[test]
    fn single_pixel_spikes_are_not_lines_but_narrow_lines_are() {
        // Hot-pixel leftovers (one pixel, 15–1500 σ) and true narrow lines (FWHM 1.5 px, peak SNR 30)
        // on a flat continuum with read noise σ = 20 units.
        let mut rng = Rng::new(23);
        let s = sigma_of_fwhm(3 << 15);
        let lines: std::vec::Vec<Line> = (0..6)
            .map(|k| (((60 + 160 * k) << 16) + 11_000 * k, 600, s))
            .collect();
        let mut frame = synth(&mut rng, 1024, &lines, |_| 400, 20, 0);
        let spikes = [
            (140usize, 300),
            (300, 3_000),
            (460, 30_000),
            (620, 600),
            (780, 1_200),
        ];
        for &(at, h) in &spikes {
            frame[at] += h;
        }
        let (peaks, _) = run(&FindConfig::DEFAULT, &frame);
        for &(at, _) in &spikes {
            assert!(
                peaks
                    .iter()
                    .all(|p| (p.center_px_q16 >> 16).abs_diff(at as i32) > 2),
                "spike at {at} reported: {peaks:?}"
            );
        }
        assert_eq!(peaks.len(), lines.len(), "{peaks:?}");
        for (p, l) in peaks.iter().zip(&lines) {
            assert!((i64::from(p.center_px_q16) - l.0).abs() < 1 << 13, "{p:?}");
            // Sampled FWHM of a 1.5-px pixel-integrated line: 2.355 · sqrt(0.637² + 1/12) ≈ 1.65 px.
            assert!((90_000..130_000).contains(&p.fwhm_px_q16), "{p:?}");
        }
    }

    #[test]
    fn scratch_keeps_the_baseline() {
        let mut rng = Rng::new(24);
        let s = sigma_of_fwhm(3 << 16);
        let frame = synth(
            &mut rng,
            512,
            &[(200 << 16, 5_000, s)],
            |i| 1000 + 2 * i,
            10,
            0,
        );
        let fl = std::vec![0u8; 512];
        let mut scratch = std::vec![0i32; SCRATCH_PER_PIXEL * 512];
        let mut out = PeakList::new();
        find_peaks(
            &FindConfig::DEFAULT,
            &frame,
            &fl,
            &mut scratch,
            &mut FindWork::new(),
            &mut out,
        )
        .unwrap();
        assert_eq!(out.len(), 1);
        for i in [30usize, 200, 480] {
            let want = 1000 + 2 * i as i32;
            assert!(
                (scratch[i] - want).abs() <= 6,
                "px {i}: {} vs {want}",
                scratch[i]
            );
        }
    }

    #[test]
    fn close_pair_is_blended_far_pair_is_not() {
        let mut rng = Rng::new(13);
        let s = sigma_of_fwhm(4 << 16);
        let lines = [
            (100i64 << 16, 5000, s),
            (106 << 16, 4000, s),
            (160 << 16, 5000, s),
        ];
        let frame = synth(&mut rng, 256, &lines, |_| 500, 20, 0);
        let (peaks, _) = run(&FindConfig::DEFAULT, &frame);
        assert_eq!(peaks.len(), 3, "{peaks:?}");
        assert!(
            peaks[0].blended && peaks[1].blended && !peaks[2].blended,
            "{peaks:?}"
        );
    }

    #[test]
    fn overfull_list_keeps_the_strongest_and_says_so() {
        let mut rng = Rng::new(14);
        let s = sigma_of_fwhm(3 << 16);
        // 100 lines, heights rising with index: the 64 highest must survive.
        let lines: std::vec::Vec<Line> = (0..100)
            .map(|k| (((20 + 20 * k) << 16) + 7_000, 1000 + 100 * k, s))
            .collect();
        let frame = synth(&mut rng, 2048, &lines, |_| 200, 10, 0);
        let (peaks, rep) = run(&FindConfig::DEFAULT, &frame);
        assert!(rep.truncated);
        assert_eq!(peaks.len(), MAX_PEAKS);
        let first_kept = (peaks[0].center_px_q16 >> 16) as i64;
        assert!(
            first_kept >= 20 + 20 * 36 - 1,
            "weakest kept at {first_kept}"
        );
        assert!(peaks
            .windows(2)
            .all(|w| w[0].center_px_q16 < w[1].center_px_q16));
    }

    #[test]
    fn degenerate_frames_give_results_or_clear_errors() {
        let cfg = FindConfig::DEFAULT;
        let mut out = PeakList::new();
        let mut scratch = std::vec![0i32; 2 * 4097];
        // 1 pixel and too short.
        assert_eq!(
            find_peaks(
                &cfg,
                &[5],
                &[0],
                &mut scratch,
                &mut FindWork::new(),
                &mut out
            ),
            Err(FindError::TooFewPixels)
        );
        // Too long.
        let big = std::vec![0i32; 4097];
        let big_fl = std::vec![0u8; 4097];
        assert_eq!(
            find_peaks(
                &cfg,
                &big,
                &big_fl,
                &mut scratch,
                &mut FindWork::new(),
                &mut out
            ),
            Err(FindError::TooManyPixels)
        );
        // Scratch and flag sizes.
        let f = [0i32; 64];
        assert_eq!(
            find_peaks(
                &cfg,
                &f,
                &[0u8; 64],
                &mut scratch[..127],
                &mut FindWork::new(),
                &mut out
            ),
            Err(FindError::ScratchTooSmall)
        );
        assert_eq!(
            find_peaks(
                &cfg,
                &f,
                &[0u8; 63],
                &mut scratch,
                &mut FindWork::new(),
                &mut out
            ),
            Err(FindError::LengthMismatch)
        );
        let mut bad = cfg;
        bad.fwhm_min_px_q8 = 0;
        assert_eq!(
            find_peaks(
                &bad,
                &f,
                &[0u8; 64],
                &mut scratch,
                &mut FindWork::new(),
                &mut out
            ),
            Err(FindError::BadConfig)
        );
        // All zero: no peaks, zero noise.
        let rep = find_peaks(
            &cfg,
            &f,
            &[0u8; 64],
            &mut scratch,
            &mut FindWork::new(),
            &mut out,
        )
        .unwrap();
        assert!(out.is_empty());
        assert_eq!(
            rep.noise_floor_q8, 16,
            "floor is the minimum variance of 1/256 unit²"
        );
        // All saturated: no peaks, every pixel untrusted.
        let sat = [40_000i32; 64];
        let rep = find_peaks(
            &cfg,
            &sat,
            &[flags::SATURATED; 64],
            &mut scratch,
            &mut FindWork::new(),
            &mut out,
        )
        .unwrap();
        assert!(out.is_empty());
        assert_eq!(rep.untrusted_pixels, 64);
        // 4096 pixels with one line near the end (further in than the baseline half-width: closer lines
        // are partly followed by the baseline, see `smooth::box_symmetric`).
        let mut rng = Rng::new(15);
        let s = sigma_of_fwhm(3 << 16);
        let frame = synth(&mut rng, 4096, &[(4060 << 16, 3000, s)], |_| 100, 10, 0);
        let (peaks, rep) = run(&cfg, &frame);
        assert_eq!(rep.pixels, 4096);
        assert_eq!(peaks.len(), 1);
        assert!((peaks[0].center_px_q16 - (4060 << 16)).abs() < 1 << 13);
    }

    #[test]
    fn same_frame_same_bits() {
        let mut rng = Rng::new(16);
        let s = sigma_of_fwhm(3 << 16);
        let frame = synth(
            &mut rng,
            512,
            &[(200 << 16, 900, s)],
            |i| 50 + i / 4,
            15,
            1 << 16,
        );
        assert_eq!(
            run(&FindConfig::DEFAULT, &frame),
            run(&FindConfig::DEFAULT, &frame)
        );
    }

    #[test]
    fn extreme_values_do_not_overflow() {
        let mut rng = Rng::new(17);
        let frame: std::vec::Vec<i32> = (0..512)
            .map(|i| match i % 5 {
                0 => i32::MAX,
                1 => i32::MIN,
                _ => (rng.gauss(1 << 46)).clamp(i32::MIN as i64, i32::MAX as i64) as i32,
            })
            .collect();
        let (_, rep) = run(&FindConfig::DEFAULT, &frame);
        assert_eq!(rep.pixels, 512);
        let ramp: std::vec::Vec<i32> = (0..4096i64)
            .map(|i| (i * 524_000 - (1 << 31)).clamp(i32::MIN as i64, i32::MAX as i64) as i32)
            .collect();
        run(&FindConfig::DEFAULT, &ramp);
    }
}
