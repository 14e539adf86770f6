//! The predictor report that every QEMU board and the host twin print, one text line per result.
//!
//! The same code runs on both sides, so a byte-for-byte diff of the two outputs (and the FNV-1a digest
//! printed last) proves that lib gives the same integers on the host and on each Cortex-M core.
//! Every value is printed as the integer lib returns, in lib's units (fm, 1e-9 cm⁻¹, neV).
#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

pub mod cases;
pub mod digest;

use core::fmt::{self, Write};

use glowcheck::predict::{
    self, Air, AirConditions, Component, Components, Line, Lines, Nucleus, PredictError,
};

use digest::{DigestWriter, Fnv1a64};

/// Counts from one report run; `unexpected` must be zero for the run to pass.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Summary {
    /// Lines predicted and printed or digested.
    pub results: u32,
    /// Bad inputs that were refused, as they must be.
    pub refused: u32,
    /// Good inputs refused, or bad inputs accepted.
    pub unexpected: u32,
    /// FNV-1a 64-bit digest of every byte printed before the digest line.
    pub digest: u64,
}

/// Writes the whole report to `out`, ending with the digest line.
///
/// A failing `out` stops the report; predictor errors do not, they are printed and counted.
pub fn run<W: Write>(out: &mut W) -> Result<Summary, fmt::Error> {
    let mut w = DigestWriter::new(out);
    let mut s = Summary::default();
    writeln!(w, "# glowcheck predictor report v1")?;
    writeln!(
        w,
        "# tag nucleus lower upper vacuum_fm air_fm wavenumber_nk energy_nev"
    )?;
    nuclei(&mut w, &mut s)?;
    pairs(&mut w, &mut s)?;
    windows(&mut w, &mut s)?;
    components(&mut w, &mut s)?;
    refusals(&mut w, &mut s)?;
    writeln!(
        w,
        "summary results {} refused {} unexpected {}",
        s.results, s.refused, s.unexpected
    )?;
    s.digest = w.digest();
    writeln!(out, "digest fnv1a64 {:016x}", s.digest)?;
    Ok(s)
}

/// Symbol, charge and symbol round trip of every nucleus.
fn nuclei<W: Write>(w: &mut W, s: &mut Summary) -> fmt::Result {
    for n in Nucleus::ALL {
        let back = Nucleus::from_symbol(n.symbol());
        let ok = back == Ok(n);
        if !ok {
            s.unexpected = s.unexpected.saturating_add(1);
        }
        writeln!(
            w,
            "nucleus {} z {} round_trip {}",
            n.symbol(),
            n.z(),
            if ok { "ok" } else { "FAILED" }
        )?;
    }
    Ok(())
}

/// Single lines: every pair on every nucleus in standard air, Balmer α–ε in vacuum and explicit air.
fn pairs<W: Write>(w: &mut W, s: &mut Summary) -> fmt::Result {
    for n in Nucleus::ALL {
        for &(lower, upper) in cases::PAIRS.iter() {
            one(w, s, "std", n, lower, upper, &Air::Standard)?;
        }
    }
    let (t_mc, p_pa, rh_permille) = cases::AIR_CONDITIONS;
    writeln!(w, "air t_mc {t_mc} p_pa {p_pa} rh_permille {rh_permille}")?;
    let conditions = AirConditions::new(t_mc, p_pa, rh_permille);
    if let Err(e) = conditions {
        s.unexpected = s.unexpected.saturating_add(1);
        writeln!(w, "UNEXPECTED air refused: {e}")?;
    }
    for n in [Nucleus::H1, Nucleus::H2, Nucleus::H3, Nucleus::He4] {
        for &(lower, upper) in cases::BALMER.iter() {
            one(w, s, "vac", n, lower, upper, &Air::Vacuum)?;
            if let Ok(c) = conditions {
                one(w, s, "cond", n, lower, upper, &Air::Conditions(c))?;
            }
        }
    }
    Ok(())
}

/// Predicts and prints one line that must be accepted.
fn one<W: Write>(
    w: &mut W,
    s: &mut Summary,
    tag: &str,
    n: Nucleus,
    lower: u8,
    upper: u8,
    air: &Air,
) -> fmt::Result {
    match predict::line(n, lower, upper, air) {
        Ok(line) => {
            s.results = s.results.saturating_add(1);
            print_line(w, tag, &line)
        }
        Err(e) => {
            s.unexpected = s.unexpected.saturating_add(1);
            writeln!(
                w,
                "UNEXPECTED {tag} {} {lower} {upper} refused: {e}",
                n.symbol()
            )
        }
    }
}

/// The one text line per result.
fn print_line<W: Write>(w: &mut W, tag: &str, line: &Line) -> fmt::Result {
    write!(
        w,
        "{tag} {} {} {} {} ",
        line.nucleus.symbol(),
        line.lower,
        line.upper,
        line.vacuum_fm
    )?;
    match line.air_fm {
        Some(air_fm) => write!(w, "{air_fm}")?,
        None => w.write_str("-")?,
    }
    writeln!(w, " {} {}", line.wavenumber_nk, line.energy_nev)
}

/// Folds every field of a line that is counted but not printed.
fn fold_line(d: &mut Fnv1a64, line: &Line) {
    d.update(line.nucleus.symbol().as_bytes());
    d.update(&[line.lower, line.upper]);
    d.update_u64(line.vacuum_fm);
    // `u64::MAX` cannot be a wavelength in fm of a line in range, so it marks "no air value".
    d.update_u64(line.air_fm.unwrap_or(u64::MAX));
    d.update_u64(line.wavenumber_nk);
    d.update_u64(line.energy_nev);
}

/// Window iterations: the first lines printed, all counted, checked sorted, and digested.
fn windows<W: Write>(w: &mut W, s: &mut Summary) -> fmt::Result {
    for &(symbol, from_nm, to_nm) in cases::WINDOWS.iter() {
        let from_fm = from_nm.saturating_mul(cases::FM_PER_NM);
        let to_fm = to_nm.saturating_mul(cases::FM_PER_NM);
        writeln!(w, "window {symbol} {from_fm} {to_fm}")?;
        match Nucleus::from_symbol(symbol) {
            Ok(n) => window(w, s, "win", n, from_fm, to_fm, cases::WINDOW_PRINT_MAX)?,
            Err(e) => {
                s.unexpected = s.unexpected.saturating_add(1);
                writeln!(w, "UNEXPECTED nucleus {symbol} refused: {e}")?;
            }
        }
    }
    let (from_fm, to_fm) = cases::ALL_RANGE_FM;
    for &symbol in cases::ALL_RANGE_NUCLEI.iter() {
        writeln!(w, "window {symbol} {from_fm} {to_fm}")?;
        match Nucleus::from_symbol(symbol) {
            Ok(n) => window(w, s, "all", n, from_fm, to_fm, 0)?,
            Err(e) => {
                s.unexpected = s.unexpected.saturating_add(1);
                writeln!(w, "UNEXPECTED nucleus {symbol} refused: {e}")?;
            }
        }
    }
    Ok(())
}

/// One window: prints up to `print_max` lines, then the count, sort check and digest of all.
fn window<W: Write>(
    w: &mut W,
    s: &mut Summary,
    tag: &str,
    n: Nucleus,
    from_fm: u64,
    to_fm: u64,
    print_max: u32,
) -> fmt::Result {
    let lines = match Lines::new(n, from_fm, to_fm, &Air::Standard) {
        Ok(lines) => lines,
        Err(e) => {
            s.unexpected = s.unexpected.saturating_add(1);
            return writeln!(w, "UNEXPECTED window refused: {e}");
        }
    };
    let mut count: u32 = 0;
    let mut sorted = true;
    let mut previous_fm: u64 = 0;
    let mut d = Fnv1a64::new();
    for line in lines {
        let line = match line {
            Ok(line) => line,
            Err(e) => {
                s.unexpected = s.unexpected.saturating_add(1);
                writeln!(w, "UNEXPECTED window line refused: {e}")?;
                break;
            }
        };
        if count < print_max {
            print_line(w, tag, &line)?;
        }
        fold_line(&mut d, &line);
        sorted &= line.vacuum_fm >= previous_fm && (from_fm..=to_fm).contains(&line.vacuum_fm);
        previous_fm = line.vacuum_fm;
        count = count.saturating_add(1);
    }
    s.results = s.results.saturating_add(count);
    if !sorted {
        s.unexpected = s.unexpected.saturating_add(1);
    }
    writeln!(
        w,
        "window-end count {count} sorted_in_window {} fnv1a64 {:016x}",
        if sorted { "yes" } else { "NO" },
        d.value()
    )
}

/// Fine-structure components of a few lines, each with its share of the photons.
fn components<W: Write>(w: &mut W, s: &mut Summary) -> fmt::Result {
    writeln!(
        w,
        "# comp nucleus lower upper upper_l upper_j2 lower_l lower_j2 vacuum_fm air_fm relative_ppm"
    )?;
    for &(symbol, lower, upper) in cases::COMPONENT_LINES.iter() {
        let parts = Nucleus::from_symbol(symbol)
            .and_then(|n| Components::new(n, lower, upper, &Air::Standard));
        let parts = match parts {
            Ok(parts) => parts,
            Err(e) => {
                s.unexpected = s.unexpected.saturating_add(1);
                writeln!(w, "UNEXPECTED comp {symbol} {lower} {upper} refused: {e}")?;
                continue;
            }
        };
        let mut ppm_sum: u32 = 0;
        for part in parts {
            match part {
                Ok(c) => {
                    s.results = s.results.saturating_add(1);
                    ppm_sum = ppm_sum.saturating_add(c.relative_ppm);
                    print_component(w, symbol, lower, upper, &c)?;
                }
                Err(e) => {
                    s.unexpected = s.unexpected.saturating_add(1);
                    writeln!(w, "UNEXPECTED comp {symbol} {lower} {upper} failed: {e}")?;
                    break;
                }
            }
        }
        writeln!(w, "comp-end {symbol} {lower} {upper} ppm_sum {ppm_sum}")?;
    }
    Ok(())
}

/// One text line per fine-structure component.
fn print_component<W: Write>(
    w: &mut W,
    symbol: &str,
    lower: u8,
    upper: u8,
    c: &Component,
) -> fmt::Result {
    write!(
        w,
        "comp {symbol} {lower} {upper} {} {} {} {} {} ",
        c.upper_l, c.upper_j2, c.lower_l, c.lower_j2, c.vacuum_fm
    )?;
    match c.air_fm {
        Some(air_fm) => write!(w, "{air_fm}")?,
        None => w.write_str("-")?,
    }
    writeln!(w, " {}", c.relative_ppm)
}

/// Bad inputs: each must be refused; the error text is printed so both sides agree on it too.
fn refusals<W: Write>(w: &mut W, s: &mut Summary) -> fmt::Result {
    for &(lower, upper) in cases::BAD_PAIRS.iter() {
        let r = predict::line(Nucleus::H1, lower, upper, &Air::Standard);
        refused(w, s, r.map(|_| ()), format_args!("pair H {lower} {upper}"))?;
    }
    for &(t_mc, p_pa, rh_permille) in cases::BAD_AIR.iter() {
        let r = AirConditions::new(t_mc, p_pa, rh_permille);
        refused(
            w,
            s,
            r.map(|_| ()),
            format_args!("air {t_mc} {p_pa} {rh_permille}"),
        )?;
    }
    for &symbol in cases::BAD_SYMBOLS.iter() {
        let r = Nucleus::from_symbol(symbol);
        refused(w, s, r.map(|_| ()), format_args!("symbol \"{symbol}\""))?;
    }
    let (from_fm, to_fm) = (700 * cases::FM_PER_NM, 400 * cases::FM_PER_NM);
    let r = Lines::new(Nucleus::H1, from_fm, to_fm, &Air::Standard);
    refused(
        w,
        s,
        r.map(|_| ()),
        format_args!("window H {from_fm} {to_fm}"),
    )
}

/// Prints one refusal case and counts it as refused or unexpected.
fn refused<W: Write>(
    w: &mut W,
    s: &mut Summary,
    result: Result<(), PredictError>,
    what: fmt::Arguments<'_>,
) -> fmt::Result {
    match result {
        Err(e) => {
            s.refused = s.refused.saturating_add(1);
            writeln!(w, "refused {what}: {e}")
        }
        Ok(()) => {
            s.unexpected = s.unexpected.saturating_add(1);
            writeln!(w, "UNEXPECTED accepted {what}")
        }
    }
}
