//! Catalogue lines' pixels on the map of one check, found once: grouping places every line, and
//! the later steps (blend splitting, member look-ups, the isotope pair) ask for the same pixels.
use super::catalogue::{CatalogueLine, MAX_CATALOGUE};
use crate::calibrate::WavelengthMap;

/// Pixels of catalogue lines on the map in use, recorded as grouping inverts the map for them (a
/// Newton iteration each).
#[derive(Clone)]
pub(crate) struct LinePixels {
    px: [i32; MAX_CATALOGUE],
    /// Bit i: line i looked up; `placed` bit i: it has a pixel.
    known: u64,
    placed: u64,
}

impl LinePixels {
    pub(crate) const fn new() -> LinePixels {
        LinePixels {
            px: [0; MAX_CATALOGUE],
            known: 0,
            placed: 0,
        }
    }

    /// Pixel of catalogue line `i` (= `line`), `None` where the map cannot place it: the recorded
    /// one, else inverted now (the same value).
    pub(crate) fn get(&self, i: u8, line: &CatalogueLine, map: &WavelengthMap) -> Option<i32> {
        let (Some(&slot), true) = (self.px.get(i as usize), i < 64) else {
            return map.pixel_q16(line.wavelength_fm).ok();
        };
        let bit = 1u64 << i;
        if self.known & bit == 0 {
            return map.pixel_q16(line.wavelength_fm).ok();
        }
        (self.placed & bit != 0).then_some(slot)
    }

    /// Line `i`'s recorded pixel: `None` when not recorded, `Some(None)` when the map cannot place
    /// it.
    pub(crate) fn recorded(&self, i: u8) -> Option<Option<i32>> {
        let bit = 1u64.checked_shl(i as u32)?;
        if self.known & bit == 0 {
            return None;
        }
        Some((self.placed & bit != 0).then(|| self.px.get(i as usize).copied().unwrap_or(0)))
    }

    /// Records line `i`'s pixel as already found on the map in use (`None`: it cannot be placed),
    /// so [`get`](Self::get) does not invert the map for it again.
    pub(crate) fn put(&mut self, i: u8, px: Option<i32>) {
        let (Some(slot), true) = (self.px.get_mut(i as usize), i < 64) else {
            return;
        };
        let bit = 1u64 << i;
        self.known |= bit;
        match px {
            Some(p) => {
                *slot = p;
                self.placed |= bit;
            }
            None => self.placed &= !bit,
        }
    }
}
