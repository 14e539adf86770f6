//! One spectral line n → m of a nucleus: the blend centroid of its fine-structure components.
//!
//! A linear-sensor instrument does not resolve fine structure, so a line is reported where its
//! components' photons land on average: each component n l j → m l' j' weighs S·σ³ (E1 line strength
//! times the cube of its wavenumber: upper levels populated in proportion to their degeneracy 2j+1, the
//! usual convention for unresolved hydrogen lines, counting photons as a sensor does). The centroid is
//! taken in vacuum wavelength; wavenumber and energy are the weighted mean of the components'.
use super::air::Air;
use super::component::{photon_weight, RawComponents};
use super::error::PredictError;
use super::nucleus::Nucleus;
use super::units::{energy_nev, wavelength_fm, wavenumber_nk};
use crate::fixed::mul_div_i128;

/// A predicted line.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Line {
    /// Emitting nucleus.
    pub nucleus: Nucleus,
    /// Lower principal quantum number m.
    pub lower: u8,
    /// Upper principal quantum number n.
    pub upper: u8,
    /// Blend-centroid vacuum wavelength, femtometres (10⁻⁶ nm).
    pub vacuum_fm: u64,
    /// Air wavelength of the centroid, femtometres; `None` in vacuum mode or below 200 nm.
    pub air_fm: Option<u64>,
    /// Vacuum wavenumber, nanokayser (10⁻⁹ cm⁻¹).
    pub wavenumber_nk: u64,
    /// Photon energy, nano-electronvolts.
    pub energy_nev: u64,
}

/// Predicts the line `upper` → `lower` of `nucleus`.
///
/// Work: one pass over at most 3 (2·lower − 1) ≤ 231 components; about 2 (upper + lower) level energies.
pub fn line(nucleus: Nucleus, lower: u8, upper: u8, air: &Air) -> Result<Line, PredictError> {
    const OVERFLOW: PredictError = PredictError::Overflow;
    // Offsets from the first component keep the weighted sums small: w < 2^51, |Δλ| < 2^40 fm,
    // |Δε| < 2^70, at most 231 terms.
    let mut reference: Option<(u128, i128)> = None;
    let (mut sum_w, mut sum_dfm, mut sum_dgap): (i128, i128, i128) = (0, 0, 0);
    for raw in RawComponents::new(nucleus, lower, upper)? {
        let raw = raw?;
        let (ref_gap, ref_fm) = match reference {
            Some(r) => r,
            None => {
                let r = (raw.gap_q80, wavelength_fm(raw.gap_q80)? as i128);
                reference = Some(r);
                r
            }
        };
        let w = photon_weight(&raw, ref_gap)? as i128;
        let dfm = wavelength_fm(raw.gap_q80)? as i128 - ref_fm;
        let dgap = raw.gap_q80 as i128 - ref_gap as i128;
        sum_w = sum_w.checked_add(w).ok_or(OVERFLOW)?;
        sum_dfm = sum_dfm
            .checked_add(w.checked_mul(dfm).ok_or(OVERFLOW)?)
            .ok_or(OVERFLOW)?;
        sum_dgap = sum_dgap
            .checked_add(w.checked_mul(dgap).ok_or(OVERFLOW)?)
            .ok_or(OVERFLOW)?;
    }
    let (ref_gap, ref_fm) = reference.ok_or(OVERFLOW)?;
    let vacuum = ref_fm + mul_div_i128(sum_dfm, 1, sum_w).ok_or(OVERFLOW)?;
    let vacuum_fm = u64::try_from(vacuum).map_err(|_| OVERFLOW)?;
    let gap = ref_gap as i128 + mul_div_i128(sum_dgap, 1, sum_w).ok_or(OVERFLOW)?;
    let wavenumber = wavenumber_nk(u128::try_from(gap).map_err(|_| OVERFLOW)?)?;
    Ok(Line {
        nucleus,
        lower,
        upper,
        vacuum_fm,
        air_fm: air.air_wavelength_fm(vacuum_fm),
        wavenumber_nk: wavenumber,
        energy_nev: energy_nev(wavenumber)?,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn balmer_alpha_of_h_and_d_sit_at_their_handbook_places() {
        // Handbook air wavelengths (blend peaks, good to a few pm; from memory): Hα 656.28, Dα 656.10 nm.
        let h = line(Nucleus::H1, 2, 3, &Air::Standard).unwrap();
        let d = line(Nucleus::H2, 2, 3, &Air::Standard).unwrap();
        assert!(h.air_fm.unwrap().abs_diff(656_280_000) < 10_000, "{h:?}");
        assert!(d.air_fm.unwrap().abs_diff(656_100_000) < 10_000, "{d:?}");
        // Wavenumber and wavelength describe the same line: σ λ = 1 to 1e-9.
        let prod = h.wavenumber_nk as u128 * h.vacuum_fm as u128; // nK·fm = 1e-9 cm⁻¹ · 1e-13 cm
        let one = 10u128.pow(22);
        assert!(prod.abs_diff(one) < one / 100_000_000, "{prod}");
    }

    #[test]
    fn bad_pairs_are_refused() {
        assert_eq!(
            line(Nucleus::H1, 3, 3, &Air::Vacuum),
            Err(PredictError::UpperNotAboveLower)
        );
        assert_eq!(
            line(Nucleus::H1, 3, 2, &Air::Vacuum),
            Err(PredictError::UpperNotAboveLower)
        );
        assert_eq!(
            line(Nucleus::H1, 0, 2, &Air::Vacuum),
            Err(PredictError::LevelOutOfRange)
        );
        assert_eq!(
            line(Nucleus::H1, 2, 41, &Air::Vacuum),
            Err(PredictError::LevelOutOfRange)
        );
    }

    #[test]
    fn every_line_of_every_nucleus_is_predicted() {
        for nu in Nucleus::ALL {
            for m in 1..40u8 {
                let mut last = 0;
                for n in (m + 1..=40u8).rev() {
                    let l = line(nu, m, n, &Air::Standard).unwrap();
                    assert!(l.vacuum_fm > last, "{nu:?} {m} {n}");
                    last = l.vacuum_fm;
                }
            }
        }
    }
}
