//! Quoting input in error messages: a bad field may be megabytes long, and one error line must stay
//! readable, so a message shows at most [`MAX_CHARS`] characters of it and says how long it really was.
//!
//! Shared by the trace/CSV readers and the TOML file readers (the fuzz targets compile it in with
//! `#[path]` next to them).

/// Most characters of a piece of input an error message quotes.
pub const MAX_CHARS: usize = 40;

/// `text` between two `mark`s, escaped as Rust's `{:?}` escapes a string (control characters, quotes and
/// backslashes visible); longer than [`MAX_CHARS`] characters, only its first [`MAX_CHARS`] (cut on a
/// character boundary) followed by `…`, then the full length: `"7777…" (4194304 bytes)`.
///
/// With `mark` = `"` a short text reads exactly as `format!("{text:?}")`.
pub fn excerpt(text: &str, mark: char) -> String {
    let (head, cut) = match text.char_indices().nth(MAX_CHARS) {
        Some((end, _)) => (text.get(..end).unwrap_or(""), true),
        None => (text, false),
    };
    let quoted = format!("{head:?}");
    // `{:?}` of a str always starts and ends with `"`.
    let inner = quoted
        .strip_prefix('"')
        .and_then(|q| q.strip_suffix('"'))
        .unwrap_or(&quoted);
    if cut {
        format!("{mark}{inner}…{mark} ({} bytes)", text.len())
    } else {
        format!("{mark}{inner}{mark}")
    }
}

/// Test check shared by the readers: `message` quotes an oversized input as an excerpt and stays
/// under `limit` bytes.
#[cfg(test)]
pub fn assert_bounded(message: &str, limit: usize) {
    assert!(
        message.len() < limit,
        "{} bytes: {}",
        message.len(),
        message.get(..limit).unwrap_or(message)
    );
    assert!(
        message.contains("…") && message.contains(" bytes)"),
        "{message}"
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_text_is_quoted_whole_as_debug_does() {
        for s in [
            "",
            "abc",
            "1\u{0}01",
            "tab\there",
            "say \"hi\"",
            "λ nm",
            &"x".repeat(MAX_CHARS),
        ] {
            assert_eq!(excerpt(s, '"'), format!("{s:?}"));
        }
        assert_eq!(excerpt("sensor.colour", '`'), "`sensor.colour`");
        assert_eq!(excerpt("it", '\''), "'it'");
    }

    #[test]
    fn long_text_is_cut_with_its_length() {
        let s = "7".repeat(4 << 20);
        let e = excerpt(&s, '"');
        assert_eq!(e, format!("\"{}…\" (4194304 bytes)", "7".repeat(MAX_CHARS)));
        let one_more = "y".repeat(MAX_CHARS + 1);
        assert_eq!(
            excerpt(&one_more, '`'),
            format!("`{}…` ({} bytes)", "y".repeat(MAX_CHARS), MAX_CHARS + 1)
        );
    }

    #[test]
    fn cut_falls_on_a_character_boundary() {
        // 2-, 3- and 4-byte characters: the head is whole characters, the count is in bytes.
        for c in ['λ', '…', '𝜆'] {
            let s: String = std::iter::repeat_n(c, 100).collect();
            let e = excerpt(&s, '"');
            let head: String = std::iter::repeat_n(c, MAX_CHARS).collect();
            assert_eq!(e, format!("\"{head}…\" ({} bytes)", 100 * c.len_utf8()));
        }
    }

    #[test]
    fn escapes_count_against_the_input_not_the_output() {
        // 41 NUL characters: 40 are shown (each escaped as \0), then the cut.
        let s = "\u{0}".repeat(MAX_CHARS + 1);
        let e = excerpt(&s, '"');
        assert_eq!(e, format!("\"{}…\" (41 bytes)", "\\0".repeat(MAX_CHARS)));
    }
}
