//! The predictor's constants against CODATA 2022 as published by the `codata` crate 0.2.2 (same digits as
//! scipy.constants 1.17.1, which the Python checks use), digit for digit at the scale the lib keeps.
use glowcheck::predict::constants::{
    ALPHA_E13, ELECTRON_MASS_U_E16, ELEMENTARY_CHARGE_E28, PLANCK_E42, RYDBERG_PER_M_E6,
    SPEED_OF_LIGHT_M_PER_S,
};
use glowcheck::predict::Nucleus;

/// `value` × 10^`scale`, rounded: the integer the lib should hold for a published value.
fn scaled(value: f64, scale: i32) -> u128 {
    let x = value * 10f64.powi(scale);
    assert!(
        x > 0.0 && x < 2f64.powi(53),
        "{value} x 1e{scale} is not exact in f64"
    );
    x.round() as u128
}

#[test]
fn fine_structure_constant_is_codata_2022() {
    // CODATA 2022 α = 7.297 352 5643(11) × 10⁻³ (CODATA 2018 had …5693).
    assert_eq!(ALPHA_E13, scaled(codata::FINE_STRUCTURE_CONSTANT, 13));
}

#[test]
fn rydberg_constant_is_codata_2022() {
    assert_eq!(RYDBERG_PER_M_E6, scaled(codata::RYDBERG_CONSTANT_SI, 6));
}

#[test]
fn electron_mass_in_u_is_codata_2022() {
    assert_eq!(ELECTRON_MASS_U_E16, scaled(codata::ELECTRON_MASS_IN_U, 16));
}

#[test]
fn exact_si_constants_are_the_defining_values() {
    // SI 2019 defining constants (exact), as CODATA 2022 lists them.
    assert_eq!(
        SPEED_OF_LIGHT_M_PER_S,
        scaled(codata::SPEED_OF_LIGHT_IN_VACUUM_SI, 0)
    );
    assert_eq!(PLANCK_E42, scaled(codata::PLANCK_CONSTANT_SI * 1e34, 8));
    assert_eq!(
        ELEMENTARY_CHARGE_E28,
        scaled(codata::ELEMENTARY_CHARGE * 1e19, 9)
    );
    // The scales in the names: h = PLANCK_E42 × 10⁻⁴², e = ELEMENTARY_CHARGE_E28 × 10⁻²⁸.
    assert!((PLANCK_E42 as f64 * 1e-42 / codata::PLANCK_CONSTANT_SI - 1.0).abs() < 1e-15);
    assert!((ELEMENTARY_CHARGE_E28 as f64 * 1e-28 / codata::ELEMENTARY_CHARGE - 1.0).abs() < 1e-15);
}

#[test]
fn codata_mass_ratios_are_codata_2022() {
    let cases = [
        (Nucleus::H1, codata::PROTON_ELECTRON_MASS_RATIO),
        (Nucleus::H2, codata::DEUTERON_ELECTRON_MASS_RATIO),
        (Nucleus::H3, codata::TRITON_ELECTRON_MASS_RATIO),
        (Nucleus::He3, codata::HELION_ELECTRON_MASS_RATIO),
        (Nucleus::He4, codata::ALPHA_PARTICLE_ELECTRON_MASS_RATIO),
    ];
    for (nucleus, ratio) in cases {
        assert_eq!(
            nucleus.mass_ratio_e9() as u128,
            scaled(ratio, 9),
            "{nucleus:?}"
        );
    }
}

#[test]
fn heavier_masses_use_the_codata_2022_electron_and_atomic_mass_units() {
    // Li6 … O16 ratios are AME 2020 atomic masses (checked digit for digit against periodictable and
    // mendeleev in tests/python/test_nuclear_masses.py) minus Z mₑ. Here: ¹²C, whose atomic mass is 12 u
    // exactly by definition, so its ratio follows from the CODATA 2022 electron mass alone.
    let want = 12.0 / codata::ELECTRON_MASS_IN_U - 6.0;
    let got = Nucleus::C12.mass_ratio_e9() as f64 * 1e-9;
    assert!((got - want).abs() < 2e-9, "C12: {got} vs {want}");
}
