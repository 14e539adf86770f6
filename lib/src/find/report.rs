//! What peak finding learned about a frame besides its peaks.

/// Summary of one [`find_peaks`](super::find_peaks) call.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FindReport {
    /// Pixels in the frame.
    pub pixels: u16,
    /// Pixels marked saturated, repaired or clamped (excluded from noise estimate and fits).
    pub untrusted_pixels: u16,
    /// Noise σ of the floor (read, dark, quantisation) in frame units (Q8).
    pub noise_floor_q8: u32,
    /// Noise σ at the median baseline level, floor plus continuum shot noise (frame units, Q8).
    pub noise_typical_q8: u32,
    /// Shot-noise variance per frame unit used (Q16).
    pub shot_var_per_unit_q16: u32,
    /// Whether the shot-noise slope was estimated from the frame (`true`) or configured.
    pub shot_from_data: bool,
    /// Local maxima that passed threshold and prominence, before thinning.
    pub candidates: u16,
    /// More peaks qualified than fit in the list; the weakest were dropped.
    pub truncated: bool,
}
