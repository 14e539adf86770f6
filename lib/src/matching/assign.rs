//! Which peak belongs to which feature.
use super::feature::Feature;
use crate::find::Peak;
use heapless::Vec;

/// A feature matched to a peak (indices into the feature and peak lists).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Pair {
    /// Feature index.
    pub feature: u8,
    /// Peak index.
    pub peak: u8,
}

/// Greedy assignment, strongest expected feature first: each takes the nearest free peak within its
/// window (px, Q16, from `window_px_q16(index, feature)`; on a tie the first peak). Result sorted
/// by peak.
///
/// Peaks sorted by centre (as peak finding returns them) are searched from the feature's position
/// outwards over its window only (a binary search, then the peaks inside the window); otherwise
/// every peak is tried. The same pairs either way.
///
/// Work: ≤ 40 features × (a binary search of ≤ 64 peaks and the peaks within the window; ≤ 64
/// when unsorted), plus sorting.
pub fn assign(
    features: &[Feature],
    peaks: &[Peak],
    window_px_q16: impl Fn(usize, &Feature) -> i32,
) -> Vec<Pair, 40> {
    assign_in_order(features, &priority(features), peaks, window_px_q16)
}

/// The order [`assign`] visits `features` in: by expected rate, strongest first (stable, so equal
/// rates keep their list order). A checker makes it once for features whose rates do not change
/// from frame to frame.
///
/// Work: an insertion sort of ≤ 40 indices.
pub(crate) fn priority(features: &[Feature]) -> Vec<u8, 40> {
    let mut order: Vec<u8, 40> = crate::bounded::collect_bounded(0..features.len().min(40) as u8);
    crate::sort::sort_by_key(&mut order, |&i| {
        core::cmp::Reverse(features.get(i as usize).map_or(0, |f| f.expected))
    });
    order
}

/// [`assign`] visiting the features in `order` ([`priority`] of `features`, made beforehand; an
/// index past `features` is skipped): the same pairs without sorting the features each frame.
///
/// Work: as [`assign`], without the features' sort.
pub(crate) fn assign_in_order(
    features: &[Feature],
    order: &[u8],
    peaks: &[Peak],
    window_px_q16: impl Fn(usize, &Feature) -> i32,
) -> Vec<Pair, 40> {
    let peaks = peaks.get(..peaks.len().min(64)).unwrap_or(&[]);
    let sorted = peaks
        .windows(2)
        .all(|w| matches!(w, [a, b] if a.center_px_q16 <= b.center_px_q16));
    let mut taken = [false; 64];
    let mut out: Vec<Pair, 40> = Vec::new();
    for &fi in order.iter() {
        let Some(f) = features.get(fi as usize) else {
            continue;
        };
        let win = window_px_q16(fi as usize, f) as i64;
        let at = f.predicted_px_q16 as i64;
        // The peaks that can lie within the window: from the first at or past at − win (sorted
        // peaks), else all of them; a sorted run ends at the first past at + win.
        let from = if sorted {
            peaks.partition_point(|p| (p.center_px_q16 as i64) < at - win)
        } else {
            0
        };
        let mut best: Option<(usize, i64)> = None;
        for (k, p) in peaks.iter().enumerate().skip(from) {
            let c = p.center_px_q16 as i64;
            if sorted && c > at + win {
                break;
            }
            if taken.get(k).copied().unwrap_or(true) {
                continue;
            }
            let d = (c - at).abs();
            if d <= win && best.is_none_or(|(_, bd)| d < bd) {
                best = Some((k, d));
            }
        }
        if let Some((k, _)) = best {
            if let Some(t) = taken.get_mut(k) {
                *t = true;
            }
            let _ = out.push(Pair {
                feature: fi,
                peak: k as u8,
            });
        }
    }
    crate::sort::sort_by_key(&mut out, |p| p.peak);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The assignment as first written: every free peak tried for every feature.
    fn full_scan(
        features: &[Feature],
        peaks: &[Peak],
        window_px_q16: impl Fn(usize, &Feature) -> i32,
    ) -> Vec<Pair, 40> {
        let mut order: Vec<u8, 40> =
            crate::bounded::collect_bounded(0..features.len().min(40) as u8);
        crate::sort::sort_by_key(&mut order, |&i| {
            core::cmp::Reverse(features.get(i as usize).map_or(0, |f| f.expected))
        });
        let mut taken = [false; 64];
        let mut out: Vec<Pair, 40> = Vec::new();
        for &fi in order.iter() {
            let f = &features[fi as usize];
            let win = window_px_q16(fi as usize, f);
            let mut best: Option<(usize, i64)> = None;
            for (k, p) in peaks.iter().enumerate().take(64) {
                if taken[k] {
                    continue;
                }
                let d = (p.center_px_q16 as i64 - f.predicted_px_q16 as i64).abs();
                if d <= win as i64 && best.is_none_or(|(_, bd)| d < bd) {
                    best = Some((k, d));
                }
            }
            if let Some((k, _)) = best {
                taken[k] = true;
                out.push(Pair {
                    feature: fi,
                    peak: k as u8,
                })
                .unwrap();
            }
        }
        crate::sort::sort_by_key(&mut out, |p| p.peak);
        out
    }

    /// The windowed search gives the full scan's pairs: sorted and unsorted peaks, equal centres
    /// (ties), windows from 1 to 64 px, crowded and sparse frames.
    #[test]
    fn windowed_search_is_the_full_scan() {
        let mut next = crate::test_rng::xorshift(0x9e37_79b9_7f4a_7c15u64);
        let mut differing = 0;
        for round in 0..3000 {
            let n_peaks = (next() % 70) as usize;
            let n_feat = (next() % 41) as usize;
            let spread = 1 + (next() % 2048) as i32;
            let mut peaks: std::vec::Vec<Peak> = (0..n_peaks)
                .map(|_| Peak {
                    center_px_q16: ((next() % spread as u64) as i32) << 14,
                    center_sigma_px_q16: 1000,
                    fwhm_px_q16: 3 << 16,
                    height: 100,
                    area: 300,
                    snr_q8: 2560,
                    saturated: false,
                    blended: false,
                })
                .collect();
            if round % 4 != 0 {
                peaks.sort_by_key(|p| p.center_px_q16);
            }
            let features: std::vec::Vec<Feature> = (0..n_feat)
                .map(|i| Feature {
                    members: Vec::from_slice(&[i as u8]).unwrap(),
                    primary: i as u8,
                    predicted_fm: 0,
                    predicted_px_q16: ((next() % spread as u64) as i32) << 14,
                    expected: next() % 5,
                })
                .collect();
            let wins: std::vec::Vec<i32> = (0..n_feat)
                .map(|_| (1 + (next() % 64) as i32) << 16 >> (next() % 3))
                .collect();
            let w = |i: usize, _: &Feature| wins[i];
            let (got, want) = (
                assign(&features, &peaks, w),
                full_scan(&features, &peaks, w),
            );
            assert_eq!(got, want, "round {round}");
            let order = priority(&features);
            assert_eq!(assign_in_order(&features, &order, &peaks, w), want);
            differing += usize::from(!want.is_empty());
        }
        assert!(differing > 2000, "{differing}");
    }
}
