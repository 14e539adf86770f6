//! Line candidates: local maxima of the lightly smoothed residual above a noise-scaled threshold, with
//! enough prominence, thinned to a minimum separation.
//!
//! The residual (frame − baseline) is smoothed with the integer kernel [1, 2, 3, 2, 1], close to a matched
//! filter for 2–5 px lines: it lifts a line's peak-to-noise ratio by 1.3–2× so weak lines clear a
//! threshold that pure noise almost never reaches. Its noise σ is sqrt(19) times the pixel σ (values are
//! kept ×9, unnormalised).

use super::config::FindConfig;
use super::noise::NoiseModel;
use heapless::Vec;

/// Prominence searches at full reach per frame, in units of `2 × reach` steps: a frame of 32 lines
/// above threshold searches each at full reach; beyond that (a comb of noise or spikes with a maximum every other
/// pixel) the walks shrink to [`SHORT_REACH`], which kept such a frame's detection from costing ~100
/// steps per pixel.
pub const VALLEY_BUDGET_PER_REACH: usize = 64;
/// Prominence search reach (px each way) once the budget is spent: a line's wings at the widest FWHM.
pub const SHORT_REACH: usize = 8;
/// Candidates kept before thinning and fitting.
pub const MAX_CANDIDATES: usize = 2 * super::MAX_PEAKS;
/// Σ k² of the smoothing kernel: its noise variance factor before the ×9 scale.
const KERNEL_SQ_SUM: i128 = 19;

/// A local maximum of the smoothed residual.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Candidate {
    /// Pixel of the maximum.
    pub pos: usize,
    /// Smoothed residual there (frame units × 9; the smoothed row is `i32`).
    pub strength: i32,
}

/// Largest |value| of frame and baseline for [`smooth_residual`]'s 32-bit path: residuals < 2^26,
/// smoothed sums (× 9) < 2^30.
pub const NARROW: i32 = 1 << 25;

/// Writes the smoothed residual `Σ k_j (frame − base)[i + j]` (×9) into `out`, replicating edge pixels.
///
/// Loop bound: one pass over `out` (five taps per pixel).
pub fn smooth_residual(frame: &[i32], base: &[i32], out: &mut [i32]) {
    let n = out.len().min(frame.len()).min(base.len());
    let both =
        within_narrow(frame.get(..n).unwrap_or(&[])) && within_narrow(base.get(..n).unwrap_or(&[]));
    smooth_residual_known(frame, base, out, both);
}

/// Whether every value lies in −2^25 … 2^25 − 1 (within ±[`NARROW`], the one value 2^25 aside,
/// which the 64-bit path then takes, to the same sums): each value offset by 2^25 and or-ed into
/// one word, which stays below 2^26 exactly then — an add and an or a value, four values a loop
/// step, no branch (a compare and branch a value cost 3.5× this).
#[inline(never)]
fn within_narrow(values: &[i32]) -> bool {
    let off = |v: i32| v.wrapping_add(NARROW) as u32;
    let (quads, tail) = values.as_chunks::<4>();
    let mut seen = 0u32;
    for q in quads {
        seen |= off(q[0]) | off(q[1]) | off(q[2]) | off(q[3]);
    }
    for &v in tail {
        seen |= off(v);
    }
    seen < 1 << 26
}

/// [`smooth_residual`] when the caller already knows whether frame and baseline are within
/// ±[`NARROW`] (`narrow`; a wrong `true` gives wrapped sums, never a panic).
pub(crate) fn smooth_residual_known(frame: &[i32], base: &[i32], out: &mut [i32], narrow: bool) {
    let n = out.len().min(frame.len()).min(base.len());
    if n >= 5 && narrow {
        smooth_narrow(
            frame.get(..n).unwrap_or(&[]),
            base.get(..n).unwrap_or(&[]),
            out,
        );
        return;
    }
    let r = |j: usize| {
        let j = j.min(n.saturating_sub(1));
        i64::from(frame.get(j).copied().unwrap_or(0)) - i64::from(base.get(j).copied().unwrap_or(0))
    };
    for (i, o) in out.iter_mut().enumerate() {
        let left2 = r(i.saturating_sub(2));
        let left1 = r(i.saturating_sub(1));
        let v = left2 + 2 * left1 + 3 * r(i) + 2 * r(i + 1) + r(i + 2);
        *o = v.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32;
    }
}

/// [`smooth_residual`] in 32 bits for `n ≥ 5` values within ±[`NARROW`] (the same integers), as two
/// three-tap boxes, `[1, 2, 3, 2, 1] = [1, 1, 1] ∗ [1, 1, 1]`: each pixel's residual enters one
/// running box sum and each box sum one output, four adds a pixel with the residuals and box sums
/// in reach carried from pixel to pixel (~16 instructions a pixel on the M0). The output runs two
/// pixels behind the residual it reads, so `out` needs no second row; edge pixels are replicated,
/// as in the five-tap form.
fn smooth_narrow(frame: &[i32], base: &[i32], out: &mut [i32]) {
    let n = frame.len().min(base.len()).min(out.len());
    // Equal lengths, so the loop's index needs no bounds checks in any of the three rows.
    let (Some(frame), Some(base), Some(out)) = (frame.get(..n), base.get(..n), out.get_mut(..n))
    else {
        return;
    };
    let r = |j: usize| match (frame.get(j), base.get(j)) {
        (Some(&y), Some(&b)) => y.wrapping_sub(b),
        _ => 0,
    };
    if n < 5 {
        return;
    }
    // At pixel j: the residual r[j − 1], the pair sum q = r[j − 2] + r[j − 1], the box sum
    // pb = p[j − 2] and the pair of box sums t = p[j − 3] + p[j − 2] (p[k] = r[k − 1] + r[k] +
    // r[k + 1], indices clamped into the frame), so a pixel is one subtraction and four adds:
    // p[j − 1] = q + r[j], out[j − 2] = t + p[j − 1]. For j = 2: r[−1] = r[0].
    let (r0, r1) = (r(0), r(1));
    let (pa, pb0) = (r0.wrapping_mul(3), r0.wrapping_add(r0).wrapping_add(r1));
    let (mut rb, mut q, mut pb, mut t) = (r1, r0.wrapping_add(r1), pb0, pa.wrapping_add(pb0));
    // Two pixels a turn, so the four values change roles instead of registers (the M0 spilled
    // them to the stack one pixel a turn: 20 instructions a pixel).
    let (Some(fr), Some(br), Some(head)) = (frame.get(2..), base.get(2..), out.get_mut(..n - 2))
    else {
        return;
    };
    let pairs = fr.chunks_exact(2).zip(br.chunks_exact(2));
    for ((f, b), o) in pairs.zip(head.chunks_exact_mut(2)) {
        if let ([y0, y1], [b0, b1], [o0, o1]) = (f, b, o) {
            // Wrapping: exact within ±NARROW, and no overflow check left behind otherwise.
            let r0 = y0.wrapping_sub(*b0);
            let p0 = q.wrapping_add(r0);
            *o0 = t.wrapping_add(p0);
            let r1 = y1.wrapping_sub(*b1);
            let p1 = rb.wrapping_add(r0).wrapping_add(r1);
            *o1 = pb.wrapping_add(p0).wrapping_add(p1);
            (rb, q, pb, t) = (r1, r0.wrapping_add(r1), p1, p0.wrapping_add(p1));
        }
    }
    // The odd pixel of an odd count (j = n − 1), then the last two outputs with r[n] = r[n + 1] =
    // r[n − 1].
    if n % 2 == 1 {
        let rj = r(n - 1);
        let p = q.wrapping_add(rj);
        if let Some(o) = out.get_mut(n - 3) {
            *o = t.wrapping_add(p);
        }
        (rb, q, pb, t) = (rj, rb.wrapping_add(rj), p, pb.wrapping_add(p));
    }
    let last = rb;
    for k in n - 2..n {
        let p = q.wrapping_add(last);
        if let Some(o) = out.get_mut(k) {
            *o = t.wrapping_add(p);
        }
        (rb, q, pb, t) = (last, rb.wrapping_add(last), p, pb.wrapping_add(p));
    }
}

/// Whether `v` (smoothed, ×9) exceeds `k_q8` noise σ of the smoothed residual at baseline `level`
/// (the scan takes [`above_var`] with its variance kept; the tests take this).
///
/// `v > k·sqrt(19)·σ ⟺ v²·2^24 > k_q8²·19·var_q8 ⟺ v² > ⌊k_q8²·19·var_q8 / 2^24⌋` (the floor loses
/// nothing: v² is an integer), so the usual case is 32 × 32 → 64-bit products in halves (no library
/// multiply on the M0; a variance past 2^32, as on scaled-up frames, splits into two words); wider
/// values take the general 128-bit test (the same answer).
#[cfg(test)]
fn above(v: i64, k_q8: u16, noise: &NoiseModel, level: i64) -> bool {
    above_var(v, k_q8, noise.var_q8(level))
}

/// [`above`] at a known variance `var` (Q8, ≥ 1 as every `var_q8` is).
fn above_var(v: i64, k_q8: u16, var: i64) -> bool {
    if v <= 0 {
        return false;
    }
    let c = u32::from(k_q8) * u32::from(k_q8); // < 2^32
    let c19 = u64::from(c) * KERNEL_SQ_SUM as u64; // < 2^37
    match (u32::try_from(v), u32::try_from(c19)) {
        (Ok(v32), Ok(c32)) => {
            let rhs = match u32::try_from(var) {
                // The per-pixel case first: one product.
                Ok(var32) => super::math::mul_u32_wide(c32, var32) >> 24,
                Err(_) => match limit_shr24(c32, var) {
                    Some(rhs) => rhs,
                    // The limit is at least 2^64 > v².
                    None => return false,
                },
            };
            super::math::mul_u32_wide(v32, v32) > rhs
        }
        _ => {
            let lhs = i128::from(v) * i128::from(v) * (1 << 24);
            let k = i128::from(k_q8);
            lhs > k * k * KERNEL_SQ_SUM * i128::from(var)
        }
    }
}

/// `⌊c · var / 2^24⌋` for `var` ≥ 0 when below 2^64, `None` when at or above it (or `var` < 0, which
/// no variance is: `var_q8` is ≥ 1).
///
/// With var = v_h · 2^32 + v_l: c · var / 2^24 = c · v_h · 2^8 + c · v_l / 2^24, the first term an
/// integer, so the floor splits exactly — two 32 × 32-bit products in halves, no 64 × 64 one.
#[inline(always)]
fn limit_shr24(c: u32, var: i64) -> Option<u64> {
    let var = u64::try_from(var).ok()?;
    let (vh, vl) = ((var >> 32) as u32, var as u32);
    let low = super::math::mul_u32_wide(c, vl) >> 24;
    if vh == 0 {
        return Some(low);
    }
    let high = super::math::mul_u32_wide(c, vh);
    if high >> 56 != 0 {
        return None;
    }
    (high << 8).checked_add(low)
}

/// Largest `v` that [`above`] refuses at every level: `isqrt(k² · 19 · var_min / 2^24)`.
fn least_above(k_q8: u16, noise: &NoiseModel) -> i64 {
    least_above_var(k_q8, noise.floor_var_q8.max(1))
}

/// Largest `v` that [`above`] refuses at a level of variance `var_q8`: `isqrt(⌊k² · 19 · var / 2^24⌋)`
/// (the test is `v² > ⌊k² · 19 · var / 2^24⌋`), so `above(v) ⟺ v > least_above_var(k, var)`.
fn least_above_var(k_q8: u16, var_q8: i64) -> i64 {
    let c19 = u64::from(u32::from(k_q8) * u32::from(k_q8)) * KERNEL_SQ_SUM as u64; // < 2^37
    if let Ok(c32) = u32::try_from(c19) {
        // Products in halves, as in `above`: no 128-bit one on the M0.
        let lim = match u32::try_from(var_q8) {
            Ok(var32) => Some(super::math::mul_u32_wide(c32, var32) >> 24),
            Err(_) => limit_shr24(c32, var_q8),
        };
        if let Some(lim) = lim {
            return i64::try_from(super::math::isqrt_u128(u128::from(lim))).unwrap_or(i64::MAX);
        }
    }
    let k = i128::from(k_q8);
    let lim = (k * k * KERNEL_SQ_SUM).saturating_mul(i128::from(var_q8)) >> 24;
    let lim = u128::try_from(lim).unwrap_or(0);
    i64::try_from(super::math::isqrt_u128(lim)).unwrap_or(i64::MAX)
}

/// A σ-scaled limit ([`least_above_var`]) kept for the last variance it was asked at: a frame's
/// maxima on one stretch of baseline share a level, so one square root serves them all, while a
/// variance met once (a sloping baseline) is decided by [`above_var`]'s products, no root.
struct Edge {
    k_q8: u16,
    /// The variance last asked at (0 before any: every variance is ≥ 1).
    var: i64,
    /// The limit at `var`, once `var` was asked twice in a row.
    limit: Option<i64>,
}

impl Edge {
    const fn new(k_q8: u16) -> Self {
        Self {
            k_q8,
            var: 0,
            limit: None,
        }
    }

    /// The limit at `var` when it is kept (asked for by the time before).
    fn kept(&self, var: i64) -> Option<i64> {
        self.limit.filter(|_| self.var == var)
    }

    /// The limit at `var`: kept, or its square root taken (and kept).
    fn limit(&mut self, var: i64) -> i64 {
        if let Some(t) = self.kept(var) {
            return t;
        }
        let t = least_above_var(self.k_q8, var);
        (self.var, self.limit) = (var, Some(t));
        t
    }

    /// `above_var(v, k, var)`: by the kept limit, by its root at the second use of a variance in a
    /// row, else by the products.
    fn passes(&mut self, v: i64, var: i64) -> bool {
        if self.var == var {
            return v > self.limit(var);
        }
        (self.var, self.limit) = (var, None);
        above_var(v, self.k_q8, var)
    }
}

/// Index of the first value above `t`, four at a time (one compare and branch a pixel, the loop's
/// own step once per four). Out of line, so the scan keeps its few values in registers.
#[inline(never)]
fn first_above(values: &[i32], t: i32) -> Option<usize> {
    let (quads, tail) = values.as_chunks::<4>();
    let mut k = 0usize;
    for q in quads {
        if q[0] > t {
            return Some(k);
        }
        if q[1] > t {
            return Some(k + 1);
        }
        if q[2] > t {
            return Some(k + 2);
        }
        if q[3] > t {
            return Some(k + 3);
        }
        k += 4;
    }
    tail.iter().position(|&v| v > t).map(|j| k + j)
}

/// Index of the first value at or below `t` or above the value before it (`left` before the
/// first), and which of the two it is (`true`: above — where a maximum or plateau can start, as
/// every value up to it is above `t`). Out of line, as [`first_above`].
#[inline(never)]
fn first_rising(values: &[i32], t: i32, mut left: i32) -> Option<(usize, bool)> {
    let k = values.iter().position(|&v| {
        let stop = v <= t || v > left;
        left = v;
        stop
    })?;
    Some((k, values.get(k).is_some_and(|&v| v > t)))
}

/// Steps from the first value up while the next is larger: the index of the top of the climb
/// (0 when the second is not larger; the last index when every one is).
#[inline(never)]
fn climb(values: &[i32]) -> usize {
    let Some((&v0, rest)) = values.split_first() else {
        return 0;
    };
    let mut prev = v0;
    rest.iter()
        .position(|&v| {
            let up = v > prev;
            prev = v;
            !up
        })
        .unwrap_or(rest.len())
}

/// Collects candidates into `out`, strongest kept when more than [`MAX_CANDIDATES`] qualify; returns
/// whether any were dropped for lack of room.
///
/// Prominence is the height above the higher of the two lowest points reached on each side before the
/// smoothed residual rises above the candidate (searched up to `reach` px).
/// Loop bounds: one pass over the N = `smooth.len()` pixels (plateau scans included); prominence
/// walks of ≤ 2 × `reach` steps per local maximum above threshold until [`VALLEY_BUDGET_PER_REACH`] ×
/// `reach` steps are spent, ≤ 2 × [`SHORT_REACH`] after; ≤ [`MAX_CANDIDATES`] steps for each candidate
/// that arrives when `out` is full; ≤ 2 square roots (≤ 64 steps) per local maximum above threshold.
pub fn find_candidates(
    smooth: &[i32],
    base: &[i32],
    noise: &NoiseModel,
    cfg: &FindConfig,
    reach: usize,
    out: &mut Vec<Candidate, MAX_CANDIDATES>,
) -> bool {
    let n = smooth.len();
    // No level has less variance than the floor: maxima at or below this cannot pass the threshold,
    // and most maxima of a noise stretch are turned away here without a variance.
    let v_min = least_above(cfg.threshold_sigma_q8, noise);
    let mut dropped = false;
    let mut valley_steps = 0usize;
    // Strength of the weakest entry once the list is full: a candidate no stronger is dropped without
    // scanning the list (a comb of equal maxima would scan it at every one).
    let mut weakest: Option<i32> = None;
    let (mut threshold, mut prominence) = (
        Edge::new(cfg.threshold_sigma_q8),
        Edge::new(cfg.prominence_sigma_q8),
    );
    // The last baseline level a variance was taken at, and the variance.
    let mut last_level: Option<(i32, i64)> = None;
    // `v_min` ≥ 0 (a square root); beyond i32 no value passes.
    let Ok(v_min32) = i32::try_from(v_min.max(0)) else {
        return false;
    };
    let mut i = 0usize;
    while i < n {
        // Most of a frame is below every threshold: a tight scan for the next pixel above it — it
        // rises above its left neighbour, which is below — or, from a pixel above the threshold
        // (a falling flank, a plateau's rest, a crowded frame), a scan for the next pixel above it
        // that rises. Either is the foot of a climb to a maximum or plateau (saturated tops; every
        // later pixel of a plateau equals its left neighbour and starts nothing). Nothing is left
        // of the first pixel.
        let rest = smooth.get(i..).unwrap_or(&[]);
        let found = match rest.first() {
            Some(&v) if v <= v_min32 => first_above(rest, v_min32),
            _ => {
                let left = i.checked_sub(1).and_then(|j| smooth.get(j)).copied();
                match first_rising(rest, v_min32, left.unwrap_or(i32::MIN)) {
                    Some((k, true)) => Some(k),
                    // Below the threshold again: the tight scan goes on from there.
                    Some((k, false)) => {
                        i += k;
                        continue;
                    }
                    None => None,
                }
            }
        };
        let Some(k) = found else {
            break;
        };
        i += k;
        // Each pixel of a climb is the start of one in the plain scan, and none is a maximum: the
        // climb is walked in one tight loop to its top, a plateau's first pixel, or, after a
        // plateau, to the next top.
        let (first, end, v32) = loop {
            i += climb(smooth.get(i..).unwrap_or(&[]));
            let Some(&v32) = smooth.get(i) else {
                return dropped;
            };
            // Plateaus count once, at their middle.
            let first = i;
            let mut end = i;
            while end + 1 < n && smooth.get(end + 1) == Some(&v32) && end - first < reach {
                end += 1;
            }
            i = end + 1;
            if smooth.get(end + 1).is_none_or(|&x| x <= v32) {
                break (first, end, v32);
            }
        };
        if smooth.get(end + 1) == Some(&v32) {
            // A plateau longer than `reach`: no maximum here.
            continue;
        }
        let v = i64::from(v32);
        let pos = first + (end - first) / 2;
        let level = base.get(pos).copied().unwrap_or(0);
        // Neighbouring maxima on a flat stretch share a level: one variance for them.
        let var = match last_level {
            Some((l, var)) if l == level => var,
            _ => noise.var_q8(i64::from(level)),
        };
        last_level = Some((level, var));
        if !threshold.passes(v, var) {
            continue;
        }
        // Past the frame's valley budget the search looks only as far as a line's own wings.
        let full = valley_steps < VALLEY_BUDGET_PER_REACH * reach;
        let r = if full { reach } else { reach.min(SHORT_REACH) };
        valley_steps += 2 * r;
        let kept = prominence.kept(var);
        let prominent = if kept.is_some() || (full && r > SHORT_REACH) {
            // Long walks, and short ones whose limit is at hand, stop once the prominence is
            // certain: it passes exactly when both sides dip to `v − t − 1` or lower before rising
            // above `v` (`t` the largest prominence refused at this level), so each walk ends at
            // the first such value, and the right one is not taken when the left fails.
            let t = match kept {
                Some(t) => t,
                None => prominence.limit(var),
            };
            let goal = v.saturating_sub(t).saturating_sub(1);
            dips_to(smooth, first, v32, goal, r, false) && dips_to(smooth, end, v32, goal, r, true)
        } else {
            let floor_l = valley(smooth, first, v32, r, false);
            let floor_r = valley(smooth, end, v32, r, true);
            prominence.passes(v - floor_l.max(floor_r), var)
        };
        if prominent {
            if weakest.is_some_and(|w| v32 <= w) {
                dropped = true;
            } else {
                let c = Candidate { pos, strength: v32 };
                dropped |= push_strongest(out, c);
                if out.is_full() {
                    weakest = out.iter().map(|c| c.strength).min();
                }
            }
        }
    }
    dropped
}

/// Whether walking from `from` (≤ `reach` px) reaches a value ≤ `goal` before one above `peak`:
/// whether [`valley`]'s lowest value is ≤ `goal` (for `goal` < `peak`), without walking further.
fn dips_to(
    smooth: &[i32],
    from: usize,
    peak: i32,
    goal: i64,
    reach: usize,
    rightward: bool,
) -> bool {
    let hit = |v: &i32| i64::from(*v) <= goal;
    let side = side_of(smooth, from, reach, rightward);
    if rightward {
        side.iter().take_while(|&&v| v <= peak).any(hit)
    } else {
        side.iter().rev().take_while(|&&v| v <= peak).any(hit)
    }
}

/// The ≤ `reach` values next to `from` on one side (nearest first when read forwards on the right,
/// backwards on the left), cut once so the walks run over a plain slice with no step counter.
fn side_of(smooth: &[i32], from: usize, reach: usize, rightward: bool) -> &[i32] {
    if rightward {
        let side = smooth.get(from.saturating_add(1)..).unwrap_or(&[]);
        side.get(..reach).unwrap_or(side)
    } else {
        let side = smooth.get(..from.min(smooth.len())).unwrap_or(&[]);
        side.get(side.len().saturating_sub(reach)..).unwrap_or(&[])
    }
}

/// Lowest smoothed value walking from `from` until a value above `peak` or `reach` px.
///
/// The walk runs over the ≤ `reach` values of that side as a slice, in 32 bits (`peak` is a value of
/// `smooth`): the same answer as a walk by index (tested).
fn valley(smooth: &[i32], from: usize, peak: i32, reach: usize, rightward: bool) -> i64 {
    if !rightward && from > smooth.len() {
        // The index walk's first step is already outside.
        return i64::from(peak);
    }
    let side = side_of(smooth, from, reach, rightward);
    let low = if rightward {
        lowest_until_above(side.iter(), peak)
    } else {
        lowest_until_above(side.iter().rev(), peak)
    };
    i64::from(low)
}

/// The least of `peak` and the values before the first one above `peak`.
#[inline(always)]
fn lowest_until_above<'a>(values: impl Iterator<Item = &'a i32>, peak: i32) -> i32 {
    let mut low = peak;
    for &v in values {
        if v > peak {
            break;
        }
        low = low.min(v);
    }
    low
}

/// Pushes `c`, or replaces the weakest entry when full and `c` is stronger; returns whether one was lost.
///
/// Loop bound: one scan of the ≤ N entries, only when the list is full.
pub fn push_strongest<const N: usize>(list: &mut Vec<Candidate, N>, c: Candidate) -> bool {
    crate::bounded::push_keep_strongest(list, c, |x| x.strength)
}

/// Keeps, strongest first, only candidates at least `min_sep_q8` px (Q8) from every stronger one kept.
///
/// Loop bound: a heap sort (≤ 2 × 128 × 8 sift steps), then candidates² ≤ [`MAX_CANDIDATES`]²
/// pairwise checks.
pub fn thin(list: &mut Vec<Candidate, MAX_CANDIDATES>, min_sep_q8: u16) {
    sort_strongest_first(list);
    let far = |kept: &[Candidate], c: &Candidate| {
        kept.iter()
            .all(|k| (k.pos.abs_diff(c.pos) << 8) >= usize::from(min_sep_q8))
    };
    compact(list, |kept, c| far(kept, c));
}

/// [`thin`] with the kept positions marked in `marks` (cleared first; left holding them), so each
/// candidate looks at the ≤ 2·D + 1 pixels around it instead of at every kept one, D < 8 px being
/// the largest distance that counts as too close (the same list as [`thin`]; wider separations
/// take its pairwise check).
///
/// Loop bound: a heap sort, then ≤ [`MAX_CANDIDATES`] × 15 mask bits.
pub(crate) fn thin_marked(
    list: &mut Vec<Candidate, MAX_CANDIDATES>,
    min_sep_q8: u16,
    marks: &mut super::mask::LineMask,
) {
    // Too close: |Δ| · 256 < min_sep, i.e. |Δ| ≤ D = ⌈min_sep / 256⌉ − 1.
    let Some(d) = usize::from(min_sep_q8).div_ceil(256).checked_sub(1) else {
        // No separation: every candidate is kept.
        sort_strongest_first(list);
        return;
    };
    if d >= 8 || list.iter().any(|c| c.pos >= crate::condition::MAX_PIXELS) {
        thin(list, min_sep_q8);
        return;
    }
    sort_strongest_first(list);
    marks.clear();
    let mut kept = 0usize;
    for idx in 0..list.len() {
        let Some(c) = list.get(idx).copied() else {
            break;
        };
        // The marks stand for the kept prefix.
        if !(c.pos.saturating_sub(d)..=c.pos + d).any(|j| marks.is_set(j)) {
            if let Some(slot) = list.get_mut(kept) {
                *slot = c;
            }
            kept += 1;
            marks.mark(c.pos, 0);
        }
    }
    list.truncate(kept);
}

/// Keeps, in order, the entries `keep(kept so far, entry)` accepts, compacted in place (no second
/// list on the stack): the kept ones are a prefix. Loop bound: one pass.
fn compact(
    list: &mut Vec<Candidate, MAX_CANDIDATES>,
    keep: impl Fn(&[Candidate], &Candidate) -> bool,
) {
    let mut kept = 0usize;
    for idx in 0..list.len() {
        let Some(c) = list.get(idx).copied() else {
            break;
        };
        if keep(list.get(..kept).unwrap_or(&[]), &c) {
            if let Some(slot) = list.get_mut(kept) {
                *slot = c;
            }
            kept += 1;
        }
    }
    list.truncate(kept);
}

/// Longest candidate list [`sort_strongest_first`] sorts by insertion.
const SHORT_SORT: usize = 24;

/// The order [`thin`] walks: strength descending, then position ascending — one total order
/// (candidates sit at distinct pixels), so this heap sort gives the list an insertion sort would,
/// in O(n log n) instead of the ~n²/4 swaps that made a full list of 128 cost ~80 k instructions.
fn sort_strongest_first(v: &mut [Candidate]) {
    let key = |c: &Candidate| (core::cmp::Reverse(c.strength), c.pos);
    let n = v.len();
    if n <= SHORT_SORT {
        // Short lists (a typical frame's): the insertion sort's few swaps are cheaper.
        crate::sort::sort_by_key(v, key);
        return;
    }
    // Sifts `root` down the max-heap `v[..end]`; each step at least doubles `root` (≤ 64 steps).
    let sift = |v: &mut [Candidate], mut root: usize, end: usize| {
        for _ in 0..usize::BITS {
            let mut child = 2 * root + 1;
            if child >= end {
                break;
            }
            let right_larger = child + 1 < end
                && matches!((v.get(child), v.get(child + 1)), (Some(a), Some(b)) if key(a) < key(b));
            if right_larger {
                child += 1;
            }
            match (v.get(root), v.get(child)) {
                (Some(r), Some(c)) if key(r) < key(c) => swap_entries(v, root, child),
                _ => break,
            }
            root = child;
        }
    };
    for start in (0..n / 2).rev() {
        sift(v, start, n);
    }
    for end in (1..n).rev() {
        swap_entries(v, 0, end);
        sift(v, 0, end);
    }
}

/// Swaps two entries; out-of-range indices leave `v` as it is (`slice::swap` keeps a panic path).
fn swap_entries(v: &mut [Candidate], a: usize, b: usize) {
    if let (Some(&x), Some(&y)) = (v.get(a), v.get(b)) {
        if let Some(s) = v.get_mut(a) {
            *s = y;
        }
        if let Some(s) = v.get_mut(b) {
            *s = x;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// [`valley`] written as a walk by index in 64 bits.
    fn valley_wide(smooth: &[i32], from: usize, peak: i64, reach: usize, rightward: bool) -> i64 {
        let mut low = peak;
        for step in 1..=reach {
            let j = if rightward {
                from.checked_add(step)
            } else {
                from.checked_sub(step)
            };
            let Some(v) = j.and_then(|j| smooth.get(j)) else {
                break;
            };
            let v = i64::from(*v);
            if v > peak {
                break;
            }
            low = low.min(v);
        }
        low
    }

    /// The 32-bit smoothing gives the general path's integers.
    #[test]
    fn valley_walks_agree_with_the_index_walk() {
        let mut x = 0x9e37_79b9u32;
        let smooth: std::vec::Vec<i32> = (0..300)
            .map(|_| {
                crate::test_rng::step32(&mut x);
                (x as i32) >> 20
            })
            .collect();
        for from in [0usize, 1, 5, 150, 298, 299, 300, 302] {
            for reach in [0usize, 1, 8, 64, 400] {
                for rightward in [false, true] {
                    let own = smooth.get(from).map_or(7, |&v| v);
                    for peak in [own, 0, -5000, 5000, i32::MAX, i32::MIN] {
                        let want = valley_wide(&smooth, from, i64::from(peak), reach, rightward);
                        assert_eq!(valley(&smooth, from, peak, reach, rightward), want);
                    }
                }
            }
        }
    }

    #[test]
    fn narrow_smoothing_equals_the_wide_one() {
        let mut x = 0x1234_5678u32;
        for n in [5usize, 6, 7, 8, 9, 40, 301, 302] {
            let mut frame = std::vec![0i32; n];
            let mut base = std::vec![0i32; n];
            for (f, b) in frame.iter_mut().zip(base.iter_mut()) {
                crate::test_rng::step32(&mut x);
                *f = (x % (1 << 26)) as i32 - (1 << 25);
                *b = ((x >> 3) % (1 << 20)) as i32;
            }
            let mut narrow = std::vec![0i32; n];
            smooth_narrow(&frame, &base, &mut narrow);
            let r = |j: usize| i64::from(frame[j.min(n - 1)]) - i64::from(base[j.min(n - 1)]);
            for (i, &got) in narrow.iter().enumerate() {
                let want = r(i.saturating_sub(2))
                    + 2 * r(i.saturating_sub(1))
                    + 3 * r(i)
                    + 2 * r(i + 1)
                    + r(i + 2);
                assert_eq!(i64::from(got), want, "n {n} i {i}");
            }
        }
    }

    /// The or-ed range test is the plain one over −2^25 … 2^25 − 1, at every length (quads and tail).
    #[test]
    fn range_test_is_the_plain_one() {
        let mut x = 0x00c0_ffeeu32;
        let edges = [
            NARROW - 1,
            NARROW,
            -NARROW,
            -NARROW - 1,
            i32::MAX,
            i32::MIN,
            0,
        ];
        for n in 0..40usize {
            for e in edges {
                let mut v = std::vec![0i32; n];
                for y in v.iter_mut() {
                    crate::test_rng::step32(&mut x);
                    *y = (x % (1 << 26)) as i32 - (1 << 25);
                }
                if n > 0 {
                    v[x as usize % n] = e;
                }
                let plain = v.iter().all(|y| (-NARROW..NARROW).contains(y));
                assert_eq!(within_narrow(&v), plain, "n {n} e {e}");
            }
        }
    }

    /// The public smoothing, with its range checked inside the 32-bit pass, gives the five-tap
    /// 64-bit sums (clamped to i32) on rows inside, at the edges of and beyond ±NARROW.
    #[test]
    fn checked_smoothing_equals_the_five_tap_sums() {
        let mut x = 0x0bad_5eedu32;
        let edges = [
            NARROW - 1,
            NARROW,
            NARROW + 1,
            -NARROW,
            -NARROW - 1,
            i32::MAX,
            i32::MIN,
        ];
        for n in [0usize, 1, 4, 5, 6, 9, 64, 300] {
            for case in 0..12 {
                let mut frame = std::vec![0i32; n];
                let mut base = std::vec![0i32; n];
                for (f, b) in frame.iter_mut().zip(base.iter_mut()) {
                    crate::test_rng::step32(&mut x);
                    *f = (x % (1 << 26)) as i32 - (1 << 25);
                    *b = ((x >> 5) % (1 << 26)) as i32 - (1 << 25);
                }
                // One value at an edge of the range (or beyond), in either row, anywhere.
                if n > 0 && case > 0 {
                    crate::test_rng::step32(&mut x);
                    let v = edges[case % edges.len()];
                    let row = if case % 2 == 0 { &mut frame } else { &mut base };
                    row[x as usize % n] = v;
                }
                let mut got = std::vec![7i32; n];
                smooth_residual(&frame, &base, &mut got);
                let r = |j: usize| i64::from(frame[j.min(n - 1)]) - i64::from(base[j.min(n - 1)]);
                for (i, &g) in got.iter().enumerate() {
                    let want = r(i.saturating_sub(2))
                        + 2 * r(i.saturating_sub(1))
                        + 3 * r(i)
                        + 2 * r(i + 1)
                        + r(i + 2);
                    let want = want.clamp(i64::from(i32::MIN), i64::from(i32::MAX));
                    assert_eq!(i64::from(g), want, "n {n} case {case} i {i}");
                }
            }
        }
    }

    fn flat_noise(sd: i64) -> NoiseModel {
        NoiseModel {
            floor_var_q8: sd * sd * 256,
            zero_light_level: 0,
            shot_var_per_unit_q16: 0,
            shot_from_data: false,
        }
    }

    /// The 64-bit threshold test answers as the 128-bit one.
    #[test]
    fn fast_threshold_equals_the_wide_one() {
        for sd in [0i64, 1, 7, 100, 4000, 60_000, 1 << 20, 1 << 27] {
            let nm = flat_noise(sd);
            let var = nm.var_q8(0);
            for k in [256u16, 5 << 8, 3 << 8, u16::MAX] {
                let wide = |v: i64| {
                    v > 0
                        && i128::from(v) * i128::from(v) * (1 << 24)
                            > i128::from(k) * i128::from(k) * KERNEL_SQ_SUM * i128::from(var)
                };
                let edge = least_above(k, &nm);
                for v in [
                    -3,
                    0,
                    1,
                    2,
                    100,
                    edge - 1,
                    edge,
                    edge + 1,
                    edge + 2,
                    1 << 31,
                    1 << 40,
                ] {
                    assert_eq!(above(v, k, &nm, 0), wide(v), "sd {sd} k {k} v {v}");
                }
            }
        }
    }

    /// The split limit is the 128-bit floor, or `None` exactly when that is ≥ 2^64.
    #[test]
    fn split_limit_equals_the_wide_product() {
        let mut x = 0x5eed_1234_9abc_def1u64;
        let mut cases = std::vec![];
        for c in [0u32, 1, 19, 1 << 24, u32::MAX] {
            for var in [
                0i64,
                1,
                (1 << 32) - 1,
                1 << 32,
                (1 << 32) + 1,
                1 << 56,
                i64::MAX,
                -1,
            ] {
                cases.push((c, var));
            }
        }
        for _ in 0..20_000 {
            crate::test_rng::step64(&mut x);
            let c = (x as u32) >> (x % 32);
            let var = ((x >> 1) >> ((x >> 40) % 63)) as i64;
            cases.push((c, var));
        }
        for (c, var) in cases {
            let want = u64::try_from(var)
                .ok()
                .map(|v| (u128::from(c) * u128::from(v)) >> 24)
                .and_then(|w| u64::try_from(w).ok());
            assert_eq!(limit_shr24(c, var), want, "c {c} var {var}");
        }
    }

    /// The threshold as a value is the largest one [`above`] refuses, at every level.
    #[test]
    fn least_above_is_the_edge_of_the_test() {
        let mut x = 0x0dd1_5eedu32;
        for _ in 0..3000 {
            crate::test_rng::step32(&mut x);
            let nm = NoiseModel {
                floor_var_q8: i64::from(x >> (x % 28)),
                zero_light_level: 0,
                shot_var_per_unit_q16: x.rotate_left(9) >> (x % 32),
                shot_from_data: false,
            };
            let level = i64::from(x.rotate_left(3) >> (x % 32)) << (x % 9);
            for k in [1u16, 3 << 8, 5 << 8, 20_000, u16::MAX] {
                let t = least_above_var(k, nm.var_q8(level));
                assert!(!above(t, k, &nm, level), "k {k} t {t} {nm:?}");
                assert!(above(t + 1, k, &nm, level), "k {k} t {t} {nm:?}");
            }
        }
    }

    /// The early-ending walks decide as the full ones.
    #[test]
    fn dips_agree_with_the_valley_walks() {
        let mut x = 0x5eed_1234u32;
        let smooth: std::vec::Vec<i32> = (0..400)
            .map(|i| {
                crate::test_rng::step32(&mut x);
                ((x as i32) >> 22) + 300 * ((i / 37) % 3)
            })
            .collect();
        for from in (0..400).step_by(7) {
            let peak = smooth[from];
            for reach in [0usize, 1, 9, 48, 500] {
                for rightward in [false, true] {
                    let low = valley(&smooth, from, peak, reach, rightward);
                    for drop in [1i64, 5, 40, 300, 2000] {
                        let goal = i64::from(peak) - drop;
                        assert_eq!(
                            dips_to(&smooth, from, peak, goal, reach, rightward),
                            low <= goal,
                            "from {from} reach {reach} drop {drop}"
                        );
                    }
                }
            }
        }
    }

    /// The scan with its long walks ending early finds the candidates of the plain scan.
    #[test]
    fn candidates_match_the_plain_scan() {
        let nm = flat_noise(3);
        let shot = NoiseModel {
            shot_var_per_unit_q16: 3 << 16,
            ..flat_noise(2)
        };
        let cfg = FindConfig::DEFAULT;
        let mut x = 0x7777_1111u32;
        for len in [1usize, 2, 5, 64, 700] {
            for style in 0..4 {
                let s: std::vec::Vec<i32> = (0..len)
                    .map(|i| {
                        crate::test_rng::step32(&mut x);
                        let noise = (x as i32) >> [26, 22, 20, 24][style];
                        // Lines, plateaus and a random walk's drift.
                        let line = if i % 53 < 5 {
                            [40, 400, 90, 160, 30][i % 53] * 9
                        } else {
                            0
                        };
                        (noise + line) & if style == 3 { !31 } else { !0 }
                    })
                    .collect();
                // Flat, stepped (stretches of one level) and sloping baselines, so the kept
                // variances and limits are met again, changed and met once.
                for (b, nm) in [(0, &nm), (1, &shot), (2, &shot)] {
                    let base: std::vec::Vec<i32> = (0..len)
                        .map(|i| [0, 40 * (i / 23) as i32, 5 * i as i32][b])
                        .collect();
                    for reach in [8usize, 48] {
                        let mut got = Vec::new();
                        let d1 = find_candidates(&s, &base, nm, &cfg, reach, &mut got);
                        let mut want = Vec::new();
                        let d2 = plain_candidates(&s, &base, nm, &cfg, reach, &mut want);
                        assert_eq!((got, d1), (want, d2), "len {len} style {style} base {b}");
                    }
                }
            }
        }
    }

    /// The candidate scan written plainly: every local maximum (plateaus at their middle) above
    /// the threshold, with full valley walks.
    fn plain_candidates(
        s: &[i32],
        base: &[i32],
        nm: &NoiseModel,
        cfg: &FindConfig,
        reach: usize,
        out: &mut Vec<Candidate, MAX_CANDIDATES>,
    ) -> bool {
        let n = s.len();
        let at = |j: usize| i64::from(s[j]);
        let (mut dropped, mut steps, mut i) = (false, 0usize, 0usize);
        while i < n {
            let v = at(i);
            let left = if i == 0 { i64::MIN } else { at(i - 1) };
            if v <= least_above(cfg.threshold_sigma_q8, nm) || v <= left {
                i += 1;
                continue;
            }
            let mut end = i;
            while end + 1 < n && at(end + 1) == v && end - i < reach {
                end += 1;
            }
            let right = if end + 1 < n { at(end + 1) } else { i64::MIN };
            let level = i64::from(base[i + (end - i) / 2]);
            if v > right && above(v, cfg.threshold_sigma_q8, nm, level) {
                let r = if steps < VALLEY_BUDGET_PER_REACH * reach {
                    reach
                } else {
                    reach.min(SHORT_REACH)
                };
                steps += 2 * r;
                let fl = valley_wide(s, i, v, r, false);
                let fr = valley_wide(s, end, v, r, true);
                if above(v - fl.max(fr), cfg.prominence_sigma_q8, nm, level) {
                    let c = Candidate {
                        pos: i + (end - i) / 2,
                        strength: v as i32,
                    };
                    if out.is_full() && out.iter().all(|k| k.strength >= c.strength) {
                        dropped = true;
                    } else {
                        dropped |= push_strongest(out, c);
                    }
                }
            }
            i = end + 1;
        }
        dropped
    }

    #[test]
    fn threshold_scales_with_sigma() {
        let nm = flat_noise(10);
        // 5 σ of the ×9 smoothed residual is 5 · sqrt(19) · 10 ≈ 217.9.
        assert!(above(218, 5 << 8, &nm, 0));
        assert!(!above(217, 5 << 8, &nm, 0));
        assert!(!above(-1000, 5 << 8, &nm, 0));
    }

    #[test]
    fn finds_maxima_with_prominence_and_plateau_middle() {
        let nm = flat_noise(1);
        let mut s = [0i32; 40];
        s[10] = 100;
        s[9] = 60;
        s[11] = 60;
        // Plateau 20..=24.
        for v in s.iter_mut().take(25).skip(20) {
            *v = 80;
        }
        // Shoulder on a slope: maximum with tiny prominence.
        s[30] = 50;
        s[31] = 52;
        s[32] = 51;
        s[33] = 70;
        let base = [0i32; 40];
        let mut out = Vec::new();
        let cfg = FindConfig::DEFAULT;
        assert!(!find_candidates(&s, &base, &nm, &cfg, 10, &mut out));
        let pos: std::vec::Vec<usize> = out.iter().map(|c| c.pos).collect();
        assert_eq!(pos, [10, 22, 33]);
    }

    /// `find_peaks` puts a candidate's strength back as the smoothed row's value at its pixel.
    #[test]
    fn strength_is_the_smoothed_value_at_the_pixel() {
        let nm = flat_noise(1);
        let mut x = 0x2545_f491u32;
        let mut s = [0i32; 600];
        for (i, v) in s.iter_mut().enumerate() {
            crate::test_rng::step32(&mut x);
            // Noise, plateaus (values rounded to 64) and a few tall lines.
            *v = (((x >> 22) as i32) & !63) + if i % 97 == 40 { 5000 } else { 0 };
        }
        let base = [0i32; 600];
        let mut out = Vec::new();
        let _ = find_candidates(&s, &base, &nm, &FindConfig::DEFAULT, 10, &mut out);
        assert!(out.len() > 5);
        for c in out.iter() {
            assert_eq!(Some(c.strength), s.get(c.pos).copied());
        }
    }

    #[test]
    fn full_list_keeps_strongest() {
        let mut v: Vec<Candidate, 2> = Vec::new();
        assert!(!push_strongest(
            &mut v,
            Candidate {
                pos: 1,
                strength: 5
            }
        ));
        assert!(!push_strongest(
            &mut v,
            Candidate {
                pos: 2,
                strength: 9
            }
        ));
        assert!(push_strongest(
            &mut v,
            Candidate {
                pos: 3,
                strength: 7
            }
        ));
        assert!(push_strongest(
            &mut v,
            Candidate {
                pos: 4,
                strength: 1
            }
        ));
        let mut s: std::vec::Vec<i32> = v.iter().map(|c| c.strength).collect();
        s.sort();
        assert_eq!(s, [7, 9]);
    }

    #[test]
    fn heap_sort_and_marked_thinning_agree_with_the_plain_ones() {
        let mut x = 0x1234_abcdu32;
        let mut marks = super::super::mask::LineMask::new();
        for len in [0usize, 1, 2, 3, 17, 64, 127, 128] {
            for spread in [8u32, 300, 4096] {
                let mut v: Vec<Candidate, MAX_CANDIDATES> = Vec::new();
                for _ in 0..len {
                    crate::test_rng::step32(&mut x);
                    let pos = (x % spread) as usize;
                    if v.iter().all(|c| c.pos != pos) {
                        let strength = ((x >> 12) % 50) as i32 - 10;
                        v.push(Candidate { pos, strength }).unwrap();
                    }
                }
                let mut want = v.clone();
                crate::sort::sort_by_key(&mut want, |c| (core::cmp::Reverse(c.strength), c.pos));
                let mut got = v.clone();
                sort_strongest_first(&mut got);
                assert_eq!(got, want, "sort len {len}");
                for sep in [0u16, 1, 255, 256, 384, 512, 1000, 2047, 2048, 4000] {
                    let (mut a, mut b) = (v.clone(), v.clone());
                    // The plain thinning, written out as before: insertion sort, pairwise check.
                    crate::sort::sort_by_key(&mut a, |c| (core::cmp::Reverse(c.strength), c.pos));
                    let mut kept: std::vec::Vec<Candidate> = std::vec::Vec::new();
                    for c in a.iter() {
                        if kept
                            .iter()
                            .all(|k| (k.pos.abs_diff(c.pos) << 8) >= usize::from(sep))
                        {
                            kept.push(*c);
                        }
                    }
                    thin_marked(&mut b, sep, &mut marks);
                    assert_eq!(b.as_slice(), kept.as_slice(), "len {len} sep {sep}");
                    let mut c = v.clone();
                    thin(&mut c, sep);
                    assert_eq!(c.as_slice(), kept.as_slice(), "len {len} sep {sep}");
                }
            }
        }
    }

    #[test]
    fn thinning_keeps_the_stronger_of_close_pairs() {
        let mut v: Vec<Candidate, MAX_CANDIDATES> = Vec::new();
        for (pos, strength) in [(10, 5), (11, 9), (20, 3)] {
            v.push(Candidate { pos, strength }).unwrap();
        }
        thin(&mut v, 384);
        let pos: std::vec::Vec<usize> = v.iter().map(|c| c.pos).collect();
        assert_eq!(pos, [11, 20]);
    }
}
