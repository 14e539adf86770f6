//! Wide integer arithmetic for the predictor.
//!
//! Line positions must hold to about 1e-9 relative, so intermediate products need more than 128 bits.
//! Everything here is plain integer code with loops of fixed length, so it costs the same on every core.

/// One in the Q80 fixed-point scale used for level energies (value = raw / 2^80).
pub const Q80_ONE: u128 = 1 << 80;

/// `a * b / c` rounded to nearest, through a 256-bit product.
///
/// `None` when `c == 0` or the quotient does not fit in 128 bits. Work: a shift for a power-of-two
/// `c`, else at most 128 fixed loop steps (as many as the quotient has bits), in 64-bit arithmetic
/// when `c` < 2^64. Every path gives the exact quotient and remainder, so the rounding is the same
/// whichever runs.
pub const fn mul_div_u128(a: u128, b: u128, c: u128) -> Option<u128> {
    if c == 0 {
        return None;
    }
    let (hi, lo) = mul_wide(a, b);
    if hi >= c {
        return None;
    }
    if c.is_power_of_two() {
        // c = 2^k with hi < c: the quotient (hi, lo) >> k fits 128 bits.
        let k = c.trailing_zeros();
        let q = if k == 0 {
            lo
        } else {
            (hi << (128 - k)) | (lo >> k)
        };
        return round_up_half(q, lo & (c - 1), c);
    }
    if c >> 64 == 0 {
        return long_div_u64(hi, lo, c as u64);
    }
    // Schoolbook long division of (hi, lo) by c ≥ 2^64, one bit at a time; `rem < c` holds between
    // steps. The first `skip` quotient bits are 0 (hi has fewer bits than c): start after them, so
    // a quotient below 2^64 (hi = 0) takes at most 65 steps.
    let skip = (128 - c.leading_zeros()).saturating_sub(1 + (128 - hi.leading_zeros()));
    let mut i = 128 - skip;
    let mut rem = if skip == 0 {
        hi
    } else {
        (hi << skip) | (lo >> (128 - skip))
    };
    let mut q: u128 = 0;
    while i > 0 {
        i -= 1;
        let carry = rem >> 127;
        rem = (rem << 1) | ((lo >> i) & 1);
        if carry == 1 || rem >= c {
            rem = rem.wrapping_sub(c);
            q |= 1 << i;
        }
    }
    round_up_half(q, rem, c)
}

/// The long division of (hi, lo) (hi < c) by a divisor below 2^64, rounded half up: the same
/// quotient bits as the 128-bit loop, in 64-bit halves, starting at the first bit that can be 1.
///
/// Work: as many steps as the quotient has bits (≤ 128).
const fn long_div_u64(hi: u128, lo: u128, c: u64) -> Option<u128> {
    // N = hi · 2^128 + lo has `len` bits; after `skip` of the 128 steps the partial remainder is
    // N >> (128 − skip) < 2^(len − 128 + skip) ≤ 2^(bits(c) − 1) ≤ c: those quotient bits are 0.
    let len = if hi != 0 {
        256 - hi.leading_zeros()
    } else {
        128 - lo.leading_zeros()
    };
    let skip = {
        let s = (64 - c.leading_zeros() + 127).saturating_sub(len);
        if s > 128 {
            128
        } else {
            s
        }
    };
    // rem = N >> (128 − skip) < c; the bits of lo still to come, top-aligned in (n_hi, n_lo).
    let mut rem = if skip == 0 {
        hi as u64
    } else if skip == 128 {
        lo as u64
    } else {
        ((hi << skip) | (lo >> (128 - skip))) as u64
    };
    let rest = if skip == 128 { 0 } else { lo << skip };
    let (mut n_hi, mut n_lo) = ((rest >> 64) as u64, rest as u64);
    let (mut q_hi, mut q_lo) = (0u64, 0u64);
    let mut steps = 128 - skip;
    while steps > 0 {
        steps -= 1;
        let carry = rem >> 63;
        rem = (rem << 1) | (n_hi >> 63);
        n_hi = (n_hi << 1) | (n_lo >> 63);
        n_lo <<= 1;
        q_hi = (q_hi << 1) | (q_lo >> 63);
        q_lo <<= 1;
        if carry == 1 || rem >= c {
            rem = rem.wrapping_sub(c);
            q_lo |= 1;
        }
    }
    round_up_half(
        ((q_hi as u128) << 64) | q_lo as u128,
        rem as u128,
        c as u128,
    )
}

/// `q` or `q + 1` for the remainder `r` of a division by `c` (half up: 2r ≥ c, i.e. r ≥ c − r);
/// `None` when `q + 1` overflows.
const fn round_up_half(q: u128, r: u128, c: u128) -> Option<u128> {
    if r >= c - r {
        q.checked_add(1)
    } else {
        Some(q)
    }
}

/// Signed `a * b / c` rounded to nearest (ties away from zero).
///
/// `None` when `c == 0` or the quotient does not fit in `i128`. Work: one [`mul_div_u128`] (≤ 128
/// loop steps).
pub const fn mul_div_i128(a: i128, b: i128, c: i128) -> Option<i128> {
    let negative = (a < 0) ^ (b < 0) ^ (c < 0);
    let q = match mul_div_u128(a.unsigned_abs(), b.unsigned_abs(), c.unsigned_abs()) {
        Some(q) => q,
        None => return None,
    };
    if q > i128::MAX as u128 {
        return None;
    }
    let q = q as i128;
    Some(if negative { -q } else { q })
}

/// Full 256-bit product of two u128 values as (high, low) halves.
const fn mul_wide(a: u128, b: u128) -> (u128, u128) {
    const MASK: u128 = u64::MAX as u128;
    if a >> 64 == 0 && b >> 64 == 0 {
        // Both below 2^64: the product fits 128 bits (the general sum below gives the same).
        return (0, a * b);
    }
    let (a1, a0) = (a >> 64, a & MASK);
    let (b1, b0) = (b >> 64, b & MASK);
    let p00 = a0 * b0;
    let p01 = a0 * b1;
    let p10 = a1 * b0;
    let p11 = a1 * b1;
    // Middle column: each term < 2^128, so sum the pieces that share a 64-bit position explicitly.
    let mid = (p00 >> 64) + (p01 & MASK) + (p10 & MASK);
    let lo = (p00 & MASK) | (mid << 64);
    let hi = p11 + (p01 >> 64) + (p10 >> 64) + (mid >> 64);
    (hi, lo)
}

/// The bit-by-bit floor square root of `$x` in `$t`, from the highest bit pair that can be set (small
/// arguments skip most steps): one body for the three widths below, each as fast as written out.
macro_rules! bitwise_isqrt {
    ($x:expr, $t:ty) => {
        bitwise_isqrt!($x, $t, 1 << (<$t>::BITS - 2))
    };
    // From a known start bit (a power of four no higher than needed).
    ($x:expr, $t:ty, $start:expr) => {{
        let mut rem: $t = $x;
        let mut root: $t = 0;
        let mut bit: $t = $start;
        while bit > rem {
            bit >>= 2;
        }
        while bit > 0 {
            if rem >= root + bit {
                rem -= root + bit;
                root = (root >> 1) + bit;
            } else {
                root >>= 1;
            }
            bit >>= 2;
        }
        root
    }};
}

/// Floor square root of a u128 (at most 64 steps; in u64 below 2^64, the same root).
pub const fn isqrt_u128(x: u128) -> u128 {
    if x >> 64 == 0 {
        return isqrt_u64(x as u64) as u128;
    }
    bitwise_isqrt!(x, u128)
}

/// Floor square root of a u64 (at most 32 steps; in u32 below 2^32, the same root).
const fn isqrt_u64(x: u64) -> u64 {
    if x >> 32 == 0 {
        return isqrt_u32(x as u32) as u64;
    }
    bitwise_isqrt!(x, u64)
}

/// Floor square root of a u32 (at most 16 steps: a 64-bit step is several instructions on a
/// 32-bit core), from the highest bit pair set, found by a leading-zero count rather than by
/// stepping down to it. Out of line: inlined into the wider roots, the M0 build kept one of its three
/// words on the stack (three of a step's 11 instructions were loads and stores).
#[inline(never)]
const fn isqrt_u32(x: u32) -> u32 {
    if x == 0 {
        return 0;
    }
    bitwise_isqrt!(x, u32, 1 << ((31 - leading_zeros_u32(x)) & !1))
}

/// Leading zeros of every byte value (`CLZ8[0]` = 8), built at compile time.
const CLZ8: [u8; 256] = {
    let mut t = [8u8; 256];
    let mut i = 1;
    while i < 256 {
        t[i] = (i as u8).leading_zeros() as u8;
        i += 1;
    }
    t
};

/// `v.leading_zeros()` by two compares and a byte table (~12 instructions, 256 B of flash): the
/// Cortex-M0 has no count-leading-zeros instruction, the library routine it calls takes ~35, and
/// five compare-and-shift steps took ~20 — and the fits' weights count one per window pixel.
/// Out of line: it is called from many places, and a call costs four instructions.
#[inline(never)]
pub const fn leading_zeros_u32(v: u32) -> u32 {
    let (n, top) = if v >= 1 << 16 {
        if v >= 1 << 24 {
            (0, v >> 24)
        } else {
            (8, v >> 16)
        }
    } else if v >= 1 << 8 {
        (16, v >> 8)
    } else {
        (24, v)
    };
    // `top` < 256 on every branch; the mask lets the compiler see it (no bounds check).
    n + CLZ8[(top & 0xff) as usize] as u32
}

/// Divides rounding to nearest (ties up); `None` for a zero divisor.
pub const fn div_round_u128(a: u128, b: u128) -> Option<u128> {
    if b == 0 {
        return None;
    }
    let q = a / b;
    let r = a - q * b;
    if r >= b - r {
        Some(q + 1)
    } else {
        Some(q)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The bit-by-bit root at full width, for checking the narrowed ones.
    fn wide_root(x: u128) -> u128 {
        let (mut lo, mut hi) = (0u128, 1u128 << 64);
        while lo + 1 < hi {
            let mid = (lo + hi) / 2;
            if mid * mid <= x {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        lo
    }

    #[test]
    fn root_of_a_u32_is_the_wide_root() {
        let mut next = crate::test_rng::xorshift(0x2718_2818_2845_9045u64);
        for _ in 0..100_000 {
            let seed = next();
            let v = (seed >> (32 + seed % 32)) as u32;
            assert_eq!(u128::from(isqrt_u32(v)), wide_root(u128::from(v)), "{v}");
        }
        for v in [
            0u32,
            1,
            2,
            3,
            4,
            15,
            16,
            17,
            u32::MAX,
            u32::MAX - 1,
            65_535 * 65_535,
        ] {
            assert_eq!(u128::from(isqrt_u32(v)), wide_root(u128::from(v)), "{v}");
        }
        // Both sides of every perfect square: where a root's last bit is decided.
        for k in 1u32..=65_535 {
            let sq = k * k;
            assert_eq!(isqrt_u32(sq), k, "{sq}");
            assert_eq!(isqrt_u32(sq - 1), k - 1, "{}", sq - 1);
        }
    }

    #[test]
    fn mul_div_matches_narrow_arithmetic() {
        let cases: [(u128, u128, u128); 5] = [
            (7, 11, 3),
            (u64::MAX as u128, u64::MAX as u128, 12345),
            (1 << 100, 1 << 100, 1 << 90),
            (123_456_789_012_345, 987_654_321, 1_000_000_007),
            (5, 1, 2),
        ];
        for (a, b, c) in cases {
            // Reference through the wide product: hi/lo recombination for values that fit.
            let got = mul_div_u128(a, b, c).unwrap();
            let (hi, lo) = mul_wide(a, b);
            if hi == 0 {
                let q = lo / c;
                let r = lo % c;
                let want = if 2 * r >= c { q + 1 } else { q };
                assert_eq!(got, want, "{a}*{b}/{c}");
            } else {
                // (2^200)/(2^90) = 2^110.
                assert_eq!(got, 1u128 << 110);
            }
        }
        assert_eq!(mul_div_u128(1, 1, 0), None);
        assert_eq!(mul_div_u128(u128::MAX, u128::MAX, 1), None);
        assert_eq!(
            mul_div_u128(u128::MAX, u128::MAX, u128::MAX),
            Some(u128::MAX)
        );
    }

    /// The plain 128-step long division (and 4-product multiply), as `mul_div_u128` first was.
    fn reference_mul_div(a: u128, b: u128, c: u128) -> Option<u128> {
        if c == 0 {
            return None;
        }
        const MASK: u128 = u64::MAX as u128;
        let (a1, a0) = (a >> 64, a & MASK);
        let (b1, b0) = (b >> 64, b & MASK);
        let (p00, p01, p10, p11) = (a0 * b0, a0 * b1, a1 * b0, a1 * b1);
        let mid = (p00 >> 64) + (p01 & MASK) + (p10 & MASK);
        let lo = (p00 & MASK) | (mid << 64);
        let hi = p11 + (p01 >> 64) + (p10 >> 64) + (mid >> 64);
        if hi >= c {
            return None;
        }
        let mut rem = hi;
        let mut q: u128 = 0;
        for i in (0..128).rev() {
            let carry = rem >> 127;
            rem = (rem << 1) | ((lo >> i) & 1);
            if carry == 1 || rem >= c {
                rem = rem.wrapping_sub(c);
                q |= 1 << i;
            }
        }
        if rem >= c - rem {
            q.checked_add(1)
        } else {
            Some(q)
        }
    }

    #[test]
    fn every_division_path_gives_the_long_divisions_result() {
        let mut next = crate::test_rng::xorshift(0x9e37_79b9_7f4a_7c15u64);
        let mut wide = |bits: u32| -> u128 {
            let v = (u128::from(next()) << 64) | u128::from(next());
            if bits == 0 {
                0
            } else {
                v >> (128 - bits)
            }
        };
        let mut seen = [0u32; 5];
        for _ in 0..20_000 {
            let (ba, bb, bc) = (
                (wide(7) as u32) % 129,
                (wide(7) as u32) % 129,
                (wide(7) as u32) % 129,
            );
            let (a, b) = (wide(ba), wide(bb));
            let c = if bc % 5 == 0 {
                1u128 << (bc % 128)
            } else {
                wide(bc)
            };
            let want = reference_mul_div(a, b, c);
            assert_eq!(mul_div_u128(a, b, c), want, "{a} * {b} / {c}");
            let (hi, _) = mul_wide(a, b);
            if want.is_some() {
                let path = if c.is_power_of_two() {
                    0
                } else if c >> 64 == 0 {
                    1 + usize::from(hi != 0) * 3
                } else if hi == 0 {
                    2
                } else {
                    3
                };
                seen[path] += 1;
            }
        }
        assert!(seen.iter().all(|&n| n > 50), "paths exercised: {seen:?}");
        // Hand-picked edges: quotient just fits, ties, divisors next to 2^64.
        for (a, b, c) in [
            (u128::MAX, u128::MAX, u128::MAX),
            (u128::MAX, 3, 4),
            (1 << 64, 1 << 64, (1 << 64) + 1),
            (u64::MAX as u128, u64::MAX as u128, u64::MAX as u128 - 1),
            (5, 1, 2),
            (7, 1, 2),
        ] {
            assert_eq!(mul_div_u128(a, b, c), reference_mul_div(a, b, c));
        }
    }

    #[test]
    fn isqrt_and_div_round_agree_across_the_u64_boundary() {
        for x in [
            (1u128 << 64) - 1,
            1 << 64,
            (1 << 64) + 1,
            u64::MAX as u128 * u64::MAX as u128,
            (1 << 62) + 12_345,
        ] {
            let r = isqrt_u128(x);
            assert!(
                r * r <= x && (r + 1).checked_mul(r + 1).is_none_or(|s| s > x),
                "{x}"
            );
        }
        assert_eq!(div_round_u128(7, 2), Some(4));
        assert_eq!(div_round_u128(5, 3), Some(2));
        assert_eq!(div_round_u128(4, 3), Some(1));
    }

    #[test]
    fn signed_mul_div_rounds_symmetrically() {
        assert_eq!(mul_div_i128(-5, 1, 2), Some(-3));
        assert_eq!(mul_div_i128(5, -1, 2), Some(-3));
        assert_eq!(mul_div_i128(-5, -1, 2), Some(3));
    }

    #[test]
    fn isqrt_is_floor_root() {
        for x in [
            0u128,
            1,
            2,
            3,
            4,
            15,
            16,
            17,
            1 << 100,
            u128::MAX,
            999_999_999_999,
        ] {
            let r = isqrt_u128(x);
            assert!(r * r <= x);
            let r1 = r + 1;
            assert!(r1.checked_mul(r1).is_none_or(|s| s > x), "{x}");
        }
    }
}
