//! Whole-pipeline firmware: `Checker::new` and `Checker::check` on the frames embedded in
//! `glowcheck-pipeline-report`, the digest printed over semihosting, exit status 0 when every case
//! produced a report. `boards/check.sh` diffs the output with `glowcheck-pipeline-twin`'s.
//!
//! Runs on QEMU `mps2-an385` (thumbv6m and thumbv7m builds) and `mps2-an386` (thumbv7em): a
//! 2048-pixel check needs 26 KiB of buffers, more than the 16 KiB of the `microbit` machine, and the
//! M3 executes the M0's instruction set unchanged.
//!
//! With `--features measure` it instead times each stage on SysTick (see [`measure`]) for
//! `boards/measure.sh` to turn into instruction counts under `-icount shift=0`, runs the f32
//! baseline on the same frame and prints each call's stack depth.
#![no_std]
#![no_main]

#[cfg(feature = "measure")]
mod measure;

use core::fmt::Write;
use core::ptr::addr_of_mut;

use cortex_m_rt::entry;
use cortex_m_semihosting::{debug, hio};
use glowcheck::check::Buffers;
use glowcheck::judge::Report;
use glowcheck_pipeline_report::traces::PIXELS;

/// Frame, flag and scratch buffers of one check (13 B/px), in `.bss` rather than on the stack.
static mut BUFFERS: Buffers<PIXELS> = Buffers::new();
/// The report of the current check.
static mut REPORT: Report = Report::new();

#[entry]
fn main() -> ! {
    // SAFETY: `main` runs once and never returns, there are no interrupts, and these are the only
    // references ever taken to the two statics, so they are unique.
    let (buffers, report) = unsafe { (&mut *addr_of_mut!(BUFFERS), &mut *addr_of_mut!(REPORT)) };
    #[cfg(feature = "measure")]
    let status = match cortex_m::Peripherals::take() {
        Some(p) => measure::run(buffers, report, p.SYST),
        None => debug::EXIT_FAILURE,
    };
    #[cfg(not(feature = "measure"))]
    let status = match hio::hstdout() {
        Ok(mut out) => match glowcheck_pipeline_report::run(&mut out, buffers, report) {
            Ok(_) => debug::EXIT_SUCCESS,
            Err(e) => {
                if let Ok(mut err) = hio::hstderr() {
                    let _ = writeln!(err, "glowcheck-pipeline: {e}");
                }
                debug::EXIT_FAILURE
            }
        },
        Err(()) => debug::EXIT_FAILURE,
    };
    exit(status)
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
        let _ = err.write_str("glowcheck-pipeline: panic\n");
    }
    exit(debug::EXIT_FAILURE)
}
