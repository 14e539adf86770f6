//! Relative line strengths for synthetic spectra (a demo model, not a measured lamp).
//!
//! Photon rate of the n → m line ∝ N_n · A(n→m), with
//! - A(n→m) from Kramers' semiclassical formula, averaged over sub-levels:
//!   A ∝ Z⁴ / (m · n³ · (n² − m²)) (from memory; it gives Hα/Hβ ≈ 5.7 against ≈ 5.2 for the
//!   tabulated quantum values, also from memory: good enough for test data);
//! - upper-level populations from a Boltzmann law at an excitation temperature:
//!   N_n ∝ 2n² · exp(−E_n / kT), E_n the level's energy above the ground state.
//!
//! Real discharges are not in equilibrium, so the temperature is a knob that sets the Balmer
//! decrement, not a measurement.

/// Boltzmann constant in eV/K (CODATA 2018 exact value, from memory).
pub const BOLTZMANN_EV_PER_K: f64 = 8.617_333_262e-5;

/// Relative photon rate of the line `upper → lower` of an ion of charge `z`, whose upper level lies
/// `upper_ev` above the ground state, at excitation temperature `excitation_k`.
pub fn relative_photon_rate(z: u8, lower: u8, upper: u8, upper_ev: f64, excitation_k: f64) -> f64 {
    if lower == 0 || upper <= lower {
        return 0.0;
    }
    let (m, n, z) = (lower as f64, upper as f64, z as f64);
    let a = z.powi(4) / (m * n.powi(3) * (n * n - m * m));
    let population = 2.0 * n * n * libm::exp(-upper_ev / (BOLTZMANN_EV_PER_K * excitation_k));
    a * population
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Balmer decrement: with the level energies of hydrogen (13.6 eV·(1 − 1/n²), from memory) and a
    /// hot excitation temperature, Hα stays the strongest and the series falls off monotonically.
    #[test]
    fn balmer_falls_off() {
        let e = |n: f64| 13.6 * (1.0 - 1.0 / (n * n));
        let rates: Vec<f64> = (3u8..=8)
            .map(|n| relative_photon_rate(1, 2, n, e(n as f64), 20_000.0))
            .collect();
        assert!(rates.windows(2).all(|w| w[0] > w[1]), "{rates:?}");
        let decrement = rates[0] / rates[1];
        assert!(decrement > 3.0 && decrement < 8.0, "{decrement}");
        assert_eq!(relative_photon_rate(1, 3, 3, 1.0, 1e4), 0.0);
    }
}
