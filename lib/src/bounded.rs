//! Filling fixed-capacity lists without a panic path.
//!
//! heapless' `FromIterator` panics when the items outnumber the capacity; the pipeline's lists are
//! sized so that never happens, but firmware must not carry the panic, so collection stops at capacity.
use heapless::Vec;

/// The first `N` items of `items` (the rest are dropped, which callers size never to happen).
///
/// Loop bound: pulls at most N + 1 items from `items` (stops at the first that does not fit); the
/// iterator's own work per item is the caller's.
pub fn collect_bounded<T, const N: usize>(items: impl IntoIterator<Item = T>) -> Vec<T, N> {
    let mut out = Vec::new();
    for item in items {
        if out.push(item).is_err() {
            break;
        }
    }
    out
}

/// Pushes `item`, or, when `list` is full, puts it in place of the entry with the smallest `key` if
/// its own key is larger; returns whether an item was lost (the weakest, or `item` itself). Keeps the
/// N strongest of a stream in a fixed list.
///
/// Loop bound: one scan of the ≤ N entries, only when the list is full.
pub fn push_keep_strongest<T, K: Ord, const N: usize>(
    list: &mut Vec<T, N>,
    item: T,
    key: impl Fn(&T) -> K,
) -> bool {
    let Err(item) = list.push(item) else {
        return false;
    };
    let weakest = list
        .iter()
        .enumerate()
        .min_by_key(|(_, x)| key(x))
        .map(|(k, _)| k);
    if let Some(slot) = weakest.and_then(|k| list.get_mut(k)) {
        if key(&item) > key(slot) {
            *slot = item;
        }
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stops_at_capacity() {
        let v: Vec<u32, 3> = collect_bounded(0..10);
        assert_eq!(v.as_slice(), &[0, 1, 2]);
    }

    #[test]
    fn keeps_the_strongest() {
        let mut v: Vec<u32, 3> = Vec::new();
        let lost: std::vec::Vec<bool> = [5, 1, 7, 3, 0, 9]
            .into_iter()
            .map(|x| push_keep_strongest(&mut v, x, |&x| x))
            .collect();
        assert_eq!(lost, [false, false, false, true, true, true]);
        let mut kept = v.to_vec();
        kept.sort();
        assert_eq!(kept, [5, 7, 9]);
    }
}
