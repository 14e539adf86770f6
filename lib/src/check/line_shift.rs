//! Calibrate mode's line pixels: the stored map's pixels of the catalogue lines moved by the shift
//! the fitted map makes, interpolated from five nodes instead of one map inversion per line.
//!
//! A calibration moves a line from its pixel P on the stored map S to the pixel where the fitted
//! map F gives the same wavelength: Δ(P) = F⁻¹(S(P)) − P. Both maps are smooth and near each other,
//! so Δ is nearly affine (a drift of a few nm and a few % of scale). It is found exactly at four
//! Chebyshev nodes of the sensor (x = cos((2j + 1)π/8)) and interpolated by the cubic through
//! them (Lagrange weights per line made once in `configure`); a fifth inversion at the centre
//! checks the interpolation, and when it is off by more than [`CHECK_PX_Q16`] every line is
//! inverted as before. On the sweep's maps (2 % scale, 6 nm offset) the interpolation is within
//! 8 · 10⁻⁴ px of the inversion (numpy, 2026), far below a centroid's σ; five inversions and one
//! four-term sum per line replace ~30 inversions (≈ 55 k instructions on the Cortex-M0).
use crate::calibrate::{HalfWidth, WavelengthMap};
use crate::find::math::mul_i32_wide;
use crate::matching::feature::{Feature, MAX_FEATURES};
use crate::matching::line_pixels::LinePixels;
use crate::matching::{CatalogueLine, MAX_CATALOGUE};

/// Chebyshev nodes of degree 4 on [−1, 1], cos((2j + 1)π/8) in Q30, then the centre (the check).
const NODE_X_Q30: [i64; 5] = [992_008_094, 410_903_207, -410_903_207, -992_008_094, 0];

/// Largest disagreement of the interpolated and the inverted shift at the centre node, px (Q16):
/// 1/256 px (the sweep's maps give under 1/1000 px; a map where the cubic is worse is inverted
/// line by line).
pub(super) const CHECK_PX_Q16: i64 = 256;

/// Largest node shift taken, px (Q16): 4 096 px keeps every weighted term below 2^59.
const MAX_SHIFT_PX_Q16: i64 = 1 << 28;

/// The stored map's side of the interpolation, made once per configuration (≈ 1 KiB).
pub(super) struct LineShift {
    /// Node pixels on the stored map's frame (px, Q16) and the stored λ there (fm); `None` until
    /// made or where the stored map does not evaluate there.
    nodes: Option<[(i32, i64); 5]>,
    /// The centre node's Lagrange weights (Q30).
    check_q30: [i32; 4],
    /// Per catalogue line: its stored pixel (px, Q16) and its Lagrange weights (Q30).
    lines: [(i32, [i32; 4]); MAX_CATALOGUE],
    /// Whether line i has a stored pixel on the sensor and weights (bytes, not bits of a `u64`:
    /// a variable 64-bit shift is a library call on the Cortex-M0).
    usable: [bool; MAX_CATALOGUE],
    /// Per feature of the stored map's grouping: its settled pixel there (px, Q16) and weights.
    features: [(i32, [i32; 4]); MAX_FEATURES],
    /// Whether feature k has a pixel on the sensor and weights.
    features_usable: [bool; MAX_FEATURES],
}

impl LineShift {
    /// Nothing made: every line is inverted.
    pub(super) const NONE: LineShift = LineShift {
        nodes: None,
        check_q30: [0; 4],
        lines: [(0, [0; 4]); MAX_CATALOGUE],
        usable: [false; MAX_CATALOGUE],
        features: [(0, [0; 4]); MAX_FEATURES],
        features_usable: [false; MAX_FEATURES],
    };

    /// The nodes of `stored` and each catalogue line's weights from its pixel on it in `placed`
    /// (as grouping on the stored map recorded them), and each of the stored grouping's `features`
    /// weights, for a sensor of `pixels` pixels, in place.
    pub(super) fn fill(
        &mut self,
        stored: &WavelengthMap,
        catalogue: &[CatalogueLine],
        (placed, features): (&LinePixels, &[Feature]),
        pixels: u16,
    ) {
        *self = LineShift::NONE;
        let hw = stored.half_width_px_q16 as i64;
        let c = stored.center_px_q16 as i64;
        let mut nodes = [(0i32, 0i64); 5];
        for (slot, &x) in nodes.iter_mut().zip(NODE_X_Q30.iter()) {
            let Ok(p) = i32::try_from(c + ((x * hw) >> 30)) else {
                return;
            };
            let Ok(lam) = stored.wavelength_fm(p) else {
                return;
            };
            *slot = (p, lam);
        }
        let [(n0, _), (n1, _), (n2, _), (n3, _), (centre, _)] = nodes;
        let node_px = [n0, n1, n2, n3];
        let Some(check) = weights(&node_px, centre) else {
            return;
        };
        let last = ((pixels.max(1) as i32) - 1) << 16;
        let lines = self.lines.iter_mut().zip(self.usable.iter_mut());
        for (i, (slot, usable)) in lines.enumerate().take(catalogue.len()) {
            let Some(Some(p)) = placed.recorded(i as u8) else {
                continue;
            };
            if !(0..=last).contains(&p) {
                continue;
            }
            if let Some(w) = weights(&node_px, p) {
                *slot = (p, w);
                *usable = true;
            }
        }
        let slots = self
            .features
            .iter_mut()
            .zip(self.features_usable.iter_mut());
        for ((slot, usable), f) in slots.zip(features.iter()) {
            let p = f.predicted_px_q16;
            if !(0..=last).contains(&p) {
                continue;
            }
            if let Some(w) = weights(&node_px, p) {
                *slot = (p, w);
                *usable = true;
            }
        }
        self.check_q30 = check;
        self.nodes = Some(nodes);
    }

    /// Whether [`fill`](Self::fill) made the nodes.
    #[cfg(test)]
    pub(super) fn is_made(&self) -> bool {
        self.nodes.is_some()
    }

    /// Records in `lines` the pixel on `fitted` of every usable catalogue line (the rest stay
    /// unrecorded: grouping inverts the map for them), and returns the node shifts for
    /// [`settle_from`](Self::settle_from). Nothing is recorded (`None`) when a node does not
    /// invert, a shift is past [`MAX_SHIFT_PX_Q16`], or the centre check fails.
    ///
    /// Work: five map inversions and four products per line.
    pub(super) fn place(&self, fitted: &WavelengthMap, lines: &mut LinePixels) -> Option<[i32; 4]> {
        let shift = self.node_shifts(fitted)?;
        for (i, ((p, w), _)) in self
            .lines
            .iter()
            .zip(self.usable.iter())
            .enumerate()
            .filter(|(_, (_, &usable))| usable)
        {
            let moved = *p as i64 + interpolate(w, &shift);
            lines.put(i as u8, i32::try_from(moved).ok());
        }
        Some(shift)
    }

    /// Settles `features` (as [`group_members`](crate::matching::feature::group_members) made
    /// them on the fitted map) from the stored grouping `stored` when both have the same members:
    /// expected position, primary and rate depend on the members and shares only (the same
    /// priors settled both), and a blend's settled pixel is its stored one moved by the node
    /// `shift` (a single line's is its own, placed already). `false`, changing nothing, when the
    /// members differ or a moved blend has no weights; then the caller settles as usual.
    ///
    /// Work: ≤ 40 member comparisons and four products per blend.
    pub(super) fn settle_from(
        &self,
        stored: &[Feature],
        shift: &[i32; 4],
        features: &mut [Feature],
    ) -> bool {
        if stored.len() != features.len() {
            return false;
        }
        // A blend whose settled wavelength is not its first member's moves off that pixel.
        let moves = |s: &Feature, f: &Feature| s.predicted_fm != f.predicted_fm;
        for (k, (s, f)) in stored.iter().zip(features.iter()).enumerate() {
            let usable = self.features_usable.get(k).copied().unwrap_or(false);
            if s.members != f.members || (moves(s, f) && !usable) {
                return false;
            }
        }
        for ((s, f), (p, w)) in stored
            .iter()
            .zip(features.iter_mut())
            .zip(self.features.iter())
        {
            if moves(s, f) {
                f.predicted_px_q16 =
                    i32::try_from(*p as i64 + interpolate(w, shift)).unwrap_or(f.predicted_px_q16);
            }
            f.predicted_fm = s.predicted_fm;
            f.primary = s.primary;
            f.expected = s.expected;
        }
        true
    }

    /// Δ at the four nodes (px, Q16), checked at the centre; `None` where that fails.
    pub(super) fn node_shifts(&self, fitted: &WavelengthMap) -> Option<[i32; 4]> {
        let nodes = self.nodes.as_ref()?;
        let hw = HalfWidth::reciprocal(fitted);
        let mut d = [0i64; 5];
        for (slot, &(p, lam)) in d.iter_mut().zip(nodes.iter()) {
            let q = fitted.pixel_q16_by(lam, &hw).ok()?;
            *slot = q as i64 - p as i64;
            if slot.unsigned_abs() >= MAX_SHIFT_PX_Q16 as u64 {
                return None;
            }
        }
        // Each below 2^28 in size: the casts are exact.
        let [d0, d1, d2, d3, centre] = d;
        let shift = [d0 as i32, d1 as i32, d2 as i32, d3 as i32];
        ((interpolate(&self.check_q30, &shift) - centre).abs() <= CHECK_PX_Q16).then_some(shift)
    }
}

/// Σ w_j · Δ_j (Q30 · Q16 → Q16, rounded): |w| < 2^31 and |Δ| < 2^28 keep each term below 2^59.
fn interpolate(w: &[i32; 4], shift: &[i32; 4]) -> i64 {
    let ([w0, w1, w2, w3], [d0, d1, d2, d3]) = (*w, *shift);
    let sum =
        mul_i32_wide(w0, d0) + mul_i32_wide(w1, d1) + mul_i32_wide(w2, d2) + mul_i32_wide(w3, d3);
    (sum + (1 << 29)) >> 30
}

/// The cubic Lagrange weights of the nodes `n` at pixel `p` (all px, Q16), in Q30:
/// L_j(p) = Π_{k≠j} (p − n_k) / (n_j − n_k), as a product of three truncated Q26 ratios (each
/// within 2^-26 of the exact one: over the sensor a weight is within 10⁻⁷ of its exact value, a
/// thousandth of a Q16 pixel per 100 px of shift). `None` for coincident nodes or past `i32`.
fn weights(n: &[i32; 4], p: i32) -> Option<[i32; 4]> {
    let mut out = [0i32; 4];
    for (j, slot) in out.iter_mut().enumerate() {
        let nj = *n.get(j)? as i64;
        let mut acc: i64 = 1 << 26;
        for (k, &nk) in n.iter().enumerate() {
            if k != j {
                // |p − n_k| < 2^32: shifted by 26 it stays below 2^58.
                let r = ((p as i64 - nk as i64) << 26).checked_div(nj - nk as i64)?;
                acc = acc.checked_mul(r)? >> 26;
            }
        }
        *slot = i32::try_from(acc.checked_mul(16)?).ok()?;
    }
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::predict::Nucleus;

    fn line(wavelength_fm: i64) -> CatalogueLine {
        CatalogueLine::test_h1(wavelength_fm, 1)
    }

    /// The weights are the exact rational ones (to 2^-23) and reproduce a cubic through the nodes
    /// to a few 1/65 536 px.
    #[test]
    fn weights_reproduce_cubics() {
        let n: [i32; 4] = [16 << 16, 704 << 16, 1296 << 16, 2000 << 16];
        // Exact in integers on pixels that are multiples of 16 (u³ divisible by 4 096).
        let cubic = |p: i32| -> i64 {
            let u = (p >> 16) as i64 - 1024;
            5 * 65536 + 1200 * u + 3 * u * u + u * u * u / 4096
        };
        let vals = n.map(|p| cubic(p) as i32);
        for p in (0..=2048).step_by(16).map(|p| p << 16) {
            let w = weights(&n, p).unwrap();
            for (j, &wj) in w.iter().enumerate() {
                let (mut num, mut den) = (1i128, 1i128);
                for (k, &nk) in n.iter().enumerate() {
                    if k != j {
                        num *= (p - nk) as i128;
                        den *= (n[j] - nk) as i128;
                    }
                }
                let exact = (num << 30) / den;
                assert!(
                    (wj as i128 - exact).abs() <= 128,
                    "p {p} j {j}: {wj} vs {exact}"
                );
            }
            let got = interpolate(&w, &vals);
            let want = cubic(p);
            assert!(
                (got - want).abs() <= 4,
                "p {} got {got} want {want}",
                p >> 16
            );
        }
    }

    /// Placed lines are the inversion's pixels to a small fraction of a pixel on a shifted, rescaled
    /// and curved map; a map the cubic cannot follow places nothing (the check node refuses it).
    #[test]
    fn placed_pixels_are_the_inversion_ones() {
        let stored =
            WavelengthMap::new(2048, 3, [535_000_000, 165_000_000, -5_000_000, 300_000]).unwrap();
        let fitted =
            WavelengthMap::new(2048, 3, [541_000_000, 168_300_000, -4_800_000, 250_000]).unwrap();
        let cat: std::vec::Vec<CatalogueLine> =
            (0..40).map(|i| line(372_000_000 + i * 8_000_000)).collect();
        let mut on_stored = LinePixels::new();
        for (i, c) in cat.iter().enumerate() {
            on_stored.put(i as u8, stored.pixel_q16(c.wavelength_fm).ok());
        }
        let mut shift = LineShift::NONE;
        shift.fill(&stored, &cat, (&on_stored, &[]), 2048);
        let mut got = LinePixels::new();
        shift.place(&fitted, &mut got);
        let mut placed = 0;
        for (i, c) in cat.iter().enumerate() {
            let Some(Some(p)) = got.recorded(i as u8) else {
                continue;
            };
            placed += 1;
            let want = fitted.pixel_q16(c.wavelength_fm).unwrap();
            // 1/256 px.
            assert!((p - want).abs() <= 256, "line {i}: {p} vs {want}");
        }
        assert!(placed >= 35, "{placed}");
        // A wildly different map: the centre check fails and nothing is recorded.
        let wild = WavelengthMap::new(2048, 3, [560_000_000, 150_000_000, 20_000_000, 9_000_000]);
        if let Ok(wild) = wild {
            let mut none = LinePixels::new();
            let shifts = shift.node_shifts(&wild);
            shift.place(&wild, &mut none);
            let recorded = (0..40u8).filter(|&i| none.recorded(i).is_some()).count();
            assert_eq!(recorded > 0, shifts.is_some());
            if let Some(s) = shifts {
                // Accepted only when the centre agreed.
                let hw = HalfWidth::reciprocal(&wild);
                let nodes = shift.nodes.unwrap();
                let d4 = wild.pixel_q16_by(nodes[4].1, &hw).unwrap() as i64 - nodes[4].0 as i64;
                assert!((interpolate(&shift.check_q30, &s) - d4).abs() <= CHECK_PX_Q16);
            }
        }
    }

    /// Features settled from the stored grouping are the features settling on the fitted map gives
    /// (the same members, position, primary and rate; the pixel within 1/256 px), H/D pairs with one
    /// or both isotopes weighted; a grouping whose members differ is refused.
    #[test]
    fn settled_from_the_stored_grouping_is_settled() {
        use crate::matching::feature::{group, group_members, settle_placed};
        let mut next = crate::test_rng::xorshift(0x3c6e_f372_fe94_f82bu64);
        let (mut copied, mut refused) = (0, 0);
        let stored =
            WavelengthMap::new(2048, 2, [545_000_000, 175_000_000, -1_200_000, 0]).unwrap();
        for round in 0..300 {
            let off = (next() % 12_000_000) as i64 - 6_000_000;
            let scale = (next() % 7_000_000) as i64 - 3_500_000;
            let fitted = WavelengthMap::new(
                2048,
                2,
                [545_000_000 + off, 175_000_000 + scale, -1_150_000, 0],
            )
            .unwrap();
            let mut cat: std::vec::Vec<CatalogueLine> = std::vec::Vec::new();
            let mut lam = 380_000_000i64;
            while cat.len() < 40 && lam < 690_000_000 {
                lam += 3_000_000 + (next() % 20_000_000) as i64;
                cat.push(CatalogueLine {
                    nucleus: Nucleus::H2,
                    lower: 2,
                    upper: 3,
                    wavelength_fm: lam - 100_000 - (next() % 100_000) as i64,
                    strength: 1 + (next() % 1000) as u32,
                });
                if !next().is_multiple_of(4) {
                    cat.push(CatalogueLine {
                        nucleus: Nucleus::H1,
                        lower: 2,
                        upper: 3,
                        wavelength_fm: lam,
                        strength: 1 + (next() % 1000) as u32,
                    });
                }
            }
            let d_share = [0u16, 0, 150, 500][round % 4];
            let priors = [(Nucleus::H1, 1000 - d_share), (Nucleus::H2, d_share)];
            // A wide merge on the stored map now and then: other members, refused.
            let merge = if round % 7 == 0 { 40 << 16 } else { 3 << 16 };
            let settled = group(&cat, &stored, &priors, merge).unwrap();
            let mut on_stored = LinePixels::new();
            for (i, c) in cat.iter().enumerate() {
                on_stored.put(i as u8, stored.pixel_q16(c.wavelength_fm).ok());
            }
            let mut shift = LineShift::NONE;
            shift.fill(&stored, &cat, (&on_stored, &settled), 2048);
            let hw = HalfWidth::reciprocal(&fitted);
            let mut lines = LinePixels::new();
            let nodes = shift.place(&fitted, &mut lines).unwrap();
            let mut want = heapless::Vec::<Feature, MAX_FEATURES>::new();
            group_members(&cat, &fitted, &hw, 3 << 16, &mut lines, &mut want);
            let mut got = want.clone();
            for f in want.iter_mut() {
                settle_placed(f, &cat, &fitted, &hw, &priors, &lines).unwrap();
            }
            if shift.settle_from(&settled, &nodes, &mut got) {
                for (g, w) in got.iter().zip(want.iter()) {
                    assert_eq!(
                        (&g.members, g.primary, g.predicted_fm, g.expected),
                        (&w.members, w.primary, w.predicted_fm, w.expected),
                        "round {round}"
                    );
                    let d = (g.predicted_px_q16 - w.predicted_px_q16).abs();
                    assert!(d <= 256, "round {round}: {d}");
                }
                copied += 1;
            } else {
                refused += 1;
            }
        }
        assert!(copied > 150 && refused > 20, "{copied} {refused}");
    }
}
