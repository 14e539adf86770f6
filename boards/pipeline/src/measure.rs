//! Instruction-count build: each stage of one check runs between two marks. A mark takes a time
//! stamp from SysTick on the core clock and then calls [`glowcheck_marker`], an address QEMU's
//! counting plugin (`boards/icount-plugin/`) watches: the plugin writes how many instructions had
//! executed at each marker hit, exactly. The n-th hit is the n-th call of the marker in the run; the
//! firmware prints the hit number of every mark (`hits` line, `hits A B` on each adversarial line), so
//! `boards/measure.sh` pairs the plugin's counts with the stages without relying on their order.
//!
//! The SysTick stamps are the cross-check (and the fallback when the plugin cannot be built): under
//! QEMU's `-icount shift=0` every instruction advances virtual time by exactly 1 ns, so the ticks are
//! deterministic and proportional to instructions executed; a register-only loop of a known instruction
//! count, timed the same way, gives the ratio (`boards/measure.sh` does the division). One tick is 40
//! instructions on `mps2-an385`'s 25 MHz clock, so a SysTick count is ± 1 tick.
//!
//! Mark pairs: 0 → 1 `Checker::configure` (line
//! prediction, once per configuration), 2 → 3 `condition_frame`, 4 → 5 `find_peaks`, 6 → 7
//! `Checker::check_traced` in calibrate mode (the whole pipeline again, conditioning and peak finding
//! included), with 18 → 19 → 20 → 21 at its `PeaksFound`, `Calibrated`, `Matched` and `Judged`
//! callbacks (the calibrate, match and judge stages), 8 → 9 `Checker::check` in verify mode (16 → 17
//! around its judging), 10 → 11 the f32 baseline of
//! conditioning, peak finding and centroiding, 12 → 13 the calibration loop, 14 → 15 nothing (the cost
//! of a mark itself, which `boards/measure.sh` subtracts from the plugin's counts; a bare pair of
//! [`stamp`]s, which time the adversarial checks, is measured the same way). The frame is the hydrogen
//! tube (`h-tube`).
//!
//! Stack: before each measured call the free stack is painted again and afterwards scanned, so
//! each call's depth below its caller's stack pointer is printed on its own.
use core::fmt::Write;
use core::ptr::{self, addr_of, addr_of_mut};
use core::sync::atomic::{compiler_fence, Ordering};

use core::sync::atomic::AtomicU32;

use cortex_m::peripheral::syst::SystClkSource;
use cortex_m::peripheral::SYST;
#[cfg(not(feature = "profile"))]
use cortex_m_rt::exception;
use cortex_m_semihosting::{debug, hio};
use glowcheck::check::Buffers;
use glowcheck::check::{Checker, Stage};
use glowcheck::condition::{condition_frame, FrameSum};
use glowcheck::condition::{GainTable, GAIN_MAX_Q14};
use glowcheck::find::{find_peaks, PeakList};
use glowcheck::judge::profile::HYDROGEN;
use glowcheck::judge::{Mode, Report};
use glowcheck_float_baseline::{condition_find_centroid, FloatPeak, MAX_PEAKS};
use glowcheck_pipeline_report::adversarial::{ADVERSARIES, MAX_ADVERSARY_PIXELS};
use glowcheck_pipeline_report::traces::{AIR_LEAK, D_LAMP, H_TUBE, PIXELS};
use glowcheck_pipeline_report::{checker, config, config_for, mode_name, Case, CASES};

/// SysTick wraps (every 2²⁴ ticks) since [`start_clock`].
static WRAPS: AtomicU32 = AtomicU32::new(0);
/// Time stamps (SysTick ticks, low and high word) taken by [`mark`].
static STAMPS: [AtomicU32; 2 * MARKS] = [const { AtomicU32::new(0) }; 2 * MARKS];
/// The marker hit number of each mark, for pairing the plugin's counts with [`STAMPS`].
static HIT_OF: [AtomicU32; MARKS] = [const { AtomicU32::new(0) }; MARKS];
/// Number of marks.
const MARKS: usize = 22;
/// Calls of [`glowcheck_marker`] so far.
static HITS: AtomicU32 = AtomicU32::new(0);

#[cfg(not(feature = "profile"))]
#[exception]
fn SysTick() {
    WRAPS.store(
        WRAPS.load(Ordering::Relaxed).wrapping_add(1),
        Ordering::Relaxed,
    );
}

/// Stage being run (the last mark), for the profile samples.
#[cfg(feature = "profile")]
static STAGE: AtomicU32 = AtomicU32::new(0);
/// Samples taken so far.
#[cfg(feature = "profile")]
static SAMPLED: AtomicU32 = AtomicU32::new(0);
/// Room for the samples, two words each (stage << 24 | PC, then LR): 2 MiB of the 4 MiB RAM map,
/// 10 G instructions.
#[cfg(feature = "profile")]
const MAX_SAMPLES: usize = 1 << 19;
/// The samples.
#[cfg(feature = "profile")]
static SAMPLES: [AtomicU32; MAX_SAMPLES] = [const { AtomicU32::new(0) }; MAX_SAMPLES];

// The SysTick handler of the profile build hands the exception frame (MSP at entry, nothing pushed
// yet) to `glowcheck_profile_sample`; the interrupted PC is its seventh word.
#[cfg(feature = "profile")]
core::arch::global_asm!(
    ".section .text.SysTick,\"ax\",%progbits",
    ".global SysTick",
    ".type SysTick,%function",
    ".thumb_func",
    "SysTick:",
    "mrs r0, msp",
    "ldr r1, =glowcheck_profile_sample",
    "bx r1",
    ".ltorg",
);

/// Records one sample from the exception frame at `frame`.
#[cfg(feature = "profile")]
#[no_mangle]
extern "C" fn glowcheck_profile_sample(frame: *const u32) {
    // SAFETY: `frame` is the hardware-stacked exception frame (8 words) the trampoline passed in.
    let pc = unsafe { ptr::read_volatile(frame.add(6)) };
    // SAFETY: as above; word 5 is the interrupted code's LR (its caller, when it is a leaf routine).
    let lr = unsafe { ptr::read_volatile(frame.add(5)) };
    let n = SAMPLED.load(Ordering::Relaxed) as usize;
    // The fine build (every 400 instructions) skips line prediction, which would fill the buffer.
    if cfg!(feature = "profile-fine") && STAGE.load(Ordering::Relaxed) < 2 {
        return;
    }
    if let (Some(slot), Some(caller)) = (SAMPLES.get(n), SAMPLES.get(n + 1)) {
        slot.store(
            (STAGE.load(Ordering::Relaxed) << 24) | (pc & 0x00ff_ffff),
            Ordering::Relaxed,
        );
        caller.store(lr, Ordering::Relaxed);
        SAMPLED.store(n as u32 + 2, Ordering::Relaxed);
    }
}

/// Writes the samples as raw little-endian words.
#[cfg(feature = "profile")]
fn dump_samples(out: &mut hio::HostStream) {
    let n = (SAMPLED.load(Ordering::Relaxed) as usize).min(MAX_SAMPLES);
    for chunk in SAMPLES.get(..n).unwrap_or(&[]).chunks(256) {
        let mut bytes = [0u8; 1024];
        for (b, s) in bytes.chunks_exact_mut(4).zip(chunk) {
            b.copy_from_slice(&s.load(Ordering::Relaxed).to_le_bytes());
        }
        let _ = out.write_all(bytes.get(..4 * chunk.len()).unwrap_or(&[]));
    }
}

/// Starts SysTick on the core clock, full 24-bit range, counting wraps in its exception.
fn start_clock(mut syst: SYST) {
    syst.set_clock_source(SystClkSource::Core);
    syst.set_reload(if cfg!(feature = "profile-fine") {
        9
    } else if cfg!(feature = "profile") {
        99
    } else {
        0x00ff_ffff
    });
    syst.clear_current();
    syst.enable_interrupt();
    syst.enable_counter();
}

/// Ticks since [`start_clock`], read consistently across a wrap.
fn now() -> u64 {
    loop {
        let w = WRAPS.load(Ordering::SeqCst);
        let c = SYST::get_current();
        if WRAPS.load(Ordering::SeqCst) == w {
            return (u64::from(w) << 24) | u64::from(0x00ff_ffff - c);
        }
    }
}

/// The address QEMU's counting plugin watches (`boards/measure.sh` finds it with `llvm-nm`): each
/// call is one marker hit. Returns the hit's number (0, 1, 2, … in call order). Not inlined, so every
/// mark executes the same first instruction; the store keeps the call from being optimised away.
#[inline(never)]
#[no_mangle]
extern "C" fn glowcheck_marker() -> u32 {
    let n = HITS.load(Ordering::Relaxed);
    HITS.store(n.wrapping_add(1), Ordering::Relaxed);
    n
}

/// A SysTick time stamp followed by a marker hit: `(ticks, hit number)`. Stamp first, marker last, so
/// the instructions between two stamps and between their two hits are the same, give or take the
/// less-than-a-tick SysTick truncation.
#[inline(never)]
fn stamp() -> (u64, u32) {
    compiler_fence(Ordering::SeqCst);
    let t = now();
    let hit = glowcheck_marker();
    compiler_fence(Ordering::SeqCst);
    (t, hit)
}

/// Records time stamp and marker hit `k`.
#[inline(never)]
fn mark(k: usize) {
    compiler_fence(Ordering::SeqCst);
    // The stage marks inside a check (16 and up) sample as stages 100 + k, apart from the
    // adversarial checks' ids (16 … 66).
    #[cfg(feature = "profile")]
    STAGE.store(
        if k >= 16 { 100 + k as u32 } else { k as u32 },
        Ordering::Relaxed,
    );
    let (t, hit) = stamp();
    if let (Some(lo), Some(hi), Some(h)) = (STAMPS.get(2 * k), STAMPS.get(2 * k + 1), HIT_OF.get(k))
    {
        lo.store(t as u32, Ordering::Relaxed);
        hi.store((t >> 32) as u32, Ordering::Relaxed);
        h.store(hit, Ordering::Relaxed);
    }
    compiler_fence(Ordering::SeqCst);
}

/// The marker hit number of mark `k`.
fn hit_of(k: usize) -> u32 {
    HIT_OF.get(k).map_or(0, |h| h.load(Ordering::Relaxed))
}

/// The time stamp of mark `k` (SysTick ticks; wraps in the bits from 24 up).
fn stamp_of(k: usize) -> u64 {
    let lo = STAMPS.get(2 * k).map_or(0, |s| s.load(Ordering::Relaxed));
    let hi = STAMPS
        .get(2 * k + 1)
        .map_or(0, |s| s.load(Ordering::Relaxed));
    (u64::from(hi) << 32) | u64::from(lo)
}

/// Ticks between marks `a` and `b`.
fn ticks(a: usize, b: usize) -> u64 {
    stamp_of(b).saturating_sub(stamp_of(a))
}

/// SysTick wraps (so runs of its exception handler) between marks `a` and `b`.
fn wraps(a: usize, b: usize) -> u64 {
    (stamp_of(b) >> 24).saturating_sub(stamp_of(a) >> 24)
}

/// Iterations of the calibration loop (two instructions each: `subs`, `bne`).
const CALIBRATION_LOOPS: u32 = 1_000_000;

/// A loop of exactly 2 × [`CALIBRATION_LOOPS`] instructions, to turn ticks into instructions.
#[inline(never)]
fn calibration_loop() {
    // SAFETY: a register-only countdown loop; touches no memory and clobbers only the flags.
    unsafe {
        core::arch::asm!(
            "2:",
            "subs {n}, #1",
            "bne 2b",
            n = inout(reg) CALIBRATION_LOOPS => _,
            options(nomem, nostack),
        );
    }
}

/// The f32 baseline's frame and scratch.
static mut FLOAT_FRAME: [f32; PIXELS] = [0.0; PIXELS];
/// See [`FLOAT_FRAME`].
static mut FLOAT_BASE: [f32; PIXELS] = [0.0; PIXELS];

extern "C" {
    /// Lowest address the stack may reach (end of static RAM), from cortex-m-rt's `link.x`.
    static _stack_end: u32;
    /// Initial stack pointer (top of RAM), from cortex-m-rt's `link.x`.
    static _stack_start: u32;
}

/// The paint cortex-m-rt's `paint-stack` lays down at reset, and [`repaint`] again.
const PAINT: u32 = 0xcccc_cccc;

/// Lowest stack address written since the last paint.
fn lowest_written() -> usize {
    let low = addr_of!(_stack_end) as usize;
    let high = addr_of!(_stack_start) as usize;
    let mut at = low;
    while at < high {
        // SAFETY: `at` walks word by word through RAM between two linker-provided, aligned bounds.
        if unsafe { ptr::read_volatile(at as *const u32) } != PAINT {
            break;
        }
        at += 4;
    }
    at
}

/// Paints the free stack again, so the next call's depth is measured on its own.
#[inline(never)]
fn repaint() {
    let low = addr_of!(_stack_end) as usize;
    // Everything more than 64 bytes below this function's own stack pointer is free (no interrupts).
    let top = cortex_m::register::msp::read() as usize - 64;
    let mut at = low;
    while at < top {
        // SAFETY: `at` walks word by word through free stack RAM below the live stack.
        unsafe { ptr::write_volatile(at as *mut u32, PAINT) };
        at += 4;
    }
}

/// Stack bytes the call `f` used below the caller's stack pointer.
#[inline(always)]
fn stack_of<T>(f: impl FnOnce() -> T) -> (T, u32) {
    repaint();
    let sp = cortex_m::register::msp::read() as usize;
    let t = f();
    (t, sp.saturating_sub(lowest_written()) as u32)
}

/// Runs the measured sequence and prints what the log cannot show (stack per stage, peak counts).
pub fn run(buffers: &mut Buffers<PIXELS>, report: &mut Report, syst: SYST) -> debug::ExitStatus {
    start_clock(syst);
    let case = CASES[0];
    let verify_case = Case {
        mode: Mode::Verify,
        ..case
    };
    let Ok(signal) = FrameSum::single(case.frame) else {
        return debug::EXIT_FAILURE;
    };
    let (verify, _) = stack_of(|| checker(&verify_case));
    // The calibrate checker is predicted in place, as a small core keeps it (in the caller, here
    // main's frame): the stack counted is configure's own.
    let Ok(cfg) = config(&case) else {
        return debug::EXIT_FAILURE;
    };
    let mut calibrate = Checker::blank(cfg.clone());
    let (configured, stack_new) = stack_of(|| {
        mark(0);
        let c = calibrate.configure(cfg);
        mark(1);
        c
    });
    let (Ok(verify), Ok(())) = (verify, configured) else {
        return debug::EXIT_FAILURE;
    };
    let cfg = calibrate.config();
    let mut peaks = PeakList::new();
    let w = buffers.workspace(PIXELS);
    let (info, stack_condition) = stack_of(|| {
        mark(2);
        let i = condition_frame(&cfg.condition, signal, None, None, w.frame, w.flags);
        mark(3);
        i
    });
    let Ok(info) = info else {
        return debug::EXIT_FAILURE;
    };
    let mut fcfg = cfg.find;
    if fcfg.shot_var_per_unit_q16.is_none() {
        fcfg.shot_var_per_unit_q16 = info.shot_var_per_unit_q16;
    }
    let (found, stack_find) = stack_of(|| {
        mark(4);
        let f = find_peaks(&fcfg, w.frame, w.flags, w.scratch, w.find, &mut peaks);
        mark(5);
        f
    });
    if found.is_err() {
        return debug::EXIT_FAILURE;
    }
    let parts = find_parts(&fcfg, w.frame, w.flags, w.scratch, &peaks);
    // Calibrate mode, the stages marked from lib's callback: 18 → 19 calibrate (identification and
    // the map fit), 19 → 20 match (grouping, assignment, isotope shares, the report's lines), 20 → 21
    // judge.
    let (checked, stack_calibrate) = stack_of(|| {
        mark(6);
        let c =
            calibrate.check_traced(signal, None, None, buffers.workspace(PIXELS), report, |s| {
                match s {
                    Stage::PeaksFound => mark(18),
                    Stage::Calibrated => mark(19),
                    Stage::Matched => mark(20),
                    Stage::Judged => mark(21),
                    _ => {}
                }
            });
        mark(7);
        c
    });
    let lines_calibrate = report.lines.len();
    // Verify mode with marks 16 → 17 around judging (lib reports its stages to the closure).
    let (checked_verify, stack_verify) =
        stack_of(|| {
            mark(8);
            let c =
                verify.check_traced(signal, None, None, buffers.workspace(PIXELS), report, |s| {
                    match s {
                        Stage::Matched => mark(16),
                        Stage::Judged => mark(17),
                        _ => {}
                    }
                });
            mark(9);
            c
        });
    if checked.is_err() || checked_verify.is_err() {
        return debug::EXIT_FAILURE;
    }
    // SAFETY: the only references ever taken to the two statics, in a run without interrupts.
    let (frame, base) = unsafe {
        (
            &mut *addr_of_mut!(FLOAT_FRAME),
            &mut *addr_of_mut!(FLOAT_BASE),
        )
    };
    let mut float_peaks = [FloatPeak::default(); MAX_PEAKS];
    let (n_float, stack_float) = stack_of(|| {
        mark(10);
        let n = condition_find_centroid(
            case.frame,
            cfg.condition.full_scale_counts,
            cfg.condition.integration_us,
            frame,
            base,
            &mut float_peaks,
        );
        mark(11);
        n
    });
    mark(12);
    calibration_loop();
    mark(13);
    mark(14);
    mark(15);
    // The cost of a bare stamp pair, which the adversarial checks are timed with.
    let (_, empty_stamp_0) = stamp();
    let (_, empty_stamp_1) = stamp();
    let Ok(mut out) = hio::hstdout() else {
        return debug::EXIT_FAILURE;
    };
    // The profile build keeps stdout for the samples.
    #[cfg(feature = "profile")]
    let Ok(mut adv_out) = hio::hstderr() else {
        return debug::EXIT_FAILURE;
    };
    #[cfg(not(feature = "profile"))]
    let adv_out = &mut out;
    #[cfg(feature = "profile")]
    let adv_out = &mut adv_out;
    if adversaries(adv_out, report).is_err() {
        return debug::EXIT_FAILURE;
    }
    for (name, t) in parts.iter() {
        if writeln!(adv_out, "part {name} {}", t.with(report)).is_err() {
            return debug::EXIT_FAILURE;
        }
    }
    // The profile build writes the samples to stdout and this text to stderr.
    #[cfg(feature = "profile")]
    let Ok(mut out) = ({
        dump_samples(&mut out);
        hio::hstderr()
    }) else {
        return debug::EXIT_FAILURE;
    };
    let printed = writeln!(
        out,
        "ticks calibration {} loop_instructions {} predict {} condition {} find {} check_calibrate {} check_verify {} float_baseline {} empty {} judge {} stage_calibrate {} stage_match {} stage_judge {}\n\
         hits calibration {} {} predict {} {} condition {} {} find {} {} check_calibrate {} {} check_verify {} {} float_baseline {} {} empty {} {} judge {} {} stage_calibrate {} {} stage_match {} {} stage_judge {} {} empty_stamp {empty_stamp_0} {empty_stamp_1} total {} calibration_wraps {}\n\
         stack_bytes predict {stack_new} condition {stack_condition} find {stack_find} check_calibrate {stack_calibrate} check_verify {stack_verify} float_baseline {stack_float}\n\
         counts peaks {} lines_calibrate {lines_calibrate} lines_verify {} float_peaks {n_float}",
        ticks(12, 13),
        2 * CALIBRATION_LOOPS,
        ticks(0, 1),
        ticks(2, 3),
        ticks(4, 5),
        ticks(6, 7),
        ticks(8, 9),
        ticks(10, 11),
        ticks(14, 15),
        ticks(16, 17),
        ticks(18, 19),
        ticks(19, 20),
        ticks(20, 21),
        hit_of(12),
        hit_of(13),
        hit_of(0),
        hit_of(1),
        hit_of(2),
        hit_of(3),
        hit_of(4),
        hit_of(5),
        hit_of(6),
        hit_of(7),
        hit_of(8),
        hit_of(9),
        hit_of(10),
        hit_of(11),
        hit_of(14),
        hit_of(15),
        hit_of(16),
        hit_of(17),
        hit_of(18),
        hit_of(19),
        hit_of(19),
        hit_of(20),
        hit_of(20),
        hit_of(21),
        HITS.load(Ordering::Relaxed),
        wraps(12, 13),
        peaks.len(),
        report.lines.len()
    );
    if printed.is_ok() {
        debug::EXIT_SUCCESS
    } else {
        debug::EXIT_FAILURE
    }
}

/// Frame, dark and gain of the adversarial checks, and their buffers (room for 4096 px).
static mut ADV_FRAME: [u16; MAX_ADVERSARY_PIXELS] = [0; MAX_ADVERSARY_PIXELS];
/// See [`ADV_FRAME`].
static mut ADV_DARK: [u16; MAX_ADVERSARY_PIXELS] = [0; MAX_ADVERSARY_PIXELS];
/// See [`ADV_FRAME`].
static mut ADV_GAIN: [u16; MAX_ADVERSARY_PIXELS] = [GAIN_MAX_Q14; MAX_ADVERSARY_PIXELS];
/// See [`ADV_FRAME`].
static mut ADV_BUFFERS: Buffers<MAX_ADVERSARY_PIXELS> = Buffers::new();

/// The three modes, in print order.
const MODES: [Mode; 3] = [Mode::Verify, Mode::Calibrate, Mode::CalibrateBlind];

/// Times `Checker::check` on the typical frame and on every [`Adversary`] in each mode and prints one
/// line per check: `adversary NAME MODE pixels N ticks T hits A B result VERDICT|error` (`typical
/// h-tube …` for the reference; A and B are the marker hits before and after the check). The checker of each mode and frame length is built once, outside the timing.
/// In the profile build each check's samples carry stage 16 + 3 × adversary + mode (the typical
/// frame is adversary 15).
fn adversaries(out: &mut hio::HostStream, report: &mut Report) -> Result<(), ()> {
    // SAFETY: the only references ever taken to these statics, in a run without interrupts.
    let (frame, dark, gain, buffers) = unsafe {
        (
            &mut *addr_of_mut!(ADV_FRAME),
            &mut *addr_of_mut!(ADV_DARK),
            &*addr_of!(ADV_GAIN),
            &mut *addr_of_mut!(ADV_BUFFERS),
        )
    };
    for mode in MODES {
        // Building the checkers is not part of any adversarial check's samples.
        #[cfg(feature = "profile")]
        STAGE.store(15, Ordering::Relaxed);
        let build = |pixels: usize| {
            config_for(pixels as u16, HYDROGEN, mode)
                .ok()
                .and_then(|c| Checker::new(c).ok())
        };
        let (Some(typical), Some(long), Some(short)) =
            (build(PIXELS), build(MAX_ADVERSARY_PIXELS), build(16))
        else {
            return Err(());
        };
        let signal = FrameSum::single(&H_TUBE).map_err(|_| ())?;
        #[cfg(feature = "profile")]
        STAGE.store(
            16 + 3 * ADVERSARIES.len() as u32 + mode as u32,
            Ordering::Relaxed,
        );
        let line = timed(|| typical.check(signal, None, None, buffers.workspace(PIXELS), report));
        writeln!(
            out,
            "typical h-tube {} pixels {PIXELS} {}",
            mode_name(mode),
            line.with(report)
        )
        .map_err(|_| ())?;
        // The other typical frames of a hydrogen check, the embedded cases of the digest: the tube
        // with an air leak (foreign bands to explain) and a deuterium lamp put in front of it (the
        // wrong isotope to recognise). The bound is 2 × the costliest of the three.
        for (name, frame) in [("air-leak", &AIR_LEAK), ("d-lamp", &D_LAMP)] {
            let sum = FrameSum::single(frame).map_err(|_| ())?;
            let line = timed(|| typical.check(sum, None, None, buffers.workspace(PIXELS), report));
            writeln!(
                out,
                "typical {name} {} pixels {PIXELS} {}",
                mode_name(mode),
                line.with(report)
            )
            .map_err(|_| ())?;
        }
        for (k, a) in ADVERSARIES.iter().copied().enumerate() {
            let n = a.fill(frame);
            let extras = a.extras();
            let checker = match n {
                MAX_ADVERSARY_PIXELS => &long,
                16 => &short,
                _ => &typical,
            };
            let dark_sum = match extras.dark {
                Some(v) => {
                    dark.iter_mut().take(n).for_each(|d| *d = v);
                    Some(FrameSum::single(dark.get(..n).unwrap_or(&[])).map_err(|_| ())?)
                }
                None => None,
            };
            let gain_table = if extras.max_gain {
                Some(GainTable::new(gain.get(..n).unwrap_or(&[])).map_err(|_| ())?)
            } else {
                None
            };
            let signal = FrameSum::single(frame.get(..n).unwrap_or(&[])).map_err(|_| ())?;
            #[cfg(feature = "profile")]
            STAGE.store(16 + 3 * k as u32 + mode as u32, Ordering::Relaxed);
            #[cfg(not(feature = "profile"))]
            let _ = k;
            let line =
                timed(|| checker.check(signal, dark_sum, gain_table, buffers.workspace(n), report));
            writeln!(
                out,
                "adversary {} {} pixels {n} {}",
                a.name(),
                mode_name(mode),
                line.with(report)
            )
            .map_err(|_| ())?;
        }
    }
    Ok(())
}

/// The profile build samples `find_parts`' piece `k` as stage 80 + k.
fn part_stage(k: u32) {
    #[cfg(feature = "profile")]
    STAGE.store(80 + k, Ordering::Relaxed);
    #[cfg(not(feature = "profile"))]
    let _ = k;
}

/// Ticks and marker hits around one timed check, and whether it gave a report.
struct Timed {
    ticks: u64,
    hits: (u32, u32),
    ok: bool,
    /// Stack bytes used below the caller's stack pointer (the check and two time stamps).
    stack: u32,
}

/// The pieces of `find_peaks` on the same conditioned frame, each timed alone with the look-1 noise
/// model: the noise blocks and their fit, one baseline, one detection (smoothing + candidates), the
/// first fits of the found peaks, and the fit of the strongest one alone.
fn find_parts(
    cfg: &glowcheck::find::FindConfig,
    frame: &[i32],
    flags: &[u8],
    scratch: &mut [i32],
    peaks: &PeakList,
) -> [(&'static str, Timed); 9] {
    use glowcheck::find::{baseline, detect, fit, mask::LineMask, noise};
    let shot = cfg.shot_var_per_unit_q16;
    let mut nm = noise::fallback(shot);
    part_stage(0);
    let t_noise = timed(|| {
        nm = noise::NoiseBlocks::measure(frame, flags, &LineMask::new())
            .model(shot)
            .ok_or(())?;
        Ok::<(), ()>(())
    });
    let (base, rest) = scratch.split_at_mut(frame.len());
    let tmp = rest.get_mut(..frame.len()).unwrap_or(&mut []);
    let half = 2 * usize::from(cfg.fwhm_max_px_q8.div_ceil(256));
    part_stage(1);
    let t_base = timed(|| {
        baseline::estimate_baseline(frame, flags, &nm, half, base, tmp);
        Ok::<(), ()>(())
    });
    let mut cands = heapless::Vec::new();
    part_stage(2);
    let t_detect = timed(|| {
        detect::smooth_residual(frame, base, tmp);
        detect::find_candidates(tmp, base, &nm, cfg, 2 * half, &mut cands);
        Ok::<(), ()>(())
    });
    let data = fit::FitData {
        frame,
        base,
        flag: flags,
        noise: &nm,
        neighbours: [None, None],
    };
    let s_min = 1 << 15;
    let s_max = 8 << 16;
    let start = |p: &glowcheck::find::Peak| {
        let pos = (p.center_px_q16.max(0) as usize + (1 << 15)) >> 16;
        (pos, (i64::from(p.fwhm_px_q16) << 16) / 154_325)
    };
    // The fits run on one scratch, as find_peaks runs them.
    let mut fs = fit::FitScratch::new();
    part_stage(3);
    let t_fits = timed(|| {
        for p in peaks.iter() {
            let (pos, s0) = start(p);
            let f = fit::fit_line_in(&data, pos, s0, s_min, s_max, fit::ITERATIONS, &mut fs);
            core::hint::black_box(f);
        }
        Ok::<(), ()>(())
    });
    let strongest = peaks.iter().max_by_key(|p| p.height).copied();
    part_stage(4);
    let t_one = timed(|| {
        let p = strongest.ok_or(())?;
        let (pos, s0) = start(&p);
        let f = fit::fit_line_in(&data, pos, s0, s_min, s_max, fit::ITERATIONS, &mut fs);
        core::hint::black_box(f);
        Ok::<(), ()>(())
    });
    // The same fit allowed no Gauss–Newton step, then one: what a fit costs besides its steps, and
    // what its first step (the one with the weight pass) costs.
    let mut fit_steps = |steps: usize| {
        timed(|| {
            let p = strongest.ok_or(())?;
            let (pos, s0) = start(&p);
            core::hint::black_box(fit::fit_line_in(
                &data, pos, s0, s_min, s_max, steps, &mut fs,
            ));
            Ok::<(), ()>(())
        })
    };
    part_stage(7);
    let t_zero = fit_steps(0);
    part_stage(8);
    let t_first = fit_steps(1);
    let mut acc = 0u64;
    part_stage(5);
    let t_div32 = timed(|| {
        for k in 1..=100u32 {
            acc = acc.wrapping_add(u64::from(
                core::hint::black_box(0x9e37_79b9u32.wrapping_mul(k))
                    / core::hint::black_box(k * 40_503 + 7),
            ));
        }
        Ok::<(), ()>(())
    });
    part_stage(6);
    let t_div64 = timed(|| {
        for k in 1..=100u64 {
            acc = acc.wrapping_add(
                core::hint::black_box(0x9e37_79b9_7f4a_7c15u64.wrapping_mul(k) >> 4)
                    / core::hint::black_box(k * 40_503_117 + 7),
            );
        }
        Ok::<(), ()>(())
    });
    core::hint::black_box(acc);
    [
        ("noise", t_noise),
        ("baseline", t_base),
        ("detect", t_detect),
        ("fits", t_fits),
        ("fit_strongest", t_one),
        ("fit_strongest_0_steps", t_zero),
        ("fit_strongest_1_step", t_first),
        ("div32_x100", t_div32),
        ("div64_x100", t_div64),
    ]
}

/// Runs `check` between two stamps.
fn timed<E>(check: impl FnOnce() -> Result<(), E>) -> Timed {
    // The stack is painted before and scanned after, outside the marks: not counted as work.
    repaint();
    let sp = cortex_m::register::msp::read() as usize;
    let (t0, h0) = stamp();
    let ok = check().is_ok();
    let (t1, h1) = stamp();
    Timed {
        ticks: t1.saturating_sub(t0),
        hits: (h0, h1),
        ok,
        stack: sp.saturating_sub(lowest_written()) as u32,
    }
}

impl Timed {
    /// `ticks T hits A B result VERDICT|error`, the tail of a measurement line.
    fn with<'a>(&'a self, report: &'a Report) -> impl core::fmt::Display + 'a {
        struct Tail<'a>(&'a Timed, &'a Report);
        impl core::fmt::Display for Tail<'_> {
            fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
                let t = self.0;
                let result = if t.ok {
                    self.1.verdict.as_str()
                } else {
                    "error"
                };
                write!(
                    f,
                    "ticks {} hits {} {} result {result} stack {}",
                    t.ticks, t.hits.0, t.hits.1, t.stack
                )
            }
        }
        Tail(self, report)
    }
}
