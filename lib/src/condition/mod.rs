//! Frame conditioning: dark subtraction, co-adding, bad pixels, saturation, gain, integration time.
//!
//! A raw readout of a linear sensor is not yet a spectrum: it carries the dark signal, broken pixels,
//! response differences between pixels and a scale that depends on the exposure. This stage removes those
//! so that peak finding sees counts proportional to light, plus a flag byte per pixel saying which values
//! cannot be trusted ([`flags`]).
//!
//! # Output scale
//! Conditioned values are `i32` in **Q4 counts** ([`OUTPUT_FRAC_BITS`] = 4, i.e. 16 units = 1 ADC count)
//! per readout at `reference_us` exposure (at the actual exposure when `reference_us` is 0). The 4
//! fractional bits keep the precision that co-adding buys. Divide by 16 for counts.
//!
//! # Usage
//! ```
//! use glowcheck::condition::{condition_frame, ConditionConfig, FrameSum, Stack, MAX_PIXELS};
//!
//! let mut cfg = ConditionConfig::new(4095, 20_000); // 12-bit ADC, 20 ms exposure
//! cfg.bad_pixels.push(3).unwrap();
//! let raw = [100u16, 102, 180, 4000, 101, 99, 4095, 100];
//! let dark = [98u16; 8];
//!
//! // Co-add two readouts (any 1..=256) into a caller buffer; a single readout can skip this.
//! let mut sum = [0u32; 8];
//! let mut stack = Stack::new(&mut sum, cfg.full_scale_counts).unwrap();
//! stack.add(&raw).unwrap();
//! stack.add(&raw).unwrap();
//!
//! let mut out = [0i32; 8];
//! let mut flags = [0u8; 8];
//! let info = condition_frame(
//!     &cfg,
//!     stack.view().unwrap(),
//!     Some(FrameSum::single(&dark).unwrap()),
//!     None,
//!     &mut out,
//!     &mut flags,
//! )
//! .unwrap();
//! assert_eq!(out[0], 2 * 16); // (100 - 98) counts in Q4
//! assert_eq!(info.saturated_pixels, 1); // pixel 6 reached full scale
//! assert_eq!(info.repaired_pixels, 1); // pixel 3 was interpolated
//! assert!(out.len() <= MAX_PIXELS);
//! ```
//! Hand `out` and `flags` to [`crate::find::find_peaks`]; pass `info.shot_var_per_unit_q16` on too.

pub mod config;
pub mod error;
pub mod flags;
pub mod gain;
pub mod info;
mod repair;
pub mod stack;

pub use config::{ConditionConfig, LinearityKnot, MAX_BAD_PIXELS, MAX_LINEARITY_KNOTS, ONE_Q14};
pub use error::ConditionError;
pub use gain::{GainTable, GAIN_MAX_Q14};
pub use info::ConditionedInfo;
pub use repair::MAX_REPAIR_REACH;
pub use stack::{FrameSum, Stack, SATURATED_SUM};

/// Longest frame any stage accepts (pixels); sizes every caller buffer and fixed-capacity table.
pub const MAX_PIXELS: usize = 4096;
/// Most readouts one [`Stack`] co-adds; keeps the sum of 16-bit readouts below 2²⁴.
pub const MAX_COADD: u16 = 256;
/// Fractional bits of conditioned values (Q4 counts).
pub const OUTPUT_FRAC_BITS: u32 = 4;

/// Conditions a frame: `(signal − dark) × linearity × gain`, normalised to the reference exposure, bad
/// pixels interpolated, into `out` (Q4 counts, see the module docs) with per-pixel [`flags`].
///
/// `signal` and `dark` are averaged over their own readout counts before subtraction. Saturated pixels
/// keep the value computed from their clipped counts and are marked [`flags::SATURATED`]; a saturated dark
/// pixel marks the output pixel too. `out`, `flags` (and `gain`, `dark`) must have the signal's length.
/// On error nothing is written.
///
/// Loop bounds: one pass over the pixels (≤ [`MAX_PIXELS`]), each doing ≤ 2 linearity look-ups
/// (≤ [`MAX_LINEARITY_KNOTS`] steps), then ≤ [`MAX_BAD_PIXELS`] repairs of ≤ 2 × [`MAX_REPAIR_REACH`] steps.
pub fn condition_frame(
    cfg: &ConditionConfig,
    signal: FrameSum<'_>,
    dark: Option<FrameSum<'_>>,
    gain: Option<GainTable<'_>>,
    out: &mut [i32],
    flags: &mut [u8],
) -> Result<ConditionedInfo, ConditionError> {
    let n = signal.len();
    if n == 0 {
        return Err(ConditionError::Empty);
    }
    if n > MAX_PIXELS {
        return Err(ConditionError::TooManyPixels);
    }
    if out.len() != n
        || flags.len() != n
        || dark.is_some_and(|d| d.len() != n)
        || gain.is_some_and(|g| g.len() != n)
    {
        return Err(ConditionError::LengthMismatch);
    }
    cfg.check(n)?;

    let ns = i128::from(signal.frames().max(1));
    let nd = i128::from(dark.map_or(1, |d| d.frames().max(1)));
    let reference_us = if cfg.reference_us == 0 {
        cfg.integration_us
    } else {
        cfg.reference_us
    };
    // out = (S·lin_s/ns − D·lin_d/nd) · gain · 16 · ref / int, with lin and gain in Q14.
    // Worst case numerator: 2^24 · 2^16 · 2^8 · 2^16 · 2^4 · 2^32 = 2^100 < 2^127.
    let den = ns * nd * (1i128 << 28) * i128::from(cfg.integration_us);
    let scale = i128::from(reference_us) << OUTPUT_FRAC_BITS;

    let mut saturated: u16 = 0;
    let mut clamped: u16 = 0;
    for (i, (o, f)) in out.iter_mut().zip(flags.iter_mut()).enumerate() {
        let fs = cfg.full_scale_counts;
        let s = signal.sum_at(i, fs);
        let d = match dark {
            Some(d) => d.sum_at(i, fs),
            None => Some(0),
        };
        let sat = s.is_none() || d.is_none();
        // A saturated signal keeps its clipped level so the line stays visible, just flagged. A saturated
        // dark keeps its clipped level too: taken as 0 it would leave a hot pixel standing at full scale,
        // a fake line; clipped, signal − dark is about 0 (the signal is clipped as well) and nothing shows.
        let s = s.unwrap_or(u32::from(fs).saturating_mul(u32::try_from(ns).unwrap_or(1)));
        let d = d.unwrap_or(u32::from(fs).saturating_mul(u32::try_from(nd).unwrap_or(1)));
        let lin_s = i128::from(cfg.linearity_q14(s, signal.frames()));
        let lin_d = i128::from(cfg.linearity_q14(d, dark.map_or(1, |x| x.frames())));
        let g = i128::from(gain.map_or(u32::from(ONE_Q14), |t| t.factor_q14(i)));
        let diff = i128::from(s) * lin_s * nd - i128::from(d) * lin_d * ns;
        let v = div_round(diff * g * scale, den);
        let mut mark = if sat { flags::SATURATED } else { 0 };
        if sat {
            saturated = saturated.saturating_add(1);
        }
        *o = match i32::try_from(v) {
            Ok(x) => x,
            Err(_) => {
                mark |= flags::CLAMPED;
                clamped = clamped.saturating_add(1);
                v.clamp(i128::from(i32::MIN), i128::from(i32::MAX)) as i32
            }
        };
        *f = mark;
    }
    let repaired = repair::repair_bad_pixels(&cfg.bad_pixels, out, flags);

    Ok(ConditionedInfo {
        pixels: u16::try_from(n).unwrap_or(u16::MAX),
        frames: signal.frames(),
        saturated_pixels: saturated,
        repaired_pixels: repaired,
        clamped_pixels: clamped,
        shot_var_per_unit_q16: shot_var_q16(cfg, reference_us, signal.frames()),
    })
}

/// Shot-noise slope of the output: var(y) = y · K / (G · frames), K = 16 · ref / int, G in e⁻/count.
fn shot_var_q16(cfg: &ConditionConfig, reference_us: u32, frames: u16) -> Option<u32> {
    if cfg.electrons_per_count_q8 == 0 {
        return None;
    }
    // 2^32 (ref) · 2^4 · 2^16 · 2^8 fits u128 easily; result saturates to u32.
    let num = u128::from(reference_us) << (OUTPUT_FRAC_BITS + 16 + 8);
    let den = u128::from(cfg.integration_us)
        * u128::from(cfg.electrons_per_count_q8)
        * u128::from(frames.max(1));
    let q = num.checked_div(den)?;
    Some(u32::try_from(q).unwrap_or(u32::MAX))
}

/// Rounds `num / den` half away from zero for `den > 0`.
fn div_round(num: i128, den: i128) -> i128 {
    if den <= 0 {
        return 0;
    }
    if num >= 0 {
        (num + den / 2) / den
    } else {
        -((-num + den / 2) / den)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(
        cfg: &ConditionConfig,
        sig: FrameSum<'_>,
        dark: Option<FrameSum<'_>>,
        gain: Option<GainTable<'_>>,
        n: usize,
    ) -> (Vec<i32>, Vec<u8>, ConditionedInfo) {
        let mut out = vec![0i32; n];
        let mut fl = vec![0u8; n];
        let info = condition_frame(cfg, sig, dark, gain, &mut out, &mut fl).unwrap();
        (out, fl, info)
    }

    #[test]
    fn dark_subtraction_and_q4_scale() {
        let cfg = ConditionConfig::new(4095, 1000);
        let raw = [100u16, 150, 90];
        let dark = [90u16, 90, 100];
        let (out, fl, info) = run(
            &cfg,
            FrameSum::single(&raw).unwrap(),
            Some(FrameSum::single(&dark).unwrap()),
            None,
            3,
        );
        assert_eq!(out, [160, 960, -160]);
        assert_eq!(fl, [0, 0, 0]);
        assert_eq!(info.saturated_pixels, 0);
        assert_eq!(info.shot_var_per_unit_q16, None);
    }

    #[test]
    fn coadded_signal_and_dark_average_separately() {
        let cfg = ConditionConfig::new(4095, 1000);
        // Signal: 3 readouts summing to 301 (mean 100.33); dark: 2 readouts summing to 181 (mean 90.5).
        let sig = [301u32];
        let dark = [181u32];
        let (out, _, info) = run(
            &cfg,
            FrameSum::stacked(&sig, 3).unwrap(),
            Some(FrameSum::stacked(&dark, 2).unwrap()),
            None,
            1,
        );
        // (100.333 - 90.5) * 16 = 157.33 -> 157
        assert_eq!(out, [157]);
        assert_eq!(info.frames, 3);
    }

    #[test]
    fn normalises_to_reference_exposure_and_applies_gain() {
        let mut cfg = ConditionConfig::new(4095, 500);
        cfg.reference_us = 2000;
        let raw = [10u16, 10];
        let g = [16384u16, 8192];
        let (out, _, _) = run(
            &cfg,
            FrameSum::single(&raw).unwrap(),
            None,
            Some(GainTable::new(&g).unwrap()),
            2,
        );
        // 10 counts in 0.5 ms -> 40 counts per 2 ms -> 640 in Q4; half gain -> 320.
        assert_eq!(out, [640, 320]);
    }

    #[test]
    fn saturation_in_signal_or_dark_is_flagged() {
        let cfg = ConditionConfig::new(1000, 1000);
        let raw = [999u16, 1000, 500];
        let dark = [10u16, 10, 1000];
        let (out, fl, info) = run(
            &cfg,
            FrameSum::single(&raw).unwrap(),
            Some(FrameSum::single(&dark).unwrap()),
            None,
            3,
        );
        assert_eq!(fl, [0, flags::SATURATED, flags::SATURATED]);
        assert_eq!(info.saturated_pixels, 2);
        assert_eq!(
            out[1],
            (1000 - 10) * 16,
            "saturated pixels keep their clipped level"
        );
        // A pixel so hot that the dark saturates: both clip, nothing is left standing.
        let raw = [100u16, 1000, 100];
        let dark = [10u16, 1000, 10];
        let (out, fl, _) = run(
            &cfg,
            FrameSum::single(&raw).unwrap(),
            Some(FrameSum::single(&dark).unwrap()),
            None,
            3,
        );
        assert_eq!(out, [90 * 16, 0, 90 * 16]);
        assert_eq!(fl[1], flags::SATURATED);
        // The same with co-added frames (3 signal, 2 dark readouts).
        let sig = [300u32, SATURATED_SUM];
        let dark = [20u32, SATURATED_SUM];
        let (out, _, _) = run(
            &cfg,
            FrameSum::stacked(&sig, 3).unwrap(),
            Some(FrameSum::stacked(&dark, 2).unwrap()),
            None,
            2,
        );
        assert_eq!(out, [90 * 16, 0]);
    }

    #[test]
    fn all_saturated_and_all_zero_frames() {
        let cfg = ConditionConfig::new(4095, 1000);
        let raw = [4095u16; 16];
        let (_, fl, info) = run(&cfg, FrameSum::single(&raw).unwrap(), None, None, 16);
        assert_eq!(info.saturated_pixels, 16);
        assert!(fl.iter().all(|&f| f == flags::SATURATED));
        let zero = [0u16; 16];
        let (out, fl, _) = run(&cfg, FrameSum::single(&zero).unwrap(), None, None, 16);
        assert!(out.iter().all(|&v| v == 0) && fl.iter().all(|&f| f == 0));
    }

    #[test]
    fn one_pixel_and_full_size_frames() {
        let cfg = ConditionConfig::new(4095, 1000);
        let (out, _, _) = run(&cfg, FrameSum::single(&[7]).unwrap(), None, None, 1);
        assert_eq!(out, [112]);
        let raw = vec![3u16; MAX_PIXELS];
        let (out, _, info) = run(
            &cfg,
            FrameSum::single(&raw).unwrap(),
            None,
            None,
            MAX_PIXELS,
        );
        assert_eq!(info.pixels as usize, MAX_PIXELS);
        assert!(out.iter().all(|&v| v == 48));
    }

    #[test]
    fn bad_pixels_are_interpolated_and_marked() {
        let mut cfg = ConditionConfig::new(4095, 1000);
        cfg.bad_pixels.push(1).unwrap();
        let raw = [10u16, 4000, 30];
        let (out, fl, info) = run(&cfg, FrameSum::single(&raw).unwrap(), None, None, 3);
        assert_eq!(out, [160, 320, 480]);
        assert_eq!(fl[1], flags::REPAIRED);
        assert_eq!(info.repaired_pixels, 1);
    }

    #[test]
    fn errors_leave_buffers_alone() {
        let cfg = ConditionConfig::new(4095, 1000);
        let raw = [1u16, 2];
        let mut out = [5i32; 3];
        let mut fl = [9u8; 3];
        let sig = FrameSum::single(&raw).unwrap();
        assert_eq!(
            condition_frame(&cfg, sig, None, None, &mut out, &mut fl),
            Err(ConditionError::LengthMismatch)
        );
        assert_eq!(out, [5, 5, 5]);
        let d = [1u16, 2, 3];
        assert_eq!(
            condition_frame(
                &cfg,
                sig,
                Some(FrameSum::single(&d).unwrap()),
                None,
                &mut out[..2],
                &mut fl[..2]
            ),
            Err(ConditionError::LengthMismatch)
        );
        let bad = ConditionConfig::new(4095, 0);
        assert_eq!(
            condition_frame(&bad, sig, None, None, &mut out[..2], &mut fl[..2]),
            Err(ConditionError::BadConfig)
        );
        assert_eq!(fl, [9, 9, 9]);
    }

    #[test]
    fn shot_slope_follows_gain_exposure_and_frames() {
        let mut cfg = ConditionConfig::new(4095, 1000);
        cfg.electrons_per_count_q8 = 512; // 2 e-/count
        let raw = [1000u16];
        let (_, _, info) = run(&cfg, FrameSum::single(&raw).unwrap(), None, None, 1);
        // y = 16 c; var(y) = 256 var(c) = 256 c / 2 = 8 y -> 8.0 in Q16.
        assert_eq!(info.shot_var_per_unit_q16, Some(8 << 16));
        let sum = [4000u32];
        let (_, _, info) = run(&cfg, FrameSum::stacked(&sum, 4).unwrap(), None, None, 1);
        assert_eq!(info.shot_var_per_unit_q16, Some(2 << 16));
    }

    #[test]
    fn linearity_curve_scales_each_level() {
        let mut cfg = ConditionConfig::new(4095, 1000);
        cfg.linearity
            .push(LinearityKnot {
                level_counts: 0,
                factor_q14: 16384,
            })
            .unwrap();
        cfg.linearity
            .push(LinearityKnot {
                level_counts: 2000,
                factor_q14: 20480,
            })
            .unwrap();
        let raw = [2000u16, 1000];
        let (out, _, _) = run(&cfg, FrameSum::single(&raw).unwrap(), None, None, 2);
        // 2000 · 1.25 · 16 = 40000; 1000 · 1.125 · 16 = 18000.
        assert_eq!(out, [40000, 18000]);
    }
}
