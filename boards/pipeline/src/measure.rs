//! Instruction-count build: each stage of one check runs between two marker functions, so a QEMU
//! run that logs every executed instruction (`boards/measure.sh`: `-singlestep -d exec,nochain`)
//! counts the instructions between entering one marker and entering the next, exactly and
//! deterministically.
//!
//! Marker pairs (count from entering the first to entering the second): 0 → 1 `Checker::new` (line
//! prediction, once per configuration), 2 → 3 `condition_frame`, 4 → 5 `find_peaks`, 6 → 7
//! `Checker::check` in calibrate mode (the whole pipeline again, conditioning and peak finding
//! included), 8 → 9 `Checker::check` in verify mode (no map fit), 10 → 11 the f32 baseline of
//! conditioning, peak finding and centroiding. The frame is the hydrogen tube (`h-tube`).
//!
//! Stack: before each measured call the free stack is painted again and afterwards scanned, so
//! each call's depth below its caller's stack pointer is printed on its own.
use core::fmt::Write;
use core::ptr::{self, addr_of, addr_of_mut};
use core::sync::atomic::{compiler_fence, Ordering};

use cortex_m_semihosting::{debug, hio};
use glowcheck::check::Buffers;
use glowcheck::condition::{condition_frame, FrameSum};
use glowcheck::find::{find_peaks, PeakList};
use glowcheck::judge::{Mode, Report};
use glowcheck_float_baseline::{condition_find_centroid, FloatPeak, MAX_PEAKS};
use glowcheck_pipeline_report::traces::PIXELS;
use glowcheck_pipeline_report::{check, checker, Case, CASES};

macro_rules! markers {
    ($($name:ident = $k:expr;)*) => {$(
        /// A marker: `boards/measure.sh` finds its address by name and counts from its first
        /// instruction. Distinct bodies keep the linker from folding markers together.
        #[no_mangle]
        #[inline(never)]
        pub extern "C" fn $name() {
            compiler_fence(Ordering::SeqCst);
            core::hint::black_box($k as u32);
            compiler_fence(Ordering::SeqCst);
        }
    )*};
}

markers! {
    glowcheck_mark_0 = 0;
    glowcheck_mark_1 = 1;
    glowcheck_mark_2 = 2;
    glowcheck_mark_3 = 3;
    glowcheck_mark_4 = 4;
    glowcheck_mark_5 = 5;
    glowcheck_mark_6 = 6;
    glowcheck_mark_7 = 7;
    glowcheck_mark_8 = 8;
    glowcheck_mark_9 = 9;
    glowcheck_mark_10 = 10;
    glowcheck_mark_11 = 11;
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
pub fn run(buffers: &mut Buffers<PIXELS>, report: &mut Report) -> debug::ExitStatus {
    let case = CASES[0];
    let verify_case = Case {
        mode: Mode::Verify,
        ..case
    };
    let Ok(signal) = FrameSum::single(case.frame) else {
        return debug::EXIT_FAILURE;
    };
    let (verify, _) = stack_of(|| checker(&verify_case));
    let (calibrate, stack_new) = stack_of(|| {
        glowcheck_mark_0();
        let c = checker(&case);
        glowcheck_mark_1();
        c
    });
    let (Ok(verify), Ok(calibrate)) = (verify, calibrate) else {
        return debug::EXIT_FAILURE;
    };
    let cfg = calibrate.config();
    let mut peaks = PeakList::new();
    let w = buffers.workspace(PIXELS);
    let (info, stack_condition) = stack_of(|| {
        glowcheck_mark_2();
        let i = condition_frame(&cfg.condition, signal, None, None, w.frame, w.flags);
        glowcheck_mark_3();
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
        glowcheck_mark_4();
        let f = find_peaks(&fcfg, w.frame, w.flags, w.scratch, &mut peaks);
        glowcheck_mark_5();
        f
    });
    if found.is_err() {
        return debug::EXIT_FAILURE;
    }
    let (checked, stack_calibrate) = stack_of(|| {
        glowcheck_mark_6();
        let c = check(&calibrate, &case, buffers.workspace(PIXELS), report);
        glowcheck_mark_7();
        c
    });
    let lines_calibrate = report.lines.len();
    let (checked_verify, stack_verify) = stack_of(|| {
        glowcheck_mark_8();
        let c = check(&verify, &verify_case, buffers.workspace(PIXELS), report);
        glowcheck_mark_9();
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
        glowcheck_mark_10();
        let n = condition_find_centroid(
            case.frame,
            cfg.condition.full_scale_counts,
            cfg.condition.integration_us,
            frame,
            base,
            &mut float_peaks,
        );
        glowcheck_mark_11();
        n
    });
    let Ok(mut out) = hio::hstdout() else {
        return debug::EXIT_FAILURE;
    };
    let printed = writeln!(
        out,
        "stack new {stack_new} condition {stack_condition} find {stack_find} check_calibrate {stack_calibrate} check_verify {stack_verify} float {stack_float}\n\
         peaks {} lines_calibrate {lines_calibrate} lines_verify {} float_peaks {n_float}",
        peaks.len(),
        report.lines.len()
    );
    if printed.is_ok() {
        debug::EXIT_SUCCESS
    } else {
        debug::EXIT_FAILURE
    }
}
