//! Marker lines of gases and vapours that turn up in hydrogen-like discharge tubes by mistake.
//!
//! A hint, not an identification: an unexplained peak near one of these is reported with its name.
//! Air wavelengths in nm × 10^6 (fm). Sources: NIST Atomic Spectra Database strong-line lists for Hg I,
//! Na I, He I, Ar I, O I, and Pearse & Gaydon, *The Identification of Molecular Spectra* (4th ed., 1976)
//! for N₂ / N₂⁺ band heads — all values from memory, to about 0.01 nm, which is far below the windows
//! used.

/// A foreign marker line.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Marker {
    /// Air wavelength, femtometres.
    pub wavelength_fm: i64,
    /// What emits it, as reports print it.
    pub name: &'static str,
}

const fn m(nm_e6: i64, name: &'static str) -> Marker {
    Marker {
        wavelength_fm: nm_e6,
        name,
    }
}

/// The catalogue, sorted by wavelength.
pub const MARKERS: [Marker; 27] = [
    m(337_130_000, "N2 337.1 band head (air leak?)"),
    m(357_690_000, "N2 357.7 band head (air leak?)"),
    m(380_490_000, "N2 380.5 band head (air leak?)"),
    m(388_865_000, "He I 388.9"),
    m(391_440_000, "N2+ 391.4 band head (air leak?)"),
    m(399_840_000, "N2 399.8 band head (air leak?)"),
    m(404_656_000, "Hg I 404.7"),
    m(427_810_000, "N2+ 427.8 band head (air leak?)"),
    m(435_833_000, "Hg I 435.8"),
    m(447_148_000, "He I 447.1"),
    m(501_568_000, "He I 501.6"),
    m(546_074_000, "Hg I 546.1"),
    m(576_960_000, "Hg I 577.0"),
    m(579_066_000, "Hg I 579.1"),
    m(587_562_000, "He I 587.6"),
    m(588_995_000, "Na I 589.0 (D2)"),
    m(589_592_000, "Na I 589.6 (D1)"),
    m(667_815_000, "He I 667.8"),
    m(696_543_000, "Ar I 696.5"),
    m(706_519_000, "He I 706.5"),
    m(706_722_000, "Ar I 706.7"),
    m(750_387_000, "Ar I 750.4"),
    m(763_511_000, "Ar I 763.5"),
    m(777_194_000, "O I 777.2 (air leak?)"),
    m(811_531_000, "Ar I 811.5"),
    m(844_636_000, "O I 844.6 (air leak?)"),
    m(912_297_000, "Ar I 912.3"),
];

/// Index of the marker nearest to `wavelength_fm` within `window_fm`.
///
/// Loop bound: the 27 [`MARKERS`].
pub fn nearest_marker(wavelength_fm: i64, window_fm: i64) -> Option<u8> {
    // The catalogue is sorted with distinct wavelengths (tested), so the nearest marker is one of
    // the two around the wavelength; on a tie the lower one (the lower index), as a scan keeping the
    // first least distance would pick. A binary search: an unexplained peak costs ~5 steps, not 27.
    let i = MARKERS.partition_point(|mk| mk.wavelength_fm < wavelength_fm);
    let d = |k: usize| {
        MARKERS
            .get(k)
            .map(|mk| (mk.wavelength_fm - wavelength_fm).abs())
    };
    let below = i.checked_sub(1).and_then(|k| Some((k, d(k)?)));
    let above = d(i).map(|v| (i, v));
    let best = match (below, above) {
        (Some(b), Some(a)) if a.1 < b.1 => a,
        (Some(b), _) => b,
        (None, Some(a)) => a,
        (None, None) => return None,
    };
    (best.1 <= window_fm).then_some(best.0 as u8)
}

/// The plain scan [`nearest_marker`] stands for: the first marker at the least distance within the
/// window.
#[cfg(test)]
fn nearest_marker_by_scan(wavelength_fm: i64, window_fm: i64) -> Option<u8> {
    let mut best: Option<(u8, i64)> = None;
    for (i, mk) in MARKERS.iter().enumerate() {
        let d = (mk.wavelength_fm - wavelength_fm).abs();
        if d <= window_fm && best.is_none_or(|(_, bd)| d < bd) {
            best = Some((i as u8, d));
        }
    }
    best.map(|(i, _)| i)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn catalogue_is_sorted_and_lookups_respect_the_window() {
        assert!(MARKERS
            .windows(2)
            .all(|w| w[0].wavelength_fm < w[1].wavelength_fm));
        assert_eq!(
            nearest_marker(546_100_000, 200_000).map(|i| MARKERS[i as usize].name),
            Some("Hg I 546.1")
        );
        assert_eq!(nearest_marker(620_000_000, 500_000), None);
    }

    #[test]
    fn nearest_marker_is_the_scan() {
        let mut next = crate::test_rng::xorshift(0x3c6e_f372_fe94_f82bu64);
        let mut hits = 0;
        for round in 0..100_000u64 {
            // Around the markers (midpoints and exact ties included), and anywhere.
            let w = match round % 4 {
                0 => (next() % 400_000_000) as i64 + 300_000_000,
                1 => {
                    let k = (next() % 26) as usize;
                    (MARKERS[k].wavelength_fm + MARKERS[k + 1].wavelength_fm) / 2
                        + (next() % 3) as i64
                        - 1
                }
                2 => {
                    MARKERS[(next() % 27) as usize].wavelength_fm + (next() % 2_000_001) as i64
                        - 1_000_000
                }
                _ => next() as i64 >> 1,
            };
            let window = match round % 3 {
                0 => 300_000,
                1 => (next() % 20_000_000) as i64,
                _ => i64::MAX >> (next() % 40),
            };
            let got = nearest_marker(w, window);
            assert_eq!(got, nearest_marker_by_scan(w, window), "{w} {window}");
            hits += usize::from(got.is_some());
        }
        assert!(hits > 20_000, "{hits}");
    }
}
