//! Catalogue lines' pixels on the map of one check, found once: grouping places every line, and
//! the later steps (blend splitting, member look-ups, the isotope pair) ask for the same pixels.
use super::catalogue::{CatalogueLine, MAX_CATALOGUE};
use crate::calibrate::WavelengthMap;

/// Pixels of catalogue lines on the map in use, recorded as grouping inverts the map for them (a
/// Newton iteration each).
///
/// Each line's state is a byte ([`UNKNOWN`], [`OFF_MAP`], [`PLACED`]), not a bit of a `u64`: a
/// variable 64-bit shift is a library call on the Cortex-M0, and the steps after grouping ask
/// some 150 times per frame.
#[derive(Clone)]
pub(crate) struct LinePixels {
    px: [i32; MAX_CATALOGUE],
    state: [u8; MAX_CATALOGUE],
}

/// Line not looked up yet.
const UNKNOWN: u8 = 0;
/// Line looked up: the map cannot place it.
const OFF_MAP: u8 = 1;
/// Line looked up: its pixel is in `px`.
const PLACED: u8 = 2;

impl LinePixels {
    pub(crate) const fn new() -> LinePixels {
        LinePixels {
            px: [0; MAX_CATALOGUE],
            state: [UNKNOWN; MAX_CATALOGUE],
        }
    }

    /// Pixel of catalogue line `i` (= `line`), `None` where the map cannot place it: the recorded
    /// one, else inverted now (the same value).
    pub(crate) fn get(&self, i: u8, line: &CatalogueLine, map: &WavelengthMap) -> Option<i32> {
        match self.recorded(i) {
            Some(at) => at,
            None => map.pixel_q16(line.wavelength_fm).ok(),
        }
    }

    /// Line `i`'s recorded pixel: `None` when not recorded, `Some(None)` when the map cannot place
    /// it.
    pub(crate) fn recorded(&self, i: u8) -> Option<Option<i32>> {
        let i = i as usize;
        match self.state.get(i).copied() {
            Some(PLACED) => Some(self.px.get(i).copied()),
            Some(OFF_MAP) => Some(None),
            _ => None,
        }
    }

    /// Records line `i`'s pixel as already found on the map in use (`None`: it cannot be placed),
    /// so [`get`](Self::get) does not invert the map for it again.
    pub(crate) fn put(&mut self, i: u8, px: Option<i32>) {
        let i = i as usize;
        let (Some(slot), Some(state)) = (self.px.get_mut(i), self.state.get_mut(i)) else {
            return;
        };
        match px {
            Some(p) => {
                *slot = p;
                *state = PLACED;
            }
            None => *state = OFF_MAP,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Recording follows the last put of each line, unrecorded lines are inverted, and lines past
    /// the table are never recorded.
    #[test]
    fn records_the_last_put_and_inverts_the_rest() {
        let map = WavelengthMap::new(2048, 1, [500_000_000, 150_000_000, 0, 0]).unwrap();
        let line = CatalogueLine::test_h1(520_000_000, 1);
        let mut lines = LinePixels::new();
        assert_eq!(lines.recorded(3), None);
        assert_eq!(
            lines.get(3, &line, &map),
            map.pixel_q16(line.wavelength_fm).ok()
        );
        lines.put(3, Some(77));
        assert_eq!(lines.recorded(3), Some(Some(77)));
        assert_eq!(lines.get(3, &line, &map), Some(77));
        lines.put(3, None);
        assert_eq!(lines.recorded(3), Some(None));
        assert_eq!(lines.get(3, &line, &map), None);
        lines.put(3, Some(-5));
        assert_eq!(lines.recorded(3), Some(Some(-5)));
        assert_eq!(lines.recorded(4), None);
        let past = MAX_CATALOGUE as u8;
        lines.put(past, Some(1));
        assert_eq!(lines.recorded(past), None);
        assert_eq!(
            lines.get(past, &line, &map),
            map.pixel_q16(line.wavelength_fm).ok()
        );
    }
}
