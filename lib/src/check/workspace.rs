//! Caller-owned memory for one check: no heap, and the caller decides where it lives.
use super::pipeline::MapInUse;
use crate::calibrate::IdentifyWork;
use crate::condition::MAX_PIXELS;
use crate::find::{FindWork, PeakList, SCRATCH_PER_PIXEL};
use crate::matching::assign::Pair;
use crate::matching::feature::{Feature, MAX_FEATURES};
use crate::matching::isotope::BlendReading;
use heapless::Vec;

/// Borrowed buffers for a frame of N pixels: `frame` and `flags` of N, `scratch` of 2N.
pub struct Workspace<'a> {
    /// Conditioned frame (Q4 counts).
    pub frame: &'a mut [i32],
    /// Per-pixel condition flags.
    pub flags: &'a mut [u8],
    /// Peak-finding scratch; its first N cells hold the baseline afterwards.
    pub scratch: &'a mut [i32],
    /// The frame's peaks (2 KiB), kept here rather than on the stack of a small core.
    pub peaks: &'a mut PeakList,
    /// Peak finding's tables (≈ 8 KiB), for the same reason.
    pub find: &'a mut FindWork,
    /// Calibration and matching's tables (≈ 8 KiB), for the same reason.
    pub matching: &'a mut MatchWork,
}

/// What calibration and matching keep for one check (the features, 1.6 KiB; the map in use with its
/// fit and the lines' pixels, ≈ 700 B; identification's tables, ≈ 5 KiB; the pairs and isotope
/// readings, ≈ 0.9 KiB); nothing carries over to the next frame.
pub struct MatchWork {
    pub(super) features: Vec<Feature, MAX_FEATURES>,
    pub(super) map: MapInUse,
    pub(super) identify: IdentifyWork,
    /// Feature–peak pairs, from matching to judging.
    pub(super) pairs: Vec<Pair, MAX_PAIRS>,
    /// Blended isotope pairs' positions, for the share by position (0.8 KiB).
    pub(super) readings: Vec<BlendReading, MAX_READINGS>,
    /// Each feature's (line, feature) match windows, px Q16.
    pub(super) windows: Vec<(i32, i32), MAX_FEATURES>,
}

/// Most feature–peak pairs one check keeps (one per feature).
pub(super) const MAX_PAIRS: usize = MAX_FEATURES;
/// Most blended isotope pairs read for the share by position.
pub(super) const MAX_READINGS: usize = 24;

impl MatchWork {
    /// Empty (a `const`, so a `static` can hold it).
    pub const fn new() -> Self {
        Self {
            features: Vec::new(),
            map: MapInUse::EMPTY,
            identify: IdentifyWork::new(),
            pairs: Vec::new(),
            readings: Vec::new(),
            windows: Vec::new(),
        }
    }
}

impl Default for MatchWork {
    fn default() -> Self {
        Self::new()
    }
}

/// Owned buffers for frames up to `N` pixels (13 N bytes + 2 KiB of peaks + ≈ 15 KiB of tables):
/// put one in a `static` on a microcontroller.
pub struct Buffers<const N: usize> {
    frame: [i32; N],
    flags: [u8; N],
    scratch: [[i32; SCRATCH_PER_PIXEL]; N],
    peaks: PeakList,
    find: FindWork,
    matching: MatchWork,
}

impl<const N: usize> Buffers<N> {
    /// Zeroed buffers. `N` above [`MAX_PIXELS`] is refused at compile time.
    pub const fn new() -> Self {
        const {
            assert!(
                N <= MAX_PIXELS,
                "glowcheck frames are at most MAX_PIXELS long"
            )
        };
        Buffers {
            frame: [0; N],
            flags: [0; N],
            scratch: [[0; SCRATCH_PER_PIXEL]; N],
            peaks: PeakList::new(),
            find: FindWork::new(),
            matching: MatchWork::new(),
        }
    }

    /// A workspace for a frame of `pixels` ≤ N pixels (clamped to N).
    pub fn workspace(&mut self, pixels: usize) -> Workspace<'_> {
        let n = pixels.min(N);
        let scratch = self.scratch.as_flattened_mut();
        Workspace {
            frame: self.frame.get_mut(..n).unwrap_or_default(),
            flags: self.flags.get_mut(..n).unwrap_or_default(),
            scratch: scratch.get_mut(..SCRATCH_PER_PIXEL * n).unwrap_or_default(),
            peaks: &mut self.peaks,
            find: &mut self.find,
            matching: &mut self.matching,
        }
    }
}

impl<const N: usize> Default for Buffers<N> {
    fn default() -> Self {
        Self::new()
    }
}
