//! Where pixel values come from: the boundary between the driver and an ADC (or a recording).
//!
//! The driver decides *when* a sample is taken (clock high, after the settle time); a source only
//! converts. A board wraps its ADC channel in a [`SampleSource`]; host-sim's trace replay implements
//! the same trait, so the driver runs unchanged on a desk.

use core::convert::Infallible;
use core::fmt;

/// One analog-to-digital conversion of the sensor's video output, on demand.
pub trait SampleSource {
    /// What a failed conversion reports; the driver keeps only its [`SampleError::kind`].
    type Error: SampleError;

    /// Converts the video output as it is now (ADC counts, unscaled, 0 = darkest the ADC reports).
    fn read_sample(&mut self) -> Result<u16, Self::Error>;
}

/// A source's error, reduced to a kind the driver can hand on without being generic over it
/// (the pattern of embedded-hal 1.0's `Error::kind()`).
pub trait SampleError: fmt::Debug {
    /// The common kind of this error.
    fn kind(&self) -> SampleErrorKind;
}

/// Common kinds of sample-source failure.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SampleErrorKind {
    /// The converter reported a failed or invalid conversion.
    Conversion,
    /// A recorded source has no more samples (a replay ran past its last frame).
    Exhausted,
    /// A replayed value does not fit the sample type (above 65 535 counts).
    OutOfRange,
    /// Anything else; the source's own error says more.
    Other,
}

impl fmt::Display for SampleErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::Conversion => "the converter reported a failed conversion",
            Self::Exhausted => "the sample source has no more samples",
            Self::OutOfRange => "a sample does not fit 16 bits",
            Self::Other => "the sample source failed",
        })
    }
}

impl SampleError for SampleErrorKind {
    fn kind(&self) -> SampleErrorKind {
        *self
    }
}

impl SampleError for Infallible {
    fn kind(&self) -> SampleErrorKind {
        match *self {}
    }
}

/// A borrowed source is a source, so a caller can lend one to a driver and keep it.
impl<S: SampleSource + ?Sized> SampleSource for &mut S {
    type Error = S::Error;

    fn read_sample(&mut self) -> Result<u16, Self::Error> {
        (**self).read_sample()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Counts up from a start value: the simplest source.
    struct Ramp(u16);

    impl SampleSource for Ramp {
        type Error = Infallible;
        fn read_sample(&mut self) -> Result<u16, Infallible> {
            self.0 = self.0.wrapping_add(1);
            Ok(self.0)
        }
    }

    #[test]
    fn borrowed_source_advances_the_owner() {
        let mut ramp = Ramp(10);
        {
            let lent = &mut ramp;
            assert_eq!(lent.read_sample(), Ok(11));
            assert_eq!(lent.read_sample(), Ok(12));
        }
        assert_eq!(ramp.read_sample(), Ok(13));
    }

    #[test]
    fn kinds_are_their_own_kind_and_read_differently() {
        use core::fmt::Write;
        let all = [
            SampleErrorKind::Conversion,
            SampleErrorKind::Exhausted,
            SampleErrorKind::OutOfRange,
            SampleErrorKind::Other,
        ];
        let mut seen: heapless::Vec<heapless::String<64>, 4> = heapless::Vec::new();
        for k in all {
            assert_eq!(k.kind(), k);
            let mut s: heapless::String<64> = heapless::String::new();
            write!(s, "{k}").unwrap();
            assert!(!s.is_empty());
            assert!(!seen.contains(&s), "duplicate text {s}");
            seen.push(s).unwrap();
        }
    }
}
