//! Conversions from a level gap (Q80 of mₑc²) to wavelength, wavenumber and photon energy.
//!
//! Only R∞, α and the exact SI constants enter: λ = α² / (2 R∞ Δε) since mₑc/h = 2R∞/α².
use super::constants::{
    ALPHA_E13, ELEMENTARY_CHARGE_E28, MAX_N, PLANCK_E42, RYDBERG_PER_M_E6, SPEED_OF_LIGHT_M_PER_S,
};
use super::error::PredictError;
use crate::fixed::{div_round_u128, mul_div_u128, Q80_ONE};

/// Checks 1 ≤ lower < upper ≤ [`MAX_N`].
pub(crate) fn check_pair(lower: u8, upper: u8) -> Result<(), PredictError> {
    if lower == 0 || upper == 0 || lower > MAX_N || upper > MAX_N {
        return Err(PredictError::LevelOutOfRange);
    }
    if upper <= lower {
        return Err(PredictError::UpperNotAboveLower);
    }
    Ok(())
}

/// Vacuum wavelength in fm of a gap Δε (Q80): α² / (2 R∞ Δε).
pub(crate) fn wavelength_fm(gap_q80: u128) -> Result<u64, PredictError> {
    // α_e13² · 2^80 / Δε carries 10^-26 / (10^-6 m⁻¹) = 10^-20 m; 10^-20 m = 10^-5 fm.
    let q = mul_div_u128(ALPHA_E13 * ALPHA_E13, Q80_ONE, gap_q80).ok_or(PredictError::Overflow)?;
    let fm = div_round_u128(q, 2 * RYDBERG_PER_M_E6 * 100_000).ok_or(PredictError::Overflow)?;
    u64::try_from(fm).map_err(|_| PredictError::Overflow)
}

/// Vacuum wavenumber in nanokayser (1 nK = 10⁻⁹ cm⁻¹) of a gap Δε (Q80).
pub(crate) fn wavenumber_nk(gap_q80: u128) -> Result<u64, PredictError> {
    // σ = 2 R∞ Δε / α²; R_e6 · 10^-6 m⁻¹ = R_e6 · 10^-8 cm⁻¹ = R_e6 · 10 nK; α² = α_e13² · 10^-26.
    let a = mul_div_u128(
        gap_q80,
        2 * RYDBERG_PER_M_E6 * 10_000_000_000_000,
        ALPHA_E13 * ALPHA_E13,
    )
    .ok_or(PredictError::Overflow)?;
    let nk = mul_div_u128(a, 100_000_000_000_000, Q80_ONE).ok_or(PredictError::Overflow)?;
    u64::try_from(nk).map_err(|_| PredictError::Overflow)
}

/// Photon energy in nano-electronvolts of a wavenumber in nanokayser: E = h c σ / e (exact SI constants).
pub(crate) fn energy_nev(wavenumber_nk: u64) -> Result<u64, PredictError> {
    // h c / e = c · h_e42 / e_e28 · 10^-14 eV m; σ = nk · 10^-7 m⁻¹; result × 10^9 nev.
    let num = SPEED_OF_LIGHT_M_PER_S * PLANCK_E42;
    let a = mul_div_u128(wavenumber_nk as u128, num, ELEMENTARY_CHARGE_E28)
        .ok_or(PredictError::Overflow)?;
    let nev = div_round_u128(a, 1_000_000_000_000).ok_or(PredictError::Overflow)?;
    u64::try_from(nev).map_err(|_| PredictError::Overflow)
}
