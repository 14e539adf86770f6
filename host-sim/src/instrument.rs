//! Instrument files: what `glowsim check` needs to know about a spectrograph and its sensor.
//!
//! # Format (TOML)
//!
//! ```toml
//! name = "bench unit 2"                 # optional, shown in reports
//!
//! [sensor]
//! pixels = 2048                         # required, 16 ..= 4096 (lib's frame limit)
//! adc_bits = 14                         # required, 1 ..= 16; full scale 2^bits − 1 counts
//! integration_us = 100000               # required, > 0; a trace's own value takes precedence
//! electrons_per_count = 2.0             # optional conversion gain (sharpens the noise model)
//! bad_pixels = [17, 803]                # optional, pixel indices from 0 (at most 32)
//!
//! [scale]
//! coefficients_nm = [340.0, 0.18, -6e-6, 0.0]  # λ(p) = c0 + c1·p + c2·p² + c3·p³, p from 0; 2 to 4 numbers
//! sigma_nm = 0.003                      # required 1-σ uncertainty of the stored scale's wavelengths
//! fit_degree = 2                        # degree of maps fitted in calibrate modes, 1 ..= 3 (default 2)
//! line_fwhm_px = 3.0                    # instrument line width, px, 1 ..= 16
//!
//! [air]                                 # optional: the medium the scale's wavelengths are in
//! medium = "standard"                   # "standard" (IAU standard air, default), "vacuum", or "measured"
//! temperature_c = 21.5                  # "measured" only: required
//! pressure_hpa = 1005.0                 # "measured" only: default 1013.25
//! humidity_pct = 40.0                   # "measured" only: default 0
//! ```
//!
//! Unknown keys are errors (a misspelt key must not fall back to a default silently); every error names
//! the key. The plain polynomial is converted to lib's normalised map by [`crate::map_convert`].
use crate::excerpt::excerpt;
use crate::map_convert;
use crate::toml_keys::{parse, Section};
use glowcheck::calibrate::WavelengthMap;
use glowcheck::check::StoredMap;
use glowcheck::condition::{MAX_BAD_PIXELS, MAX_PIXELS};
use glowcheck::predict::{Air, AirConditions};
use std::path::Path;

/// A parsed, validated instrument file.
#[derive(Clone, Debug, PartialEq)]
pub struct Instrument {
    /// Free name.
    pub name: Option<String>,
    /// Sensor pixel count.
    pub pixels: u16,
    /// ADC resolution, bits.
    pub adc_bits: u8,
    /// Integration time per readout, µs.
    pub integration_us: u32,
    /// Conversion gain, electrons per count.
    pub electrons_per_count: Option<f64>,
    /// Pixels to repair.
    pub bad_pixels: Vec<u16>,
    /// Stored map, plain coefficients c0..c3 (nm/px^k).
    pub coefficients_nm: [f64; 4],
    /// 1-σ of the stored map's wavelengths, nm.
    pub sigma_nm: f64,
    /// Degree of fitted maps.
    pub fit_degree: u8,
    /// Instrument line FWHM, px.
    pub line_fwhm_px: f64,
    /// Medium of the wavelengths.
    pub air: Air,
}

impl Instrument {
    /// Reads and validates a file.
    pub fn read_path(path: &Path) -> Result<Instrument, String> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| format!("cannot read instrument file {}: {e}", path.display()))?;
        Instrument::parse(&text).map_err(|e| format!("instrument file {}: {e}", path.display()))
    }

    /// Parses and validates the text of an instrument file.
    pub fn parse(text: &str) -> Result<Instrument, String> {
        let table = parse(text, "instrument file")?;
        let top = Section::top(&table);
        let name = top.str_opt("name")?.map(str::to_string);
        let sensor = top
            .table("sensor")?
            .ok_or("missing table [sensor] (pixels, adc_bits, integration_us)")?;
        let pixels = sensor.int_in("pixels", 16, MAX_PIXELS as i64, "sensor pixel count")? as u16;
        let adc_bits = sensor.int_in("adc_bits", 1, 16, "ADC resolution in bits")? as u8;
        let integration_us = sensor.int_in(
            "integration_us",
            1,
            u32::MAX as i64,
            "integration time per readout in µs",
        )? as u32;
        let electrons_per_count = sensor.f64_in_opt("electrons_per_count", 1.0 / 256.0, 255.0)?;
        let bad_pixels: Vec<u16> = match sensor.value("bad_pixels") {
            None => Vec::new(),
            Some(toml::Value::Array(a)) => a
                .iter()
                .enumerate()
                .map(|(i, v)| match v {
                    toml::Value::Integer(p) if (0..pixels as i64).contains(p) => Ok(*p as u16),
                    _ => Err(format!(
                        "`sensor.bad_pixels[{i}]`: expected a pixel index 0 ..= {}",
                        pixels - 1
                    )),
                })
                .collect::<Result<_, _>>()?,
            Some(_) => return Err("`sensor.bad_pixels`: expected an array of pixel indices".into()),
        };
        if bad_pixels.len() > MAX_BAD_PIXELS {
            return Err(format!(
                "`sensor.bad_pixels`: {} entries, the firmware's map holds {MAX_BAD_PIXELS}",
                bad_pixels.len()
            ));
        }
        sensor.finish()?;

        let scale = top
            .table("scale")?
            .ok_or("missing table [scale] (coefficients_nm, sigma_nm, line_fwhm_px)")?;
        let c = scale
            .numbers_opt("coefficients_nm", 2, 4)?
            .ok_or("missing key `scale.coefficients_nm` (c0, c1[, c2, c3] of λ(p) in nm)")?;
        let mut coefficients_nm = [0.0; 4];
        coefficients_nm[..c.len()].copy_from_slice(&c);
        let sigma_nm = scale.f64_in("sigma_nm", 0.0, 100.0, "1-σ of the stored scale in nm")?;
        let fit_degree = scale.int_opt("fit_degree", 1, 3)?.unwrap_or(2) as u8;
        let line_fwhm_px = scale.f64_in("line_fwhm_px", 1.0, 16.0, "line FWHM in px")?;
        scale.finish()?;

        let air = match top.value("air") {
            None => Air::Standard,
            Some(_) => {
                let a = top.table("air")?.ok_or("`air`: expected a table")?;
                let air = read_air(&a)?;
                a.finish()?;
                air
            }
        };
        top.finish()?;
        let inst = Instrument {
            name,
            pixels,
            adc_bits,
            integration_us,
            electrons_per_count,
            bad_pixels,
            coefficients_nm,
            sigma_nm,
            fit_degree,
            line_fwhm_px,
            air,
        };
        inst.stored_map()
            .map_err(|e| format!("`scale.coefficients_nm`: {e}"))?;
        Ok(inst)
    }

    /// The stored map in lib's form.
    pub fn lib_map(&self) -> Result<WavelengthMap, String> {
        map_convert::to_lib(&self.coefficients_nm, self.pixels)
    }

    /// The stored map with its uncertainty, as lib's check takes it.
    pub fn stored_map(&self) -> Result<StoredMap, String> {
        Ok(StoredMap {
            map: self.lib_map()?,
            sigma_fm: (self.sigma_nm * map_convert::FM_PER_NM).round() as u32,
        })
    }

    /// ADC full scale in counts.
    pub fn full_scale_counts(&self) -> u16 {
        ((1u32 << self.adc_bits) - 1) as u16
    }
}

fn read_air(a: &Section<'_>) -> Result<Air, String> {
    let medium = a.str_opt("medium")?.unwrap_or("standard");
    let conditions = ["temperature_c", "pressure_hpa", "humidity_pct"];
    match medium {
        "standard" | "vacuum" => {
            for k in conditions {
                if a.value(k).is_some() {
                    // `medium` is one of the two words matched above.
                    return Err(format!(
                        "`{}` given, but `air.medium` is {medium:?} (use \"measured\")",
                        a.name(k)
                    ));
                }
            }
            Ok(if medium == "vacuum" {
                Air::Vacuum
            } else {
                Air::Standard
            })
        }
        "measured" => {
            let t = a.f64_in("temperature_c", -40.0, 60.0, "air temperature in °C")?;
            let p = a
                .f64_in_opt("pressure_hpa", 500.0, 1200.0)?
                .unwrap_or(1013.25);
            let h = a.f64_in_opt("humidity_pct", 0.0, 100.0)?.unwrap_or(0.0);
            let c = AirConditions::new(
                (t * 1000.0).round() as i32,
                (p * 100.0).round() as u32,
                (h * 10.0).round() as u16,
            )
            .map_err(|e| format!("[air]: {e}"))?;
            Ok(Air::Conditions(c))
        }
        other => Err(format!(
            "`air.medium` = {}: expected \"standard\", \"vacuum\" or \"measured\"",
            excerpt(other, '"')
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = r#"
name = "bench"
[sensor]
pixels = 2048
adc_bits = 14
integration_us = 100000
electrons_per_count = 2.0
bad_pixels = [3, 700]
[scale]
coefficients_nm = [340.0, 0.18, -6e-6]
sigma_nm = 0.003
line_fwhm_px = 3
"#;

    #[test]
    fn reads_a_complete_file() {
        let i = Instrument::parse(GOOD).unwrap();
        assert_eq!(i.pixels, 2048);
        assert_eq!(i.full_scale_counts(), 16383);
        assert_eq!(i.coefficients_nm, [340.0, 0.18, -6e-6, 0.0]);
        assert_eq!(i.bad_pixels, vec![3, 700]);
        assert_eq!(i.fit_degree, 2);
        assert_eq!(i.air, Air::Standard);
        let s = i.stored_map().unwrap();
        assert_eq!(s.sigma_fm, 3000);
        assert_eq!(s.map.degree, 2);
        // Map centre (pixel 1023.5) in fm, by hand: 340 + 0.18·1023.5 − 6e-6·1023.5².
        let mid: f64 = 340.0 + 0.18 * 1023.5 - 6e-6 * 1023.5 * 1023.5;
        assert_eq!(s.map.coeff_fm[0], (mid * 1e6).round() as i64);
    }

    #[test]
    fn measured_air_and_vacuum() {
        let t =
            format!("{GOOD}[air]\nmedium = \"measured\"\ntemperature_c = 20\npressure_hpa = 950\n");
        let i = Instrument::parse(&t).unwrap();
        let Air::Conditions(c) = i.air else {
            panic!("{:?}", i.air)
        };
        assert_eq!((c.temperature_mc(), c.pressure_pa()), (20_000, 95_000));
        let t = format!("{GOOD}[air]\nmedium = \"vacuum\"\n");
        assert_eq!(Instrument::parse(&t).unwrap().air, Air::Vacuum);
    }

    /// Every malformed file names the offending key.
    #[test]
    fn malformed_files_name_the_key() {
        let cases = [
            (
                GOOD.replace("pixels = 2048", "pixels = \"many\""),
                "sensor.pixels",
            ),
            (
                GOOD.replace("pixels = 2048", "pixels = 9000"),
                "sensor.pixels",
            ),
            (GOOD.replace("adc_bits = 14\n", ""), "sensor.adc_bits"),
            (
                GOOD.replace("sigma_nm = 0.003", "sigma_nm = -1"),
                "scale.sigma_nm",
            ),
            (
                GOOD.replace("[340.0, 0.18, -6e-6]", "[340.0]"),
                "scale.coefficients_nm",
            ),
            (
                GOOD.replace("[340.0, 0.18, -6e-6]", "[340.0, \"x\"]"),
                "scale.coefficients_nm[1]",
            ),
            (GOOD.replace("-6e-6", "-1e-3"), "scale.coefficients_nm"),
            (
                GOOD.replace("[3, 700]", "[3, 5000]"),
                "sensor.bad_pixels[1]",
            ),
            (
                GOOD.replace("line_fwhm_px = 3", "line_fwhm = 3"),
                "scale.line_fwhm_px",
            ),
            (format!("colour = \"red\"\n{GOOD}"), "colour"),
            (format!("{GOOD}[air]\nmedium = \"steam\"\n"), "air.medium"),
            (
                format!("{GOOD}[air]\ntemperature_c = 20\n"),
                "air.temperature_c",
            ),
            (
                format!("{GOOD}[air]\nmedium = \"measured\"\n"),
                "air.temperature_c",
            ),
        ];
        for (text, key) in cases {
            let e = Instrument::parse(&text).unwrap_err();
            assert!(e.contains(&format!("`{key}`")), "{key}: {e}");
        }
        let e = Instrument::parse("[sensor\npixels = 3").unwrap_err();
        assert!(e.contains("not valid TOML"), "{e}");
        let e = Instrument::parse("").unwrap_err();
        assert!(e.contains("[sensor]"), "{e}");
    }
}
