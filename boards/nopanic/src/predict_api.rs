//! Every public entry point of `glowcheck::predict`.

use glowcheck::predict::{self, level, Air, AirConditions, Components, Lines, Nucleus};

use crate::probe::{keep, keep_error, keep_i, opaque};

/// Inputs of the predictor calls.
#[derive(Clone, Copy)]
struct Inputs {
    nucleus_index: u8,
    symbol_index: u8,
    lower: u8,
    upper: u8,
    air_kind: u8,
    l: u8,
    j2: u8,
    humidity_permille: u16,
    temperature_mc: i32,
    pressure_pa: u32,
    from_fm: u64,
    to_fm: u64,
}

static INPUTS: Inputs = Inputs {
    nucleus_index: 0,
    symbol_index: 1,
    lower: 2,
    upper: 3,
    air_kind: 2,
    l: 1,
    j2: 3,
    humidity_permille: 400,
    temperature_mc: 20_000,
    pressure_pa: 95_000,
    from_fm: 380_000_000,
    to_fm: 700_000_000,
};

/// Symbols to look up; which one is chosen is an opaque input.
static SYMBOLS: [&str; 14] = [
    "H", "D", "T", "He3", "He4", "Li6", "Li7", "Be9", "B11", "C12", "N14", "O16", "X", "",
];

/// Calls each entry point on opaque inputs.
// Kept out of line so each module's locals get their own stack frame, not one summed frame in main.
#[inline(never)]
pub fn run() {
    let i = opaque(&INPUTS);
    let nucleus = Nucleus::ALL
        .get(usize::from(i.nucleus_index))
        .copied()
        .unwrap_or(Nucleus::H1);
    keep(u64::from(nucleus.z()));
    keep(nucleus.symbol().len() as u64);
    keep(nucleus.spectrum().len() as u64);
    keep(u64::from(nucleus.mass_number()));
    keep(nucleus.mass_ratio_e9());

    let symbol = SYMBOLS
        .get(usize::from(i.symbol_index))
        .copied()
        .unwrap_or("H");
    match Nucleus::from_symbol(symbol) {
        Ok(n) => keep(u64::from(n.z())),
        Err(e) => keep_error(e),
    }

    let conditions = AirConditions::new(i.temperature_mc, i.pressure_pa, i.humidity_permille);
    if let Ok(c) = conditions {
        keep(c.temperature_mc() as u64);
        keep(u64::from(c.pressure_pa()));
        keep(u64::from(c.humidity_permille()));
    }
    let air = match (i.air_kind, conditions) {
        (0, _) => Air::Vacuum,
        (1, _) => Air::Standard,
        (_, Ok(c)) => Air::Conditions(c),
        (_, Err(e)) => {
            keep_error(e);
            Air::Standard
        }
    };
    keep_i(air.refractivity_e20(i.from_fm).unwrap_or(0));
    keep(air.air_wavelength_fm(i.to_fm).unwrap_or(0));

    match predict::line(nucleus, i.lower, i.upper, &air) {
        Ok(line) => {
            keep(line.vacuum_fm);
            keep(line.air_fm.unwrap_or(0));
            keep(line.wavenumber_nk);
            keep(line.energy_nev);
        }
        Err(e) => keep_error(e),
    }

    match Lines::new(nucleus, i.from_fm, i.to_fm, &air) {
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

    match Components::new(nucleus, i.lower, i.upper, &air) {
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

    let level = level::level_energy_q80(nucleus.z(), nucleus.mass_ratio_e9(), i.upper, i.l, i.j2);
    keep_i(level.unwrap_or(0));
}
