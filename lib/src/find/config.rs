//! Tuning of peak finding; part of the instrument configuration.

use super::FindError;

/// What counts as a line and how the noise is modelled.
///
/// Scales: `_q8` values are ×256, `_q16` ×65536. Defaults ([`FindConfig::DEFAULT`]) suit instrument
/// profiles of 2–12 px FWHM.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FindConfig {
    /// Narrowest expected line (px, Q8, ≥ 1 px); fits are not allowed to shrink below half of it, and
    /// fits narrower than [`SPIKE_FWHM_Q8`](super::SPIKE_FWHM_Q8) of it are dropped as one-pixel spikes.
    pub fwhm_min_px_q8: u16,
    /// Widest expected line (px, Q8, ≤ 16 px); sets the baseline scale (continuum features broader than
    /// about 4× this survive as baseline) and the fit window.
    pub fwhm_max_px_q8: u16,
    /// Detection threshold on the smoothed residual, in noise σ of that smoothed residual (Q8).
    pub threshold_sigma_q8: u16,
    /// Minimum prominence (dip to the higher neighbouring valley) in the same σ (Q8).
    pub prominence_sigma_q8: u16,
    /// Peaks closer than this are merged into the stronger one (px, Q8).
    pub min_separation_px_q8: u16,
    /// Peaks closer than this many of their FWHM are marked blended (Q8).
    pub blend_fwhm_q8: u16,
    /// Shot-noise variance per unit of signal (frame units² per frame unit, Q16) when known, e.g.
    /// [`ConditionedInfo::shot_var_per_unit_q16`](crate::condition::ConditionedInfo); `None` estimates it
    /// from how the noise grows with the continuum level.
    pub shot_var_per_unit_q16: Option<u32>,
}

impl FindConfig {
    /// Defaults: FWHM 2–12 px, threshold 5 σ (keeps false peaks near 1e-3 per 2048-px noise frame, common
    /// practice for Gaussian noise), prominence 3 σ, merge closer than 1.5 px, blended closer than
    /// 1.5 FWHM, shot noise from the data.
    pub const DEFAULT: Self = Self {
        fwhm_min_px_q8: 2 << 8,
        fwhm_max_px_q8: 12 << 8,
        threshold_sigma_q8: 5 << 8,
        prominence_sigma_q8: 3 << 8,
        min_separation_px_q8: 384,
        blend_fwhm_q8: 384,
        shot_var_per_unit_q16: None,
    };

    /// [`DEFAULT`](Self::DEFAULT) with the accepted line widths widened, where needed, to cover an
    /// instrument whose lines are `line_fwhm_px_q8` wide (Q8 px): from half of it (≥ 1 px) to 1.5 × it
    /// (≤ 16 px). The host's `glowsim check` and the firmware configure peak finding the same way.
    pub fn for_line_fwhm(line_fwhm_px_q8: u16) -> Self {
        let mut c = Self::DEFAULT;
        c.fwhm_min_px_q8 = c.fwhm_min_px_q8.min((line_fwhm_px_q8 / 2).max(256));
        c.fwhm_max_px_q8 = c
            .fwhm_max_px_q8
            .max(line_fwhm_px_q8.saturating_mul(3) / 2)
            .min(16 << 8);
        c
    }

    /// Checks ranges: 1 px ≤ FWHM min ≤ FWHM max ≤ 16 px; threshold and prominence > 0.
    pub(crate) fn check(&self) -> Result<(), FindError> {
        let ok = self.fwhm_min_px_q8 >= 256
            && self.fwhm_min_px_q8 <= self.fwhm_max_px_q8
            && self.fwhm_max_px_q8 <= 16 << 8
            && self.threshold_sigma_q8 > 0
            && self.prominence_sigma_q8 > 0;
        if ok {
            Ok(())
        } else {
            Err(FindError::BadConfig)
        }
    }
}

impl Default for FindConfig {
    fn default() -> Self {
        Self::DEFAULT
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn default_is_valid_and_ranges_checked() {
        assert_eq!(FindConfig::DEFAULT.check(), Ok(()));
        let mut c = FindConfig::DEFAULT;
        c.fwhm_min_px_q8 = 100;
        assert_eq!(c.check(), Err(FindError::BadConfig));
        let mut c = FindConfig::DEFAULT;
        c.fwhm_max_px_q8 = 17 << 8;
        assert_eq!(c.check(), Err(FindError::BadConfig));
        let mut c = FindConfig::DEFAULT;
        c.fwhm_min_px_q8 = 13 << 8;
        assert_eq!(c.check(), Err(FindError::BadConfig));
        let mut c = FindConfig::DEFAULT;
        c.threshold_sigma_q8 = 0;
        assert_eq!(c.check(), Err(FindError::BadConfig));
    }

    #[test]
    fn line_width_only_widens_the_defaults_within_the_limits() {
        // 3 px lines: the minimum goes down to 1.5 px, the default maximum (12 px) already covers 4.5.
        let c = FindConfig::for_line_fwhm(3 << 8);
        assert_eq!((c.fwhm_min_px_q8, c.fwhm_max_px_q8), (384, 12 << 8));
        // 1.5 px: minimum down to 0.75 px, held at 1 px.
        assert_eq!(FindConfig::for_line_fwhm(384).fwhm_min_px_q8, 256);
        // 10 px: maximum up to 15 px; 14 px would ask for 21 px and gets 16.
        assert_eq!(FindConfig::for_line_fwhm(10 << 8).fwhm_max_px_q8, 15 << 8);
        assert_eq!(FindConfig::for_line_fwhm(14 << 8).fwhm_max_px_q8, 16 << 8);
        for w in [0u16, 1, 256, 3 << 8, 16 << 8, u16::MAX] {
            assert_eq!(FindConfig::for_line_fwhm(w).check(), Ok(()), "{w}");
        }
    }
}
