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
/// window (px, Q16, from `window_px_q16(index, feature)`). Result sorted by peak.
///
/// Work: ≤ 40 features × ≤ 64 peaks, plus sorting.
pub fn assign(
    features: &[Feature],
    peaks: &[Peak],
    window_px_q16: impl Fn(usize, &Feature) -> i32,
) -> Vec<Pair, 40> {
    let mut order: Vec<u8, 40> = crate::bounded::collect_bounded(0..features.len().min(40) as u8);
    crate::sort::sort_by_key(&mut order, |&i| {
        core::cmp::Reverse(features.get(i as usize).map_or(0, |f| f.expected))
    });
    let mut taken = [false; 64];
    let mut out: Vec<Pair, 40> = Vec::new();
    for &fi in order.iter() {
        let Some(f) = features.get(fi as usize) else {
            continue;
        };
        let win = window_px_q16(fi as usize, f);
        let mut best: Option<(usize, i64)> = None;
        for (k, p) in peaks.iter().enumerate().take(64) {
            if taken.get(k).copied().unwrap_or(true) {
                continue;
            }
            let d = (p.center_px_q16 as i64 - f.predicted_px_q16 as i64).abs();
            if d <= win as i64 && best.is_none_or(|(_, bd)| d < bd) {
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
