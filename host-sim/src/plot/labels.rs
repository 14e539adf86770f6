//! Label placement: rows of text above the peaks, first come first placed, never overlapping.

/// A placed label: its row and left edge (px).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Placed {
    /// Row from the top, 0-based.
    pub row: usize,
    /// Left edge, backend px.
    pub left: i32,
}

/// Places labels centred on `centre` (px) with `width` (px) into `rows` rows, in the order given
/// (put the important ones first); keeps `gap` px between neighbours and stays inside
/// `[min_x, max_x]`. A label that fits no row gets `None`.
pub fn place(
    items: &[(i32, i32)],
    rows: usize,
    gap: i32,
    min_x: i32,
    max_x: i32,
) -> Vec<Option<Placed>> {
    let mut taken: Vec<Vec<(i32, i32)>> = vec![Vec::new(); rows];
    items
        .iter()
        .map(|&(centre, width)| {
            let left = (centre - width / 2).clamp(min_x, (max_x - width).max(min_x));
            let right = left + width;
            let row = taken.iter().position(|spans| {
                spans
                    .iter()
                    .all(|&(l, r)| right + gap <= l || left >= r + gap)
            })?;
            taken[row].push((left, right));
            Some(Placed { row, left })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn no_two_labels_overlap() {
        // Ten labels 40 px wide crowded into 100 px, three rows: at most 2 per row fit.
        let items: Vec<(i32, i32)> = (0..10).map(|i| (100 + i * 10, 40)).collect();
        let placed = place(&items, 3, 4, 0, 1000);
        let ok: Vec<(usize, Placed)> = placed
            .iter()
            .enumerate()
            .filter_map(|(i, p)| p.map(|p| (i, p)))
            .collect();
        assert!(ok.len() >= 3 && ok.len() <= 6, "{ok:?}");
        for (i, a) in &ok {
            for (j, b) in &ok {
                if i < j && a.row == b.row {
                    let (aw, bw) = (items[*i].1, items[*j].1);
                    assert!(
                        a.left + aw + 4 <= b.left || b.left + bw + 4 <= a.left,
                        "{a:?} {b:?}"
                    );
                }
            }
        }
        // The first label always gets the first row, and labels stay inside the bounds.
        assert_eq!(placed[0].unwrap().row, 0);
        let edge = place(&[(2, 40)], 1, 4, 0, 1000);
        assert_eq!(edge[0].unwrap().left, 0);
    }
}
