//! All lines of one nucleus inside a wavelength window, in ascending vacuum wavelength.
//!
//! Each series m (lower level) is monotone — its lines get longer as the upper level n falls — so a
//! merge of the series heads yields the window sorted with no buffer beyond one slot per series.
use super::air::Air;
use super::constants::{MAX_N, RYDBERG_PER_M_E6};
use super::error::PredictError;
use super::line::{line, Line};
use super::nucleus::Nucleus;
use crate::fixed::mul_div_u128;

const SERIES: usize = MAX_N as usize - 1;

/// Iterator over the lines of a nucleus with vacuum wavelength in [from, to] fm; see [`Lines::new`].
pub struct Lines {
    nucleus: Nucleus,
    air: Air,
    from_fm: u64,
    to_fm: u64,
    /// Next upper level to look at in series m = index + 1; 0 once the series has left the window.
    next_upper: [u8; SERIES],
    /// Vacuum wavelength of that series' current head in the window, 0 when not yet known.
    head_fm: [u64; SERIES],
    /// The head's wavenumber and photon energy, kept with it: the line is emitted from these and
    /// its air wavelength, not predicted a second time (half of a configure's work).
    head_nk: [u64; SERIES],
    head_nev: [u64; SERIES],
    failed: bool,
}

impl Lines {
    /// Lines of `nucleus` (all 1 ≤ m < n ≤ 40) with vacuum wavelength in `from_fm ..= to_fm`, sorted by
    /// vacuum wavelength; air values per `air`.
    ///
    /// Work: every line in the window is predicted twice; lines outside it are mostly skipped by a
    /// Bohr estimate, at most 780 such estimates per full pass. Each `next()` looks at the heads of all
    /// 39 series; a full pass yields ≤ 780 lines.
    pub fn new(
        nucleus: Nucleus,
        from_fm: u64,
        to_fm: u64,
        air: &Air,
    ) -> Result<Lines, PredictError> {
        if to_fm < from_fm {
            return Err(PredictError::InvertedWindow);
        }
        Ok(Lines {
            nucleus,
            air: *air,
            from_fm,
            to_fm,
            next_upper: [MAX_N; SERIES],
            head_fm: [0; SERIES],
            head_nk: [0; SERIES],
            head_nev: [0; SERIES],
            failed: false,
        })
    }

    /// Finds the head of series `idx` inside the window (or retires the series).
    fn settle(&mut self, idx: usize) -> Result<(), PredictError> {
        let m = idx as u8 + 1;
        loop {
            let Some(&n) = self.next_upper.get(idx) else {
                return Ok(());
            };
            if n <= m || self.head_fm.get(idx).copied().unwrap_or(0) != 0 {
                return Ok(());
            }
            let retire = |s: &mut Lines| {
                if let Some(u) = s.next_upper.get_mut(idx) {
                    *u = 0;
                }
            };
            // A series whose longest line (n = m + 1) falls short of half the window's start lies
            // wholly below it: retired on that one estimate instead of one per upper level (every
            // one of them would be skipped below; a Lyman series under a visible window is 39).
            if n == MAX_N {
                let longest = bohr_fm(self.nucleus, m, m + 1).ok_or(PredictError::Overflow)?;
                if longest / 1000 * 1004 < self.from_fm / 2 {
                    retire(self);
                    return Ok(());
                }
            }
            // Fine structure and recoil move a line by < 0.4 % from the Bohr value (Z ≤ 8).
            let bohr = bohr_fm(self.nucleus, m, n).ok_or(PredictError::Overflow)?;
            if bohr / 1000 * 1004 < self.from_fm {
                self.step_down(idx);
                continue;
            }
            if bohr / 1000 * 996 > self.to_fm {
                retire(self);
                return Ok(());
            }
            let l = line(self.nucleus, m, n, &Air::Vacuum)?;
            if l.vacuum_fm < self.from_fm {
                self.step_down(idx);
            } else if l.vacuum_fm > self.to_fm {
                retire(self);
                return Ok(());
            } else if let (Some(h), Some(k), Some(e)) = (
                self.head_fm.get_mut(idx),
                self.head_nk.get_mut(idx),
                self.head_nev.get_mut(idx),
            ) {
                (*h, *k, *e) = (l.vacuum_fm, l.wavenumber_nk, l.energy_nev);
                return Ok(());
            }
        }
    }

    fn step_down(&mut self, idx: usize) {
        if let Some(u) = self.next_upper.get_mut(idx) {
            *u = u.saturating_sub(1);
        }
        if let Some(h) = self.head_fm.get_mut(idx) {
            *h = 0;
        }
    }
}

/// Bohr wavelength with reduced mass, fm: n² m² (1 + mₑ/M) / (R∞ Z² (n² − m²)).
fn bohr_fm(nucleus: Nucleus, m: u8, n: u8) -> Option<u64> {
    let (m2, n2) = ((m as u128) * (m as u128), (n as u128) * (n as u128));
    let z2 = (nucleus.z() as u128) * (nucleus.z() as u128);
    let r = nucleus.mass_ratio_e9() as u128;
    // 1/R∞ in fm: 10^15 · 10^6 / R_e6.
    let a = mul_div_u128(
        n2 * m2 * 1_000_000_000_000_000_000_000,
        r + 1_000_000_000,
        r,
    )?;
    let fm = a.checked_div(RYDBERG_PER_M_E6 * z2 * n2.checked_sub(m2)?)?;
    u64::try_from(fm).ok()
}

impl Iterator for Lines {
    type Item = Result<Line, PredictError>;

    fn next(&mut self) -> Option<Self::Item> {
        if self.failed {
            return None;
        }
        let mut best: Option<(usize, u64)> = None;
        for idx in 0..SERIES {
            if let Err(e) = self.settle(idx) {
                self.failed = true;
                return Some(Err(e));
            }
            let h = self.head_fm.get(idx).copied().unwrap_or(0);
            if h != 0 && best.is_none_or(|(_, b)| h < b) {
                best = Some((idx, h));
            }
        }
        let (idx, vacuum_fm) = best?;
        let m = idx as u8 + 1;
        let n = self.next_upper.get(idx).copied().unwrap_or(0);
        // What `line(nucleus, m, n, air)` gives: only the air wavelength depends on the medium.
        let out = Line {
            nucleus: self.nucleus,
            lower: m,
            upper: n,
            vacuum_fm,
            air_fm: self.air.air_wavelength_fm(vacuum_fm),
            wavenumber_nk: self.head_nk.get(idx).copied().unwrap_or(0),
            energy_nev: self.head_nev.get(idx).copied().unwrap_or(0),
        };
        self.step_down(idx);
        Some(Ok(out))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn visible_hydrogen_is_the_balmer_series_in_order() {
        let got: heapless::Vec<(u8, u8), 64> =
            Lines::new(Nucleus::H1, 380_000_000, 700_000_000, &Air::Standard)
                .unwrap()
                .map(|l| {
                    let l = l.unwrap();
                    (l.lower, l.upper)
                })
                .collect();
        // Balmer lines from Hα (656 nm) down to H9 (383.6 nm vacuum); H10 lies at 379.9 nm.
        assert_eq!(got.first(), Some(&(2, 9)));
        assert_eq!(got.last(), Some(&(2, 3)));
        assert!(got.iter().all(|&(m, _)| m == 2));
    }

    #[test]
    fn window_is_sorted_and_complete() {
        // Wide, visible (whole series retired at once below it), and far-UV windows (Lyman inside).
        for (nu, from, to) in [
            (Nucleus::He4, 100_000_000, 2_000_000_000),
            (Nucleus::H1, 360_000_000, 720_000_000),
            (Nucleus::H2, 90_000_000, 130_000_000),
            (Nucleus::He4, 250_000_000, 700_000_000),
        ] {
            let lines = Lines::new(nu, from, to, &Air::Vacuum).unwrap();
            let mut last = 0;
            let mut count = 0;
            for l in lines {
                let l = l.unwrap();
                assert!(l.vacuum_fm >= last);
                last = l.vacuum_fm;
                count += 1;
            }
            let mut direct = 0;
            for m in 1..40u8 {
                for n in m + 1..=40 {
                    let v = line(nu, m, n, &Air::Vacuum).unwrap().vacuum_fm;
                    if (from..=to).contains(&v) {
                        direct += 1;
                    }
                }
            }
            assert_eq!(count, direct, "{nu:?} {from}..{to}");
            assert!(count > 0);
        }
    }

    /// Each line the window yields is the one `line` predicts for it in the same medium.
    #[test]
    fn window_lines_equal_direct_predictions() {
        for (nu, air) in [
            (Nucleus::H1, Air::Standard),
            (Nucleus::H2, Air::Standard),
            (Nucleus::He4, Air::Vacuum),
        ] {
            let mut count = 0;
            for l in Lines::new(nu, 90_000_000, 1_900_000_000, &air).unwrap() {
                let l = l.unwrap();
                assert_eq!(l, line(nu, l.lower, l.upper, &air).unwrap());
                count += 1;
            }
            assert!(count > 10, "{nu:?}: {count}");
        }
    }

    #[test]
    fn inverted_window_is_refused() {
        assert!(matches!(
            Lines::new(Nucleus::H1, 2, 1, &Air::Vacuum),
            Err(PredictError::InvertedWindow)
        ));
    }
}
