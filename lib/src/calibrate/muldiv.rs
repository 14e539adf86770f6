//! Rounded a · b / c for the map fit, through 64-bit arithmetic when the operands allow.
//!
//! The fit's weights and χ² terms are small products divided by small numbers: on a core without a
//! divide instruction the 256-bit route of [`mul_div_i128`] costs several times a 64-bit division.
//! Its elimination divides many 128-bit products by one pivot: [`Divisor`] takes that pivot's
//! reciprocal once, then each quotient costs two 64 × 64-bit products instead of a 60-step loop.
use crate::find::math::mul_u32_wide;
use crate::fixed::mul_div_i128;

/// [`mul_div_i128`] (a · b / c rounded half away from zero; `None` for c = 0 or a quotient past
/// `i128`), in `u64` when |a| · |b| < 2^64 and |c| < 2^64: the same quotient and remainder, so the
/// same rounding. Work: one 64-bit division, else that of [`mul_div_i128`].
pub(crate) fn mul_div_round(a: i128, b: i128, c: i128) -> Option<i128> {
    let (ua, ub, uc) = (a.unsigned_abs(), b.unsigned_abs(), c.unsigned_abs());
    let negative = (a < 0) ^ (b < 0) ^ (c < 0);
    let bits = |v: u128| 128 - v.leading_zeros();
    if uc != 0 && uc >> 64 == 0 && bits(ua) + bits(ub) <= 64 {
        // |a|, |b| < 2^64 with a product below 2^64.
        let n = (ua as u64).wrapping_mul(ub as u64);
        let d = uc as u64;
        // Both below 2^32 (a χ² term of a small residual): the 32-bit division, a fraction of
        // the 64-bit one's cost on a core without a divider; the same quotient and remainder.
        let (q, r) = match (u32::try_from(n), u32::try_from(d)) {
            (Ok(n32), Ok(d32)) => ((n32 / d32) as u64, (n32 % d32) as u64),
            _ => (n / d, n % d),
        };
        // Half up, as the wide routine: 2r ≥ d. q + 1 ≤ n stays in u64 (r > 0 means d ≥ 2).
        let q = if r >= d - r { q + 1 } else { q } as i128;
        return Some(if negative { -q } else { q });
    }
    mul_div_i128(a, b, c)
}

/// A divisor |c| in 1 … 2^64 − 1 with its reciprocal, for exact 128-by-64-bit quotients by
/// multiplication: the "2-by-1" division of Möller and Granlund, "Improved division by invariant
/// integers", IEEE Trans. Computers 60 (2011), Algorithm 4, with v = ⌊(2^128 − 1) / d⌋ − 2^64 for
/// the divisor shifted to d with its top bit set.
#[derive(Clone, Copy)]
pub(crate) struct Divisor {
    /// The signed divisor as given.
    c: i128,
    /// |c|.
    abs: u64,
    /// |c| shifted left until its top bit is set.
    d: u64,
    /// That shift.
    shift: u32,
    /// ⌊(2^128 − 1) / d⌋ − 2^64.
    v: u64,
}

impl Divisor {
    /// `None` for 0 or |c| ≥ 2^64. Work: a table look-up and four refinement steps for the
    /// reciprocal ([`reciprocal_word`]), a few 64 × 64-bit products.
    pub(crate) fn new(c: i128) -> Option<Divisor> {
        let abs = u64::try_from(c.unsigned_abs()).ok().filter(|&a| a != 0)?;
        let shift = abs.leading_zeros();
        let d = abs << shift;
        let v = reciprocal_word(d);
        Some(Divisor {
            c,
            abs,
            d,
            shift,
            v,
        })
    }

    /// [`mul_div_i128`]`(a, b, c)` for this divisor c: the same rounded quotient (half away from
    /// zero) and `None`s. Work: when one of |a|, |b| is below 2^64, two 64 × 64-bit products and ≤ 4
    /// reciprocal steps (each two more); else that of [`mul_div_i128`].
    pub(crate) fn mul_div_round(&self, a: i128, b: i128) -> Option<i128> {
        let (ua, ub) = (a.unsigned_abs(), b.unsigned_abs());
        // The wide factor first; the other must fit 64 bits.
        let (wide, narrow) = if ua >> 64 == 0 { (ub, ua) } else { (ua, ub) };
        if narrow >> 64 != 0 {
            return mul_div_i128(a, b, self.c);
        }
        // n = wide · narrow < 2^192 in three words, low first.
        let lo = mul_64x64(wide as u64, narrow as u64);
        // A wide factor below 2^64 (most of an elimination's cells): the high product is 0.
        let hi = match (wide >> 64) as u64 {
            0 => 0,
            w1 => mul_64x64(w1, narrow as u64),
        };
        let mid = (lo >> 64) + (hi & u64::MAX as u128);
        let n = [lo as u64, mid as u64, ((hi >> 64) + (mid >> 64)) as u64];
        // Shifted so that d is the divisor: four words (the top one takes the bits shifted out).
        // A variable 64-bit shift is a library call on the Cortex-M0: a zero word (the top one of
        // a product below 2^128, most of them) shifts to zero without it.
        let s = self.shift;
        let [n0, n1, n2] = n;
        let words = if s == 0 {
            [n0, n1, n2, 0]
        } else {
            let shl = |v: u64| if v == 0 { 0 } else { v << s };
            let shr = |v: u64| if v == 0 { 0 } else { v >> (64 - s) };
            [shl(n0), shl(n1) | shr(n0), shl(n2) | shr(n1), shr(n2)]
        };
        let mut rem = 0u64;
        let mut q = [0u64; 4];
        for k in (0..4).rev() {
            let w = words.get(k).copied().unwrap_or(0);
            // Leading words below d: a zero quotient digit and the word as remainder, no product.
            let (qk, r) = if rem == 0 && w < self.d {
                (0, w)
            } else {
                div_2by1(self.d, self.v, rem, w)
            };
            if let Some(slot) = q.get_mut(k) {
                *slot = qk;
            }
            rem = r;
        }
        let [q0, q1, q2, q3] = q;
        if q3 != 0 || q2 != 0 {
            // 2^128 or more: past what the wide routine returns (`None`), asked of it all the same.
            return mul_div_i128(a, b, self.c);
        }
        let r = rem >> s;
        // Half up, as the wide routine: 2r ≥ |c|; then it must fit i128.
        let quotient =
            (((q1 as u128) << 64) | q0 as u128).checked_add(u128::from(r >= self.abs - r))?;
        let quotient = i128::try_from(quotient).ok()?;
        let negative = (a < 0) ^ (b < 0) ^ (self.c < 0);
        Some(if negative { -quotient } else { quotient })
    }
}

/// The full product of two u64 from four 32 × 32-bit ones.
///
/// Both below 2^32 (a small weight times a small σ, say): the one low product, the same integer.
pub(crate) fn mul_64x64(a: u64, b: u64) -> u128 {
    const M: u64 = 0xffff_ffff;
    let (a1, a0) = ((a >> 32) as u32, a as u32);
    let (b1, b0) = ((b >> 32) as u32, b as u32);
    if a1 == 0 && b1 == 0 {
        return mul_u32_wide(a0, b0) as u128;
    }
    let (p00, p01, p10, p11) = (
        mul_u32_wide(a0, b0),
        mul_u32_wide(a0, b1),
        mul_u32_wide(a1, b0),
        mul_u32_wide(a1, b1),
    );
    let mid = (p00 >> 32) + (p01 & M) + (p10 & M);
    let lo = (p00 & M) | (mid << 32);
    let hi = p11 + (p01 >> 32) + (p10 >> 32) + (mid >> 32);
    ((hi as u128) << 64) | lo as u128
}

/// ⌊(u1 · 2^64 + u0) / d⌋ and the remainder, for d with its top bit set, u1 < d and the reciprocal
/// v of [`Divisor`]: Möller and Granlund's Algorithm 4 (one candidate quotient from v · u1, at most
/// two corrections).
fn div_2by1(d: u64, v: u64, u1: u64, u0: u64) -> (u64, u64) {
    let q = mul_64x64(v, u1).wrapping_add(((u1 as u128) << 64) | u0 as u128);
    let (mut q1, q0) = (((q >> 64) as u64).wrapping_add(1), q as u64);
    let mut r = u0.wrapping_sub(q1.wrapping_mul(d));
    if r > q0 {
        q1 = q1.wrapping_sub(1);
        r = r.wrapping_add(d);
    }
    if r >= d {
        q1 = q1.wrapping_add(1);
        r -= d;
    }
    (q1, r)
}

/// v0 of [`reciprocal_word`]: ⌊(2^19 − 3 · 2^8) / d9⌋ for the top nine bits d9 = 256 … 511 of d.
const RECIPROCAL_TABLE: [u16; 256] = {
    let mut t = [0u16; 256];
    let mut i = 0;
    while i < 256 {
        t[i] = (((1u32 << 19) - 3 * (1 << 8)) / (256 + i as u32)) as u16;
        i += 1;
    }
    t
};

/// ⌊(2^128 − 1) / d⌋ − 2^64 for d with its top bit set: Möller and Granlund, "Improved division by
/// invariant integers", IEEE Trans. Computers 60 (2011), Algorithm 3 (`reciprocal_word`, from
/// memory; checked against the 64-step long division in the tests): an 11-bit table value and
/// Newton steps to 21, 34 and 64 bits, then one exact adjustment. Every product fits its type
/// (u64, or the full product of [`mul_64x64`]); the steps mod 2^64 are the paper's.
pub(crate) fn reciprocal_word(d: u64) -> u64 {
    let d0 = d & 1;
    let d9 = (d >> 55) as usize;
    let d40 = (d >> 24) + 1;
    let d63 = (d >> 1) + d0;
    let v0 = u64::from(
        RECIPROCAL_TABLE
            .get(d9.wrapping_sub(256))
            .copied()
            .unwrap_or(0),
    );
    // v0 < 2^11 and d40 ≤ 2^40: v0² · d40 < 2^62.
    let v1 = (v0 << 11)
        .wrapping_sub((v0 * v0 * d40) >> 40)
        .wrapping_sub(1);
    // 0 ≤ 2^60 − v1 · d40 < 2^44 and v1 < 2^21: the product below fits 128 bits (and 64).
    let e1 = (1u64 << 60).wrapping_sub(v1.wrapping_mul(d40));
    let v2 = (v1 << 13).wrapping_add((mul_64x64(v1, e1) >> 47) as u64);
    let e = ((v2 >> 1) * d0).wrapping_sub(v2.wrapping_mul(d63));
    let v3 = (v2 << 31).wrapping_add((mul_64x64(v2, e) >> 65) as u64);
    let hi = (mul_64x64(v3, d).wrapping_add(u128::from(d)) >> 64) as u64;
    v3.wrapping_sub(hi).wrapping_sub(d)
}

/// ⌊(u1 · 2^64 + u0) / d⌋ for u1 < d by 64 steps of restoring division (the reference the table
/// reciprocal is tested against).
#[cfg(test)]
fn div_2by1_slow(u1: u64, u0: u64, d: u64) -> u64 {
    let mut r = u1;
    let mut q = 0u64;
    for i in (0..64).rev() {
        let carry = r >> 63;
        r = (r << 1) | ((u0 >> i) & 1);
        q <<= 1;
        if carry == 1 || r >= d {
            r = r.wrapping_sub(d);
            q |= 1;
        }
    }
    q
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn narrow_route_gives_the_wide_quotients() {
        let mut next = crate::test_rng::xorshift(0x1234_5678_9abc_def1u64);
        let (mut narrow, mut narrow32) = (0, 0);
        for _ in 0..200_000 {
            let pick = |v: u64, bits: u64| -> i128 {
                let m = (v >> (64 - bits.clamp(1, 64))) as i128;
                if v & 1 == 1 {
                    -m
                } else {
                    m
                }
            };
            let (ba, bb, bc) = (next() % 66, next() % 66, next() % 66);
            let (a, b, c) = (pick(next(), ba), pick(next(), bb), pick(next(), bc));
            // Exact halves too: c even and a · b an odd multiple of c / 2.
            let (a, b, c) = if next().is_multiple_of(8) && c.unsigned_abs() >= 2 && c % 2 == 0 {
                (c / 2 * (2 * (next() % 1000) as i128 + 1), 1, c)
            } else {
                (a, b, c)
            };
            let bits = |v: i128| 128 - v.unsigned_abs().leading_zeros();
            narrow += usize::from(bits(a) + bits(b) <= 64 && bits(c) <= 64 && c != 0);
            let small = a.checked_mul(b).is_some_and(|p| p.unsigned_abs() < 1 << 32)
                && c.unsigned_abs() < 1 << 32
                && c != 0;
            narrow32 += usize::from(bits(a) + bits(b) <= 64 && small);
            assert_eq!(mul_div_round(a, b, c), mul_div_i128(a, b, c), "{a} {b} {c}");
        }
        assert!(narrow > 50_000 && narrow32 > 5_000, "{narrow} {narrow32}");
        assert_eq!(mul_div_round(5, 1, 0), None);
        assert_eq!(mul_div_round(3, 1, 2), Some(2));
        assert_eq!(mul_div_round(-3, 1, 2), Some(-2));
        assert_eq!(
            mul_div_round(u64::MAX as i128, 1, 1),
            Some(u64::MAX as i128)
        );
    }

    #[test]
    fn reciprocal_division_gives_the_wide_quotients() {
        let mut next = crate::test_rng::xorshift(0x6a09_e667_f3bc_c908u64);
        let pick = |v: u64, bits: u64, neg: bool| -> i128 {
            let m = (v >> (64 - bits.clamp(1, 64))) as i128;
            if neg {
                -m
            } else {
                m
            }
        };
        let wide = |v: u64, w: u64, bits: u64, neg: bool| -> i128 {
            let m = (((v as u128) << 64 | w as u128) >> (128 - bits.clamp(1, 127))) as i128;
            if neg {
                -m
            } else {
                m
            }
        };
        let mut fast = 0;
        for _ in 0..3_000 {
            let c = pick(next(), next() % 65, next() & 1 == 1);
            let Some(dv) = Divisor::new(c) else {
                assert!(c == 0 || c.unsigned_abs() >> 64 != 0);
                continue;
            };
            for _ in 0..40 {
                let (a, b) = match next() % 3 {
                    0 => (
                        pick(next(), next() % 67, next() & 1 == 1),
                        pick(next(), next() % 67, next() & 1 == 1),
                    ),
                    1 => (
                        wide(next(), next(), next() % 128, next() & 1 == 1),
                        pick(next(), next() % 65, next() & 1 == 1),
                    ),
                    _ => (
                        pick(next(), next() % 65, next() & 1 == 1),
                        wide(next(), next(), next() % 128, next() & 1 == 1),
                    ),
                };
                // Exact halves too: a · b an odd multiple of c / 2.
                let (a, b) = if next().is_multiple_of(8) && c % 2 == 0 {
                    (c / 2, 2 * (next() % 1_000_000) as i128 + 1)
                } else {
                    (a, b)
                };
                let narrow = a.unsigned_abs().min(b.unsigned_abs()) >> 64 == 0;
                fast += usize::from(narrow);
                assert_eq!(dv.mul_div_round(a, b), mul_div_i128(a, b, c), "{a} {b} {c}");
            }
        }
        assert!(fast > 20_000, "{fast}");
        // The quotient's edges: just below 2^64, and a divisor of 1 and of 2^64 − 1.
        for c in [1i128, 2, 3, (1 << 63) - 1, 1 << 63, (1 << 64) - 1, -7] {
            let dv = Divisor::new(c).unwrap();
            for (a, b) in [
                (c.abs() - 1, (1 << 64) - 1),
                ((1 << 64) - 1, (1 << 64) - 1),
                (0, 5),
                (i128::MAX, 1),
                (i128::MAX, (1 << 64) - 1),
                (i128::MIN + 1, 3),
                ((1 << 126) + 12_345, 2),
            ] {
                assert_eq!(dv.mul_div_round(a, b), mul_div_i128(a, b, c), "{a} {b} {c}");
            }
        }
        assert!(Divisor::new(0).is_none() && Divisor::new(1 << 64).is_none());
    }

    #[test]
    fn table_reciprocal_is_the_long_division_one() {
        let mut seed = 0xbb67_ae85_84ca_a73bu64;
        let check = |d: u64| {
            // (2^128 − 1) − 2^64 · d = (!d) · 2^64 + (2^64 − 1), and !d < d for d ≥ 2^63.
            assert_eq!(reciprocal_word(d), div_2by1_slow(!d, u64::MAX, d), "{d:#x}");
        };
        for k in 0..1_000u64 {
            check((1 << 63) + k);
            check(u64::MAX - k);
            check((1 << 63) | (k << 55));
            check(((1 << 63) | (k << 55)).wrapping_sub(1) | (1 << 63));
        }
        for _ in 0..200_000 {
            crate::test_rng::step64(&mut seed);
            check(seed | 1 << 63);
        }
    }

    #[test]
    fn products_from_halves_are_the_full_products() {
        let mut next = crate::test_rng::xorshift(0x3c6e_f372_fe94_f82bu64);
        for _ in 0..100_000 {
            let seed = next();
            let (a, b) = (seed >> (seed % 64), seed.rotate_left(29));
            assert_eq!(mul_64x64(a, b), a as u128 * b as u128);
            // One or both factors below 2^32 (the short route), and either above it.
            let (sa, sb) = (a >> 32, b >> (32 + seed % 32));
            assert_eq!(mul_64x64(sa, sb), sa as u128 * sb as u128);
            assert_eq!(mul_64x64(sa, b), sa as u128 * b as u128);
            assert_eq!(mul_64x64(a, sb), a as u128 * sb as u128);
            assert_eq!(
                mul_u32_wide(a as u32, b as u32),
                (a as u32) as u64 * (b as u32) as u64
            );
        }
        assert_eq!(
            mul_64x64(u64::MAX, u64::MAX),
            u64::MAX as u128 * u64::MAX as u128
        );
        assert_eq!(
            mul_u32_wide(u32::MAX, u32::MAX),
            u32::MAX as u64 * u32::MAX as u64
        );
    }
}
