//! One found line and the bounded list that holds them.

use heapless::Vec;

/// Most peaks one frame reports; a hydrogen or deuterium lamp shows far fewer lines than this.
pub const MAX_PEAKS: usize = 64;

/// The peaks of one frame, sorted by centre.
pub type PeakList = Vec<Peak, MAX_PEAKS>;

/// A line found in a frame. Pixel 0 is the first value of the frame; "frame units" are the units of the
/// frame handed to [`find_peaks`](super::find_peaks) (Q4 counts after [`condition`](crate::condition)).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Peak {
    /// Centre of the fitted Gaussian (px, Q16); pixel i spans i − 0.5 … i + 0.5.
    pub center_px_q16: i32,
    /// 1-σ uncertainty of the centre from the Fisher information of the noise model (px, Q16).
    pub center_sigma_px_q16: u32,
    /// Full width at half maximum of the fitted profile as sampled by the pixels (px, Q16).
    pub fwhm_px_q16: u32,
    /// Fitted height above the baseline (frame units).
    pub height: i32,
    /// Fitted area above the baseline (frame units × px, i.e. summed counts).
    pub area: i64,
    /// Height over the baseline noise σ at the peak (Q8).
    pub snr_q8: u32,
    /// A pixel within the fit window reached full scale: height and area are lower bounds.
    pub saturated: bool,
    /// Another peak lies within [`FindConfig::blend_fwhm_q8`](super::FindConfig) FWHM: centre and width
    /// may be pulled by it.
    pub blended: bool,
}
