//! Every public entry point of `glowcheck::condition`, on a small synthetic frame.

use glowcheck::condition::{
    condition_frame, flags, ConditionConfig, FrameSum, GainTable, LinearityKnot, Stack,
};

use crate::probe::{keep, keep_b, keep_error, opaque};

/// Pixels of the synthetic frame: two noise blocks of peak finding, small enough for 16 KiB of RAM.
pub const PIXELS: usize = 128;

/// A conditioned frame and its per-pixel flags, handed on to peak finding.
pub struct Conditioned {
    /// Conditioned values (Q4 counts).
    pub values: [i32; PIXELS],
    /// Per-pixel flags.
    pub flags: [u8; PIXELS],
    /// Shot-noise slope from conditioning, if the conversion gain was set.
    pub shot_var_per_unit_q16: Option<u32>,
}

/// Sensor settings read opaquely.
#[derive(Clone, Copy)]
struct Settings {
    full_scale_counts: u16,
    integration_us: u32,
    reference_us: u32,
    electrons_per_count_q8: u16,
    bad_pixel: u16,
    knot: (u16, u16),
    use_dark: bool,
    use_gain: bool,
}

static SETTINGS: Settings = Settings {
    full_scale_counts: 4095,
    integration_us: 20_000,
    reference_us: 10_000,
    electrons_per_count_q8: 512,
    bad_pixel: 7,
    knot: (3000, 16_500),
    use_dark: true,
    use_gain: true,
};

/// Synthetic readout: a dark level, a slope and two lines; any values would do, the optimiser cannot
/// see them.
static RAW: [u16; PIXELS] = raw_frame();
static DARK: [u16; PIXELS] = [100; PIXELS];
static GAIN_Q14: [u16; PIXELS] = [16_384; PIXELS];

const fn raw_frame() -> [u16; PIXELS] {
    let mut f = [0u16; PIXELS];
    let mut i = 0;
    while i < PIXELS {
        let x = i as u16;
        f[i] = 100 + x + bump(i, 40) + bump(i, 90) / 2;
        i += 1;
    }
    f
}

const fn bump(i: usize, at: usize) -> u16 {
    let d = i.abs_diff(at);
    match d {
        0 => 2400,
        1 => 1500,
        2 => 420,
        3 => 50,
        _ => 0,
    }
}

static BLANK_VALUES: [i32; PIXELS] = [0; PIXELS];

/// An opaque frame for peak finding when conditioning is left out of the build.
pub fn blank() -> Conditioned {
    Conditioned {
        values: opaque(&BLANK_VALUES),
        flags: [0; PIXELS],
        shot_var_per_unit_q16: None,
    }
}

/// Calls each entry point; returns the conditioned frame for [`crate::find_api`].
// Kept out of line so each module's locals get their own stack frame, not one summed frame in main.
#[inline(never)]
pub fn run() -> Conditioned {
    let s = opaque(&SETTINGS);
    let raw = opaque(&RAW);
    let dark = opaque(&DARK);
    let gain_q14 = opaque(&GAIN_Q14);

    let mut cfg = ConditionConfig::new(s.full_scale_counts, s.integration_us);
    cfg.reference_us = s.reference_us;
    cfg.electrons_per_count_q8 = s.electrons_per_count_q8;
    keep_b(cfg.bad_pixels.push(s.bad_pixel).is_ok());
    let knot = LinearityKnot {
        level_counts: s.knot.0,
        factor_q14: s.knot.1,
    };
    keep_b(cfg.linearity.push(knot).is_ok());

    let mut out = Conditioned {
        values: [0; PIXELS],
        flags: [0; PIXELS],
        shot_var_per_unit_q16: None,
    };

    let mut sum = [0u32; PIXELS];
    let stacked = match Stack::new(&mut sum, s.full_scale_counts) {
        Ok(mut stack) => {
            for _ in 0..2 {
                match stack.add(&raw) {
                    Ok(frames) => keep(u64::from(frames)),
                    Err(e) => keep_error(e),
                }
            }
            keep(u64::from(stack.frames()));
            stack.view().is_ok()
        }
        Err(e) => {
            keep_error(e);
            false
        }
    };
    keep_b(stacked);

    let signal = match FrameSum::stacked(&sum, 2) {
        Ok(view) => view,
        Err(e) => {
            keep_error(e);
            return out;
        }
    };
    keep(signal.len() as u64);
    keep_b(signal.is_empty());
    keep(u64::from(signal.frames()));

    let dark = if s.use_dark {
        match FrameSum::single(&dark) {
            Ok(d) => Some(d),
            Err(e) => {
                keep_error(e);
                None
            }
        }
    } else {
        None
    };
    let gain = if s.use_gain {
        match GainTable::new(&gain_q14) {
            Ok(g) => {
                keep(g.len() as u64);
                keep_b(g.is_empty());
                Some(g)
            }
            Err(e) => {
                keep_error(e);
                None
            }
        }
    } else {
        None
    };

    match condition_frame(&cfg, signal, dark, gain, &mut out.values, &mut out.flags) {
        Ok(info) => {
            keep(u64::from(info.pixels));
            keep(u64::from(info.frames));
            keep(u64::from(info.saturated_pixels));
            keep(u64::from(info.repaired_pixels));
            keep(u64::from(info.clamped_pixels));
            out.shot_var_per_unit_q16 = info.shot_var_per_unit_q16;
        }
        Err(e) => keep_error(e),
    }
    for &f in out.flags.iter() {
        keep_b(flags::is_untrusted(f));
    }
    out
}
