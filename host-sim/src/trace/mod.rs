//! Trace files: recorded or synthetic sensor frames with the metadata needed to interpret them.
//!
//! # The glowtrace text format, version 1
//!
//! A UTF-8 text file, one item per line. Line ends are `\n`, `\r\n` or a bare `\r` (old Mac style), in
//! any mix; a UTF-8 byte-order mark at the start is skipped. Lines that are empty or start with `#`
//! (after optional spaces) are comments and carry nothing.
//!
//! ```text
//! glowtrace 1
//! # header: `key: value`, one per line, before the first frame
//! pixels: 2048
//! adc_bits: 14
//! integration_us: 100000
//! sensor_temp_mc: 25000
//! wavelength_nm: 340.0 0.18 -6e-6
//! electrons_per_count: 2.0
//! coadded: 1
//! note: deuterium lamp, bench 2
//! synth.seed: 7
//! frame signal
//! 812 809 815 ...
//! frame dark
//! 803 801 ...
//! end
//! ```
//!
//! 1. **Magic line.** The first non-comment line is `glowtrace <version>` and nothing else; this code
//!    reads version 1 and rejects any other version by name.
//! 2. **Header keys** (`key: value`, the value trimmed of surrounding spaces):
//!    - `pixels` (required): pixel count of every frame, 1 to [`MAX_PIXELS`].
//!    - `adc_bits` (required): ADC resolution, 1 to 24; full scale is 2^bits − 1 counts.
//!    - `integration_us`: integration time per read in microseconds (whole number).
//!    - `sensor_temp_mc`: sensor temperature in milli-degrees Celsius (whole number, may be negative).
//!    - `wavelength_nm`: nominal wavelength map, 1 to 4 numbers c0 c1 c2 c3 separated by spaces:
//!      λ(p) = c0 + c1·p + c2·p² + c3·p³ in nm, p the pixel index (0 = first count of a frame).
//!    - `electrons_per_count`: sensor conversion gain (a number > 0), for shot-noise models.
//!    - `coadded`: how many reads were summed into each stored frame (default 1). Counts may reach
//!      `coadded` × full scale.
//!    - `note`: free text; may repeat, order kept.
//!    - Any other key must contain a dot (`tool.name`, e.g. `synth.seed`): kept verbatim and in order,
//!      may repeat, ignored by readers that do not know it. Keys are lower-case ASCII letters, digits,
//!      `_` and `.`, starting with a letter.
//!
//!    Keys without a dot may appear once (except `note`). Values must not contain line breaks.
//! 3. **Frames.** `frame signal` or `frame dark` opens a frame; then exactly `pixels` counts follow as
//!    whole decimal numbers separated by spaces or tabs, spread over any number of lines (writers put
//!    16 on a line). At least one frame.
//! 4. **End.** The line `end` closes the file; a file without it is reported as cut short. Only
//!    comments may follow.
//!
//! Every number is written so that reading it back gives the same value bit for bit (shortest
//! round-trip form for the map coefficients), so write → read is lossless.
//!
//! Plain CSV files (one column of counts, or `pixel,counts`) are read by [`csv`]; see there.
//!
//! Errors quote the offending input through [`crate::excerpt`]: at most a few dozen characters, so a
//! 4 MiB field gives a one-line message.

pub mod csv;
pub mod error;
pub mod native;

pub use error::TraceError;

/// Largest pixel count a trace file may declare.
pub const MAX_PIXELS: usize = 65_536;

/// Largest ADC resolution a trace file may declare.
pub const MAX_ADC_BITS: u8 = 24;

/// What a frame holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FrameKind {
    /// Light from the source (plus dark signal).
    Signal,
    /// Shutter closed or source off, same integration time: the dark signal to subtract.
    Dark,
}

impl FrameKind {
    /// The word used in trace files.
    pub fn word(self) -> &'static str {
        match self {
            FrameKind::Signal => "signal",
            FrameKind::Dark => "dark",
        }
    }
}

/// One readout (or a sum of `coadded` readouts) of the whole sensor.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Frame {
    /// Signal or dark.
    pub kind: FrameKind,
    /// Counts per pixel, index 0 = first pixel.
    pub counts: Vec<u32>,
}

/// A trace file's content.
#[derive(Clone, Debug, PartialEq)]
pub struct Trace {
    /// Pixels per frame.
    pub pixels: usize,
    /// ADC resolution; `None` only for CSV imports, which do not say.
    pub adc_bits: Option<u8>,
    /// Integration time per read in µs.
    pub integration_us: Option<u64>,
    /// Sensor temperature in m°C.
    pub sensor_temp_mc: Option<i64>,
    /// Nominal wavelength map c0..c3 (nm/px^k), 1 to 4 coefficients.
    pub wavelength_nm: Option<Vec<f64>>,
    /// Conversion gain in electrons per count.
    pub electrons_per_count: Option<f64>,
    /// Reads summed into each frame.
    pub coadded: u32,
    /// Free notes in order.
    pub notes: Vec<String>,
    /// Dotted keys of other tools, verbatim and in order.
    pub extras: Vec<(String, String)>,
    /// Frames in file order.
    pub frames: Vec<Frame>,
}

impl Trace {
    /// An empty trace for `pixels` pixels with nothing else known.
    pub fn new(pixels: usize) -> Self {
        Trace {
            pixels,
            adc_bits: None,
            integration_us: None,
            sensor_temp_mc: None,
            wavelength_nm: None,
            electrons_per_count: None,
            coadded: 1,
            notes: Vec::new(),
            extras: Vec::new(),
            frames: Vec::new(),
        }
    }

    /// Frames of one kind, in file order.
    pub fn frames_of(&self, kind: FrameKind) -> impl Iterator<Item = &Frame> {
        self.frames.iter().filter(move |f| f.kind == kind)
    }

    /// Largest count a frame may hold: `coadded` × ADC full scale (no limit when the ADC is unknown).
    pub fn max_count(&self) -> u64 {
        match self.adc_bits {
            Some(b) => ((1u64 << b.min(MAX_ADC_BITS)) - 1).saturating_mul(self.coadded as u64),
            None => u32::MAX as u64,
        }
    }

    /// Values of a dotted key, in order.
    pub fn extra<'a>(&'a self, key: &'a str) -> impl Iterator<Item = &'a str> + 'a {
        self.extras
            .iter()
            .filter(move |(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }

    /// Reads a trace from a file: glowtrace when the first meaningful line says so, CSV otherwise.
    pub fn read_path(path: &std::path::Path) -> Result<Trace, String> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| format!("cannot read {}: {e}", path.display()))?;
        Trace::parse_any(&text).map_err(|e| format!("{}: {e}", path.display()))
    }

    /// Parses text in either format.
    pub fn parse_any(text: &str) -> Result<Trace, TraceError> {
        // A UTF-8 byte-order mark (spreadsheet exports add one) is not part of the first line.
        let text = text.strip_prefix('\u{feff}').unwrap_or(text);
        if native::looks_native(text) {
            native::parse(text)
        } else {
            csv::parse(text)
        }
    }

    /// Writes the trace as glowtrace to a file.
    pub fn write_path(&self, path: &std::path::Path) -> Result<(), String> {
        let text = native::to_text(self).map_err(|e| e.to_string())?;
        std::fs::write(path, text).map_err(|e| format!("cannot write {}: {e}", path.display()))
    }
}

/// The lines of a text file, for both readers: ends are `\n`, `\r\n` or a bare `\r`; the end of the
/// last line is optional and does not start an empty line (as [`str::lines`], which knows no bare `\r`).
fn lines(text: &str) -> impl Iterator<Item = &str> {
    let mut rest = text;
    std::iter::from_fn(move || {
        if rest.is_empty() {
            return None;
        }
        let (line, after) = match rest.find(['\r', '\n']) {
            Some(end) => {
                let (line, tail) = rest.split_at(end);
                let tail = tail
                    .strip_prefix("\r\n")
                    .or_else(|| tail.get(1..))
                    .unwrap_or("");
                (line, tail)
            }
            None => (rest, ""),
        };
        rest = after;
        Some(line)
    })
}

/// Writes to standard output; a reader that stops early (`| head`) is not an error.
pub fn write_stdout(text: &str) -> Result<(), String> {
    use std::io::Write as _;
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        Err(e) => Err(format!("cannot write to standard output: {e}")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn split(text: &str) -> Vec<&str> {
        lines(text).collect()
    }

    #[test]
    fn lines_end_at_lf_crlf_or_bare_cr() {
        assert_eq!(split("a\nb\r\nc\rd"), ["a", "b", "c", "d"]);
        assert_eq!(split("a\rb\r"), ["a", "b"]);
        // Empty lines are kept, whatever ends them; `\r\r\n` is a bare CR, then CRLF.
        assert_eq!(split("a\r\rb\n\nc\r\r\n"), ["a", "", "b", "", "c", ""]);
        assert!(split("").is_empty());
        assert_eq!(split("\n"), [""]);
        assert_eq!(split("λ\rμ"), ["λ", "μ"]);
    }

    #[test]
    fn lines_agree_with_str_lines_without_bare_cr() {
        for t in ["", "a", "a\n", "a\n\n", "a\r\nb\r\n", "\n\nx", "x\r\n\r\ny"] {
            assert_eq!(split(t), t.lines().collect::<Vec<_>>(), "{t:?}");
        }
    }

    #[test]
    fn bare_cr_and_byte_order_mark_read_like_lf() {
        let lf = "glowtrace 1\npixels: 3\nadc_bits: 8\n# c\nframe signal\n1 2 3\nend\n";
        let want = Trace::parse_any(lf).unwrap();
        assert_eq!(Trace::parse_any(&lf.replace('\n', "\r")).unwrap(), want);
        assert_eq!(Trace::parse_any(&format!("\u{feff}{lf}")).unwrap(), want);
        let csv = "pixel,counts\n0,5\n1,6\n";
        let want = Trace::parse_any(csv).unwrap();
        assert_eq!(Trace::parse_any(&csv.replace('\n', "\r")).unwrap(), want);
        assert_eq!(Trace::parse_any(&format!("\u{feff}{csv}")).unwrap(), want);
        // Line numbers count bare-CR line ends.
        let e = Trace::parse_any("glowtrace 1\rpixels: 3\radc_bits: 8\rframe dark\r1 x 3\rend\r");
        assert_eq!(e.unwrap_err().line, Some(5));
    }
}
