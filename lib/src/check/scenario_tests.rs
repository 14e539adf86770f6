//! End-to-end checks of the pipeline on integer-synthesised frames (seeded, deterministic).
use super::*;
use crate::calibrate::WavelengthMap;
use crate::condition::{ConditionConfig, FrameSum};
use crate::find::math::exp_neg_q16;
use crate::find::FindConfig;
use crate::judge::{profile, Mode, Reason, Report, TubeProfile, Verdict};
use crate::matching::catalogue::kramers_strength;
use crate::predict::{line, Air, Nucleus};
use std::vec::Vec;

const N: usize = 2048;

struct Rng(u64);
impl Rng {
    fn next(&mut self) -> u64 {
        crate::test_rng::step64(&mut self.0)
    }
    /// Approximately normal, σ = `sd` counts (sum of 4 uniforms).
    fn gauss(&mut self, sd: i64) -> i64 {
        let s: i64 = (0..4).map(|_| (self.next() >> 48) as i64).sum::<i64>() - 2 * 65536;
        s * sd * 173 / (100 * 37_837)
    }
}

/// True instrument: 370 … 720 nm over 2048 px with a little curvature.
fn truth() -> WavelengthMap {
    WavelengthMap::new(N as u16, 2, [545_000_000, 175_000_000, -1_200_000, 0]).unwrap()
}

/// Synthesises a frame: the Balmer lines of `mix` (nucleus, share ‰) and extra foreign lines (air fm,
/// height), Gaussian FWHM `fwhm_q8` px, `peak_counts` for Hα, on a 300-count pedestal.
fn frame(
    mix: &[(Nucleus, u32)],
    foreign: &[(i64, i64)],
    fwhm_q8: i64,
    peak_counts: i64,
    seed: u64,
) -> Vec<u16> {
    let t = truth();
    let sigma_q16 = (fwhm_q8 << 24) / 154_325;
    let mut lines: Vec<(i64, i64)> = Vec::new();
    let alpha = kramers_strength(2, 3) as i64;
    for &(nu, share) in mix {
        for upper in 3..=9u8 {
            let l = line(nu, 2, upper, &Air::Standard).unwrap();
            let h = peak_counts * kramers_strength(2, upper) as i64 / alpha * share as i64 / 1000;
            lines.push((l.air_fm.unwrap() as i64, h));
        }
    }
    lines.extend_from_slice(foreign);
    let mut rng = Rng(seed | 1);
    (0..N as i64)
        .map(|i| {
            let mut v = 300i64 + rng.gauss(4);
            for &(w, h) in &lines {
                let c = t.pixel_q16(w).unwrap() as i64;
                let d = (i << 16) - c;
                if d.abs() < 40 << 16 {
                    let x = ((d * d) >> 16) * 32_768 / ((sigma_q16 * sigma_q16) >> 16); // (d/σ)²/2 Q16
                    let g = exp_neg_q16(x);
                    let signal = (h * g) >> 30;
                    v += signal + rng.gauss(isqrt(signal.max(0)));
                }
            }
            v.clamp(0, 4095) as u16
        })
        .collect()
}

fn isqrt(v: i64) -> i64 {
    crate::fixed::isqrt_u128(v as u128) as i64
}

fn config(mode: Mode, profile: TubeProfile, stored: WavelengthMap) -> Config {
    Config {
        pixels: N as u16,
        condition: ConditionConfig::new(4095, 10_000),
        find: FindConfig::DEFAULT,
        stored: StoredMap {
            map: stored,
            sigma_fm: 3_000,
        },
        mode,
        degree: 2,
        air: Air::Standard,
        line_fwhm_px_q8: 3 << 8,
        profile,
    }
}

fn run(cfg: Config, raw: &[u16]) -> Report {
    let checker = Checker::new(cfg).unwrap();
    let mut buf = std::boxed::Box::new(Buffers::<N>::new());
    let mut report = Report::new();
    check_on(&checker, &mut buf, raw, &mut report);
    report
}

/// One frame through `checker` on the given buffers, into `report` (overwritten).
fn check_on(checker: &Checker, buf: &mut Buffers<N>, raw: &[u16], report: &mut Report) {
    checker
        .check(
            FrameSum::single(raw).unwrap(),
            None,
            None,
            buf.workspace(N),
            report,
        )
        .unwrap();
}

#[test]
fn good_deuterium_lamp_passes_on_its_stored_map() {
    let raw = frame(
        &[(Nucleus::H2, 990), (Nucleus::H1, 10)],
        &[],
        3 << 8,
        3000,
        7,
    );
    let r = run(config(Mode::Verify, profile::DEUTERIUM, truth()), &raw);
    std::println!("{:?}\n{:?}\n{:?}", r.verdict, r.reasons, r.shares);
    for l in &r.lines {
        std::println!(
            "{:?} {}->{} err {} fm snr {}",
            l.nucleus,
            l.upper,
            l.lower,
            l.error_fm(),
            l.snr_q8 >> 8
        );
    }
    assert_eq!(r.verdict, Verdict::Pass, "{:?}", r.reasons);
    assert!(r.lines.len() >= 5);
    let d = r.shares.iter().find(|s| s.nucleus == Nucleus::H2).unwrap();
    assert!(d.share_ppm.unwrap() > 930_000, "{d:?}");
}

#[test]
fn hydrogen_tube_fails_the_deuterium_profile() {
    let raw = frame(&[(Nucleus::H1, 1000)], &[], 3 << 8, 3000, 11);
    let r = run(config(Mode::Verify, profile::DEUTERIUM, truth()), &raw);
    std::println!("{:?}\n{:?}\n{:?}", r.verdict, r.reasons, r.shares);
    assert_eq!(r.verdict, Verdict::Fail, "{:?}", r.reasons);
}

#[test]
fn air_leak_shows_as_foreign_light_with_a_hint() {
    let t = truth();
    let _ = t;
    let foreign = [
        (777_194_000i64, 2500i64),
        (391_440_000, 1500),
        (427_810_000, 900),
    ];
    let raw = frame(&[(Nucleus::H1, 1000)], &foreign, 3 << 8, 3000, 5);
    let r = run(config(Mode::Verify, profile::HYDROGEN, truth()), &raw);
    std::println!("{:?}\n{:?}\n{:?}", r.verdict, r.reasons, r.unexplained);
    assert_eq!(r.verdict, Verdict::Fail);
    assert!(r
        .reasons
        .iter()
        .any(|x| matches!(x, Reason::ForeignLight { .. })));
    assert!(r.unexplained.iter().any(|u| u.hint.is_some()));
}

#[test]
fn calibration_from_a_nominal_several_nm_off_reports_the_drift() {
    let raw = frame(
        &[(Nucleus::H1, 1000)],
        &[(546_074_000, 1200), (589_000_000, 800)],
        3 << 8,
        3000,
        3,
    );
    // Stored map 1.2 nm off and 1 % wrong in dispersion.
    let stored =
        WavelengthMap::new(N as u16, 2, [546_200_000, 176_750_000, -1_200_000, 0]).unwrap();
    let r = run(config(Mode::Calibrate, profile::HYDROGEN, stored), &raw);
    std::println!(
        "{:?}\n{:?} drift {:?} rms {:?}",
        r.verdict,
        r.reasons,
        r.drift_fm,
        r.fit_rms_fm
    );
    let map = r.map.unwrap();
    for px in [0, 1024, 2047] {
        let d = map.wavelength_fm(px << 16).unwrap() - truth().wavelength_fm(px << 16).unwrap();
        assert!(d.abs() < 20_000, "px {px}: {d} fm");
    }
    assert!(r.drift_fm.unwrap().abs() > 1_000_000);
    assert!(r
        .reasons
        .iter()
        .any(|x| matches!(x, Reason::InstrumentDrift { .. })));
    assert!(r
        .reasons
        .iter()
        .any(|x| matches!(x, Reason::IsotopeNotDeterminable)));
}

#[test]
fn dark_frame_is_inconclusive() {
    let raw = frame(&[(Nucleus::H1, 1000)], &[], 3 << 8, 0, 9);
    let r = run(config(Mode::Verify, profile::HYDROGEN, truth()), &raw);
    assert_eq!(r.verdict, Verdict::Inconclusive, "{:?}", r.reasons);
}

/// A high-resolution instrument (0.07 nm/px, FWHM 2.5 px) resolves Dα from Hα (2.6 px apart): the
/// D share comes from the two-line fit.
#[test]
fn resolved_alpha_pair_gives_the_deuterium_share() {
    const M: usize = 4096;
    // 400 nm + 0.07 nm/px: normalised around the centre.
    let half = 0.07 * 2047.5;
    let map = WavelengthMap::new(
        M as u16,
        1,
        [(400.0e6 + half * 1e6) as i64, (half * 1e6) as i64, 0, 0],
    )
    .unwrap();
    for (share_d, seed, mode) in [
        (250u32, 3u64, Mode::Verify),
        (500, 5, Mode::Verify),
        (750, 9, Mode::Verify),
        (1000, 4, Mode::Calibrate),
        (1000, 6, Mode::CalibrateBlind),
    ] {
        let sigma_q16: i64 = (640i64 << 24) / 154_325; // FWHM 2.5 px
        let mut lines: std::vec::Vec<(i64, i64)> = std::vec::Vec::new();
        for (nu, share) in [(Nucleus::H1, 1000 - share_d), (Nucleus::H2, share_d)] {
            for upper in 3..=6u8 {
                let l = line(nu, 2, upper, &Air::Standard).unwrap();
                let h = 3000 * kramers_strength(2, upper) as i64 / kramers_strength(2, 3) as i64
                    * share as i64
                    / 1000;
                lines.push((l.air_fm.unwrap() as i64, h));
            }
        }
        let mut rng = Rng(seed);
        let raw: Vec<u16> = (0..M as i64)
            .map(|i| {
                let mut v = 300i64 + rng.gauss(4);
                for &(w, h) in &lines {
                    let c = map.pixel_q16(w).unwrap() as i64;
                    let d = (i << 16) - c;
                    if d.abs() < 40 << 16 {
                        let x = ((d * d) >> 16) * 32_768 / ((sigma_q16 * sigma_q16) >> 16);
                        let s = (h * exp_neg_q16(x)) >> 30;
                        v += s + rng.gauss(isqrt(s.max(0)));
                    }
                }
                v.clamp(0, 4095) as u16
            })
            .collect();
        let mut cfg = config(mode, profile::HYDROGEN_DEUTERIUM, map);
        cfg.pixels = M as u16;
        cfg.line_fwhm_px_q8 = 640;
        let checker = Checker::new(cfg).unwrap();
        let mut buf = std::boxed::Box::new(Buffers::<M>::new());
        let mut r = Report::new();
        checker
            .check(
                FrameSum::single(&raw).unwrap(),
                None,
                None,
                buf.workspace(M),
                &mut r,
            )
            .unwrap();
        let d = r.shares.iter().find(|s| s.nucleus == Nucleus::H2).unwrap();
        std::println!("D {share_d}: {:?} {:?}", d, r.reasons);
        if mode != Mode::Verify {
            // One isotope on a map fitted to the tube itself: which one cannot be told.
            assert_eq!(d.share_ppm, None, "{mode:?}: {d:?}");
            assert!(r.reasons.contains(&Reason::IsotopeNotDeterminable));
            continue;
        }
        let got = d.share_ppm.unwrap() as i64 / 1000;
        assert!(
            (got - share_d as i64).abs() <= 30,
            "D {share_d}‰: got {got}‰"
        );
    }
}

/// The report of a traced check in `mode` and the stages it reported, in order.
fn traced(mode: Mode, raw: &[u16]) -> (Report, std::vec::Vec<super::Stage>) {
    let checker = Checker::new(config(mode, profile::HYDROGEN, truth())).unwrap();
    let mut buf = std::boxed::Box::new(Buffers::<N>::new());
    let mut report = Report::new();
    let mut seen = std::vec::Vec::new();
    checker
        .check_traced(
            FrameSum::single(raw).unwrap(),
            None,
            None,
            buf.workspace(N),
            &mut report,
            |s| seen.push(s),
        )
        .unwrap();
    (report, seen)
}

#[test]
fn traced_check_reports_every_stage_in_order_and_the_same_report() {
    use super::Stage;
    let raw = frame(&[(Nucleus::H1, 1000)], &[], 3 << 8, 3000, 11);
    for mode in [Mode::Verify, Mode::Calibrate] {
        let plain = run(config(mode, profile::HYDROGEN, truth()), &raw);
        let (report, seen) = traced(mode, &raw);
        assert_eq!(report, plain, "{mode:?}");
        assert_eq!(
            seen,
            [
                Stage::Conditioned,
                Stage::PeaksFound,
                Stage::Calibrated,
                Stage::Matched,
                Stage::Judged
            ],
            "{mode:?}"
        );
    }
    // A dark frame: no peaks, so the stages after peak finding are not reported.
    let (_, seen) = traced(Mode::Verify, &std::vec![100u16; N]);
    assert_eq!(seen, [Stage::Conditioned, Stage::PeaksFound]);
}

/// A blank checker refuses frames; configured in place it checks exactly as a new one does, and a
/// failed re-configuration leaves it refusing again (never checking against stale lines).
#[test]
fn blank_then_configure_in_place_matches_new() {
    let cfg = config(Mode::Verify, profile::HYDROGEN, truth());
    let raw = frame(&[(Nucleus::H1, 1000)], &[], 3 << 8, 3000, 31);
    let mut checker = Checker::blank(cfg.clone());
    let mut buf = std::boxed::Box::new(Buffers::<N>::new());
    let mut report = Report::new();
    let signal = FrameSum::single(&raw).unwrap();
    assert_eq!(
        checker.check(signal, None, None, buf.workspace(N), &mut report),
        Err(CheckError::NotConfigured)
    );
    checker.configure(cfg.clone()).unwrap();
    checker
        .check(signal, None, None, buf.workspace(N), &mut report)
        .unwrap();
    assert_eq!(report, run(cfg.clone(), &raw));
    assert_eq!(report.verdict, Verdict::Pass, "{:?}", report.reasons);
    assert_eq!(
        checker.catalogue(),
        Checker::new(cfg.clone()).unwrap().catalogue()
    );
    let bad = Config { degree: 0, ..cfg };
    assert_eq!(checker.configure(bad), Err(CheckError::BadConfig));
    assert!(checker.catalogue().is_empty());
    assert_eq!(
        checker.check(signal, None, None, buf.workspace(N), &mut report),
        Err(CheckError::NotConfigured)
    );
}

/// The caller-owned tables carry nothing from one frame to the next: a frame checked after others
/// on the same buffers (in both modes) gives the report it gives on fresh ones.
#[test]
fn reused_buffers_give_the_fresh_report() {
    let h = frame(&[(Nucleus::H1, 1000)], &[], 3 << 8, 3000, 41);
    let d = frame(
        &[(Nucleus::H2, 990), (Nucleus::H1, 10)],
        &[],
        3 << 8,
        3000,
        43,
    );
    for mode in [Mode::Verify, Mode::Calibrate] {
        let cfg = config(mode, profile::HYDROGEN, truth());
        let fresh = run(cfg.clone(), &h);
        let checker = Checker::new(cfg).unwrap();
        let mut buf = std::boxed::Box::new(Buffers::<N>::new());
        let mut report = Report::new();
        for raw in [&d, &h, &d, &h] {
            check_on(&checker, &mut buf, raw, &mut report);
        }
        assert_eq!(report, fresh, "{mode:?}");
    }
}

/// Verify mode's grouping on the stored map, made once in `configure`, gives every frame the report
/// the frame's own grouping gives: hydrogen, deuterium and a frame with foreign lines, each profile.
#[test]
fn verify_grouping_made_once_gives_the_per_frame_report() {
    let frames = [
        frame(&[(Nucleus::H1, 1000)], &[], 3 << 8, 3000, 51),
        frame(
            &[(Nucleus::H2, 990), (Nucleus::H1, 10)],
            &[],
            3 << 8,
            3000,
            52,
        ),
        frame(
            &[(Nucleus::H1, 1000)],
            &[(587_562_000, 1500), (501_568_000, 900)],
            3 << 8,
            3000,
            53,
        ),
    ];
    for prof in [profile::HYDROGEN, profile::DEUTERIUM] {
        let cfg = config(Mode::Verify, prof, truth());
        let once = Checker::new(cfg.clone()).unwrap();
        let mut each = Checker::new(cfg).unwrap();
        assert!(each.forget_placement());
        let mut buf = std::boxed::Box::new(Buffers::<N>::new());
        for raw in &frames {
            let (mut a, mut b) = (Report::new(), Report::new());
            check_on(&once, &mut buf, raw, &mut a);
            check_on(&each, &mut buf, raw, &mut b);
            assert_eq!(a, b);
            assert!(!a.lines.is_empty());
        }
    }
}

/// Calibrate mode's line pixels moved from the stored ones ([`LineShift`](super::line_shift)) give
/// the report that inverting the fitted map for every line gives: stored maps a few nm and a few
/// tenths of a percent to 2 % off, hydrogen and deuterium, with and without foreign lines.
#[test]
fn calibrate_line_shift_gives_the_inverted_lines_report() {
    let frames = [
        frame(&[(Nucleus::H1, 1000)], &[], 3 << 8, 3000, 61),
        frame(&[(Nucleus::H2, 1000)], &[], 3 << 8, 3000, 62),
        frame(
            &[(Nucleus::H1, 1000)],
            &[(587_562_000, 1500), (501_568_000, 900)],
            3 << 8,
            3000,
            63,
        ),
    ];
    let stored_maps = [
        WavelengthMap::new(N as u16, 2, [551_000_000, 178_500_000, -1_200_000, 0]).unwrap(),
        WavelengthMap::new(N as u16, 2, [541_000_000, 174_000_000, -1_150_000, 0]).unwrap(),
    ];
    let mut shifted = 0;
    for stored in stored_maps {
        for prof in [profile::HYDROGEN, profile::DEUTERIUM] {
            let cfg = config(Mode::Calibrate, prof, stored);
            let fast = Checker::new(cfg.clone()).unwrap();
            let mut slow = Checker::new(cfg).unwrap();
            if slow.forget_line_shift() {
                shifted += 1;
            }
            let mut buf = std::boxed::Box::new(Buffers::<N>::new());
            for raw in &frames {
                let (mut a, mut b) = (Report::new(), Report::new());
                check_on(&fast, &mut buf, raw, &mut a);
                check_on(&slow, &mut buf, raw, &mut b);
                assert_eq!(a, b);
                // The fast path was taken: the fitted map passes the centre check.
                let fitted = a.map.unwrap();
                assert!(fast.line_shift().node_shifts(&fitted).is_some());
                assert_ne!(fitted, stored);
            }
        }
    }
    assert_eq!(shifted, 4);
}
