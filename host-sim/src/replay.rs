//! Trace replay: a recorded or synthetic trace as the sample source of lib's acquisition driver.
//!
//! [`TraceReplay`] implements `glowcheck::acquire::SampleSource`, the trait a board implements for its
//! ADC: it hands out a trace's counts pixel by pixel, frame after frame, in file order. Driving
//! `glowcheck::acquire::LinearArray` with it (and the no-op [`IdlePin`] and [`NoWait`] for the lines
//! and the timing) runs the firmware's acquisition code on the desk, frame boundaries included.
// Used by the tests today; the desk commands read traces directly.
#![cfg_attr(not(test), allow(dead_code))]

use crate::trace::{FrameKind, Trace};
use glowcheck::acquire::{SampleErrorKind, SampleSource};

/// Replays a trace's counts as samples; past the last frame every read reports
/// [`SampleErrorKind::Exhausted`].
pub struct TraceReplay<'a> {
    trace: &'a Trace,
    frame: usize,
    pixel: usize,
}

impl<'a> TraceReplay<'a> {
    /// Starts at the first pixel of the trace's first frame.
    pub fn new(trace: &'a Trace) -> Self {
        TraceReplay {
            trace,
            frame: 0,
            pixel: 0,
        }
    }

    /// The kind of the frame the next sample comes from; `None` past the last frame.
    pub fn next_kind(&self) -> Option<FrameKind> {
        self.trace.frames.get(self.frame).map(|f| f.kind)
    }
}

impl SampleSource for TraceReplay<'_> {
    type Error = SampleErrorKind;

    /// The next count; a count above 65 535 (a co-added trace) is refused and skipped.
    fn read_sample(&mut self) -> Result<u16, SampleErrorKind> {
        let frame = self
            .trace
            .frames
            .get(self.frame)
            .ok_or(SampleErrorKind::Exhausted)?;
        let count = frame.counts.get(self.pixel).copied();
        self.pixel += 1;
        if self.pixel >= frame.counts.len() {
            self.pixel = 0;
            self.frame += 1;
        }
        let count = count.ok_or(SampleErrorKind::Exhausted)?;
        u16::try_from(count).map_err(|_| SampleErrorKind::OutOfRange)
    }
}

/// A start or clock line with nothing behind it.
pub struct IdlePin;

impl embedded_hal::digital::ErrorType for IdlePin {
    type Error = core::convert::Infallible;
}

impl embedded_hal::digital::OutputPin for IdlePin {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
}

/// A delay that returns at once: a replay has no exposure to wait for.
pub struct NoWait;

impl embedded_hal::delay::DelayNs for NoWait {
    fn delay_ns(&mut self, _ns: u32) {}
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::trace::Frame;
    use glowcheck::acquire::{ArrayConfig, ArrayTiming, LinearArray, ReadError};
    use std::path::Path;

    fn driver(trace: &Trace) -> LinearArray<IdlePin, IdlePin, NoWait, TraceReplay<'_>> {
        let pixels = u16::try_from(trace.pixels).unwrap();
        let us = u32::try_from(trace.integration_us.unwrap_or(100_000)).unwrap();
        let timing = ArrayTiming::new(ArrayConfig::new(pixels, us, 1_000)).unwrap();
        LinearArray::new(IdlePin, IdlePin, NoWait, TraceReplay::new(trace), timing)
    }

    /// A demo trace (one signal, two dark frames of 2048 px) read back through lib's driver gives the
    /// file's counts exactly, frame by frame, then reports the end of the trace.
    #[test]
    fn driver_reads_a_trace_back_exactly() {
        let path = Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../tests/data/demo/traces/d-lamp-0207.trace");
        let trace = Trace::read_path(&path).unwrap();
        assert_eq!(trace.frames.len(), 3);
        let mut array = driver(&trace);
        let mut frame = vec![0u16; trace.pixels];
        for (i, want) in trace.frames.iter().enumerate() {
            assert_eq!(array.source_mut().next_kind(), Some(want.kind));
            array.read_frame(&mut frame).unwrap();
            let got: Vec<u32> = frame.iter().map(|&c| u32::from(c)).collect();
            assert_eq!(got, want.counts, "frame {i}");
        }
        assert_eq!(array.source_mut().next_kind(), None);
        assert_eq!(
            array.read_frame(&mut frame),
            Err(ReadError::Sample {
                pixel: 0,
                kind: SampleErrorKind::Exhausted
            })
        );
    }

    /// A count that does not fit the driver's 16-bit samples is refused with its pixel, and the
    /// replay stays aligned to frame boundaries afterwards.
    #[test]
    fn co_added_counts_above_16_bits_are_refused() {
        let mut trace = Trace::new(3);
        trace.frames.push(Frame {
            kind: FrameKind::Signal,
            counts: vec![1, 70_000, 3],
        });
        trace.frames.push(Frame {
            kind: FrameKind::Dark,
            counts: vec![4, 5, 65_535],
        });
        trace.integration_us = Some(1_000);
        let mut array = driver(&trace);
        let mut frame = [0u16; 3];
        assert_eq!(
            array.read_frame(&mut frame),
            Err(ReadError::Sample {
                pixel: 1,
                kind: SampleErrorKind::OutOfRange
            })
        );
        // The failed frame's last pixel is still pending; skip it, then the dark frame reads whole.
        assert_eq!(array.source_mut().read_sample(), Ok(3));
        assert_eq!(array.source_mut().next_kind(), Some(FrameKind::Dark));
        array.read_frame(&mut frame).unwrap();
        assert_eq!(frame, [4, 5, 65_535]);
    }
}
