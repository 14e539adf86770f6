//! Invariants of conditioning, peak finding, the whole check and prediction, over seeded random
//! inputs (plain seeded loops: deterministic, no extra dependency). Frames are synthetic (invented
//! Gaussian lines on a pedestal with seeded noise), for these tests only.
use glowcheck::calibrate::WavelengthMap;
use glowcheck::check::{Buffers, Checker, Config, StoredMap};
use glowcheck::condition::{condition_frame, ConditionConfig, FrameSum, Stack};
use glowcheck::find::{find_peaks, FindConfig, FindWork, PeakList, SCRATCH_PER_PIXEL};
use glowcheck::judge::{profile, Mode, Report};
use glowcheck::predict::{line, Air, Nucleus};

/// xorshift64: seeded, the same sequence everywhere.
struct Rng(u64);
impl Rng {
    fn new(seed: u64) -> Self {
        Rng(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1)
    }
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        self.0
    }
    fn below(&mut self, n: u64) -> u64 {
        self.next() % n
    }
    fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Standard normal (Box–Muller).
    fn gauss(&mut self) -> f64 {
        let u = self.unit().max(1e-300);
        let v = self.unit();
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}

/// Counts of Gaussian lines (centre px, height counts, FWHM px) on a pedestal, with seeded noise of
/// `noise` counts σ plus shot noise of one count per count; pixel i is sampled at its centre.
fn synth(
    n: usize,
    lines: &[(f64, f64, f64)],
    pedestal: f64,
    noise: f64,
    rng: &mut Rng,
) -> Vec<f64> {
    (0..n)
        .map(|i| {
            let x = i as f64;
            let s: f64 = lines
                .iter()
                .map(|&(c, h, w)| {
                    let sd = w / 2.354_820_045;
                    h * (-(x - c) * (x - c) / (2.0 * sd * sd)).exp()
                })
                .sum();
            let level = pedestal + s;
            level + rng.gauss() * (noise * noise + level).sqrt()
        })
        .collect()
}

fn to_u16(v: &[f64]) -> Vec<u16> {
    v.iter()
        .map(|&x| x.round().clamp(0.0, 65_534.0) as u16)
        .collect()
}

/// Conditions a raw readout (16-bit ADC, no dark) and finds its peaks.
fn peaks(raw: &[u16]) -> PeakList {
    let n = raw.len();
    let cfg = ConditionConfig::new(u16::MAX, 1000);
    let mut frame = vec![0i32; n];
    let mut flags = vec![0u8; n];
    condition_frame(
        &cfg,
        FrameSum::single(raw).unwrap(),
        None,
        None,
        &mut frame,
        &mut flags,
    )
    .unwrap();
    let mut scratch = vec![0i32; SCRATCH_PER_PIXEL * n];
    let mut out = PeakList::new();
    find_peaks(
        &FindConfig::DEFAULT,
        &frame,
        &flags,
        &mut scratch,
        &mut FindWork::new(),
        &mut out,
    )
    .unwrap();
    out
}

const Q16: f64 = 65_536.0;

/// Random well-separated lines inside [lo, hi) px: (centre, height, FWHM).
fn random_lines(rng: &mut Rng, lo: f64, hi: f64, count: usize) -> Vec<(f64, f64, f64)> {
    let mut out: Vec<(f64, f64, f64)> = Vec::new();
    while out.len() < count {
        let c = lo + rng.unit() * (hi - lo);
        if out.iter().all(|l| (l.0 - c).abs() > 40.0) {
            let h = 400.0 + rng.unit() * 4000.0;
            let w = 2.5 + rng.unit() * 3.0;
            out.push((c, h, w));
        }
    }
    out
}

#[test]
fn shifting_a_frame_by_k_pixels_shifts_every_centroid_by_k() {
    const N: usize = 1024;
    const K: usize = 64;
    let mut worst_sigmas: f64 = 0.0;
    let mut compared = 0;
    for seed in 0..12u64 {
        let mut rng = Rng::new(seed);
        // One long scene, noise included; the two frames are windows of it k pixels apart.
        let lines = random_lines(&mut rng, 2.0 * K as f64 + 40.0, (N - 40) as f64, 5);
        let long = to_u16(&synth(N + 2 * K, &lines, 500.0, 3.0, &mut rng));
        let k = 1 + rng.below(K as u64 - 1) as usize;
        let a = peaks(&long[K..K + N]);
        let b = peaks(&long[K - k..K - k + N]);
        for pa in a.iter().filter(|p| p.snr_q8 > 20 * 256) {
            let ca = pa.center_px_q16 as f64 / Q16;
            if ca < 40.0 || ca > (N - 40 - k) as f64 {
                continue; // near an edge of either window
            }
            let pb = b
                .iter()
                .min_by_key(|p| {
                    (p.center_px_q16 as i64 - pa.center_px_q16 as i64 - (k as i64) * 65_536).abs()
                })
                .unwrap_or_else(|| panic!("seed {seed}: shifted frame lost the peak at {ca}"));
            let shift = (pb.center_px_q16 - pa.center_px_q16) as f64 / Q16;
            let sigma = pa.center_sigma_px_q16 as f64 / Q16;
            let err = (shift - k as f64).abs();
            worst_sigmas = worst_sigmas.max(err / sigma);
            // The fit sees the same pixels; only the 64-px noise blocks fall differently, which moves
            // the weights a little: a quarter σ is far more than seen (0.014 σ) yet far below a pixel.
            assert!(
                err <= sigma / 4.0,
                "seed {seed}: peak at {ca:.3} px moved {shift:.4} px for a {k} px shift (σ {sigma:.4})"
            );
            compared += 1;
        }
    }
    assert!(compared >= 40, "only {compared} peaks compared");
    eprintln!("shift: {compared} peaks, worst |Δ − k| = {worst_sigmas:.3} σ");
}

#[test]
fn scaling_counts_leaves_positions_unchanged() {
    const N: usize = 2048;
    let mut compared = 0;
    for seed in 100..110u64 {
        let mut rng = Rng::new(seed);
        let lines = random_lines(&mut rng, 60.0, (N - 60) as f64, 6);
        let base = synth(N, &lines, 300.0, 4.0, &mut rng);
        let a = peaks(&to_u16(&base));
        for scale in [2.0, 3.0, 7.5] {
            let b = peaks(&to_u16(&base.iter().map(|x| x * scale).collect::<Vec<_>>()));
            for pa in a.iter().filter(|p| p.snr_q8 > 10 * 256) {
                let pb = b
                    .iter()
                    .min_by_key(|p| (p.center_px_q16 - pa.center_px_q16).abs())
                    .unwrap();
                let d = (pb.center_px_q16 - pa.center_px_q16).abs() as f64 / Q16;
                let sigma = pa.center_sigma_px_q16 as f64 / Q16;
                assert!(
                    d <= sigma,
                    "seed {seed} ×{scale}: peak at {:.3} px moved {d:.4} px (σ {sigma:.4})",
                    pa.center_px_q16 as f64 / Q16
                );
                compared += 1;
            }
        }
    }
    assert!(compared >= 100, "only {compared} peaks compared");
}

fn condition(
    cfg: &ConditionConfig,
    s: FrameSum<'_>,
    d: Option<FrameSum<'_>>,
) -> (Vec<i32>, Vec<u8>) {
    let n = s.len();
    let mut out = vec![0i32; n];
    let mut flags = vec![0u8; n];
    condition_frame(cfg, s, d, None, &mut out, &mut flags).unwrap();
    (out, flags)
}

#[test]
fn adding_then_subtracting_a_dark_frame_is_the_identity() {
    for seed in 200..260u64 {
        let mut rng = Rng::new(seed);
        let n = 16 + rng.below(4081) as usize;
        let full = 1024 + rng.below(64_000) as u16;
        let cfg = ConditionConfig::new(full, 1 + rng.below(1_000_000) as u32);
        let half = u64::from(full / 2);
        let signal: Vec<u16> = (0..n).map(|_| rng.below(half) as u16).collect();
        let dark: Vec<u16> = (0..n).map(|_| rng.below(half) as u16).collect();
        let both: Vec<u16> = signal.iter().zip(&dark).map(|(s, d)| s + d).collect();
        let plain = condition(&cfg, FrameSum::single(&signal).unwrap(), None);
        let subtracted = condition(
            &cfg,
            FrameSum::single(&both).unwrap(),
            Some(FrameSum::single(&dark).unwrap()),
        );
        assert_eq!(plain, subtracted, "seed {seed}: single readouts");

        // Co-added: m readouts of signal + dark against m' readouts of the dark alone.
        let m = 1 + rng.below(8) as usize;
        let m_dark = 1 + rng.below(8) as usize;
        let reads: Vec<Vec<u16>> = (0..m)
            .map(|_| (0..n).map(|_| rng.below(half) as u16).collect())
            .collect();
        let (mut sum_s, mut sum_sd, mut sum_d) = (vec![0u32; n], vec![0u32; n], vec![0u32; n]);
        let mut st_s = Stack::new(&mut sum_s, full).unwrap();
        let mut st_sd = Stack::new(&mut sum_sd, full).unwrap();
        for r in &reads {
            st_s.add(r).unwrap();
            let with_dark: Vec<u16> = r.iter().zip(&dark).map(|(s, d)| s + d).collect();
            st_sd.add(&with_dark).unwrap();
        }
        let mut st_d = Stack::new(&mut sum_d, full).unwrap();
        for _ in 0..m_dark {
            st_d.add(&dark).unwrap();
        }
        let plain = condition(&cfg, st_s.view().unwrap(), None);
        let subtracted = condition(&cfg, st_sd.view().unwrap(), Some(st_d.view().unwrap()));
        assert_eq!(
            plain, subtracted,
            "seed {seed}: {m} readouts, {m_dark} darks"
        );
    }
}

/// True instrument of the end-to-end frames: about 370 … 720 nm over 2048 px.
fn truth() -> WavelengthMap {
    WavelengthMap::new(2048, 2, [545_000_000, 175_000_000, -1_200_000, 0]).unwrap()
}

/// A deuterium lamp frame (Balmer α…η of D with 1 % H, heights falling with the upper level) in counts,
/// a 12-bit ADC, seeded noise.
fn lamp(rng: &mut Rng) -> Vec<f64> {
    let map = truth();
    let mut lines = Vec::new();
    for (nucleus, share) in [(Nucleus::H2, 0.99), (Nucleus::H1, 0.01)] {
        for upper in 3..=9u8 {
            let l = line(nucleus, 2, upper, &Air::Standard).unwrap();
            let p = map.pixel_q16(l.air_fm.unwrap() as i64).unwrap() as f64 / Q16;
            let h = 3000.0 * share * (3.0 / upper as f64).powi(3);
            lines.push((p, h, 3.0));
        }
    }
    synth(2048, &lines, 300.0, 4.0, rng)
}

fn config(mode: Mode) -> Config {
    Config {
        pixels: 2048,
        condition: ConditionConfig::new(4095, 10_000),
        find: FindConfig::DEFAULT,
        stored: StoredMap {
            map: truth(),
            sigma_fm: 3_000,
        },
        mode,
        degree: 2,
        air: Air::Standard,
        line_fwhm_px_q8: 3 << 8,
        profile: profile::DEUTERIUM,
    }
}

#[test]
fn order_of_co_added_frames_does_not_matter() {
    let mut buf = Box::new(Buffers::<2048>::new());
    for (seed, mode) in [
        (300u64, Mode::Verify),
        (301, Mode::Calibrate),
        (302, Mode::Verify),
    ] {
        let checker = Checker::new(config(mode)).unwrap();
        let mut rng = Rng::new(seed);
        // Readouts of one lamp, a few touching full scale so the saturation mark is exercised too.
        let mut reads: Vec<Vec<u16>> = (0..6)
            .map(|_| {
                lamp(&mut rng)
                    .iter()
                    .map(|&x| x.round().clamp(0.0, 4095.0) as u16)
                    .collect()
            })
            .collect();
        reads[2][700] = 4095;
        let report_of = |order: &[usize], buf: &mut Buffers<2048>| {
            let mut sum = vec![0u32; 2048];
            let mut st = Stack::new(&mut sum, 4095).unwrap();
            for &i in order {
                st.add(&reads[i]).unwrap();
            }
            let mut r = Report::new();
            checker
                .check(st.view().unwrap(), None, None, buf.workspace(2048), &mut r)
                .unwrap();
            (sum.clone(), r)
        };
        let (sum0, r0) = report_of(&[0, 1, 2, 3, 4, 5], &mut buf);
        for _ in 0..4 {
            let mut order: Vec<usize> = (0..6).collect();
            for i in (1..order.len()).rev() {
                order.swap(i, rng.below(i as u64 + 1) as usize);
            }
            let (sum, r) = report_of(&order, &mut buf);
            assert_eq!(sum, sum0, "seed {seed}: sums differ for order {order:?}");
            assert_eq!(r, r0, "seed {seed}: reports differ for order {order:?}");
        }
        assert!(r0.scores.peaks > 0, "seed {seed}: the lamp shows lines");
    }
}

/// h·c/e in eV·m: exact from the SI defining constants (CODATA 2018/2022: h = 6.626 070 15e-34 J s,
/// c = 299 792 458 m/s, e = 1.602 176 634e-19 C).
const HC_EV_M: f64 = 6.626_070_15e-34 * 299_792_458.0 / 1.602_176_634e-19;

#[test]
fn energy_wavenumber_and_wavelength_agree_for_every_nucleus() {
    for nucleus in Nucleus::ALL {
        for lower in 1..=6u8 {
            for upper in lower + 1..=40u8 {
                let l = line(nucleus, lower, upper, &Air::Standard).unwrap();
                let lambda_m = l.vacuum_fm as f64 * 1e-15;
                // E λ = h c; σ λ = 1; each stored value is rounded to its last unit.
                let e_ev = l.energy_nev as f64 * 1e-9;
                let tol = 1.0 / l.vacuum_fm as f64 + 1.0 / l.energy_nev as f64 + 2e-9;
                let rel = (e_ev * lambda_m / HC_EV_M - 1.0).abs();
                assert!(
                    rel < tol,
                    "{nucleus:?} {lower}-{upper}: E·λ/hc − 1 = {rel:e}"
                );
                let sigma_per_m = l.wavenumber_nk as f64 * 1e-9 * 100.0;
                let rel = (sigma_per_m * lambda_m - 1.0).abs();
                assert!(rel < tol, "{nucleus:?} {lower}-{upper}: σ·λ − 1 = {rel:e}");
            }
        }
    }
}

#[test]
fn air_refraction_is_one_function_of_wavelength_across_nuclei() {
    // Every air value of every nucleus, sorted by vacuum wavelength: n − 1 (from vacuum/air) must fall
    // as the wavelength rises (normal dispersion of air in 200 nm … 2 µm), whichever nucleus the line
    // is from, and stay in 2.7e-4 … 3.3e-4 (standard air, Edlén-type formulas: about 3.24e-4 at 200 nm, 2.73e-4 at 2 µm; from memory).
    let mut pts: Vec<(u64, f64, Nucleus)> = Vec::new();
    for nucleus in Nucleus::ALL {
        for lower in 1..=8u8 {
            for upper in lower + 1..=40u8 {
                let l = line(nucleus, lower, upper, &Air::Standard).unwrap();
                if let Some(a) = l.air_fm {
                    if (200_000_000..=2_000_000_000).contains(&l.vacuum_fm) {
                        pts.push((l.vacuum_fm, l.vacuum_fm as f64 / a as f64 - 1.0, nucleus));
                    }
                }
            }
        }
    }
    pts.sort_by_key(|p| p.0);
    assert!(pts.len() > 500, "{} points", pts.len());
    for w in pts.windows(2) {
        let ((l0, n0, a), (l1, n1, b)) = (w[0], w[1]);
        assert!(
            (2.7e-4..3.3e-4).contains(&n0),
            "{a:?} {l0} fm: n − 1 = {n0:e}"
        );
        // 1 fm rounding of the air value is 1e-15 / 0.2e-6 ≈ 5e-9 relative at worst.
        assert!(
            n1 <= n0 + 1e-8,
            "{a:?} {l0} fm (n−1 {n0:e}) then {b:?} {l1} fm (n−1 {n1:e}): dispersion not normal"
        );
    }
}
