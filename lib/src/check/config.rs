//! The one configuration value an instrument needs: sensor, map, mode, air and tube profile.
use crate::calibrate::WavelengthMap;
use crate::condition::ConditionConfig;
use crate::find::FindConfig;
use crate::judge::{Mode, TubeProfile};
use crate::predict::Air;

/// A stored instrument map (factory or last calibration) with its stated uncertainty.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StoredMap {
    /// The map.
    pub map: WavelengthMap,
    /// 1-σ uncertainty of its wavelengths, femtometres (taken as common to all pixels).
    pub sigma_fm: u32,
}

/// Everything a check needs besides the frame.
#[derive(Clone, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Config {
    /// Sensor pixel count (16 … 4096).
    pub pixels: u16,
    /// Frame conditioning (ADC full scale, exposure, bad pixels …).
    pub condition: ConditionConfig,
    /// Peak finding.
    pub find: FindConfig,
    /// Stored map: the reference in verify mode, the starting point in calibrate mode, and what drift
    /// is measured against. Blind calibration ignores it except for drift and the sensor's range.
    pub stored: StoredMap,
    /// How the map of a check is obtained.
    pub mode: Mode,
    /// Degree of a fitted map, 1…3.
    pub degree: u8,
    /// Medium of the wavelengths (the instrument's; normally [`Air::Standard`] or measured air).
    pub air: Air,
    /// Instrument line width, px (Q8): merges unresolved lines and shapes the isotope pair fit.
    pub line_fwhm_px_q8: u16,
    /// Acceptance rules.
    pub profile: TubeProfile,
}
