//! The frame-constant part of the conditioning arithmetic, reduced once per frame.
//!
//! Every output pixel is round(x · K / D): x is a per-pixel integer, K / D is fixed for the frame
//! (exposures, co-add counts, Q14 factors that are exactly 1.0). Reduced to lowest terms once, K / D
//! is `1 / 1` in the common case (one readout, output at the actual exposure), so the per-pixel work is
//! a multiply and a shift instead of a 128-bit division. The rounding of the same rational number does
//! not change, so the results are the same integers as through the full-width division.

/// How the reduced denominator is applied.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Divide {
    /// A power of two, 2^k (k = 0 for none): an add and a shift.
    Shift(u32),
    /// Any other positive divisor (< 2^62).
    By(i64),
}

/// K / D in lowest terms (both > 0).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Reduced {
    num: u128,
    den: u128,
}

impl Reduced {
    /// Reduces `num / den`; `None` for a zero denominator.
    ///
    /// Loop bound: 128 steps for the powers of two of each, then Euclid on the odd parts, which fit
    /// `u64` for conditioning's constants (else the fraction is kept as it is, still exact).
    pub(crate) fn new(num: u128, den: u128) -> Option<Reduced> {
        if den == 0 {
            return None;
        }
        if num == 0 {
            return Some(Reduced { num: 0, den: 1 });
        }
        let twos = num.trailing_zeros().min(den.trailing_zeros());
        let (num, den) = (num >> twos, den >> twos);
        let (Ok(a), Ok(b)) = (u64::try_from(num), u64::try_from(den)) else {
            return Some(Reduced { num, den });
        };
        let g = gcd(a, b).max(1);
        Some(Reduced {
            num: u128::from(a / g),
            den: u128::from(b / g),
        })
    }

    /// The per-pixel plan in `i64` when every |x| ≤ `x_max` keeps x · K and the rounding term below
    /// 2^62; `None` when only 128-bit arithmetic is safe.
    pub(crate) fn narrow(&self, x_max: u128) -> Option<Narrow> {
        const LIMIT: u128 = 1 << 62;
        let y_max = x_max.checked_mul(self.num)?;
        if y_max >= LIMIT || x_max >= LIMIT || self.den >= LIMIT || self.num >= LIMIT {
            return None;
        }
        let divide = if self.den.is_power_of_two() {
            Divide::Shift(self.den.trailing_zeros())
        } else {
            Divide::By(self.den as i64)
        };
        Some(Narrow {
            k: self.num as i64,
            y_max: y_max as i64,
            divide,
        })
    }
}

/// round(x · K / D), half away from zero, in `i64` for |x| within the bound it was made for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Narrow {
    /// K (reduced).
    k: i64,
    /// Largest |x · K| (< 2^62).
    y_max: i64,
    divide: Divide,
}

impl Narrow {
    /// The value for pixel integer `x` (|x| within the bound given to [`Reduced::narrow`]).
    pub(crate) fn apply(&self, x: i64) -> i64 {
        self.round(x * self.k)
    }

    /// [`Self::apply`] for x that mostly fit 32 bits (dark-subtracted readouts, K a small exposure
    /// ratio): x · K from four 16 × 16-bit products where both factors fit `u32` instead of a 64-bit
    /// library multiply (|x · K| < 2^62 by the bound either way), the same value.
    pub(crate) fn apply_split(&self, x: i64) -> i64 {
        let y = match (u32::try_from(x.unsigned_abs()), u32::try_from(self.k)) {
            (Ok(a), Ok(k)) => {
                let m = crate::find::math::mul_u32_wide(a, k) as i64;
                if x < 0 {
                    -m
                } else {
                    m
                }
            }
            _ => x * self.k,
        };
        self.round(y)
    }

    /// y / D rounded half away from zero.
    #[inline(always)]
    fn round(&self, y: i64) -> i64 {
        match self.divide {
            Divide::Shift(k) => {
                let half = (1i64 << k) >> 1;
                if y >= 0 {
                    (y + half) >> k
                } else {
                    -((-y + half) >> k)
                }
            }
            // d ≥ 2 here; `checked_div` only keeps a panic path out of the image.
            Divide::By(d) => {
                if y >= 0 {
                    (y + d / 2).checked_div(d).unwrap_or(0)
                } else {
                    -(-y + d / 2).checked_div(d).unwrap_or(0)
                }
            }
        }
    }

    /// For non-negative x ≤ 65 535 with every result ≤ `i32::MAX`: (multiplier, add, shift) so that
    /// the value is `(x · multiplier + add) >> shift` in `u32`. The raw-readout fast path.
    pub(crate) fn unsigned_u16(&self) -> Option<(u32, u32, u32)> {
        let Divide::Shift(k) = self.divide else {
            return None;
        };
        let half = (1u64 << k) >> 1;
        let top = u64::from(u16::MAX)
            .checked_mul(u64::try_from(self.k).ok()?)?
            .checked_add(half)?;
        if top > u64::from(u32::MAX)
            || (top >> k) > i32::MAX as u64
            || i64::from(u16::MAX) * self.k > self.y_max
        {
            return None;
        }
        Some((self.k as u32, half as u32, k))
    }
}

/// Greatest common divisor (Euclid; at most ~92 steps for `u64`).
fn gcd(mut a: u64, mut b: u64) -> u64 {
    while let Some(r) = a.checked_rem(b) {
        a = b;
        b = r;
    }
    a
}

#[cfg(test)]
mod tests {
    use super::*;

    fn reference(x: i128, num: i128, den: i128) -> i128 {
        let n = x * num;
        if n >= 0 {
            (n + den / 2) / den
        } else {
            -((-n + den / 2) / den)
        }
    }

    #[test]
    fn reduced_plans_round_like_the_wide_division() {
        let fracs: [(u128, u128); 6] = [
            (16 << 28, 1 << 28),
            ((16 * 100_000) << 28, 100_000 << 28),
            ((16 * 2000) << 28, 500 << 28),
            ((16 * 7) << 28, (3 * 5) << 28),
            (16 << 14, (3 * 2) << 28),
            (1, 1 << 40),
        ];
        for (num, den) in fracs {
            let r = Reduced::new(num, den).unwrap();
            assert_eq!(r.num * den, num * r.den, "{num}/{den} kept its value");
            let n = r.narrow(1 << 20).unwrap();
            for x in [
                -1_048_576i64,
                -99_999,
                -7,
                -3,
                -1,
                0,
                1,
                2,
                3,
                5,
                77,
                65_535,
                1 << 20,
            ] {
                assert_eq!(
                    i128::from(n.apply(x)),
                    reference(x.into(), num as i128, den as i128),
                    "{x}·{num}/{den}"
                );
                assert_eq!(n.apply_split(x), n.apply(x), "{x}·{num}/{den}");
            }
            if let Some((m, add, sh)) = n.unsigned_u16() {
                for x in [0u32, 1, 2, 3, 4095, 65_535] {
                    assert_eq!(i64::from((x * m + add) >> sh), n.apply(x.into()));
                }
            }
        }
        // One readout at the actual exposure: a plain × 16.
        let r = Reduced::new((16 * 100_000) << 28, 100_000 << 28).unwrap();
        assert_eq!((r.num, r.den), (16, 1));
        assert_eq!(r.narrow(65_535).unwrap().unsigned_u16(), Some((16, 0, 0)));
    }

    /// The split product (both factors within 32 bits) and the plain one, either side of 2^32.
    #[test]
    fn products_either_side_of_32_bits_round_alike() {
        let fracs: [(u128, u128, u128); 5] = [
            (16, 1, 1 << 40),
            (16 * 7, 15, 1 << 40),
            ((1 << 32) - 1, 1 << 3, 1 << 29),
            ((1 << 32) + 3, 1 << 5, 1 << 29),
            ((1 << 33) + 1, 1_000_003, 1 << 28),
        ];
        for (num, den, x_max) in fracs {
            let r = Reduced::new(num, den).unwrap();
            let n = r.narrow(x_max).unwrap();
            let m = x_max as i64;
            for x in [
                0i64,
                1,
                -1,
                (1 << 32) - 1,
                1 << 32,
                (1 << 32) + 1,
                m,
                m - 1,
                12_345_678_901,
            ] {
                for x in [x.min(m), -x.min(m)] {
                    assert_eq!(n.apply_split(x), n.apply(x), "{x}·{num}/{den}");
                    assert_eq!(
                        i128::from(n.apply_split(x)),
                        reference(x.into(), num as i128, den as i128),
                        "{x}·{num}/{den}"
                    );
                }
            }
        }
    }

    #[test]
    fn too_wide_products_stay_on_the_wide_path() {
        let r = Reduced::new(1 << 40, 3).unwrap();
        assert_eq!(r.narrow(1 << 30), None);
        assert!(r.narrow(1 << 20).is_some());
        assert_eq!(Reduced::new(1, 0), None);
        assert_eq!(
            Reduced::new(0, 5)
                .unwrap()
                .narrow(1 << 61)
                .unwrap()
                .apply(9),
            0
        );
    }
}
