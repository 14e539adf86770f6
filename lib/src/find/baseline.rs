//! Continuum and stray-light removal by iterated clipped smoothing on a coarse grid.
//!
//! The frame is first reduced to one level per block of [`COARSE_PX`] pixels — the mean of the middle
//! two of its four 4-px means, so lines closer together than a block (near a series limit) do not
//! lift every block; the mean of the trusted pixels where some are not. A continuum is smooth on that
//! scale, and the rounds below then run on 1/16 of the points, which is what makes the baseline cost
//! a few instructions per pixel instead of ~40 box passes over the frame.
//! On the block means, a triangular moving average (two box passes, windows shrinking symmetrically at
//! the edges) about as wide as the old per-pixel one (≈ 2 × `half` + 1 px) follows a smooth continuum
//! such as a deuterium lamp's, and stray light, but a line pulls it up. Each round replaces the blocks
//! standing more than [`CLIP_SIGMA`] noise σ (of a block mean) above the current baseline by the
//! baseline itself and smooths again, so lines drop out within a few rounds while the continuum stays.
//! The pixel baseline is the straight line between neighbouring block centres (extended beyond the
//! first and the last).

use super::noise::NoiseModel;
use super::smooth::{box_narrow, box_narrow_in_place, narrow_limit};
use crate::condition::flags;

/// Clipping level above the baseline, in noise σ.
pub const CLIP_SIGMA: i64 = 2;
/// Clip-and-bridge rounds from a plain smoothing: the first takes out the strong lines, the next ones
/// the wings and weak lines the first baseline stood too high to see. Four keep a 1000-σ line of the
/// widest FWHM within σ/2 of the continuum (tested below).
pub const ROUNDS: usize = 4;
/// Pixels per coarse block (a power of two: the interpolation divides by shifting).
pub const COARSE_PX: usize = 16;
const COARSE_SHIFT: u32 = COARSE_PX.trailing_zeros();
/// Fewest trusted pixels for a block mean to count; emptier blocks are treated like untrusted pixels.
const MIN_TRUSTED: u32 = 4;
/// Coarse cells [`estimate_baseline`] needs in `tmp`, per frame pixel: three rows of block values.
pub const fn coarse_cells(n: usize) -> usize {
    3 * n.div_ceil(COARSE_PX)
}

/// Writes the baseline of `frame` into `base`, using `tmp` as scratch (at least
/// [`coarse_cells`]`(frame.len())` cells; a frame-length row always suffices).
///
/// `half` is the smoothing half-width (px): the box on the block means spans about 2 × `half` + 1 px.
/// Untrusted pixels (saturated, repaired) are left out of the block means. Block levels beyond the
/// 32-bit boxes' reach (far past any ADC frame) are smoothed divided by a power of two, so such a
/// baseline loses its low bits. Loop bound: ≤ three O(N) passes
/// for the block means (flags, range and 32-bit sums of a clean frame, else one careful pass after
/// the first two), ≤ [`ROUNDS`] + 1 rounds of a clip pass and 2 box passes over ⌈N/16⌉ blocks,
/// one O(N) interpolation, N = `base.len()` (not capped here; [`find_peaks`](super::find_peaks) keeps
/// it ≤ MAX_PIXELS).
pub fn estimate_baseline(
    frame: &[i32],
    flag: &[u8],
    noise: &NoiseModel,
    half: usize,
    base: &mut [i32],
    tmp: &mut [i32],
) {
    estimate_baseline_known(frame, flag, noise, half, base, tmp, Levels::Unknown);
}

/// What the caller of [`estimate_baseline_known`] knows of `frame`'s block levels.
#[derive(Clone, Copy, PartialEq, Eq)]
pub(crate) enum Levels {
    /// `tmp` holds the level of every full block (block k's at `tmp[k]`, k < N / 16), from a clean
    /// frame's noise pass ([`NoiseBlocks::measure_clean`](super::noise::NoiseBlocks)): the block
    /// pass only does the partial last block.
    Ready,
    /// Nothing: a clean frame (every pixel trusted, within ±2^23) takes the 32-bit block sums.
    Unknown,
    /// The frame is not clean (an untrusted pixel or a value beyond ±2^23): the careful pass at once.
    NotClean,
}

/// [`estimate_baseline`] with what the caller knows of the block levels (`Levels::Unknown` is
/// always right).
pub(crate) fn estimate_baseline_known(
    frame: &[i32],
    flag: &[u8],
    noise: &NoiseModel,
    half: usize,
    base: &mut [i32],
    tmp: &mut [i32],
    levels: Levels,
) {
    let n = frame.len().min(base.len());
    let nb = n.div_ceil(COARSE_PX);
    let (means, rest) = tmp.split_at_mut(nb.min(tmp.len()));
    let (cbase, rest) = rest.split_at_mut(nb.min(rest.len()));
    let ctmp = rest.get_mut(..nb).unwrap_or(&mut []);
    if ctmp.len() < nb {
        // Scratch too small for the coarse rows (find_peaks never passes less): the plain level.
        base.fill(0);
        return;
    }
    let mut cflag = [0u8; crate::condition::MAX_PIXELS.div_ceil(COARSE_PX)];
    let cflag = cflag.get_mut(..nb).unwrap_or(&mut []);
    block_means(frame, flag, means, cflag, levels);
    // A block value (the middle two of four 4-px means) scatters with about 1/13 of the pixel
    // variance; the clip level takes 1/16, as for a 16-px mean (a little more clipping, no bias).
    let coarse_noise = NoiseModel {
        floor_var_q8: noise.floor_var_q8 >> COARSE_SHIFT,
        zero_light_level: noise.zero_light_level,
        shot_var_per_unit_q16: noise.shot_var_per_unit_q16 >> COARSE_SHIFT,
        shot_from_data: noise.shot_from_data,
    };
    // Box half-width in blocks for a width of ≈ 2·half + 1 px.
    let hc = ((2 * half + 1) / (2 * COARSE_PX)).max(1);
    let limit = narrow_limit(hc);
    // Block levels beyond the 32-bit boxes' reach (frames far past any ADC's range) are taken down
    // by a power of two that brings them within it, with the noise model to match (variance by its
    // square), and the baseline is taken back up: the low bits of such a baseline are lost, and one
    // box path serves every frame.
    let top = means.iter().fold(0u32, |m, &v| m.max(v.unsigned_abs()));
    let mut shift = 0u32;
    while shift < 31 && i64::from(top >> shift) > limit {
        shift += 1;
    }
    if shift > 0 {
        for m in means.iter_mut() {
            *m >>= shift;
        }
    }
    let coarse_noise = NoiseModel {
        floor_var_q8: coarse_noise.floor_var_q8 >> (2 * shift),
        zero_light_level: coarse_noise.zero_light_level >> shift,
        shot_var_per_unit_q16: coarse_noise.shot_var_per_unit_q16 >> shift,
        ..coarse_noise
    };
    let from = |src: &[i32], dst: &mut [i32]| box_narrow(hc, src, dst);
    rounds(means, cflag, &coarse_noise, cbase, ctmp, from, |b| {
        box_narrow_in_place(hc, b)
    });
    if shift > 0 {
        for b in cbase.iter_mut() {
            *b = b.wrapping_shl(shift);
        }
    }
    interpolate(cbase, base.get_mut(..n).unwrap_or(&mut []));
}

/// Each block's level into `means`: for a full block of trusted pixels the mean of the middle two of
/// its four 4-px means; otherwise the mean of its trusted pixels (rounded down). `cflag` marks blocks
/// with fewer than [`MIN_TRUSTED`] trusted pixels as untrusted.
///
/// The middle quarters are what keep the baseline down between lines that stand closer than a block
/// (near a series limit every 16-px block holds a line, and plain block means all ride on them).
/// With [`Levels::Ready`] the full blocks' levels are in `means` already (trusted), and a clean
/// frame's are taken by [`clean_levels`]: then only the partial last block is summed. Loop bound:
/// ≤ three passes over `frame`.
fn block_means(frame: &[i32], flag: &[u8], means: &mut [i32], cflag: &mut [u8], levels: Levels) {
    // Levels already there (a clean frame's noise pass took them) or taken here by 32-bit sums:
    // the full blocks are trusted.
    let mut done = 0usize;
    let ready = match levels {
        Levels::Ready => true,
        Levels::Unknown => clean_levels(frame, flag, means),
        Levels::NotClean => false,
    };
    if ready {
        done = (frame.len() / COARSE_PX).min(means.len()).min(cflag.len());
        cflag.get_mut(..done).unwrap_or(&mut []).fill(0);
    }
    let means_rest = means.get_mut(done..).unwrap_or(&mut []);
    let cflag_rest = cflag.get_mut(done..).unwrap_or(&mut []);
    for (k, (m, cf)) in means_rest.iter_mut().zip(cflag_rest.iter_mut()).enumerate() {
        let lo = (done + k) * COARSE_PX;
        let hi = (lo + COARSE_PX).min(frame.len());
        let vals = frame.get(lo..hi).unwrap_or(&[]);
        let fl = flag.get(lo..hi).unwrap_or(&[]);
        // Plain sums first; only a block holding an untrusted pixel is summed again pixel by pixel.
        let mut bad = 0u8;
        let mut sub = [0i64; 4];
        // Four values at a time (a partial last block adds only the values it has).
        for (q, c) in sub.iter_mut().zip(vals.chunks(4)) {
            *q = match *c {
                [a, b, c, d] => i64::from(a) + i64::from(b) + i64::from(c) + i64::from(d),
                _ => c.iter().map(|&v| i64::from(v)).sum(),
            };
        }
        for &f in fl {
            bad |= f;
        }
        let full = vals.len() == COARSE_PX && fl.len() == COARSE_PX && !flags::is_untrusted(bad);
        if full {
            *cf = 0;
            // The mean of the middle two of the four 4-px sums, in frame units: unbiased on a
            // straight continuum and for symmetric noise, and one sub-block holding a line moves it
            // by at most the spread of the other three.
            let total: i64 = sub.iter().sum();
            let (low, high) = sub
                .iter()
                .fold((i64::MAX, i64::MIN), |(l, h), &v| (l.min(v), h.max(v)));
            // The middle two sub-sums cover 8 px.
            *m = ((total - low - high) >> 3).clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32;
            continue;
        }
        let (mut sum, mut cnt) = (0i64, 0u32);
        for (&v, &f) in vals.iter().zip(fl) {
            if !flags::is_untrusted(f) {
                sum += i64::from(v);
                cnt += 1;
            }
        }
        *cf = if cnt < MIN_TRUSTED {
            flags::SATURATED
        } else {
            0
        };
        // Floor division, the same on every target.
        let mean = sum.div_euclid(i64::from(cnt.max(1)));
        *m = mean.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32;
    }
    // Untrusted blocks start at the last trusted level before them (the first trusted one for a
    // leading run), so the first smoothing is not pulled by a saturated or empty block.
    let mut fill = means
        .iter()
        .zip(cflag.iter())
        .find(|(_, &f)| f == 0)
        .map(|(&m, _)| m);
    for (m, &f) in means.iter_mut().zip(cflag.iter()) {
        match (f, fill) {
            (0, _) => fill = Some(*m),
            (_, Some(v)) => *m = v,
            _ => {}
        }
    }
}

/// Every full block's level into `means` when no pixel of `frame` is untrusted and all are within
/// ±2^23 (the levels the 64-bit path of [`block_means`] gives them); returns whether it did (else
/// `means` is untouched). One flag pass and one range pass, then 32-bit sums of 16 loads a block.
/// Loop bound: three passes over `frame`.
fn clean_levels(frame: &[i32], flag: &[u8], means: &mut [i32]) -> bool {
    if flag.len() != frame.len() || super::math::magnitude_span(frame) >= 1 << 23 {
        return false;
    }
    if flags::any_untrusted(flag) {
        return false;
    }
    for (m, c) in means.iter_mut().zip(frame.chunks_exact(COARSE_PX)) {
        let Ok(v) = <&[i32; COARSE_PX]>::try_from(c) else {
            break;
        };
        let [a0, a1, a2, a3, b0, b1, b2, b3, c0, c1, c2, c3, d0, d1, d2, d3] = *v;
        let q = |a: i32, b: i32, c: i32, d: i32| a.wrapping_add(b).wrapping_add(c).wrapping_add(d);
        *m = middle_of_quarters(
            q(a0, a1, a2, a3),
            q(b0, b1, b2, b3),
            q(c0, c1, c2, c3),
            q(d0, d1, d2, d3),
        );
    }
    true
}

/// A full block's level from its four 4-px sums `a … d`: the mean of the middle two (floor), in 32
/// bits (sums of values within ±2^23 stay below 2^27). The noise pass of a clean frame
/// ([`NoiseBlocks::measure_clean`](super::noise::NoiseBlocks)) takes it for every full block.
pub(crate) fn middle_of_quarters(a: i32, b: i32, c: i32, d: i32) -> i32 {
    let total = a.wrapping_add(b).wrapping_add(c).wrapping_add(d);
    let low = a.min(b).min(c.min(d));
    let high = a.max(b).max(c.max(d));
    total.wrapping_sub(low).wrapping_sub(high) >> 3
}

/// The pixel baseline: straight lines between block centres (block k's centre is pixel 16k + 8, the
/// last block's the middle of its pixels), the end segments extended beyond the first and last centre.
/// Loop bound: one pass over `base`.
fn interpolate(coarse: &[i32], base: &mut [i32]) {
    let nb = coarse.len();
    if nb < 2 {
        base.fill(coarse.first().copied().unwrap_or(0));
        return;
    }
    // Segment k runs from centre k to centre k + 1; the first also covers the pixels before centre 0
    // and the last those after the last centre. Segments 1 … nb − 3 join the centres of two full
    // blocks (only the last block can be partial): pixels 16k + 8 … 16k + 23, sixteen a segment from
    // pixel 24 on, a loop of their own with no per-segment bounds or centres.
    segment(coarse, base, 0);
    let inner = base.get_mut(COARSE_PX + COARSE_PX / 2..).unwrap_or(&mut []);
    let rows = inner
        .chunks_exact_mut(COARSE_PX)
        .zip(coarse.windows(2).skip(1));
    for (seg, w) in rows.take(nb.saturating_sub(3)) {
        let [ya, yb] = *w else {
            break;
        };
        let d = i64::from(yb) - i64::from(ya);
        if d.unsigned_abs() < 1 << 26 {
            // |d·t| < 2^30 for t < 16: d·t carried along by adds, a shift for the division.
            let d32 = d as i32;
            let mut dt = 0i32;
            for v in seg.iter_mut() {
                *v = ya.wrapping_add(dt >> COARSE_SHIFT);
                dt = dt.wrapping_add(d32);
            }
        } else {
            ramp(seg, ya, d, COARSE_PX as i64, 0);
        }
    }
    if nb > 2 {
        segment(coarse, base, nb - 2);
    }
}

/// Segment `k` of [`interpolate`] (`coarse.len()` ≥ 2), with its centres and ends worked out: the
/// first and the last segment, whose ends are the frame's.
fn segment(coarse: &[i32], base: &mut [i32], k: usize) {
    let n = base.len();
    let nb = coarse.len();
    let centre = |k: usize| {
        let lo = k * COARSE_PX;
        lo + (n.min(lo + COARSE_PX).saturating_sub(lo)) / 2
    };
    let (Some(&ya), Some(&yb)) = (coarse.get(k), coarse.get(k + 1)) else {
        return;
    };
    let (a, b) = (centre(k), centre(k + 1));
    let from = if k == 0 { 0 } else { a };
    let to = if k + 2 == nb { n } else { b };
    let seg = base.get_mut(from..to).unwrap_or(&mut []);
    let span = b.saturating_sub(a).max(1);
    let d = i64::from(yb) - i64::from(ya);
    if span == COARSE_PX && d.unsigned_abs() < 1 << 26 && from == a {
        // |d·t| < 2^31 for t < 24 (the last segment runs 8 px past its centre).
        let d32 = d as i32;
        let mut dt = 0i32;
        for v in seg.iter_mut() {
            *v = ya.wrapping_add(dt >> COARSE_SHIFT);
            dt = dt.wrapping_add(d32);
        }
    } else {
        ramp(seg, ya, d, span as i64, from as i64 - a as i64);
    }
}

/// `out[j] = a + ⌊d · (t0 + j) / span⌋` (span > 0), stepped by one quotient and remainder: one
/// division for the whole run. Loop bound: `out.len()`.
fn ramp(out: &mut [i32], a: i32, d: i64, span: i64, t0: i64) {
    if out.is_empty() || span <= 0 {
        return;
    }
    // Quotient and remainder in 32 bits where they fit (a library division each either way); the
    // checked forms keep the impossible cases (span ≤ 0, MIN / −1) from leaving a panic path.
    let divmod = |x: i64| match (i32::try_from(x), i32::try_from(span)) {
        (Ok(x), Ok(s)) => (
            i64::from(x.checked_div_euclid(s).unwrap_or(0)),
            i64::from(x.checked_rem_euclid(s).unwrap_or(0)),
        ),
        _ => (
            x.checked_div_euclid(span).unwrap_or(0),
            x.checked_rem_euclid(span).unwrap_or(0),
        ),
    };
    let (q, r) = divmod(d);
    // The value and remainder at t0: a + ⌊d·t0/span⌋, (d·t0) mod span.
    let (pq, pr) = if t0 == 1 {
        (q, r)
    } else {
        divmod(d.saturating_mul(t0))
    };
    let (mut v, mut acc) = (i64::from(a) + pq, pr);
    for slot in out.iter_mut() {
        *slot = v.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32;
        v += q;
        acc += r;
        if acc >= span {
            acc -= span;
            v += 1;
        }
    }
}

/// The clip-and-smooth rounds with a triangle made of `from` (box of a row into another) and `in_place`
/// (box of a row onto itself): the narrow and the wide boxes give the same integers where both apply.
fn rounds(
    frame: &[i32],
    flag: &[u8],
    noise: &NoiseModel,
    base: &mut [i32],
    tmp: &mut [i32],
    from: impl Fn(&[i32], &mut [i32]),
    in_place: impl Fn(&mut [i32]),
) {
    from(frame, base);
    in_place(base);
    // The values clipped in the previous round, one bit each (up to 256 values: the coarse rows;
    // longer rows never stop early). A round that clips exactly the same values bridges exactly the
    // same row, so its triangle is the baseline already there: the rounds can stop (same integers).
    let mut prev = [0u32; 8];
    let mut known = false;
    for _ in 0..ROUNDS {
        // Values standing above the baseline (and untrusted ones) are bridged in tmp by the straight
        // line between the nearest kept values on either side, then the triangle is taken again: a
        // line leaves the baseline in one round instead of fading by a constant share per round.
        let mut clipped = [0u32; 8];
        let trackable = frame.len() <= 256;
        let kept = clip_and_bridge(frame, flag, noise, base, tmp, &mut clipped);
        // (With nothing kept the row is the baseline itself, which smoothing still moves.)
        if trackable && known && kept && clipped == prev {
            break;
        }
        (prev, known) = (clipped, trackable && kept);
        from(tmp, base);
        in_place(base);
    }
}

/// One round's clipping: `tmp` gets `frame` where it stands at most [`CLIP_SIGMA`] σ above `base`
/// (and is trusted), bridged by straight lines elsewhere (a leading run takes the first kept value,
/// a trailing one the last); `clipped` gets a bit for each value left out (the first 256). With
/// nothing kept `tmp` is `base`. Returns whether any value was kept.
///
/// A plain index loop over rows of one length (the zipped and counted iterators it replaces cost
/// about as much as the clip test on the M0). Loop bound: one pass, plus the bridged gaps.
fn clip_and_bridge(
    frame: &[i32],
    flag: &[u8],
    noise: &NoiseModel,
    base: &[i32],
    tmp: &mut [i32],
    clipped: &mut [u32; 8],
) -> bool {
    let n = frame.len().min(base.len()).min(flag.len());
    let (Some(frame), Some(base), Some(flag)) = (frame.get(..n), base.get(..n), flag.get(..n))
    else {
        return false;
    };
    // No level's variance is below the floor's (the shot term is ≥ 0, the variance ≥ 1), so no
    // residual up to its clip level's is clipped: `64·r² > L ⟺ r > isqrt(⌊L / 64⌋)` for r ≥ 0.
    let least_r = super::math::isqrt_i64(noise.floor_var_q8.max(1) >> 6);
    // The last kept value's index + 1 (0: none yet) and the value.
    let (mut after_kept, mut last_v) = (0usize, 0i32);
    for i in 0..n {
        let (Some(&y), Some(&b), Some(&f)) = (frame.get(i), base.get(i), flag.get(i)) else {
            break;
        };
        let r = i64::from(y) - i64::from(b);
        // The variance only where the residual clears the floor's clip level (most noise values
        // do not; negative ones never do).
        if flags::is_untrusted(f) || (r > least_r && above_clip(r, noise.var_q8(i64::from(b)))) {
            if let Some(w) = clipped.get_mut(i / 32) {
                *w |= 1 << (i % 32);
            }
            continue;
        }
        // Most kept values follow a kept one: no gap, no bridge. A leading gap takes this value.
        if after_kept < i {
            let gap = tmp.get_mut(after_kept..i).unwrap_or(&mut []);
            if after_kept == 0 {
                gap.fill(y);
            } else {
                bridge(gap, last_v, y);
            }
        }
        if let Some(t) = tmp.get_mut(i) {
            *t = y;
        }
        (after_kept, last_v) = (i + 1, y);
    }
    if after_kept > 0 {
        tmp.get_mut(after_kept..).unwrap_or(&mut []).fill(last_v);
        return true;
    }
    // Nothing kept: the baseline as it is.
    for (t, &b) in tmp.iter_mut().zip(base.iter()) {
        *t = b;
    }
    false
}

/// Fills `gap` with the straight line from `a` (the value before it) to `b` (the value after it).
/// Loop bound: `gap.len()`.
fn bridge(gap: &mut [i32], a: i32, b: i32) {
    let span = gap.len() as i64 + 1;
    ramp(gap, a, i64::from(b) - i64::from(a), span, 1);
}

/// Whether a residual `r` stands more than [`CLIP_SIGMA`] σ above the baseline (σ² = `var_q8` / 256):
/// `64·r² > var_q8`, in 32-bit arithmetic for the residuals of ADC frames, exactly
/// [`above_sigmas`](super::math::above_sigmas) otherwise.
#[inline(always)]
fn above_clip(r: i64, var_q8: i64) -> bool {
    match u32::try_from(r) {
        Ok(0) | Err(_) if r <= 0 => false,
        Ok(r32) if r32 < 1 << 12 => i64::from((r32 * r32) << 6) > var_q8,
        // ≥ 2^30 on the left; r < 2^29 keeps 64·r² below 2^64.
        Ok(r32) if r32 < 1 << 29 => {
            (super::math::mul_u32_wide(r32, r32) << 6) > var_q8.max(0).unsigned_abs()
        }
        _ => super::math::above_sigmas(r, CLIP_SIGMA << 8, var_q8),
    }
}

// The narrow clip test is written for 2 σ.
const _: () = assert!(CLIP_SIGMA == 2);

#[cfg(test)]
mod tests {
    use super::super::smooth::{box_symmetric, box_symmetric_in_place};
    use super::super::testkit::{pixel_gauss, Rng};
    use super::*;
    use crate::condition::flags;

    fn model(sd: i64) -> NoiseModel {
        NoiseModel {
            floor_var_q8: sd * sd * 256,
            zero_light_level: 0,
            shot_var_per_unit_q16: 0,
            shot_from_data: false,
        }
    }

    #[test]
    fn ready_levels_are_kept_and_the_partial_block_summed() {
        let mut x = 0x2545_f491u32;
        for n in [16usize, 37, 256, 1000] {
            let frame: std::vec::Vec<i32> = (0..n)
                .map(|_| {
                    crate::test_rng::step32(&mut x);
                    (x as i32) >> 12
                })
                .collect();
            let fl = std::vec![0u8; n];
            let nb = n.div_ceil(COARSE_PX);
            let (mut m1, mut c1) = (std::vec![0i32; nb], std::vec![9u8; nb]);
            block_means(&frame, &fl, &mut m1, &mut c1, Levels::NotClean);
            // The full blocks' levels as the noise pass leaves them, the rest unknown.
            let mut m2: std::vec::Vec<i32> = (0..nb)
                .map(|k| if k < n / COARSE_PX { m1[k] } else { 12_345 })
                .collect();
            let mut c2 = std::vec![9u8; nb];
            block_means(&frame, &fl, &mut m2, &mut c2, Levels::Ready);
            assert_eq!((m1, c1), (m2, c2), "n {n}");
        }
    }

    /// The block levels, fast and careful paths alike, are the plain middle-quarter means and
    /// trusted-pixel means.
    #[test]
    fn block_levels_are_the_plain_means() {
        let mut x = 0x0bad_5eedu32;
        for n in [1usize, 15, 16, 33, 256, 1000] {
            for (bits, dirty) in [12u32, 23, 24, 31]
                .into_iter()
                .flat_map(|b| [(b, false), (b, true)])
            {
                let frame: std::vec::Vec<i32> = (0..n)
                    .map(|_| {
                        crate::test_rng::step32(&mut x);
                        (x as i32) >> (32 - bits)
                    })
                    .collect();
                let fl: std::vec::Vec<u8> = (0..n)
                    .map(|_| {
                        crate::test_rng::step32(&mut x);
                        match x % 40 {
                            _ if !dirty => 0,
                            0 => flags::SATURATED,
                            1 => flags::REPAIRED,
                            _ => 0,
                        }
                    })
                    .collect();
                let nb = n.div_ceil(COARSE_PX);
                let (mut means, mut cf) = (std::vec![0i32; nb], std::vec![9u8; nb]);
                block_means(&frame, &fl, &mut means, &mut cf, Levels::Unknown);
                // The careful pass and (for clean frames) the 32-bit one.
                let (mut careful, mut careful_cf) = (std::vec![0i32; nb], std::vec![9u8; nb]);
                block_means(&frame, &fl, &mut careful, &mut careful_cf, Levels::NotClean);
                assert_eq!((&careful, &careful_cf), (&means, &cf), "n {n} bits {bits}");
                let mut want = std::vec![0i64; nb];
                let mut want_cf = std::vec![0u8; nb];
                for k in 0..nb {
                    let lo = k * COARSE_PX;
                    let hi = (lo + COARSE_PX).min(n);
                    let good: std::vec::Vec<i64> = (lo..hi)
                        .filter(|&i| !flags::is_untrusted(fl[i]))
                        .map(|i| i64::from(frame[i]))
                        .collect();
                    if good.len() == COARSE_PX {
                        let mut q: std::vec::Vec<i64> =
                            good.chunks(4).map(|c| c.iter().sum()).collect();
                        q.sort();
                        want[k] = (q[1] + q[2]) >> 3;
                    } else {
                        want[k] = good
                            .iter()
                            .sum::<i64>()
                            .div_euclid(good.len().max(1) as i64);
                        if good.len() < MIN_TRUSTED as usize {
                            want_cf[k] = flags::SATURATED;
                        }
                    }
                }
                // Untrusted blocks take the last trusted level before them (the first for a lead).
                let first = (0..nb).find(|&k| want_cf[k] == 0).map(|k| want[k]);
                let mut fill = first;
                for k in 0..nb {
                    if want_cf[k] == 0 {
                        fill = Some(want[k]);
                    } else if let Some(v) = fill {
                        want[k] = v;
                    }
                }
                let got: std::vec::Vec<i64> = means.iter().map(|&v| i64::from(v)).collect();
                assert_eq!((got, cf), (want, want_cf), "n {n} bits {bits}");
            }
        }
    }

    #[test]
    fn interpolation_is_the_plain_line() {
        let mut x = 0x1357_9bdfu32;
        for n in [16usize, 17, 40, 256, 1000] {
            for bits in [3u32, 20, 25] {
                let nb = n.div_ceil(COARSE_PX);
                let coarse: std::vec::Vec<i32> = (0..nb)
                    .map(|_| {
                        crate::test_rng::step32(&mut x);
                        (x as i32) >> (31 - bits)
                    })
                    .collect();
                let mut got = std::vec![0i32; n];
                interpolate(&coarse, &mut got);
                let centre = |k: usize| {
                    k * COARSE_PX + (n.min(k * COARSE_PX + COARSE_PX) - k * COARSE_PX) / 2
                };
                for (p, &g) in got.iter().enumerate() {
                    let want = if nb < 2 {
                        i64::from(coarse[0])
                    } else {
                        // The segment whose centres bracket p (the end ones extended).
                        let k = (0..nb - 1).rev().find(|&k| centre(k) <= p).unwrap_or(0);
                        let (a, b) = (centre(k) as i64, centre(k + 1) as i64);
                        let (ya, yb) = (i64::from(coarse[k]), i64::from(coarse[k + 1]));
                        ya + ((yb - ya) * (p as i64 - a)).div_euclid((b - a).max(1))
                    };
                    assert_eq!(
                        i64::from(g),
                        want.clamp(i64::from(i32::MIN), i64::from(i32::MAX)),
                        "n {n} p {p}"
                    );
                }
            }
        }
    }

    #[test]
    fn clip_test_is_exact() {
        for r in [
            -5i64,
            0,
            1,
            2,
            100,
            4095,
            4096,
            70_000,
            (1 << 29) - 1,
            1 << 29,
            1 << 31,
            1 << 40,
        ] {
            for var in [
                0i64,
                1,
                64,
                6_400,
                1 << 30,
                (1 << 30) + 1,
                1 << 40,
                i64::MAX,
            ] {
                let want = super::super::math::above_sigmas(r, CLIP_SIGMA << 8, var);
                assert_eq!(above_clip(r, var), want, "r {r} var {var}");
            }
        }
    }

    /// The clip pass as it was written first (zipped rows, the last kept value as an option).
    fn clip_plain(
        frame: &[i32],
        flag: &[u8],
        noise: &NoiseModel,
        base: &[i32],
        tmp: &mut [i32],
    ) -> (bool, [u32; 8]) {
        let mut last_kept: Option<(usize, i32)> = None;
        let mut clipped = [0u32; 8];
        for (i, ((&y, &b), &f)) in frame.iter().zip(base.iter()).zip(flag).enumerate() {
            let r = i64::from(y) - i64::from(b);
            let high =
                flags::is_untrusted(f) || (r > 0 && above_clip(r, noise.var_q8(i64::from(b))));
            if high {
                if let Some(w) = clipped.get_mut(i / 32) {
                    *w |= 1 << (i % 32);
                }
                continue;
            }
            let from_k = last_kept.map_or(0, |(k, _)| k + 1);
            let start = last_kept.map_or(y, |(_, v)| v);
            bridge(tmp.get_mut(from_k..i).unwrap_or(&mut []), start, y);
            tmp[i] = y;
            last_kept = Some((i, y));
        }
        match last_kept {
            Some((k, v)) => tmp[k + 1..].fill(v),
            None => tmp.copy_from_slice(base),
        }
        (last_kept.is_some(), clipped)
    }

    #[test]
    fn clip_pass_is_the_plain_one() {
        let mut rng = Rng::new(71);
        for n in [1usize, 2, 7, 128, 256, 300] {
            for style in 0..4 {
                let frame: Vec<i32> = (0..n)
                    .map(|i| {
                        (3000
                            + 5 * i as i64
                            + rng.gauss(40 << 16)
                            + if i % 17 < 2 { 900 } else { 0 }) as i32
                    })
                    .collect();
                let base: Vec<i32> = (0..n)
                    .map(|i| 3000 + 5 * i as i32 + [0, 60, -60, 0][style])
                    .collect();
                let fl: Vec<u8> = (0..n)
                    .map(|i| {
                        if style == 3 || (style == 1 && i % 13 == 0) {
                            flags::SATURATED
                        } else {
                            0
                        }
                    })
                    .collect();
                // Read noise; shot noise above a zero level; no floor at all; a floor whose clip
                // level is an exact square (64 · 30² · 4).
                let models = [
                    model(40),
                    NoiseModel {
                        floor_var_q8: 20 * 20 * 256,
                        zero_light_level: 2500,
                        shot_var_per_unit_q16: 3 << 16,
                        shot_from_data: true,
                    },
                    NoiseModel {
                        floor_var_q8: 0,
                        zero_light_level: 0,
                        shot_var_per_unit_q16: 1 << 16,
                        shot_from_data: true,
                    },
                    NoiseModel {
                        floor_var_q8: 64 * 900 * 4,
                        ..model(0)
                    },
                ];
                for (m, nm) in models.iter().enumerate() {
                    let (mut t1, mut t2) = (vec![7i32; n], vec![7i32; n]);
                    let mut c1 = [0u32; 8];
                    let k1 = clip_and_bridge(&frame, &fl, nm, &base, &mut t1, &mut c1);
                    let (k2, c2) = clip_plain(&frame, &fl, nm, &base, &mut t2);
                    assert_eq!((k1, c1, t1), (k2, c2, t2), "n {n} style {style} model {m}");
                }
            }
        }
    }

    /// Block levels beyond the 32-bit boxes' reach are taken down and the baseline back up: a frame
    /// scaled by 2^11 (levels to ~2^30) gets the scaled frame's baseline, to within a tenth of the
    /// scaled noise σ (the low bits and the odd clip decision differ).
    #[test]
    fn wide_frames_get_the_scaled_baseline() {
        let mut rng = Rng::new(12);
        let n = 1000;
        let sd = 60i64;
        let frame: Vec<i32> = (0..n as i64)
            .map(|i| {
                (200_000
                    + 150 * i
                    + pixel_gauss(i, 150_000, 300 << 16, 150_000)
                    + pixel_gauss(i, 40_000, 610 << 16, 90_000)
                    + rng.gauss(sd << 16)) as i32
            })
            .collect();
        let fl = vec![0u8; n];
        let nm = NoiseModel {
            floor_var_q8: sd * sd * 256,
            zero_light_level: 100,
            shot_var_per_unit_q16: 0,
            shot_from_data: false,
        };
        let up = 11u32;
        let wide: Vec<i32> = frame.iter().map(|&v| v << up).collect();
        assert!(wide.iter().any(|&v| i64::from(v) > narrow_limit(2)));
        let wide_nm = NoiseModel {
            floor_var_q8: nm.floor_var_q8 << (2 * up),
            zero_light_level: nm.zero_light_level << up,
            ..nm
        };
        let (mut b1, mut t1) = (vec![0i32; n], vec![0i32; n]);
        let (mut b2, mut t2) = (vec![0i32; n], vec![0i32; n]);
        estimate_baseline(&frame, &fl, &nm, 40, &mut b1, &mut t1);
        estimate_baseline(&wide, &fl, &wide_nm, 40, &mut b2, &mut t2);
        let tol = (sd << up) / 10;
        for i in 0..n {
            let d = i64::from(b2[i]) - (i64::from(b1[i]) << up);
            assert!(
                d.abs() <= tol,
                "px {i}: {} vs {}",
                b2[i],
                i64::from(b1[i]) << up
            );
        }
    }

    /// The narrow path gives the wide path's integers.
    #[test]
    fn narrow_and_wide_paths_agree() {
        let mut rng = Rng::new(9);
        let n = 900;
        for (sd, kappa) in [(3i64, 0u32), (40, 1 << 16), (200, 5 << 16)] {
            let frame: Vec<i32> = (0..n as i64)
                .map(|i| {
                    (3000
                        + 2 * i
                        + pixel_gauss(i, 40_000, 300 << 16, 150_000)
                        + pixel_gauss(i, 9_000, 610 << 16, 90_000)
                        + rng.gauss(sd << 16)) as i32
                })
                .collect();
            let mut fl = vec![0u8; n];
            fl[450] = flags::SATURATED;
            let nm = NoiseModel {
                floor_var_q8: sd * sd * 256,
                zero_light_level: 100,
                shot_var_per_unit_q16: kappa,
                shot_from_data: false,
            };
            let (mut b1, mut t1) = (vec![0i32; n], vec![0i32; n]);
            let (mut b2, mut t2) = (vec![0i32; n], vec![0i32; n]);
            let narrow = |src: &[i32], dst: &mut [i32]| box_narrow(20, src, dst);
            rounds(&frame, &fl, &nm, &mut b1, &mut t1, narrow, |b| {
                box_narrow_in_place(20, b)
            });
            let wide = |src: &[i32], dst: &mut [i32]| {
                box_symmetric(20, |j| i64::from(src.get(j).copied().unwrap_or(0)), dst)
            };
            rounds(&frame, &fl, &nm, &mut b2, &mut t2, wide, |b| {
                box_symmetric_in_place(20, b)
            });
            assert_eq!(b1, b2, "sd {sd}");
        }
    }

    #[test]
    fn strong_line_drops_out_of_the_baseline() {
        let n = 512;
        let mut rng = Rng::new(3);
        // Sloped continuum + a line of 1000 σ, FWHM ≈ 8 px (σ = 3.4 px).
        let frame: Vec<i32> = (0..n as i64)
            .map(|i| {
                (5000 + 4 * i + pixel_gauss(i, 10_000, 256 << 16, 223_000) + rng.gauss(10 << 16))
                    as i32
            })
            .collect();
        let fl = vec![0u8; n];
        let mut base = vec![0i32; n];
        let mut tmp = vec![0i32; n];
        estimate_baseline(&frame, &fl, &model(10), 24, &mut base, &mut tmp);
        for i in [100usize, 240, 256, 270, 400] {
            let truth = 5000 + 4 * i as i32;
            let err = base[i] - truth;
            assert!(err.abs() <= 5, "px {i}: baseline off by {err} (σ = 10)");
        }
    }

    #[test]
    fn follows_a_curved_continuum() {
        let n = 1024;
        // A broad hump 20000 high, 300 px wide (σ), like a lamp continuum.
        let frame: Vec<i32> = (0..n as i64)
            .map(|i| pixel_gauss(i, 20_000, 512 << 16, 300 << 16) as i32)
            .collect();
        let fl = vec![0u8; n];
        let mut base = vec![0i32; n];
        let mut tmp = vec![0i32; n];
        estimate_baseline(&frame, &fl, &model(100), 24, &mut base, &mut tmp);
        for i in (0..n).step_by(37) {
            let err = base[i] - frame[i];
            // Curvature bias of the smoothing: block mean (21 px²) + triangle of 3-block boxes
            // (2 × 171 px²) ≈ 383 px², 20000/300² · 383 / 2 ≈ 43 at the top, plus up to
            // 20000/300² · 8² / 2 ≈ 7 from the straight lines between block centres.
            assert!(err.abs() <= 55, "px {i}: off by {err}");
        }
    }
}
