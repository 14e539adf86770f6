//! A sort for the short lists of the pipeline (≤ 128 entries, most ≤ 64) with no panic path.
//!
//! core's `sort_unstable` keeps a panic for comparators that break total order; an insertion sort
//! over `get_mut` windows has none, and for lists this short it is as fast. Stable, O(n²), n ≤ 128
//! in every use here (find's candidate thinning).

/// Sorts `v` ascending by `key`, keeping the order of equal keys.
///
/// Loop bound: ≤ n(n − 1)/2 key comparisons and swaps for n = `v.len()`; the pipeline sorts ≤ 128
/// entries (find's candidate thinning, ≤ 8 128 steps), most lists ≤ 64.
pub fn sort_by_key<T, K: Ord>(v: &mut [T], key: impl Fn(&T) -> K) {
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
}
