//! What conditioning learned about a frame, for the stages after it.

/// Summary of one [`condition_frame`](super::condition_frame) call.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ConditionedInfo {
    /// Pixels written.
    pub pixels: u16,
    /// Readouts summed in the signal.
    pub frames: u16,
    /// Pixels saturated in the signal or the dark.
    pub saturated_pixels: u16,
    /// Pixels replaced from the bad-pixel map.
    pub repaired_pixels: u16,
    /// Pixels whose value was clamped to the `i32` range.
    pub clamped_pixels: u16,
    /// Shot-noise variance per unit of output signal (output units² per output unit, Q16), when the
    /// conversion gain is configured; hand it to peak finding so line cores get their own noise.
    pub shot_var_per_unit_q16: Option<u32>,
}
