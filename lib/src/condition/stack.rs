//! Co-adding raw readouts so faint lines rise above read noise without losing track of saturation.

use super::{ConditionError, MAX_COADD, MAX_PIXELS};

/// Marks a summed pixel that reached full scale in at least one added readout.
///
/// No honest sum reaches it: [`MAX_COADD`] × `u16::MAX` = 16 776 960 < `u32::MAX`, so the mark needs no
/// extra buffer and survives being passed around as a plain slice.
pub const SATURATED_SUM: u32 = u32::MAX;

/// Accumulates up to [`MAX_COADD`] raw readouts into a caller-owned `u32` buffer.
///
/// Each element holds the sum of raw ADC counts (scale 1 count) or [`SATURATED_SUM`].
#[derive(Debug)]
pub struct Stack<'a> {
    sum: &'a mut [u32],
    full_scale_counts: u16,
    frames: u16,
}

impl<'a> Stack<'a> {
    /// Clears `sum` and prepares to add readouts whose ADC saturates at `full_scale_counts`.
    ///
    /// Raw values `>= full_scale_counts` count as saturated. Loop bound: `sum.len()` ≤ [`MAX_PIXELS`].
    pub fn new(sum: &'a mut [u32], full_scale_counts: u16) -> Result<Self, ConditionError> {
        check_len(sum.len())?;
        if full_scale_counts == 0 {
            return Err(ConditionError::BadConfig);
        }
        sum.iter_mut().for_each(|s| *s = 0);
        Ok(Self {
            sum,
            full_scale_counts,
            frames: 0,
        })
    }

    /// Adds one readout; returns how many readouts the stack now holds.
    ///
    /// Refuses (and changes nothing) when the length differs or [`MAX_COADD`] readouts are already in.
    /// Loop bound: one pass over the pixels.
    pub fn add(&mut self, raw: &[u16]) -> Result<u16, ConditionError> {
        if raw.len() != self.sum.len() {
            return Err(ConditionError::LengthMismatch);
        }
        if self.frames >= MAX_COADD {
            return Err(ConditionError::FrameCount);
        }
        for (s, &r) in self.sum.iter_mut().zip(raw) {
            if r >= self.full_scale_counts {
                *s = SATURATED_SUM;
            } else if *s != SATURATED_SUM {
                *s = s.saturating_add(u32::from(r));
            }
        }
        self.frames = self.frames.saturating_add(1);
        Ok(self.frames)
    }

    /// Number of readouts added so far.
    pub fn frames(&self) -> u16 {
        self.frames
    }

    /// A read-only view for [`condition_frame`](super::condition_frame); fails while the stack is empty.
    pub fn view(&self) -> Result<FrameSum<'_>, ConditionError> {
        FrameSum::stacked(self.sum, self.frames)
    }
}

/// Where a frame's counts live: one raw readout, or a sum made by a [`Stack`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Counts<'a> {
    Raw(&'a [u16]),
    Sum(&'a [u32]),
}

/// A validated, read-only frame: counts plus how many readouts they sum.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FrameSum<'a> {
    counts: Counts<'a>,
    frames: u16,
}

impl<'a> FrameSum<'a> {
    /// One raw readout (1 count per unit); saturation is judged against the configured full scale.
    pub fn single(raw: &'a [u16]) -> Result<Self, ConditionError> {
        check_len(raw.len())?;
        Ok(Self {
            counts: Counts::Raw(raw),
            frames: 1,
        })
    }

    /// A sum of `frames` readouts (1 count per unit, [`SATURATED_SUM`] marks saturation).
    pub fn stacked(sum: &'a [u32], frames: u16) -> Result<Self, ConditionError> {
        check_len(sum.len())?;
        if frames == 0 || frames > MAX_COADD {
            return Err(ConditionError::FrameCount);
        }
        Ok(Self {
            counts: Counts::Sum(sum),
            frames,
        })
    }

    /// Pixel count.
    pub fn len(&self) -> usize {
        match self.counts {
            Counts::Raw(r) => r.len(),
            Counts::Sum(s) => s.len(),
        }
    }

    /// Always false: a `FrameSum` is validated non-empty; present for API symmetry with slices.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Readouts in the sum (1..=[`MAX_COADD`]).
    pub fn frames(&self) -> u16 {
        self.frames
    }

    /// The readout itself when this is a single raw readout (the conditioning fast path).
    pub(crate) fn raw(&self) -> Option<&'a [u16]> {
        match self.counts {
            Counts::Raw(r) => Some(r),
            Counts::Sum(_) => None,
        }
    }

    /// Largest count [`sum_at`](Self::sum_at) can return, or a clipped pixel can stand for:
    /// `u16::MAX` for a raw readout, `u32::MAX` for a sum. Bounds the conditioning arithmetic.
    pub(crate) fn max_count(&self) -> u32 {
        match self.counts {
            Counts::Raw(_) => u32::from(u16::MAX),
            Counts::Sum(_) => u32::MAX,
        }
    }

    /// Summed counts of pixel `i`, or `None` when saturated (by `full_scale_counts` for a raw readout, by
    /// the [`SATURATED_SUM`] mark for a stack) or out of range.
    pub(crate) fn sum_at(&self, i: usize, full_scale_counts: u16) -> Option<u32> {
        match self.counts {
            Counts::Raw(r) => {
                let v = *r.get(i)?;
                (v < full_scale_counts).then_some(u32::from(v))
            }
            Counts::Sum(s) => {
                let v = *s.get(i)?;
                (v != SATURATED_SUM).then_some(v)
            }
        }
    }
}

fn check_len(len: usize) -> Result<(), ConditionError> {
    if len == 0 {
        Err(ConditionError::Empty)
    } else if len > MAX_PIXELS {
        Err(ConditionError::TooManyPixels)
    } else {
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sums_and_marks_saturation_sticky() {
        let mut buf = [7u32; 3];
        let mut st = Stack::new(&mut buf, 4095).unwrap();
        assert_eq!(st.add(&[10, 4095, 20]).unwrap(), 1);
        assert_eq!(st.add(&[11, 0, 4094]).unwrap(), 2);
        let v = st.view().unwrap();
        assert_eq!(v.frames(), 2);
        assert_eq!(v.sum_at(0, 4095), Some(21));
        assert_eq!(
            v.sum_at(1, 4095),
            None,
            "saturation must stick after a later low value"
        );
        assert_eq!(v.sum_at(2, 4095), Some(4114));
    }

    #[test]
    fn refuses_the_257th_frame_and_wrong_lengths() {
        let mut buf = [0u32; 2];
        let mut st = Stack::new(&mut buf, u16::MAX).unwrap();
        for _ in 0..MAX_COADD {
            st.add(&[u16::MAX - 1, 1]).unwrap();
        }
        assert_eq!(st.add(&[1, 1]), Err(ConditionError::FrameCount));
        assert_eq!(st.frames(), MAX_COADD);
        let v = st.view().unwrap();
        assert_eq!(v.sum_at(0, 0), Some(256 * 65534));
        let mut buf2 = [0u32; 2];
        let mut st2 = Stack::new(&mut buf2, 100).unwrap();
        assert_eq!(st2.add(&[1, 2, 3]), Err(ConditionError::LengthMismatch));
        assert_eq!(st2.view(), Err(ConditionError::FrameCount));
    }

    #[test]
    fn size_limits() {
        let mut empty: [u32; 0] = [];
        assert_eq!(
            Stack::new(&mut empty, 10).err(),
            Some(ConditionError::Empty)
        );
        let mut big = [0u32; MAX_PIXELS + 1];
        assert_eq!(
            Stack::new(&mut big, 10).err(),
            Some(ConditionError::TooManyPixels)
        );
        assert!(Stack::new(&mut big[..MAX_PIXELS], 10).is_ok());
        assert_eq!(FrameSum::single(&[]), Err(ConditionError::Empty));
        assert_eq!(FrameSum::stacked(&[1], 0), Err(ConditionError::FrameCount));
        assert_eq!(
            FrameSum::stacked(&[1], MAX_COADD + 1),
            Err(ConditionError::FrameCount)
        );
        let raw = [5u16, 9];
        let f = FrameSum::single(&raw).unwrap();
        assert_eq!(f.sum_at(1, 9), None);
        assert_eq!(f.sum_at(0, 9), Some(5));
        assert_eq!(f.sum_at(2, 9), None);
    }
}
