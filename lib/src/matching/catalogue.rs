//! The predicted lines an instrument can see: every line of the considered nuclei on the sensor.
use super::error::MatchError;
use crate::predict::{Air, Lines, Nucleus};
use heapless::Vec;

/// Most predicted lines kept for one instrument and profile; the weakest go first when more fall on
/// the sensor (high series members crowd near each series limit).
pub const MAX_CATALOGUE: usize = 48;

/// Most nuclei considered at once (profile species plus isotope alternatives).
pub const MAX_NUCLEI: usize = 4;

/// One predicted line as the instrument sees it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct CatalogueLine {
    /// Emitting nucleus.
    pub nucleus: Nucleus,
    /// Lower level m.
    pub lower: u8,
    /// Upper level n.
    pub upper: u8,
    /// Wavelength in the instrument's medium (air above 200 nm unless vacuum), femtometres.
    pub wavelength_fm: i64,
    /// Expected photon rate, relative: Kramers' gA ∝ 1 / (m n (n² − m²)), × 10^9.
    pub strength: u32,
}

#[cfg(test)]
impl CatalogueLine {
    /// A hydrogen 3 → 2 line at `wavelength_fm` with `strength`: tests that need lines at chosen
    /// places, whatever the physics would put there.
    pub(crate) fn test_h1(wavelength_fm: i64, strength: u32) -> CatalogueLine {
        CatalogueLine {
            nucleus: Nucleus::H1,
            lower: 2,
            upper: 3,
            wavelength_fm,
            strength,
        }
    }
}

/// Kramers' semiclassical photon rate of n → m from statistically populated levels, relative.
///
/// g_n A_nm ∝ σ² g_m f_mn with f_mn ∝ 1/(m⁵ n³ (1/m² − 1/n²)³) gives 1 / (m n (n² − m²)): within about
/// 10 % of exact hydrogen values for Balmer and Lyman lines (Hα : Hβ = 1 : 0.31 against 0.34), enough
/// to rank lines; excitation conditions in a real discharge bend it more than that.
pub fn kramers_strength(lower: u8, upper: u8) -> u32 {
    let (m, n) = (lower as u64, upper as u64);
    let d = m * n * (n * n).saturating_sub(m * m);
    if d == 0 {
        return 0;
    }
    (1_000_000_000 / d) as u32
}

/// Predicted lines of `nuclei` with wavelength (in `air`'s medium) in `from_fm ..= to_fm`, sorted by
/// wavelength, at most [`MAX_CATALOGUE`] (strongest kept), none under 1/300 of the strongest.
///
/// Work: one [`Lines`] pass (≤ 780 lines, each predicted twice) for each of the first [`MAX_NUCLEI`]
/// nuclei (any further ones are ignored), over the window widened by 0.1 % (vacuum vs air);
/// ≤ [`MAX_CATALOGUE`] entries scanned per line once the list is full; one insertion sort of ≤ 48
/// lines.
pub fn build(
    nuclei: &[Nucleus],
    from_fm: i64,
    to_fm: i64,
    air: &Air,
) -> Result<Vec<CatalogueLine, MAX_CATALOGUE>, MatchError> {
    let mut out = Vec::new();
    build_into(nuclei, from_fm, to_fm, air, &mut out)?;
    Ok(out)
}

/// [`build`] into `out` (cleared first), which the caller owns: the 1.2 KiB list is written in place
/// rather than returned through a small core's stack. Work: as [`build`].
pub fn build_into(
    nuclei: &[Nucleus],
    from_fm: i64,
    to_fm: i64,
    air: &Air,
    out: &mut Vec<CatalogueLine, MAX_CATALOGUE>,
) -> Result<(), MatchError> {
    out.clear();
    let lo = from_fm.max(0) as u64;
    let hi = to_fm.max(0) as u64;
    for &nu in nuclei.iter().take(MAX_NUCLEI) {
        let vac_lo = lo - lo / 1000;
        let vac_hi = hi + hi / 1000;
        for line in Lines::new(nu, vac_lo, vac_hi, air)? {
            let line = line?;
            let w = line.air_fm.unwrap_or(line.vacuum_fm) as i64;
            if w < from_fm || w > to_fm {
                continue;
            }
            let entry = CatalogueLine {
                nucleus: nu,
                lower: line.lower,
                upper: line.upper,
                wavelength_fm: w,
                strength: kramers_strength(line.lower, line.upper),
            };
            // Full: the weakest line gives way to a stronger one.
            crate::bounded::push_keep_strongest(out, entry, |l| l.strength);
        }
    }
    // Lines under 1/300 of the strongest are the crowded members near a series limit: closer to each
    // other than any handheld instrument resolves and too faint to judge by, they would only blur the
    // features around them.
    let top = out.iter().map(|l| l.strength).max().unwrap_or(0);
    out.retain(|l| l.strength >= top / 300);
    crate::sort::sort_by_key(out, |l| (l.wavelength_fm, l.nucleus));
    if out.is_empty() {
        return Err(MatchError::NoLinesOnSensor);
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn visible_h_and_d_catalogue_is_sorted_and_paired() {
        let cat = build(
            &[Nucleus::H1, Nucleus::H2],
            400_000_000,
            700_000_000,
            &Air::Standard,
        )
        .unwrap();
        assert!(cat
            .windows(2)
            .all(|w| w[0].wavelength_fm <= w[1].wavelength_fm));
        // Hα, Hβ, Hγ, Hδ of each isotope: 8 lines.
        assert_eq!(cat.len(), 8);
        assert_eq!((cat[6].nucleus, cat[6].upper), (Nucleus::H2, 3));
        assert_eq!((cat[7].nucleus, cat[7].upper), (Nucleus::H1, 3));
    }

    #[test]
    fn kramers_ranks_balmer_lines_like_the_real_ones() {
        let a = kramers_strength(2, 3);
        let b = kramers_strength(2, 4);
        // Exact gA ratio Hβ/Hα = 0.34 (Wiese & Fuhr 2009, from memory); Kramers 0.31.
        assert!((300..=320).contains(&(b as u64 * 1000 / a as u64)));
    }
}
