//! Inputs the optimiser cannot see and outputs it cannot drop.

use core::fmt::{self, Write};
use core::ptr;

/// Reads a value so that it is unknown at compile time: every call that uses it must stay general.
pub fn opaque<T: Copy>(value: &T) -> T {
    // SAFETY: `value` is a valid, aligned reference to a `Copy` value.
    unsafe { ptr::read_volatile(value) }
}

/// Where results go; written volatilely so every call's result is needed.
static mut SINK: u64 = 0;

/// Keeps a result alive: the optimiser must compute it because the store cannot be removed.
pub fn keep(value: u64) {
    // SAFETY: single-threaded firmware, no interrupt touches SINK; the pointer is valid and aligned.
    unsafe { ptr::write_volatile(ptr::addr_of_mut!(SINK), value) }
}

/// Keeps a signed result.
pub fn keep_i(value: i128) {
    keep(value as u64);
    keep((value >> 64) as u64);
}

/// Keeps a flag.
pub fn keep_b(value: bool) {
    keep(u64::from(value));
}

/// A `fmt::Write` that keeps every byte, to drive the errors' `Display` implementations.
struct KeepWriter;

impl Write for KeepWriter {
    fn write_str(&mut self, s: &str) -> fmt::Result {
        for &b in s.as_bytes() {
            keep(u64::from(b));
        }
        Ok(())
    }
}

/// Keeps an error's message, which runs its `Display` implementation.
pub fn keep_error<E: fmt::Display>(e: E) {
    let _ = write!(KeepWriter, "{e}");
}
