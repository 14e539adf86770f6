//! Features: predicted lines that the instrument cannot tell apart count as one.
//!
//! Hα and Dα lie 0.18 nm apart; on a sensor with a 1 nm line width they form one peak whose centre
//! depends on the mix. Grouping them keeps the matcher from inventing a second peak and lets the
//! isotope analysis read the mix off the blend.
use super::catalogue::{CatalogueLine, MAX_CATALOGUE};
use super::error::MatchError;
use super::line_pixels::LinePixels;
use crate::calibrate::{HalfWidth, WavelengthMap};
use crate::predict::Nucleus;
use heapless::Vec;

/// Most features per instrument and profile.
pub const MAX_FEATURES: usize = 40;
/// Most predicted lines in one feature.
pub const MAX_MEMBERS: usize = 4;

/// A group of predicted lines closer together than the instrument resolves.
#[derive(Clone, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Feature {
    /// Catalogue indices of the member lines, by wavelength.
    pub members: Vec<u8, MAX_MEMBERS>,
    /// Catalogue index of the member with the largest expected photon rate.
    pub primary: u8,
    /// Expected position: members weighted by expected photon rate (femtometres).
    pub predicted_fm: i64,
    /// The same on the sensor (px, Q16).
    pub predicted_px_q16: i32,
    /// Expected photon rate of the whole feature (relative, as the catalogue's × share in ‰).
    pub expected: u64,
}

/// Expected share (‰) of a nucleus from the priors; nuclei not listed get 0.
///
/// Loop bound: `priors.len()` (≤ [`MAX_NUCLEI`](super::catalogue::MAX_NUCLEI) in the pipeline).
pub fn prior_share(priors: &[(Nucleus, u16)], nucleus: Nucleus) -> u16 {
    priors
        .iter()
        .find(|(n, _)| *n == nucleus)
        .map_or(0, |(_, s)| *s)
}

/// Groups the catalogue (sorted by wavelength) into features: a line joins the previous feature when
/// its pixel is closer than `merge_px_q16` to that feature's last member.
///
/// Lines past [`MAX_CATALOGUE`] are ignored: member indices are `u8`, and a catalogue never holds
/// more. Work: one pass over ≤ [`MAX_CATALOGUE`] lines, each one map inversion (≤ 12 Newton steps),
/// then [`settle`] for each of the ≤ [`MAX_FEATURES`] features.
pub fn group(
    catalogue: &[CatalogueLine],
    map: &WavelengthMap,
    priors: &[(Nucleus, u16)],
    merge_px_q16: i32,
) -> Result<Vec<Feature, MAX_FEATURES>, MatchError> {
    let mut out = Vec::new();
    group_placing(
        catalogue,
        map,
        priors,
        merge_px_q16,
        &mut LinePixels::new(),
        &mut out,
    )?;
    Ok(out)
}

/// [`group`] into `out` (cleared first; a returned list of 40 features would be copied, some
/// 3 000 instructions on the Cortex-M0), recording each line's pixel on `map` in `lines` as it is
/// found (where the map cannot place it, that too), so neither settling nor a caller that needs
/// the lines' pixels later inverts the map for them again.
///
/// Work: as [`group`].
pub(crate) fn group_placing(
    catalogue: &[CatalogueLine],
    map: &WavelengthMap,
    priors: &[(Nucleus, u16)],
    merge_px_q16: i32,
    lines: &mut LinePixels,
    out: &mut Vec<Feature, MAX_FEATURES>,
) -> Result<(), MatchError> {
    out.clear();
    let mut last_px: Option<i32> = None;
    // One reciprocal of the map's half-width for all the inversions below.
    let hw = HalfWidth::reciprocal(map);
    for (i, line) in catalogue.iter().enumerate().take(MAX_CATALOGUE) {
        let at = map.pixel_q16_by(line.wavelength_fm, &hw).ok();
        lines.put(i as u8, at);
        // A line the map cannot place (a fitted map extrapolated far off the sensor) is not on it.
        let Some(px) = at else {
            continue;
        };
        let join = last_px.is_some_and(|l| (px as i64 - l as i64).abs() < merge_px_q16 as i64);
        last_px = Some(px);
        let idx = i as u8;
        if join {
            if let Some(f) = out.last_mut() {
                if f.members.push(idx).is_ok() {
                    continue;
                }
            }
        }
        let mut members = Vec::new();
        let _ = members.push(idx);
        let feature = Feature {
            members,
            primary: idx,
            predicted_fm: line.wavelength_fm,
            predicted_px_q16: px,
            expected: 0,
        };
        if out.push(feature).is_err() {
            break;
        }
    }
    for f in out.iter_mut() {
        settle_placed(f, catalogue, map, &hw, priors, lines)?;
    }
    Ok(())
}

/// Recomputes a feature's expected position, primary and rate from per-nucleus shares (‰).
///
/// Work: ≤ [`MAX_MEMBERS`] members × `shares.len()` look-ups, then one map inversion (≤ 12 Newton
/// steps).
pub fn settle(
    f: &mut Feature,
    catalogue: &[CatalogueLine],
    map: &WavelengthMap,
    shares: &[(Nucleus, u16)],
) -> Result<(), MatchError> {
    settle_with(f, catalogue, shares);
    f.predicted_px_q16 = map.pixel_q16(f.predicted_fm).unwrap_or(f.predicted_px_q16);
    Ok(())
}

/// [`settle`] for a feature already placed on `map` (by [`group`] or an earlier settle on it), with
/// `hw` the map's half-width reciprocal and the lines' pixels on `map` recorded in `lines`: the pixel follows the expected position, so when
/// that did not move (every single-line feature, and a blend whose shares did not change) the map
/// inversion is skipped, and when it moved onto one member's wavelength (the only member with a
/// share) that member's recorded pixel is taken. The result is the same either way.
///
/// Work: as [`settle`], the inversion only when the position moved to a new wavelength.
pub(crate) fn settle_placed(
    f: &mut Feature,
    catalogue: &[CatalogueLine],
    map: &WavelengthMap,
    hw: &HalfWidth,
    shares: &[(Nucleus, u16)],
    lines: &LinePixels,
) -> Result<(), MatchError> {
    let before = f.predicted_fm;
    let sole = settle_with(f, catalogue, shares);
    if f.predicted_fm != before {
        // pixel_q16 is a function of the wavelength: the member's own pixel is the same integer.
        f.predicted_px_q16 = match sole.and_then(|m| lines.recorded(m)) {
            Some(px) => px,
            None => map.pixel_q16_by(f.predicted_fm, hw).ok(),
        }
        .unwrap_or(f.predicted_px_q16);
    }
    Ok(())
}

/// The map-free part of [`settle`]: expected position, primary and rate. Returns the member whose
/// wavelength the position is when it is the only one with a non-zero weight.
fn settle_with(
    f: &mut Feature,
    catalogue: &[CatalogueLine],
    shares: &[(Nucleus, u16)],
) -> Option<u8> {
    let mut total: u128 = 0;
    let mut sum: i128 = 0;
    let mut best = (0u64, f.primary);
    let mut plain: i128 = 0;
    // Members with a non-zero weight, and the wavelength and index of the last one.
    let mut weighted = (0u8, 0i64, 0u8);
    for &m in f.members.iter() {
        let Some(line) = catalogue.get(m as usize) else {
            continue;
        };
        let w = line.strength as u64 * prior_share(shares, line.nucleus) as u64;
        total += w as u128;
        // Below 2^32 · 2^31 the product is the same in i64 (no 128-bit multiply).
        sum += if w < 1 << 32 && line.wavelength_fm.unsigned_abs() < 1 << 31 {
            (w as i64 * line.wavelength_fm) as i128
        } else {
            w as i128 * line.wavelength_fm as i128
        };
        plain += line.wavelength_fm as i128;
        if w > 0 {
            weighted = (weighted.0 + 1, line.wavelength_fm, m);
        }
        if w > best.0 || best.0 == 0 && m == f.primary {
            best = (w, m);
        }
    }
    f.predicted_fm = if weighted.0 == 1 {
        // One weighted member (a single line, or a blend whose partner has no share): the mean
        // w·λ / w is λ exactly, no 128-bit division needed.
        weighted.1
    } else if total > 0 {
        match (i64::try_from(sum), i64::try_from(total)) {
            // The same truncating quotient in 64 bits when both fit.
            (Ok(s), Ok(t)) => s.checked_div(t).unwrap_or(0),
            _ => sum.checked_div(total as i128).unwrap_or(0) as i64,
        }
    } else {
        plain.checked_div(f.members.len() as i128).unwrap_or(0) as i64
    };
    f.primary = best.1;
    f.expected = total as u64;
    (weighted.0 == 1).then_some(weighted.2)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(wavelength_fm: i64) -> CatalogueLine {
        CatalogueLine {
            nucleus: Nucleus::H1,
            lower: 2,
            upper: 3,
            wavelength_fm,
            strength: 1000,
        }
    }

    #[test]
    fn lines_past_the_catalogue_capacity_do_not_alias_member_indices() {
        // 400 … 700 nm over 2048 px; 10 mm is far off the sensor, where the map cannot place a line.
        let map = WavelengthMap::new(2048, 1, [550_000_000, 150_000_000, 0, 0]).unwrap();
        let far = 10_000_000_000_000;
        assert!(map.pixel_q16(far).is_err());
        // 10 placeable lines, unplaceable ones up to index 255, then placeable ones again: indices
        // from 256 on would wrap to 0, 1, … as `u8`.
        let cat: std::vec::Vec<CatalogueLine> = (0..300i64)
            .map(|i| match i {
                0..=9 => line(410_000_000 + i * 20_000_000),
                10..=255 => line(far),
                _ => line(405_000_000 + (i - 256) * 5_000_000),
            })
            .collect();
        let features = group(&cat, &map, &[(Nucleus::H1, 1000)], 3 << 16).unwrap();
        assert_eq!(features.len(), 10);
        for (k, f) in features.iter().enumerate() {
            assert_eq!(f.members.as_slice(), &[k as u8]);
            assert_eq!(f.primary, k as u8);
            assert_eq!(f.predicted_fm, cat[k].wavelength_fm);
        }
    }
}
