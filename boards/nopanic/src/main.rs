//! Link-time no-panic proof for lib's public API on the Cortex-M0.
//!
//! The panic handler calls a function that is defined nowhere. In a release build (LTO, one codegen
//! unit, `panic = "abort"`) the linker only needs that symbol if some panic path survived
//! optimisation, so a successful link proves that none of the calls made here can panic for any
//! input. Inputs are read with `read_volatile` and results written with `write_volatile`
//! ([`probe`]), so the optimiser can neither fold the calls to constants nor drop them.
//!
//! One module per lib module calls its public functions: [`acquire_api`], [`predict_api`], [`fixed_api`],
//! [`condition_api`], [`find_api`], [`calibrate_api`], [`judge_api`] (judge and matching), [`check_api`] (the whole pipeline). A new public function in lib gets its call here.
//!
//! When the proof fails, the link error names the undefined symbol. `--features locate` swaps in a
//! handler that links, and `boards/check.sh` then lists the source lines of the surviving panic calls.
//!
//! The image also runs in QEMU (`microbit`) and exits with status 0, so it is a real program, not
//! just an object that links.
#![no_std]
#![no_main]

mod acquire_api;
mod calibrate_api;
mod check_api;
mod condition_api;
mod find_api;
mod fixed_api;
mod judge_api;
mod predict_api;
mod probe;
#[cfg(feature = "stack-report")]
mod stack;

use cortex_m_rt::entry;
use cortex_m_semihosting::debug;

#[cfg(not(feature = "locate"))]
extern "C" {
    /// Never defined anywhere: referencing it fails the link, which is the proof's "no".
    fn glowcheck_nopanic_proof_failed_a_panic_path_survived_optimisation() -> !;
}

#[cfg(not(feature = "locate"))]
#[panic_handler]
fn panic(_info: &core::panic::PanicInfo) -> ! {
    // SAFETY: the function does not exist; if this call survives optimisation the image does not link,
    // so it is never executed.
    unsafe { glowcheck_nopanic_proof_failed_a_panic_path_survived_optimisation() }
}

/// With `--features locate` the image links despite panic paths, so `check.sh` can list where they are.
#[cfg(feature = "locate")]
#[panic_handler]
fn panic(_info: &core::panic::PanicInfo) -> ! {
    loop {
        cortex_m::asm::udf();
    }
}

#[entry]
fn main() -> ! {
    // `cfg!` is a constant, so a module left out by its feature leaves no code behind: `check.sh`
    // uses that to name the modules that hold a panic path.
    if cfg!(feature = "acquire") {
        acquire_api::run();
    }
    if cfg!(feature = "predict") {
        predict_api::run();
    }
    if cfg!(feature = "fixed") {
        fixed_api::run();
    }
    let conditioned = if cfg!(feature = "condition") {
        condition_api::run()
    } else {
        condition_api::blank()
    };
    let peaks = if cfg!(feature = "find") {
        find_api::run(&conditioned)
    } else {
        glowcheck::find::PeakList::new()
    };
    if cfg!(feature = "calibrate") {
        calibrate_api::run(&peaks);
    }
    if cfg!(feature = "judge") {
        judge_api::run();
    }
    if cfg!(feature = "check") {
        check_api::run();
    }
    #[cfg(feature = "stack-report")]
    stack::report();
    debug::exit(debug::EXIT_SUCCESS);
    loop {
        cortex_m::asm::wfi();
    }
}
