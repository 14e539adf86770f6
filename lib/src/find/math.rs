//! Integer helpers for peak finding: a Gaussian in fixed point, square roots, rounding division.
//!
//! Everything is exact integer arithmetic so that host and Cortex-M results are bit-identical.

/// 1.0 in Q30, the scale of [`exp_neg_q16`] results.
pub const ONE_Q30: i64 = 1 << 30;
/// ln 2 in Q30.
const LN2_Q30: i64 = 744_261_118;
/// log2(e) in Q30.
const LOG2E_Q30: i64 = 1_549_082_005;
/// FWHM / σ of a Gaussian, 2·sqrt(2·ln 2), in Q16.
pub const FWHM_PER_SIGMA_Q16: i64 = 154_325;
/// sqrt(2π) in Q16 (area of a unit-height Gaussian per unit σ).
pub const SQRT_2PI_Q16: i64 = 164_274;

/// 2^(−k/16) in Q30 for k = 0 … 15 (Python `decimal`, 50 digits, rounded to nearest).
const EXP2_SIXTEENTHS_Q30: [i64; 16] = [
    1_073_741_824,
    1_028_218_693,
    984_625_594,
    942_880_699,
    902_905_651,
    864_625_413,
    827_968_132,
    792_865_000,
    759_250_125,
    727_060_411,
    696_235_434,
    666_717_336,
    638_450_708,
    611_382_493,
    585_461_881,
    560_640_218,
];
/// 1/n in Q30 for the Taylor terms n = 2 … 5.
const INV_Q30: [i64; 4] = [536_870_912, 357_913_941, 268_435_456, 214_748_365];

/// e^(−x) for `x` in Q16 (x ≥ 0; negative x is taken as 0), result in Q30.
///
/// e^(−x) = 2^(−y) with y = x·log2 e, split into whole, sixteenths (table) and a rest r < 1/16 whose
/// e^(−r·ln 2) (argument < 0.0434) is a degree-5 Taylor polynomial: truncation < 2^30 · 0.0434⁶/720 ≈
/// 10⁻⁵ Q30 steps, so the result is within a few Q30 steps of e^(−x) (the table's and the products'
/// rounding). Multiplies only: the Cortex-M0 has no divide instruction. Results below 2^-30 are 0.
pub fn exp_neg_q16(x_q16: i64) -> i64 {
    if x_q16 <= 0 {
        return ONE_Q30;
    }
    // Beyond e^-21 the value is below one Q30 step.
    if x_q16 >= 21 << 16 {
        return 0;
    }
    // y = x · log2(e) in Q30; x < 2^21 so the product stays below 2^52.
    // Every factor below is < 2^31, so each product is one 32 × 32 → 64-bit multiply.
    let m = |a: i64, b: i64| mul_i32_wide(a as i32, b as i32);
    let y_q30 = m(x_q16, LOG2E_Q30) >> 16;
    let k = y_q30 >> 30;
    let f_q30 = y_q30 & (ONE_Q30 - 1);
    let sixteenth = (f_q30 >> 26) as usize;
    // t = (f − sixteenth/16) · ln 2 in Q30, t < ln 2 / 16.
    let t = m(f_q30 & ((1 << 26) - 1), LN2_Q30) >> 30;
    // Horner: p = 1 − t·(1 − t/2·(1 − t/3·(1 − t/4·(1 − t/5)))).
    let mut p = ONE_Q30;
    for &inv in INV_Q30.iter().rev() {
        let t_n = m(t, inv) >> 30;
        p = ONE_Q30 - (m(t_n, p) >> 30);
    }
    p = ONE_Q30 - (m(t, p) >> 30);
    let e = (m(EXP2_SIXTEENTHS_Q30.get(sixteenth).copied().unwrap_or(0), p) + (1 << 29)) >> 30;
    if k >= 62 {
        0
    } else {
        e >> k
    }
}

pub use crate::fixed::isqrt_u128;

/// Floor of the square root of a non-negative `i64` (negative inputs give 0).
///
/// Loop bound: ≤ 64 steps ([`isqrt_u128`]).
pub fn isqrt_i64(v: i64) -> i64 {
    if v <= 0 {
        0
    } else {
        isqrt_u128(v as u128) as i64
    }
}

/// `num / den` rounded half away from zero; 0 when `den` is 0. `den` may be negative. Out of line,
/// and one unsigned 128-bit division on the magnitudes (a division written twice, once per sign,
/// is twice the code); never runs per pixel.
#[inline(never)]
pub fn div_round_i128(num: i128, den: i128) -> i128 {
    let (n, d) = (num.unsigned_abs(), den.unsigned_abs());
    // d / 2 is a shift; d = 0 gives None.
    let q = n.saturating_add(d / 2).checked_div(d).unwrap_or(0);
    let q = i128::try_from(q).unwrap_or(i128::MAX);
    if (num < 0) != (den < 0) {
        -q
    } else {
        q
    }
}

/// `num / den` rounded half away from zero for `i64`; 0 when `den` is 0.
pub fn div_round_i64(num: i64, den: i64) -> i64 {
    div_round_i128(i128::from(num), i128::from(den)) as i64
}

/// The OR of `v ^ (v >> 31)` over `values` (|v| for v ≥ 0, |v| − 1 below): below 2^k exactly when
/// every value is within −2^k … 2^k − 1, so one pass of loads, shifts and ORs (four values a step)
/// answers every "is the frame within ±2^k" question a little conservatively (2^k itself counts
/// as out).
pub fn magnitude_span(values: &[i32]) -> u32 {
    let fold = |v: i32| (v ^ (v >> 31)) as u32;
    let mut chunks = values.chunks_exact(4);
    let mut acc = 0u32;
    for c in &mut chunks {
        if let [a, b, c, d] = *c {
            acc |= fold(a) | fold(b) | fold(c) | fold(d);
        }
    }
    for &v in chunks.remainder() {
        acc |= fold(v);
    }
    acc
}

/// `a · b` in full 64 bits from four 16 × 16-bit products: the Cortex-M0 has only a 32-bit multiply,
/// and a general 64-bit product (`__aeabi_lmul`) costs three times as many instructions.
#[inline]
pub const fn mul_u32_wide(a: u32, b: u32) -> u64 {
    let (a1, a0) = (a >> 16, a & 0xffff);
    let (b1, b0) = (b >> 16, b & 0xffff);
    let mid = (a1 * b0) as u64 + (a0 * b1) as u64;
    (((a1 * b1) as u64) << 32) + (mid << 16) + (a0 * b0) as u64
}

/// Signed [`mul_u32_wide`], from four 16 × 16-bit products of signed high and unsigned low halves
/// (a = a_h · 2^16 + a_l with a_h = a >> 16): |a_h · b_h| ≤ 2^30 and |a_h · b_l| < 2^31 fit `i32`,
/// a_l · b_l < 2^32 fits `u32`, and the sum is exact in `i64` — no sign handling around an unsigned
/// product.
#[inline(always)]
pub fn mul_i32_wide(a: i32, b: i32) -> i64 {
    let (ah, al) = (a >> 16, (a & 0xffff) as u32);
    let (bh, bl) = (b >> 16, (b & 0xffff) as u32);
    let mid = i64::from(ah * bl as i32) + i64::from(al as i32 * bh);
    (i64::from(ah * bh) << 32) + (mid << 16) + i64::from(al * bl)
}

/// Whether `r > k·σ` for `k_q8` (Q8) and `σ² = var_q8 / 256`, i.e. `r² · 2^16 · 256 > k_q8² · var_q8`,
/// exactly; in `u64` when the operands allow (the per-pixel case), `u128` otherwise.
pub fn above_sigmas(r: i64, k_q8: i64, var_q8: i64) -> bool {
    if r <= 0 {
        return false;
    }
    let (r, k, v) = (
        r.unsigned_abs(),
        k_q8.unsigned_abs(),
        var_q8.max(0).unsigned_abs(),
    );
    if r < 1 << 20 && k < 1 << 16 {
        // r² · 2^24 < 2^64; k² · v overflowing u64 means it exceeds the left side.
        let lhs = mul_u32_wide(r as u32, r as u32) << 24;
        let k2 = (k * k) as u32;
        let rhs = if v >> 32 == 0 {
            Some(mul_u32_wide(k2, v as u32))
        } else {
            u64::from(k2).checked_mul(v)
        };
        return match rhs {
            Some(rhs) => lhs > rhs,
            None => false,
        };
    }
    // r² < 2^128; beyond 2^104 the left side exceeds any k² · v (< 2^127).
    let lhs = u128::from(r) * u128::from(r);
    lhs >= 1 << 104 || lhs << 24 > u128::from(k) * u128::from(k) * u128::from(v)
}

/// `a · b` for a 32-bit and a 64-bit factor in full (< 2^95), from two 32 × 32 → 64-bit products:
/// a general 128-bit product is several library calls on the M0.
pub fn mul_i32_i64(a: i32, b: i64) -> i128 {
    let (hi, lo) = ((b >> 32) as i32, b as u32);
    let low = mul_u32_wide(a.unsigned_abs(), lo) as i128;
    let low = if a < 0 { -low } else { low };
    (i128::from(mul_i32_wide(a, hi)) << 32) + low
}

/// `a · b` in `i128`, `None` on overflow. Out of line on purpose: on the M0 every inlined 128-bit
/// product is a few hundred bytes of code, and these run a few hundred times per frame, not per pixel.
#[inline(never)]
pub fn checked_mul_i128(a: i128, b: i128) -> Option<i128> {
    a.checked_mul(b)
}

/// `a · b` in `i128` for operands whose product is known to fit (wraps otherwise); out of line for the
/// same reason as [`checked_mul_i128`].
#[inline(never)]
pub fn mul_i128(a: i128, b: i128) -> i128 {
    a.wrapping_mul(b)
}

/// Clamps an `i128` into `i64`.
pub fn clamp_i64(v: i128) -> i64 {
    v.clamp(i128::from(i64::MIN), i128::from(i64::MAX)) as i64
}

/// Clamps an `i64` into `i32`.
pub fn clamp_i32(v: i64) -> i32 {
    v.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32
}

pub use crate::fixed::leading_zeros_u32;

/// `v.leading_zeros()` for `u64` from [`leading_zeros_u32`] of its halves.
#[inline]
pub const fn leading_zeros_u64(v: u64) -> u32 {
    let hi = (v >> 32) as u32;
    if hi != 0 {
        leading_zeros_u32(hi)
    } else {
        32 + leading_zeros_u32(v as u32)
    }
}

/// Seeds of [`recip_u32_max`] by the divisor's top byte `b` ∈ [128, 256): ⌊2^32 / (256·b + 128)⌋ −
/// 2^16, the reciprocal at the middle of the byte's range (within 2^-8 of every divisor there).
/// Built at compile time from integers.
const RECIP_SEED: [u16; 128] = recip_seed_table();

const fn recip_seed_table() -> [u16; 128] {
    let mut t = [0u16; 128];
    let mut i = 0;
    while i < 128 {
        let v = (1u64 << 32) / (256 * (128 + i as u64) + 128) - (1 << 16);
        t[i] = v as u16;
        i += 1;
    }
    t
}

/// `⌊(2^32 − 1) / d⌋` exactly, for `d` ≥ 1 (0 gives `u32::MAX`). For `d` in [2^15, 2^16) — every
/// [`Recip`] — a table seed, one Newton step and at most four ±1 corrections (~40 instructions)
/// instead of the Cortex-M0's library division (~170); other divisors divide.
pub fn recip_u32_max(d: u32) -> u32 {
    if !(1 << 15..1 << 16).contains(&d) {
        return u32::MAX.checked_div(d).unwrap_or(u32::MAX);
    }
    let seed = RECIP_SEED
        .get(((d >> 8) as usize).wrapping_sub(128))
        .copied()
        .unwrap_or(0);
    // r0 = 2^32/d · (1 + ε), |ε| ≤ 2^-8: |2^32 − d·r0| < 2^25, exact in wrapping 32-bit arithmetic.
    let r0 = (1u32 << 16) + u32::from(seed);
    let e = 0u32.wrapping_sub(d.wrapping_mul(r0)) as i32;
    // r1 = r0·(2 − d·r0/2^32) = 2^32/d · (1 − ε²): at most 3 below ⌊2^32/d⌋ (ε²·2^17 ≤ 2, plus the
    // floor), never above 2^32/d.
    let r1 = (i64::from(r0) + (mul_i32_wide(r0 as i32, e) >> 32)) as u32;
    // (2^32 − 1) − r·d is within ±2^19 here, exact as a wrapped i32.
    let rem = u32::MAX.wrapping_sub(r1.wrapping_mul(d)) as i32;
    settle_quotient(r1, rem, d as i32, 4)
}

/// The exact floor quotient from an estimate `r` of it and its remainder `rem` (the dividend minus
/// `r · d`, as a wrapped `i32`): `r` moves by ±1 while `rem` lies outside [0, `d`), at most `rounds`
/// times (callers prove their estimate is that close). Inlined: each caller's loop stays in registers.
#[inline(always)]
pub(crate) fn settle_quotient(mut r: u32, mut rem: i32, d: i32, rounds: usize) -> u32 {
    for _ in 0..rounds {
        if rem < 0 {
            r = r.wrapping_sub(1);
            rem = rem.wrapping_add(d);
        } else if rem >= d {
            r = r.wrapping_add(1);
            rem = rem.wrapping_sub(d);
        } else {
            break;
        }
    }
    r
}

/// A reciprocal for repeated division by one positive `d < 2^62`: `d ≈ n · 2^-t` with `n` in
/// \[2^29, 2^30) (`t` < 0 drops the low bits of a wider `d`) and `r ≈ 2^60 / n` in (2^30, 2^31\], so
/// `v / d ≈ v · r · 2^t / 2^60` (relative error < 2^-28) from 32 × 32-bit products. `r` comes from
/// one 32-bit division (~170 instructions on the Cortex-M0) and a Newton step, not a 64-bit library
/// division (~730).
#[derive(Clone, Copy)]
pub struct Recip {
    r: i64,
    t: i32,
}

impl Recip {
    /// Division by 1.
    pub const ONE: Self = Self { r: 1 << 31, t: 29 };

    /// `None` unless 0 < `d` < 2^62.
    pub fn new(d: i64) -> Option<Self> {
        let (n, t, n16) = Self::normalise(d)?;
        Some(Self::refine(n, t, recip_u32_max(n16)))
    }

    /// [`Recip::new`] for constant contexts (the same value): a fixed divisor's reciprocal can be a
    /// constant. Its library division is only paid at compile time.
    pub const fn new_const(d: i64) -> Option<Self> {
        match Self::normalise(d) {
            Some((n, t, n16)) => Some(Self::refine(n, t, u32::MAX / n16)),
            None => None,
        }
    }

    /// `d = n · 2^-t` with `n` in [2^29, 2^30), and `n >> 14` (in [2^15, 2^16)); `None` unless
    /// 0 < `d` < 2^62.
    const fn normalise(d: i64) -> Option<(i64, i32, u32)> {
        if d <= 0 || d >= 1 << 62 {
            return None;
        }
        let t = leading_zeros_u64(d as u64) as i32 - 34;
        let n = if t >= 0 { d << t } else { d >> -t };
        let n14 = n >> 14;
        if n14 < 0 || n14 > u32::MAX as i64 {
            return None;
        }
        let n16 = if n14 == 0 { 1 } else { n14 as u32 };
        Some((n, t, n16))
    }

    /// The reciprocal from `q = ⌊(2^32 − 1) / (n >> 14)⌋`: x0 = q · 2^14 ≈ 2^60 / n to 2^-15; one
    /// Newton step x += x·(2^60 − n·x) / 2^60 squares the error (n·x0 < 2^61; the correction's
    /// factors stay below 2^32 and 2^17).
    const fn refine(n: i64, t: i32, q: u32) -> Self {
        let x0 = (q as u64) << 14; // < 2^32
        let e = (1i64 << 60) - mul_u32_wide(n as u32, x0 as u32) as i64;
        let c = e >> 29; // |c| < 2^17
        let corr = mul_u32_wide(x0 as u32, c.unsigned_abs() as u32) as i64 >> 31;
        let r = x0 as i64 + if c < 0 { -corr } else { corr };
        Self { r, t }
    }

    /// `v · 2^k / d`, rounded toward zero (within one step), for |v| < 2^62; `None` beyond `i64`.
    pub fn scale(&self, v: i64, k: i32) -> Option<i64> {
        let m = v.unsigned_abs();
        let r = self.r.unsigned_abs();
        // v · r / 2^s; m · r is split at 2^31 so each partial product fits 64 bits.
        let s = 60 - self.t - k;
        let (hi, lo) = (m >> 31, m & ((1 << 31) - 1));
        // Both factors of each partial product are below 2^32 (r ≤ 2^31, hi < 2^31).
        let wide = |a: u64| mul_u32_wide(a as u32, r as u32);
        let q = if hi == 0 {
            let p = wide(lo);
            if s >= 0 {
                p.checked_shr(s as u32).unwrap_or(0)
            } else {
                let up = (-s) as u32;
                (p.leading_zeros() > up).then(|| p << up)?
            }
        } else if s >= 31 {
            let s = s as u32;
            (wide(hi) >> (s - 31)) + wide(lo).checked_shr(s).unwrap_or(0)
        } else {
            // (a · 2^31 + b) · 2^-s with a = wide(hi), b = wide(lo), in u64 halves (no 128-bit
            // arithmetic): for 0 ≤ s < 31 exactly a · 2^(31−s) + ⌊b / 2^s⌋, for s < 0 both parts
            // shifted up; `None` exactly when the result reaches 2^64.
            let (a, b) = (wide(hi), wide(lo));
            let (up_a, b) = if s >= 0 {
                ((31 - s) as u32, b >> s)
            } else {
                let up = (-s) as u32;
                if leading_zeros_u64(b) < up {
                    return None;
                }
                (31 + up, b << up)
            };
            if leading_zeros_u64(a) < up_a {
                return None;
            }
            (a << up_a).checked_add(b)?
        };
        let q = i64::try_from(q).ok()?;
        Some(if v < 0 { -q } else { q })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn leading_zeros_match_the_instruction() {
        let mut x = 0x9e37_79b9_7f4a_7c15u64;
        for k in 0..64 {
            for v in [1u64 << k, (1u64 << k) - 1, (1u64 << k) | 1, x >> k, 0] {
                assert_eq!(leading_zeros_u64(v), v.leading_zeros(), "{v:#x}");
                let v32 = v as u32;
                assert_eq!(leading_zeros_u32(v32), v32.leading_zeros(), "{v32:#x}");
            }
            x = x.wrapping_mul(0x2545_f491_4f6c_dd1d).rotate_left(7);
        }
        // Every byte value in every byte position, with the bits below it clear and set.
        for b in 0u32..256 {
            for k in [0, 8, 16, 24] {
                for v in [b << k, (b << k) | ((1 << k) - 1)] {
                    assert_eq!(leading_zeros_u32(v), v.leading_zeros(), "{v:#x}");
                }
            }
        }
    }

    #[test]
    fn reciprocal_scaling_matches_division() {
        for d in [
            1i64,
            2,
            3,
            255,
            1000,
            65_537,
            (1 << 29) - 1,
            1 << 29,
            (1 << 30) - 1,
        ] {
            let r = Recip::new(d).unwrap();
            for v in [
                0i64,
                1,
                -1,
                7,
                -12_345,
                1 << 40,
                -(1 << 52) + 3,
                (1 << 61) + 99,
            ] {
                for k in [-20i32, 0, 16, 30] {
                    let exact = (i128::from(v) << 60 >> (60 - k)) / i128::from(d);
                    if exact.unsigned_abs() >= 1 << 62 {
                        continue;
                    }
                    let got = i128::from(r.scale(v, k).unwrap());
                    // Relative 2^-29 plus one step.
                    assert!(
                        (got - exact).abs() <= exact.abs() / (1 << 28) + 1,
                        "{v} · 2^{k} / {d}: {got} vs {exact}"
                    );
                }
            }
        }
        assert!(Recip::new(0).is_none() && Recip::new(1 << 62).is_none());
        // Wide divisors keep the relative precision.
        for d in [1i64 << 30, (1 << 40) + 12_345, (1 << 61) - 1] {
            let r = Recip::new(d).unwrap();
            let v = (1i64 << 61) - 17;
            let exact = (i128::from(v) << 20) / i128::from(d);
            let got = i128::from(r.scale(v, 20).unwrap());
            assert!(
                (got - exact).abs() <= exact.abs() / (1 << 27) + 1,
                "{d}: {got} vs {exact}"
            );
        }
    }

    #[test]
    fn fast_reciprocal_is_the_exact_quotient() {
        // Every divisor of the fast range, and the edges around it, against the library division.
        for d in (1u32..1 << 17).chain([u32::MAX, (1 << 31) + 5, 0]) {
            let want = u32::MAX.checked_div(d).unwrap_or(u32::MAX);
            assert_eq!(recip_u32_max(d), want, "d = {d}");
        }
    }

    #[test]
    fn reciprocal_and_its_constant_form_agree() {
        let mut d = 1i64;
        while d < 1 << 62 {
            for v in [d, d + 1, d + d / 3 + 7, d / 2 * 3] {
                let (a, b) = (Recip::new(v), Recip::new_const(v));
                assert_eq!(a.map(|r| (r.r, r.t)), b.map(|r| (r.r, r.t)), "d = {v}");
            }
            d += d / 2 + 1;
        }
        for v in [0i64, -1, 1 << 62, i64::MAX] {
            assert!(Recip::new(v).is_none() && Recip::new_const(v).is_none());
        }
    }

    #[test]
    fn magnitude_span_answers_range_questions() {
        let within = |v: &[i32], k: u32| {
            v.iter()
                .all(|&x| (-(1i64 << k)..(1i64 << k)).contains(&i64::from(x)))
        };
        let mut x = 0x1234_5678u32;
        for len in [0usize, 1, 3, 4, 5, 17, 64] {
            for (k, wider) in [0u32, 5, 23, 25, 30]
                .into_iter()
                .flat_map(|k| [(k, 0), (k, 1)])
            {
                // Values within ±2^k, or within ±2^(k+1) (some out of range).
                let v: std::vec::Vec<i32> = (0..len)
                    .map(|_| {
                        crate::test_rng::step32(&mut x);
                        (x as i32) >> (31 - k - wider)
                    })
                    .collect();
                assert_eq!(magnitude_span(&v) < 1 << k, within(&v, k), "{v:?} k {k}");
            }
        }
        assert_eq!(magnitude_span(&[-(1 << 23)]), (1 << 23) - 1);
        assert_eq!(magnitude_span(&[1 << 23]), 1 << 23);
        assert_eq!(magnitude_span(&[i32::MIN, 0]), i32::MAX as u32);
    }

    #[test]
    fn exp_matches_reference_values() {
        // Reference: e^-x · 2^30 computed with the Python math module (IEEE double), rounded.
        let cases: [(i64, i64); 5] = [
            (0, 1_073_741_824),
            (1 << 15, 651_257_337), // e^-0.5
            (1 << 16, 395_007_542), // e^-1
            (10 << 16, 48_748),     // e^-10
            (66, 1_072_661_024),    // e^-(66/65536)
        ];
        for (x, want) in cases {
            let got = exp_neg_q16(x);
            assert!((got - want).abs() <= 4, "x={x} got {got} want {want}");
        }
        // A dense sweep against a 30-term series in i128 (an independent long-hand evaluation).
        for x in (0..(21i64 << 16)).step_by(4099) {
            let want = exp_series_i128(x);
            let got = exp_neg_q16(x);
            assert!((got - want).abs() <= 3, "x={x} got {got} want {want}");
        }
        assert_eq!(exp_neg_q16(-5), ONE_Q30);
        assert_eq!(exp_neg_q16(30 << 16), 0);
        // Monotone non-increasing over the whole range used by the fit.
        let mut prev = ONE_Q30;
        for x in (0..(21 << 16)).step_by(997) {
            let v = exp_neg_q16(x);
            assert!(v <= prev);
            prev = v;
        }
    }

    /// e^(−x) (x in Q16) in Q30 by e^(−x) = (e^(−x/64))^64 with a 30-term series in Q60.
    fn exp_series_i128(x_q16: i64) -> i64 {
        let one: i128 = 1 << 60;
        let t = (i128::from(x_q16) << 44) / 64; // x/64 in Q60
        let (mut term, mut sum) = (one, one);
        for n in 1..30 {
            term = -((term * t) >> 60) / n;
            sum += term;
        }
        for _ in 0..6 {
            sum = (sum * sum) >> 60;
        }
        ((sum + (1 << 29)) >> 30) as i64
    }

    #[test]
    fn square_roots() {
        assert_eq!(isqrt_u128(0), 0);
        assert_eq!(isqrt_u128(15), 3);
        assert_eq!(isqrt_u128(16), 4);
        assert_eq!(isqrt_u128(u128::MAX), u64::MAX as u128);
        assert_eq!(isqrt_i64(-4), 0);
        assert_eq!(isqrt_i64(1 << 62), 1 << 31);
        for v in [2u128, 99, 1000, 123_456_789, 1 << 100] {
            let r = isqrt_u128(v);
            assert!(r * r <= v && (r + 1) * (r + 1) > v);
        }
    }

    #[test]
    fn sigma_test_matches_wide_arithmetic() {
        let wide = |r: i64, k: i64, v: i64| {
            r > 0
                && (r as i128) * (r as i128) * (1 << 24)
                    > (k as i128) * (k as i128) * (v.max(0) as i128)
        };
        for r in [
            -5i64,
            0,
            1,
            7,
            1000,
            (1 << 20) - 1,
            1 << 20,
            1 << 31,
            1 << 40,
        ] {
            for k in [0i64, 256, 512, 1115, 65_535, 1 << 16] {
                for v in [0i64, 1, 256, 10_000, 1 << 40, i64::MAX] {
                    assert_eq!(above_sigmas(r, k, v), wide(r, k, v), "{r} {k} {v}");
                }
            }
        }
        // Around the edge: r = 2σ exactly is not above.
        assert!(!above_sigmas(20, 512, 100 * 256));
        assert!(above_sigmas(21, 512, 100 * 256));
    }

    #[test]
    fn wide_products_are_exact_on_random_words() {
        let mut x = 0x243f_6a88_85a3_08d3u64;
        for _ in 0..200_000 {
            crate::test_rng::step64(&mut x);
            // Whole words and words with many top or bottom bits clear.
            let (a, b) = ((x >> 32) as u32, x as u32);
            for (a, b) in [(a, b), (a >> (b % 32), b), (a, b << (a % 32))] {
                assert_eq!(mul_u32_wide(a, b), u64::from(a) * u64::from(b), "{a} {b}");
            }
        }
    }

    #[test]
    fn wide_products_are_exact() {
        let probes = [
            0u32,
            1,
            2,
            0xffff,
            0x1_0000,
            0x1234_5678,
            0x8000_0000,
            u32::MAX - 1,
            u32::MAX,
        ];
        for &a in &probes {
            for &b in &probes {
                assert_eq!(mul_u32_wide(a, b), u64::from(a) * u64::from(b));
                let (x, y) = (a as i32, b as i32);
                assert_eq!(mul_i32_wide(x, y), i64::from(x) * i64::from(y), "{x} {y}");
            }
        }
        assert_eq!(mul_i32_wide(i32::MIN, i32::MIN), 1 << 62);
        assert_eq!(mul_i32_wide(i32::MIN, 1), i64::from(i32::MIN));
        // Signed halves over every magnitude.
        let mut next = crate::test_rng::xorshift(0x510e_527f_ade6_82d1u64);
        for _ in 0..200_000 {
            let v = next();
            let (a, b) = (
                (v as i32) >> (v % 32),
                ((v >> 32) as i32) >> ((v >> 8) % 32),
            );
            assert_eq!(mul_i32_wide(a, b), i64::from(a) * i64::from(b), "{a} {b}");
        }
    }

    #[test]
    fn mixed_products_are_exact() {
        let a_probes = [
            0i32,
            1,
            -1,
            7,
            -7,
            i32::MAX,
            i32::MIN,
            123_456_789,
            -98_765_432,
        ];
        let b_probes = [
            0i64,
            1,
            -1,
            i64::from(u32::MAX),
            -(1 << 40) - 3,
            (1 << 53) - 1,
            i64::MAX,
            i64::MIN,
        ];
        for &a in &a_probes {
            for &b in &b_probes {
                assert_eq!(mul_i32_i64(a, b), i128::from(a) * i128::from(b), "{a} {b}");
            }
        }
    }

    #[test]
    fn rounding_division_matches_the_signed_form() {
        // The form it replaced: the sign moved to the numerator, a signed division per sign.
        let signed = |num: i128, den: i128| -> i128 {
            if den == 0 {
                return 0;
            }
            let (num, den) = if den < 0 { (-num, -den) } else { (num, den) };
            let q = |n: i128| (n + den / 2) / den;
            if num >= 0 {
                q(num)
            } else {
                -q(-num)
            }
        };
        let mut x = 0x9e37_79b9_7f4a_7c15u64;
        let mut next = |bits: u32| {
            crate::test_rng::step64(&mut x);
            let v = (i128::from(x) << 64 | i128::from(x.rotate_left(29))) >> (128 - bits);
            if x & 1 == 0 {
                -v
            } else {
                v
            }
        };
        for k in 0..4000u32 {
            let (num, den) = (next(1 + k % 120), next(1 + (k / 7) % 100));
            assert_eq!(div_round_i128(num, den), signed(num, den), "{num} / {den}");
        }
        for (n, d) in [
            (7, 2),
            (-7, 2),
            (7, -2),
            (-7, -2),
            (6, 4),
            (-6, 4),
            (0, 5),
            (5, 0),
        ] {
            assert_eq!(div_round_i128(n, d), signed(n, d), "{n} / {d}");
        }
    }

    #[test]
    fn rounding_division() {
        assert_eq!(div_round_i64(5, 2), 3);
        assert_eq!(div_round_i64(-5, 2), -3);
        assert_eq!(div_round_i64(4, 3), 1);
        assert_eq!(div_round_i64(5, -2), -3);
        assert_eq!(div_round_i64(7, 0), 0);
        assert_eq!(clamp_i32(i64::MAX), i32::MAX);
    }
}
