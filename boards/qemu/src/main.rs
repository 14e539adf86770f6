//! Predictor report firmware: prints glowcheck's report over semihosting and exits with its verdict.
//!
//! Runs on QEMU's `microbit` (M0), `mps2-an385` (M3) and `mps2-an386` (M4F). Exit status 0 means the
//! report was written in full and every case behaved as expected; `boards/check.sh` then diffs the
//! output with the host twin's.
#![no_std]
#![no_main]

use core::fmt::Write;

use cortex_m_rt::entry;
use cortex_m_semihosting::{debug, hio};

#[entry]
fn main() -> ! {
    let verdict = match hio::hstdout() {
        Ok(mut out) => match glowcheck_report::run(&mut out) {
            Ok(summary) if summary.unexpected == 0 => debug::EXIT_SUCCESS,
            _ => debug::EXIT_FAILURE,
        },
        Err(()) => debug::EXIT_FAILURE,
    };
    exit(verdict)
}

/// Ends the QEMU run; on a real core without a debugger attached this traps, which is as good a stop.
fn exit(status: debug::ExitStatus) -> ! {
    debug::exit(status);
    loop {
        cortex_m::asm::wfi();
    }
}

/// A panic is a failed run: say so on the host's stderr and exit non-zero.
#[panic_handler]
fn panic(_info: &core::panic::PanicInfo) -> ! {
    if let Ok(mut err) = hio::hstderr() {
        let _ = err.write_str("glowcheck-qemu: panic\n");
    }
    exit(debug::EXIT_FAILURE)
}
