//! Turns fuzz bytes into a pipeline run: a configuration (sensor, find settings, map, mode, air,
//! profile), a frame (optionally co-added, with a dark) and two checks. Shared by the `pipeline` fuzz
//! target and the stable replay test `tests/tests/hardening_fuzz_replay.rs`.
use glowcheck::calibrate::WavelengthMap;
use glowcheck::check::{Buffers, CheckError, Checker, Config, StoredMap};
use glowcheck::condition::{ConditionConfig, FrameSum, Stack};
use glowcheck::find::FindConfig;
use glowcheck::judge::{profile::BUNDLED, Mode, Report};
use glowcheck::predict::Air;

/// Reads fuzz bytes as little-endian fields; zeros once exhausted.
struct Bytes<'a>(&'a [u8]);
impl Bytes<'_> {
    fn u8(&mut self) -> u8 {
        match self.0.split_first() {
            Some((b, rest)) => {
                self.0 = rest;
                *b
            }
            None => 0,
        }
    }
    fn u16(&mut self) -> u16 {
        u16::from_le_bytes([self.u8(), self.u8()])
    }
    fn i64(&mut self) -> i64 {
        let mut b = [0u8; 8];
        b.iter_mut().for_each(|x| *x = self.u8());
        i64::from_le_bytes(b)
    }
}

/// Decodes `data` into a configuration and frames and checks them; panics on a broken invariant.
pub fn run(data: &[u8], buf: &mut Buffers<4096>) {
    let mut b = Bytes(data);
    let shape = b.u8();
    let pixels = 16 + usize::from(b.u16()) % (4096 - 16 + 1);
    let full_scale = b.u16().max(1);
    let mut cond = ConditionConfig::new(full_scale, 1 + u32::from(b.u16()));
    cond.electrons_per_count_q8 = b.u16();
    for _ in 0..(b.u8() % 4) {
        let _ = cond.bad_pixels.push(b.u16() % (pixels as u16 + 2));
    }
    let mut find = FindConfig::DEFAULT;
    if shape & 0x80 != 0 {
        find.fwhm_min_px_q8 = b.u16() % (17 << 8);
        find.fwhm_max_px_q8 = b.u16() % (17 << 8);
        find.threshold_sigma_q8 = b.u16();
        find.prominence_sigma_q8 = b.u16();
        find.min_separation_px_q8 = b.u16();
        find.blend_fwhm_q8 = b.u16();
    }
    let degree = 1 + b.u8() % 3;
    // A plausible map (about 340-700 nm over the sensor) or arbitrary normalised coefficients.
    let coeff = if shape & 0x40 != 0 {
        [b.i64(), b.i64(), b.i64(), b.i64()]
    } else {
        let c0 = 400_000_000 + i64::from(b.u16()) * 5_000;
        let c1 = 20_000_000 + i64::from(b.u16()) * 3_000;
        [c0, c1, i64::from(b.u8() as i8) * 50_000, 0]
    };
    let Ok(map) = WavelengthMap::new(pixels as u16, degree, coeff) else {
        return;
    };
    let mode = match b.u8() % 3 {
        0 => Mode::Verify,
        1 => Mode::Calibrate,
        _ => Mode::CalibrateBlind,
    };
    let air = if b.u8() & 1 == 0 {
        Air::Standard
    } else {
        Air::Vacuum
    };
    let profile = BUNDLED[usize::from(b.u8()) % BUNDLED.len()].1;
    let cfg = Config {
        pixels: pixels as u16,
        condition: cond,
        find,
        stored: StoredMap {
            map,
            sigma_fm: u32::from(b.u16()) * 100,
        },
        mode,
        degree: b.u8() % 5,
        air,
        line_fwhm_px_q8: b.u16(),
        profile,
    };
    if std::env::var_os("FUZZ_SHOW").is_some() {
        eprintln!(
            "config: {cfg:?}\nshape {shape:#04x}, frame bytes {}",
            b.0.len()
        );
    }
    let Ok(checker) = Checker::new(cfg) else {
        return;
    };
    // Frame: the rest of the input as u16 counts, repeated to fill the sensor.
    let rest: Vec<u16> =
        b.0.chunks(2)
            .map(|c| u16::from_le_bytes([c[0], *c.get(1).unwrap_or(&0)]))
            .collect();
    let raw: Vec<u16> = if rest.is_empty() {
        vec![0; pixels]
    } else {
        (0..pixels).map(|i| rest[i % rest.len()]).collect()
    };
    let dark: Vec<u16> = raw.iter().rev().map(|&v| v / 8).collect();
    let mut report = Report::new();
    let mut sum = vec![0u32; pixels];
    let frames = 1 + u16::from(shape & 3);
    let mut stack = Stack::new(&mut sum, full_scale).unwrap();
    for _ in 0..frames {
        stack.add(&raw).unwrap();
    }
    let signal = if shape & 4 != 0 {
        stack.view().unwrap()
    } else {
        FrameSum::single(&raw).unwrap()
    };
    let dark = (shape & 8 != 0).then(|| FrameSum::single(&dark).unwrap());
    let first = checker.check(signal, dark, None, buf.workspace(pixels), &mut report);
    match first {
        Ok(()) => {}
        // Only configuration problems may refuse a frame of the right length.
        Err(CheckError::Condition(_)) | Err(CheckError::Find(_)) | Err(CheckError::BadConfig) => {
            return
        }
        Err(e) => panic!("frame content refused: {e:?}"),
    }
    let mut again = Report::new();
    checker
        .check(signal, dark, None, buf.workspace(pixels), &mut again)
        .unwrap();
    assert_eq!(report, again, "same frame, same report");
}
