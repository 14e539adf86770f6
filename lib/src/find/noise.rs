//! Noise estimated from the frame itself: a read/dark floor plus a shot term that grows with the signal.
//!
//! Second differences `y[i−1] − 2y[i] + y[i+1]` cancel any smooth continuum, leaving 6σ² of white noise.
//! Each block of [`BLOCK_PX`] pixels gives a variance (from the mean absolute second difference) and its
//! mean level; a weighted fit `var = floor + κ·(level − zero)` over the blocks, rejecting blocks that
//! lines inflate, gives the model used for thresholds and fit weights.
//!
//! `zero` is the lowest block level, taken as the frame's no-light level. Without it, a frame that still
//! carries the ADC bias (no dark frame subtracted) would have its bias counted as shot noise: at 1 e⁻ per
//! count and a 100-count bias that is 100 counts² of variance that is not there, so weak lines got weights,
//! thresholds and a reported centre σ for almost 2× their true noise σ.

use super::mask::LineMask;
use super::math::{checked_mul_i128, div_round_i128, isqrt_i64, mul_i128, Recip};
use crate::condition::{flags, MAX_PIXELS};

/// Pixels per noise block.
pub const BLOCK_PX: usize = 64;
/// Blocks in the largest frame.
const MAX_BLOCKS: usize = MAX_PIXELS.div_ceil(BLOCK_PX);
/// Fewest usable second differences for a block to count.
const MIN_BLOCK_SAMPLES: usize = 12;
/// π/12 in Q16 (17 157.3): the variance per squared mean absolute second difference.
const PI_OVER_12_Q16: u128 = 17_157;
/// A block whose variance exceeds the model by this factor (Q8, 1.8) is taken as line-contaminated.
const REJECT_ABOVE_Q8: i128 = 461;
/// Refit rounds with rejection.
pub const FIT_ROUNDS: usize = 4;

/// Per-pixel noise variance `floor + κ·max(level − zero_light_level, 0)`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct NoiseModel {
    /// Variance at the no-light level: read, dark and quantisation noise (frame units², Q8).
    pub floor_var_q8: i64,
    /// Frame level below which there is no shot noise (frame units): the lowest block level, i.e. the
    /// bias when no dark frame was subtracted, about 0 when one was.
    pub zero_light_level: i64,
    /// Shot variance per frame unit of signal (frame units, Q16).
    pub shot_var_per_unit_q16: u32,
    /// Whether κ came from the data rather than the configuration.
    pub shot_from_data: bool,
}

impl NoiseModel {
    /// Variance at a signal level (frame units), Q8.
    #[inline(always)]
    pub fn var_q8(&self, level: i64) -> i64 {
        let (z, k, floor) = (
            self.zero_light_level,
            self.shot_var_per_unit_q16,
            self.floor_var_q8,
        );
        // The per-pixel case (ADC frames, κ < 256): level and zero of one sign, so `level − zero`
        // cannot overflow; light below 2^24 and a floor below 2^62, so nothing saturates — three
        // 32-bit products and no 64-bit saturating arithmetic (each a dozen instructions on the M0).
        if (level ^ z) >= 0 && k < 1 << 24 && floor < 1 << 62 {
            let d = level.wrapping_sub(z);
            if d <= 0 {
                return floor.max(1);
            }
            if d < 1 << 24 {
                // With l = 2^8·l_hi + l_lo: l · κ = (l · κ_hi) · 2^16 + (l_hi · κ_lo) · 2^8 + l_lo · κ_lo,
                // each product below 2^32, so the shift by 8 splits exactly.
                let l = d as u32;
                let (kh, kl) = (k >> 16, k & 0xffff);
                let (lh, ll) = (l >> 8, l & 0xff);
                let shot = i64::from(l * kh) * 256 + i64::from(lh * kl) + i64::from((ll * kl) >> 8);
                return (floor + shot).max(1);
            }
        }
        self.var_q8_general(level)
    }

    /// [`var_q8`](Self::var_q8) for any level and model, out of line (the per-pixel case stays
    /// inline at every caller).
    #[inline(never)]
    fn var_q8_general(&self, level: i64) -> i64 {
        let (z, k) = (self.zero_light_level, self.shot_var_per_unit_q16);
        let light = level.saturating_sub(z).max(0);
        // light < 2^31 keeps the product below 2^63 (the per-pixel case; i128 on M0 is a library call).
        let shot = if light < 1 << 16 {
            // l · κ = (l · κ_hi) · 2^16 + l · κ_lo with both products in 32 bits, and the shift by 8
            // splits the same way: exactly the wide product's, in two multiplies.
            let l = light as u32;
            let (hi, lo) = (l * (k >> 16), l * (k & 0xffff));
            i64::from(hi) * 256 + i64::from(lo >> 8)
        } else if light < 1 << 31 {
            (super::math::mul_u32_wide(light as u32, k) >> 8) as i64
        } else {
            wide_shot(light, k)
        };
        self.floor_var_q8.saturating_add(shot).max(1)
    }

    /// Noise σ at a signal level (frame units, rounded down, ≥ 0).
    ///
    /// Work: one square root (≤ 64 steps).
    pub fn sigma(&self, level: i64) -> i64 {
        isqrt_i64(self.var_q8(level) >> 8)
    }
}

/// Shot variance (Q8) of a level beyond 2^31 frame units: out of line, it never runs for ADC frames.
#[cold]
#[inline(never)]
fn wide_shot(light: i64, shot_q16: u32) -> i64 {
    let wide = (i128::from(light) * i128::from(shot_q16)) >> 8;
    wide.clamp(0, i128::from(i64::MAX)) as i64
}

#[derive(Clone, Copy, Default)]
struct Block {
    var_q8: i64,
    level: i64,
    /// Measured with enough samples.
    used: bool,
    /// Still in the fit (blocks that lines inflate are rejected here).
    kept: bool,
}

impl Block {
    const EMPTY: Self = Self {
        var_q8: 0,
        level: 0,
        used: false,
        kept: false,
    };
}

/// Estimates the noise model of `frame` from trusted pixels (see [`flags`]) outside `mask`.
///
/// `known_shot_q16` fixes κ; otherwise it is fitted and kept ≥ 0. When the block levels span too little
/// to tell shot from read noise, κ is 0 and the floor absorbs the continuum's shot noise.
/// Loop bounds: N = min(`frame.len()`, [`MAX_PIXELS`]) pixels in ≤ 64 blocks, one pass each; then [`FIT_ROUNDS`] × 2
/// passes over the blocks and ≤ 2 + [`FIT_ROUNDS`] selection medians of ≤ 64 block variances.
pub fn estimate(
    frame: &[i32],
    flag: &[u8],
    mask: &LineMask,
    known_shot_q16: Option<u32>,
) -> Option<NoiseModel> {
    let mut blocks = NoiseBlocks::measure(frame, flag, mask);
    blocks.model(known_shot_q16)
}

/// The per-block statistics of one frame, kept so a second look with a line mask re-measures only
/// the blocks the mask touches. 24 bytes a block, ≤ 64 blocks.
pub struct NoiseBlocks {
    blocks: [Block; MAX_BLOCKS],
    n: usize,
    /// Whether the frame is within ±[`NARROW`] (checked once, by [`NoiseBlocks::measure`]).
    narrow: bool,
    /// Whether the last full measurement took every block's plain sums, which it does only when no
    /// pixel of the frame is untrusted.
    all_trusted: bool,
}

impl Default for NoiseBlocks {
    fn default() -> Self {
        Self::new()
    }
}

impl NoiseBlocks {
    /// Measures every block of `frame` from trusted pixels outside `mask`.
    ///
    /// Loop bound: one pass over N = min(`frame.len()`, [`MAX_PIXELS`]) pixels (plus one range check).
    pub fn measure(frame: &[i32], flag: &[u8], mask: &LineMask) -> Self {
        let mut me = Self::new();
        me.measure_in_place(frame, flag, mask);
        me
    }

    /// No blocks yet (a `const`, so [`FindWork`](super::work::FindWork) can sit in a `static`).
    pub const fn new() -> Self {
        Self {
            blocks: [Block::EMPTY; MAX_BLOCKS],
            n: 0,
            narrow: false,
            all_trusted: false,
        }
    }

    /// [`measure`](Self::measure) into `self`, which may hold an earlier frame's blocks (all are
    /// measured again): no 1.5 KiB value on the stack.
    ///
    /// Loop bound: as for [`measure`](Self::measure).
    pub fn measure_in_place(&mut self, frame: &[i32], flag: &[u8], mask: &LineMask) {
        // ADC frames: sums of 64 values and their second differences stay inside 32 bits.
        // (The span's test is a little conservative: 2^23 itself takes the careful path.)
        let narrow = super::math::magnitude_span(frame) < NARROW as u32;
        self.measure_known(frame, flag, mask, narrow);
    }

    /// [`measure_in_place`](Self::measure_in_place) when the caller knows whether `frame` is within
    /// ±2^23 (`narrow`; `false` is always safe, only slower — both paths give the same blocks).
    pub(crate) fn measure_known(
        &mut self,
        frame: &[i32],
        flag: &[u8],
        mask: &LineMask,
        narrow: bool,
    ) {
        self.n = frame.len().min(MAX_PIXELS).div_ceil(BLOCK_PX);
        self.narrow = narrow;
        self.all_trusted = self.refresh(frame, flag, mask, false);
    }

    /// [`measure_known`](Self::measure_known) with no mask, for a frame with no untrusted pixel,
    /// together with the baseline's level of every full 16-px block
    /// ([`middle_of_quarters`](super::baseline::middle_of_quarters)) into `levels`: one read of the
    /// frame for both, and its magnitude span (as [`magnitude_span`](super::math::magnitude_span))
    /// on the way, where three passes read it before. Returns that span when every pixel is trusted
    /// and within ±2^23: then the blocks are exactly `measure_known`'s (all trusted) and
    /// `levels[k]` holds block k's level for k < N / 16. `None` otherwise (also for `levels` shorter
    /// than N / 16): then `self` and `levels` hold nothing of use; measure again.
    ///
    /// Each 64-px block sums |second differences| over its own pixels' terms (pixel j gives the one
    /// centred on j − 1); a block's true sum drops its first term (centred in the block before) and
    /// takes the next block's first. The start values make the first two terms of the frame 0.
    /// Loop bound: one flag pass and one value pass over N pixels, one pass over the ≤ 64 blocks.
    pub(crate) fn measure_clean(
        &mut self,
        frame: &[i32],
        flag: &[u8],
        levels: &mut [i32],
    ) -> Option<u32> {
        let n = frame.len();
        if n > MAX_PIXELS || flag.len() != n || levels.len() < n / 16 {
            return None;
        }
        if flags::any_untrusted(flag) {
            return None;
        }
        let (Some(&x0), Some(&x1)) = (frame.first(), frame.get(1)) else {
            return None;
        };
        // Pixel 0 and 1 then give terms of 0: d = x1 − x0 both times.
        let (mut p1, mut d1) = (x0.wrapping_mul(2).wrapping_sub(x1), x1.wrapping_sub(x0));
        let mut span = 0u32;
        // Wrapping throughout: exact within ±2^23, and the span says when it was not.
        let mut step = |y: i32| -> u32 {
            span |= (y ^ (y >> 31)) as u32;
            let d = y.wrapping_sub(p1);
            let t = d.wrapping_sub(d1).unsigned_abs();
            (p1, d1) = (y, d);
            t
        };
        self.n = n.div_ceil(BLOCK_PX);
        // Per block: its sum, its own pixels' terms and its first pixel's term, in the blocks' fields
        // until the last pass (var_q8 ← terms, level ← sum, used/kept ← first term in `kept`'s
        // stead below).
        let mut firsts = [0u32; MAX_BLOCKS];
        let mut level_k = 0usize;
        for ((blk, first), px) in self
            .blocks
            .iter_mut()
            .zip(firsts.iter_mut())
            .zip(frame.chunks(BLOCK_PX))
        {
            let (mut sum, mut terms) = (0i32, 0u32);
            let mut sixteens = px.chunks_exact(16);
            let mut at_start = true;
            for c in &mut sixteens {
                let mut q = [0i32; 4];
                for (qs, four) in q.iter_mut().zip(c.chunks_exact(4)) {
                    if let [a, b, c, d] = *four {
                        let ta = step(a);
                        if at_start {
                            *first = ta;
                            at_start = false;
                        }
                        terms = terms
                            .wrapping_add(ta)
                            .wrapping_add(step(b))
                            .wrapping_add(step(c))
                            .wrapping_add(step(d));
                        *qs = a.wrapping_add(b).wrapping_add(c).wrapping_add(d);
                    }
                }
                let [a, b, c, d] = q;
                sum = sum.wrapping_add(a.wrapping_add(b).wrapping_add(c).wrapping_add(d));
                if let Some(l) = levels.get_mut(level_k) {
                    *l = super::baseline::middle_of_quarters(a, b, c, d);
                }
                level_k += 1;
            }
            for &y in sixteens.remainder() {
                let t = step(y);
                if at_start {
                    *first = t;
                    at_start = false;
                }
                terms = terms.wrapping_add(t);
                sum = sum.wrapping_add(y);
            }
            blk.var_q8 = i64::from(terms);
            blk.level = i64::from(sum);
        }
        if span >= NARROW as u32 {
            return None;
        }
        let nb = self.n;
        for (m, blk) in self.blocks.iter_mut().enumerate().take(nb) {
            let start = m * BLOCK_PX;
            let end = (start + BLOCK_PX).min(n);
            let next_first = firsts
                .get(m + 1)
                .copied()
                .filter(|_| m + 1 < nb)
                .unwrap_or(0);
            let own_first = firsts.get(m).copied().unwrap_or(0);
            let sad = (blk.var_q8 as u32)
                .wrapping_sub(own_first)
                .wrapping_add(next_first);
            let sum = blk.level as i32;
            let cnt = (end - start) as u32;
            let nd = cnt - u32::from(start == 0) - u32::from(end == n);
            *blk = if (nd as usize) < MIN_BLOCK_SAMPLES || cnt == 0 {
                Block::default()
            } else {
                variance_block(i64::from(sum), cnt, u64::from(sad), nd)
            };
        }
        self.narrow = true;
        self.all_trusted = true;
        Some(span)
    }

    /// Whether the last measurement found every pixel of the frame trusted (see [`flags`]) on its
    /// fast path; `false` also when it could not tell (a wide frame, a mask): then count.
    pub(crate) fn all_trusted(&self) -> bool {
        self.all_trusted
    }

    /// Re-measures the blocks whose pixels (or the pixel on either side) `mask` touches; `frame` must
    /// be the frame [`NoiseBlocks::measure`] saw.
    ///
    /// Loop bound: ≤ one pass over the frame.
    pub fn remeasure_masked(&mut self, frame: &[i32], flag: &[u8], mask: &LineMask) {
        self.refresh(frame, flag, mask, true);
    }

    /// Returns whether every block took the plain sums (then no pixel of blocks, nor the pixel on
    /// either side, is untrusted).
    fn refresh(&mut self, frame: &[i32], flag: &[u8], mask: &LineMask, only_masked: bool) -> bool {
        let n = frame.len().min(MAX_PIXELS);
        let narrow = self.narrow;
        let mut all_fast = self.n > 0 && n == frame.len();
        for (bi, blk) in self.blocks.iter_mut().enumerate().take(self.n) {
            let start = bi * BLOCK_PX;
            let end = (start + BLOCK_PX).min(n);
            if only_masked {
                let here = mask.word(bi) != 0;
                let left = bi.checked_sub(1).is_some_and(|b| mask.word(b) >> 63 != 0);
                let right = mask.word(bi + 1) & 1 != 0;
                if !(here || left || right) {
                    continue;
                }
            }
            // Unmasked blocks (and their two outside neighbours) take the plain sums when no
            // pixel there is untrusted; otherwise (or when wide) the careful pass.
            let clear = mask.word(bi) == 0
                && bi.checked_sub(1).is_none_or(|b| mask.word(b) >> 63 == 0)
                && mask.word(bi + 1) & 1 == 0;
            let fast = if narrow && clear {
                block_stats_clear(frame, flag, start, end)
            } else {
                None
            };
            *blk = if let Some(b) = fast {
                b
            } else if narrow {
                all_fast = false;
                block_stats_narrow(frame, flag, mask, start, end)
            } else {
                all_fast = false;
                block_stats(frame, flag, mask, start, end)
            };
        }
        all_fast
    }

    /// The noise model fitted to the blocks; `None` when no block is usable. `known_shot_q16` fixes κ.
    ///
    /// Loop bound: [`FIT_ROUNDS`] × 2 passes over the ≤ 64 blocks and ≤ 2 + [`FIT_ROUNDS`] selection
    /// medians of ≤ 64 block variances.
    pub fn model(&mut self, known_shot_q16: Option<u32>) -> Option<NoiseModel> {
        // The fit rejects blocks in `kept`, leaving the measurements as they are (no copy of them
        // on the stack).
        let blocks = self.blocks.get_mut(..self.n).unwrap_or(&mut []);
        for b in blocks.iter_mut() {
            b.kept = b.used;
        }
        if !blocks.iter().any(|b| b.used) {
            return None;
        }
        Some(fit(blocks, known_shot_q16))
    }
}

/// Whether two models have the same no-light level and floors and shot slopes within 1/8 of each
/// other.
pub fn within_eighth(a: &NoiseModel, b: &NoiseModel) -> bool {
    let near =
        |x: i64, y: i64| x.abs_diff(y).saturating_mul(8) <= x.unsigned_abs().max(y.unsigned_abs());
    a.zero_light_level == b.zero_light_level
        && near(a.floor_var_q8, b.floor_var_q8)
        && near(
            i64::from(a.shot_var_per_unit_q16),
            i64::from(b.shot_var_per_unit_q16),
        )
}

/// Model for frames with no usable block (all saturated or too short): the smallest floor.
pub fn fallback(known_shot_q16: Option<u32>) -> NoiseModel {
    NoiseModel {
        floor_var_q8: 0,
        zero_light_level: 0,
        shot_var_per_unit_q16: known_shot_q16.unwrap_or(0),
        shot_from_data: known_shot_q16.is_none(),
    }
}

/// One block's level (mean of its trusted pixels) and variance from the mean absolute second
/// difference: for Gaussian noise E|d2| = σ·sqrt(6)·sqrt(2/π), so σ² = (π/12)·E|d2|². One pass, no
/// sorting: the blocks that lines inflate are rejected by [`fit`] against the model of the others.
#[inline(never)]
fn block_stats(frame: &[i32], flag: &[u8], mask: &LineMask, start: usize, end: usize) -> Block {
    let trusted =
        |i: usize| !mask.is_set(i) && flag.get(i).is_some_and(|&f| !flags::is_untrusted(f));
    // The block's own mask bits in two 32-bit halves (blocks are 64-px aligned).
    let word = mask.word(start / BLOCK_PX);
    let (m_lo, m_hi) = (word as u32, (word >> 32) as u32);
    let inner = |i: usize| {
        let k = (i - start) as u32;
        let bit = if k < 32 { m_lo >> k } else { m_hi >> (k - 32) };
        bit & 1 == 0 && flag.get(i).is_some_and(|&f| !flags::is_untrusted(f))
    };
    let (mut sum, mut cnt) = (0i64, 0u32);
    let (mut sad, mut nd) = (0u64, 0u32);
    // Trust and value of the pixel before `i` (outside the block for the first one).
    let mut prev_ok = start.checked_sub(1).is_some_and(trusted);
    let mut prev = start
        .checked_sub(1)
        .and_then(|j| frame.get(j))
        .map_or(0, |&v| i64::from(v));
    let mut prev2_ok = false;
    let mut prev2 = 0i64;
    for i in start..end {
        let Some(&y) = frame.get(i) else {
            break;
        };
        let y = i64::from(y);
        let ok = inner(i);
        if ok {
            sum += y;
            cnt += 1;
        }
        // The second difference centred on the previous pixel, when it lies in the block.
        if ok && prev_ok && prev2_ok && i > start {
            sad += (prev2 - 2 * prev + y).unsigned_abs();
            nd += 1;
        }
        (prev2, prev2_ok, prev, prev_ok) = (prev, prev_ok, y, ok);
    }
    // The last pixel's difference needs the pixel after the block.
    if let (Some(&y), true, true, true) = (frame.get(end), end > start, prev_ok, prev2_ok) {
        if trusted(end) {
            sad += (prev2 - 2 * prev + i64::from(y)).unsigned_abs();
            nd += 1;
        }
    }
    if (nd as usize) < MIN_BLOCK_SAMPLES || cnt == 0 {
        return Block::default();
    }
    variance_block(sum, cnt, sad, nd)
}

/// [`block_stats`] for a frame within ±[`NARROW`]: the same block from 32-bit sums (64 values
/// below 2^29, 65 |second differences| below 2^32), the pixels walked by slice with the block's mask
/// bits shifted along — about half the careful pass's work on the M0, for the blocks a line mask
/// touches.
#[inline(never)]
fn block_stats_narrow(
    frame: &[i32],
    flag: &[u8],
    mask: &LineMask,
    start: usize,
    end: usize,
) -> Block {
    if end > frame.len() || end > flag.len() || start > end {
        // Short rows: the careful pass walks them pixel by pixel.
        return block_stats(frame, flag, mask, start, end);
    }
    let trusted =
        |i: usize| !mask.is_set(i) && flag.get(i).is_some_and(|&f| !flags::is_untrusted(f));
    let vals = frame.get(start..end).unwrap_or(&[]);
    let fl = flag.get(start..end).unwrap_or(&[]);
    // The block's own mask bits, lowest first (blocks are 64-px aligned), in two 32-bit halves (a
    // 64-bit shift per pixel is a few instructions more on the M0).
    let word = mask.word(start / BLOCK_PX);
    let (mut bits, high_bits) = (word as u32, (word >> 32) as u32);
    let (mut sum, mut cnt) = (0i32, 0u32);
    let (mut sad, mut nd) = (0u32, 0u32);
    // Trusted pixels in a row ending at the current one, counting the one before the block: a
    // second difference centred on the previous pixel needs three (the first pixel's is centred
    // outside the block and never has them).
    let mut run = u32::from(start.checked_sub(1).is_some_and(trusted));
    let mut prev = start
        .checked_sub(1)
        .and_then(|j| frame.get(j))
        .copied()
        .unwrap_or(0);
    // First difference into the previous pixel (d2 = d − d_prev whatever the trust: the values are
    // the frame's).
    let mut d_prev = 0i32;
    for (k, (&y, &f)) in vals.iter().zip(fl).enumerate() {
        if k == 32 {
            bits = high_bits;
        }
        let ok = bits & 1 == 0 && !flags::is_untrusted(f);
        bits >>= 1;
        let d = y.wrapping_sub(prev);
        if ok {
            sum = sum.wrapping_add(y);
            cnt += 1;
            run += 1;
            if run >= 3 {
                sad = sad.wrapping_add(d.wrapping_sub(d_prev).unsigned_abs());
                nd += 1;
            }
        } else {
            run = 0;
        }
        (prev, d_prev) = (y, d);
    }
    // The last pixel's difference needs the pixel after the block.
    if let (Some(&y), true, true) = (frame.get(end), end > start, run >= 2) {
        if trusted(end) {
            let d = y.wrapping_sub(prev);
            sad = sad.wrapping_add(d.wrapping_sub(d_prev).unsigned_abs());
            nd += 1;
        }
    }
    if (nd as usize) < MIN_BLOCK_SAMPLES || cnt == 0 {
        return Block::default();
    }
    variance_block(i64::from(sum), cnt, u64::from(sad), nd)
}

/// Largest |value| for [`block_stats_clear`]: 64 values sum below 2^30, 64 |second differences|
/// below 2^32.
const NARROW: i32 = 1 << 23;

/// [`block_stats`] for a block that no mask touches, in a frame within ±[`NARROW`]: `None` when a
/// pixel of `start − 1 ..= end` is untrusted (then the careful pass decides), else the same block
/// from plain 32-bit sums — one pass of loads, adds and one absolute value per pixel.
fn block_stats_clear(frame: &[i32], flag: &[u8], start: usize, end: usize) -> Option<Block> {
    let lo = start.saturating_sub(1);
    let hi = (end + 1).min(frame.len());
    let vals = frame.get(lo..hi)?;
    let fl = flag.get(lo..hi)?;
    // Flags four at a time: one OR of the whole word per four pixels.
    let mut chunks = fl.chunks_exact(4);
    let mut bad = 0u32;
    for c in &mut chunks {
        if let [a, b, c, d] = *c {
            bad |= u32::from_le_bytes([a, b, c, d]);
        }
    }
    for &f in chunks.remainder() {
        bad |= u32::from(f);
    }
    let bad = (bad | bad >> 16) as u16;
    if flags::is_untrusted((bad | bad >> 8) as u8) {
        return None;
    }
    let (&first, &last) = (vals.first()?, vals.last()?);
    // First differences carried along: d2 = (y − p1) − (p1 − p2), one subtraction a pixel less.
    let (mut sum, mut sad) = (first, 0u32);
    let (mut p1, mut d1) = (first, 0i32);
    let mut rest = vals.get(1..).unwrap_or(&[]).iter();
    if let Some(&y) = rest.next() {
        sum = sum.wrapping_add(y);
        d1 = y.wrapping_sub(p1);
        p1 = y;
    }
    for &y in rest {
        sum = sum.wrapping_add(y);
        let d = y.wrapping_sub(p1);
        sad = sad.wrapping_add(d.wrapping_sub(d1).unsigned_abs());
        (p1, d1) = (y, d);
    }
    // The outside pixels took part in the differences only.
    if lo < start {
        sum = sum.wrapping_sub(first);
    }
    if hi > end {
        sum = sum.wrapping_sub(last);
    }
    let cnt = u32::try_from(end - start).ok()?;
    let nd = u32::try_from(vals.len().saturating_sub(2)).ok()?;
    if (nd as usize) < MIN_BLOCK_SAMPLES || cnt == 0 {
        return Some(Block::default());
    }
    Some(variance_block(i64::from(sum), cnt, u64::from(sad), nd))
}

/// Second differences of a full block away from the frame's ends (one per pixel).
const FULL_ND: u32 = BLOCK_PX as u32;
/// Their reciprocal, made once.
const FULL_ND_RECIP: Recip = match Recip::new_const(FULL_ND as i64) {
    Some(r) => r,
    None => Recip::ONE,
};

/// A block from its sums: level = floor mean, var_q8 = (π/12)·(sad/nd)²·256.
fn variance_block(sum: i64, cnt: u32, sad: u64, nd: u32) -> Block {
    // A full block (64 trusted pixels) takes a shift, the floor as `div_euclid` gives it, instead of
    // a ~730-instruction 64-bit division on the M0.
    let level = if cnt.is_power_of_two() {
        sum >> cnt.trailing_zeros()
    } else {
        sum.div_euclid(i64::from(cnt.max(1)))
    };
    // mean |d2| in Q4 through a reciprocal (no 64-bit division), then var_q8 = m_q4² · π/12:
    // m_q4 < 2^40 for any frame; the narrow blocks' < 2^30 keep both products inside 64 bits.
    // A full block's count of second differences is always the same: its reciprocal is made once.
    let recip = if nd == FULL_ND {
        Some(FULL_ND_RECIP)
    } else {
        Recip::new(i64::from(nd.max(1)))
    };
    let m_q4 = recip
        .and_then(|r| r.scale(i64::try_from(sad).ok()?, 4))
        .unwrap_or(i64::MAX)
        .max(0);
    let var_q8 = if m_q4 < 1 << 30 {
        (m_q4 * ((m_q4 * PI_OVER_12_Q16 as i64) >> 16)).min(1 << 50)
    } else {
        let v = u128::try_from(m_q4).unwrap_or(0);
        ((v * v * PI_OVER_12_Q16) >> 16).min(1 << 50) as i64
    };
    Block {
        // Capped at 2^50 (σ ≈ 2^21 frame units) so the regression sums stay inside i128.
        var_q8,
        level,
        used: true,
        kept: true,
    }
}

/// Upper median; reorders `v` ([`select_kth`](crate::sort::select_kth): core's select keeps a panic path).
#[inline(never)]
fn median(v: &mut [i64]) -> i64 {
    crate::sort::select_kth(v, v.len() / 2).unwrap_or(0)
}

#[inline(never)]
fn fit(blocks: &mut [Block], known: Option<u32>) -> NoiseModel {
    // Lines only raise a block's level, so the lowest level is the no-light level (clamped ≤ 2^40 so the
    // products below stay inside i128).
    let zero = blocks
        .iter()
        .filter(|b| b.kept)
        .map(|b| b.level)
        .min()
        .unwrap_or(0)
        .clamp(-(1 << 40), 1 << 40);
    if let Some(k) = known {
        return fit_known_shot(blocks, k, zero);
    }
    let mut model = NoiseModel {
        floor_var_q8: median_var(blocks),
        zero_light_level: zero,
        shot_var_per_unit_q16: 0,
        shot_from_data: true,
    };
    for _ in 0..FIT_ROUNDS {
        reject_inflated(blocks, &model);
        // Weighted least squares of var on level; weight ∝ 1 / pred² (the spread of a variance estimate
        // grows with the variance). Weights are normalised to the median so the sums stay small.
        let vref = i128::from(model.floor_var_q8.max(1));
        let (mut sw, mut sx, mut sy, mut sxx, mut sxy) = (0i128, 0i128, 0i128, 0i128, 0i128);
        let (mut lmin, mut lmax) = (i64::MAX, i64::MIN);
        for b in blocks.iter().filter(|b| b.kept) {
            let pred = i128::from(model.var_q8(b.level)).max(1);
            // w in Q16, ≤ 2^16 · (vref/pred)², capped.
            let w = checked_mul_i128((vref << 16) / pred, vref)
                .unwrap_or(i128::MAX)
                .checked_div(pred)
                .unwrap_or(1)
                .clamp(1, 1 << 24);
            let x = i128::from(b.level);
            let y = i128::from(b.var_q8);
            sw += w;
            let wx = mul_i128(w, x);
            sx += wx;
            sy += mul_i128(w, y);
            sxx += mul_i128(wx, x);
            sxy += mul_i128(wx, y);
            lmin = lmin.min(b.level);
            lmax = lmax.max(b.level);
        }
        if sw == 0 {
            break;
        }
        // Extreme frames (values near the i32 limits) could overflow the products: then κ stays 0.
        let det = checked_mul_i128(sw, sxx)
            .and_then(|a| checked_mul_i128(sx, sx).and_then(|b| a.checked_sub(b)))
            .unwrap_or(0);
        let num = checked_mul_i128(sw, sxy)
            .and_then(|a| checked_mul_i128(sx, sy).and_then(|b| a.checked_sub(b)))
            .and_then(|v| checked_mul_i128(v, 256));
        // Shot noise is only separable from the floor when the continuum spans a useful range of levels.
        let mean_level = div_round_i128(sx, sw).max(0);
        let span = i128::from(lmax.saturating_sub(lmin));
        let separable = det > 0 && span.saturating_mul(4) > mean_level && span > 0;
        if let (true, Some(num)) = (separable, num) {
            // κ in var_q8 per level unit → Q16 of var per unit: × 2^8.
            let k_q16 = div_round_i128(num, det).clamp(0, i128::from(u32::MAX));
            // The line's value at level 0, moved to the no-light level (it is negative for a frame
            // that still carries its bias).
            let ksx =
                checked_mul_i128(k_q16, sx).unwrap_or(if sx < 0 { i128::MIN } else { i128::MAX });
            let floor = div_round_i128(sy.saturating_sub(ksx >> 8), sw)
                .saturating_add(mul_i128(i128::from(zero), k_q16) >> 8);
            if floor >= 0 {
                model.shot_var_per_unit_q16 = k_q16 as u32;
                model.floor_var_q8 = floor.clamp(0, i128::from(i64::MAX)) as i64;
                model.zero_light_level = zero;
                continue;
            }
            // Negative even there: all noise is shot noise, through the origin.
            if let (true, Some(n0)) = (sxx > 0, checked_mul_i128(sxy, 256)) {
                let k = div_round_i128(n0, sxx).clamp(0, i128::from(u32::MAX));
                model.shot_var_per_unit_q16 = k as u32;
                model.floor_var_q8 = 0;
                model.zero_light_level = 0;
                continue;
            }
        }
        model.shot_var_per_unit_q16 = 0;
        model.floor_var_q8 = div_round_i128(sy, sw).clamp(0, i128::from(i64::MAX)) as i64;
    }
    model
}

fn median_var(blocks: &[Block]) -> i64 {
    let mut v = [0i64; MAX_BLOCKS];
    let mut n = 0usize;
    for b in blocks.iter().filter(|b| b.kept) {
        if let Some(s) = v.get_mut(n) {
            *s = b.var_q8;
            n += 1;
        }
    }
    median(v.get_mut(..n).unwrap_or(&mut []))
}

/// Drops from the fit (`kept`) the blocks whose variance exceeds the model's by
/// [`REJECT_ABOVE_Q8`]; returns whether any went.
fn reject_inflated(blocks: &mut [Block], model: &NoiseModel) -> bool {
    let mut rejected = false;
    for b in blocks.iter_mut().filter(|b| b.kept) {
        // var ≤ 2^50 keeps the left side in i64; a prediction too large to scale rejects nothing.
        let pred = model.var_q8(b.level);
        // pred · 461 from two 16 × 16-bit products where pred fits 32 bits (a 64-bit product with
        // its overflow check is a library call on the M0).
        let limit = match u32::try_from(pred) {
            Ok(p) => Some(
                (u64::from((p >> 16) * REJECT_ABOVE_Q8 as u32) << 16)
                    + u64::from((p & 0xffff) * REJECT_ABOVE_Q8 as u32),
            ),
            Err(_) => pred
                .checked_mul(REJECT_ABOVE_Q8 as i64)
                .map(|l| l.unsigned_abs()),
        };
        if let Some(limit) = limit {
            if b.var_q8.unsigned_abs() * 256 > limit {
                b.kept = false;
                rejected = true;
            }
        }
    }
    rejected
}

/// The model with κ given: the floor is the median, over the blocks kept, of the variance left after
/// each block's shot noise above `zero`; after each rejection round that drops a block it is taken
/// again over the rest (≤ [`FIT_ROUNDS`] rounds). The leftover variances are sorted once, with each
/// block's index in the low 6 bits (values ≤ 2^50), so every median after the first is a walk over
/// that order, not a new selection.
///
/// With κ fixed only the floor moves between rounds, so [`reject_inflated`]'s test
/// `256·var > 461·max(floor + shot, 1)` is taken apart once per block: `256·var − 461·shot` is
/// compared with `461·floor` (with `461·max(floor, 1)` for a block with no shot noise), one 64-bit
/// comparison a block and round instead of a variance and a product. Loop bound: one insertion sort of ≤ 64 entries, ≤ FIT_ROUNDS + 1 walks and
/// rejection passes over ≤ 64 blocks.
fn fit_known_shot(blocks: &mut [Block], k_q16: u32, zero: i64) -> NoiseModel {
    let mut order = [0u64; MAX_BLOCKS];
    // Per block: 256·var − 461·shot (< 0: never rejected, floors are ≥ 0), and whether it has no
    // shot noise (its prediction is then at least 1 at a zero floor).
    let mut excess = [(0i64, false); MAX_BLOCKS];
    let mut n = 0usize;
    for ((i, b), e) in blocks.iter().enumerate().zip(excess.iter_mut()) {
        if !b.kept {
            continue;
        }
        let var = b.var_q8.clamp(0, 1 << 50);
        let shot = shot_above(b.level, k_q16, zero);
        if let Some(slot) = order.get_mut(n) {
            *slot = ((var.saturating_sub(shot).max(0) as u64) << 6) | (i as u64 & 63);
            n += 1;
        }
        // 461 · 2^50 exceeds 256 · var: a larger shot never rejects (and the product fits).
        let over = if shot < 1 << 50 {
            (var << 8) - times_reject(shot)
        } else {
            -1
        };
        *e = (over, shot == 0);
    }
    let order = order.get_mut(..n).unwrap_or(&mut []);
    crate::sort::sort_by_key(order, |&x| x);
    // The upper median of the kept blocks' leftovers (as a selection of them would give).
    let median = |blocks: &[Block], kept: usize| -> i64 {
        let mut left = kept / 2;
        for &x in order.iter() {
            if blocks.get((x & 63) as usize).is_some_and(|b| b.kept) {
                if left == 0 {
                    return (x >> 6) as i64;
                }
                left -= 1;
            }
        }
        0
    };
    let mut kept = n;
    let mut floor = median(blocks, kept);
    for _ in 0..FIT_ROUNDS {
        // floor ≤ 2^50: both limits fit; they differ only at a zero floor.
        let limit = times_reject(floor);
        let limit_shotless = times_reject(floor.max(1));
        let before = kept;
        for (b, &(over, shotless)) in blocks.iter_mut().zip(excess.iter()) {
            let lim = if shotless { limit_shotless } else { limit };
            if b.kept && over > lim {
                b.kept = false;
                kept = kept.saturating_sub(1);
            }
        }
        // No block rejected, no change.
        if kept == before {
            break;
        }
        floor = median(blocks, kept);
    }
    NoiseModel {
        floor_var_q8: floor,
        zero_light_level: zero,
        shot_var_per_unit_q16: k_q16,
        shot_from_data: false,
    }
}

/// `x · 461` ([`REJECT_ABOVE_Q8`]) for 0 ≤ x < 2^50 from 32-bit products (a 64-bit one is a
/// library call on the M0); outside that range the low 64 bits of the product, not used.
fn times_reject(x: i64) -> i64 {
    let (h, l) = ((x >> 32) as u32, x as u32);
    let r = REJECT_ABOVE_Q8 as u32;
    ((u64::from(h.wrapping_mul(r)) << 32).wrapping_add(super::math::mul_u32_wide(l, r))) as i64
}

/// Shot variance (Q8) of a block at `level` above `zero`: `⌊light·κ / 256⌋`, clamped to i64 (the
/// term [`NoiseModel::var_q8`] adds to the floor).
fn shot_above(level: i64, k_q16: u32, zero: i64) -> i64 {
    let light = level.saturating_sub(zero).max(0);
    // One 32 × 32-bit product for the levels of ADC frames; i128 beyond.
    match u32::try_from(light) {
        Ok(l) => (super::math::mul_u32_wide(l, k_q16) >> 8) as i64,
        Err(_) => ((i128::from(light) * i128::from(k_q16)) >> 8).min(i128::from(i64::MAX)) as i64,
    }
}

#[cfg(test)]
mod tests {
    use super::super::testkit::Rng;
    use super::*;

    /// The plain sums of clear blocks are the careful pass's.
    #[test]
    fn variance_split_products_are_the_wide_product() {
        let mut x = 0x6a09_e667u32;
        for _ in 0..20_000 {
            crate::test_rng::step32(&mut x);
            let k = if x & 1 == 0 { x } else { x >> (x % 32) };
            let level = if x & 2 == 0 {
                i64::from(x.rotate_left(7) >> (x % 24)) - 1000
            } else {
                // The three-product range: levels below 2^24 (and at its edges).
                i64::from(x.rotate_left(11) >> (8 + x % 9))
                    + [0, 1 << 16, (1 << 24) - 1][(x % 3) as usize]
            };
            let zero = match x % 5 {
                0 => 0,
                1 => i64::from(x >> 12),
                2 => -i64::from(x >> 9),
                3 => [i64::MIN, i64::MAX, 1 << 62, -(1 << 62)][(x >> 3) as usize % 4],
                _ => level - i64::from(x % 7),
            };
            let floor = match x % 3 {
                0 => i64::from(x % 5000),
                1 => (1 << 62) - i64::from(x % 3),
                _ => i64::MAX - i64::from(x % 2) - [0, 1 << 40][(x >> 5) as usize % 2],
            };
            let m = NoiseModel {
                floor_var_q8: floor,
                zero_light_level: zero,
                shot_var_per_unit_q16: k,
                shot_from_data: false,
            };
            let light = (i128::from(level) - i128::from(zero)).max(0);
            let shot = (light * i128::from(k)) >> 8;
            let want = (i128::from(floor) + shot).clamp(1, i128::from(i64::MAX)) as i64;
            assert_eq!(
                m.var_q8(level),
                want,
                "level {level} zero {zero} κ {k} floor {floor}"
            );
        }
    }

    #[test]
    fn narrow_masked_blocks_equal_the_careful_ones() {
        let mut rng = Rng::new(61);
        for n in [16usize, 64, 65, 130, 300, 1000] {
            for big in [false, true] {
                // Values up to ±2^23 (the narrow path's limit) or ordinary ADC levels.
                let frame: Vec<i32> = (0..n as i64)
                    .map(|i| {
                        let v = if big {
                            rng.gauss(3 << 38)
                        } else {
                            900 + 5 * i + rng.gauss(30 << 16)
                        };
                        v.clamp(-(1 << 23), 1 << 23) as i32
                    })
                    .collect();
                let fl: Vec<u8> = (0..n)
                    .map(|_| {
                        if rng.u16() % 9 == 0 {
                            flags::SATURATED
                        } else {
                            0
                        }
                    })
                    .collect();
                let mut mask = LineMask::new();
                for c in (7..n).step_by(41) {
                    mask.mark(c, (c % 5) + 1);
                }
                for m in [&LineMask::new(), &mask] {
                    for start in (0..n).step_by(BLOCK_PX) {
                        let end = (start + BLOCK_PX).min(n);
                        let a = block_stats(&frame, &fl, m, start, end);
                        let b = block_stats_narrow(&frame, &fl, m, start, end);
                        assert_eq!(
                            (a.var_q8, a.level, a.used),
                            (b.var_q8, b.level, b.used),
                            "n {n} {start}"
                        );
                    }
                }
            }
        }
    }

    #[test]
    fn clear_blocks_equal_the_careful_ones() {
        let mut rng = Rng::new(6);
        for n in [16usize, 64, 65, 130, 300] {
            let frame: Vec<i32> = (0..n as i64)
                .map(|i| (900 + 5 * i + rng.gauss(30 << 16)) as i32)
                .collect();
            let fl = vec![0u8; n];
            for start in (0..n).step_by(BLOCK_PX) {
                let end = (start + BLOCK_PX).min(n);
                let a = block_stats(&frame, &fl, &LineMask::new(), start, end);
                let b = block_stats_clear(&frame, &fl, start, end).unwrap();
                assert_eq!(
                    (a.var_q8, a.level, a.used),
                    (b.var_q8, b.level, b.used),
                    "n {n} {start}"
                );
            }
            let mut bad = fl.clone();
            bad[n / 2] = flags::SATURATED;
            let start = (n / 2) / BLOCK_PX * BLOCK_PX;
            assert!(block_stats_clear(&frame, &bad, start, (start + BLOCK_PX).min(n)).is_none());
        }
    }

    /// The one-read pass of a clean frame gives the careful blocks and the baseline's block levels.
    #[test]
    fn clean_pass_equals_the_block_passes() {
        let mut rng = Rng::new(63);
        for n in [
            2usize, 16, 17, 63, 64, 65, 76, 128, 130, 300, 1000, 2048, 4096,
        ] {
            for amp in [30i64 << 16, 3 << 38, (1 << 23) << 16] {
                let frame: Vec<i32> = (0..n as i64)
                    .map(|i| {
                        (900 + 5 * i + rng.gauss(amp)).clamp(-(1 << 23) + 1, (1 << 23) - 1) as i32
                    })
                    .collect();
                let fl = vec![0u8; n];
                let mut want = NoiseBlocks::new();
                want.measure_known(&frame, &fl, &LineMask::new(), true);
                let mut got = NoiseBlocks::new();
                let mut levels = vec![0i32; n / 16];
                let span = got.measure_clean(&frame, &fl, &mut levels);
                assert_eq!(
                    span,
                    Some(super::super::math::magnitude_span(&frame)),
                    "n {n}"
                );
                assert_eq!((got.n, got.all_trusted), (want.n, want.all_trusted));
                for (a, b) in got.blocks.iter().zip(&want.blocks).take(want.n) {
                    assert_eq!(
                        (a.var_q8, a.level, a.used),
                        (b.var_q8, b.level, b.used),
                        "n {n}"
                    );
                }
                // The levels the baseline's block pass would take.
                for (k, &l) in levels.iter().enumerate() {
                    let q: Vec<i64> = (0..4)
                        .map(|j| {
                            frame[16 * k + 4 * j..16 * k + 4 * j + 4]
                                .iter()
                                .map(|&v| i64::from(v))
                                .sum()
                        })
                        .collect();
                    let (lo, hi) = (*q.iter().min().unwrap(), *q.iter().max().unwrap());
                    assert_eq!(
                        i64::from(l),
                        (q.iter().sum::<i64>() - lo - hi) >> 3,
                        "n {n} block {k}"
                    );
                }
            }
            // An untrusted pixel or a value beyond ±2^23: no pass (the careful ones decide).
            let frame: Vec<i32> = (0..n as i32).collect();
            let mut fl = vec![0u8; n];
            fl[n / 2] = flags::REPAIRED;
            let mut levels = vec![0i32; n / 16];
            assert_eq!(
                NoiseBlocks::new().measure_clean(&frame, &fl, &mut levels),
                None
            );
            let mut wide = frame.clone();
            wide[n - 1] = 1 << 23;
            assert_eq!(
                NoiseBlocks::new().measure_clean(&wide, &vec![0u8; n], &mut levels),
                None
            );
        }
    }

    /// The split product rejects exactly the blocks of the plain 128-bit comparison.
    #[test]
    fn rejection_is_the_plain_comparison() {
        let mut x = 0x2468_ace1u32;
        let mut next = || {
            crate::test_rng::step32(&mut x);
            x
        };
        for _ in 0..20_000 {
            let r = next();
            let m = NoiseModel {
                floor_var_q8: i64::from(next() >> (r % 32)) << (r % 20),
                zero_light_level: 0,
                shot_var_per_unit_q16: next() >> (r % 31),
                shot_from_data: false,
            };
            let level = i64::from(next() >> (r % 29));
            let var_q8 = (i64::from(next()) << (r % 19)).min(1 << 50);
            let mut b = [Block {
                var_q8,
                level,
                used: true,
                kept: true,
            }];
            let want = i128::from(var_q8) * 256 > i128::from(m.var_q8(level)) * REJECT_ABOVE_Q8;
            assert_eq!(reject_inflated(&mut b, &m), want, "{m:?} {level} {var_q8}");
            assert_eq!(b[0].kept, !want);
        }
    }

    /// The sorted-once medians give the model of a fresh selection every round.
    #[test]
    fn known_shot_fit_equals_selection_per_round() {
        let mut rng = Rng::new(62);
        for case in 0..400 {
            let nb = 1 + case % MAX_BLOCKS;
            // Ordinary ADC blocks, and (every fourth case) the extremes: κ up to 2^32 − 1, levels
            // past 2^32, variances of 0 and 2^50, shots beyond 2^50.
            let wild = case % 4 == 3;
            let k = if wild {
                (rng.next_u64() >> 32) as u32
            } else {
                (rng.u16() as u32) << (case % 9)
            };
            let mut blocks: Vec<Block> = (0..nb)
                .map(|j| {
                    let level = if wild {
                        (rng.u16() << (rng.u16() % 40)) - 3000
                    } else {
                        500 + 40 * j as i64 + rng.gauss(300 << 16).abs()
                    };
                    let spike = if rng.u16() % 5 == 0 { 20 } else { 1 };
                    let var = if wild {
                        let r = rng.u16();
                        [0, 1, 1 << 50, r << 30, r << 10, r][(rng.u16() % 6) as usize]
                    } else {
                        (3000 + ((level * i64::from(k)) >> 8)) * spike + rng.gauss(500 << 16)
                    };
                    Block {
                        var_q8: var.clamp(0, 1 << 50),
                        level,
                        used: rng.u16() % 11 != 0,
                        kept: false,
                    }
                })
                .collect();
            for b in blocks.iter_mut() {
                b.kept = b.used;
            }
            let mut plain = blocks.clone();
            let zero = blocks
                .iter()
                .filter(|b| b.kept)
                .map(|b| b.level)
                .min()
                .unwrap_or(0);
            // The selection per round, written out.
            let floor = |bl: &[Block]| {
                let mut v: Vec<i64> = bl
                    .iter()
                    .filter(|b| b.kept)
                    .map(|b| {
                        let shot = ((i128::from((b.level - zero).max(0)) * i128::from(k)) >> 8)
                            .min(i128::from(i64::MAX)) as i64;
                        b.var_q8.saturating_sub(shot).max(0)
                    })
                    .collect();
                v.sort();
                v.get(v.len() / 2).copied().unwrap_or(0)
            };
            let mut want = NoiseModel {
                floor_var_q8: floor(&plain),
                zero_light_level: zero,
                shot_var_per_unit_q16: k,
                shot_from_data: false,
            };
            for _ in 0..FIT_ROUNDS {
                if !reject_inflated(&mut plain, &want) {
                    break;
                }
                want.floor_var_q8 = floor(&plain);
            }
            let got = fit_known_shot(&mut blocks, k, zero);
            assert_eq!(got, want, "case {case}");
            assert!(blocks.iter().zip(&plain).all(|(a, b)| a.kept == b.kept));
        }
    }

    #[test]
    fn times_reject_is_the_product() {
        let mut x = 0x1357_9bdfu32;
        for _ in 0..10_000 {
            crate::test_rng::step32(&mut x);
            let v = (i64::from(x) << (x % 19)) & ((1 << 50) - 1);
            assert_eq!(times_reject(v), v * REJECT_ABOVE_Q8 as i64, "{v}");
        }
        assert_eq!(times_reject((1 << 50) - 1), ((1 << 50) - 1) * 461);
    }

    /// A block exactly at the rejection limit stays, one unit above it goes (with and without shot).
    #[test]
    fn known_shot_rejection_at_the_limit() {
        for (k, m) in [(0u32, 1i64), (0, 1000), (3 << 16, 7), (1 << 20, 12_345)] {
            let zero = 100;
            // Five blocks at the floor 256·m (and no light), then one exactly at 461/256 of its
            // prediction and one just past it, both at a level with shot noise s when κ > 0.
            let level = zero + 4000;
            let s = (4000 * i64::from(k)) >> 8;
            let mut blocks: Vec<Block> = (0..5)
                .map(|_| Block {
                    var_q8: 256 * m,
                    level: zero,
                    used: true,
                    kept: true,
                })
                .collect();
            for extra in [0, 1] {
                blocks.push(Block {
                    // 256 · var = 461 · (256 m + s) + 256 · extra.
                    var_q8: 461 * m + (461 * s) / 256 + extra,
                    level,
                    used: true,
                    kept: true,
                });
            }
            let want_at = 256 * (461 * m + (461 * s) / 256) <= 461 * (256 * m + s);
            let got = fit_known_shot(&mut blocks, k, zero);
            assert_eq!(got.floor_var_q8, 256 * m, "κ {k} m {m}");
            assert_eq!(blocks[5].kept, want_at, "κ {k} m {m}");
            assert!(!blocks[6].kept, "κ {k} m {m}");
        }
        // A zero floor with no shot: the prediction is 1, so a variance of 1 stays and 2 goes.
        let mut blocks: Vec<Block> = [0, 0, 0, 1, 2]
            .iter()
            .map(|&v| Block {
                var_q8: v,
                level: 0,
                used: true,
                kept: true,
            })
            .collect();
        let got = fit_known_shot(&mut blocks, 0, 0);
        assert_eq!(got.floor_var_q8, 0);
        let kept: Vec<bool> = blocks.iter().map(|b| b.kept).collect();
        assert_eq!(kept, [true, true, true, true, false]);
    }

    #[test]
    fn recovers_white_noise_sigma() {
        let mut rng = Rng::new(7);
        // σ = 40 frame units on a flat level.
        let frame: Vec<i32> = (0..2048)
            .map(|_| 1000 + rng.gauss(40 << 16) as i32)
            .collect();
        let fl = vec![0u8; frame.len()];
        let m = estimate(&frame, &fl, &LineMask::new(), None).unwrap();
        let s = m.sigma(1000);
        assert!((38..=42).contains(&s), "sigma {s}");
    }

    #[test]
    fn ignores_a_smooth_continuum() {
        let mut rng = Rng::new(8);
        // A steep parabola changes the second difference by a constant 2·c only.
        let frame: Vec<i32> = (0..2048i64)
            .map(|i| (((i - 1024) * (i - 1024)) / 64 + rng.gauss(20 << 16)) as i32)
            .collect();
        let fl = vec![0u8; frame.len()];
        let m = estimate(&frame, &fl, &LineMask::new(), Some(0)).unwrap();
        let s = m.sigma(0);
        assert!((19..=21).contains(&s), "sigma {s}");
    }

    #[test]
    fn separates_shot_from_read_noise() {
        let mut rng = Rng::new(9);
        // Continuum ramps 0..40000 units; var = 100² + 4·level (κ = 4.0).
        let frame: Vec<i32> = (0..2048i64)
            .map(|i| {
                let level = i * 20;
                let sd = isqrt_i64(10_000 + 4 * level);
                (level + rng.gauss(sd << 16)) as i32
            })
            .collect();
        let fl = vec![0u8; frame.len()];
        let m = estimate(&frame, &fl, &LineMask::new(), None).unwrap();
        let k = m.shot_var_per_unit_q16;
        assert!((3 << 16..5 << 16).contains(&k), "kappa {k}");
        // The lowest block (pixels 0–63, level ≈ 640) is the no-light level: σ there is
        // sqrt(100² + 4·640) ≈ 112; mid-ramp sqrt(100² + 4·20 000) = 300.
        assert!((600..700).contains(&m.zero_light_level), "{m:?}");
        let s = m.sigma(640);
        assert!((95..=130).contains(&s), "floor sigma {s}");
        assert_eq!(m.sigma(0), s, "no shot noise below the no-light level");
        let s = m.sigma(20_000);
        assert!((285..=315).contains(&s), "mid sigma {s}");
    }

    #[test]
    fn bias_is_not_shot_noise() {
        // A frame that still carries a 1600-unit bias: var = 30² + 2·(level − 1600) (κ = 2.0), the
        // continuum ramping from the bias up by 6000 units. Counting the bias as light would give
        // σ = sqrt(900 + 3200) = 64 at the bias level instead of 30.
        let mut rng = Rng::new(19);
        let frame: Vec<i32> = (0..2048i64)
            .map(|i| {
                let level = 1600 + i * 3;
                let sd = isqrt_i64(900 + 2 * (level - 1600));
                (level + rng.gauss(sd << 16)) as i32
            })
            .collect();
        let fl = vec![0u8; frame.len()];
        for known in [Some(2 << 16), None] {
            let m = estimate(&frame, &fl, &LineMask::new(), known).unwrap();
            let low = m.sigma(1700);
            // 33 true; the mean-absolute-difference blocks scatter a little more than mean squares.
            assert!(
                (28..=38).contains(&low),
                "{known:?}: σ at the bias {low}, {m:?}"
            );
            // 108 true; the slope fitted from the data is looser than a configured one.
            let high = m.sigma(7000);
            let ok = if known.is_some() { 104..=112 } else { 92..=124 };
            assert!(ok.contains(&high), "{known:?}: σ high {high}, {m:?}");
        }
    }

    #[test]
    fn all_zero_and_untrusted_frames_give_tiny_floor() {
        let frame = [0i32; 256];
        let fl = [0u8; 256];
        let m = estimate(&frame, &fl, &LineMask::new(), None).unwrap();
        assert_eq!(m.sigma(0), 0);
        assert!(m.var_q8(0) >= 1);
        let fl = [flags::SATURATED; 256];
        assert_eq!(estimate(&frame, &fl, &LineMask::new(), None), None);
        let mut all = LineMask::new();
        all.mark(128, 128);
        assert_eq!(estimate(&frame, &[0u8; 256], &all, None), None);
    }
}
