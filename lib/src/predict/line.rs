//! One spectral line n → m of a nucleus: the blend centroid of its fine-structure components.
//!
//! A linear-sensor instrument does not resolve fine structure, so a line is reported where its photons
//! land on average: the mean wavenumber of the components n l j → m l' j', each weighted by its E1 line
//! strength S (upper levels populated in proportion to their degeneracy, the usual convention for
//! unresolved hydrogen lines). To first order in the fine structure a level's energy is linear in
//! 1/(j+½), so that mean is the Dirac energy difference at each level's strength-weighted ⟨1/(j+½)⟩,
//! generated exactly for every n ≤ 40 ([`BLEND_INV_K`]). Left out: the next order of the Dirac energy
//! in 1/(j+½) and the σ³ photon-rate factor across components (each of relative size (Zα)² of the
//! fine-structure spread: 0.04 pm at most for O VIII, 10⁻³ pm for H), the Barker–Glover l-splitting,
//! and the difference between a wavelength- and a wavenumber-weighted mean (which reaches 0.5 pm only
//! for millimetre lines between high levels).
use super::air::Air;
use super::blend_table::BLEND_INV_K;
use super::error::PredictError;
use super::level::Atom;
use super::nucleus::Nucleus;
use super::units::check_pair;
use super::units::{energy_nev, wavelength_fm, wavenumber_nk};

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
/// Work: two level energies (a table look-up gives each level's effective j).
pub fn line(nucleus: Nucleus, lower: u8, upper: u8, air: &Air) -> Result<Line, PredictError> {
    check_pair(lower, upper)?;
    const OVERFLOW: PredictError = PredictError::Overflow;
    let atom = Atom::new(nucleus.z(), nucleus.mass_ratio_e9()).ok_or(OVERFLOW)?;
    let (n, m) = (upper as usize, lower as usize);
    let idx = (n - 1) * (n - 2) / 2 + (m - 1);
    let inv_k = |slot: usize| -> Result<u128, PredictError> {
        let a = BLEND_INV_K
            .get(2 * idx + slot)
            .copied()
            .filter(|&a| a > 0)
            .ok_or(OVERFLOW)?;
        // k_eff = 1 / ⟨1/k⟩, the table holding ⟨1/k⟩ × 65535.
        ((65_535u128 << 56) + a as u128 / 2)
            .checked_div(a as u128)
            .ok_or(OVERFLOW)
    };
    let eu = atom.dirac_k_q80(upper, inv_k(0)?).ok_or(OVERFLOW)?;
    let el = atom.dirac_k_q80(lower, inv_k(1)?).ok_or(OVERFLOW)?;
    let gap = u128::try_from(eu - el).map_err(|_| OVERFLOW)?;
    let vacuum_fm = wavelength_fm(gap)?;
    let wavenumber = wavenumber_nk(gap)?;
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
