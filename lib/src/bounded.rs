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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stops_at_capacity() {
        let v: Vec<u32, 3> = collect_bounded(0..10);
        assert_eq!(v.as_slice(), &[0, 1, 2]);
    }
}
