//! Vacuum → air wavelengths.
//!
//! Instruments in a room measure air wavelengths; a line 656 nm long in vacuum is about 0.18 nm shorter
//! in air, far beyond any instrument's tolerance, so every prediction says which medium it is for.
//!
//! - [`Air::Standard`]: IAU standard air, Morton (2000, ApJS 130, 403, eq. 8), the Birch & Downs (1994)
//!   revision of Edlén for dry air at 15 °C, 101 325 Pa, 450 ppm CO₂:
//!   (n − 1) × 10⁸ = 8342.54 + 2 406 147 / (130 − s²) + 15 998 / (38.9 − s²), s = 1/λ_vac in µm⁻¹.
//! - [`Air::Conditions`]: the modified Edlén equation of Birch & Downs (1993, Metrologia 30, 155;
//!   corrected 1994, Metrologia 31, 315) for temperature t, pressure p and water-vapour pressure f:
//!   (n − 1)_tp = (n − 1)_s · p [1 + 10⁻⁸ (0.601 − 0.00972 t) p] / (96 095.43 (1 + 0.003661 t)),
//!   n_tpf = n_tp − f (3.7345 − 0.0401 s²) × 10⁻¹⁰; f = RH × saturation pressure (IAPWS-IF97 over water,
//!   over ice below 0 °C; generated table in 1 °C steps, linear in between).
//!
//! Below 200 nm (vacuum) air absorbs and no air wavelength is given. The dispersion formula was fitted
//! over about 230–1700 nm; beyond it the values are an extrapolation.
//!
//! Refractivity is carried as (n − 1) × 10²⁰ in an i128 (resolution 10⁻²⁰, far below the 10⁻¹¹ that
//! 0.1 pm at 1 µm needs).
use super::error::PredictError;
use super::vapour_table::{SVP_MAX_C, SVP_MIN_C, SVP_MPA};
use crate::fixed::mul_div_i128;

/// Shortest vacuum wavelength with an air value: 200 nm, in fm.
pub const AIR_MIN_VACUUM_FM: u64 = 200_000_000;

/// The medium a wavelength is quoted in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Air {
    /// Vacuum only: no air wavelengths are computed.
    Vacuum,
    /// IAU standard air (Morton 2000).
    Standard,
    /// Air at a measured temperature, pressure and humidity (modified Edlén, Birch & Downs 1993/1994).
    Conditions(AirConditions),
}

/// Laboratory air, validated on construction so that the conversion itself cannot fail.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AirConditions {
    temperature_mc: i32,
    pressure_pa: u32,
    humidity_permille: u16,
}

impl AirConditions {
    /// Air at `temperature_mc` (milli-degrees Celsius, −20 000 … 50 000), `pressure_pa` (50 000 …
    /// 120 000 Pa) and relative humidity `humidity_permille` (0 … 1000 ‰).
    pub fn new(
        temperature_mc: i32,
        pressure_pa: u32,
        humidity_permille: u16,
    ) -> Result<Self, PredictError> {
        if !(SVP_MIN_C * 1000..=SVP_MAX_C * 1000).contains(&temperature_mc) {
            return Err(PredictError::AirTemperatureOutOfRange);
        }
        if !(50_000..=120_000).contains(&pressure_pa) {
            return Err(PredictError::AirPressureOutOfRange);
        }
        if humidity_permille > 1000 {
            return Err(PredictError::AirHumidityOutOfRange);
        }
        Ok(AirConditions {
            temperature_mc,
            pressure_pa,
            humidity_permille,
        })
    }

    /// Temperature in milli-degrees Celsius.
    pub fn temperature_mc(&self) -> i32 {
        self.temperature_mc
    }

    /// Pressure in pascal.
    pub fn pressure_pa(&self) -> u32 {
        self.pressure_pa
    }

    /// Relative humidity in per mille.
    pub fn humidity_permille(&self) -> u16 {
        self.humidity_permille
    }

    /// Partial pressure of water vapour in mPa.
    fn vapour_mpa(&self) -> i128 {
        let t = self.temperature_mc - SVP_MIN_C * 1000;
        let idx = (t / 1000) as usize;
        let frac = (t % 1000) as i128;
        let lo = SVP_MPA.get(idx).copied().unwrap_or(0) as i128;
        let hi = SVP_MPA.get(idx + 1).copied().unwrap_or(lo as u32) as i128;
        let svp = lo + (hi - lo) * frac / 1000;
        svp * self.humidity_permille as i128 / 1000
    }
}

const E20: i128 = 100_000_000_000_000_000_000;
const E18: i128 = 1_000_000_000_000_000_000;

impl Air {
    /// (n − 1) × 10²⁰ at a vacuum wavelength; `None` in vacuum mode or below 200 nm.
    ///
    /// Work: fixed, ≤ 5 [`mul_div_i128`](crate::fixed::mul_div_i128) (≤ 128 loop steps each).
    pub fn refractivity_e20(&self, vacuum_fm: u64) -> Option<i128> {
        if vacuum_fm < AIR_MIN_VACUUM_FM {
            return None;
        }
        // s² in units of 10⁻¹⁸ µm⁻²: (10⁹ / λ_fm)² µm⁻².
        let lam = vacuum_fm as i128;
        let s2 = mul_div_i128(E18, E18, lam.checked_mul(lam)?)?;
        let standard = 834_254 * 10_000_000_000
            + mul_div_i128(2_406_147 * 1_000_000_000_000, E18, 130 * E18 - s2)?
            + mul_div_i128(15_998 * 1_000_000_000_000, E18, 389 * E18 / 10 - s2)?;
        match self {
            Air::Vacuum => None,
            Air::Standard => Some(standard),
            Air::Conditions(c) => {
                let p = c.pressure_pa as i128;
                let t = c.temperature_mc as i128;
                let a = standard.checked_mul(p)?;
                let b = 10_000_000_000_000_000 + p * (60_100_000 - 972 * t);
                let tp = mul_div_i128(a, b, 10_000_000_000_000_000)?;
                let tp = mul_div_i128(tp, 100_000_000_000, 9_609_543 * (1_000_000_000 + 3661 * t))?;
                let water = c.vapour_mpa() * (37_345_000 - 401 * s2 / 1_000_000_000_000_000);
                Some(tp - water)
            }
        }
    }

    /// Air wavelength in fm for a vacuum wavelength in fm; `None` in vacuum mode or below 200 nm.
    ///
    /// Work: fixed, ≤ 6 [`mul_div_i128`](crate::fixed::mul_div_i128).
    pub fn air_wavelength_fm(&self, vacuum_fm: u64) -> Option<u64> {
        let nm1 = self.refractivity_e20(vacuum_fm)?;
        let fm = mul_div_i128(vacuum_fm as i128, E20, E20 + nm1)?;
        u64::try_from(fm).ok()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn standard_air_shortens_h_alpha_by_181_pm() {
        // 656.461 nm vacuum → 656.280 nm air: the handbook Hα (656.28 nm, from memory).
        let air = Air::Standard.air_wavelength_fm(656_461_000).unwrap();
        let shift_fm = 656_461_000 - air;
        assert!((180_900..=181_500).contains(&shift_fm), "{shift_fm}");
    }

    #[test]
    fn no_air_value_in_vacuum_or_below_200_nm() {
        assert_eq!(Air::Standard.air_wavelength_fm(121_567_000), None);
        assert_eq!(Air::Vacuum.air_wavelength_fm(656_000_000), None);
    }

    #[test]
    fn lower_pressure_means_less_refraction() {
        let sea = AirConditions::new(20_000, 101_325, 0).unwrap();
        let high = AirConditions::new(20_000, 80_000, 0).unwrap();
        let a = Air::Conditions(sea).refractivity_e20(500_000_000).unwrap();
        let b = Air::Conditions(high).refractivity_e20(500_000_000).unwrap();
        assert!(b < a);
        // Humid air refracts less than dry air at the same T and p.
        let wet = AirConditions::new(20_000, 101_325, 800).unwrap();
        assert!(Air::Conditions(wet).refractivity_e20(500_000_000).unwrap() < a);
    }

    #[test]
    fn absurd_air_is_refused() {
        assert_eq!(
            AirConditions::new(90_000, 101_325, 0),
            Err(PredictError::AirTemperatureOutOfRange)
        );
        assert_eq!(
            AirConditions::new(20_000, 10, 0),
            Err(PredictError::AirPressureOutOfRange)
        );
        assert_eq!(
            AirConditions::new(20_000, 101_325, 1001),
            Err(PredictError::AirHumidityOutOfRange)
        );
    }
}
