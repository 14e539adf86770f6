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

/// e^(−x) for `x` in Q16 (x ≥ 0; negative x is taken as 0), result in Q30.
///
/// Range reduction to 2^(−k)·e^(−t) with t < ln 2, then a degree-10 alternating Taylor series
/// (truncation < 7e-9, below one Q30 step above 2^-27). Loop bound: 10 terms. Results below 2^-30 are 0.
pub fn exp_neg_q16(x_q16: i64) -> i64 {
    if x_q16 <= 0 {
        return ONE_Q30;
    }
    // Beyond e^-21 the value is below one Q30 step.
    if x_q16 >= 21 << 16 {
        return 0;
    }
    // y = x · log2(e) in Q30; x < 2^21 so the product stays below 2^52.
    let y_q30 = (x_q16 * LOG2E_Q30) >> 16;
    let k = y_q30 >> 30;
    let f_q30 = y_q30 & (ONE_Q30 - 1);
    // t = f · ln 2 in Q30, t < ln 2.
    let t = (f_q30 * LN2_Q30) >> 30;
    let mut p = ONE_Q30;
    for n in (1..=10i64).rev() {
        p = ONE_Q30 - ((t * p) >> 30) / n;
    }
    if k >= 62 {
        0
    } else {
        p >> k
    }
}

pub use crate::fixed::isqrt_u128;

/// Floor of the square root of a non-negative `i64` (negative inputs give 0).
pub fn isqrt_i64(v: i64) -> i64 {
    if v <= 0 {
        0
    } else {
        isqrt_u128(v as u128) as i64
    }
}

/// `num / den` rounded half away from zero; 0 when `den` is 0. `den` may be negative.
pub fn div_round_i128(num: i128, den: i128) -> i128 {
    if den == 0 {
        return 0;
    }
    let (num, den) = if den < 0 {
        (num.saturating_neg(), -den)
    } else {
        (num, den)
    };
    // `checked_div` rather than `/`: the compiler cannot see that `den` is now > 0 (−i128::MIN wraps),
    // and a plain division would keep a panic path.
    let q = |n: i128| n.saturating_add(den / 2).checked_div(den).unwrap_or(0);
    if num >= 0 {
        q(num)
    } else {
        q(num.saturating_neg()).saturating_neg()
    }
}

/// `num / den` rounded half away from zero for `i64`; 0 when `den` is 0.
pub fn div_round_i64(num: i64, den: i64) -> i64 {
    div_round_i128(i128::from(num), i128::from(den)) as i64
}

/// Clamps an `i128` into `i64`.
pub fn clamp_i64(v: i128) -> i64 {
    v.clamp(i128::from(i64::MIN), i128::from(i64::MAX)) as i64
}

/// Clamps an `i64` into `i32`.
pub fn clamp_i32(v: i64) -> i32 {
    v.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32
}

#[cfg(test)]
mod tests {
    use super::*;

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
    fn rounding_division() {
        assert_eq!(div_round_i64(5, 2), 3);
        assert_eq!(div_round_i64(-5, 2), -3);
        assert_eq!(div_round_i64(4, 3), 1);
        assert_eq!(div_round_i64(5, -2), -3);
        assert_eq!(div_round_i64(7, 0), 0);
        assert_eq!(clamp_i32(i64::MAX), i32::MAX);
    }
}
