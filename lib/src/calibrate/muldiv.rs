//! Rounded a · b / c for the map fit, through 64-bit arithmetic when the operands allow.
//!
//! The fit's weights and χ² terms are small products divided by small numbers: on a core without a
//! divide instruction the 256-bit route of [`mul_div_i128`] costs several times a 64-bit division.
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
        let (q, r) = (n / d, n % d);
        // Half up, as the wide routine: 2r ≥ d. q + 1 ≤ n stays in u64 (r > 0 means d ≥ 2).
        let q = if r >= d - r { q + 1 } else { q } as i128;
        return Some(if negative { -q } else { q });
    }
    mul_div_i128(a, b, c)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn narrow_route_gives_the_wide_quotients() {
        let mut seed = 0x1234_5678_9abc_def1u64;
        let mut next = move || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            seed
        };
        let mut narrow = 0;
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
            let (a, b, c) = if next() % 8 == 0 && c.unsigned_abs() >= 2 && c % 2 == 0 {
                (c / 2 * (2 * (next() % 1000) as i128 + 1), 1, c)
            } else {
                (a, b, c)
            };
            let bits = |v: i128| 128 - v.unsigned_abs().leading_zeros();
            narrow += usize::from(bits(a) + bits(b) <= 64 && bits(c) <= 64 && c != 0);
            assert_eq!(mul_div_round(a, b, c), mul_div_i128(a, b, c), "{a} {b} {c}");
        }
        assert!(narrow > 50_000, "{narrow}");
        assert_eq!(mul_div_round(5, 1, 0), None);
        assert_eq!(mul_div_round(3, 1, 2), Some(2));
        assert_eq!(mul_div_round(-3, 1, 2), Some(-2));
        assert_eq!(
            mul_div_round(u64::MAX as i128, 1, 1),
            Some(u64::MAX as i128)
        );
    }
}
