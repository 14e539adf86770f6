//! Plain CSV import: what other tools and spreadsheets export.
//!
//! Accepted shapes, one pixel per line:
//! - one column of counts, or two columns `pixel<sep>counts`;
//! - separator comma, semicolon or tab, found from the first data line and then required on every line;
//! - an optional header line (the first meaningful line, when it is not all numbers);
//! - counts may be decimal (co-added or averaged exports) and are rounded to the nearest whole count,
//!   halves away from zero; with a semicolon or tab separator a decimal comma is accepted (`812,5`);
//! - pixel indices must be whole numbers 0 ..= 4294967295 rising by one (starting anywhere, often 0 or
//!   1); the pixel index of the result is the position in the file, first value = 0;
//! - empty lines and lines starting with `#` are skipped; line ends `\n`, `\r\n` or a bare `\r` (old Mac
//!   spreadsheet exports); a UTF-8 byte-order mark is skipped by [`Trace::parse_any`].
//!
//! The result is a trace with one signal frame and no ADC resolution (CSV does not say).

use super::{lines, Frame, FrameKind, Trace, TraceError, MAX_PIXELS};
use crate::excerpt::excerpt;

/// Largest pixel index column 1 may hold: every index up to it, plus one, is exact in an f64, so
/// "rising by one" is checked exactly.
const MAX_PIXEL_INDEX: f64 = u32::MAX as f64;

/// Field separator of a CSV file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Sep {
    Comma,
    Semicolon,
    Tab,
    None,
}

impl Sep {
    fn detect(line: &str) -> Sep {
        if line.contains('\t') {
            Sep::Tab
        } else if line.contains(';') {
            Sep::Semicolon
        } else if line.contains(',') {
            Sep::Comma
        } else {
            Sep::None
        }
    }

    fn split(self, line: &str) -> Vec<&str> {
        let fields: Vec<&str> = match self {
            Sep::Comma => line.split(',').collect(),
            Sep::Semicolon => line.split(';').collect(),
            Sep::Tab => line.split('\t').collect(),
            Sep::None => vec![line],
        };
        fields.into_iter().map(str::trim).collect()
    }

    fn name(self) -> &'static str {
        match self {
            Sep::Comma => "','",
            Sep::Semicolon => "';'",
            Sep::Tab => "tab",
            Sep::None => "no separator",
        }
    }
}

/// Parses a number, with a decimal comma allowed when commas do not separate fields.
fn number(field: &str, sep: Sep) -> Option<f64> {
    let owned;
    let s = if sep != Sep::Comma && field.contains(',') && !field.contains('.') {
        owned = field.replacen(',', ".", 1);
        owned.as_str()
    } else {
        field
    };
    s.parse::<f64>().ok().filter(|x| x.is_finite())
}

/// Parses CSV text into a one-frame trace.
pub fn parse(text: &str) -> Result<Trace, TraceError> {
    let mut sep = None;
    let mut columns = 0;
    let mut counts = Vec::new();
    let mut next_pixel: Option<f64> = None;
    let mut first = true;
    for (idx, raw) in lines(text).enumerate() {
        let n = idx + 1;
        let line = raw.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let s = *sep.get_or_insert_with(|| Sep::detect(line));
        let fields = s.split(line);
        if first {
            first = false;
            columns = fields.len();
            if columns > 2 {
                return Err(TraceError::at(
                    n,
                    format!(
                        "expected one column of counts or two (pixel, counts), found {columns} fields separated by {}",
                        s.name()
                    ),
                ));
            }
            if fields.iter().any(|f| number(f, s).is_none()) {
                continue; // the header line
            }
        }
        if fields.len() != columns {
            return Err(TraceError::at(
                n,
                format!(
                    "expected {columns} field{} separated by {}, found {}",
                    if columns == 1 { "" } else { "s" },
                    s.name(),
                    fields.len()
                ),
            ));
        }
        let count_field = fields[columns - 1];
        if columns == 2 {
            let p = number(fields[0], s).ok_or_else(|| {
                TraceError::at(
                    n,
                    format!(
                        "expected a pixel index in column 1, found {}",
                        excerpt(fields[0], '"')
                    ),
                )
            })?;
            if p.fract() != 0.0 || !(0.0..=MAX_PIXEL_INDEX).contains(&p) {
                return Err(TraceError::at(
                    n,
                    format!(
                        "expected a whole pixel index 0..={MAX_PIXEL_INDEX} in column 1, found {}",
                        excerpt(fields[0], '"')
                    ),
                ));
            }
            if let Some(want) = next_pixel {
                if p != want {
                    return Err(TraceError::at(
                        n,
                        format!(
                            "expected pixel index {want} (one more than the line before), found {}",
                            excerpt(fields[0], '"')
                        ),
                    ));
                }
            }
            next_pixel = Some(p + 1.0);
        }
        let col = columns;
        let c = number(count_field, s).ok_or_else(|| {
            TraceError::at(
                n,
                format!(
                    "expected a count in column {col}, found {}",
                    excerpt(count_field, '"')
                ),
            )
        })?;
        let r = c.round();
        if r < 0.0 || r > u32::MAX as f64 {
            return Err(TraceError::at(
                n,
                format!(
                    "expected a count 0..={} in column {col}, found {}",
                    u32::MAX,
                    excerpt(count_field, '"')
                ),
            ));
        }
        if counts.len() == MAX_PIXELS {
            return Err(TraceError::at(n, format!("more than {MAX_PIXELS} pixels")));
        }
        counts.push(r as u32);
    }
    if counts.is_empty() {
        return Err(TraceError::file(
            "no counts found: expected a glowtrace file or CSV with one count per line",
        ));
    }
    let mut t = Trace::new(counts.len());
    t.frames.push(Frame {
        kind: FrameKind::Signal,
        counts,
    });
    Ok(t)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn counts(text: &str) -> Vec<u32> {
        let t = parse(text).unwrap();
        assert_eq!(t.frames.len(), 1);
        assert_eq!(t.pixels, t.frames[0].counts.len());
        t.frames[0].counts.clone()
    }

    #[test]
    fn shapes() {
        assert_eq!(counts("10\n20\n30\n"), [10, 20, 30]);
        assert_eq!(counts("counts\n10\n20.5\n29.49\n"), [10, 21, 29]);
        assert_eq!(counts("pixel,counts\n0,10\n1,20\n"), [10, 20]);
        assert_eq!(counts("1;10,4\n2;20,6\n"), [10, 21]);
        assert_eq!(counts("px\tADU\r\n5\t7\r\n6\t8\r\n"), [7, 8]);
        assert_eq!(counts("# exported\n\n0, 1e3\n1, 2\n"), [1000, 2]);
    }

    #[test]
    fn errors_name_the_line() {
        let e = parse("0,1\n1,2\n3,4\n").unwrap_err();
        assert_eq!(e.line, Some(3));
        assert!(e.message.contains("expected pixel index 2"), "{e}");
        let e = parse("a;b\n0;1\n1;2;3\n").unwrap_err();
        assert_eq!(e.line, Some(3));
        assert!(
            e.message.contains("expected 2 fields separated by ';'"),
            "{e}"
        );
        let e = parse("1\n2\nfoo\n").unwrap_err();
        assert_eq!(e.line, Some(3));
        assert!(e.message.contains("expected a count"), "{e}");
        let e = parse("1\n-4\n").unwrap_err();
        assert_eq!(e.line, Some(2));
        let e = parse("0.5,3\n").unwrap_err();
        assert_eq!(e.line, Some(1));
        assert!(e.message.contains("whole pixel index"), "{e}");
        let e = parse("1,2,3\n").unwrap_err();
        assert_eq!(e.line, Some(1));
        let e = parse("\n# nothing\n").unwrap_err();
        assert_eq!(e.line, None);
    }

    #[test]
    fn pixel_indices_rise_by_one_exactly() {
        // Past 2^53 an f64 index plus one is the same index: such files once passed as "rising by one".
        let e = parse("1e20,5\n1e20,6\n").unwrap_err();
        assert_eq!(e.line, Some(1));
        assert!(e.message.contains("0..=4294967295"), "{e}");
        assert_eq!(counts("4294967294,5\n4294967295,6\n"), [5, 6]);
        let e = parse("4294967295,5\n4294967296,6\n").unwrap_err();
        assert_eq!(e.line, Some(2));
        let e = parse("5,1\n7,2\n").unwrap_err();
        assert_eq!(
            e.message,
            "expected pixel index 6 (one more than the line before), found \"7\""
        );
    }

    #[test]
    fn errors_quote_a_bounded_excerpt() {
        let huge = "7".repeat(1 << 20);
        let cases = [
            format!("5\n{huge}x\n"),
            format!("0,5\n1,{huge}x\n"),
            format!("0,5\n1,-{huge}\n"),
            format!("0,5\n{huge}x,6\n"),
            format!("0,5\n{huge},6\n"),
            format!("0,5\n1.{huge},6\n"),
        ];
        for text in &cases {
            let m = parse(text).unwrap_err().to_string();
            crate::excerpt::assert_bounded(&m, 300);
        }
    }
}
