//! How a verdict looks on the LED: one pattern per outcome, each lasting [`SHOW_MS`].

use embedded_hal::delay::DelayNs;
use embedded_hal::digital::OutputPin;
use glowcheck::judge::Verdict;

/// How long one verdict is shown before the next frame is read (ms).
pub const SHOW_MS: u32 = 2_000;

/// What the LED says.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shown {
    /// A checked frame's verdict.
    Verdict(Verdict),
    /// No verdict: the frame could not be read or checked.
    Fault,
}

/// LED on and off times (ms) of one period of `shown`'s pattern, repeated for [`SHOW_MS`]:
/// pass = steady on, fail = fast blink (5 Hz), inconclusive = slow blink (1 Hz), fault = short flash.
pub const fn pattern(shown: Shown) -> (u32, u32) {
    match shown {
        Shown::Verdict(Verdict::Pass) => (SHOW_MS, 0),
        Shown::Verdict(Verdict::Fail) => (100, 100),
        Shown::Verdict(Verdict::Inconclusive) => (500, 500),
        Shown::Fault => (50, 950),
    }
}

/// Plays `shown`'s pattern for [`SHOW_MS`] and leaves the LED off (the LED pin cannot fail on the
/// RP2040; an error would only leave it dark).
pub fn show<L: OutputPin, D: DelayNs>(led: &mut L, delay: &mut D, shown: Shown) {
    let (on_ms, off_ms) = pattern(shown);
    let period = on_ms.saturating_add(off_ms).max(1);
    for _ in 0..SHOW_MS / period {
        let _ = led.set_high();
        delay.delay_ms(on_ms);
        let _ = led.set_low();
        if off_ms > 0 {
            delay.delay_ms(off_ms);
        }
    }
}
