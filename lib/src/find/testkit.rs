//! Test-only helpers: a seeded xorshift generator and pixel-integrated synthetic lines, all integer.

use super::math::exp_neg_q16;

/// xorshift64* with a fixed seed, so every test run sees the same frames.
pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Self {
        Self(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1)
    }

    pub fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x >> 12;
        x ^= x << 25;
        x ^= x >> 27;
        self.0 = x;
        x.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }

    /// Uniform in [0, 2^16).
    pub fn u16(&mut self) -> i64 {
        (self.next_u64() >> 48) as i64
    }

    /// Normal sample with standard deviation `sd_q16` (Q16), rounded to an integer. Irwin–Hall sum of
    /// 12 uniforms: variance 1, tails cut at ±6 σ.
    pub fn gauss(&mut self, sd_q16: i64) -> i64 {
        let z_q16: i64 = (0..12).map(|_| self.u16()).sum::<i64>() - 6 * 65536;
        let v = z_q16 as i128 * sd_q16 as i128;
        ((v + (1 << 31)) >> 32) as i64
    }
}

/// Integral over pixel `i` (i−0.5 … i+0.5) of a Gaussian of peak height `height` (same units as the
/// result), centre `center_q16` and σ `sigma_q16` (px, Q16); 32-point midpoint rule.
pub fn pixel_gauss(i: i64, height: i64, center_q16: i64, sigma_q16: i64) -> i64 {
    let mut acc: i64 = 0;
    for k in 0..32i64 {
        let x_q16 = (i << 16) - (1 << 15) + (k << 11) + (1 << 10);
        let u_q16 = ((x_q16 - center_q16) << 16) / sigma_q16;
        let g = exp_neg_q16((u_q16 * u_q16) >> 17);
        acc += g >> 5;
    }
    ((height as i128 * acc as i128 + (1 << 29)) >> 30) as i64
}
