//! Physical properties every prediction must have, over all nuclei and all 1 ≤ m < n ≤ 40 (plain loops:
//! the whole input space is small). The bounds come from the Bohr model with reduced mass plus the size of
//! the Dirac fine-structure term, (Zα)² relative (textbook scaling, from memory).
use glowcheck::predict::{
    line, Air, AirConditions, Components, Line, Lines, Nucleus, PredictError,
};
use std::sync::OnceLock;

const MAX_N: u8 = 40;
/// CODATA 2022 fine-structure constant (also checked against the `codata` crate in predict_constants.rs).
const ALPHA: f64 = 7.297_352_564_3e-3;

/// Every line of every nucleus in IAU standard air, computed once: [nucleus][(m − 1) · 40 + (n − 1)].
fn table() -> &'static Vec<Vec<Option<Line>>> {
    static TABLE: OnceLock<Vec<Vec<Option<Line>>>> = OnceLock::new();
    TABLE.get_or_init(|| {
        Nucleus::ALL
            .iter()
            .map(|&nucleus| {
                let mut row = vec![None; MAX_N as usize * MAX_N as usize];
                for m in 1..MAX_N {
                    for n in m + 1..=MAX_N {
                        row[(m as usize - 1) * MAX_N as usize + n as usize - 1] =
                            Some(line(nucleus, m, n, &Air::Standard).unwrap());
                    }
                }
                row
            })
            .collect()
    })
}

/// The line n → m of `nucleus` in standard air (vacuum_fm does not depend on the air).
fn vac(nucleus: Nucleus, lower: u8, upper: u8) -> Line {
    let i = Nucleus::ALL.iter().position(|&x| x == nucleus).unwrap();
    table()[i][(lower as usize - 1) * MAX_N as usize + upper as usize - 1].unwrap()
}

/// Bohr wavelength with reduced mass, nm: m² n² (1 + mₑ/M) / (R∞ Z² (n² − m²)), R∞ from CODATA 2022.
fn bohr_nm(nucleus: Nucleus, lower: u8, upper: u8) -> f64 {
    let r_inf_per_nm = 10_973_731.568_157e-9;
    let ratio = nucleus.mass_ratio_e9() as f64 * 1e-9;
    let (m2, n2) = ((lower as f64).powi(2), (upper as f64).powi(2));
    let z2 = (nucleus.z() as f64).powi(2);
    m2 * n2 * (1.0 + 1.0 / ratio) / (r_inf_per_nm * z2 * (n2 - m2))
}

#[test]
fn wavelength_falls_as_the_upper_level_rises() {
    for nucleus in Nucleus::ALL {
        for m in 1..MAX_N {
            let mut previous: Option<Line> = None;
            for n in m + 1..=MAX_N {
                let l = vac(nucleus, m, n);
                if let Some(p) = previous {
                    assert!(
                        l.vacuum_fm < p.vacuum_fm,
                        "{nucleus:?} {m}: n={n} not shorter than n={}",
                        n - 1
                    );
                    assert!(l.wavenumber_nk > p.wavenumber_nk, "{nucleus:?} {m} {n}");
                    assert!(l.energy_nev > p.energy_nev, "{nucleus:?} {m} {n}");
                    if let (Some(a), Some(b)) = (l.air_fm, p.air_fm) {
                        assert!(a < b, "{nucleus:?} {m} {n} air");
                    }
                }
                previous = Some(l);
            }
        }
    }
}

#[test]
fn wavelength_rises_with_the_lower_level_at_fixed_upper() {
    for nucleus in Nucleus::ALL {
        for n in 3..=MAX_N {
            for m in 2..n {
                assert!(
                    vac(nucleus, m, n).vacuum_fm > vac(nucleus, m - 1, n).vacuum_fm,
                    "{nucleus:?} {m} {n}"
                );
            }
        }
    }
}

#[test]
fn every_line_is_within_the_fine_structure_bound_of_bohr() {
    // Dirac moves a line from its reduced-mass Bohr place by less than (Zα)² relative, always to the
    // blue (deeper binding of the lower level); recoil terms are (Zα)² mₑ/M smaller still.
    for nucleus in Nucleus::ALL {
        let za2 = (nucleus.z() as f64 * ALPHA).powi(2);
        for m in 1..MAX_N {
            for n in m + 1..=MAX_N {
                let got = vac(nucleus, m, n).vacuum_fm as f64 * 1e-6;
                let rel = got / bohr_nm(nucleus, m, n) - 1.0;
                assert!(
                    rel < 0.0 && rel > -za2,
                    "{nucleus:?} {m} {n}: {rel:e} vs bound {za2:e}"
                );
            }
        }
    }
}

#[test]
fn helium_ion_lines_scale_as_z_squared() {
    // λ(He II) · Z² / λ(H I) equals the reduced-mass ratio up to the fine-structure difference,
    // which is below (Z² − 1) α² relative and makes He II slightly bluer.
    let mass_factor = |n: Nucleus| 1.0 + 1e9 / n.mass_ratio_e9() as f64;
    let expected = mass_factor(Nucleus::He4) / mass_factor(Nucleus::H1);
    let bound = 3.0 * ALPHA * ALPHA;
    for m in 1..MAX_N {
        for n in m + 1..=MAX_N {
            let ratio = 4.0 * vac(Nucleus::He4, m, n).vacuum_fm as f64
                / vac(Nucleus::H1, m, n).vacuum_fm as f64;
            let dev = ratio / expected - 1.0;
            assert!(dev < 0.0 && dev > -bound, "{m} {n}: {dev:e}");
        }
    }
    // The same holds for every heavier ion against hydrogen, with its own Z.
    for nucleus in Nucleus::ALL {
        let z2 = (nucleus.z() as f64).powi(2);
        let expected = mass_factor(nucleus) / mass_factor(Nucleus::H1);
        // Plus 1e-7 for fm rounding (O VIII Lyman-alpha is 1.9 nm = 1.9e6 fm) and mass-dependent recoil.
        let bound = (z2 - 1.0) * ALPHA * ALPHA + 1e-7;
        for (m, n) in [(1, 2), (2, 3), (3, 4), (5, 40)] {
            let ratio =
                z2 * vac(nucleus, m, n).vacuum_fm as f64 / vac(Nucleus::H1, m, n).vacuum_fm as f64;
            let dev = ratio / expected - 1.0;
            assert!(dev <= 1e-7 && dev >= -bound, "{nucleus:?} {m} {n}: {dev:e}");
        }
    }
}

#[test]
fn heavier_isotopes_emit_shorter_wavelengths() {
    let pairs = [
        (Nucleus::H1, Nucleus::H2),
        (Nucleus::H2, Nucleus::H3),
        (Nucleus::He3, Nucleus::He4),
        (Nucleus::Li6, Nucleus::Li7),
    ];
    for (light, heavy) in pairs {
        for m in 1..MAX_N {
            for n in m + 1..=MAX_N {
                let (a, b) = (vac(light, m, n), vac(heavy, m, n));
                assert!(a.vacuum_fm > b.vacuum_fm, "{light:?} vs {heavy:?} {m} {n}");
                // The isotope shift is the reduced-mass ratio up to (Zα)² mₑ/M < 1e-7 relative (recoil
                // terms) and the fm rounding of both lines.
                let want = (1.0 + 1e9 / light.mass_ratio_e9() as f64)
                    / (1.0 + 1e9 / heavy.mass_ratio_e9() as f64);
                let got = a.vacuum_fm as f64 / b.vacuum_fm as f64;
                let tol = 1e-7 + 2.0 / b.vacuum_fm as f64;
                assert!(
                    (got / want - 1.0).abs() < tol,
                    "{light:?}/{heavy:?} {m} {n}: {got} vs {want}"
                );
            }
        }
    }
    // H-alpha, D-alpha and T-alpha in air: about 179 pm and 60 pm apart (from memory).
    let [h, d, t] =
        [Nucleus::H1, Nucleus::H2, Nucleus::H3].map(|n| line(n, 2, 3, &Air::Standard).unwrap());
    assert!((h.vacuum_fm - d.vacuum_fm).abs_diff(179_000) < 2_000);
    assert!((d.vacuum_fm - t.vacuum_fm).abs_diff(60_000) < 2_000);
}

#[test]
fn series_limit_is_approached_from_above() {
    for nucleus in Nucleus::ALL {
        let za2 = (nucleus.z() as f64 * ALPHA).powi(2);
        for m in 1..MAX_N - 1 {
            // Series limit m²(1 + mₑ/M)/(R∞ Z²), less at most (Zα)² relative for fine structure.
            let limit_nm = bohr_nm(nucleus, m, MAX_N) * (1.0 - (m as f64 / MAX_N as f64).powi(2));
            let mut gaps = Vec::new();
            let mut last = u64::MAX;
            for n in m + 1..=MAX_N {
                let fm = vac(nucleus, m, n).vacuum_fm;
                assert!(
                    fm as f64 * 1e-6 > limit_nm * (1.0 - za2),
                    "{nucleus:?} {m} {n}"
                );
                if last != u64::MAX {
                    gaps.push(last - fm);
                }
                last = fm;
            }
            // Successive members crowd together: the gaps shrink monotonically towards the limit.
            assert!(
                gaps.windows(2).all(|w| w[1] < w[0]),
                "{nucleus:?} series {m}: {gaps:?}"
            );
            // And n = 40 sits where the Bohr model puts it relative to the limit, g = 1/(1 − (m/40)²),
            // up to the fine-structure shift of that line, below (Zα)² of it.
            let top = last as f64 * 1e-6;
            let g = 1.0 / (1.0 - (m as f64 / MAX_N as f64).powi(2));
            let rel = top / limit_nm - 1.0;
            assert!(
                (rel - (g - 1.0)).abs() < g * za2,
                "{nucleus:?} {m}: {rel:e} vs {:e}",
                g - 1.0
            );
        }
    }
}

#[test]
fn bad_levels_are_refused_with_their_own_errors() {
    for nucleus in Nucleus::ALL {
        for air in [Air::Vacuum, Air::Standard] {
            assert_eq!(
                line(nucleus, 2, 2, &air),
                Err(PredictError::UpperNotAboveLower)
            );
            assert_eq!(
                line(nucleus, 3, 2, &air),
                Err(PredictError::UpperNotAboveLower)
            );
            assert_eq!(
                line(nucleus, 40, 1, &air),
                Err(PredictError::UpperNotAboveLower)
            );
            assert_eq!(
                line(nucleus, 0, 2, &air),
                Err(PredictError::LevelOutOfRange)
            );
            assert_eq!(
                line(nucleus, 2, 41, &air),
                Err(PredictError::LevelOutOfRange)
            );
            assert_eq!(
                line(nucleus, 1, u8::MAX, &air),
                Err(PredictError::LevelOutOfRange)
            );
            assert!(Components::new(nucleus, 2, 41, &air).is_err());
            assert!(Components::new(nucleus, 3, 3, &air).is_err());
        }
        assert_eq!(
            Lines::new(nucleus, 500_000_000, 400_000_000, &Air::Standard).err(),
            Some(PredictError::InvertedWindow)
        );
    }
    // Every error has a message a user can act on.
    for e in [
        PredictError::UnknownNucleus,
        PredictError::LevelOutOfRange,
        PredictError::UpperNotAboveLower,
        PredictError::InvertedWindow,
        PredictError::AirTemperatureOutOfRange,
        PredictError::AirPressureOutOfRange,
        PredictError::AirHumidityOutOfRange,
    ] {
        assert!(e.to_string().len() > 10, "{e:?}");
    }
    assert_eq!(
        Nucleus::from_symbol("Xe").err(),
        Some(PredictError::UnknownNucleus)
    );
    assert_eq!(
        Nucleus::from_symbol("").err(),
        Some(PredictError::UnknownNucleus)
    );
}

#[test]
fn absurd_air_conditions_are_refused() {
    assert!(AirConditions::new(20_000, 101_325, 500).is_ok());
    for (t, p, h) in [
        (-273_150, 101_325, 0),
        (200_000, 101_325, 0),
        (20_000, 0, 0),
        (20_000, 10_000_000, 0),
        (20_000, 101_325, 1_001),
        (i32::MIN, u32::MAX, u16::MAX),
    ] {
        assert!(AirConditions::new(t, p, h).is_err(), "{t} {p} {h}");
    }
}

/// All lines of `nucleus` in standard air with vacuum wavelength in [from, to], from `line()` for every pair.
fn brute_force(nucleus: Nucleus, from_fm: u64, to_fm: u64) -> Vec<Line> {
    let mut out = Vec::new();
    for m in 1..MAX_N {
        for n in m + 1..=MAX_N {
            let l = vac(nucleus, m, n);
            if (from_fm..=to_fm).contains(&l.vacuum_fm) {
                out.push(l);
            }
        }
    }
    out.sort_by_key(|l| (l.vacuum_fm, l.lower, l.upper));
    out
}

#[test]
fn window_iterator_is_sorted_and_complete() {
    for nucleus in Nucleus::ALL {
        let h_alpha = vac(nucleus, 2, 3).vacuum_fm;
        let windows = [
            (0, u64::MAX),
            (380_000_000, 750_000_000),
            (h_alpha, h_alpha), // a window exactly one line wide (bounds inclusive)
            (h_alpha + 1, h_alpha + 1), // and one just past it
            (1, 2),             // nothing there
        ];
        for (from, to) in windows {
            let want = brute_force(nucleus, from, to);
            let got: Vec<Line> = Lines::new(nucleus, from, to, &Air::Standard)
                .unwrap()
                .map(|r| r.unwrap())
                .collect();
            assert!(
                got.windows(2).all(|w| w[0].vacuum_fm <= w[1].vacuum_fm),
                "{nucleus:?} {from} {to}: unsorted"
            );
            let mut got_sorted = got.clone();
            got_sorted.sort_by_key(|l| (l.vacuum_fm, l.lower, l.upper));
            assert_eq!(got_sorted, want, "{nucleus:?} window {from}..={to}");
            if to == u64::MAX {
                assert_eq!(got.len(), 780, "{nucleus:?}: 39 · 40 / 2 lines with n ≤ 40");
            }
        }
    }
}

#[test]
fn components_share_out_the_line() {
    for nucleus in [Nucleus::H1, Nucleus::H2, Nucleus::He4, Nucleus::O16] {
        for (m, n) in [(1, 2), (2, 3), (2, 7), (3, 4), (4, 40), (39, 40)] {
            let l = line(nucleus, m, n, &Air::Standard).unwrap();
            let comps: Vec<_> = Components::new(nucleus, m, n, &Air::Standard)
                .unwrap()
                .map(|c| c.unwrap())
                .collect();
            assert!(!comps.is_empty());
            let total: u64 = comps.iter().map(|c| c.relative_ppm as u64).sum();
            assert!(
                total.abs_diff(1_000_000) <= comps.len() as u64,
                "{nucleus:?} {m} {n}: {total} ppm"
            );
            // The photon-weighted mean of the components is the line's centroid (ppm rounding allows
            // about 1e-6 of the component spread). Above n = 16 the component shares are an
            // approximation (lib's predict::strength docs) while the centroid comes from exact
            // moments, so only n <= 16 is held to it.
            if n > 16 {
                continue;
            }
            let mean = comps
                .iter()
                .map(|c| c.vacuum_fm as f64 * c.relative_ppm as f64)
                .sum::<f64>()
                / total as f64;
            let spread = comps.iter().map(|c| c.vacuum_fm).max().unwrap()
                - comps.iter().map(|c| c.vacuum_fm).min().unwrap();
            assert!(
                // The centroid leaves out the σ³ factor and the next order of the Dirac energy in
                // 1/(j+½): both of relative size (Zα)² against the spread (3.4e-3 for O VIII).
                (mean - l.vacuum_fm as f64).abs()
                    <= 2.0 + spread as f64 * (comps.len() as f64 * 1e-6 + 2e-3),
                "{nucleus:?} {m} {n}: mean {mean} vs centroid {}",
                l.vacuum_fm
            );
            for c in &comps {
                assert!(c.upper_l < n && c.lower_l < m && c.upper_l.abs_diff(c.lower_l) == 1);
                assert!(
                    c.upper_j2.abs_diff(2 * c.upper_l) == 1
                        && c.lower_j2.abs_diff(2 * c.lower_l) == 1
                );
                assert!(c.upper_j2.abs_diff(c.lower_j2) <= 2);
            }
        }
    }
}
