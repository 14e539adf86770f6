//! A one-bit-per-pixel mark of where lines are, so the noise estimate can look past them.

use crate::condition::MAX_PIXELS;

const WORDS: usize = MAX_PIXELS.div_ceil(64);

/// Pixels set here are left out of the noise estimate. 512 bytes for the largest frame.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LineMask {
    bits: [u64; WORDS],
}

impl Default for LineMask {
    fn default() -> Self {
        Self::new()
    }
}

impl LineMask {
    /// Nothing masked.
    pub const fn new() -> Self {
        Self { bits: [0; WORDS] }
    }

    /// Nothing masked again.
    pub fn clear(&mut self) {
        self.bits = [0; WORDS];
    }

    /// Masks pixels `center − half ..= center + half` (clipped to the frame size limit).
    /// Whole words at a time: a bit at a time is a 64-bit shift call per pixel on the Cortex-M0.
    /// Loop bound: (2 × `half` + 1) / 64 + 2 words.
    pub fn mark(&mut self, center: usize, half: usize) {
        let lo = center.saturating_sub(half);
        let hi = center.saturating_add(half).min(MAX_PIXELS - 1);
        if lo > hi {
            return;
        }
        let (wlo, whi) = (lo / 64, hi / 64);
        for w in wlo..=whi {
            // Bits from `lo` (in the first word) to `hi` (in the last) of word w.
            let from = if w == wlo { lo % 64 } else { 0 };
            let to = if w == whi { hi % 64 } else { 63 };
            let bits = (u64::MAX >> (63 - to)) & (u64::MAX << from);
            if let Some(word) = self.bits.get_mut(w) {
                *word |= bits;
            }
        }
    }

    /// The mask bits of pixels `64·w … 64·w + 63` (bit k = pixel 64·w + k); 0 past the limit.
    pub fn word(&self, w: usize) -> u64 {
        self.bits.get(w).copied().unwrap_or(0)
    }

    /// Whether pixel `i` is masked; pixels past the limit are not.
    pub fn is_set(&self, i: usize) -> bool {
        self.bits
            .get(i / 64)
            .is_some_and(|w| w & (1 << (i % 64)) != 0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn marks_ranges_and_clips() {
        let mut m = LineMask::new();
        m.mark(10, 2);
        assert!(!m.is_set(7));
        assert!((8..=12).all(|i| m.is_set(i)));
        assert!(!m.is_set(13));
        m.mark(1, 5);
        assert!(m.is_set(0));
        m.mark(MAX_PIXELS - 1, 3);
        assert!(m.is_set(MAX_PIXELS - 1));
        assert!(!m.is_set(MAX_PIXELS + 5));
    }

    /// Word-at-a-time marking sets exactly the bits of the pixel-by-pixel loop.
    #[test]
    fn marks_the_same_bits_as_pixel_by_pixel() {
        let mut next = crate::test_rng::xorshift(0x51af_d7ed_558c_cd95u64);
        for _ in 0..3000 {
            let (mut fast, mut slow) = (LineMask::new(), LineMask::new());
            for _ in 0..(next() % 4) {
                let center = (next() % (MAX_PIXELS as u64 + 100)) as usize;
                let half = (next() % [3, 70, 200][(next() % 3) as usize]) as usize;
                fast.mark(center, half);
                let lo = center.saturating_sub(half);
                let hi = center.saturating_add(half).min(MAX_PIXELS - 1);
                for i in lo..=hi {
                    if let Some(w) = slow.bits.get_mut(i / 64) {
                        *w |= 1 << (i % 64);
                    }
                }
            }
            assert_eq!(fast, slow);
        }
    }
}
