//! Moving averages in O(N), the building block of the baseline and of detection.

/// Writes into `dst` the mean of `src(j)` over the symmetric window `i − h … i + h`, with
/// `h = min(half, i, n − 1 − i)`: the window shrinks at the frame edges rather than going lopsided, so a
/// sloping continuum stays unbiased up to the last pixel (a one-sided mean would sit off it by
/// slope × half / 2, and a one-sided straight-line fit amplifies lines near the edge). The price: a line
/// within `half` px of an edge is partly followed by the baseline. Means are rounded half away from zero.
///
/// `src` is called twice per pixel (once entering, once leaving the window). Loop bound: 2 × `dst.len()`.
/// The 64-bit reference the 32-bit boxes are tested against (the baseline scales wider frames into
/// their reach).
#[cfg(test)]
pub fn box_symmetric<F: Fn(usize) -> i64>(half: usize, src: F, dst: &mut [i32]) {
    let n = dst.len();
    if n == 0 {
        return;
    }
    // Window [lo, hi] inclusive with a running sum: |src| < 2^31 (i32 frame values) and ≤ 4096 px,
    // so |sum| < 2^43 and i64 cannot overflow.
    let mut lo = 0usize;
    let mut hi = 0usize;
    let mut sum: i64 = src(0);
    let mut recip = Reciprocal::new(1);
    for (i, d) in dst.iter_mut().enumerate() {
        let h = half.min(i).min(n - 1 - i);
        let (want_lo, want_hi) = (i - h, i + h);
        while hi < want_hi {
            hi += 1;
            sum = sum.saturating_add(src(hi));
        }
        while lo < want_lo {
            sum = sum.saturating_sub(src(lo));
            lo += 1;
        }
        // The width changes only near the edges: the reciprocal is rebuilt ≤ 2 × `half` times.
        let width = u32::try_from(2 * h + 1).unwrap_or(u32::MAX);
        if recip.den != width {
            recip = Reciprocal::new(width);
        }
        let mean = recip.div_round(sum);
        *d = mean.clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32;
    }
}

/// [`box_symmetric`] of `buf` onto itself (the same integers): the values the window leaves behind were
/// already overwritten, so the last [`RING`] originals are kept in a ring. `half` is capped at
/// `RING / 2 − 1` (a line finder's windows are far smaller). Loop bound: 2 × `buf.len()`.
#[cfg(test)]
pub fn box_symmetric_in_place(half: usize, buf: &mut [i32]) {
    let n = buf.len();
    if n == 0 {
        return;
    }
    let half = half.min(RING / 2 - 1);
    let mut ring = [0i32; RING];
    let mut lo = 0usize;
    let mut hi = 0usize;
    let mut sum: i64 = i64::from(buf.first().copied().unwrap_or(0));
    let mut recip = Reciprocal::new(1);
    for i in 0..n {
        let h = half.min(i).min(n - 1 - i);
        let (want_lo, want_hi) = (i - h, i + h);
        while hi < want_hi {
            hi += 1;
            sum = sum.saturating_add(i64::from(buf.get(hi).copied().unwrap_or(0)));
        }
        while lo < want_lo {
            // lo < i: overwritten, its original is in the ring (i − lo ≤ half < RING).
            sum = sum.saturating_sub(i64::from(ring.get(lo % RING).copied().unwrap_or(0)));
            lo += 1;
        }
        let width = u32::try_from(2 * h + 1).unwrap_or(u32::MAX);
        if recip.den != width {
            recip = Reciprocal::new(width);
        }
        let mean = recip
            .div_round(sum)
            .clamp(i64::from(i32::MIN), i64::from(i32::MAX)) as i32;
        if let (Some(slot), Some(cell)) = (ring.get_mut(i % RING), buf.get_mut(i)) {
            *slot = *cell;
            *cell = mean;
        }
    }
}

/// Largest `max |v|` for which [`box_narrow`] and [`box_narrow_in_place`] may be used with `half`:
/// every window sum plus the rounding half-width stays below 2^31, so `i32` sums and the reciprocal's
/// 32-bit path serve (the integers are the same as `box_symmetric`'s).
pub fn narrow_limit(half: usize) -> i64 {
    let width = i64::try_from(2 * half + 1).unwrap_or(i64::MAX).max(1);
    ((1i64 << 31) - 1 - width) / width
}

/// `box_symmetric` (the tests' 64-bit reference) over a slice whose values are within
/// ±[`narrow_limit`]: `i32` sums, one 32 × 32-bit product per pixel. Loop bound: 2 × `dst.len()`.
pub fn box_narrow(half: usize, src: &[i32], dst: &mut [i32]) {
    let n = dst.len();
    if n == 0 {
        return;
    }
    if half == 1 {
        box3(src, dst);
        return;
    }
    let at = |j: usize| src.get(j).copied().unwrap_or(0);
    let mut w = Window::new(at(0));
    // Edges with shrinking windows step by step; the interior (constant width) in a tight loop.
    let (a, b) = interior(half, n);
    for i in (0..n).filter(|&i| i <= a || i >= b) {
        if i == b && a < b {
            w.sync_interior(b, half);
        }
        let mean = w.step(i, half, n, &at);
        if let Some(d) = dst.get_mut(i) {
            *d = mean;
        }
        if i == a && a < b {
            let recip = Reciprocal::new(width(half));
            let mut sum = w.sum;
            let adds = src.get(a + 1 + half..b + half).unwrap_or(&[]);
            let subs = src.get(a - half..b - half - 1).unwrap_or(&[]);
            let outs = dst.get_mut(a + 1..b).unwrap_or(&mut []);
            for ((o, &plus), &minus) in outs.iter_mut().zip(adds).zip(subs) {
                sum = sum.wrapping_add(plus).wrapping_sub(minus);
                *o = recip.div_round_narrow(sum);
            }
            w.sum = sum;
        }
    }
}

/// `box_symmetric_in_place` under the same condition as [`box_narrow`]. Loop bound: 2 × `buf.len()`.
pub fn box_narrow_in_place(half: usize, buf: &mut [i32]) {
    let n = buf.len();
    if n == 0 {
        return;
    }
    if half == 1 {
        box3_in_place(buf);
        return;
    }
    let half = half.min(RING / 2 - 1);
    let mut ring = [0i32; RING];
    let mut w = Window::new(buf.first().copied().unwrap_or(0));
    let (a, b) = interior(half, n);
    let mut i = 0usize;
    while i < n {
        if i == b && a < b {
            w.sync_interior(b, half);
        }
        // A general step; values leaving the window come from the ring (they are overwritten).
        let h = half.min(i).min(n - 1 - i);
        while w.hi < i + h {
            w.hi += 1;
            w.sum = w.sum.wrapping_add(buf.get(w.hi).copied().unwrap_or(0));
        }
        while w.lo < i - h {
            w.sum = w
                .sum
                .wrapping_sub(ring.get(w.lo % RING).copied().unwrap_or(0));
            w.lo += 1;
        }
        if w.recip.den != width(h) {
            w.recip = Reciprocal::new(width(h));
        }
        let mean = w.recip.div_round_narrow(w.sum);
        if let (Some(slot), Some(cell)) = (ring.get_mut(i % RING), buf.get_mut(i)) {
            *slot = *cell;
            *cell = mean;
        }
        if i == a && a < b {
            let recip = Reciprocal::new(width(half));
            let mut sum = w.sum;
            for j in a + 1..b {
                let plus = buf.get(j + half).copied().unwrap_or(0);
                let minus = ring.get((j - half - 1) % RING).copied().unwrap_or(0);
                sum = sum.wrapping_add(plus).wrapping_sub(minus);
                if let (Some(slot), Some(cell)) = (ring.get_mut(j % RING), buf.get_mut(j)) {
                    *slot = *cell;
                    *cell = recip.div_round_narrow(sum);
                }
            }
            w.sum = sum;
            i = b;
            continue;
        }
        i += 1;
    }
}

/// [`box_narrow`] for `half` = 1 (the default baseline's boxes on its block means): the first and
/// last value stay, every other one is the rounded mean of itself and its two neighbours, the three
/// values riding along in registers. Loop bound: `dst.len()`.
fn box3(src: &[i32], dst: &mut [i32]) {
    let n = dst.len().min(src.len());
    let (Some(src), Some(dst)) = (src.get(..n), dst.get_mut(..n)) else {
        return;
    };
    let (Some(&first), Some(&last)) = (src.first(), src.last()) else {
        return;
    };
    if let Some(d) = dst.first_mut() {
        *d = first;
    }
    if n < 2 {
        return;
    }
    let (mut a, mut b) = (first, src.get(1).copied().unwrap_or(0));
    for i in 2..n {
        let Some(&c) = src.get(i) else {
            break;
        };
        if let Some(d) = dst.get_mut(i - 1) {
            *d = mean3(a, b, c);
        }
        (a, b) = (b, c);
    }
    if let Some(d) = dst.last_mut() {
        *d = last;
    }
}

/// [`box3`] of `buf` onto itself: the original of the value before is kept in a register.
fn box3_in_place(buf: &mut [i32]) {
    let n = buf.len();
    if n < 3 {
        // One or two values: every window is the value itself.
        return;
    }
    let mut a = buf.first().copied().unwrap_or(0);
    for i in 1..n - 1 {
        let (Some(&b), Some(&c)) = (buf.get(i), buf.get(i + 1)) else {
            break;
        };
        if let Some(d) = buf.get_mut(i) {
            *d = mean3(a, b, c);
        }
        a = b;
    }
}

/// `(a + b + c) / 3` rounded half away from zero, for sums within ±(2^31 − 2) ([`narrow_limit`]).
#[inline(always)]
fn mean3(a: i32, b: i32, c: i32) -> i32 {
    let sum = a.wrapping_add(b).wrapping_add(c);
    let q = div3(sum.unsigned_abs().wrapping_add(1)) as i32;
    if sum < 0 {
        -q
    } else {
        q
    }
}

/// Box width for a half-width.
fn width(h: usize) -> u32 {
    u32::try_from(2 * h + 1).unwrap_or(u32::MAX)
}

/// The first and last pixel of constant window width are `a` and `b − 1` (`a` is stepped generally,
/// `a + 1 .. b` by the tight loop); `(n, n)` when no window reaches full width inside the frame.
fn interior(half: usize, n: usize) -> (usize, usize) {
    if n > 2 * half + 1 {
        (half, n - half)
    } else {
        (n, n)
    }
}

/// A running window sum for the stepped (edge) pixels of the narrow boxes.
struct Window {
    lo: usize,
    hi: usize,
    sum: i32,
    recip: Reciprocal,
}

impl Window {
    fn new(first: i32) -> Self {
        Self {
            lo: 0,
            hi: 0,
            sum: first,
            recip: Reciprocal::new(1),
        }
    }

    /// After the tight loop ran to `b − 1`: its window was `[b − 1 − half, b − 1 + half]`.
    fn sync_interior(&mut self, b: usize, half: usize) {
        self.lo = b - 1 - half;
        self.hi = b - 1 + half;
    }

    /// Moves the window to pixel `i` (width `2 min(half, i, n − 1 − i) + 1`) and returns its mean.
    fn step(&mut self, i: usize, half: usize, n: usize, at: &impl Fn(usize) -> i32) -> i32 {
        let h = half.min(i).min(n - 1 - i);
        while self.hi < i + h {
            self.hi += 1;
            self.sum = self.sum.wrapping_add(at(self.hi));
        }
        while self.lo < i - h {
            self.sum = self.sum.wrapping_sub(at(self.lo));
            self.lo += 1;
        }
        if self.recip.den != width(h) {
            self.recip = Reciprocal::new(width(h));
        }
        self.recip.div_round_narrow(self.sum)
    }
}

/// Originals `box_symmetric_in_place` keeps (a power of two).
const RING: usize = 128;

/// Division by a fixed small width through a multiply (the Cortex-M0 has no divide instruction and a
/// library division costs ~100 instructions per pixel and pass). Exact: with `s = 31 + ⌈log2 d⌉` and
/// `m = ⌈2^s / d⌉ ≤ 2^32 − 1` (d ≥ 2), `⌊a·m / 2^s⌋ = ⌊a / d⌋` for every `a < 2^31`: `m·d − 2^s < d`
/// makes the error term `a·(m·d − 2^s) / (d·2^s)` smaller than `1/d` because `a < 2^s / d`. Larger `a`
/// divide directly; d = 1 needs no division.
#[derive(Clone, Copy)]
struct Reciprocal {
    den: u32,
    m: u32,
    s: u32,
}

impl Reciprocal {
    /// [`Reciprocal::div_round`] for sums with `|sum| + den/2 < 2^31` (callers check [`narrow_limit`]).
    #[inline(always)]
    fn div_round_narrow(&self, sum: i32) -> i32 {
        let a = sum.unsigned_abs().wrapping_add(self.den / 2);
        let q = if self.den == 1 {
            sum.unsigned_abs()
        } else if self.den == 3 {
            div3(a)
        } else {
            let hi = (super::math::mul_u32_wide(a, self.m) >> 32) as u32;
            hi >> (self.s - 32)
        };
        let q = q as i32;
        if sum < 0 {
            -q
        } else {
            q
        }
    }

    /// The reciprocal of `den` (clamped to 1 … 2^16): from [`ODD_WIDTHS`] for the box widths
    /// (odd, ≤ [`RING`]), else [`Reciprocal::compute`] (the same value).
    fn new(den: u32) -> Self {
        if den % 2 == 1 {
            if let Some(&r) = ODD_WIDTHS.get((den / 2) as usize) {
                return r;
            }
        }
        Self::compute(den)
    }

    const fn compute(den: u32) -> Self {
        let den = if den < 1 {
            1
        } else if den > 1 << 16 {
            1 << 16
        } else {
            den
        };
        let s = 31 + (32 - (den - 1).leading_zeros());
        if den == 1 {
            // Never used for the quotient (den = 1 divides by returning the value).
            return Self { den, m: 0, s };
        }
        // m = ⌈2^s / den⌉ with s ≤ 47, by two 32-bit divisions (a 64-bit one is a ~730-instruction
        // library call on the M0): 2^s = 2^(s−16) · 2^16, long division by den ≤ 2^16 in two digits.
        let hi = 1u32 << (s - 16);
        let (q1, r1) = (hi / den, hi % den);
        let low = r1 << 16; // r1 < den ≤ 2^16
        let (q0, r0) = (low / den, low % den);
        let m = ((q1 as u64) << 16) + q0 as u64 + (r0 != 0) as u64;
        Self {
            den,
            m: if m > u32::MAX as u64 {
                u32::MAX
            } else {
                m as u32
            },
            s,
        }
    }
}

/// `⌊a / 3⌋` for `a < 2^31` (the default baseline's three-block boxes) in two 32-bit products, where
/// the reciprocal takes a four-product wide multiply: with `a = 2^16·h + l` and `2^16 = 3·21 845 + 1`,
/// `⌊a/3⌋ = 21 845·h + ⌊(h + l)/3⌋`, and `x = h + l < 98 304 < 2^17` divides exactly as
/// `⌊x · 43 691 / 2^17⌋` (`3 · 43 691 − 2^17 = 1`, error `x / (3·2^17) < 1/3`; `x · 43 691 < 2^32`).
#[inline(always)]
fn div3(a: u32) -> u32 {
    let (h, l) = (a >> 16, a & 0xffff);
    // Wrapping: exact below 2^31 (above, a wrong quotient but no overflow check left behind).
    (21_845 * h).wrapping_add(h.wrapping_add(l).wrapping_mul(43_691) >> 17)
}

/// [`Reciprocal`]s of the odd widths 1, 3, … , [`RING`] − 1, made at compile time: the boxes rebuild
/// one at every edge step, and two library divisions there cost more than the box itself on
/// 1/16-size rows.
const ODD_WIDTHS: [Reciprocal; RING / 2] = odd_widths();

const fn odd_widths() -> [Reciprocal; RING / 2] {
    let mut t = [Reciprocal { den: 1, m: 0, s: 0 }; RING / 2];
    let mut i = 0;
    while i < RING / 2 {
        t[i] = Reciprocal::compute(2 * i as u32 + 1);
        i += 1;
    }
    t
}

#[cfg(test)]
impl Reciprocal {
    /// `num / den` rounded half away from zero (the same integers as a plain rounding division).
    fn div_round(&self, num: i64) -> i64 {
        let a = num.unsigned_abs().saturating_add(u64::from(self.den / 2));
        let q = if self.den == 1 {
            num.unsigned_abs()
        } else if a < 1 << 31 {
            // s ≥ 32 for den ≥ 2: take the high word, then a 32-bit shift (a variable 64-bit shift is
            // a library call on the M0).
            let hi = (super::math::mul_u32_wide(a as u32, self.m) >> 32) as u32;
            u64::from(hi >> (self.s - 32))
        } else {
            a.checked_div(u64::from(self.den)).unwrap_or(0)
        };
        let q = i64::try_from(q).unwrap_or(i64::MAX);
        if num < 0 {
            -q
        } else {
            q
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The two-digit reciprocal is the 64-bit ceiling division's.
    #[test]
    fn tabulated_reciprocals_are_the_computed_ones() {
        for d in 0..70_000u32 {
            let (a, b) = (Reciprocal::new(d), Reciprocal::compute(d));
            assert_eq!((a.den, a.m, a.s), (b.den, b.m, b.s), "den {d}");
        }
    }

    #[test]
    fn reciprocal_is_the_ceiling_of_two_to_the_s() {
        for den in (2u32..=(1 << 16))
            .step_by(7)
            .chain([2, 3, 255, 256, 257, 65_535, 65_536])
        {
            let r = Reciprocal::new(den);
            let want = (1u64 << r.s).div_ceil(u64::from(den));
            assert_eq!(u64::from(r.m), want.min(u64::from(u32::MAX)), "den {den}");
        }
    }

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

    #[test]
    fn in_place_box_equals_the_copying_one() {
        let src: Vec<i32> = (0..300)
            .map(|i: i32| ((i * 7919) % 1013) - 400 + i * 3)
            .collect();
        for half in [0usize, 1, 2, 5, 17, 32, 63, 200] {
            let mut want = vec![0i32; src.len()];
            box_symmetric(half.min(63), |j| i64::from(src[j]), &mut want);
            let mut got = src.clone();
            box_symmetric_in_place(half, &mut got);
            assert_eq!(got, want, "half {half}");
        }
        let mut one = [9i32];
        box_symmetric_in_place(4, &mut one);
        assert_eq!(one, [9]);
    }

    #[test]
    fn narrow_boxes_equal_the_wide_ones() {
        let mut x = 0x2545_f491u32;
        for (half, amp) in [
            (0usize, 1000i64),
            (1, narrow_limit(1)),
            (1, 1 << 20),
            (3, 1 << 20),
            (10, 1 << 24),
            (32, narrow_limit(32)),
            (63, narrow_limit(63)),
        ] {
            let src: Vec<i32> = (0..700)
                .map(|_| {
                    crate::test_rng::step32(&mut x);
                    ((i64::from(x) % (2 * amp + 1)) - amp) as i32
                })
                .collect();
            let mut want = vec![0i32; src.len()];
            box_symmetric(half, |j| i64::from(src[j]), &mut want);
            let mut got = vec![0i32; src.len()];
            box_narrow(half, &src, &mut got);
            assert_eq!(got, want, "half {half}");
            let mut inplace = src.clone();
            box_narrow_in_place(half, &mut inplace);
            let mut wide_inplace = src.clone();
            box_symmetric_in_place(half, &mut wide_inplace);
            assert_eq!(inplace, wide_inplace, "in place, half {half}");
        }
    }

    #[test]
    fn narrow_boxes_equal_the_wide_ones_at_every_size() {
        let mut x = 0x0bad_cafeu32;
        for n in (1..=140).chain([255, 256, 257, 1000]) {
            for half in [0usize, 1, 2, 3, 5, 8, 16, 31, 32, 63] {
                let src: Vec<i32> = (0..n)
                    .map(|_| {
                        crate::test_rng::step32(&mut x);
                        (x % 2_000_001) as i32 - 1_000_000
                    })
                    .collect();
                let mut want = vec![0i32; n];
                box_symmetric(half, |j| i64::from(src[j]), &mut want);
                let mut got = vec![0i32; n];
                box_narrow(half, &src, &mut got);
                assert_eq!(got, want, "n {n} half {half}");
                let mut inplace = src.clone();
                box_narrow_in_place(half, &mut inplace);
                assert_eq!(inplace, want, "in place, n {n} half {half}");
            }
        }
    }

    /// The two-product division by 3 is the plain one over the narrow boxes' range.
    #[test]
    fn division_by_three_is_exact() {
        let mut x = 0x9e37_79b9u32;
        let edges = [
            0u32,
            1,
            2,
            3,
            65_535,
            65_536,
            98_303,
            (1 << 31) - 2,
            (1 << 31) - 1,
        ];
        for a in edges.into_iter().chain((0..200_000).map(|_| {
            crate::test_rng::step32(&mut x);
            x >> (1 + x % 16)
        })) {
            assert_eq!(div3(a), a / 3, "{a}");
        }
        for a in (0..1 << 20).chain((1 << 31) - (1 << 20)..1 << 31) {
            assert_eq!(div3(a), a / 3, "{a}");
        }
    }

    /// The multiply path gives exactly the rounding division, around every rounding edge and both
    /// signs, for every width a box can have.
    #[test]
    fn reciprocal_division_is_exact() {
        fn plain(num: i64, den: i64) -> i64 {
            if num >= 0 {
                (num + den / 2) / den
            } else {
                -((-num + den / 2) / den)
            }
        }
        for den in (1..=300u32).chain([65_535, 65_536]) {
            let r = Reciprocal::new(den);
            let d = i64::from(den);
            let mut probes = vec![0i64, 1, (1 << 31) - 1, 1 << 31, 1 << 40, i64::MAX / 2];
            for k in [
                1i64,
                2,
                3,
                1000,
                65_535,
                1 << 20,
                (1 << 31) / d - 1,
                (1 << 31) / d,
            ] {
                for off in -2..=2 {
                    probes.push(k * d + off);
                    probes.push(k * d + d / 2 + off);
                }
            }
            for p in probes {
                for v in [p, -p] {
                    assert_eq!(r.div_round(v), plain(v, d), "{v} / {den}");
                }
            }
        }
    }
}
