//! Relative strengths of the fine-structure components of one n → m transition.
//!
//! Each component n l j → m l' j' gets S = (2j+1)(2j'+1){l j ½; j' l' 1}² · max(l, l') · R²(nl → ml'),
//! the electric-dipole line strength. The radial part R² comes from a generated table of exact values
//! for upper n ≤ 16 ([`EXACT_MAX_N`]); the angular part is a closed form (below).
//!
//! Approximation above n = 16, for the component list only: the row of n = 16 stands in for any higher
//! upper level whose lower level is below 16, and for lower levels of 16 and above every channel gets
//! max(l, l') alone. The shares of such components can be off by several times (the exact ones pile
//! onto the high-l channels); the line centroid does not use them (see [`line`](super::line())), it
//! comes from exact per-line moments for every n ≤ 40.
use super::strength_table::{CHANNEL_WEIGHT, EXACT_MAX_N, ROW_START};

/// One E1 channel of an n → m transition: upper l, lower l', relative radial strength.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Channel {
    /// Orbital quantum number of the upper level.
    pub upper_l: u8,
    /// Orbital quantum number of the lower level.
    pub lower_l: u8,
    /// max(l, l') · R², scaled so the strongest channel of the row is about 65535.
    pub weight: u16,
}

/// Iterates the channels of n → m (m < n) in table order: lower l' ascending, upper l = l'−1 then l'+1.
/// At most 2m − 1 items.
pub(crate) struct Channels {
    upper: u8,
    lower: u8,
    row: Option<usize>,
    lower_l: u8,
    step: u8,
    index: usize,
}

impl Channels {
    pub(crate) fn new(upper: u8, lower: u8) -> Channels {
        let row_n = if upper > EXACT_MAX_N {
            EXACT_MAX_N
        } else {
            upper
        };
        let row = if lower < row_n {
            let n = row_n as usize;
            ROW_START
                .get((n - 1) * (n - 2) / 2 + (lower as usize - 1))
                .map(|&s| s as usize)
        } else {
            None
        };
        Channels {
            upper,
            lower,
            row,
            lower_l: 0,
            step: 0,
            index: 0,
        }
    }
}

impl Iterator for Channels {
    type Item = Channel;

    fn next(&mut self) -> Option<Channel> {
        // Bounded: lower_l < lower ≤ 39, two steps each.
        while self.lower_l < self.lower {
            let k = self.lower_l;
            let candidate = if self.step == 0 {
                k.checked_sub(1)
            } else {
                Some(k + 1)
            };
            self.step += 1;
            if self.step == 2 {
                self.step = 0;
                self.lower_l += 1;
            }
            let Some(l) = candidate else { continue };
            if l >= self.upper {
                continue;
            }
            let weight = match self.row {
                Some(start) => {
                    let w = CHANNEL_WEIGHT.get(start + self.index).copied().unwrap_or(0);
                    self.index += 1;
                    w
                }
                None => (if l > k { l } else { k }) as u16,
            };
            return Some(Channel {
                upper_l: l,
                lower_l: k,
                weight,
            });
        }
        None
    }
}

/// The fine-structure components of one l → l' channel: (2j upper, 2j lower, share numerator).
///
/// With L = max(l, l') the three doublet components have strengths (2L+2)(2L−1), 2 and (2L+1)(2L−2)
/// out of 2(2L−1)(2L+1) — from the sum rules on (2j+1); equal to the 6j form. Entries with share 0
/// (L = 1 has only two components) are omitted by the caller.
pub(crate) fn angular_components(upper_l: u8, lower_l: u8) -> ([(u8, u8, u32); 3], u32) {
    let big = if upper_l > lower_l { upper_l } else { lower_l } as u32;
    let two_l = (2 * big) as u8;
    let x = (2 * big + 2) * (2 * big - 1);
    let y = 2;
    let z = (2 * big + 1) * (2 * big - 2);
    let total = 2 * (2 * big - 1) * (2 * big + 1);
    let comps = if upper_l > lower_l {
        [
            (two_l + 1, two_l - 1, x),
            (two_l - 1, two_l - 1, y),
            (two_l - 1, two_l.saturating_sub(3), z),
        ]
    } else {
        [
            (two_l - 1, two_l + 1, x),
            (two_l - 1, two_l - 1, y),
            (two_l.saturating_sub(3), two_l - 1, z),
        ]
    };
    (comps, total)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn channel_counts_follow_dipole_rules() {
        // 3 → 2: 3p→2s, 3s→2p, 3d→2p.
        let c: heapless::Vec<Channel, 8> = Channels::new(3, 2).collect();
        assert_eq!(c.len(), 3);
        assert_eq!((c[0].upper_l, c[0].lower_l), (1, 0));
        assert_eq!((c[1].upper_l, c[1].lower_l), (0, 1));
        assert_eq!((c[2].upper_l, c[2].lower_l), (2, 1));
        // 2 → 1: only 2p → 1s.
        assert_eq!(Channels::new(2, 1).count(), 1);
        // 40 → 39: 2·39 − 1 channels (l' = 0 has no l = −1).
        assert_eq!(Channels::new(40, 39).count(), 77);
    }

    #[test]
    fn balmer_alpha_channel_ratios_match_published_gf() {
        // gA ∝ S σ³ and σ is common: S(3d→2p) / S(3p→2s) = g A ratio = (10 × 6.465e7) / (6 × 2.245e7)
        // = 4.80 (Einstein A of H from Wiese & Fuhr 2009, J. Phys. Chem. Ref. Data 38, 565; from memory).
        let c: heapless::Vec<Channel, 8> = Channels::new(3, 2).collect();
        let ratio_e2 = c[2].weight as u32 * 100 / c[0].weight as u32;
        assert!((475..=485).contains(&ratio_e2), "{ratio_e2}");
    }

    #[test]
    fn doublet_shares_are_the_textbook_ones() {
        // D → P: 9 : 1 : 5 (2D5/2→2P3/2, 2D3/2→2P3/2, 2D3/2→2P1/2).
        let (c, t) = angular_components(2, 1);
        assert_eq!(c, [(5, 3, 18), (3, 3, 2), (3, 1, 10)]);
        assert_eq!(t, 30);
        // S → P: 2P3/2 gets 2/3, 2P1/2 1/3; the third entry is empty.
        let (c, t) = angular_components(0, 1);
        assert_eq!(c[0], (1, 3, 4));
        assert_eq!(c[1], (1, 1, 2));
        assert_eq!(c[2].2, 0);
        assert_eq!(t, 6);
    }
}
