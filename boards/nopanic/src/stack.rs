//! Deepest stack use of the run, found by scanning the paint cortex-m-rt laid down at reset.
//!
//! Printed without `core::fmt` as `stack_bytes N` on the semihosting console.

use core::ptr;

use cortex_m_semihosting::hio;

extern "C" {
    /// Lowest address the stack may reach (end of static RAM), from cortex-m-rt's `link.x`.
    static _stack_end: u32;
    /// Initial stack pointer (top of RAM), from cortex-m-rt's `link.x`.
    static _stack_start: u32;
}

/// The paint cortex-m-rt writes with its `paint-stack` feature.
const PAINT: u32 = 0xcccc_cccc;

/// Bytes of stack that were written at least once since reset.
fn used_bytes() -> u32 {
    let low = ptr::addr_of!(_stack_end) as usize;
    let high = ptr::addr_of!(_stack_start) as usize;
    let mut at = low;
    while at < high {
        // SAFETY: `at` walks word by word through RAM between two linker-provided, aligned bounds.
        if unsafe { ptr::read_volatile(at as *const u32) } != PAINT {
            break;
        }
        at += 4;
    }
    (high - at) as u32
}

/// Prints `stack_bytes N`.
pub fn report() {
    let mut text = *b"stack_bytes 0000000000\n";
    let mut n = used_bytes();
    let mut i = text.len() - 2;
    loop {
        if let Some(d) = text.get_mut(i) {
            *d = b'0' + (n % 10) as u8;
        }
        n /= 10;
        if n == 0 || i == 12 {
            break;
        }
        i -= 1;
    }
    if let (Ok(mut out), Some(shown)) = (hio::hstdout(), text.get(i..)) {
        let mut line = [b's'; 12];
        line.copy_from_slice(b"stack_bytes ");
        let _ = out.write_all(&line);
        let _ = out.write_all(shown);
    }
}
