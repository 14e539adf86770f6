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
/// the lines' pixels later inverts the map for them again. A line whose pixel `lines` holds
/// already is not inverted again.
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
    // One reciprocal of the map's half-width for all the inversions below.
    let hw = HalfWidth::reciprocal(map);
    group_members(catalogue, map, &hw, merge_px_q16, lines, out);
    for f in out.iter_mut() {
        settle_placed(f, catalogue, map, &hw, priors, lines)?;
    }
    Ok(())
}

/// The grouping step of [`group_placing`] alone: the features' members, each feature placed at
/// its first member's wavelength and pixel (not settled on the shares).
///
/// Work: one pass over ≤ [`MAX_CATALOGUE`] lines, one map inversion for each line `lines` does not
/// hold yet.
pub(crate) fn group_members(
    catalogue: &[CatalogueLine],
    map: &WavelengthMap,
    hw: &HalfWidth,
    merge_px_q16: i32,
    lines: &mut LinePixels,
    out: &mut Vec<Feature, MAX_FEATURES>,
) {
    out.clear();
    let mut last_px: Option<i32> = None;
    for (i, line) in catalogue.iter().enumerate().take(MAX_CATALOGUE) {
        // A pixel recorded already (calibrate mode places lines from their stored pixels) is
        // taken; else the map is inverted here.
        let at = match lines.recorded(i as u8) {
            Some(at) => at,
            None => {
                let at = map.pixel_q16_by(line.wavelength_fm, hw).ok();
                lines.put(i as u8, at);
                at
            }
        };
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
/// share) that member's recorded pixel is taken (the same integers either way). A position between
/// the two members of a close pair (an isotope pair) on the sensor is placed between their
/// recorded pixels (see [`between_members`]): within 4 · 10⁻⁴ px of the inversion (2 · 10⁻⁵ px on
/// the bench sensor), far below a centroid's σ.
///
/// Work: as [`settle`], the inversion only when the position moved to a new wavelength off a
/// close pair.
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
            None => match between_members(f, catalogue, map, lines) {
                Some(px) => Some(px),
                None => map.pixel_q16_by(f.predicted_fm, hw).ok(),
            },
        }
        .unwrap_or(f.predicted_px_q16);
    }
    Ok(())
}

/// Closest pair members [`between_members`] interpolates between: 1.5 px (Q16).
const CLOSE_PAIR_PX_Q16: i64 = 3 << 15;

/// The pixel of a two-member feature's expected position by linear interpolation between the
/// members' recorded pixels, where both are on the sensor and within [`CLOSE_PAIR_PX_Q16`] of each
/// other on a map of a real sensor (half-width ≥ 512 px, |c2|, |c3| ≤ c1 / 16); `None` otherwise.
///
/// Between two points h apart the line through them is off the curve by at most
/// h² · max|p''| / 8, and with p'' = −λ'' / λ'³ that is (h² / 8) · |λ''| / |λ'| px at most (in
/// pixels, for the map's λ(p)). With |λ''| ≤ (2|c2| + 6|c3|) / hw² and |λ'| ≥ (|c1| − 2|c2| − 3|c3|)
/// / hw on the sensor that is below (2.25 / 8) · (8 / 16) / (11 / 16) / hw ≈ 0.2 / hw px, under
/// 4 · 10⁻⁴ px for hw ≥ 512 px, and for the bench sensor (|c2| / c1 ≈ 0.037, hw ≈ 1 024 px)
/// 2 · 10⁻⁵ px; the division truncates by under 1/65 536 px. A map inversion itself stops within
/// 1/65 536 px of the root.
fn between_members(
    f: &Feature,
    catalogue: &[CatalogueLine],
    map: &WavelengthMap,
    lines: &LinePixels,
) -> Option<i32> {
    let [c1, c2, c3] = [map.coeff_fm[1], map.coeff_fm[2], map.coeff_fm[3]].map(i64::unsigned_abs);
    if map.half_width_px_q16 < 512 << 16 || c2 > c1 / 16 || c3 > c1 / 16 {
        return None;
    }
    let [a, b] = f.members.as_slice() else {
        return None;
    };
    let (la, lb) = (catalogue.get(*a as usize)?, catalogue.get(*b as usize)?);
    let (pa, pb) = (lines.recorded(*a)??, lines.recorded(*b)??);
    // Both on the sensor (|x| ≤ 1, where the bound holds).
    let on = |p: i32| (p as i64 - map.center_px_q16 as i64).abs() <= map.half_width_px_q16 as i64;
    let dp = pb as i64 - pa as i64;
    let dl = lb.wavelength_fm.checked_sub(la.wavelength_fm)?;
    let off = f.predicted_fm.checked_sub(la.wavelength_fm)?;
    // Inside the pair (so |off| ≤ |dl|), and |dl| < 2^40 with |dp| ≤ 1.5 px keeps dp · off in i64.
    let inside = off == 0 || off.signum() == dl.signum() && off.unsigned_abs() <= dl.unsigned_abs();
    let close = dp.abs() <= CLOSE_PAIR_PX_Q16 && dl != 0 && dl.unsigned_abs() < 1 << 40;
    if !(close && inside && on(pa) && on(pb)) {
        return None;
    }
    i32::try_from(pa as i64 + (dp * off).checked_div(dl)?).ok()
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
        CatalogueLine::test_h1(wavelength_fm, 1000)
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

    /// Lines at `wa` and `wa + gap` (fm) with their pixels on `map`, and the feature of the two
    /// predicted at `wa + at` (fm).
    fn pair_at(
        map: &WavelengthMap,
        wa: i64,
        gap: i64,
        at: i64,
    ) -> ([CatalogueLine; 2], LinePixels, Feature) {
        let cat = [line(wa), line(wa + gap)];
        let mut lines = LinePixels::new();
        lines.put(0, map.pixel_q16(wa).ok());
        lines.put(1, map.pixel_q16(wa + gap).ok());
        let mut members = Vec::new();
        members.push(0).unwrap();
        members.push(1).unwrap();
        let f = Feature {
            members,
            primary: 0,
            predicted_fm: wa + at,
            predicted_px_q16: 0,
            expected: 0,
        };
        (cat, lines, f)
    }

    #[test]
    fn close_pair_interpolation_is_the_inversion_within_its_bound() {
        let mut next = crate::test_rng::xorshift(0x9b05_688c_2b3e_6c1fu64);
        let mut compared = 0;
        let mut worst = 0i64;
        for round in 0..20_000 {
            let pixels = [1024u16, 2048, 4096][round % 3];
            let spread =
                |n: &mut dyn FnMut() -> u64, top: i64| (n() % (2 * top as u64 + 1)) as i64 - top;
            let c1 = 100_000_000 + spread(&mut next, 80_000_000);
            let coeff = [
                450_000_000 + spread(&mut next, 50_000_000),
                c1,
                spread(&mut next, c1 / 16),
                if round % 2 == 0 {
                    0
                } else {
                    spread(&mut next, c1 / 16)
                },
            ];
            let Ok(map) = WavelengthMap::new(pixels, 2 + (round % 2) as u8, coeff) else {
                continue;
            };
            // A pair up to 1.6 px apart somewhere on (or just off) the sensor.
            let p0 = (next() % (pixels as u64 + 20)) as i64 - 10;
            let wa = map.wavelength_fm((p0 << 16) as i32).unwrap();
            let slope = map.slope_fm_per_px_q16((p0 << 16) as i32).unwrap();
            let gap = (slope >> 16) * (next() % 1_600) as i64 / 1_000;
            let (cat, lines, f) = pair_at(&map, wa, gap, gap * (next() % 1_001) as i64 / 1_000);
            let Some(px) = between_members(&f, &cat, &map, &lines) else {
                continue;
            };
            let want = map.pixel_q16(f.predicted_fm).unwrap();
            let hw_px = map.half_width_px_q16 as i64 >> 16;
            // (0.21 / hw) px of curvature and the truncations (see `between_members`).
            let bound = 21 * 65_536 / (100 * hw_px) + 2;
            assert!(
                (px as i64 - want as i64).abs() <= bound,
                "{px} {want} {map:?}"
            );
            worst = worst.max((px as i64 - want as i64).abs());
            compared += 1;
        }
        assert!(compared > 5_000, "{compared}");
        // On these maps the line through the pair is a few 1/65 536 px off at most.
        assert!(worst <= 16, "{worst}");
        // Beyond 1.5 px, off the sensor, or a map of a small sensor: the inversion instead.
        let map = WavelengthMap::new(2048, 2, [517_944_686, 171_659_373, -6_285_314, 0]).unwrap();
        let small = WavelengthMap::new(512, 2, [517_944_686, 171_659_373, -6_285_314, 0]).unwrap();
        for (m, gap_px_q8, at_px) in [(&map, 400, 1000), (&map, 200, 2047), (&small, 200, 100)] {
            let wa = m.wavelength_fm(at_px << 16).unwrap();
            let gap = (m.slope_fm_per_px_q16(at_px << 16).unwrap() >> 16) * gap_px_q8 / 256;
            let (cat, lines, f) = pair_at(m, wa, gap, gap / 2);
            assert_eq!(
                between_members(&f, &cat, m, &lines),
                None,
                "{gap_px_q8} {at_px}"
            );
        }
    }
}
