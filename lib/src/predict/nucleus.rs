//! The nuclei of one-electron systems the predictor knows, with their masses.
use super::error::PredictError;

/// A nucleus that binds a single electron: H I, He II, Li III … O VIII.
///
/// Reduced mass is what separates isotopes (about 2.7 × 10⁻⁴ in wavelength from H to D), so each
/// isotope is its own variant rather than an element plus a number.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Nucleus {
    /// ¹H, the proton.
    H1,
    /// ²H, the deuteron.
    H2,
    /// ³H, the triton.
    H3,
    /// ³He, the helion (He II).
    He3,
    /// ⁴He, the alpha particle (He II).
    He4,
    /// ⁶Li (Li III).
    Li6,
    /// ⁷Li (Li III).
    Li7,
    /// ⁹Be (Be IV).
    Be9,
    /// ¹¹B (B V).
    B11,
    /// ¹²C (C VI).
    C12,
    /// ¹⁴N (N VII).
    N14,
    /// ¹⁶O (O VIII).
    O16,
}

impl Nucleus {
    /// Every nucleus, lightest first.
    pub const ALL: [Nucleus; 12] = [
        Nucleus::H1,
        Nucleus::H2,
        Nucleus::H3,
        Nucleus::He3,
        Nucleus::He4,
        Nucleus::Li6,
        Nucleus::Li7,
        Nucleus::Be9,
        Nucleus::B11,
        Nucleus::C12,
        Nucleus::N14,
        Nucleus::O16,
    ];

    /// Short symbol used in reports and on the command line: H, D, T, He3, He4, Li6 … O16.
    pub const fn symbol(self) -> &'static str {
        match self {
            Nucleus::H1 => "H",
            Nucleus::H2 => "D",
            Nucleus::H3 => "T",
            Nucleus::He3 => "He3",
            Nucleus::He4 => "He4",
            Nucleus::Li6 => "Li6",
            Nucleus::Li7 => "Li7",
            Nucleus::Be9 => "Be9",
            Nucleus::B11 => "B11",
            Nucleus::C12 => "C12",
            Nucleus::N14 => "N14",
            Nucleus::O16 => "O16",
        }
    }

    /// Spectroscopic name of the one-electron ion (H I, He II …), as the trade writes it.
    pub const fn spectrum(self) -> &'static str {
        match self.z() {
            1 => "H I",
            2 => "He II",
            3 => "Li III",
            4 => "Be IV",
            5 => "B V",
            6 => "C VI",
            7 => "N VII",
            _ => "O VIII",
        }
    }

    /// Nuclear charge Z.
    pub const fn z(self) -> u8 {
        match self {
            Nucleus::H1 | Nucleus::H2 | Nucleus::H3 => 1,
            Nucleus::He3 | Nucleus::He4 => 2,
            Nucleus::Li6 | Nucleus::Li7 => 3,
            Nucleus::Be9 => 4,
            Nucleus::B11 => 5,
            Nucleus::C12 => 6,
            Nucleus::N14 => 7,
            Nucleus::O16 => 8,
        }
    }

    /// Mass number A.
    pub const fn mass_number(self) -> u8 {
        match self {
            Nucleus::H1 => 1,
            Nucleus::H2 => 2,
            Nucleus::H3 | Nucleus::He3 => 3,
            Nucleus::He4 => 4,
            Nucleus::Li6 => 6,
            Nucleus::Li7 => 7,
            Nucleus::Be9 => 9,
            Nucleus::B11 => 11,
            Nucleus::C12 => 12,
            Nucleus::N14 => 14,
            Nucleus::O16 => 16,
        }
    }

    /// Nuclear mass over electron mass, × 10^9.
    ///
    /// H1…He4: CODATA 2022 mass ratios (proton, deuteron, triton, helion, alpha particle), published
    /// digits. Li6…O16: AME 2020 atomic mass (as shipped by the PyPI package periodictable 2.1.0) divided
    /// by the CODATA 2022 electron mass in u, minus Z; the electrons' binding energy (≤ 2 × 10⁻⁸ of the
    /// nuclear mass) is neglected, which moves the reduced mass by under 10⁻¹² relative.
    pub const fn mass_ratio_e9(self) -> u64 {
        match self {
            Nucleus::H1 => 1_836_152_673_426,
            Nucleus::H2 => 3_670_482_967_655,
            Nucleus::H3 => 5_496_921_535_510,
            Nucleus::He3 => 5_495_885_279_840,
            Nucleus::He4 => 7_294_299_541_710,
            Nucleus::Li6 => 10_961_898_254_990,
            Nucleus::Li7 => 12_786_391_879_527,
            Nucleus::Be9 => 16_424_204_736_305,
            Nucleus::B11 => 20_063_735_630_847,
            Nucleus::C12 => 21_868_661_835_338,
            Nucleus::N14 => 25_519_042_374_848,
            Nucleus::O16 => 29_148_945_698_524,
        }
    }

    /// Looks a nucleus up by its [`symbol`](Self::symbol); `H1`, `H2`, `H3`, `He` (= He4) and
    /// lower-case forms are accepted too.
    ///
    /// Loop bound: 12 symbols, then 5 aliases, each compared over ≤ 3 bytes.
    pub fn from_symbol(text: &str) -> Result<Nucleus, PredictError> {
        for n in Nucleus::ALL {
            if n.symbol().eq_ignore_ascii_case(text) {
                return Ok(n);
            }
        }
        let alias = [
            ("H1", Nucleus::H1),
            ("H2", Nucleus::H2),
            ("H3", Nucleus::H3),
            ("He", Nucleus::He4),
            ("p", Nucleus::H1),
        ];
        for (name, n) in alias {
            if name.eq_ignore_ascii_case(text) {
                return Ok(n);
            }
        }
        Err(PredictError::UnknownNucleus)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn symbols_round_trip_and_are_unique() {
        for n in Nucleus::ALL {
            assert_eq!(Nucleus::from_symbol(n.symbol()), Ok(n));
        }
        assert_eq!(Nucleus::from_symbol("d"), Ok(Nucleus::H2));
        assert_eq!(
            Nucleus::from_symbol("Xx"),
            Err(PredictError::UnknownNucleus)
        );
    }

    #[test]
    fn masses_increase_with_mass_number_within_an_element() {
        assert!(Nucleus::H1.mass_ratio_e9() < Nucleus::H2.mass_ratio_e9());
        assert!(Nucleus::H2.mass_ratio_e9() < Nucleus::H3.mass_ratio_e9());
        assert!(Nucleus::He3.mass_ratio_e9() < Nucleus::He4.mass_ratio_e9());
        assert!(Nucleus::Li6.mass_ratio_e9() < Nucleus::Li7.mass_ratio_e9());
    }
}
