//! Which peak is which line: a bounded robust search, then iterative refits.
//!
//! With a nominal map the common case (a drift that mostly shifts the lines) is tried first and
//! cheaply: the offset most peak–line differences agree on, refined as a search result is, and
//! taken when enough lines match well (`quick`); the search below runs only when it is not.
//!
//! A hypothesis maps the pixel axis to wavelength as λ = a + b·u(p), where u is the nominal map's
//! wavelength when one is given (so its curvature is kept and only offset and scale are searched)
//! or the pixel itself when calibrating blind. Two peaks matched to two predicted lines fix a and b;
//! the hypothesis scores by how many other peaks then land on a predicted line (consensus). The
//! best one seeds a least-squares fit, which is refined by re-matching with tighter windows.
//!
//! Work bound: at most C(4,2) peak pairs × C(20,2) line pairs × 2 orientations = 2 280 hypotheses
//! (with a nominal map only the line pairs within its offset and scale tolerance are tried), each
//! scoring the ≤ 16 strongest peaks against ≤ 48 lines (one walk along the sorted
//! lines, or a binary search each), stopping as soon as it cannot beat the best so far, and for those
//! that can still win ≤ 48 lines against ≤ 16 peaks for missing strong lines and ≤ 16·15/2 = 120
//! matched pairs for the strength-order tie-breaker; then a first match and ≤ 4 refit rounds over all
//! ≤ 64 peaks (≤ 5 map fits).
use super::error::CalibrateError;
use super::fit::{fit_correction, fit_map_at, standard_frame, FitPoint, FitScratch, MapFit};
use super::map::{HalfWidth, WavelengthMap};
use crate::find::math::mul_i32_wide;
use crate::find::Peak;
use heapless::Vec;

/// Most predicted lines identification considers.
pub const MAX_REFERENCE_LINES: usize = 48;
/// Strongest peaks used to form hypotheses: one pair of real lines among them fixes offset and
/// scale, and a lamp's brightest few peaks are its own lines (foreign or noise peaks among them
/// only add hypotheses that lose). Six gave 15 pairs where twelve gave 66 (the calibrate-mode
/// search of the hydrogen tube on the Cortex-M0 fell from about 0.9 M to 0.1 M instructions); four
/// give 6: the same digest of the embedded frames and every `check_bar_` sweep of host-sim passing,
/// with the hydrogen tube's calibrate stage 368 k → 264 k instructions and its blind check
/// 7.3 M → 4.2 M.
const HYP_PEAKS: usize = 4;
/// Strongest predicted lines used to form hypotheses.
const HYP_LINES: usize = 20;
/// Strongest peaks a hypothesis is scored on (refinement then matches every peak): all of a lamp's
/// frame (the demo tubes show 13–16), while a frame of 64 noise peaks costs the search about what
/// 16 real ones do (measured on the Cortex-M0: a random-walk frame's blind search is 1.9 × the
/// hydrogen tube's, down from 6 ×).
const SCORE_PEAKS: usize = 16;
/// More peaks than this make a frame crowded (see [`DENSE_SCORE`]).
const DENSE_PEAKS: usize = 32;
/// Peaks a crowded frame's hypotheses are scored on.
const DENSE_SCORE: usize = 10;
const _: () = assert!(HYP_PEAKS <= DENSE_SCORE && DENSE_SCORE <= SCORE_PEAKS);

/// A predicted line offered to identification (air or vacuum, matching the map's medium).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ReferenceLine {
    /// Wavelength, femtometres.
    pub wavelength_fm: i64,
    /// Expected relative strength (any scale); picks the lines hypotheses are built from.
    pub strength: u32,
}

/// How far from the nominal the search may go.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct IdentifyConfig {
    /// Sensor pixel count.
    pub pixels: u16,
    /// Degree of the final map, 1…3.
    pub degree: u8,
    /// Nominal map, or `None` for a blind search.
    pub nominal: Option<WavelengthMap>,
    /// Largest offset from the nominal map, femtometres (e.g. 8 nm = 8 000 000).
    pub max_offset_fm: i64,
    /// Largest dispersion error relative to the nominal map, parts per million (e.g. 2 % = 20 000).
    pub max_scale_error_ppm: u32,
    /// Blind search: smallest and largest |dλ/dp|, femtometres per pixel.
    pub blind_dispersion_fm_per_px: (i64, i64),
    /// Consensus window of a hypothesis with a nominal map, px (Q8).
    pub search_window_px_q8: u32,
    /// Consensus window of a blind (straight-line) hypothesis, px (Q8): wide enough for the curvature
    /// a straight line through two lines leaves elsewhere on the sensor.
    pub blind_window_px_q8: u32,
    /// Final match window in centroid σ (Q8), never below `min_window_px_q8`.
    pub final_window_sigma_q8: u32,
    /// Smallest final match window, px (Q8).
    pub min_window_px_q8: u32,
}

impl IdentifyConfig {
    /// Consensus window of the first search, px (Q8).
    fn window_q8(&self) -> i64 {
        if self.nominal.is_some() {
            self.search_window_px_q8 as i64
        } else {
            self.blind_window_px_q8 as i64
        }
    }

    /// Defaults for a sensor: ±10 nm, ±3 % around the nominal (margin over the several nm and ±2 %
    /// a bumped instrument shows); blind 0.01–2 nm/px; windows 3 px search
    /// (12 px blind), 5 σ (≥ 1 px) final.
    pub const fn new(pixels: u16, degree: u8, nominal: Option<WavelengthMap>) -> IdentifyConfig {
        IdentifyConfig {
            pixels,
            degree,
            nominal,
            max_offset_fm: 10_000_000,
            max_scale_error_ppm: 30_000,
            blind_dispersion_fm_per_px: (10_000, 2_000_000),
            search_window_px_q8: 3 << 8,
            blind_window_px_q8: 12 << 8,
            final_window_sigma_q8: 5 << 8,
            min_window_px_q8: 1 << 8,
        }
    }
}

/// The identification: the fitted map and which peak went with which line.
#[derive(Clone, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Identified {
    /// Map fitted to the identified lines.
    pub fit: MapFit,
    /// (peak index, reference-line index) pairs, by peak.
    pub pairs: Vec<(u8, u8), 48>,
}

#[derive(Clone, Copy)]
struct Hypothesis {
    a_fm: i64,
    /// b in Q30.
    b_q30: i64,
    /// Matched peaks minus strong lines that should be on the sensor but have no peak.
    net: i32,
    /// Kendall-style agreement between peak brightness and expected line strength over matched pairs.
    concord: i32,
    cost: i64,
    /// The line each scored peak matched, by position in the scored list (`u8::MAX`: none). Equal
    /// lists mean equal matched pairs, so equal `concord`.
    lines_of: [u8; SCORE_PEAKS],
}

/// Identifies peaks against `lines` (sorted by wavelength) and fits the map.
///
/// Peaks must be sorted by centre (as [`find_peaks`](crate::find::find_peaks) returns them).
/// Work bound: ≤ 2 280 hypotheses (C(4,2) peak pairs × C(20,2) line pairs × 2), each scoring the
/// ≤ 16 strongest peaks against ≤ 48 lines and, while it can still win, ≤ 48 × 16 miss checks and
/// ≤ 120 peak pairs for strength order; then ≤ 5 matching passes over ≤ 64 peaks and ≤ 5 map fits.
/// Worst case about 5 × 10⁶ inner steps (see the module docs).
pub fn identify(
    peaks: &[Peak],
    lines: &[ReferenceLine],
    cfg: &IdentifyConfig,
) -> Result<Identified, CalibrateError> {
    identify_with(peaks, lines, cfg, &mut IdentifyWork::new()).cloned()
}

/// What identification keeps while it runs (the per-peak axis, 1.5 KiB; the map fit's points, their
/// x and the fitted map there, its normal equations and weights, 3.1 KiB) and its result (0.4 KiB),
/// owned by the caller so a small core's stack need not hold them; nothing carries over between
/// calls.
pub struct IdentifyWork {
    axis: Axis,
    room: FitRoom,
    found: Identified,
    /// Tests: every tying hypothesis' full cost (the reference the pruned sum is tested against).
    #[cfg(test)]
    full_cost: bool,
    /// Tests: skip the quick identification (the search it stands in for, to test it against).
    #[cfg(test)]
    no_quick: bool,
}

/// A map fit's inputs (with each point's x on the fit's frame), its working memory and the fitted
/// map's (λ, slope) at the points (0.8 + 0.4 + 1.1 + 0.8 KiB).
struct FitRoom {
    points: Vec<FitPoint, MAX_REFERENCE_LINES>,
    xs: Vec<i64, MAX_REFERENCE_LINES>,
    /// Each point's u (the nominal map's wavelength there, when there is one).
    us: Vec<i64, MAX_REFERENCE_LINES>,
    scratch: FitScratch,
    /// The last fit's map (λ, slope) at each point, and each peak's point plus one (0: none; zero
    /// so that a `static` holding the work stays in `.bss`).
    evals: [(i64, i64); MAX_REFERENCE_LINES],
    point_of_peak: [u8; 64],
}

impl IdentifyWork {
    /// Empty (a `const`, so a `static` can hold it; all zero, so it sits in `.bss`).
    pub const fn new() -> Self {
        Self {
            axis: Axis::EMPTY,
            room: FitRoom {
                points: Vec::new(),
                xs: Vec::new(),
                us: Vec::new(),
                scratch: FitScratch::new(),
                evals: [(0, 0); MAX_REFERENCE_LINES],
                point_of_peak: [0; 64],
            },
            found: Identified {
                fit: MapFit::ZERO,
                pairs: Vec::new(),
            },
            #[cfg(test)]
            full_cost: false,
            #[cfg(test)]
            no_quick: false,
        }
    }
}

impl IdentifyWork {
    /// Each peak's x (Q30) on the fit frame (centre, half-width: every fitted map's), as
    /// [`WavelengthMap::x_q30`] gives it there, by peak index, for the last call's peaks (empty
    /// before any): a caller evaluating the fitted map at those peaks need not divide again.
    pub(crate) fn peak_x_q30(&self) -> &[i64] {
        &self.axis.x
    }

    /// The last call's fitted map at peak `k` when that peak was one of the fit's points: (λ fm,
    /// slope fm per px Q16), as [`WavelengthMap::wavelength_at_x`] and the slope give them at its
    /// [`peak_x_q30`](Self::peak_x_q30) (the fit's residuals took them); `None` otherwise.
    pub(crate) fn peak_eval(&self, k: usize) -> Option<(i64, i64)> {
        let j = *self.room.point_of_peak.get(k)?;
        self.room.evals.get((j as usize).checked_sub(1)?).copied()
    }
}

impl Default for IdentifyWork {
    fn default() -> Self {
        Self::new()
    }
}

/// [`identify`] with its tables and its result in `work`. Work bound: as [`identify`].
pub fn identify_with<'w>(
    peaks: &[Peak],
    lines: &[ReferenceLine],
    cfg: &IdentifyConfig,
    work: &'w mut IdentifyWork,
) -> Result<&'w Identified, CalibrateError> {
    if lines.len() > MAX_REFERENCE_LINES || peaks.len() > 64 {
        return Err(CalibrateError::TooManyPoints);
    }
    if lines.len() < 3 || peaks.len() < 3 {
        return Err(CalibrateError::NoConsistentPattern);
    }
    #[cfg(test)]
    let (prune_cost, try_quick) = (!work.full_cost, !work.no_quick);
    #[cfg(not(test))]
    let try_quick = true;
    #[cfg(not(test))]
    let prune_cost = true;
    let IdentifyWork {
        axis, room, found, ..
    } = work;
    axis.fill_positions(peaks, lines, cfg)?;
    // The peaks hypotheses are scored on, in frame order.
    // A crowded frame (more than DENSE_PEAKS peaks: a comb, a random walk, a forest of foreign
    // lines) is scored on its DENSE_SCORE strongest: there every hypothesis matches something near
    // most peaks, so few are pruned early, and scoring on 16 cost 2.5 × a typical frame's whole check.
    let score_peaks = if peaks.len() > DENSE_PEAKS {
        DENSE_SCORE
    } else {
        SCORE_PEAKS
    };
    let mut scored: Vec<u8, SCORE_PEAKS> = strongest(peaks.iter().map(|p| p.snr_q8), score_peaks);
    // The hypothesis peaks are the strongest few of the same ranking (HYP_PEAKS ≤ DENSE_SCORE):
    // its first entries, taken before the scored ones are put in frame order.
    let strong_peaks: Vec<u8, 20> =
        crate::bounded::collect_bounded(scored.iter().take(HYP_PEAKS).copied());
    crate::sort::sort_by_key(&mut scored, |&k| k);
    if try_quick && quick(peaks, &scored, lines, cfg, axis, room, found) {
        return Ok(found);
    }
    axis.fill_slopes(peaks, cfg);
    let chosen = (&scored[..], &strong_peaks[..]);
    search(peaks, lines, cfg, chosen, prune_cost, axis, room, found)?;
    Ok(found)
}

/// The hypothesis search and its refinement, into `room` and `found`: `chosen` are the scored peaks
/// (frame order) and the hypothesis peaks (strongest first). Out of line, so that its tables are
/// not on the stack while the quick identification fits.
#[inline(never)]
#[allow(clippy::too_many_arguments)]
fn search(
    peaks: &[Peak],
    lines: &[ReferenceLine],
    cfg: &IdentifyConfig,
    (scored, strong_peaks): (&[u8], &[u8]),
    prune_cost: bool,
    axis: &Axis,
    room: &mut FitRoom,
    found: &mut Identified,
) -> Result<(), CalibrateError> {
    let strong_lines: Vec<u8, 20> = strongest(lines.iter().map(|l| l.strength), HYP_LINES);
    let ends = match &cfg.nominal {
        Some(m) => (
            m.wavelength_fm(0)?,
            m.wavelength_fm(((cfg.pixels.max(2) as i32) - 1) << 16)?,
        ),
        None => (0, ((cfg.pixels.max(2) as i64) - 1) << 16),
    };
    let (first_ok, second_ok) = line_masks(strong_peaks, &strong_lines, &axis.u, lines, cfg);
    let search = Search {
        peaks,
        scored,
        axis,
        lines,
        cfg,
        ends,
        b_max_ends: i64::MAX as u64 / ends.0.unsigned_abs().max(ends.1.unsigned_abs()).max(1),
        prune_cost,
    };
    // Wavelengths of the strong lines by position, and whether every strong line and peak lies
    // within ±2^60 (nothing an instrument produces): then the gap test below is exact in `i64`.
    let mut strong_fm = [0i64; HYP_LINES];
    for (slot, &l) in strong_fm.iter_mut().zip(strong_lines.iter()) {
        *slot = lines.get(l as usize).map_or(0, |r| r.wavelength_fm);
    }
    const NARROW: u64 = 1 << 60;
    let narrow_gaps = strong_fm.iter().all(|w| w.unsigned_abs() <= NARROW)
        && strong_peaks.iter().all(|&i| {
            axis.u
                .get(i as usize)
                .is_none_or(|u| u.unsigned_abs() <= NARROW)
        });
    let mut best: Option<Hypothesis> = None;
    // Hypotheses in a fixed order (peak pair, line pair, orientation): ties keep the first one found.
    // The masks skip only pairs `hypothesis` would refuse, so the order of the rest is unchanged.
    for (ii, &i) in strong_peaks.iter().enumerate() {
        let first = first_ok.get(ii).copied().unwrap_or(0);
        if first == 0 {
            continue;
        }
        for (jj, &j) in strong_peaks.iter().enumerate().skip(ii + 1) {
            let second = second_ok.get(jj).copied().unwrap_or(0);
            let (Some(&ui), Some(&uj)) = (axis.u.get(i as usize), axis.u.get(j as usize)) else {
                continue;
            };
            let du = uj - ui;
            if du == 0 {
                continue;
            }
            // With a nominal map, |b − 1| < (max_scale_error + 2) ppm (see `line_masks`), so
            // |(λ_b − λ_a) − du| = |b − 1| · |du| ≤ `slack`: pairs beyond it cannot pass `hypothesis`.
            let slack = scale_slack(du, cfg);
            // The same test through u64 (a gap below 2^63 passes a slack past u64 exactly when it
            // passes u64::MAX).
            let slack64 = slack.map(|s| u64::try_from(s).unwrap_or(u64::MAX));
            for (aa, &a) in strong_lines.iter().enumerate() {
                // (a, b): a with peak i, b with peak j; (b, a) the other way round.
                let fwd = if (first >> aa) & 1 == 1 { second } else { 0 };
                let rev = if (second >> aa) & 1 == 1 { first } else { 0 };
                let mut later = (fwd | rev) & !((2u32 << aa).wrapping_sub(1));
                while later != 0 {
                    let bb = later.trailing_zeros() as usize;
                    later &= later - 1;
                    let Some(&b) = strong_lines.get(bb) else {
                        continue;
                    };
                    // |(λ_y − λ_x) − du| within the slack, by position in `strong_fm`.
                    let fits = |x: usize, y: usize| {
                        let w = |k: usize| strong_fm.get(k).copied().unwrap_or(0);
                        if narrow_gaps {
                            slack64.is_none_or(|s| (w(y) - w(x) - du).unsigned_abs() <= s)
                        } else {
                            slack.is_none_or(|s| {
                                (w(y) as i128 - w(x) as i128 - du as i128).unsigned_abs() <= s
                            })
                        }
                    };
                    if (fwd >> bb) & 1 == 1 && fits(aa, bb) {
                        search.consider(ui, du, a, b, &mut best);
                    }
                    if (rev >> bb) & 1 == 1 && fits(bb, aa) {
                        search.consider(ui, du, b, a, &mut best);
                    }
                }
            }
        }
    }
    let best = best
        .filter(|h| h.net >= 3)
        .ok_or(CalibrateError::NoConsistentPattern)?;
    refine(best, peaks, axis, lines, cfg, room, found)
}

/// Scored peaks that must agree on one offset before the quick identification fits.
const QUICK_VOTES: usize = 4;
/// Fewest lines the quick identification's fit must match to be taken.
const QUICK_LINES: usize = 4;

/// The quick identification with a nominal map, into `room` and `found`: whether it was taken.
///
/// A stored map that drifted mostly shifts the lines: the differences λ_line − u_peak of the
/// scored peaks then pile up at that shift. The densest window of them (the search window wide)
/// gives the hypothesis a = shift, b = 1, refined as a search result is (fits and re-matches).
/// It is taken when at least [`QUICK_LINES`] lines match with a weighted RMS below ¼ px and no
/// line on the fitted sensor at least as strong as the median matched one is left without a
/// peak ([`misses_a_line`]); otherwise the full search runs (a scale error of a few per cent,
/// a foreign frame whose lines swamp the lamp's). A crowded frame (more than [`DENSE_PEAKS`]
/// peaks) goes to the search at once: chance agreements there would make the quick test cost a
/// fit before failing. Work: ≤ 16 × 48 differences into a 64-bin histogram, then [`refine`]'s
/// bound and ≤ 48 line tests; no fit when fewer than [`QUICK_VOTES`] peaks agree. Out of line:
/// its frame is not under the search's.
#[inline(never)]
fn quick(
    peaks: &[Peak],
    scored: &[u8],
    lines: &[ReferenceLine],
    cfg: &IdentifyConfig,
    axis: &mut Axis,
    room: &mut FitRoom,
    found: &mut Identified,
) -> bool {
    let Some(m) = &cfg.nominal else {
        return false;
    };
    if !axis.lines_sorted || peaks.len() > DENSE_PEAKS {
        return false;
    }
    // Dispersion at the sensor centre (fm per px): windows need only its size.
    let Ok(slope) = m.slope_fm_per_px_q16(m.center_px_q16) else {
        return false;
    };
    let disp = (slope.unsigned_abs() >> 16).min(1 << 40) as i64;
    let tol = window_of(disp, cfg.search_window_px_q8 as i64);
    let Some(shift) = densest_offset(scored, &axis.u, lines, cfg.max_offset_fm, tol) else {
        return false;
    };
    axis.fill_uniform_slope(peaks.len(), disp);
    let h = Hypothesis {
        a_fm: shift,
        b_q30: 1 << 30,
        net: 0,
        concord: 0,
        cost: 0,
        lines_of: [u8::MAX; SCORE_PEAKS],
    };
    if refine(h, peaks, axis, lines, cfg, room, found).is_err() {
        return false;
    }
    found.pairs.len() >= QUICK_LINES
        && found.fit.rms_residual_fm <= (disp as u64) >> 2
        && !misses_a_line(found, lines, cfg)
}

/// The middle of the densest window of differences λ_line − u_peak (scored peaks, lines within
/// `max_offset_fm`), when at least [`QUICK_VOTES`] fall in it. The differences are counted in bins
/// `tol_fm` wide (wider where ±`max_offset_fm` would need more than 62) and the window is the
/// densest pair of neighbouring bins (the first on a tie): a histogram, no sort. Differences are
/// `i32` (offsets and windows below 2^29 fm, 0.5 mm); at most 64 are kept. Lines sorted by
/// wavelength; `tol_fm` at least 2^14 (16 pm). Out of line: its tables are not on the stack while
/// the fits run.
#[inline(never)]
fn densest_offset(
    scored: &[u8],
    u: &[i64],
    lines: &[ReferenceLine],
    max_offset_fm: i64,
    tol_fm: i64,
) -> Option<i64> {
    const LIMIT: i64 = 1 << 29;
    const BINS: usize = 64;
    if !(0..LIMIT).contains(&max_offset_fm) || !(1 << 14..LIMIT).contains(&tol_fm) {
        return None;
    }
    let mut diffs: Vec<i32, 64> = Vec::new();
    'peaks: for &k in scored {
        let Some(&uk) = u.get(k as usize) else {
            continue;
        };
        let lo = uk.saturating_sub(max_offset_fm);
        let start = lines.partition_point(|l| l.wavelength_fm < lo);
        for l in lines.iter().skip(start) {
            let d = l.wavelength_fm.saturating_sub(uk);
            if d > max_offset_fm {
                break;
            }
            if d < -max_offset_fm {
                continue;
            }
            // |d| < 2^29: exact in i32.
            if diffs.push(d as i32).is_err() {
                break 'peaks;
            }
        }
    }
    // Bin width w ≥ tol with 2 · max_offset / w < 62, and r = ⌈2^30 / w⌉ ≤ 2^16 (w ≥ 2^14 fm) for
    // the bin index ⌊(v >> 14) · r / 2^16⌋ ≈ v / w, v = d + max_offset < 2^30: a 32-bit product
    // (any fixed monotone binning serves: the offset is the median of the window's differences).
    let (max_off, tol) = (max_offset_fm as u32, tol_fm as u32);
    let width = tol.max(max_off / 31 + 1);
    let recip = (1u32 << 30).div_ceil(width);
    let mut bins = [0u8; 64];
    let mut count = [0u8; BINS];
    for (&d, slot) in diffs.iter().zip(bins.iter_mut()) {
        let v = (d as i64 + max_offset_fm) as u32;
        let b = (((v >> 14) * recip) >> 16).min(BINS as u32 - 1) as u8;
        *slot = b;
        if let Some(c) = count.get_mut(b as usize) {
            *c += 1;
        }
    }
    let (mut best, mut at) = (0u32, 0usize);
    for (i, pair) in count.windows(2).enumerate() {
        let n = pair.iter().map(|&c| c as u32).sum::<u32>();
        if n > best {
            (best, at) = (n, i);
        }
    }
    if (best as usize) < QUICK_VOTES {
        return None;
    }
    // The window's median (a stray difference at its edge does not pull it).
    let mut inside: Vec<i32, 64> = Vec::new();
    for (&d, &b) in diffs.iter().zip(bins.iter()) {
        if (at..=at + 1).contains(&(b as usize)) {
            let _ = inside.push(d);
        }
    }
    let mid = inside.len() / 2;
    crate::sort::select_kth(&mut inside, mid).map(i64::from)
}

/// Whether a line on the fitted map's sensor, at least as strong as the median of the matched
/// ones, has no peak: a fit that took only part of the pattern (the search's miss rule, see
/// [`score`], kept to the lines that matter: a faint line lost under a foreign band is no sign of
/// a wrong identification, a missing strong one is).
fn misses_a_line(found: &Identified, lines: &[ReferenceLine], cfg: &IdentifyConfig) -> bool {
    let mut paired = [false; MAX_REFERENCE_LINES];
    let mut strengths: Vec<u32, 48> = Vec::new();
    for &(_, l) in &found.pairs {
        if let Some(slot) = paired.get_mut(l as usize) {
            *slot = true;
        }
        let _ = strengths.push(lines.get(l as usize).map_or(0, |r| r.strength));
    }
    let mid = strengths.len() / 2;
    let Some(median) = crate::sort::select_kth(&mut strengths, mid) else {
        return true;
    };
    let map = &found.fit.map;
    let last = ((cfg.pixels.max(2) as i32) - 1) << 16;
    let (Ok(a), Ok(b)) = (map.wavelength_fm(0), map.wavelength_fm(last)) else {
        return true;
    };
    let (lo, hi) = (a.min(b), a.max(b));
    lines
        .iter()
        .zip(paired.iter())
        .any(|(l, &seen)| !seen && l.strength >= median && (lo..=hi).contains(&l.wavelength_fm))
}

/// The fixed inputs of the hypothesis search.
struct Search<'a> {
    peaks: &'a [Peak],
    /// Indices of the peaks hypotheses are scored on (≤ [`SCORE_PEAKS`], ascending).
    scored: &'a [u8],
    axis: &'a Axis,
    lines: &'a [ReferenceLine],
    cfg: &'a IdentifyConfig,
    /// u at the sensor's ends.
    ends: (i64, i64),
    /// Largest |b| (Q30) for which b · u stays within `i64` at both ends.
    b_max_ends: u64,
    /// Stop a tying hypothesis' cost once it reaches the best's (see `score`).
    prune_cost: bool,
}

impl Search<'_> {
    /// The hypothesis through (u_i, line `la`) and (u_i + du, line `lb`): scored, and kept in `best`
    /// when it beats it.
    #[inline(never)]
    fn consider(&self, ui: i64, du: i64, la: u8, lb: u8, best: &mut Option<Hypothesis>) {
        let lines = self.lines;
        let (Some(ra), Some(rb)) = (lines.get(la as usize), lines.get(lb as usize)) else {
            return;
        };
        let Some(h) = hypothesis(
            ui,
            du,
            ra.wavelength_fm,
            rb.wavelength_fm,
            self.cfg,
            self.axis.b_max_u,
        ) else {
            return;
        };
        let Some(h) = score(h, self, best.as_ref()) else {
            return;
        };
        if better(&h, best) {
            *best = Some(h);
        }
    }
}

/// What every hypothesis reuses about the peaks.
struct Axis {
    /// u(p) per peak: nominal wavelength (fm) or the pixel (Q16 → fm-like integer).
    u: Vec<i64, 64>,
    /// du/dp per peak: the nominal map's slope (fm per px) or 65 536 (blind: u is the pixel in Q16).
    du_dp: Vec<i64, 64>,
    /// x (Q30) per peak on the fit's frame ([`standard_frame`]), for the fits and refinement.
    x: Vec<i64, 64>,
    /// Largest |b| (Q30) for which b · u stays within `i64` for every peak.
    b_max_u: u64,
    /// Largest |b| (Q30) for which b · du/dp stays within `i64` for every peak.
    b_max_du: u64,
    /// du/dp is the same at every peak.
    uniform_du: bool,
    /// u never falls from one peak to the next (so neither does λ for b ≥ 0, nor rises for b < 0).
    monotone: bool,
    /// The reference lines are sorted by wavelength (as `identify` requires; checked, not assumed).
    lines_sorted: bool,
}

impl Axis {
    const EMPTY: Axis = Axis {
        u: Vec::new(),
        du_dp: Vec::new(),
        x: Vec::new(),
        b_max_u: 0,
        b_max_du: 0,
        uniform_du: false,
        monotone: false,
        lines_sorted: false,
    };

    /// The axis of `peaks`, written over `self` (in place: 1.5 KiB).
    #[cfg(test)]
    fn fill(
        &mut self,
        peaks: &[Peak],
        lines: &[ReferenceLine],
        cfg: &IdentifyConfig,
    ) -> Result<(), CalibrateError> {
        self.fill_positions(peaks, lines, cfg)?;
        self.fill_slopes(peaks, cfg);
        Ok(())
    }

    /// u and x of every peak (du/dp is left empty: [`fill_slopes`](Self::fill_slopes) or
    /// [`fill_uniform_slope`](Self::fill_uniform_slope) adds it, so a quick identification that
    /// succeeds never works out the nominal slope at every peak).
    fn fill_positions(
        &mut self,
        peaks: &[Peak],
        lines: &[ReferenceLine],
        cfg: &IdentifyConfig,
    ) -> Result<(), CalibrateError> {
        let Axis { u, du_dp, x, .. } = self;
        u.clear();
        du_dp.clear();
        x.clear();
        let hw = cfg.nominal.as_ref().map(HalfWidth::forward);
        let fit_frame = standard_frame(cfg.pixels);
        let fit_hw = HalfWidth::forward(&fit_frame);
        let shared = shares_fit_frame(cfg);
        for p in peaks {
            let x_fit = fit_frame.x_q30_by(p.center_px_q16, &fit_hw);
            let v = match (&cfg.nominal, &hw) {
                (Some(m), Some(hw)) => {
                    let x = if shared {
                        x_fit
                    } else {
                        m.x_q30_by(p.center_px_q16, hw)
                    };
                    m.wavelength_at_x(x)?
                }
                _ => p.center_px_q16 as i64,
            };
            u.push(v).map_err(|_| CalibrateError::TooManyPoints)?;
            x.push(x_fit).map_err(|_| CalibrateError::TooManyPoints)?;
        }
        self.b_max_u = b_limit(&self.u);
        self.monotone = self.u.windows(2).all(|w| matches!(w, [a, b] if a <= b));
        self.lines_sorted = lines
            .windows(2)
            .all(|w| matches!(w, [a, b] if a.wavelength_fm <= b.wavelength_fm));
        Ok(())
    }

    /// du/dp of every peak: the nominal map's slope there (fm per px), sharing the pixel's x with
    /// its wavelength, or 65 536 blind (u is the pixel in Q16). The search's windows need it.
    fn fill_slopes(&mut self, peaks: &[Peak], cfg: &IdentifyConfig) {
        let Axis { du_dp, x, .. } = self;
        du_dp.clear();
        let hw = cfg.nominal.as_ref().map(HalfWidth::forward);
        // A nominal map on the fit's frame (as every stored map made by `WavelengthMap::new`) gives
        // each peak the same x: the same centre and the same half-width divide the same pixel.
        let shared = shares_fit_frame(cfg);
        for (k, p) in peaks.iter().enumerate() {
            let d = match (&cfg.nominal, &hw) {
                (Some(m), Some(hw)) => {
                    let x = match x.get(k) {
                        Some(&x) if shared => x,
                        _ => m.x_q30_by(p.center_px_q16, hw),
                    };
                    m.slope_at_x_by(x, hw).unwrap_or(0) >> 16
                }
                _ => 65_536,
            };
            let _ = du_dp.push(d);
        }
        self.b_max_du = b_limit(&self.du_dp);
        self.uniform_du = self.du_dp.windows(2).all(|w| matches!(w, [a, b] if a == b));
    }

    /// du/dp = `d` (fm per px) at every one of `n` peaks: the quick identification's windows, from
    /// the nominal slope at the sensor centre.
    fn fill_uniform_slope(&mut self, n: usize, d: i64) {
        self.du_dp.clear();
        for _ in 0..n.min(64) {
            let _ = self.du_dp.push(d);
        }
        self.b_max_du = b_limit(&self.du_dp);
        self.uniform_du = true;
    }

    /// λ of peak `k` under the hypothesis: a + b · u (b in Q30), through `i64` where that is exact.
    #[inline(always)]
    fn lam(&self, h: &Hypothesis, k: usize) -> i64 {
        let uk = self.u.get(k).copied().unwrap_or(0);
        // Both in `i32` (b near 1 in Q30, λ below 2.1 mm in fm): the same exact product from
        // 32-bit pieces, cheaper than the library's 64-bit one on the Cortex-M0.
        if let (Ok(b), Ok(u)) = (i32::try_from(h.b_q30), i32::try_from(uk)) {
            return h.a_fm + (mul_i32_wide(b, u) >> 30);
        }
        if h.b_q30.unsigned_abs() <= self.b_max_u {
            h.a_fm + ((h.b_q30 * uk) >> 30)
        } else {
            h.a_fm + wide_q30(h.b_q30, uk) as i64
        }
    }

    /// Local dispersion of a hypothesis at peak `k`, fm per pixel.
    fn dispersion_fm_per_px(&self, h: &Hypothesis, k: usize) -> i64 {
        let d = self.du_dp.get(k).copied().unwrap_or(0);
        // As in `lam`: both in `i32`, the same exact product from 32-bit pieces.
        if let (Ok(b), Ok(d)) = (i32::try_from(h.b_q30), i32::try_from(d)) {
            return (mul_i32_wide(b, d) >> 30).unsigned_abs() as i64;
        }
        if h.b_q30.unsigned_abs() <= self.b_max_du {
            ((h.b_q30 * d) >> 30).unsigned_abs() as i64
        } else {
            wide_q30(h.b_q30, d).unsigned_abs() as i64
        }
    }
}

/// (b · v) >> 30 through 128 bits, for products past `i64` (kept out of line: rare).
#[inline(never)]
fn wide_q30(b: i64, v: i64) -> i128 {
    (b as i128 * v as i128) >> 30
}

/// Largest |b| (Q30) for which b · v stays within `i64` for every v in `vals`.
fn b_limit(vals: &[i64]) -> u64 {
    let top = vals
        .iter()
        .map(|v| v.unsigned_abs())
        .max()
        .unwrap_or(0)
        .max(1);
    i64::MAX as u64 / top
}

/// Whether the nominal map is on the fit's frame (centre, half-width), so a peak's x is the same on
/// both.
fn shares_fit_frame(cfg: &IdentifyConfig) -> bool {
    let f = standard_frame(cfg.pixels);
    cfg.nominal.as_ref().is_some_and(|m| {
        (m.center_px_q16, m.half_width_px_q16) == (f.center_px_q16, f.half_width_px_q16)
    })
}

/// Largest |(λ_b − λ_a) − du| a nominal-map hypothesis over `du` can have (see `line_masks` for
/// the bound on b), rounded up; `None` (no limit) when calibrating blind.
fn scale_slack(du: i64, cfg: &IdentifyConfig) -> Option<u128> {
    cfg.nominal?;
    let (du, ppm) = (du.unsigned_abs(), cfg.max_scale_error_ppm.checked_add(2));
    if let (Ok(du), Some(ppm)) = (u32::try_from(du), ppm) {
        // Both below 2^32: the product is one 32 × 32 → 64-bit multiply.
        return Some(per_million(crate::find::math::mul_u32_wide(du, ppm)) as u128 + 1);
    }
    let prod = du as u128 * (cfg.max_scale_error_ppm as u128 + 2);
    Some(match u64::try_from(prod) {
        Ok(p) => per_million(p) as u128 + 1,
        Err(_) => prod / 1_000_000 + 1,
    })
}

/// ⌊p / 10⁶⌋ by a multiply: 10⁶ = 2^6 · 15 625, and ⌊n / 15 625⌋ = (n · m) >> 72 for n < 2^58 with
/// m = ⌈2^72 / 15 625⌉ (m · 15 625 − 2^72 = 5 054 < 2^14, the bound for exactness). One 64 × 64-bit
/// product instead of a ~400-instruction division on the Cortex-M0.
fn per_million(p: u64) -> u64 {
    const M: u64 = 302_231_454_903_657_294;
    (super::muldiv::mul_64x64(p >> 6, M) >> 72) as u64
}

/// Per strong peak, the strong lines (bit = position in `strong_lines`) it may be paired with as the
/// first peak of a hypothesis, and as the second; all lines when calibrating blind.
///
/// First: the offset test of [`hypothesis`] itself (|λ − u| ≤ the largest offset at that peak).
/// Second: a hypothesis through (u_i, λ_a) and (u_j, λ_b) has |b − 1| < (max_scale_error + 2) ppm
/// (the +2 covers the truncation of b), so λ_b − u_j = (λ_a − u_i) + (b − 1)(u_j − u_i) is within
/// the largest offset plus that scale error over the strong peaks' span of u. Values beyond 2^61
/// (nothing an instrument produces) keep every line, so no hypothesis is ever lost.
fn line_masks(
    strong_peaks: &[u8],
    strong_lines: &[u8],
    u: &[i64],
    lines: &[ReferenceLine],
    cfg: &IdentifyConfig,
) -> (Vec<u32, 20>, Vec<u32, 20>) {
    let all = (1u32 << strong_lines.len().min(20)).wrapping_sub(1);
    let us = || {
        strong_peaks
            .iter()
            .filter_map(|&i| u.get(i as usize).copied())
    };
    let ws = || {
        strong_lines
            .iter()
            .map(|&l| lines.get(l as usize).map_or(0, |r| r.wavelength_fm))
    };
    let mut first: Vec<u32, 20> = Vec::new();
    let mut second: Vec<u32, 20> = Vec::new();
    const SANE: u64 = 1 << 61;
    let sane = us().chain(ws()).all(|v| v.unsigned_abs() <= SANE)
        && cfg.max_offset_fm.unsigned_abs() <= SANE;
    let (lo, hi) = (us().min().unwrap_or(0), us().max().unwrap_or(0));
    let reach = if sane {
        let span = (hi as i128 - lo as i128).unsigned_abs();
        let prod = span * (cfg.max_scale_error_ppm as u128 + 2);
        // ⌊prod / 10⁶⌋: by `per_million` in u64 (exact there), else the wide division.
        let scale = match u64::try_from(prod) {
            Ok(p) => per_million(p) as u128,
            Err(_) => prod / 1_000_000,
        } + 1;
        Some(cfg.max_offset_fm as i128 + scale.min(1 << 64) as i128)
    } else {
        None
    };
    let cap = reach.map(reach_cap);
    for ui in us() {
        let (f, s) = match (&cfg.nominal, reach) {
            (None, _) => (all, all),
            (Some(_), _) => {
                let mut f = 0u32;
                let mut s = 0u32;
                for (bit, w) in ws().enumerate() {
                    // The same (wrapping) i64 expression as in `hypothesis`.
                    if w.wrapping_sub(ui).wrapping_abs() <= cfg.max_offset_fm {
                        f |= 1 << bit;
                    }
                    if within_reach(w, ui, cap) {
                        s |= 1 << bit;
                    }
                }
                (f, s)
            }
        };
        let _ = first.push(f);
        let _ = second.push(s);
    }
    (first, second)
}

/// A `line_masks` reach r as a `u64` cap on |λ − u|: `None` below 0 (nothing passes), `u64::MAX`
/// past it (everything does: sane values are at most 2^61 apart twice over).
fn reach_cap(r: i128) -> Option<u64> {
    u64::try_from(r).ok().or((r > 0).then_some(u64::MAX))
}

/// |w − u| ≤ r for sane w, u (|·| ≤ 2^61, so the difference is exact in `i64`) and
/// `cap` = [`reach_cap`]`(r)` (`None`: no reach, every line passes): the 128-bit test in `u64`.
fn within_reach(w: i64, u: i64, cap: Option<Option<u64>>) -> bool {
    match cap {
        Some(Some(c)) => (w - u).unsigned_abs() <= c,
        Some(None) => false,
        None => true,
    }
}

fn better(h: &Hypothesis, best: &Option<Hypothesis>) -> bool {
    match best {
        None => h.net > 0,
        Some(b) => (h.net, h.concord, -h.cost) > (b.net, b.concord, -b.cost),
    }
}

/// Indices of the `k` (≤ N) largest of at most 64 values, largest first, ties by index.
///
/// A running top-k list (no 64-entry copy on the stack): each value goes in after every kept one at
/// least as large, so ties keep index order, as a stable sort of all of them would. Loop bound:
/// ≤ 64 values × ≤ N shifts.
fn strongest<const N: usize>(values: impl Iterator<Item = u32>, k: usize) -> Vec<u8, N> {
    let k = k.min(N);
    let mut top: Vec<(u32, u8), N> = Vec::new();
    if k == 0 {
        return Vec::new();
    }
    for (i, v) in values.enumerate().take(64) {
        if top.len() >= k {
            // Full: the last kept one is the weakest (the latest of equals) and stays ahead of v.
            if top.last().is_some_and(|&(w, _)| w >= v) {
                continue;
            }
            top.pop();
        }
        let _ = top.push((v, i as u8));
        // Sorted but for the new last entry: it moves up past every weaker one (the stable
        // insertion sort's moves, without its pass over the sorted rest).
        let mut j = top.len().saturating_sub(1);
        while let Some([a, b]) = j
            .checked_sub(1)
            .and_then(|i| top.get_mut(i..=j))
            .and_then(|w| <&mut [(u32, u8); 2]>::try_from(w).ok())
        {
            if a.0 >= v {
                break;
            }
            core::mem::swap(a, b);
            j -= 1;
        }
    }
    crate::bounded::collect_bounded(top.iter().map(|&(_, i)| i))
}

/// The hypothesis through (u_i, wa) and (u_i + du, wb), if it is within the search range.
///
/// `b_max_u` is [`Axis::b_max_u`] (|b| up to it keeps b · u_i in `i64`). Each step takes the 64-bit
/// path where its operands are small enough for it to give the same integer as the 128-bit one.
fn hypothesis(
    ui: i64,
    du: i64,
    wa: i64,
    wb: i64,
    cfg: &IdentifyConfig,
    b_max_u: u64,
) -> Option<Hypothesis> {
    let gap = wb - wa;
    let b_q30 = if gap.unsigned_abs() < 1 << 33 {
        (gap << 30).checked_div(du)?
    } else {
        i64::try_from((gap as i128) << 30).ok()?.checked_div(du)?
    };
    let a_fm = if b_q30.unsigned_abs() <= b_max_u {
        wa - ((b_q30 * ui) >> 30)
    } else {
        wa - (((b_q30 as i128) * ui as i128) >> 30) as i64
    };
    match &cfg.nominal {
        Some(_) => {
            let e = (b_q30 - (1 << 30)).unsigned_abs();
            let dev = if e < 1 << 44 {
                ((e * 1_000_000) >> 30) as u128
            } else {
                (e as u128 * 1_000_000) >> 30
            };
            if dev > cfg.max_scale_error_ppm as u128 {
                return None;
            }
            // Offset at the peak: wa − u_i, i.e. how far the nominal is off there.
            if (wa - ui).abs() > cfg.max_offset_fm {
                return None;
            }
        }
        None => {
            // b is fm per Q16 px: scale to fm/px (· 2^16 / 2^30 of a magnitude is a shift by 14).
            let disp = (b_q30.unsigned_abs() >> 14) as i128;
            let (lo, hi) = cfg.blind_dispersion_fm_per_px;
            if disp < lo as i128 || disp > hi as i128 {
                return None;
            }
        }
    }
    Some(Hypothesis {
        a_fm,
        b_q30,
        net: 0,
        concord: 0,
        cost: 0,
        lines_of: [u8::MAX; SCORE_PEAKS],
    })
}

/// Scores a hypothesis; `None` when it cannot reach the floor (the best net score so far, 1 before
/// any: a hypothesis below it can never be taken, so its scoring stops as soon as that is certain).
/// When it matched the same lines to the same peaks as `best`, it has the same strength agreement,
/// which is then copied rather than counted again.
///
/// Net score = peaks landing on a line − lines at least as strong as the weakest matched one that fall
/// on the sensor with no peak there: a wrong scale that matches three faint lines by chance must
/// explain why the strong ones are missing.
fn score(mut h: Hypothesis, search: &Search<'_>, best: Option<&Hypothesis>) -> Option<Hypothesis> {
    let Search {
        peaks,
        scored,
        axis,
        lines,
        cfg,
        ends: ends_u,
        b_max_ends,
        prune_cost,
    } = *search;
    let floor = best.map_or(1, |b| b.net);
    let mut votes = 0i32;
    // (distance, window) of each matched peak: the cost below, only when it can decide.
    let mut hits: Vec<(i64, i64), SCORE_PEAKS> = Vec::new();
    let mut weakest = u32::MAX;
    let mut lam_of: Vec<(i64, i64), SCORE_PEAKS> = Vec::new();
    let mut matched: Vec<(u32, u32), SCORE_PEAKS> = Vec::new();
    let window = cfg.window_q8();
    // One dispersion for every peak when du/dp is the same everywhere (blind: u is the pixel).
    let uniform_tol = axis
        .uniform_du
        .then(|| window_of(axis.dispersion_fm_per_px(&h, 0), window));
    // λ runs monotonically over the peaks (u sorted): the nearest line moves one way only. With
    // |a| ≤ 2^61 and |b · u| ≤ 2^61 no λ wraps, so the order holds.
    let bounded = h.a_fm.unsigned_abs() <= 1 << 61 && h.b_q30.unsigned_abs() <= axis.b_max_u / 4;
    let mut cursor = match (axis.monotone && axis.lines_sorted && bounded, h.b_q30 >= 0) {
        (false, _) => Cursor::Search,
        (true, true) => Cursor::Up(0),
        (true, false) => Cursor::Down(lines.len()),
    };
    let n = scored.len() as i32;
    let mut seen_lines = [false; MAX_REFERENCE_LINES];
    for (m, &k) in scored.iter().enumerate() {
        if votes + (n - m as i32) < floor {
            return None;
        }
        let k = k as usize;
        let Some(p) = peaks.get(k) else {
            continue;
        };
        let lam = axis.lam(&h, k);
        let tol = match uniform_tol {
            Some(t) => t,
            None => window_of(axis.dispersion_fm_per_px(&h, k), window),
        };
        let _ = lam_of.push((lam, tol));
        let (idx, d) = cursor.nearest(lines, lam);
        if d <= tol {
            votes += 1;
            // This line is seen (a peak lies within its window): no search for it below.
            if let Some(seen) = seen_lines.get_mut(idx) {
                *seen = true;
            }
            if let Some(slot) = h.lines_of.get_mut(m) {
                *slot = idx as u8;
            }
            let _ = hits.push((d, tol));
            let strength = lines.get(idx).map_or(0, |l| l.strength);
            weakest = weakest.min(strength);
            let _ = matched.push((p.snr_q8, strength));
        }
    }
    if votes < floor {
        return None;
    }
    let lam_end = |uv: i64| {
        if h.b_q30.unsigned_abs() <= b_max_ends {
            h.a_fm + ((h.b_q30 * uv) >> 30)
        } else {
            h.a_fm + (((h.b_q30 as i128) * uv as i128) >> 30) as i64
        }
    };
    let (e0, e1) = (lam_end(ends_u.0), lam_end(ends_u.1));
    let (lo, hi) = (e0.min(e1), e0.max(e1));
    let mut misses = 0i32;
    for (i, l) in lines
        .iter()
        .enumerate()
        .filter(|(_, l)| l.strength >= weakest && (lo..=hi).contains(&l.wavelength_fm))
    {
        let seen = seen_lines.get(i).copied().unwrap_or(false)
            || lam_of
                .iter()
                .any(|&(lam, tol)| (lam - l.wavelength_fm).abs() <= tol);
        if !seen {
            misses += 1;
            if votes - misses < floor {
                return None;
            }
        }
    }
    h.net = votes - misses;
    // Brighter peaks should sit on lines expected to be stronger (a tie-breaker: detector response
    // and self-absorption bend this, but rarely reverse a whole series).
    h.concord = match best {
        Some(b) if b.lines_of == h.lines_of => b.concord,
        _ => {
            let mut concord = 0i32;
            // sign(x − y) of two u32 as −1, 0, 1 (the same as through i64).
            let sign = |x: u32, y: u32| i32::from(x > y) - i32::from(x < y);
            for (i, a) in matched.iter().enumerate() {
                for b in matched.iter().skip(i + 1) {
                    concord += sign(a.0, b.0) * sign(a.1, b.1);
                }
            }
            concord
        }
    };
    // The cost only breaks a tie of (net, concord) with the best, and is the best's own once this
    // one is taken: below the best it decides nothing and is not summed (0 stands in).
    // 0 ≤ d ≤ tol: below 2^23 the quotient is the same in u32, at most 256.
    let term = |&(d, tol): &(i64, i64)| {
        if tol < 1 << 23 {
            i64::from(ratio_q8(d as u32, tol.max(1) as u32))
        } else {
            d * 256 / tol.max(1)
        }
    };
    h.cost = match best {
        Some(b) if (h.net, h.concord) < (b.net, b.concord) => 0,
        // A tie on (net, concord) wins only below the best's cost, and the terms are ≥ 0: once
        // the sum reaches it the hypothesis loses, whatever the rest adds (its cost is then not
        // the full sum, but a losing hypothesis is dropped).
        Some(b) if prune_cost && (h.net, h.concord) == (b.net, b.concord) => {
            let mut sum = 0i64;
            for hit in hits.iter() {
                sum += term(hit);
                if sum >= b.cost {
                    break;
                }
            }
            sum
        }
        _ => hits.iter().map(term).sum(),
    };
    Some(h)
}

/// A consensus window in fm: (dispersion · window) >> 8 for a dispersion ≥ 0 (fm/px) and a window
/// ≥ 0 (px, Q8); one 32-bit multiply where both are small enough for the product to fit (a real
/// dispersion is below 2^22 fm/px, a window below 2^10), the same integer as the 64-bit product.
fn window_of(dispersion: i64, window_q8: i64) -> i64 {
    if (0..1 << 22).contains(&dispersion) && (0..1 << 10).contains(&window_q8) {
        return i64::from(((dispersion as u32) * (window_q8 as u32)) >> 8);
    }
    (dispersion * window_q8) >> 8
}

/// ⌊256 · d / t⌋ for 0 ≤ d ≤ t and 1 ≤ t < 2^23 (so the quotient is at most 256 and t · 2^8 fits):
/// nine steps of restoring division, the same quotient as the library's general one.
fn ratio_q8(d: u32, t: u32) -> u32 {
    let mut rem = d << 8;
    let mut q = 0;
    for bit in (0..=8u32).rev() {
        let s = t << bit;
        if rem >= s {
            rem -= s;
            q |= 1 << bit;
        }
    }
    q
}

/// Where the nearest-line search starts for the next peak.
enum Cursor {
    /// Binary search every time (λ not known to be monotone).
    Search,
    /// λ rises from peak to peak: the partition point only moves up from here.
    Up(usize),
    /// λ falls from peak to peak: the partition point only moves down from here.
    Down(usize),
}

impl Cursor {
    /// [`nearest`]: the same partition point (first line with λ_line ≥ λ), found by walking from the
    /// previous one; over a hypothesis the walk is at most the line count in all.
    fn nearest(&mut self, lines: &[ReferenceLine], lam: i64) -> (usize, i64) {
        let below = |i: usize| lines.get(i).is_some_and(|l| l.wavelength_fm < lam);
        let pos = match self {
            Cursor::Search => return nearest(lines, lam),
            Cursor::Up(pos) => {
                while *pos < lines.len() && below(*pos) {
                    *pos += 1;
                }
                *pos
            }
            Cursor::Down(pos) => {
                while *pos > 0 && !below(*pos - 1) {
                    *pos -= 1;
                }
                *pos
            }
        };
        nearest_around(lines, lam, pos)
    }
}

/// (index, |distance|) of the line nearest to `lam`.
fn nearest(lines: &[ReferenceLine], lam: i64) -> (usize, i64) {
    nearest_around(lines, lam, lines.partition_point(|l| l.wavelength_fm < lam))
}

/// The nearer of the lines either side of partition point `pos` (the lower one on a tie).
fn nearest_around(lines: &[ReferenceLine], lam: i64, pos: usize) -> (usize, i64) {
    let mut best = (0usize, i64::MAX);
    for idx in [pos.wrapping_sub(1), pos] {
        if let Some(l) = lines.get(idx) {
            let d = (l.wavelength_fm - lam).abs();
            if d < best.1 {
                best = (idx, d);
            }
        }
    }
    best
}

/// Fits the hypothesis' inliers, then re-matches with the fitted map and tighter windows (4 rounds),
/// into `out`.
fn refine(
    h: Hypothesis,
    peaks: &[Peak],
    axis: &Axis,
    lines: &[ReferenceLine],
    cfg: &IdentifyConfig,
    room: &mut FitRoom,
    out: &mut Identified,
) -> Result<(), CalibrateError> {
    let Identified { fit, pairs } = out;
    pairs.clear();
    for k in 0..peaks.len() {
        let lam = axis.lam(&h, k);
        let tol = (axis.dispersion_fm_per_px(&h, k) * cfg.window_q8()) >> 8;
        let (idx, d) = nearest(lines, lam);
        if d <= tol {
            push_unique(pairs, k as u8, idx as u8, peaks)?;
        }
    }
    fit_pairs(pairs, peaks, axis, lines, cfg, room, fit)?;
    for round in 0..4 {
        let mut next: Vec<(u8, u8), 48> = Vec::new();
        let hw = HalfWidth::forward(&fit.map);
        // Every fit is on the fit frame, where the axis holds each peak's x already.
        let on_frame = {
            let f = standard_frame(cfg.pixels);
            (fit.map.center_px_q16, fit.map.half_width_px_q16)
                == (f.center_px_q16, f.half_width_px_q16)
        };
        for (k, p) in peaks.iter().enumerate() {
            // A fitted peak's (λ, slope) on this map came with the fit (the same calls).
            let fitted = room
                .point_of_peak
                .get(k)
                .and_then(|&j| room.evals.get((j as usize).checked_sub(1)?));
            let (lam, slope) = match (fitted, axis.x.get(k)) {
                (Some(&e), _) => e,
                // wavelength_and_slope_by's steps from its x.
                (None, Some(&x)) if on_frame => {
                    (fit.map.wavelength_at_x(x)?, fit.map.slope_at_x_by(x, &hw)?)
                }
                _ => fit.map.wavelength_and_slope_by(p.center_px_q16, &hw)?,
            };
            let disp = slope.abs() >> 16;
            let sigma_win = (p.center_sigma_px_q16 as i64 * cfg.final_window_sigma_q8 as i64) >> 16;
            // Windows shrink from the search width towards the final one over the rounds.
            let search = cfg.window_q8() >> (round + 1);
            let win_q8 = sigma_win.max(cfg.min_window_px_q8 as i64).max(search);
            let tol = (disp * win_q8) >> 8;
            let (idx, d) = nearest(lines, lam);
            if d <= tol {
                push_unique(&mut next, k as u8, idx as u8, peaks)?;
            }
        }
        // The same pairs again: their fit is the one in hand (fits are deterministic), done.
        if next.len() < 3 || next == *pairs {
            break;
        }
        fit_pairs(&next, peaks, axis, lines, cfg, room, fit)?;
        *pairs = next;
    }
    Ok(())
}

/// Adds (peak, line); when the line is already claimed, the brighter peak keeps it (the fainter one is
/// a neighbour or a foreign line).
fn push_unique(
    pairs: &mut Vec<(u8, u8), 48>,
    k: u8,
    idx: u8,
    peaks: &[Peak],
) -> Result<(), CalibrateError> {
    let snr = |i: u8| peaks.get(i as usize).map_or(0, |p| p.snr_q8);
    if let Some(slot) = pairs.iter_mut().find(|(_, l)| *l == idx) {
        if snr(k) > snr(slot.0) {
            *slot = (k, idx);
        }
        return Ok(());
    }
    pairs
        .push((k, idx))
        .map_err(|_| CalibrateError::TooManyPoints)
}

fn fit_pairs(
    pairs: &[(u8, u8)],
    peaks: &[Peak],
    axis: &Axis,
    lines: &[ReferenceLine],
    cfg: &IdentifyConfig,
    room: &mut FitRoom,
    out: &mut MapFit,
) -> Result<(), CalibrateError> {
    let FitRoom {
        points: pts,
        xs,
        us,
        scratch,
        evals,
        point_of_peak,
    } = room;
    pts.clear();
    xs.clear();
    us.clear();
    *point_of_peak = [0; 64];
    for &(k, l) in pairs {
        let (Some(p), Some(line)) = (peaks.get(k as usize), lines.get(l as usize)) else {
            continue;
        };
        pts.push(FitPoint {
            center_px_q16: p.center_px_q16,
            // A blended peak's centre is pulled by its neighbour: it counts a sixteenth.
            sigma_px_q16: p.center_sigma_px_q16.max(64).saturating_mul(if p.blended {
                4
            } else {
                1
            }),
            wavelength_fm: line.wavelength_fm,
        })
        .map_err(|_| CalibrateError::TooManyPoints)?;
        if let Some(slot) = point_of_peak.get_mut(k as usize) {
            *slot = pts.len() as u8;
        }
        // The axis' x is the fit frame's (a peak without one leaves `xs` short: not used).
        if let Some(&x) = axis.x.get(k as usize) {
            let _ = xs.push(x);
        }
        if let Some(&u) = axis.u.get(k as usize) {
            let _ = us.push(u);
        }
    }
    // Fewer points than a full fit wants: drop the degree until the points just determine it.
    let max_deg = (pts.len() as i32 - 1).clamp(1, 3) as u8;
    let degree = cfg.degree.min(max_deg);
    // With a nominal map, u is its wavelength: the 64-bit fit of the differences where it applies.
    let done = cfg
        .nominal
        .as_ref()
        .and_then(|m| {
            fit_correction(
                pts,
                xs,
                us,
                m,
                degree,
                cfg.pixels,
                out,
                scratch,
                Some(&mut evals[..]),
            )
        })
        .unwrap_or_else(|| {
            fit_map_at(pts, Some(xs), degree, cfg.pixels, out, scratch, Some(evals))
        });
    if done.is_err() {
        // No fit: no (λ, slope) of it either.
        *point_of_peak = [0; 64];
    }
    done
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The running top-k list picks what a stable sort of every value did, ties by index.
    #[test]
    fn strongest_equals_a_stable_sort_of_all() {
        let mut x = 12345u64;
        for round in 0..300 {
            let n = round % 70;
            let vals: std::vec::Vec<u32> = (0..n)
                .map(|_| {
                    x = x
                        .wrapping_mul(6364136223846793005)
                        .wrapping_add(1442695040888963407);
                    ((x >> 33) % if round % 3 == 0 { 4 } else { 1000 }) as u32
                })
                .collect();
            for k in [0usize, 1, 6, 16, 20, 25] {
                let mut all: std::vec::Vec<(u32, u8)> = vals
                    .iter()
                    .take(64)
                    .enumerate()
                    .map(|(i, &v)| (v, i as u8))
                    .collect();
                all.sort_by_key(|&(v, _)| core::cmp::Reverse(v));
                let want: std::vec::Vec<u8> = all.iter().take(k.min(20)).map(|&(_, i)| i).collect();
                let got: Vec<u8, 20> = strongest(vals.iter().copied(), k);
                assert_eq!(got.as_slice(), want.as_slice(), "{vals:?} k {k}");
            }
        }
    }

    /// True instrument: 2048 px, 370 → 700 nm, slight curvature.
    fn truth() -> WavelengthMap {
        WavelengthMap::new(2048, 2, [535_000_000, 165_000_000, -1_500_000, 0]).unwrap()
    }

    fn peak(center_px_q16: i32, snr: u32) -> Peak {
        Peak {
            center_px_q16,
            center_sigma_px_q16: 1 << 11,
            fwhm_px_q16: 3 << 16,
            height: 1000,
            area: 3000,
            snr_q8: snr << 8,
            saturated: false,
            blended: false,
        }
    }

    /// Balmer α…η of H in standard air (handbook values, from memory) as reference lines.
    fn balmer() -> Vec<ReferenceLine, 48> {
        let air_nm_e6 = [
            383_538_000i64,
            388_905_000,
            397_007_000,
            410_174_000,
            434_047_000,
            486_133_000,
            656_279_000,
        ];
        let strength = [5u32, 8, 12, 20, 40, 80, 200];
        air_nm_e6
            .iter()
            .zip(strength)
            .map(|(&w, s)| ReferenceLine {
                wavelength_fm: w,
                strength: s,
            })
            .collect()
    }

    fn frame(lines: &[ReferenceLine], visible: &[usize], foreign_nm_e6: &[i64]) -> Vec<Peak, 64> {
        let t = truth();
        let mut peaks: Vec<Peak, 64> = Vec::new();
        for &i in visible {
            let p = t.pixel_q16(lines[i].wavelength_fm).unwrap();
            peaks.push(peak(p + 900, 50 + 10 * i as u32)).unwrap();
        }
        for &w in foreign_nm_e6 {
            peaks.push(peak(t.pixel_q16(w).unwrap(), 120)).unwrap();
        }
        crate::sort::sort_by_key(&mut peaks, |p| p.center_px_q16);
        peaks
    }

    fn check(found: &Identified, peaks: &[Peak], lines: &[ReferenceLine], want: usize) {
        assert_eq!(found.pairs.len(), want, "{:?}", found.pairs);
        for &(k, l) in &found.pairs {
            let p = peaks[k as usize].center_px_q16;
            let expect = truth().pixel_q16(lines[l as usize].wavelength_fm).unwrap();
            assert!((p - expect - 900).abs() < 10, "peak {k} matched line {l}");
        }
        // The fitted map agrees with the truth to well under a pixel (0.16 nm) across the sensor.
        for px in [0, 512, 1024, 1536, 2047] {
            let d = found.fit.map.wavelength_fm(px << 16).unwrap()
                - truth().wavelength_fm(px << 16).unwrap();
            assert!(d.abs() < 40_000, "px {px}: {d} fm");
        }
    }

    #[test]
    fn finds_the_map_from_a_nominal_several_nm_off() {
        let lines = balmer();
        let peaks = frame(&lines, &[0, 1, 2, 3, 4, 5, 6], &[589_000_000, 546_074_000]);
        // Nominal: 5 nm off and 1.5 % wrong in dispersion.
        let nominal =
            WavelengthMap::new(2048, 2, [540_000_000, 167_475_000, -1_500_000, 0]).unwrap();
        let cfg = IdentifyConfig::new(2048, 2, Some(nominal));
        let found = identify(&peaks, &lines, &cfg).unwrap();
        check(&found, &peaks, &lines, 7);
    }

    #[test]
    fn finds_the_map_blind_from_three_balmer_lines_and_two_foreign_peaks() {
        let lines = balmer();
        let peaks = frame(&lines, &[4, 5, 6], &[589_000_000, 546_074_000]);
        let cfg = IdentifyConfig::new(2048, 2, None);
        let found = identify(&peaks, &lines, &cfg).unwrap();
        assert_eq!(found.pairs.len(), 3);
        for &(k, l) in &found.pairs {
            let expect = truth().pixel_q16(lines[l as usize].wavelength_fm).unwrap();
            assert!((peaks[k as usize].center_px_q16 - expect - 900).abs() < 10);
        }
    }

    #[test]
    fn noise_alone_gives_no_pattern() {
        let lines = balmer();
        let peaks: Vec<Peak, 64> = [100i32, 900, 1700]
            .iter()
            .map(|&p| peak(p << 16, 10))
            .collect();
        let cfg = IdentifyConfig::new(2048, 2, None);
        assert!(identify(&peaks, &lines, &cfg).is_err());
    }

    #[test]
    fn reach_in_u64_is_the_wide_test() {
        let mut next = crate::test_rng::xorshift(0x1f83_d9ab_fb41_bd6bu64);
        let sane = |v: u64| ((v as i64) >> (2 + v % 50)).clamp(-(1 << 61), 1 << 61);
        let (mut pass, mut fail) = (0, 0);
        for round in 0..200_000 {
            let (w, u) = (sane(next()), sane(next()));
            let r: i128 = match round % 5 {
                0 => (w as i128 - u as i128).abs() + (next() % 3) as i128 - 1,
                1 => -((next() % 1000) as i128),
                2 => (1i128 << 64) + (next() % 1000) as i128 - 500,
                _ => sane(next()) as i128,
            };
            let want = (w as i128 - u as i128).abs() <= r;
            assert_eq!(within_reach(w, u, Some(reach_cap(r))), want, "{w} {u} {r}");
            pass += usize::from(want);
            fail += usize::from(!want);
        }
        assert!(pass > 40_000 && fail > 40_000, "{pass} {fail}");
        assert!(within_reach(1 << 61, -(1 << 61), None));
    }

    #[test]
    fn per_million_is_the_plain_quotient() {
        let mut next = crate::test_rng::xorshift(0x3c6e_f372_fe94_f82bu64);
        for _ in 0..200_000 {
            let seed = next();
            let p = seed >> (seed % 64);
            assert_eq!(per_million(p), p / 1_000_000, "{p}");
        }
        for p in [0, 999_999, 1_000_000, u64::MAX, u64::MAX - 999_999] {
            assert_eq!(per_million(p), p / 1_000_000, "{p}");
        }
        // The constant: ⌈2^72 / 15 625⌉.
        assert_eq!(302_231_454_903_657_294u128, (1u128 << 72).div_ceil(15_625));
    }

    #[test]
    fn window_in_32_bits_is_the_64_bit_product() {
        let mut next = crate::test_rng::xorshift(0x7f4a_7c15_9e37_79b9u64);
        for _ in 0..100_000 {
            let seed = next();
            let d = (seed >> 20) as i64 >> (seed % 40);
            let w = (seed & 0xfff) as i64 >> (seed % 3);
            assert_eq!(window_of(d, w), (d * w) >> 8, "{d} {w}");
        }
        assert_eq!(
            window_of((1 << 22) - 1, 1023),
            (((1 << 22) - 1) * 1023) >> 8
        );
    }

    #[test]
    fn ratio_q8_is_the_plain_quotient() {
        let mut next = crate::test_rng::xorshift(0x0bad_5eed_1234_5678u64);
        for _ in 0..100_000 {
            let seed = next();
            let t = ((1 + (seed % ((1 << 23) - 1)) as u32) >> (seed >> 59)).max(1);
            let d = ((seed >> 24) % (t as u64 + 1)) as u32;
            assert_eq!(ratio_q8(d, t), (d << 8) / t, "{d} {t}");
        }
        assert_eq!(ratio_q8(0, 1), 0);
        assert_eq!(ratio_q8(1, 1), 256);
        let top = (1 << 23) - 1;
        assert_eq!(ratio_q8(top, top), 256);
        assert_eq!(ratio_q8(top - 1, top), ((top - 1) << 8) / top);
    }

    #[test]
    fn axis_x_and_u_are_the_maps_own() {
        let lines = balmer();
        let peaks = frame(&lines, &[0, 1, 2, 3, 4, 5, 6], &[]);
        // The nominal on the fit frame (shared x) and on another frame (its own x).
        let other = WavelengthMap::with_frame(
            900 << 16,
            1100 << 16,
            2,
            [500_000_000, 180_000_000, -2_000_000, 0],
            2048,
        )
        .unwrap();
        for nominal in [Some(truth()), Some(other), None] {
            let cfg = IdentifyConfig::new(2048, 2, nominal);
            let mut axis = Axis::EMPTY;
            axis.fill(&peaks, &lines, &cfg).unwrap();
            let fit_frame = standard_frame(2048);
            for (k, p) in peaks.iter().enumerate() {
                assert_eq!(axis.x[k], fit_frame.x_q30(p.center_px_q16));
                let u = match &nominal {
                    Some(m) => m.wavelength_fm(p.center_px_q16).unwrap(),
                    None => p.center_px_q16 as i64,
                };
                assert_eq!(axis.u[k], u);
            }
        }
    }

    /// Where the quick identification is taken, the search finds the same lines for the same peaks
    /// (random subsets of the Balmer lines, foreign peaks, nominal maps up to 6 nm and 1 % off),
    /// the maps to 200 fm, and the quick one is taken on most such frames.
    #[test]
    fn quick_identification_finds_what_the_search_finds() {
        let lines = balmer();
        let mut next = crate::test_rng::xorshift(0x5851_f42d_4c95_7f2du64);
        let (mut taken, mut tried) = (0, 0);
        for round in 0..400 {
            let visible: std::vec::Vec<usize> = (0..lines.len())
                .filter(|_| !next().is_multiple_of(5))
                .collect();
            let foreign: std::vec::Vec<i64> = (0..(next() % 3))
                .map(|_| 380_000_000 + (next() % 280_000_000) as i64)
                .collect();
            let peaks = frame(&lines, &visible, &foreign);
            let off = (next() % 12_000_000) as i64 - 6_000_000;
            let scale = 165_000_000 + (next() % 3_300_000) as i64 - 1_650_000;
            let nominal =
                WavelengthMap::new(2048, 2, [535_000_000 + off, scale, -1_500_000, 0]).unwrap();
            let cfg = IdentifyConfig::new(2048, 2, Some(nominal));
            let mut with = IdentifyWork::new();
            let mut without = IdentifyWork::new();
            without.no_quick = true;
            let a = identify_with(&peaks, &lines, &cfg, &mut with).cloned();
            let b = identify_with(&peaks, &lines, &cfg, &mut without).cloned();
            // Was the quick one taken? Then the search would not have run in `with`.
            let mut probe = IdentifyWork::new();
            probe.axis.fill_positions(&peaks, &lines, &cfg).unwrap();
            let scored: Vec<u8, SCORE_PEAKS> = {
                let mut s: Vec<u8, SCORE_PEAKS> =
                    strongest(peaks.iter().map(|p| p.snr_q8), SCORE_PEAKS);
                crate::sort::sort_by_key(&mut s, |&k| k);
                s
            };
            let IdentifyWork {
                axis, room, found, ..
            } = &mut probe;
            let quick_taken = quick(&peaks, &scored, &lines, &cfg, axis, room, found);
            tried += usize::from(b.is_ok());
            if quick_taken {
                taken += 1;
                // The search may refuse a frame with few lines (its misses count against it) that
                // the quick one matched at least QUICK_LINES lines of, with a good RMS.
                let a = a.unwrap();
                let Ok(b) = b else {
                    assert!(a.pairs.len() >= QUICK_LINES, "round {round}");
                    continue;
                };
                assert_eq!(a.pairs, b.pairs, "round {round}");
                for px in [0, 1024, 2047] {
                    let d = a.fit.map.wavelength_fm(px << 16).unwrap()
                        - b.fit.map.wavelength_fm(px << 16).unwrap();
                    assert!(d.abs() <= 200, "round {round} px {px}: {d} fm");
                }
            }
        }
        assert!(taken * 2 > tried, "{taken} of {tried}");
    }

    /// The quick identification's offset histogram finds a planted shift among chance differences.
    #[test]
    fn densest_offset_finds_the_shift() {
        let lines = balmer();
        let mut next = crate::test_rng::xorshift(0x1405_7b7e_f767_814fu64);
        for _ in 0..500 {
            let shift = (next() % 16_000_000) as i64 - 8_000_000;
            let mut u: std::vec::Vec<i64> = lines
                .iter()
                .map(|l| l.wavelength_fm - shift + (next() % 40_000) as i64)
                .collect();
            u.extend((0..3).map(|_| 380_000_000 + (next() % 280_000_000) as i64));
            let scored: std::vec::Vec<u8> = (0..u.len() as u8).collect();
            let got = densest_offset(&scored, &u, &lines, 10_000_000, 500_000).unwrap();
            assert!((got - shift).abs() <= 500_000, "{got} vs {shift}");
        }
        // Fewer than QUICK_VOTES agreeing differences: none.
        let u = [400_000_000i64, 500_000_000, 600_000_000];
        assert_eq!(
            densest_offset(&[0, 1, 2], &u, &lines, 10_000_000, 500_000),
            None
        );
    }

    #[test]
    fn pruned_costs_choose_what_full_costs_choose() {
        let lines = balmer();
        let mut next = crate::test_rng::xorshift(0x71ab_29c3_0e6d_4f85u64);
        let mut found = 0;
        for round in 0..300 {
            // Random subsets of the lines, foreign peaks, nominal offsets (or blind).
            let visible: std::vec::Vec<usize> = (0..lines.len())
                .filter(|_| !next().is_multiple_of(4))
                .collect();
            let foreign: std::vec::Vec<i64> = (0..(next() % 4))
                .map(|_| 380_000_000 + (next() % 280_000_000) as i64)
                .collect();
            let peaks = frame(&lines, &visible, &foreign);
            let nominal = (round % 4 != 0).then(|| {
                let off = (next() % 12_000_000) as i64 - 6_000_000;
                let scale = 165_000_000 + (next() % 5_000_000) as i64;
                WavelengthMap::new(2048, 2, [535_000_000 + off, scale, -1_500_000, 0]).unwrap()
            });
            let cfg = IdentifyConfig::new(2048, 2, nominal);
            let mut pruned = IdentifyWork::new();
            let mut full = IdentifyWork::new();
            full.full_cost = true;
            let a = identify_with(&peaks, &lines, &cfg, &mut pruned).cloned();
            let b = identify_with(&peaks, &lines, &cfg, &mut full).cloned();
            assert_eq!(a, b, "round {round}");
            found += usize::from(a.is_ok());
        }
        assert!(found > 100, "{found}");
    }
}
