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
mod scale;
pub mod stack;

pub use config::{ConditionConfig, LinearityKnot, MAX_BAD_PIXELS, MAX_LINEARITY_KNOTS, ONE_Q14};
pub use error::ConditionError;
pub use gain::{GainTable, GAIN_MAX_Q14};
pub use info::ConditionedInfo;
pub use repair::MAX_REPAIR_REACH;
pub use stack::{FrameSum, Stack, SATURATED_SUM};

use crate::find::math::mul_u32_wide;

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
/// (≤ [`MAX_LINEARITY_KNOTS`] steps), then ≤ [`MAX_BAD_PIXELS`] repairs of ≤ 2 × [`MAX_REPAIR_REACH`] steps,
/// after a config check of ≤ [`MAX_BAD_PIXELS`] + 2 × [`MAX_LINEARITY_KNOTS`] steps.
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
    // Worst case numerator: 2^32 · 2^16 · 2^8 · 2^16 · 2^4 · 2^32 = 2^108 < 2^127.
    let den = ns * nd * (1i128 << 28) * i128::from(cfg.integration_us);
    let scale = i128::from(reference_us) << OUTPUT_FRAC_BITS;
    let px = Pixels {
        cfg,
        signal,
        dark,
        gain,
        ns,
        nd,
    };

    // The same value as round(numerator / den) through a reduced frame constant (see `scale`): the
    // Q14 factors that are 1.0 on every pixel (no linearity curve, no gain table) move into it.
    let linear = cfg.linearity.is_empty();
    let unit_bits = if linear { 14 } else { 0 } + if gain.is_none() { 14 } else { 0 };
    let factor_max = |unit: bool| if unit { 1 } else { u128::from(u16::MAX) };
    let x_max = (u128::from(signal.max_count()) * factor_max(linear) * nd as u128)
        .max(u128::from(dark.map_or(0, |d| d.max_count())) * factor_max(linear) * ns as u128)
        * factor_max(gain.is_none());
    let plan = scale::Reduced::new((scale as u128) << unit_bits, den as u128)
        .and_then(|r| r.narrow(x_max));

    let (saturated, clamped) = match plan {
        Some(plan) if gain.is_none() && linear => match (signal.raw(), dark, plan.unsigned_u16()) {
            (Some(raw), None, Some(mad)) => {
                raw_readout(raw, cfg.full_scale_counts, mad, out, flags)
            }
            _ => px.narrow_plain(&plan, out, flags),
        },
        Some(plan) => px.narrow(&plan, out, flags),
        None => px.wide(scale, den, out, flags),
    };
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

/// One readout, no dark, gain or linearity curve, and a frame constant that is a multiply and shift
/// in `u32` (`mad` = multiplier, add, shift; see [`scale::Narrow::unsigned_u16`]): the common case,
/// a few instructions per pixel. Returns (saturated, clamped) pixel counts.
fn raw_readout(
    raw: &[u16],
    full_scale_counts: u16,
    (mul, add, shift): (u32, u32, u32),
    out: &mut [i32],
    flags: &mut [u8],
) -> (u16, u16) {
    // ≤ i32::MAX by construction of `mad`: no clamping. One readout at the actual exposure is a
    // plain multiply (add = shift = 0), worth a loop of its own on a core with 8 low registers.
    // Wrapping: the first pass takes a saturated pixel's unclipped reading, which may overflow (its
    // value is written again, clipped).
    let saturated = if add == 0 && shift == 0 {
        raw_loop(raw, full_scale_counts, out, flags, |s| s.wrapping_mul(mul))
    } else {
        raw_loop(raw, full_scale_counts, out, flags, |s| {
            s.wrapping_mul(mul).wrapping_add(add) >> shift
        })
    };
    (u16::try_from(saturated).unwrap_or(u16::MAX), 0)
}

/// The pixel loop of [`raw_readout`]; returns the saturated pixel count.
#[inline(never)]
fn raw_loop(
    raw: &[u16],
    full_scale_counts: u16,
    out: &mut [i32],
    flags: &mut [u8],
    value: impl Fn(u32) -> u32,
) -> u32 {
    let fs = u32::from(full_scale_counts);
    // Most readouts hold no saturated pixel: one pass of values alone, the flags cleared in one fill.
    // `r + (2^16 − fs)` reaches bit 16 exactly when r ≥ fs (r < 2^16, fs ≤ 2^16 − 1): or-ing them
    // tells whether any pixel saturated, for two instructions a pixel. Where one did, the flagged
    // loop below writes every value again (the same value for every unsaturated pixel).
    let n = out.len().min(raw.len()).min(flags.len());
    let lift = (1u32 << 16) - fs;
    let mut any = 0u32;
    for (o, &r) in out.iter_mut().zip(raw) {
        let r = u32::from(r);
        any |= r + lift;
        *o = value(r) as i32;
    }
    if any & (1 << 16) == 0 {
        if let Some(f) = flags.get_mut(..n) {
            f.fill(0);
        }
        return 0;
    }
    // At most MAX_PIXELS saturated pixels: no overflow.
    let mut saturated: u32 = 0;
    for ((o, f), &r) in out.iter_mut().zip(flags.iter_mut()).zip(raw) {
        // A saturated pixel (r ≥ full scale) keeps its clipped level (full scale × 1 readout),
        // flagged. Branch-free: `sat` is the sign of fs − 1 − r (both below 2^16), `mask` all ones
        // when saturated.
        let r = u32::from(r);
        let sat = fs.wrapping_sub(1).wrapping_sub(r) >> 31;
        let mask = 0u32.wrapping_sub(sat);
        saturated += sat;
        *o = value(r - (r.wrapping_sub(fs) & mask)) as i32;
        *f = (sat as u8) * flags::SATURATED;
    }
    saturated
}

/// What every pixel of a frame is computed from.
struct Pixels<'c, 'f> {
    cfg: &'c ConditionConfig,
    signal: FrameSum<'f>,
    dark: Option<FrameSum<'f>>,
    gain: Option<GainTable<'f>>,
    /// Readouts in the signal and the dark (≥ 1).
    ns: i128,
    nd: i128,
}

impl Pixels<'_, '_> {
    /// Summed signal and dark counts of pixel `i` (clipped where saturated) and whether either
    /// saturated.
    fn counts(&self, i: usize) -> (u32, u32, bool) {
        let fs = self.cfg.full_scale_counts;
        let s = self.signal.sum_at(i, fs);
        let d = match self.dark {
            Some(d) => d.sum_at(i, fs),
            None => Some(0),
        };
        let sat = s.is_none() || d.is_none();
        // A saturated signal keeps its clipped level so the line stays visible, just flagged. A saturated
        // dark keeps its clipped level too: taken as 0 it would leave a hot pixel standing at full scale,
        // a fake line; clipped, signal − dark is about 0 (the signal is clipped as well) and nothing shows.
        let s = s.unwrap_or(u32::from(fs).saturating_mul(u32::try_from(self.ns).unwrap_or(1)));
        let d = d.unwrap_or(u32::from(fs).saturating_mul(u32::try_from(self.nd).unwrap_or(1)));
        (s, d, sat)
    }

    /// Linearity factors (Q14) of signal and dark counts.
    fn linearity(&self, s: u32, d: u32) -> (u32, u32) {
        (
            self.cfg.linearity_q14(s, self.signal.frames()),
            self.cfg
                .linearity_q14(d, self.dark.map_or(1, |x| x.frames())),
        )
    }

    /// Every pixel in `i64` through `plan`, the Q14 factors that are 1.0 left out of x (they are in
    /// the plan's constant). Returns (saturated, clamped) pixel counts.
    fn narrow(&self, plan: &scale::Narrow, out: &mut [i32], flags: &mut [u8]) -> (u16, u16) {
        let linear = self.cfg.linearity.is_empty();
        let (ns, nd) = (self.ns as i64, self.nd as i64);
        self.each(out, flags, &|i, s, d| {
            let (ls, ld) = if linear { (1, 1) } else { self.linearity(s, d) };
            let g = self.gain.map_or(1, |t| t.factor_q14(i));
            // |x| ≤ the bound the plan was made for (< 2^62), see `condition_frame`.
            let x = (i64::from(s) * i64::from(ls) * nd - i64::from(d) * i64::from(ld) * ns)
                * i64::from(g);
            i128::from(plan.apply(x))
        })
    }

    /// [`Self::narrow`] with no linearity curve and no gain table (a dark subtracted, or a stack):
    /// x = s · nd − d · ns, each product 32 × 32 → 64 bits in halves and x · K likewise where both fit
    /// 32 bits ([`scale::Narrow::apply_split`]), no 64-bit library multiply and no call per pixel — the
    /// same integers. Returns (saturated, clamped) pixel counts.
    fn narrow_plain(&self, plan: &scale::Narrow, out: &mut [i32], flags: &mut [u8]) -> (u16, u16) {
        // Readout counts are u16 frame counts (≥ 1).
        let ns = u32::try_from(self.ns).unwrap_or(u32::MAX);
        let nd = u32::try_from(self.nd).unwrap_or(u32::MAX);
        let mut tally = (0, 0);
        for (i, (o, f)) in out.iter_mut().zip(flags.iter_mut()).enumerate() {
            let (s, d, sat) = self.counts(i);
            // Each product < 2^64 and, by the plan's bound, below 2^62: exact in i64.
            let x = mul_u32_wide(s, nd) as i64 - mul_u32_wide(d, ns) as i64;
            store(plan.apply_split(x), sat, o, f, &mut tally);
        }
        tally
    }

    /// Every pixel through the full 128-bit numerator and `den`. Returns (saturated, clamped).
    fn wide(&self, scale: i128, den: i128, out: &mut [i32], flags: &mut [u8]) -> (u16, u16) {
        let (ns, nd) = (self.ns as u64, self.nd as u64);
        let scale = scale as u64; // ≤ 2^36
        self.each(out, flags, &|i, s, d| {
            let (ls, ld) = self.linearity(s, d);
            let g = u64::from(self.gain.map_or(u32::from(ONE_Q14), |t| t.factor_q14(i)));
            // Each term ≤ 2^32 · 2^16 · 2^8 = 2^56 and g · scale ≤ 2^52 fit u64. `mul_div_i128`
            // rounds half away from zero like `div_round`, through the exact 256-bit product.
            let diff = i128::from(u64::from(s) * u64::from(ls) * nd)
                - i128::from(u64::from(d) * u64::from(ld) * ns);
            crate::fixed::mul_div_i128(diff, i128::from(g * scale), den).unwrap_or(0)
        })
    }

    /// Runs `value(i, signal, dark)` over the pixels, clamping to `i32` and flagging.
    fn each(
        &self,
        out: &mut [i32],
        flags: &mut [u8],
        value: &dyn Fn(usize, u32, u32) -> i128,
    ) -> (u16, u16) {
        let mut tally = (0, 0);
        for (i, (o, f)) in out.iter_mut().zip(flags.iter_mut()).enumerate() {
            let (s, d, sat) = self.counts(i);
            store(value(i, s, d), sat, o, f, &mut tally);
        }
        tally
    }
}

/// One pixel's value into `o`, clamped to `i32` (flagged [`flags::CLAMPED`] when it had to be), its
/// [`flags::SATURATED`] flag into `f`, and both counted in `tally` (saturated, clamped): the tail of
/// every conditioning loop, in the loop's own width (i64 on the narrow path, i128 on the wide one).
#[inline(always)]
fn store<T>(v: T, sat: bool, o: &mut i32, f: &mut u8, tally: &mut (u16, u16))
where
    T: Copy + Ord + From<i32> + TryInto<i32>,
{
    let mut mark = if sat { flags::SATURATED } else { 0 };
    if sat {
        tally.0 = tally.0.saturating_add(1);
    }
    *o = match v.try_into() {
        Ok(x) => x,
        Err(_) => {
            mark |= flags::CLAMPED;
            tally.1 = tally.1.saturating_add(1);
            // In range once clamped.
            v.clamp(T::from(i32::MIN), T::from(i32::MAX))
                .try_into()
                .unwrap_or(0)
        }
    };
    *f = mark;
}

/// Shot-noise slope of the output: var(y) = y · K / (G · frames), K = 16 · ref / int, G in e⁻/count.
fn shot_var_q16(cfg: &ConditionConfig, reference_us: u32, frames: u16) -> Option<u32> {
    if cfg.electrons_per_count_q8 == 0 {
        return None;
    }
    // 2^32 (ref) · 2^4 · 2^16 · 2^8 = 2^60 and 2^32 · 2^16 · 2^16 = 2^64 (exclusive) fit u64; the
    // result saturates to u32.
    let num = u64::from(reference_us) << (OUTPUT_FRAC_BITS + 16 + 8);
    let den = u64::from(cfg.integration_us)
        * u64::from(cfg.electrons_per_count_q8)
        * u64::from(frames.max(1));
    let q = num.checked_div(den)?;
    Some(u32::try_from(q).unwrap_or(u32::MAX))
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

    /// The clean-frame pass and the flagged loop of `raw_loop` against the plain per-pixel rule
    /// (clip at full scale, flag, scale), with stale flags, no saturated pixel, one at either end,
    /// and full scales up to 2^16 − 1.
    #[test]
    fn raw_loop_matches_the_per_pixel_rule() {
        let mut bits = crate::test_rng::xorshift(0x9e37_79b9_7f4a_7c15u64);
        let mut next = move |m: u64| bits() % m;
        for round in 0..600 {
            let n = 1 + next(50) as usize;
            let fs = [1u16, 255, 4095, 40_000, u16::MAX][next(5) as usize];
            let below = u64::from(fs);
            let mut raw: Vec<u16> = (0..n).map(|_| next(below) as u16).collect();
            match round % 4 {
                0 => {}
                1 => raw[0] = fs,
                2 => raw[n - 1] = u16::MAX,
                _ => raw[next(n as u64) as usize] = fs.saturating_add(next(3) as u16),
            }
            let mul = 1 + next(1 << 15) as u32;
            let value = |s: u32| s.wrapping_mul(mul);
            let mut out = vec![-1i32; n];
            let mut fl = vec![0xffu8; n];
            let sat = raw_loop(&raw, fs, &mut out, &mut fl, value);
            let mut want_sat = 0;
            for i in 0..n {
                let r = u32::from(raw[i]);
                let s = r >= u32::from(fs);
                want_sat += u32::from(s);
                let clipped = if s { u32::from(fs) } else { r };
                assert_eq!(out[i], value(clipped) as i32, "round {round} px {i}");
                assert_eq!(
                    fl[i],
                    if s { flags::SATURATED } else { 0 },
                    "round {round} px {i}"
                );
            }
            assert_eq!(sat, want_sat, "round {round}");
        }
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

    /// The conditioning formula term by term through 128-bit numbers, as the stage first did it.
    fn reference(
        cfg: &ConditionConfig,
        sig: FrameSum<'_>,
        dark: Option<FrameSum<'_>>,
        gain: Option<GainTable<'_>>,
    ) -> Vec<(i32, u8)> {
        let ns = i128::from(sig.frames());
        let nd = i128::from(dark.map_or(1, |d| d.frames()));
        let r = if cfg.reference_us == 0 {
            cfg.integration_us
        } else {
            cfg.reference_us
        };
        let den = ns * nd * (1 << 28) * i128::from(cfg.integration_us);
        let fs = cfg.full_scale_counts;
        (0..sig.len())
            .map(|i| {
                let s = sig.sum_at(i, fs);
                let d = dark.map_or(Some(0), |d| d.sum_at(i, fs));
                let sat = s.is_none() || d.is_none();
                let s = s.unwrap_or(u32::from(fs).saturating_mul(ns as u32));
                let d = d.unwrap_or(u32::from(fs).saturating_mul(nd as u32));
                let ls = i128::from(cfg.linearity_q14(s, sig.frames()));
                let ld = i128::from(cfg.linearity_q14(d, dark.map_or(1, |x| x.frames())));
                let g = i128::from(gain.map_or(16384, |t| t.factor_q14(i)));
                let num =
                    (i128::from(s) * ls * nd - i128::from(d) * ld * ns) * g * (i128::from(r) << 4);
                let v = if num >= 0 {
                    (num + den / 2) / den
                } else {
                    -((-num + den / 2) / den)
                };
                let mut f = if sat { flags::SATURATED } else { 0 };
                let o = match i32::try_from(v) {
                    Ok(x) => x,
                    Err(_) => {
                        f |= flags::CLAMPED;
                        v.clamp(i32::MIN.into(), i32::MAX.into()) as i32
                    }
                };
                (o, f)
            })
            .collect()
    }

    #[test]
    fn every_arithmetic_path_gives_the_wide_formulas_integers() {
        let mut bits = crate::test_rng::xorshift(0x2545_f491_4f6c_dd1du64);
        let mut next = move |m: u64| bits() % m;
        for round in 0..400 {
            let n = 1 + next(40) as usize;
            let fs = [255u16, 4095, 16383, u16::MAX][next(4) as usize];
            let mut cfg =
                ConditionConfig::new(fs, [1, 7, 1000, 100_000, u32::MAX][next(5) as usize]);
            cfg.reference_us = [0, 3, 2000, 100_000, u32::MAX][next(5) as usize];
            if round % 3 == 1 {
                for (lvl, f) in [
                    (0u16, 16384u16),
                    (fs / 3, 17000 + next(30_000) as u16),
                    (fs - 1, u16::MAX),
                ] {
                    let _ = cfg.linearity.push(LinearityKnot {
                        level_counts: lvl,
                        factor_q14: f,
                    });
                }
            }
            let frames_s = [1u16, 1, 2, 3, 256][next(5) as usize];
            let frames_d = [1u16, 2, 5, 256][next(4) as usize];
            let raw: Vec<u16> = (0..n)
                .map(|_| next(u64::from(fs) + 2).min(u64::from(u16::MAX)) as u16)
                .collect();
            let sums: Vec<u32> = (0..n)
                .map(|_| match next(8) {
                    0 => SATURATED_SUM,
                    1 => u32::MAX - 1,
                    _ => next(u64::from(fs) * u64::from(frames_s) + 1) as u32,
                })
                .collect();
            let dsums: Vec<u32> = (0..n)
                .map(|_| {
                    if next(9) == 0 {
                        SATURATED_SUM
                    } else {
                        next(u64::from(fs) * u64::from(frames_d)) as u32
                    }
                })
                .collect();
            let gains: Vec<u16> = (0..n)
                .map(|_| 1 + next(u64::from(u16::MAX)) as u16)
                .collect();
            let sig = if frames_s == 1 && round % 2 == 0 {
                FrameSum::single(&raw).unwrap()
            } else {
                FrameSum::stacked(&sums, frames_s).unwrap()
            };
            let dark = (next(3) != 0).then(|| FrameSum::stacked(&dsums, frames_d).unwrap());
            let gain = (next(3) == 0).then(|| GainTable::new(&gains).unwrap());
            let (out, fl, _) = run(&cfg, sig, dark, gain, n);
            let want = reference(&cfg, sig, dark, gain);
            let got: Vec<(i32, u8)> = out.into_iter().zip(fl).collect();
            assert_eq!(got, want, "round {round}: {cfg:?}");
        }
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
