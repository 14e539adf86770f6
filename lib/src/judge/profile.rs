//! What a good tube of a given kind looks like.
use crate::predict::Nucleus;

/// Most species one profile names.
pub const MAX_SPECIES: usize = 3;

/// A species the tube should (or may) emit, with the share of its element's light it should have.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ExpectedSpecies {
    /// The nucleus.
    pub nucleus: Nucleus,
    /// Smallest acceptable share of the element's line photons (‰). 0 marks an optional species.
    pub min_share_permille: u16,
    /// Largest acceptable share (‰).
    pub max_share_permille: u16,
}

/// Acceptance rules for one kind of tube. Data, not code: bundled ones are consts, the host reads TOML.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TubeProfile {
    /// Expected species; the first is the primary one (its lines seed calibration).
    pub species: [Option<ExpectedSpecies>; MAX_SPECIES],
    /// Fewest matched lines of the expected species for a verdict.
    pub min_lines: u8,
    /// Largest |measured − predicted| of a matched line, femtometres.
    pub max_line_error_fm: u32,
    /// Largest share of peak area in unexplained peaks (‰).
    pub max_unexplained_permille: u16,
    /// Strongest matched line must reach this SNR (Q8) for a verdict.
    pub min_snr_q8: u32,
    /// Whether saturated lines still allow a verdict (positions survive clipping; shares do not).
    pub allow_saturation: bool,
    /// Whether an undeterminable isotope share makes the verdict inconclusive (else it is a note).
    pub isotope_required: bool,
    /// Largest drift of the instrument map from the stored one in calibrate mode, femtometres.
    pub max_drift_fm: u32,
}

const fn species(nucleus: Nucleus, min: u16, max: u16) -> Option<ExpectedSpecies> {
    Some(ExpectedSpecies {
        nucleus,
        min_share_permille: min,
        max_share_permille: max,
    })
}

/// Defaults shared by the bundled profiles: 3 lines, 50 pm position error (about 0.3 px on a
/// 0.15 nm/px instrument), 5 % unexplained light, SNR 20, no saturation, 0.5 nm drift.
const BASE: TubeProfile = TubeProfile {
    species: [None, None, None],
    min_lines: 3,
    max_line_error_fm: 50_000,
    max_unexplained_permille: 50,
    min_snr_q8: 20 << 8,
    allow_saturation: false,
    isotope_required: false,
    max_drift_fm: 500_000,
};

/// A hydrogen (protium) tube: H at least 95 % of the hydrogen light.
pub const HYDROGEN: TubeProfile = TubeProfile {
    species: [
        species(Nucleus::H1, 950, 1000),
        species(Nucleus::H2, 0, 50),
        None,
    ],
    ..BASE
};

/// A deuterium lamp or tube: D at least 90 % of the hydrogen light.
pub const DEUTERIUM: TubeProfile = TubeProfile {
    species: [
        species(Nucleus::H2, 900, 1000),
        species(Nucleus::H1, 0, 100),
        None,
    ],
    isotope_required: true,
    ..BASE
};

/// A deliberate H + D mix, each between 20 % and 80 %.
pub const HYDROGEN_DEUTERIUM: TubeProfile = TubeProfile {
    species: [
        species(Nucleus::H1, 200, 800),
        species(Nucleus::H2, 200, 800),
        None,
    ],
    isotope_required: true,
    ..BASE
};

/// A helium discharge hot enough to show He II; hydrogen impurity lines are allowed.
pub const HELIUM_ION: TubeProfile = TubeProfile {
    species: [
        species(Nucleus::He4, 900, 1000),
        species(Nucleus::H1, 0, 1000),
        None,
    ],
    min_lines: 2,
    max_unexplained_permille: 600,
    ..BASE
};

/// The bundled profiles by name.
pub const BUNDLED: [(&str, TubeProfile); 4] = [
    ("hydrogen", HYDROGEN),
    ("deuterium", DEUTERIUM),
    ("hydrogen-deuterium", HYDROGEN_DEUTERIUM),
    ("helium-ion", HELIUM_ION),
];

impl TubeProfile {
    /// The expected species that are present in the list.
    ///
    /// At most [`MAX_SPECIES`] items.
    pub fn expected(&self) -> impl Iterator<Item = &ExpectedSpecies> {
        self.species.iter().flatten()
    }

    /// The primary species (first listed); `None` for a profile with no species.
    ///
    /// Loop bound: ≤ [`MAX_SPECIES`] slots.
    pub fn primary(&self) -> Option<Nucleus> {
        self.expected().next().map(|s| s.nucleus)
    }

    /// A bundled profile by name.
    ///
    /// Loop bound: the 4 [`BUNDLED`] names.
    pub fn bundled(name: &str) -> Option<TubeProfile> {
        BUNDLED.iter().find(|(n, _)| *n == name).map(|(_, p)| *p)
    }
}
