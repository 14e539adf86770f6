//! Every public function of `glowcheck::acquire`: the timing checks and a whole frame read through the
//! driver, on pins, a delay and a sample source whose results the optimiser cannot see.

use embedded_hal::delay::DelayNs;
use embedded_hal::digital::{ErrorKind, ErrorType, OutputPin};
use glowcheck::acquire::{
    ArrayConfig, ArrayTiming, LinearArray, SampleErrorKind, SampleSource, MAX_ARRAY_PIXELS,
};

use crate::probe::{keep, keep_error, opaque};

/// Pixels of the probe frame.
const PIXELS: usize = 64;

/// Whether each part fails: unknown at compile time, so every error path stays.
static FAILS: [bool; 3] = [false, false, false];
/// Raw timing values: pixels, integration µs, half period ns, trailing clocks, sample ns.
static TIMING: [u32; 5] = [PIXELS as u32, 20_000, 1_000, 1, 2_000];
static SAMPLE: u16 = 1234;

/// A line that fails when the probe says so.
struct Line(usize);

impl ErrorType for Line {
    type Error = ErrorKind;
}

impl OutputPin for Line {
    fn set_low(&mut self) -> Result<(), ErrorKind> {
        self.set(0)
    }
    fn set_high(&mut self) -> Result<(), ErrorKind> {
        self.set(1)
    }
}

impl Line {
    fn set(&mut self, level: u64) -> Result<(), ErrorKind> {
        if opaque(&FAILS).get(self.0).copied().unwrap_or(true) {
            return Err(ErrorKind::Other);
        }
        keep(level);
        Ok(())
    }
}

/// A delay that only records what it was asked.
struct Wait;

impl DelayNs for Wait {
    fn delay_ns(&mut self, ns: u32) {
        keep(u64::from(ns));
    }
}

/// A conversion with an opaque result.
struct Adc;

impl SampleSource for Adc {
    type Error = SampleErrorKind;
    fn read_sample(&mut self) -> Result<u16, SampleErrorKind> {
        if opaque(&FAILS)[2] {
            return Err(SampleErrorKind::Conversion);
        }
        Ok(opaque(&SAMPLE))
    }
}

/// Calls each function on opaque inputs.
#[inline(never)]
pub fn run() {
    let [pixels, us, half, trailing, sample] = opaque(&TIMING);
    let mut config = ArrayConfig::new(u16::try_from(pixels).unwrap_or(MAX_ARRAY_PIXELS), us, half);
    config.trailing_clocks = u16::try_from(trailing).unwrap_or(0);
    config.sample_time_ns = sample;
    keep(config.scan_ns());
    keep(config.min_integration_us());
    let timing = match ArrayTiming::new(config) {
        Ok(t) => t,
        Err(e) => return keep_error(e),
    };
    keep(timing.wait_ns());
    keep(u64::from(timing.pixels()) + u64::from(timing.integration_us()));
    keep(timing.config().scan_ns());
    let longer = timing.with_integration_us(us.saturating_mul(2));
    let mut array = LinearArray::new(Line(0), Line(1), Wait, Adc, timing);
    match longer {
        Ok(t) => array.set_timing(t),
        Err(e) => keep_error(e),
    }
    keep(array.timing().wait_ns());
    keep(u64::from(array.source_mut().read_sample().unwrap_or(0)));
    let mut frame = [0u16; PIXELS];
    // The probe frame's length comes from the opaque timing, so the length check stays too.
    let n = usize::try_from(pixels).unwrap_or(0).min(PIXELS);
    match array.read_frame(frame.get_mut(..n).unwrap_or(&mut [])) {
        Ok(()) => frame.iter().for_each(|&v| keep(u64::from(v))),
        Err(e) => keep_error(e),
    }
    let (_start, _clock, _wait, _adc) = array.release();
}
