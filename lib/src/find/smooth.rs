//! Moving averages in O(N), the building block of the baseline and of detection.

/// Writes into `dst` the mean of `src(j)` over the symmetric window `i − h … i + h`, with
/// `h = min(half, i, n − 1 − i)`: the window shrinks at the frame edges rather than going lopsided, so a
/// sloping continuum stays unbiased up to the last pixel (a one-sided mean would sit off it by
/// slope × half / 2, and a one-sided straight-line fit amplifies lines near the edge). The price: a line
/// within `half` px of an edge is partly followed by the baseline. Means are rounded half away from zero.
///
/// `src` is called twice per pixel (once entering, once leaving the window). Loop bound: 2 × `dst.len()`.
pub fn box_symmetric<F: Fn(usize) -> i64>(half: usize, src: F, dst: &mut [i32]) {
    let n = dst.len();
    if n == 0 {
        return;
    }
    // Window [lo, hi] inclusive with a running sum.
    let mut lo = 0usize;
    let mut hi = 0usize;
    let mut sum: i128 = i128::from(src(0));
    for (i, d) in dst.iter_mut().enumerate() {
        let h = half.min(i).min(n - 1 - i);
        let (want_lo, want_hi) = (i - h, i + h);
        while hi < want_hi {
            hi += 1;
            sum += i128::from(src(hi));
        }
        while lo < want_lo {
            sum -= i128::from(src(lo));
            lo += 1;
        }
        let mean = div_round(sum, (2 * h + 1) as i128);
        *d = mean.clamp(i128::from(i32::MIN), i128::from(i32::MAX)) as i32;
    }
}

fn div_round(num: i128, den: i128) -> i128 {
    if den <= 0 {
        return 0;
    }
    if num >= 0 {
        (num + den / 2) / den
    } else {
        -((-num + den / 2) / den)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keeps_lines_and_shrinks_at_edges() {
        let src = [0i64, 10, 20, 30, 40, 50, 60];
        let mut dst = [0i32; 7];
        box_symmetric(2, |j| src.get(j).copied().unwrap_or(0), &mut dst);
        // A straight line is unchanged, including at the edges.
        assert_eq!(dst, [0, 10, 20, 30, 40, 50, 60]);
        let spike = [0i64, 0, 0, 50, 0, 0, 0];
        box_symmetric(2, |j| spike.get(j).copied().unwrap_or(0), &mut dst);
        assert_eq!(dst, [0, 0, 10, 10, 10, 0, 0]);
        let mut one = [0i32; 1];
        box_symmetric(5, |_| 7, &mut one);
        assert_eq!(one, [7]);
        let mut none: [i32; 0] = [];
        box_symmetric(5, |_| 7, &mut none);
    }
}
