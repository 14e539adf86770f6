//! Peak finding's fixed-size tables, owned by the caller so a small core's stack stays small.

use super::detect::{Candidate, MAX_CANDIDATES};
use super::fit::{Fit, FitScratch};
use super::mask::LineMask;
use super::noise::NoiseBlocks;
use super::MAX_PEAKS;
use heapless::Vec;

/// Tables [`find_peaks`](super::find_peaks) fills and reads within one call (≈ 7 KiB: the fits 3 KiB,
/// the noise blocks 1.5 KiB, one fit's window and weights 1.2 KiB, the candidates 1 KiB, the line
/// mask 512 B). Nothing is carried from one
/// frame to the next, so one value serves every frame; keep it in a `static` (inside
/// [`Buffers`](crate::check::Buffers)) rather than on a 4 KiB stack.
pub struct FindWork {
    pub(crate) blocks: NoiseBlocks,
    pub(crate) cands: Vec<Candidate, MAX_CANDIDATES>,
    pub(crate) mask: LineMask,
    /// (fit, candidate pixel), 48 B each.
    pub(crate) fits: Vec<(Fit, u16), MAX_PEAKS>,
    pub(crate) fit: FitScratch,
}

impl FindWork {
    /// Empty tables (a `const` so a `static` can hold them).
    pub const fn new() -> Self {
        Self {
            blocks: NoiseBlocks::new(),
            cands: Vec::new(),
            mask: LineMask::new(),
            fits: Vec::new(),
            fit: FitScratch::new(),
        }
    }
}

impl Default for FindWork {
    fn default() -> Self {
        Self::new()
    }
}
