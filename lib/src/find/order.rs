//! Centre order of the first fits: a stable merge sort of one-byte indices.
//!
//! The fits come in the order they were made (strongest line first, for the step budget), so their
//! centres are in no order at all; an insertion sort of a full list of 64 took ~1000 key
//! comparisons through an index (~45 k instructions on the M0 for a crowded frame). A bottom-up
//! merge takes ≤ 6 × 64, and being stable gives exactly the insertion sort's order (ties keep the
//! order the fits were made in).

use super::MAX_PEAKS;

/// Sorts `v` by `key`, stably (the same order as [`crate::sort::sort_by_key`]); used for the fits
/// by centre.
///
/// Loop bound: ⌈log2 n⌉ ≤ 6 merge passes over ≤ [`MAX_PEAKS`] indices, then ≤ n² / 2 index steps
/// along the permutation's cycles (short in practice) as the entries move once each. Lists longer
/// than [`MAX_PEAKS`] (never passed) keep their tail unsorted.
pub(crate) fn merge_sort_by_key<T>(v: &mut [T], key: impl Fn(&T) -> i64) {
    let n = v.len().min(MAX_PEAKS);
    let key = |k: u8| v.get(usize::from(k)).map_or(i64::MAX, &key);
    let mut a = [0u8; MAX_PEAKS];
    let mut b = [0u8; MAX_PEAKS];
    for (k, slot) in a.iter_mut().enumerate().take(n) {
        *slot = k as u8;
    }
    let mut width = 1usize;
    while width < n {
        // Runs of `width` in `a` merged pairwise into `b`; the left run wins ties (stable).
        let mut lo = 0usize;
        while lo < n {
            let mid = (lo + width).min(n);
            let hi = (lo + 2 * width).min(n);
            let (mut i, mut j) = (lo, mid);
            for out in b.iter_mut().take(hi).skip(lo) {
                let take_left = match (a.get(i), a.get(j)) {
                    (Some(&x), Some(&y)) if i < mid && j < hi => key(x) <= key(y),
                    _ => i < mid,
                };
                let src = if take_left { &mut i } else { &mut j };
                *out = a.get(*src).copied().unwrap_or(0);
                *src += 1;
            }
            lo = hi;
        }
        core::mem::swap(&mut a, &mut b);
        width *= 2;
    }
    // Slot i takes the old entry a[i]: an earlier slot's old entry has moved on along the cycle, to
    // the slot found by following `a` until it is not below i.
    for i in 0..n {
        let mut j = usize::from(a.get(i).copied().unwrap_or(0));
        for _ in 0..n {
            if j >= i {
                break;
            }
            j = usize::from(a.get(j).copied().unwrap_or(0));
        }
        if j > i {
            if let Some((head, tail)) = v.split_at_mut_checked(j) {
                if let (Some(x), Some(y)) = (head.get_mut(i), tail.first_mut()) {
                    core::mem::swap(x, y);
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn merge_order_is_the_stable_insertion_order() {
        let mut x = 0x0f1e_2d3cu32;
        for n in 0..=MAX_PEAKS {
            for spread in [3u32, 50, 1 << 20] {
                let mut v: std::vec::Vec<(i64, u16, [u8; 30])> = (0..n)
                    .map(|k| {
                        x ^= x << 13;
                        x ^= x >> 17;
                        x ^= x << 5;
                        (i64::from(x % spread) - 7, k as u16, [k as u8; 30])
                    })
                    .collect();
                let mut want = v.clone();
                crate::sort::sort_by_key(&mut want, |e| e.0);
                merge_sort_by_key(&mut v, |e| e.0);
                assert_eq!(v, want, "n {n} spread {spread}");
            }
        }
    }
}
