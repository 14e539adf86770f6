//! Link-time no-panic proof for lib's public API on the Cortex-M0.
//!
//! The panic handler calls a function that is defined nowhere. In a release build (LTO, one codegen
//! unit, `panic = "abort"`) the linker only needs that symbol if some panic path survived
//! optimisation, so a successful link proves that none of the calls below can panic for any input.
//! The inputs are read with `read_volatile` and the results written with `write_volatile`, so the
//! optimiser can neither fold the calls to constants nor drop them.
//!
//! When the proof fails, the link error names the undefined symbol. `--features locate` swaps in a
//! handler that links, and `boards/check.sh` then lists the source lines of the surviving panic calls.
//!
//! The image also runs in QEMU (`microbit`) and exits with status 0, so it is a real program, not
//! just an object that links.
#![no_std]
#![no_main]

use core::fmt::{self, Write};
use core::ptr;

use cortex_m_rt::entry;
use cortex_m_semihosting::debug;
use glowcheck::fixed;
use glowcheck::predict::{self, level, Air, AirConditions, Components, Lines, Nucleus};

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

/// Inputs of every call, opaque to the optimiser because they are only ever read volatilely.
#[repr(C)]
struct Inputs {
    nucleus_index: u8,
    symbol_index: u8,
    lower: u8,
    upper: u8,
    air_kind: u8,
    humidity_permille: u16,
    temperature_mc: i32,
    pressure_pa: u32,
    from_fm: u64,
    to_fm: u64,
    l: u8,
    j2: u8,
    wide: [u128; 3],
    wide_signed: [i128; 3],
}

static INPUTS: Inputs = Inputs {
    nucleus_index: 0,
    symbol_index: 1,
    lower: 2,
    upper: 3,
    air_kind: 2,
    humidity_permille: 400,
    temperature_mc: 20_000,
    pressure_pa: 95_000,
    from_fm: 380_000_000,
    to_fm: 700_000_000,
    l: 1,
    j2: 3,
    wide: [1 << 100, 12_345, 7],
    wide_signed: [-(1 << 90), 54_321, -3],
};

/// Symbols to look up; which one is chosen is an opaque input.
static SYMBOLS: [&str; 14] = [
    "H", "D", "T", "He3", "He4", "Li6", "Li7", "Be9", "B11", "C12", "N14", "O16", "X", "",
];

/// Where results go; written volatilely so every call's result is needed.
static mut SINK: u64 = 0;

/// Reads an input so that its value is unknown at compile time.
fn opaque<T: Copy>(value: &T) -> T {
    // SAFETY: `value` is a valid, aligned reference to a `Copy` value.
    unsafe { ptr::read_volatile(value) }
}

/// Keeps a result alive: the optimiser must compute it because the store cannot be removed.
fn keep(value: u64) {
    // SAFETY: single-threaded firmware without interrupts touching SINK; the pointer is valid.
    unsafe { ptr::write_volatile(ptr::addr_of_mut!(SINK), value) }
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

/// Keeps an error's kind and its message.
fn keep_error<E: fmt::Display>(e: E) {
    let _ = write!(KeepWriter, "{e}");
}

#[entry]
fn main() -> ! {
    predict_api();
    fixed_api();
    debug::exit(debug::EXIT_SUCCESS);
    loop {
        cortex_m::asm::wfi();
    }
}

/// Every public entry point of `glowcheck::predict`.
fn predict_api() {
    let nucleus = Nucleus::ALL
        .get(usize::from(opaque(&INPUTS.nucleus_index)))
        .copied()
        .unwrap_or(Nucleus::H1);
    keep(u64::from(nucleus.z()));
    keep(nucleus.symbol().len() as u64);

    let symbol = SYMBOLS
        .get(usize::from(opaque(&INPUTS.symbol_index)))
        .copied()
        .unwrap_or("H");
    match Nucleus::from_symbol(symbol) {
        Ok(n) => keep(u64::from(n.z())),
        Err(e) => keep_error(e),
    }

    let conditions = AirConditions::new(
        opaque(&INPUTS.temperature_mc),
        opaque(&INPUTS.pressure_pa),
        opaque(&INPUTS.humidity_permille),
    );
    let air = match (opaque(&INPUTS.air_kind), conditions) {
        (0, _) => Air::Vacuum,
        (1, _) => Air::Standard,
        (_, Ok(c)) => Air::Conditions(c),
        (_, Err(e)) => {
            keep_error(e);
            Air::Standard
        }
    };

    match predict::line(nucleus, opaque(&INPUTS.lower), opaque(&INPUTS.upper), &air) {
        Ok(line) => {
            keep(line.vacuum_fm);
            keep(line.air_fm.unwrap_or(0));
            keep(line.wavenumber_nk);
            keep(line.energy_nev);
        }
        Err(e) => keep_error(e),
    }

    match Lines::new(
        nucleus,
        opaque(&INPUTS.from_fm),
        opaque(&INPUTS.to_fm),
        &air,
    ) {
        Ok(lines) => {
            for line in lines {
                match line {
                    Ok(line) => {
                        keep(line.vacuum_fm);
                        keep(u64::from(line.lower));
                        keep(u64::from(line.upper));
                    }
                    Err(e) => keep_error(e),
                }
            }
        }
        Err(e) => keep_error(e),
    }

    match Components::new(nucleus, opaque(&INPUTS.lower), opaque(&INPUTS.upper), &air) {
        Ok(parts) => {
            for part in parts {
                match part {
                    Ok(c) => {
                        keep(c.vacuum_fm);
                        keep(c.air_fm.unwrap_or(0));
                        keep(u64::from(c.relative_ppm));
                        keep(u64::from(c.upper_l ^ c.upper_j2 ^ c.lower_l ^ c.lower_j2));
                    }
                    Err(e) => keep_error(e),
                }
            }
        }
        Err(e) => keep_error(e),
    }

    keep(nucleus.spectrum().len() as u64);
    keep(u64::from(nucleus.mass_number()));
    keep(nucleus.mass_ratio_e9());
    let level = level::level_energy_q80(
        nucleus.z(),
        nucleus.mass_ratio_e9(),
        opaque(&INPUTS.upper),
        opaque(&INPUTS.l),
        opaque(&INPUTS.j2),
    );
    keep(level.unwrap_or(0) as u64);
    keep(air.refractivity_e20(opaque(&INPUTS.from_fm)).unwrap_or(0) as u64);
    keep(air.air_wavelength_fm(opaque(&INPUTS.to_fm)).unwrap_or(0));
    if let Ok(c) = conditions {
        keep(c.temperature_mc() as u64);
        keep(u64::from(c.pressure_pa()));
        keep(u64::from(c.humidity_permille()));
    }
}

/// Every public function of `glowcheck::fixed`.
fn fixed_api() {
    let [a, b, c] = opaque(&INPUTS.wide);
    let [sa, sb, sc] = opaque(&INPUTS.wide_signed);
    keep(fixed::mul_div_u128(a, b, c).unwrap_or(0) as u64);
    keep(fixed::mul_div_i128(sa, sb, sc).unwrap_or(0) as u64);
    keep(fixed::isqrt_u128(a) as u64);
    keep(fixed::div_round_u128(a, c).unwrap_or(0) as u64);
}
