//! Plain pixel polynomials (what people write down) ↔ lib's normalised [`WavelengthMap`].
//!
//! People give a map as λ(p) = c0 + c1·p + c2·p² + c3·p³ in nm with p the pixel index from 0. lib keeps
//! it as λ(x) = Σ b_j·x^j in femtometres with x = (p − centre)/half-width, centre = half-width =
//! (pixels − 1)/2 (see `glowcheck::calibrate::WavelengthMap::new`). Substituting p = centre + h·x gives
//! b_j = h^j · Σ_{k≥j} C(k, j)·c_k·centre^(k−j) exactly; the host does that in f64 and rounds each b_j
//! to 1 fm, the only loss. The way back is the same binomial expansion of x = (p − centre)/h.
use glowcheck::calibrate::WavelengthMap;

/// Femtometres per nanometre.
pub const FM_PER_NM: f64 = 1e6;

const BINOMIAL: [[f64; 4]; 4] = [
    [1.0, 0.0, 0.0, 0.0],
    [1.0, 1.0, 0.0, 0.0],
    [1.0, 2.0, 1.0, 0.0],
    [1.0, 3.0, 3.0, 1.0],
];

/// Centre and half-width (px) of the normalised coordinate lib uses for a sensor of `pixels`.
pub fn frame_px(pixels: u16) -> (f64, f64) {
    let q16 = ((pixels.max(2) as i32 - 1) << 16) / 2;
    let v = q16 as f64 / 65_536.0;
    (v, v)
}

/// Degree of a plain polynomial: index of its last non-zero coefficient, at least 1.
pub fn degree_of(c_nm: &[f64; 4]) -> u8 {
    (1..4).rev().find(|&k| c_nm[k] != 0.0).unwrap_or(1) as u8
}

/// Plain coefficients (nm) → lib map for `pixels` pixels. Fails when a coefficient is not finite, a
/// normalised coefficient does not fit in femtometres, or lib refuses the map (not monotone).
pub fn to_lib(c_nm: &[f64; 4], pixels: u16) -> Result<WavelengthMap, String> {
    if c_nm.iter().any(|c| !c.is_finite()) {
        return Err("map coefficients must be finite numbers".into());
    }
    let (centre, h) = frame_px(pixels);
    let mut b_fm = [0i64; 4];
    for (j, slot) in b_fm.iter_mut().enumerate() {
        let mut s = 0.0;
        for k in j..4 {
            s += BINOMIAL[k][j] * c_nm[k] * centre.powi((k - j) as i32);
        }
        let fm = (s * h.powi(j as i32) * FM_PER_NM).round();
        if !fm.is_finite() || fm.abs() >= 9.0e18 {
            return Err(format!(
                "map coefficient c{j} gives {s:e} nm at the sensor edge: out of range"
            ));
        }
        *slot = fm as i64;
    }
    let half_q16 = ((pixels.max(2) as i32 - 1) << 16) / 2;
    WavelengthMap::with_frame(half_q16, half_q16, degree_of(c_nm), b_fm, pixels).map_err(|e| {
        format!("lib refuses the map {c_nm:?} over {pixels} px: {e} (λ must change monotonically)")
    })
}

/// lib map → plain coefficients c0..c3 (nm, nm/px, nm/px², nm/px³), p the pixel index from 0.
pub fn to_plain(map: &WavelengthMap) -> [f64; 4] {
    let centre = map.center_px_q16 as f64 / 65_536.0;
    let h = map.half_width_px_q16 as f64 / 65_536.0;
    let mut c = [0.0f64; 4];
    for (k, slot) in c.iter_mut().enumerate() {
        let mut s = 0.0;
        let top = map.degree.min(3) as usize;
        for (j, (row, b_fm)) in BINOMIAL
            .iter()
            .zip(map.coeff_fm)
            .enumerate()
            .take(top + 1)
            .skip(k)
        {
            let b_nm = b_fm as f64 / FM_PER_NM;
            s += b_nm * row[k] * (-centre).powi((j - k) as i32) / h.powi(j as i32);
        }
        *slot = s;
    }
    c
}

/// λ in nm at pixel coordinate `p` of a plain polynomial.
#[cfg(test)]
pub fn nm_at(c_nm: &[f64; 4], p: f64) -> f64 {
    c_nm[0] + p * (c_nm[1] + p * (c_nm[2] + p * c_nm[3]))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn px_q16(p: f64) -> i32 {
        (p * 65_536.0).round() as i32
    }

    /// Plain → lib → plain returns the coefficients, and lib's integer evaluation agrees with the
    /// plain polynomial at every pixel to a few femtometres (fm rounding of b_j plus Q30 x).
    #[test]
    fn round_trip_through_the_normalised_map() {
        let cases: [(u16, [f64; 4]); 4] = [
            (2048, [340.0, 0.18, -6e-6, 0.0]),
            (4096, [400.0, 0.07, -1.5e-6, 4e-11]),
            (512, [650.0, -0.05, 0.0, 0.0]),
            (3648, [190.0, 0.28, -1.2e-5, 3e-10]),
        ];
        for (pixels, c) in cases {
            let map = to_lib(&c, pixels).unwrap();
            assert_eq!(map.degree, degree_of(&c));
            let back = to_plain(&map);
            for k in 0..4 {
                // 0.5 fm on each b_j is the rounding; through the expansion it stays below 1e-5 relative
                // to the coefficient's weight at the far edge.
                let weight = (pixels as f64).powi(k as i32);
                assert!(
                    (back[k] - c[k]).abs() * weight < 5e-6,
                    "{pixels} px c{k}: {} vs {}",
                    back[k],
                    c[k]
                );
            }
            for p in (0..pixels).step_by(97).chain([pixels - 1]) {
                let plain = nm_at(&c, p as f64) * FM_PER_NM;
                let lib = map.wavelength_fm(px_q16(p as f64)).unwrap() as f64;
                assert!(
                    (plain - lib).abs() <= 4.0,
                    "{pixels} px at {p}: {plain} vs {lib}"
                );
                let again = nm_at(&back, p as f64) * FM_PER_NM;
                assert!((plain - again).abs() <= 4.0, "{pixels} px at {p}");
            }
        }
    }

    /// The centre coefficient is λ at the middle pixel and b1 is half the span's slope × half-width:
    /// checked by hand for a straight line.
    #[test]
    fn straight_line_by_hand() {
        let map = to_lib(&[400.0, 0.1, 0.0, 0.0], 2001).unwrap();
        assert_eq!(map.coeff_fm, [500_000_000, 100_000_000, 0, 0]);
        assert_eq!(map.degree, 1);
    }

    #[test]
    fn folded_or_broken_maps_are_refused() {
        let e = to_lib(&[400.0, 0.1, -1e-4, 0.0], 2048).unwrap_err();
        assert!(e.contains("monoton"), "{e}");
        assert!(to_lib(&[f64::NAN, 0.1, 0.0, 0.0], 2048).is_err());
        assert!(to_lib(&[1e20, 0.1, 0.0, 0.0], 2048).is_err());
    }
}
