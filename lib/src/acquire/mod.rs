//! Acquisition: one frame from a clocked linear photodiode array (start pulse + pixel clock + analog
//! video out), before [`condition`](crate::condition) cleans it.
//!
//! The driver, [`LinearArray`], is generic over embedded-hal 1.0 (`digital::OutputPin` for the start
//! and clock lines, `delay::DelayNs` for the timing) and over a [`SampleSource`] that converts the
//! video output. A board wraps its ADC in a `SampleSource`; host-sim replays recorded traces through
//! the same trait, so the desk runs the firmware's acquisition code too. The timing
//! ([`ArrayConfig`]: pixel count, integration time, clock half period, trailing clocks, sample time)
//! is checked once by [`ArrayTiming::new`]; reading a frame then fails only on hardware errors,
//! handed back as their kinds ([`ReadError`]).
//!
//! Each frame takes two scans: one empties the pixels, the second, one exposure later, reads them
//! (the state machine is drawn in [`sensor`]).
//!
//! # Usage
//! ```
//! use core::convert::Infallible;
//! use embedded_hal::delay::DelayNs;
//! use embedded_hal::digital::{ErrorType, OutputPin};
//! use glowcheck::acquire::{ArrayConfig, ArrayTiming, LinearArray, SampleSource};
//!
//! // Stand-ins for a board's GPIO lines, timer and ADC.
//! struct Line;
//! impl ErrorType for Line { type Error = Infallible; }
//! impl OutputPin for Line {
//!     fn set_low(&mut self) -> Result<(), Infallible> { Ok(()) }
//!     fn set_high(&mut self) -> Result<(), Infallible> { Ok(()) }
//! }
//! struct Timer;
//! impl DelayNs for Timer { fn delay_ns(&mut self, _ns: u32) {} }
//! struct Adc(u16);
//! impl SampleSource for Adc {
//!     type Error = Infallible;
//!     fn read_sample(&mut self) -> Result<u16, Infallible> { self.0 += 1; Ok(self.0) }
//! }
//!
//! // 8 pixels, 20 ms exposure, 1 µs clock half period, 2 µs per conversion.
//! let mut config = ArrayConfig::new(8, 20_000, 1_000);
//! config.sample_time_ns = 2_000;
//! let timing = ArrayTiming::new(config).unwrap();
//! let mut array = LinearArray::new(Line, Line, Timer, Adc(100), timing);
//!
//! let mut frame = [0u16; 8];
//! array.read_frame(&mut frame).unwrap();
//! assert_eq!(frame, [101, 102, 103, 104, 105, 106, 107, 108]);
//! // Hand `frame` to `condition::FrameSum::single` and on to `check::Checker::check`.
//! ```

pub mod config;
pub mod error;
pub mod sample_source;
pub mod sensor;

pub use config::{ArrayConfig, ArrayTiming, MAX_ARRAY_PIXELS};
pub use error::{ConfigError, ReadError};
pub use sample_source::{SampleError, SampleErrorKind, SampleSource};
pub use sensor::LinearArray;
