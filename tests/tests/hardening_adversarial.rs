//! Adversarial frames through the whole `Checker::check`, in every mode: each gives a report (or, only for
//! configuration problems, a clear error), never a panic, and the same report twice. The capacities each
//! one hits are asserted where the frame is built to hit them and listed in `tests/malformed/CAPACITIES.md`.
//! Frames are invented for this test; a typical frame (a synthetic deuterium lamp) is the reference.
//!
//! Work is not timed here (the firmware's bound is an on-target instruction count); run with
//! `--nocapture` to see the host time of each frame relative to the typical one, as an indication only.
use glowcheck::calibrate::WavelengthMap;
use glowcheck::check::{Buffers, Checker, Config, StoredMap};
use glowcheck::condition::{ConditionConfig, FrameSum, GainTable, Stack, GAIN_MAX_Q14, MAX_PIXELS};
use glowcheck::find::{FindConfig, MAX_PEAKS};
use glowcheck::judge::{profile, Mode, Reason, Report, Verdict};
use glowcheck::predict::{line, Air, Nucleus};
use std::time::Instant;

const FULL: u16 = 4095;

struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        self.0
    }
}

/// The sensor maps 370 … 720 nm onto its pixels whatever their number.
fn map(pixels: u16) -> WavelengthMap {
    WavelengthMap::new(pixels, 1, [545_000_000, 175_000_000, 0, 0]).unwrap()
}

fn config(pixels: u16, mode: Mode) -> Config {
    let mut condition = ConditionConfig::new(FULL, 10_000);
    // 1/256 e⁻ per count: the largest conversion gain conditioning can be told about.
    condition.electrons_per_count_q8 = 1;
    Config {
        pixels,
        condition,
        find: FindConfig::DEFAULT,
        stored: StoredMap {
            map: map(pixels),
            sigma_fm: 3_000,
        },
        mode,
        degree: 2,
        air: Air::Standard,
        line_fwhm_px_q8: 3 << 8,
        profile: profile::DEUTERIUM,
    }
}

/// A deuterium lamp: Balmer α…η, Gaussian 3 px FWHM, on a 300-count pedestal with seeded noise.
fn lamp(pixels: usize) -> Vec<u16> {
    let m = map(pixels as u16);
    let mut lines = Vec::new();
    for upper in 3..=9u8 {
        let l = line(Nucleus::H2, 2, upper, &Air::Standard).unwrap();
        let p = m.pixel_q16(l.air_fm.unwrap() as i64).unwrap() as f64 / 65_536.0;
        lines.push((p, 3000.0 * (3.0 / upper as f64).powi(3)));
    }
    let mut rng = Rng(0x5eed);
    (0..pixels)
        .map(|i| {
            let x = i as f64;
            let s: f64 = lines
                .iter()
                .map(|&(c, h)| h * (-(x - c) * (x - c) / (2.0 * 1.274 * 1.274)).exp())
                .sum();
            let noise = ((rng.next() >> 54) as f64 - 512.0) / 64.0;
            (300.0 + s + noise).round().clamp(0.0, FULL as f64) as u16
        })
        .collect()
}

/// One adversarial case: a name, the pixel count, the frame, an optional dark, whether to apply the
/// largest gain table.
struct Case {
    name: &'static str,
    frame: Vec<u16>,
    dark: Option<Vec<u16>>,
    max_gain: bool,
}

fn cases() -> Vec<Case> {
    let n = 2048;
    let mut rng = Rng(0xadd5);
    let mut v = Vec::new();
    let c = |name, frame: Vec<u16>| Case {
        name,
        frame,
        dark: None,
        max_gain: false,
    };
    v.push(c("typical deuterium lamp", lamp(n)));
    v.push(Case {
        name: "pure noise at maximum gain",
        frame: (0..n).map(|_| (rng.next() % 4096) as u16).collect(),
        dark: None,
        max_gain: true,
    });
    v.push(c(
        "comb of 1000 single-pixel spikes (4096 px)",
        (0..4096)
            .map(|i| if i % 4 == 1 && i < 4000 { 4000 } else { 200 })
            .collect(),
    ));
    v.push(c(
        "comb of 1024 spikes, every other pixel",
        (0..n)
            .map(|i| if i % 2 == 0 { 3000 } else { 100 })
            .collect(),
    ));
    v.push(c("all saturated", vec![FULL; n]));
    v.push(c("all zero", vec![0; n]));
    v.push(c("16 px", lamp(16)));
    v.push(c("4096 px", lamp(4096)));
    v.push(c(
        "staircase",
        (0..n).map(|i| (i / 128 * 256) as u16).collect(),
    ));
    v.push(c(
        "alternating extremes",
        (0..n).map(|i| if i % 2 == 0 { 0 } else { FULL }).collect(),
    ));
    v.push(c(
        "200 narrow lines (more than the peak list holds)",
        (0..n)
            .map(|i| {
                let d = (i % 10) as f64 - 5.0;
                (300.0 + 2000.0 * (-d * d / 2.0).exp()) as u16
            })
            .collect(),
    ));
    v.push(c(
        "one line at each edge",
        (0..n)
            .map(|i| if i < 2 || i >= n - 2 { 3000 } else { 300 })
            .collect(),
    ));
    v.push(c(
        "a single lit pixel",
        (0..n).map(|i| if i == 1000 { FULL } else { 0 }).collect(),
    ));
    v.push(Case {
        name: "dark brighter than the signal",
        frame: lamp(n),
        dark: Some(vec![FULL - 1; n]),
        max_gain: false,
    });
    v.push(Case {
        name: "saturated dark",
        frame: lamp(n),
        dark: Some(vec![FULL; n]),
        max_gain: true,
    });
    v.push(c(
        "random walk",
        (0..n)
            .scan(2000i64, |s, _| {
                *s = (*s + (rng.next() % 201) as i64 - 100).clamp(0, FULL as i64);
                Some(*s as u16)
            })
            .collect(),
    ));
    v
}

#[test]
fn adversarial_frames_give_reports_never_panics() {
    let mut buf = Box::new(Buffers::<MAX_PIXELS>::new());
    let mut reference_ns = [1u128; 3];
    let mut summary = Vec::new();
    let mut truncated = Vec::new();
    for case in cases() {
        let n = case.frame.len();
        let gain_q14 = vec![GAIN_MAX_Q14; n];
        for mode in [Mode::Verify, Mode::Calibrate, Mode::CalibrateBlind] {
            let checker = Checker::new(config(n as u16, mode))
                .unwrap_or_else(|e| panic!("{}: configuration refused: {e}", case.name));
            let gain = case.max_gain.then(|| GainTable::new(&gain_q14).unwrap());
            let dark = case.dark.as_deref().map(|d| FrameSum::single(d).unwrap());
            let signal = FrameSum::single(&case.frame).unwrap();
            let mut report = Report::new();
            let t0 = Instant::now();
            let r = checker.check(signal, dark, gain, buf.workspace(n), &mut report);
            let ns = t0.elapsed().as_nanos();
            if let Err(e) = r {
                panic!(
                    "{} ({mode:?}): the frame's content caused an error: {e}",
                    case.name
                );
            }
            let mut again = Report::new();
            checker
                .check(signal, dark, gain, buf.workspace(n), &mut again)
                .unwrap();
            assert_eq!(report, again, "{} ({mode:?}): not deterministic", case.name);
            if case.name.starts_with("typical") {
                reference_ns[mode as usize] = ns.max(1);
                assert!(
                    report.scores.lines_matched >= 4,
                    "the typical frame shows its lines: {report:?}"
                );
            }
            if report.truncated {
                assert!(report.reasons.contains(&Reason::PeakListTruncated));
                assert!(usize::from(report.scores.peaks) <= MAX_PEAKS);
                truncated.push(format!(
                    "{} ({mode:?}): {} peaks",
                    case.name, report.scores.peaks
                ));
            }
            // Nothing a garbage frame does may pass a deuterium check.
            if !case.name.starts_with("typical")
                && !case.name.contains("px")
                && !case.name.contains("dark")
            {
                assert_ne!(
                    report.verdict,
                    Verdict::Pass,
                    "{} ({mode:?}) passed: {report:?}",
                    case.name
                );
            }
            summary.push(format!(
                "{:<50} {:<14} {:<12} peaks {:>2} time ×{:.2} of typical reasons {:?}",
                case.name,
                format!("{mode:?}"),
                report.verdict.as_str(),
                report.scores.peaks,
                ns as f64 / reference_ns[mode as usize] as f64,
                report.reasons
            ));
        }
    }
    eprintln!("{}", summary.join("\n"));
    eprintln!("truncated: {truncated:?}");
    assert!(
        truncated.iter().any(|t| t.starts_with("200 narrow lines")),
        "the 200-line frame fills the peak list: {truncated:?}"
    );
}

#[test]
fn co_adding_capacity_is_a_clear_error() {
    // MAX_COADD readouts fit; one more is refused and changes nothing.
    let raw = lamp(64);
    let mut sum = vec![0u32; 64];
    let mut st = Stack::new(&mut sum, FULL).unwrap();
    for _ in 0..glowcheck::condition::MAX_COADD {
        st.add(&raw).unwrap();
    }
    assert_eq!(
        st.add(&raw),
        Err(glowcheck::condition::ConditionError::FrameCount)
    );
    assert_eq!(st.frames(), glowcheck::condition::MAX_COADD);
    // A frame longer than the sensor limit is refused at the door.
    let long = vec![0u16; MAX_PIXELS + 1];
    assert_eq!(
        FrameSum::single(&long).err(),
        Some(glowcheck::condition::ConditionError::TooManyPixels)
    );
    // A frame whose length differs from the configuration is refused by the check.
    let checker = Checker::new(config(2048, Mode::Verify)).unwrap();
    let mut buf = Box::new(Buffers::<MAX_PIXELS>::new());
    let short = lamp(1024);
    let mut report = Report::new();
    assert_eq!(
        checker.check(
            FrameSum::single(&short).unwrap(),
            None,
            None,
            buf.workspace(2048),
            &mut report
        ),
        Err(glowcheck::check::CheckError::WrongPixelCount)
    );
    // Fewer than 16 pixels is a configuration error, not a panic.
    let mut cfg = config(16, Mode::Verify);
    cfg.pixels = 15;
    assert!(Checker::new(cfg).is_err());
}

#[test]
// Was a known bug (Fail with instrument drift) until 308640c; kept as a regression test.
fn a_saturated_dark_never_fails_the_tube() {
    let mut buf = Box::new(Buffers::<MAX_PIXELS>::new());
    let signal = lamp(2048);
    let dark = vec![FULL; 2048];
    let mut bad = Vec::new();
    for mode in [Mode::Verify, Mode::Calibrate, Mode::CalibrateBlind] {
        let checker = Checker::new(config(2048, mode)).unwrap();
        let mut report = Report::new();
        checker
            .check(
                FrameSum::single(&signal).unwrap(),
                Some(FrameSum::single(&dark).unwrap()),
                None,
                buf.workspace(2048),
                &mut report,
            )
            .unwrap();
        if report.verdict == Verdict::Fail {
            bad.push(format!("{mode:?}: {:?}", report.reasons));
        }
    }
    assert!(
        bad.is_empty(),
        "every pixel of the dark is saturated, yet: {bad:?}"
    );
}
