//! A sort and a selection for the short lists of the pipeline (≤ 256 entries, most ≤ 64) with no
//! panic path.
//!
//! core's `sort_unstable` keeps a panic for comparators that break total order; an insertion sort
//! over `get_mut` windows has none, and for lists this short it is as fast. Stable, O(n²), n ≤ 128
//! in every use here (find's candidate thinning); a merge of byte indices gives the same order in
//! O(n log n) for lists that arrive in no order at all.

/// Sorts `v` ascending by `key`, keeping the order of equal keys.
///
/// Loop bound: ≤ n(n − 1)/2 key comparisons and swaps for n = `v.len()`; the pipeline sorts ≤ 128
/// entries (find's candidate thinning, ≤ 8 128 steps), most lists ≤ 64.
pub fn sort_by_key<T, K: Ord>(v: &mut [T], key: impl Fn(&T) -> K) {
    if core::mem::size_of::<T>() >= 16 && (INDEXED_MIN..=INDEXED_MAX).contains(&v.len()) {
        sort_by_index(v, key);
    } else {
        insertion_sort(v, key);
    }
}

/// Longest list sorted through a byte index (64 B of stack).
const INDEXED_MAX: usize = 64;
/// Shortest: below it the index's set-up costs more than the entries' moves.
const INDEXED_MIN: usize = 16;

/// [`sort_by_key`] for entries of 16 B and more (fits, peaks, report lines): the insertion sort
/// moves one-byte indices, and each entry then moves once, along its permutation cycle — the same
/// order (tested), where swapping the entries themselves costs ~20 instructions a word each step.
fn sort_by_index<T, K: Ord>(v: &mut [T], key: impl Fn(&T) -> K) {
    let n = v.len().min(INDEXED_MAX);
    let mut idx = [0u8; INDEXED_MAX];
    for (k, slot) in idx.iter_mut().enumerate().take(n) {
        *slot = k as u8;
    }
    insertion_sort(idx.get_mut(..n).unwrap_or(&mut []), |&k| {
        v.get(usize::from(k)).map(&key)
    });
    permute(v, idx.get(..n).unwrap_or(&[]));
}

/// [`sort_by_key`]'s order (stable) for up to [`INDEXED_MAX`] entries whose keys come in no order at
/// all (find's first fits, made strongest line first, put in centre order): an insertion sort of a
/// full list of 64 takes ~1000 key comparisons through the index (~45 k instructions on the M0 for a
/// crowded frame), a bottom-up merge of the byte indices ≤ 6 × 64; the entries then move once each.
///
/// Loop bound: ⌈log2 n⌉ ≤ 6 merge passes over ≤ [`INDEXED_MAX`] indices, then [`permute`]. Lists
/// longer than that (never passed) keep their tail unsorted.
pub(crate) fn merge_sort_by_key<T, K: Ord>(v: &mut [T], key: impl Fn(&T) -> K) {
    let n = v.len().min(INDEXED_MAX);
    let key = |k: u8| v.get(usize::from(k)).map(&key);
    let mut a = [0u8; INDEXED_MAX];
    let mut b = [0u8; INDEXED_MAX];
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
    permute(v, a.get(..n).unwrap_or(&[]));
}

/// Puts the old entry `idx[i]` into slot i, for a permutation `idx` of `0..idx.len()`, each entry
/// moving once: an earlier slot's old entry has moved on along the cycle, to the slot found by
/// following `idx` until it is not below i. Loop bound: ≤ n steps along a cycle per slot.
fn permute<T>(v: &mut [T], idx: &[u8]) {
    let n = idx.len();
    for i in 0..n {
        let mut j = usize::from(idx.get(i).copied().unwrap_or(0));
        for _ in 0..n {
            if j >= i {
                break;
            }
            j = usize::from(idx.get(j).copied().unwrap_or(0));
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

/// Stable insertion sort (the whole of [`sort_by_key`] for short entries).
fn insertion_sort<T, K: Ord>(v: &mut [T], key: impl Fn(&T) -> K) {
    for i in 1..v.len() {
        let mut j = i;
        while j > 0 {
            let Some([a, b]) = v
                .get_mut(j - 1..=j)
                .and_then(|w| <&mut [T; 2]>::try_from(w).ok())
            else {
                break;
            };
            if key(a) <= key(b) {
                break;
            }
            core::mem::swap(a, b);
            j -= 1;
        }
    }
}

/// The element a full sort would put at index `k` (`None` for `k ≥ v.len()`); reorders `v`. Hoare
/// selection with a median-of-three pivot: ~3n comparisons on typical data instead of the n²/4 of
/// sorting first, the same value as `sort` then `v[k]` whatever the order (equal keys are equal
/// values). Loop bound: each partition round shrinks the range by ≥ 1, so ≤ n rounds of ≤ n steps.
pub fn select_kth<T: Ord + Copy>(v: &mut [T], k: usize) -> Option<T> {
    if k >= v.len() {
        return None;
    }
    let (mut lo, mut hi) = (0usize, v.len() - 1);
    while lo < hi {
        let mid = lo + (hi - lo) / 2;
        // Median of three as pivot value.
        let (a, b, c) = (*v.get(lo)?, *v.get(mid)?, *v.get(hi)?);
        let pivot = a.max(b).min(a.min(b).max(c));
        // Three-way partition of lo..=hi: [< pivot][== pivot][> pivot].
        let (mut lt, mut i, mut gt) = (lo, lo, hi);
        while i <= gt {
            let x = *v.get(i)?;
            if x < pivot {
                swap_checked(v, lt, i);
                lt += 1;
                i += 1;
            } else if x > pivot {
                swap_checked(v, i, gt);
                if gt == 0 {
                    break;
                }
                gt -= 1;
            } else {
                i += 1;
            }
        }
        if k < lt {
            hi = lt.checked_sub(1)?;
        } else if k > gt {
            lo = gt + 1;
        } else {
            return Some(pivot);
        }
    }
    v.get(k).copied()
}

/// Swaps two entries; out-of-range indices leave `v` as it is (`slice::swap` keeps a panic path).
fn swap_checked<T: Copy>(v: &mut [T], a: usize, b: usize) {
    if let (Some(&x), Some(&y)) = (v.get(a), v.get(b)) {
        if let Some(s) = v.get_mut(a) {
            *s = y;
        }
        if let Some(s) = v.get_mut(b) {
            *s = x;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sorts_and_keeps_equal_keys_in_order() {
        let mut v = [(3, 'a'), (1, 'b'), (3, 'c'), (0, 'd'), (2, 'e')];
        sort_by_key(&mut v, |x| x.0);
        assert_eq!(v, [(0, 'd'), (1, 'b'), (2, 'e'), (3, 'a'), (3, 'c')]);
        let mut e: [u8; 0] = [];
        sort_by_key(&mut e, |x| *x);
    }

    /// Large entries (through the byte index) end in the order of the plain insertion sort, equal
    /// keys included, for every length up to the index's and past it.
    #[test]
    fn sorting_by_index_is_the_insertion_sort() {
        let mut next = crate::test_rng::xorshift(0x0f1e_2d3c_4b5a_6978u64);
        for n in 0..=70usize {
            for spread in [2u64, 9, 1 << 40] {
                let v: Vec<(u64, [u32; 4])> = (0..n)
                    .map(|k| (next() % spread, [k as u32, 7, 8, 9]))
                    .collect();
                let (mut fast, mut slow) = (v.clone(), v.clone());
                sort_by_key(&mut fast, |e| e.0);
                insertion_sort(&mut slow, |e| e.0);
                assert_eq!(fast, slow, "n {n} spread {spread}");
            }
        }
    }

    #[test]
    fn selection_equals_sorting() {
        let mut x = 0x1357_9bdfu32;
        for n in 1..=300usize {
            for spread in [3u32, 50, 1_000_000] {
                let v: Vec<i64> = (0..n)
                    .map(|_| {
                        crate::test_rng::step32(&mut x);
                        i64::from(x % spread) - i64::from(spread / 2)
                    })
                    .collect();
                let mut sorted = v.clone();
                sorted.sort();
                for k in [0, n / 2, n - 1] {
                    let mut w = v.clone();
                    assert_eq!(select_kth(&mut w, k), Some(sorted[k]), "n {n} k {k}");
                }
                let mut asc = sorted.clone();
                assert_eq!(select_kth(&mut asc, n / 2), Some(sorted[n / 2]));
                let mut desc: Vec<i64> = sorted.iter().rev().copied().collect();
                assert_eq!(select_kth(&mut desc, n / 2), Some(sorted[n / 2]));
            }
        }
        assert_eq!(select_kth::<i64>(&mut [], 0), None);
        assert_eq!(select_kth(&mut [5i64], 1), None);
    }

    #[test]
    fn merge_order_is_the_stable_insertion_order() {
        let mut x = 0x0f1e_2d3cu32;
        for n in 0..=INDEXED_MAX {
            for spread in [3u32, 50, 1 << 20] {
                let mut v: std::vec::Vec<(i64, u16, [u8; 30])> = (0..n)
                    .map(|k| {
                        crate::test_rng::step32(&mut x);
                        (i64::from(x % spread) - 7, k as u16, [k as u8; 30])
                    })
                    .collect();
                let mut want = v.clone();
                sort_by_key(&mut want, |e| e.0);
                merge_sort_by_key(&mut v, |e| e.0);
                assert_eq!(v, want, "n {n} spread {spread}");
            }
        }
    }
}
