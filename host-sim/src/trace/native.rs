//! Reading and writing the glowtrace text format (specified in the parent module).

use super::{lines, Frame, FrameKind, Trace, TraceError, MAX_ADC_BITS, MAX_PIXELS};
use crate::excerpt::excerpt;
use std::fmt::Write as _;

/// The magic word of the first line.
pub const MAGIC: &str = "glowtrace";

/// The version this code writes and reads.
pub const VERSION: u32 = 1;

/// Counts per line when writing.
const COUNTS_PER_LINE: usize = 16;

fn is_comment(line: &str) -> bool {
    let t = line.trim();
    t.is_empty() || t.starts_with('#')
}

/// True when the first meaningful line starts with the magic word.
pub fn looks_native(text: &str) -> bool {
    lines(text)
        .find(|l| !is_comment(l))
        .is_some_and(|l| l.split_whitespace().next() == Some(MAGIC))
}

fn valid_key(key: &str) -> bool {
    let mut chars = key.chars();
    chars.next().is_some_and(|c| c.is_ascii_lowercase())
        && chars.all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_' || c == '.')
}

fn valid_value(value: &str) -> bool {
    !value.contains(['\n', '\r']) && value.trim() == value
}

/// Serialises a trace; fails on content the format cannot carry (so that reading back is lossless).
pub fn to_text(t: &Trace) -> Result<String, TraceError> {
    check(t)?;
    let Some(bits) = t.adc_bits else {
        return Err(TraceError::file(
            "a glowtrace file needs adc_bits; give the ADC resolution",
        ));
    };
    let mut s = String::with_capacity(t.frames.len() * t.pixels * 6 + 512);
    let _ = writeln!(s, "{MAGIC} {VERSION}");
    let _ = writeln!(s, "pixels: {}", t.pixels);
    let _ = writeln!(s, "adc_bits: {bits}");
    if let Some(us) = t.integration_us {
        let _ = writeln!(s, "integration_us: {us}");
    }
    if let Some(mc) = t.sensor_temp_mc {
        let _ = writeln!(s, "sensor_temp_mc: {mc}");
    }
    if let Some(c) = &t.wavelength_nm {
        let words: Vec<String> = c.iter().map(|x| format!("{x:?}")).collect();
        let _ = writeln!(s, "wavelength_nm: {}", words.join(" "));
    }
    if let Some(g) = t.electrons_per_count {
        let _ = writeln!(s, "electrons_per_count: {g:?}");
    }
    if t.coadded != 1 {
        let _ = writeln!(s, "coadded: {}", t.coadded);
    }
    for n in &t.notes {
        let _ = writeln!(s, "note: {n}");
    }
    for (k, v) in &t.extras {
        let _ = writeln!(s, "{k}: {v}");
    }
    for f in &t.frames {
        let _ = writeln!(s, "frame {}", f.kind.word());
        for chunk in f.counts.chunks(COUNTS_PER_LINE) {
            let words: Vec<String> = chunk.iter().map(|c| c.to_string()).collect();
            let _ = writeln!(s, "{}", words.join(" "));
        }
    }
    s.push_str("end\n");
    Ok(s)
}

/// Checks what a writer must not emit.
fn check(t: &Trace) -> Result<(), TraceError> {
    if t.pixels == 0 || t.pixels > MAX_PIXELS {
        return Err(TraceError::file(format!(
            "pixels must be 1..={MAX_PIXELS}, got {}",
            t.pixels
        )));
    }
    if let Some(b) = t.adc_bits {
        if b == 0 || b > MAX_ADC_BITS {
            return Err(TraceError::file(format!(
                "adc_bits must be 1..={MAX_ADC_BITS}, got {b}"
            )));
        }
    }
    if t.coadded == 0 {
        return Err(TraceError::file("coadded must be at least 1"));
    }
    if t.electrons_per_count
        .is_some_and(|g| !(g.is_finite() && g > 0.0))
    {
        return Err(TraceError::file("electrons_per_count must be a number > 0"));
    }
    if let Some(c) = &t.wavelength_nm {
        if c.is_empty() || c.len() > 4 || c.iter().any(|x| !x.is_finite()) {
            return Err(TraceError::file(
                "wavelength_nm needs 1 to 4 finite coefficients",
            ));
        }
    }
    for n in &t.notes {
        if !valid_value(n) {
            return Err(TraceError::file(format!(
                "note {} has a line break or surrounding spaces",
                excerpt(n, '"')
            )));
        }
    }
    for (k, v) in &t.extras {
        if !valid_key(k) || !k.contains('.') {
            return Err(TraceError::file(format!(
                "extra key {} must be lower-case letters, digits, '_' or '.', with a dot",
                excerpt(k, '"')
            )));
        }
        if !valid_value(v) {
            return Err(TraceError::file(format!(
                "value of {} has a line break or surrounding spaces",
                excerpt(k, '\'')
            )));
        }
    }
    if t.frames.is_empty() {
        return Err(TraceError::file("a trace needs at least one frame"));
    }
    let max = t.max_count();
    for (i, f) in t.frames.iter().enumerate() {
        if f.counts.len() != t.pixels {
            return Err(TraceError::file(format!(
                "frame {i} has {} counts, pixels says {}",
                f.counts.len(),
                t.pixels
            )));
        }
        if let Some(c) = f.counts.iter().find(|&&c| c as u64 > max) {
            return Err(TraceError::file(format!(
                "frame {i} holds {c}, above the largest possible count {max}"
            )));
        }
    }
    Ok(())
}

/// Where the parser is.
enum State {
    Magic,
    Header,
    Frame(FrameKind, Vec<u32>, usize),
    Done,
}

fn parse_uint<T: std::str::FromStr>(line: usize, key: &str, v: &str) -> Result<T, TraceError> {
    v.parse::<T>().map_err(|_| {
        TraceError::at(
            line,
            format!(
                "expected a whole number for {key}, found {}",
                excerpt(v, '"')
            ),
        )
    })
}

/// Parses glowtrace text.
pub fn parse(text: &str) -> Result<Trace, TraceError> {
    let mut t = Trace::new(0);
    let mut seen: Vec<&str> = Vec::new();
    let mut state = State::Magic;
    let mut last_line = 0;
    for (idx, raw) in lines(text).enumerate() {
        let n = idx + 1;
        last_line = n;
        if is_comment(raw) {
            continue;
        }
        let line = raw.trim();
        state = match state {
            State::Magic => {
                let mut words = line.split_whitespace();
                if words.next() != Some(MAGIC) {
                    return Err(TraceError::at(
                        n,
                        format!("expected '{MAGIC} {VERSION}' as the first line"),
                    ));
                }
                match words.next().map(|v| (v, v.parse::<u32>())) {
                    Some((v, Ok(VERSION))) => {
                        if words.next().is_some() {
                            // The line is trimmed and starts with the magic word, then the version.
                            let after = line.get(MAGIC.len()..).unwrap_or("").trim_start();
                            let after = after.get(v.len()..).unwrap_or("").trim_start();
                            return Err(TraceError::at(
                                n,
                                format!(
                                    "unexpected text after the version: {} (expected '{MAGIC} {VERSION}' alone on the line)",
                                    excerpt(after, '"')
                                ),
                            ));
                        }
                        State::Header
                    }
                    Some((_, Ok(v))) => {
                        return Err(TraceError::at(
                            n,
                            format!("glowtrace version {v} is not supported (this build reads version {VERSION})"),
                        ))
                    }
                    _ => {
                        return Err(TraceError::at(
                            n,
                            format!("expected '{MAGIC} {VERSION}', found {}", excerpt(line, '"')),
                        ))
                    }
                }
            }
            State::Header => {
                if let Some(kind) = frame_opener(line) {
                    start_frame(&t, &seen, n, kind)?
                } else {
                    header_line(&mut t, &mut seen, n, line)?;
                    State::Header
                }
            }
            State::Frame(kind, mut counts, start) => {
                if let Some(next) = frame_opener(line) {
                    finish_frame(&mut t, kind, counts, start, n)?;
                    start_frame(&t, &seen, n, next)?
                } else if line == "end" {
                    finish_frame(&mut t, kind, counts, start, n)?;
                    State::Done
                } else {
                    let max = t.max_count();
                    for w in line.split_whitespace() {
                        let c: u64 = w.parse().map_err(|_| {
                            TraceError::at(
                                n,
                                format!(
                                    "expected a count (whole number 0..={max}), found {}",
                                    excerpt(w, '"')
                                ),
                            )
                        })?;
                        if c > max {
                            return Err(TraceError::at(
                                n,
                                format!("count {c} is above the largest possible count {max} (adc_bits, coadded)"),
                            ));
                        }
                        if counts.len() == t.pixels {
                            return Err(TraceError::at(
                                n,
                                format!(
                                    "frame {} opened on line {start} has more than {} counts (pixels: {})",
                                    kind.word(),
                                    t.pixels,
                                    t.pixels
                                ),
                            ));
                        }
                        counts.push(c as u32);
                    }
                    State::Frame(kind, counts, start)
                }
            }
            State::Done => {
                return Err(TraceError::at(
                    n,
                    format!(
                        "expected nothing but comments after 'end', found {}",
                        excerpt(line, '"')
                    ),
                ))
            }
        };
    }
    match state {
        State::Done => Ok(t),
        State::Magic => Err(TraceError::file(
            "empty file: expected 'glowtrace 1' and a header",
        )),
        _ => Err(TraceError::at(
            last_line + 1,
            "file cut short: expected more counts or the closing 'end' line",
        )),
    }
}

fn frame_opener(line: &str) -> Option<FrameKind> {
    let mut w = line.split_whitespace();
    if w.next() != Some("frame") {
        return None;
    }
    let kind = match w.next() {
        Some("signal") => FrameKind::Signal,
        Some("dark") => FrameKind::Dark,
        _ => return None,
    };
    w.next().is_none().then_some(kind)
}

fn start_frame(t: &Trace, seen: &[&str], n: usize, kind: FrameKind) -> Result<State, TraceError> {
    for key in ["pixels", "adc_bits"] {
        if !seen.contains(&key) {
            return Err(TraceError::at(
                n,
                format!("expected the header key '{key}' before the first frame"),
            ));
        }
    }
    Ok(State::Frame(kind, Vec::with_capacity(t.pixels), n))
}

fn finish_frame(
    t: &mut Trace,
    kind: FrameKind,
    counts: Vec<u32>,
    start: usize,
    n: usize,
) -> Result<(), TraceError> {
    if counts.len() != t.pixels {
        return Err(TraceError::at(
            n,
            format!(
                "frame {} opened on line {start} has {} counts, expected {} (pixels: {})",
                kind.word(),
                counts.len(),
                t.pixels,
                t.pixels
            ),
        ));
    }
    t.frames.push(Frame { kind, counts });
    Ok(())
}

fn header_line<'a>(
    t: &mut Trace,
    seen: &mut Vec<&'a str>,
    n: usize,
    line: &'a str,
) -> Result<(), TraceError> {
    let Some((key, value)) = line.split_once(':') else {
        if line.starts_with("frame") {
            return Err(TraceError::at(
                n,
                format!(
                    "expected 'frame signal' or 'frame dark', found {}",
                    excerpt(line, '"')
                ),
            ));
        }
        return Err(TraceError::at(
            n,
            format!(
                "expected 'key: value', 'frame signal' or 'frame dark', found {}",
                excerpt(line, '"')
            ),
        ));
    };
    let (key, v) = (key.trim(), value.trim());
    if !valid_key(key) {
        return Err(TraceError::at(
            n,
            format!(
                "expected a key of lower-case letters, digits, '_' or '.', found {}",
                excerpt(key, '"')
            ),
        ));
    }
    let repeatable = key == "note" || key.contains('.');
    if !repeatable {
        if seen.contains(&key) {
            // Only known keys get here (others need a dot or fail below): short names.
            return Err(TraceError::at(n, format!("key '{key}' appears twice")));
        }
        seen.push(key);
    }
    match key {
        "pixels" => {
            let p: usize = parse_uint(n, key, v)?;
            if p == 0 || p > MAX_PIXELS {
                return Err(TraceError::at(
                    n,
                    format!("expected pixels 1..={MAX_PIXELS}, found {p}"),
                ));
            }
            t.pixels = p;
        }
        "adc_bits" => {
            let b: u8 = parse_uint(n, key, v)?;
            if b == 0 || b > MAX_ADC_BITS {
                return Err(TraceError::at(
                    n,
                    format!("expected adc_bits 1..={MAX_ADC_BITS}, found {b}"),
                ));
            }
            t.adc_bits = Some(b);
        }
        "integration_us" => t.integration_us = Some(parse_uint(n, key, v)?),
        "sensor_temp_mc" => {
            t.sensor_temp_mc = Some(v.parse().map_err(|_| {
                TraceError::at(
                    n,
                    format!(
                        "expected a whole number of milli-degrees C for sensor_temp_mc, found {}",
                        excerpt(v, '"')
                    ),
                )
            })?)
        }
        "coadded" => {
            let c: u32 = parse_uint(n, key, v)?;
            if c == 0 {
                return Err(TraceError::at(n, "expected coadded >= 1, found 0"));
            }
            t.coadded = c;
        }
        "wavelength_nm" => {
            let mut c = Vec::new();
            for w in v.split_whitespace() {
                let x: f64 = w
                    .parse()
                    .ok()
                    .filter(|x: &f64| x.is_finite())
                    .ok_or_else(|| {
                        TraceError::at(
                            n,
                            format!(
                                "expected a number in wavelength_nm, found {}",
                                excerpt(w, '"')
                            ),
                        )
                    })?;
                c.push(x);
            }
            if c.is_empty() || c.len() > 4 {
                return Err(TraceError::at(
                    n,
                    format!(
                        "expected 1 to 4 coefficients in wavelength_nm, found {}",
                        c.len()
                    ),
                ));
            }
            t.wavelength_nm = Some(c);
        }
        "electrons_per_count" => {
            let g: f64 = v
                .parse()
                .ok()
                .filter(|g: &f64| g.is_finite() && *g > 0.0)
                .ok_or_else(|| {
                    TraceError::at(
                        n,
                        format!(
                            "expected a number > 0 for electrons_per_count, found {}",
                            excerpt(v, '"')
                        ),
                    )
                })?;
            t.electrons_per_count = Some(g);
        }
        "note" => t.notes.push(v.to_string()),
        k if k.contains('.') => t.extras.push((k.to_string(), v.to_string())),
        k => {
            return Err(TraceError::at(
                n,
                format!(
                    "unknown key {} (keys of other tools need a dot, like {})",
                    excerpt(k, '\''),
                    excerpt(&format!("tool.{k}"), '\'')
                ),
            ))
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Trace {
        let mut t = Trace::new(20);
        t.adc_bits = Some(12);
        t.integration_us = Some(25_000);
        t.sensor_temp_mc = Some(-1500);
        t.electrons_per_count = Some(1.7);
        t.wavelength_nm = Some(vec![340.123456789012, 0.18, -6.1e-6, 1e-10]);
        t.notes.push("two notes: the first".into());
        t.notes.push("the second".into());
        t.extras.push(("synth.seed".into(), "7".into()));
        t.frames.push(Frame {
            kind: FrameKind::Signal,
            counts: (0..20).map(|i| i * 200).collect(),
        });
        t.frames.push(Frame {
            kind: FrameKind::Dark,
            counts: vec![4095; 20],
        });
        t
    }

    #[test]
    fn round_trip() {
        let t = sample();
        let text = to_text(&t).unwrap();
        assert!(text.starts_with("glowtrace 1\npixels: 20\n"));
        let back = parse(&text).unwrap();
        assert_eq!(back, t);
        assert_eq!(to_text(&back).unwrap(), text);
    }

    #[test]
    fn comments_and_crlf_ignored() {
        let text = to_text(&sample()).unwrap();
        let mut noisy = String::from("# made by hand\n\n");
        for l in text.lines() {
            noisy.push_str(l);
            noisy.push_str("\r\n# c\r\n");
        }
        assert_eq!(parse(&noisy).unwrap(), sample());
    }

    fn err_line(text: &str) -> (Option<usize>, String) {
        let e = parse(text).unwrap_err();
        (e.line, e.message)
    }

    #[test]
    fn errors_name_the_line() {
        let head = "glowtrace 1\npixels: 3\nadc_bits: 8\n";
        let (l, m) = err_line(&format!("{head}frame signal\n1 2 x\nend\n"));
        assert_eq!(l, Some(5));
        assert!(m.contains("expected a count") && m.contains("\"x\""), "{m}");
        let (l, m) = err_line(&format!("{head}frame signal\n1 2 256\nend\n"));
        assert_eq!(l, Some(5));
        assert!(m.contains("255"), "{m}");
        let (l, m) = err_line(&format!("{head}frame signal\n1 2\nend\n"));
        assert_eq!(l, Some(6));
        assert!(m.contains("has 2 counts, expected 3"), "{m}");
        let (l, m) = err_line(&format!("{head}frame signal\n1 2 3 4\nend\n"));
        assert_eq!(l, Some(5));
        assert!(m.contains("more than 3"), "{m}");
        let (l, m) = err_line(&format!("{head}frame signal\n1 2 3\n"));
        assert_eq!(l, Some(6));
        assert!(m.contains("cut short"), "{m}");
        let (l, m) = err_line("glowtrace 2\n");
        assert_eq!(l, Some(1));
        assert!(m.contains("version 2"), "{m}");
        let (l, m) = err_line("glowtrace 1\npixels: 3\nframe signal\n1 2 3\nend\n");
        assert_eq!(l, Some(3));
        assert!(m.contains("adc_bits"), "{m}");
        let (l, m) = err_line("glowtrace 1\npixels: 3\npixels: 3\n");
        assert_eq!(l, Some(3));
        assert!(m.contains("twice"), "{m}");
        let (l, m) = err_line("glowtrace 1\ncolour: red\n");
        assert_eq!(l, Some(2));
        assert!(m.contains("unknown key"), "{m}");
        let (l, m) = err_line("glowtrace 1\npixels: many\n");
        assert_eq!(l, Some(2));
        assert!(m.contains("whole number"), "{m}");
        let (l, m) = err_line(&format!("{head}frame light\n"));
        assert_eq!(l, Some(4));
        assert!(m.contains("'frame signal' or 'frame dark'"), "{m}");
        let (l, m) = err_line(&format!("{head}frame dark\n1 2 3\nend\nmore\n"));
        assert_eq!(l, Some(7));
        assert!(m.contains("after 'end'"), "{m}");
        let (l, m) = err_line(&format!("{head}wavelength_nm: 1 2 3 4 5\n"));
        assert_eq!(l, Some(4));
        assert!(m.contains("1 to 4"), "{m}");
    }

    #[test]
    fn magic_line_errors_say_what_is_wrong() {
        let (l, m) = err_line("glowtrace 1 beta\npixels: 3\n");
        assert_eq!(l, Some(1));
        assert_eq!(
            m,
            "unexpected text after the version: \"beta\" (expected 'glowtrace 1' alone on the line)"
        );
        let (_, m) = err_line("  glowtrace   1  beta  two\n");
        assert!(m.contains("version: \"beta  two\""), "{m}");
        let (_, m) = err_line("glowtrace 3 beta\n");
        assert!(m.contains("version 3 is not supported"), "{m}");
        let (_, m) = err_line("glowtrace one\n");
        assert_eq!(m, "expected 'glowtrace 1', found \"glowtrace one\"");
    }

    #[test]
    fn errors_quote_a_bounded_excerpt() {
        let huge = "7".repeat(1 << 20);
        let head = "glowtrace 1\npixels: 3\nadc_bits: 8\n";
        let cases = [
            format!("{head}frame signal\n1 2 {huge}\nend\n"),
            format!("{head}frame signal\n1 2 3\nend\n{huge}\n"),
            format!("{head}{huge}\n"),
            format!("{head}frame {huge}\n"),
            format!("glowtrace 1\npixels: {huge}\n"),
            format!("glowtrace 1\nsensor_temp_mc: {huge}x\n"),
            format!("glowtrace 1\nwavelength_nm: {huge}x\n"),
            format!("glowtrace 1\nelectrons_per_count: -{huge}\n"),
            format!("glowtrace 1\nK{huge}: 1\n"),
            format!("glowtrace 1\nk{huge}: 1\n"),
            format!("glowtrace 1 {huge}\n"),
            format!("glowtrace x{huge}\n"),
        ];
        for text in &cases {
            let m = parse(text).unwrap_err().to_string();
            crate::excerpt::assert_bounded(&m, 300);
        }
        let mut t = sample();
        t.notes.push(format!("{huge}\n"));
        let m = to_text(&t).unwrap_err().to_string();
        assert!(m.len() < 300 && m.contains("(1048577 bytes)"), "{m}");
    }

    #[test]
    fn writer_refuses_what_it_cannot_carry() {
        let mut t = sample();
        t.notes.push("line\nbreak".into());
        assert!(to_text(&t).is_err());
        let mut t = sample();
        t.extras.push(("nodot".into(), "1".into()));
        assert!(to_text(&t).is_err());
        let mut t = sample();
        t.frames[0].counts.pop();
        assert!(to_text(&t).is_err());
        let mut t = sample();
        t.adc_bits = None;
        assert!(to_text(&t).is_err());
        let mut t = sample();
        t.frames[1].counts[0] = 4096;
        assert!(to_text(&t).is_err());
    }
}
