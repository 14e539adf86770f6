//! Physical constants, kept as the exact decimal digits their source publishes.
//!
//! Storing the published digits as integers (value × 10^k) keeps every derived quantity reproducible
//! bit for bit and lets a test compare them digit for digit with the source.

/// Fine-structure constant α × 10^13. CODATA 2022: α = 0.007 297 352 5643(11).
pub const ALPHA_E13: u128 = 72_973_525_643;

/// Rydberg constant R∞ in m⁻¹ × 10^6. CODATA 2022: R∞ = 10 973 731.568 157(12) m⁻¹.
pub const RYDBERG_PER_M_E6: u128 = 10_973_731_568_157;

/// Electron mass in unified atomic mass units × 10^16. CODATA 2022: mₑ = 5.485 799 090 441(97) × 10⁻⁴ u.
pub const ELECTRON_MASS_U_E16: u128 = 5_485_799_090_441;

/// Speed of light in vacuum, m/s (exact in the SI since 1983).
pub const SPEED_OF_LIGHT_M_PER_S: u128 = 299_792_458;

/// Planck constant × 10^42 in J s (exact in the SI since 2019: h = 6.626 070 15 × 10⁻³⁴ J s).
pub const PLANCK_E42: u128 = 662_607_015;

/// Elementary charge × 10^28 in C (exact in the SI since 2019: e = 1.602 176 634 × 10⁻¹⁹ C).
pub const ELEMENTARY_CHARGE_E28: u128 = 1_602_176_634;

/// Highest principal quantum number the predictor accepts. Bounds every loop over levels.
pub const MAX_N: u8 = 40;
