//! The driver of a clocked linear photodiode array: a start pulse, a pixel clock and an analog video
//! output, generic over embedded-hal 1.0 pins and delay and over a [`SampleSource`] for the video.
//!
//! # What the driver assumes of the array
//! - The array takes the start pin's level on a rising clock edge; start high at that edge begins a
//!   readout scan.
//! - Each following rising edge puts the next pixel (pixel 0 first) on the video output, valid after
//!   half a clock period and held while the clock is high.
//! - Reading a pixel out empties it: its exposure runs from one scan's edge to the next scan's edge.
//! - Some arrays need a few more clocks after the last pixel to end a scan
//!   ([`ArrayConfig::trailing_clocks`](super::ArrayConfig::trailing_clocks)).
//!
//! # State machine of [`LinearArray::read_frame`]
//! ```text
//!  idle         start ↓  clock ↓
//!  scan         start ↑ ·h· clock ↑ ·h· start ↓ clock ↓ ·h·       start pulse, 3 h
//!               N × [ clock ↑ ·h· sample clock ↓ ·h· ]            one pixel each, 2 h + sample
//!               T × [ clock ↑ ·h· clock ↓ ·h· ]                   trailing clocks, 2 h each
//!  frame        idle → scan (empties; waits the sample time instead of sampling)
//!                    → wait (exposure − one scan) → scan (samples into the caller's frame)
//! ```
//! `h` is the clock half period, N the pixel count, T the trailing clocks
//! ([`ArrayConfig`](super::ArrayConfig)). Because both scans run at the same pace, every pixel is
//! exposed for exactly the integration time (as far as the board's delay keeps time: a delay that
//! rounds up to whole microseconds wants whole-microsecond half periods).

use super::{ArrayTiming, ReadError, SampleError, SampleSource};
use embedded_hal::delay::DelayNs;
use embedded_hal::digital::{Error as _, OutputPin};

/// A clocked linear photodiode array on two output pins, a delay and a sample source.
///
/// The driver owns its parts while it runs and hands them back from [`LinearArray::release`].
pub struct LinearArray<Start, Clock, Delay, Source> {
    start: Start,
    clock: Clock,
    delay: Delay,
    source: Source,
    timing: ArrayTiming,
}

impl<Start, Clock, Delay, Source> LinearArray<Start, Clock, Delay, Source>
where
    Start: OutputPin,
    Clock: OutputPin,
    Delay: DelayNs,
    Source: SampleSource,
{
    /// Takes the pins, the delay and the source; nothing moves until the first
    /// [`read_frame`](Self::read_frame). The timing was checked when it was made, so this cannot fail.
    pub fn new(
        start: Start,
        clock: Clock,
        delay: Delay,
        source: Source,
        timing: ArrayTiming,
    ) -> Self {
        Self {
            start,
            clock,
            delay,
            source,
            timing,
        }
    }

    /// The timing in use.
    pub fn timing(&self) -> &ArrayTiming {
        &self.timing
    }

    /// Uses another timing from the next frame on (e.g. a new exposure from
    /// [`ArrayTiming::with_integration_us`]).
    pub fn set_timing(&mut self, timing: ArrayTiming) {
        self.timing = timing;
    }

    /// The sample source, e.g. for a board to read another ADC channel between frames.
    pub fn source_mut(&mut self) -> &mut Source {
        &mut self.source
    }

    /// Ends the driver and hands back its parts in the order [`new`](Self::new) took them.
    pub fn release(self) -> (Start, Clock, Delay, Source) {
        (self.start, self.clock, self.delay, self.source)
    }

    /// Reads one frame of [`ArrayTiming::pixels`] samples into `frame` (ADC counts, pixel 0 first),
    /// each pixel exposed for the configured integration time; see the module's state machine.
    ///
    /// Loop bound: two scans of `pixels` (≤ [`MAX_ARRAY_PIXELS`](super::MAX_ARRAY_PIXELS)) +
    /// `trailing_clocks` (≤ 65 535) clock cycles each; wall time is one exposure plus one scan.
    pub fn read_frame(&mut self, frame: &mut [u16]) -> Result<(), ReadError> {
        if frame.len() != usize::from(self.timing.pixels()) {
            return Err(ReadError::FrameLength);
        }
        self.start_low()?;
        self.clock_low()?;
        self.empty_scan()?;
        self.wait();
        self.reading_scan(frame)
    }

    /// The first scan: empties every pixel, waiting the sample time where the second scan samples.
    fn empty_scan(&mut self) -> Result<(), ReadError> {
        self.start_pulse()?;
        let sample_ns = self.timing.config().sample_time_ns;
        for _ in 0..self.timing.pixels() {
            self.clock_high()?;
            self.half();
            if sample_ns > 0 {
                self.delay.delay_ns(sample_ns);
            }
            self.clock_low()?;
            self.half();
        }
        self.trailing()
    }

    /// The second scan: the same clocks, one sample per pixel into `frame`.
    fn reading_scan(&mut self, frame: &mut [u16]) -> Result<(), ReadError> {
        self.start_pulse()?;
        for (pixel, value) in (0u16..).zip(frame.iter_mut()) {
            self.clock_high()?;
            self.half();
            *value = self.source.read_sample().map_err(|e| ReadError::Sample {
                pixel,
                kind: e.kind(),
            })?;
            self.clock_low()?;
            self.half();
        }
        self.trailing()
    }

    /// Start high across one rising clock edge, a half period of setup and of hold.
    fn start_pulse(&mut self) -> Result<(), ReadError> {
        self.start
            .set_high()
            .map_err(|e| ReadError::StartPin(e.kind()))?;
        self.half();
        self.clock_high()?;
        self.half();
        self.start_low()?;
        self.clock_low()?;
        self.half();
        Ok(())
    }

    /// Clocks after the last pixel.
    fn trailing(&mut self) -> Result<(), ReadError> {
        for _ in 0..self.timing.config().trailing_clocks {
            self.clock_high()?;
            self.half();
            self.clock_low()?;
            self.half();
        }
        Ok(())
    }

    /// Exposure minus one scan: whole microseconds, then the nanoseconds left.
    fn wait(&mut self) {
        let wait_ns = self.timing.wait_ns();
        let us = u32::try_from(wait_ns / 1000).unwrap_or(u32::MAX);
        let ns = u32::try_from(wait_ns % 1000).unwrap_or(0);
        if us > 0 {
            self.delay.delay_us(us);
        }
        if ns > 0 {
            self.delay.delay_ns(ns);
        }
    }

    fn half(&mut self) {
        self.delay
            .delay_ns(self.timing.config().clock_half_period_ns);
    }

    fn start_low(&mut self) -> Result<(), ReadError> {
        self.start
            .set_low()
            .map_err(|e| ReadError::StartPin(e.kind()))
    }

    fn clock_high(&mut self) -> Result<(), ReadError> {
        self.clock
            .set_high()
            .map_err(|e| ReadError::ClockPin(e.kind()))
    }

    fn clock_low(&mut self) -> Result<(), ReadError> {
        self.clock
            .set_low()
            .map_err(|e| ReadError::ClockPin(e.kind()))
    }
}

#[cfg(test)]
mod tests {
    use super::super::{ArrayConfig, SampleErrorKind};
    use super::*;
    use embedded_hal::digital::ErrorKind;
    use embedded_hal_mock::eh1::delay::{CheckedDelay, NoopDelay, Transaction as Delay};
    use embedded_hal_mock::eh1::digital::{Mock as PinMock, State, Transaction as Pin};
    use embedded_hal_mock::eh1::MockError;
    use std::cell::RefCell;
    use std::vec::Vec;

    /// Hands out a fixed list of samples, then a chosen error.
    struct Scripted<'a> {
        samples: &'a [u16],
        next: usize,
        then: SampleErrorKind,
    }

    impl<'a> Scripted<'a> {
        fn new(samples: &'a [u16]) -> Self {
            Self {
                samples,
                next: 0,
                then: SampleErrorKind::Exhausted,
            }
        }
    }

    impl SampleSource for Scripted<'_> {
        type Error = SampleErrorKind;
        fn read_sample(&mut self) -> Result<u16, SampleErrorKind> {
            let v = self.samples.get(self.next).copied().ok_or(self.then)?;
            self.next += 1;
            Ok(v)
        }
    }

    fn io_error() -> MockError {
        MockError::Io(std::io::ErrorKind::BrokenPipe)
    }

    /// The pin transactions of one scan of `pixels` pixels and `trailing` trailing clocks.
    fn scan_pins(pixels: usize, trailing: usize) -> (Vec<Pin>, Vec<Pin>) {
        let start = vec![Pin::set(State::High), Pin::set(State::Low)];
        let mut clock = vec![Pin::set(State::High), Pin::set(State::Low)];
        for _ in 0..pixels + trailing {
            clock.push(Pin::set(State::High));
            clock.push(Pin::set(State::Low));
        }
        (start, clock)
    }

    /// The delays of one scan: start pulse, pixels (with the emptying scan's sample wait), trailing.
    fn scan_delays(
        half: u32,
        pixels: usize,
        trailing: usize,
        sample_wait: Option<u32>,
    ) -> Vec<Delay> {
        let mut d = vec![Delay::delay_ns(half); 3];
        for _ in 0..pixels {
            d.push(Delay::delay_ns(half));
            if let Some(s) = sample_wait {
                d.push(Delay::delay_ns(s));
            }
            d.push(Delay::delay_ns(half));
        }
        for _ in 0..trailing {
            d.push(Delay::delay_ns(half));
            d.push(Delay::delay_ns(half));
        }
        d
    }

    /// The whole frame on embedded-hal-mock: every pin level and every delay, in order per part.
    #[test]
    fn frame_replays_the_expected_transactions() {
        let (pixels, trailing, half, sample) = (3usize, 1usize, 500u32, 2_000u32);
        let mut cfg = ArrayConfig::new(pixels as u16, 50, half);
        cfg.trailing_clocks = trailing as u16;
        cfg.sample_time_ns = sample;
        let timing = ArrayTiming::new(cfg).unwrap();
        // One scan: (3 + 2·3 + 2·1) halves of 500 ns + 3 samples of 2 µs = 11.5 µs; wait 38.5 µs.
        assert_eq!(timing.wait_ns(), 50_000 - 11_500);

        let (scan_start, scan_clock) = scan_pins(pixels, trailing);
        let mut start_expect = vec![Pin::set(State::Low)];
        let mut clock_expect = vec![Pin::set(State::Low)];
        for _ in 0..2 {
            start_expect.extend(scan_start.iter().cloned());
            clock_expect.extend(scan_clock.iter().cloned());
        }
        let mut delay_expect = scan_delays(half, pixels, trailing, Some(sample));
        delay_expect.push(Delay::delay_us(38));
        delay_expect.push(Delay::delay_ns(500));
        delay_expect.extend(scan_delays(half, pixels, trailing, None));

        let start = PinMock::new(&start_expect);
        let clock = PinMock::new(&clock_expect);
        let delay = CheckedDelay::new(&delay_expect);
        let samples = [100u16, 4095, 7];
        let mut array = LinearArray::new(start, clock, delay, Scripted::new(&samples), timing);
        let mut frame = [0u16; 3];
        array.read_frame(&mut frame).unwrap();
        assert_eq!(frame, samples);
        let (mut start, mut clock, mut delay, source) = array.release();
        start.done();
        clock.done();
        delay.done();
        assert_eq!(
            source.next, 3,
            "one sample per pixel, none in the emptying scan"
        );
    }

    /// What happened when, on one shared clock advanced by the delays.
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    enum Event {
        Start(bool),
        Clock(bool),
        Sample,
    }

    #[derive(Default)]
    struct Timeline {
        now_ns: u64,
        events: Vec<(u64, Event)>,
    }

    struct LogPin<'a> {
        log: &'a RefCell<Timeline>,
        is_start: bool,
    }

    impl embedded_hal::digital::ErrorType for LogPin<'_> {
        type Error = core::convert::Infallible;
    }

    impl OutputPin for LogPin<'_> {
        fn set_low(&mut self) -> Result<(), Self::Error> {
            self.set(false);
            Ok(())
        }
        fn set_high(&mut self) -> Result<(), Self::Error> {
            self.set(true);
            Ok(())
        }
    }

    impl LogPin<'_> {
        fn set(&mut self, level: bool) {
            let mut t = self.log.borrow_mut();
            let now = t.now_ns;
            let e = if self.is_start {
                Event::Start(level)
            } else {
                Event::Clock(level)
            };
            t.events.push((now, e));
        }
    }

    struct LogDelay<'a>(&'a RefCell<Timeline>);

    impl DelayNs for LogDelay<'_> {
        fn delay_ns(&mut self, ns: u32) {
            self.0.borrow_mut().now_ns += u64::from(ns);
        }
    }

    /// Samples take `sample_ns` and return the time they were taken (µs, low 16 bits).
    struct LogSource<'a> {
        log: &'a RefCell<Timeline>,
        sample_ns: u64,
    }

    impl SampleSource for LogSource<'_> {
        type Error = core::convert::Infallible;
        fn read_sample(&mut self) -> Result<u16, Self::Error> {
            let mut t = self.log.borrow_mut();
            let now = t.now_ns;
            t.events.push((now, Event::Sample));
            t.now_ns += self.sample_ns;
            Ok((now / 1000) as u16)
        }
    }

    /// The state machine on one timeline: the start pulse straddles the first rising edge, every
    /// sample falls half a period into a high clock, and every pixel's exposure (rising edge of its
    /// pixel in the reading scan minus the same edge in the emptying scan) is the integration time.
    #[test]
    fn every_pixel_gets_the_configured_exposure() {
        let log = RefCell::new(Timeline::default());
        let (pixels, half, sample) = (5u16, 1_000u32, 2_000u32);
        let mut cfg = ArrayConfig::new(pixels, 200, half);
        cfg.trailing_clocks = 2;
        cfg.sample_time_ns = sample;
        let timing = ArrayTiming::new(cfg).unwrap();
        let mut array = LinearArray::new(
            LogPin {
                log: &log,
                is_start: true,
            },
            LogPin {
                log: &log,
                is_start: false,
            },
            LogDelay(&log),
            LogSource {
                log: &log,
                sample_ns: u64::from(sample),
            },
            timing,
        );
        let mut frame = [0u16; 5];
        array.read_frame(&mut frame).unwrap();
        let t = log.into_inner();

        // Rising clock edges, and the start level at each.
        let mut start_level = false;
        let mut rising: Vec<(u64, bool)> = Vec::new();
        let mut clock_level = false;
        for &(at, e) in &t.events {
            match e {
                Event::Start(l) => start_level = l,
                Event::Clock(true) => {
                    rising.push((at, start_level));
                    clock_level = true;
                }
                Event::Clock(false) => clock_level = false,
                Event::Sample => {
                    let edge = rising.last().unwrap().0;
                    assert!(clock_level, "sample with the clock low");
                    assert_eq!(
                        at - edge,
                        u64::from(half),
                        "sample not half a period after the edge"
                    );
                }
            }
        }
        // Per scan: the start edge, 5 pixels, 2 trailing clocks.
        let per_scan = 1 + usize::from(pixels) + 2;
        assert_eq!(rising.len(), 2 * per_scan);
        let starts: Vec<usize> = (0..rising.len()).filter(|&i| rising[i].1).collect();
        assert_eq!(
            starts,
            [0, per_scan],
            "start high only at each scan's first edge"
        );
        for p in 1..=usize::from(pixels) {
            let exposure = rising[per_scan + p].0 - rising[p].0;
            assert_eq!(exposure, 200_000, "pixel {}", p - 1);
        }
        assert_eq!(t.events.iter().filter(|e| e.1 == Event::Sample).count(), 5);
        // Samples land in pixel order: each was taken 4 µs (2 halves + 1 sample) after the previous.
        for w in frame.windows(2) {
            assert_eq!(w[1] - w[0], 4);
        }
        // The frame ends with both pins low.
        assert!(!start_level && !clock_level);
    }

    #[test]
    fn wrong_frame_length_moves_no_pin() {
        let timing = ArrayTiming::new(ArrayConfig::new(4, 100, 500)).unwrap();
        let mut array = LinearArray::new(
            PinMock::new(&[]),
            PinMock::new(&[]),
            CheckedDelay::new(&[]),
            Scripted::new(&[1, 2, 3, 4]),
            timing,
        );
        let mut short = [0u16; 3];
        assert_eq!(array.read_frame(&mut short), Err(ReadError::FrameLength));
        let mut long = [0u16; 5];
        assert_eq!(array.read_frame(&mut long), Err(ReadError::FrameLength));
        let (mut s, mut c, mut d, _) = array.release();
        s.done();
        c.done();
        d.done();
    }

    #[test]
    fn pin_errors_come_back_as_their_kind() {
        let timing = ArrayTiming::new(ArrayConfig::new(2, 100, 500)).unwrap();
        let mut frame = [0u16; 2];

        // The start pin fails on the first move.
        let start = PinMock::new(&[Pin::set(State::Low).with_error(io_error())]);
        let clock = PinMock::new(&[]);
        let mut array =
            LinearArray::new(start, clock, NoopDelay::new(), Scripted::new(&[]), timing);
        assert_eq!(
            array.read_frame(&mut frame),
            Err(ReadError::StartPin(ErrorKind::Other))
        );
        let (mut s, mut c, _, _) = array.release();
        s.done();
        c.done();

        // The clock fails on the start pulse's rising edge.
        let start = PinMock::new(&[Pin::set(State::Low), Pin::set(State::High)]);
        let clock = PinMock::new(&[
            Pin::set(State::Low),
            Pin::set(State::High).with_error(io_error()),
        ]);
        let mut array =
            LinearArray::new(start, clock, NoopDelay::new(), Scripted::new(&[]), timing);
        assert_eq!(
            array.read_frame(&mut frame),
            Err(ReadError::ClockPin(ErrorKind::Other))
        );
        let (mut s, mut c, _, _) = array.release();
        s.done();
        c.done();
    }

    #[test]
    fn sample_errors_name_the_pixel_and_the_next_frame_starts_clean() {
        let timing = ArrayTiming::new(ArrayConfig::new(3, 100, 500)).unwrap();
        let (scan_start, scan_clock) = scan_pins(3, 0);
        // Frame 1: idle, emptying scan, reading scan up to pixel 1's failed sample (clock still high).
        let mut start_expect = vec![Pin::set(State::Low)];
        start_expect.extend(scan_start.iter().cloned());
        start_expect.extend(scan_start.iter().cloned());
        let mut clock_expect = vec![Pin::set(State::Low)];
        clock_expect.extend(scan_clock.iter().cloned());
        clock_expect.extend([
            Pin::set(State::High),
            Pin::set(State::Low),
            Pin::set(State::High),
            Pin::set(State::Low),
            Pin::set(State::High),
        ]);
        // Frame 2 starts from idle pins again and completes.
        start_expect.push(Pin::set(State::Low));
        clock_expect.push(Pin::set(State::Low));
        for _ in 0..2 {
            start_expect.extend(scan_start.iter().cloned());
            clock_expect.extend(scan_clock.iter().cloned());
        }
        let samples = [10u16, 11, 12, 13];
        let mut array = LinearArray::new(
            PinMock::new(&start_expect),
            PinMock::new(&clock_expect),
            NoopDelay::new(),
            Scripted::new(&samples),
            timing,
        );
        let mut frame = [0u16; 3];
        array.source_mut().samples = &samples[..1];
        assert_eq!(
            array.read_frame(&mut frame),
            Err(ReadError::Sample {
                pixel: 1,
                kind: SampleErrorKind::Exhausted
            })
        );
        assert_eq!(frame[0], 10, "pixels before the failure are kept");
        array.source_mut().samples = &samples;
        array.read_frame(&mut frame).unwrap();
        assert_eq!(frame, [11, 12, 13]);
        let (mut s, mut c, _, _) = array.release();
        s.done();
        c.done();
    }

    #[test]
    fn a_new_exposure_changes_only_the_wait() {
        let timing = ArrayTiming::new(ArrayConfig::new(1, 10, 1_000)).unwrap();
        let longer = timing.with_integration_us(3_000).unwrap();
        // One scan: 5 halves of 1 µs. Wait: 3 ms − 5 µs, whole microseconds only.
        let mut delays = scan_delays(1_000, 1, 0, None);
        delays.push(Delay::delay_us(2_995));
        delays.extend(scan_delays(1_000, 1, 0, None));
        let (scan_start, scan_clock) = scan_pins(1, 0);
        let mut start_expect = vec![Pin::set(State::Low)];
        let mut clock_expect = vec![Pin::set(State::Low)];
        for _ in 0..2 {
            start_expect.extend(scan_start.iter().cloned());
            clock_expect.extend(scan_clock.iter().cloned());
        }
        let mut array = LinearArray::new(
            PinMock::new(&start_expect),
            PinMock::new(&clock_expect),
            CheckedDelay::new(&delays),
            Scripted::new(&[42]),
            timing,
        );
        array.set_timing(longer);
        assert_eq!(array.timing().integration_us(), 3_000);
        let mut frame = [0u16; 1];
        array.read_frame(&mut frame).unwrap();
        assert_eq!(frame, [42]);
        let (mut s, mut c, mut d, _) = array.release();
        s.done();
        c.done();
        d.done();
    }
}
