//! The checks the firmware runs: one frame, a tube profile and a mode each, on the demo bench's
//! configuration.
use glowcheck::calibrate::{CalibrateError, WavelengthMap};
use glowcheck::check::{Config, StoredMap};
use glowcheck::condition::ConditionConfig;
use glowcheck::find::FindConfig;
use glowcheck::judge::profile::{DEUTERIUM, HYDROGEN};
use glowcheck::judge::{Mode, TubeProfile};
use glowcheck::predict::Air;

use crate::traces::{AIR_LEAK, D_LAMP, H_TUBE, PIXELS};

/// One embedded check.
#[derive(Clone, Copy)]
pub struct Case {
    /// Short name printed in the digest.
    pub name: &'static str,
    /// The raw frame.
    pub frame: &'static [u16; PIXELS],
    /// Profile name and rules.
    pub profile: (&'static str, TubeProfile),
    /// How the map is obtained.
    pub mode: Mode,
}

/// Every embedded check, in digest order. The hydrogen tube runs in calibrate mode so the map fit is
/// exercised too; the air-leak tube should fail on unexplained lines.
pub const CASES: [Case; 3] = [
    Case {
        name: "h-tube",
        frame: &H_TUBE,
        profile: ("hydrogen", HYDROGEN),
        mode: Mode::Calibrate,
    },
    Case {
        name: "d-lamp",
        frame: &D_LAMP,
        profile: ("deuterium", DEUTERIUM),
        mode: Mode::Verify,
    },
    Case {
        name: "air-leak",
        frame: &AIR_LEAK,
        profile: ("hydrogen", HYDROGEN),
        mode: Mode::Verify,
    },
];

/// The demo bench's stored map λ(p) = 340 + 0.18 p − 6·10⁻⁶ p² nm over 2048 px, in lib's normalised
/// form (x = (p − 1023.5)/1023.5): b_j = h^j Σ_k C(k, j) c_k centre^(k−j), rounded to 1 fm (the
/// conversion host-sim's `map_convert::to_lib` does for `tests/data/instruments/bench-2048.toml`).
pub const BENCH_MAP_FM: [i64; 4] = [517_944_686, 171_659_373, -6_285_314, 0];

/// The demo bench's configuration (`tests/data/instruments/bench-2048.toml`: 14-bit ADC, 100 ms,
/// 2 e⁻/count, map σ 3 pm, fitted degree 2, line FWHM 3 px, IAU standard air) with `case`'s profile
/// and mode.
pub fn config(case: &Case) -> Result<Config, CalibrateError> {
    config_for(PIXELS as u16, case.profile.1, case.mode)
}

/// [`config`] for a frame of `pixels` px: the map keeps its wavelength range (it is normalised), so a
/// longer frame sees the same lines on more pixels.
pub fn config_for(pixels: u16, profile: TubeProfile, mode: Mode) -> Result<Config, CalibrateError> {
    let map = WavelengthMap::new(pixels, 2, BENCH_MAP_FM)?;
    let mut condition = ConditionConfig::new((1 << 14) - 1, 100_000);
    condition.electrons_per_count_q8 = 2 * 256;
    // Accepted line widths around the instrument's 3 px, as `glowsim check` sets them.
    let fwhm_q8: u16 = 3 * 256;
    let find = FindConfig::for_line_fwhm(fwhm_q8);
    Ok(Config {
        pixels,
        condition,
        find,
        stored: StoredMap {
            map,
            sigma_fm: 3_000,
        },
        mode,
        degree: 2,
        air: Air::Standard,
        line_fwhm_px_q8: fwhm_q8,
        profile,
    })
}
