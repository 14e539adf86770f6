//! `glowsim lines`: the predictor's line table, for people and for other tools (`--json`).
use crate::labels::{level_name, line_label, series_name};
use glowcheck::predict::{line, Air, AirConditions, Component, Components, Line, Lines, Nucleus};
use serde_json::{json, Value};

/// Command-line options.
#[derive(clap::Args)]
#[command(after_help = "Examples:
  glowsim lines --nucleus D --lower 2 --upper 3-7
  glowsim lines --nucleus H,D --from-nm 400 --to-nm 700 --components
  glowsim lines --nucleus He4 --lower 3 --upper 4 --air-temp-c 23 --air-pressure-pa 98000 --air-rh 40
  glowsim lines --nucleus T --from-nm 90 --to-nm 130 --json

Window bounds are vacuum wavelengths. Air values are for IAU standard air (Morton 2000) unless any
--air-* option is given; then the modified Edlen equation (Birch & Downs 1993/94) is used, with 15 degC,
101325 Pa and 0 % humidity for the options left out. No air value is given below 200 nm.")]
pub struct Args {
    /// Nuclei, comma-separated: H, D, T, He3, He4, Li6, Li7, Be9, B11, C12, N14, O16.
    #[arg(long, default_value = "H")]
    nucleus: String,
    /// Lower level m, or a range A-B.
    #[arg(long)]
    lower: Option<String>,
    /// Upper level n, or a range A-B.
    #[arg(long)]
    upper: Option<String>,
    /// Shortest vacuum wavelength, nm.
    #[arg(long)]
    from_nm: Option<f64>,
    /// Longest vacuum wavelength, nm.
    #[arg(long)]
    to_nm: Option<f64>,
    /// List the fine-structure components of each line.
    #[arg(long)]
    components: bool,
    /// Air temperature, degC (-20 to 50).
    #[arg(long, allow_hyphen_values = true)]
    air_temp_c: Option<f64>,
    /// Air pressure, Pa (50000 to 120000).
    #[arg(long)]
    air_pressure_pa: Option<f64>,
    /// Relative humidity, percent (0 to 100).
    #[arg(long)]
    air_rh: Option<f64>,
    /// Print the machine-readable JSON array instead of a table.
    #[arg(long)]
    json: bool,
}

/// Runs the command.
pub fn run(args: &Args) -> Result<(), String> {
    let nuclei = parse_nuclei(&args.nucleus)?;
    let lower = parse_range(args.lower.as_deref(), "--lower")?;
    let upper = parse_range(args.upper.as_deref(), "--upper")?;
    let air = parse_air(args)?;
    let (from_fm, to_fm) = window_fm(args.from_nm, args.to_nm)?;
    let mut lines = Vec::new();
    for &nu in &nuclei {
        collect(nu, lower, upper, from_fm, to_fm, &air, &mut lines)?;
    }
    if args.json {
        let arr: Vec<Value> = lines
            .iter()
            .map(|l| line_json(l, args.components, &air))
            .collect::<Result<_, _>>()?;
        println!(
            "{}",
            serde_json::to_string_pretty(&Value::Array(arr)).map_err(|e| e.to_string())?
        );
    } else {
        print_table(&lines, args.components, &air)?;
    }
    Ok(())
}

fn parse_nuclei(text: &str) -> Result<Vec<Nucleus>, String> {
    text.split(',')
        .map(|s| Nucleus::from_symbol(s.trim()).map_err(|e| format!("--nucleus {s:?}: {e}")))
        .collect()
}

/// An inclusive level range; `None` means every level.
type Range = Option<(u8, u8)>;

fn parse_range(text: Option<&str>, what: &str) -> Result<Range, String> {
    let Some(text) = text else { return Ok(None) };
    let level = |s: &str| -> Result<u8, String> {
        let v: u32 = s
            .trim()
            .parse()
            .map_err(|_| format!("{what} {text:?}: expected a level number or a range A-B"))?;
        if !(1..=40).contains(&v) {
            return Err(format!("{what} {text:?}: levels run from 1 to 40"));
        }
        Ok(v as u8)
    };
    let (a, b) = match text.split_once('-') {
        Some((a, b)) => (level(a)?, level(b)?),
        None => {
            let v = level(text)?;
            (v, v)
        }
    };
    if b < a {
        return Err(format!("{what} {text:?}: range ends before it starts"));
    }
    Ok(Some((a, b)))
}

fn parse_air(args: &Args) -> Result<Air, String> {
    if args.air_temp_c.is_none() && args.air_pressure_pa.is_none() && args.air_rh.is_none() {
        return Ok(Air::Standard);
    }
    let t = args.air_temp_c.unwrap_or(15.0);
    let p = args.air_pressure_pa.unwrap_or(101_325.0);
    let rh = args.air_rh.unwrap_or(0.0);
    let finite = |v: f64, what: &str| {
        if v.is_finite() {
            Ok(v)
        } else {
            Err(format!("{what} must be a number"))
        }
    };
    let (t, p, rh) = (
        finite(t, "--air-temp-c")?,
        finite(p, "--air-pressure-pa")?,
        finite(rh, "--air-rh")?,
    );
    if !(0.0..=1e7).contains(&p) || rh < 0.0 || t.abs() > 1e6 {
        return Err(format!(
            "air conditions out of range: {t} degC, {p} Pa, {rh} %"
        ));
    }
    let c = AirConditions::new(
        (t * 1000.0).round() as i32,
        p.round() as u32,
        (rh * 10.0).round() as u16,
    )
    .map_err(|e| e.to_string())?;
    Ok(Air::Conditions(c))
}

fn window_fm(from_nm: Option<f64>, to_nm: Option<f64>) -> Result<(u64, u64), String> {
    let conv = |v: f64, what: &str| -> Result<u64, String> {
        if !v.is_finite() || !(0.0..=1e9).contains(&v) {
            return Err(format!(
                "{what} {v}: expected a wavelength in nm between 0 and 1e9"
            ));
        }
        Ok((v * 1e6).round() as u64)
    };
    let from = match from_nm {
        Some(v) => conv(v, "--from-nm")?,
        None => 0,
    };
    let to = match to_nm {
        Some(v) => conv(v, "--to-nm")?,
        None => u64::MAX,
    };
    if to < from {
        return Err(format!(
            "wavelength window ends before it starts (--from-nm {} > --to-nm {})",
            from_nm.unwrap_or(0.0),
            to_nm.unwrap_or(0.0)
        ));
    }
    Ok((from, to))
}

fn in_range(r: Range, v: u8) -> bool {
    r.is_none_or(|(a, b)| (a..=b).contains(&v))
}

fn collect(
    nu: Nucleus,
    lower: Range,
    upper: Range,
    from_fm: u64,
    to_fm: u64,
    air: &Air,
    out: &mut Vec<Line>,
) -> Result<(), String> {
    let explicit = lower.is_some() && upper.is_some();
    if explicit {
        // A named pair must be a real transition: report a bad pair rather than an empty table.
        let (la, lb) = lower.unwrap_or((1, 40));
        let (ua, ub) = upper.unwrap_or((1, 40));
        if ub <= la {
            return Err(format!(
                "upper level must be above the lower level (lower {la}, upper {ub})"
            ));
        }
        let mut found = Vec::new();
        for m in la..=lb {
            for n in ua.max(m + 1)..=ub {
                let l = line(nu, m, n, air).map_err(|e| e.to_string())?;
                if (from_fm..=to_fm).contains(&l.vacuum_fm) {
                    found.push(l);
                }
            }
        }
        found.sort_by_key(|l| l.vacuum_fm);
        out.extend(found);
        return Ok(());
    }
    if let Some((_, ub)) = upper {
        if ub < 2 {
            return Err("upper level must be above the lower level (upper 1)".into());
        }
    }
    for l in Lines::new(nu, from_fm, to_fm, air).map_err(|e| e.to_string())? {
        let l = l.map_err(|e| e.to_string())?;
        if in_range(lower, l.lower) && in_range(upper, l.upper) {
            out.push(l);
        }
    }
    Ok(())
}

fn nm(fm: u64) -> f64 {
    fm as f64 / 1e6
}

fn line_json(l: &Line, with_components: bool, air: &Air) -> Result<Value, String> {
    let mut v = json!({
        "nucleus": l.nucleus.symbol(),
        "lower": l.lower,
        "upper": l.upper,
        "vacuum_nm": nm(l.vacuum_fm),
        "air_nm": l.air_fm.map(nm),
        "wavenumber_per_cm": l.wavenumber_nk as f64 / 1e9,
        "energy_ev": l.energy_nev as f64 / 1e9,
        "label": line_label(l.nucleus, l.lower, l.upper),
        "series": series_name(l.nucleus, l.lower),
    });
    if with_components {
        let comps: Vec<Value> = components(l, air)?
            .iter()
            .map(|c| {
                json!({
                    "upper_l": c.upper_l,
                    "upper_j": c.upper_j2 as f64 / 2.0,
                    "lower_l": c.lower_l,
                    "lower_j": c.lower_j2 as f64 / 2.0,
                    "vacuum_nm": nm(c.vacuum_fm),
                    "air_nm": c.air_fm.map(nm),
                    "relative_intensity": c.relative_ppm as f64 / 1e6,
                })
            })
            .collect();
        v["components"] = Value::Array(comps);
    }
    Ok(v)
}

fn components(l: &Line, air: &Air) -> Result<Vec<Component>, String> {
    Components::new(l.nucleus, l.lower, l.upper, air)
        .map_err(|e| e.to_string())?
        .map(|c| c.map_err(|e| e.to_string()))
        .collect()
}

fn print_table(lines: &[Line], with_components: bool, air: &Air) -> Result<(), String> {
    let medium = match air {
        Air::Standard => "air_nm (IAU std)".to_string(),
        Air::Conditions(c) => format!(
            "air_nm ({:.1} degC, {} Pa, {:.1} %RH)",
            c.temperature_mc() as f64 / 1000.0,
            c.pressure_pa(),
            c.humidity_permille() as f64 / 10.0
        ),
        Air::Vacuum => "air_nm".to_string(),
    };
    println!(
        "{:<8} {:<10} {:<8} {:>7} {:>16} {:>16} {:>18} {:>14}",
        "spectrum", "series", "line", "n->m", "vacuum_nm", medium, "wavenumber_cm-1", "energy_eV"
    );
    for l in lines {
        let air_txt = l
            .air_fm
            .map_or("-".to_string(), |v| format!("{:.6}", nm(v)));
        println!(
            "{:<8} {:<10} {:<8} {:>7} {:>16.6} {:>16} {:>18.6} {:>14.9}",
            format!("{} {}", l.nucleus.symbol(), roman(l.nucleus)),
            series_name(l.nucleus, l.lower),
            line_label(l.nucleus, l.lower, l.upper),
            format!("{}->{}", l.upper, l.lower),
            nm(l.vacuum_fm),
            air_txt,
            l.wavenumber_nk as f64 / 1e9,
            l.energy_nev as f64 / 1e9
        );
        if with_components {
            for c in components(l, air)? {
                let air_txt = c
                    .air_fm
                    .map_or("-".to_string(), |v| format!("{:.6}", nm(v)));
                println!(
                    "{:<8} {:<10} {:>17} {:>16.6} {:>16} {:>18} {:>13.4}%",
                    "",
                    "",
                    format!(
                        "{}{} -> {}{}",
                        l.upper,
                        level_name(c.upper_l, c.upper_j2),
                        l.lower,
                        level_name(c.lower_l, c.lower_j2)
                    ),
                    nm(c.vacuum_fm),
                    air_txt,
                    "",
                    c.relative_ppm as f64 / 1e4
                );
            }
        }
    }
    if lines.is_empty() {
        println!("(no lines in the requested range)");
    }
    if lines.iter().any(|l| l.vacuum_fm < 380_000_000) {
        println!("Caution: lines below about 380 nm are ultraviolet; shield eyes and skin from the source.");
    }
    Ok(())
}

fn roman(nu: Nucleus) -> &'static str {
    nu.spectrum().split(' ').nth(1).unwrap_or("")
}
