//! Reading typed values out of a parsed TOML table with errors that name the key, and refusing keys
//! nobody reads (a typo must not silently fall back to a default). Input quoted in a message is cut to
//! a short excerpt ([`crate::excerpt`]).
use crate::excerpt::excerpt;
use std::cell::RefCell;
use toml::{Table, Value};

/// One table of a file being read: remembers which keys were taken.
pub struct Section<'a> {
    table: &'a Table,
    /// Dotted path of this table ("" for the top level), for messages.
    path: String,
    taken: RefCell<Vec<String>>,
}

impl<'a> Section<'a> {
    /// The top level of a file.
    pub fn top(table: &'a Table) -> Self {
        Section {
            table,
            path: String::new(),
            taken: RefCell::new(Vec::new()),
        }
    }

    /// The full name of `key` in this table.
    pub fn name(&self, key: &str) -> String {
        if self.path.is_empty() {
            key.to_string()
        } else {
            format!("{}.{key}", self.path)
        }
    }

    fn get(&self, key: &str) -> Option<&'a Value> {
        self.taken.borrow_mut().push(key.to_string());
        self.table.get(key)
    }

    /// A sub-table, or `None` when absent.
    pub fn table(&self, key: &str) -> Result<Option<Section<'a>>, String> {
        match self.get(key) {
            None => Ok(None),
            Some(Value::Table(t)) => Ok(Some(Section {
                table: t,
                path: self.name(key),
                taken: RefCell::new(Vec::new()),
            })),
            Some(v) => Err(format!(
                "`{}`: expected a table, found {}",
                self.name(key),
                v.type_str()
            )),
        }
    }

    /// An array of tables (`[[key]]`), empty when absent.
    pub fn tables(&self, key: &str) -> Result<Vec<Section<'a>>, String> {
        match self.get(key) {
            None => Ok(Vec::new()),
            Some(Value::Array(a)) => a
                .iter()
                .enumerate()
                .map(|(i, v)| match v {
                    Value::Table(t) => Ok(Section {
                        table: t,
                        path: format!("{}[{i}]", self.name(key)),
                        taken: RefCell::new(Vec::new()),
                    }),
                    v => Err(format!(
                        "`{}[{i}]`: expected a table, found {}",
                        self.name(key),
                        v.type_str()
                    )),
                })
                .collect(),
            Some(v) => Err(format!(
                "`{}`: expected an array of tables ([[{key}]]), found {}",
                self.name(key),
                v.type_str()
            )),
        }
    }

    /// The raw value, when present.
    pub fn value(&self, key: &str) -> Option<&'a Value> {
        self.get(key)
    }

    /// A number (integer or float) or `None` when absent.
    pub fn f64_opt(&self, key: &str) -> Result<Option<f64>, String> {
        match self.get(key) {
            None => Ok(None),
            Some(v) => number(v)
                .filter(|x| x.is_finite())
                .map(Some)
                .ok_or_else(|| {
                    format!(
                        "`{}`: expected a number, found {}",
                        self.name(key),
                        describe(v)
                    )
                }),
        }
    }

    /// A required number inside `range` (inclusive), unit in `what` for the message.
    pub fn f64_in(&self, key: &str, lo: f64, hi: f64, what: &str) -> Result<f64, String> {
        let v = self
            .f64_opt(key)?
            .ok_or_else(|| format!("missing key `{}` ({what})", self.name(key)))?;
        self.check_range(key, v, lo, hi)
    }

    /// An optional number inside `range`.
    pub fn f64_in_opt(&self, key: &str, lo: f64, hi: f64) -> Result<Option<f64>, String> {
        self.f64_opt(key)?
            .map(|v| self.check_range(key, v, lo, hi))
            .transpose()
    }

    fn check_range(&self, key: &str, v: f64, lo: f64, hi: f64) -> Result<f64, String> {
        if (lo..=hi).contains(&v) {
            Ok(v)
        } else {
            Err(format!(
                "`{}` = {v}: must lie in {lo} ..= {hi}",
                self.name(key)
            ))
        }
    }

    /// A whole number in `lo ..= hi`, or `None` when absent.
    pub fn int_opt(&self, key: &str, lo: i64, hi: i64) -> Result<Option<i64>, String> {
        match self.get(key) {
            None => Ok(None),
            Some(Value::Integer(i)) if (lo..=hi).contains(i) => Ok(Some(*i)),
            Some(Value::Integer(i)) => Err(format!(
                "`{}` = {i}: must lie in {lo} ..= {hi}",
                self.name(key)
            )),
            Some(v) => Err(format!(
                "`{}`: expected a whole number, found {}",
                self.name(key),
                describe(v)
            )),
        }
    }

    /// A required whole number in `lo ..= hi`.
    pub fn int_in(&self, key: &str, lo: i64, hi: i64, what: &str) -> Result<i64, String> {
        self.int_opt(key, lo, hi)?
            .ok_or_else(|| format!("missing key `{}` ({what})", self.name(key)))
    }

    /// A boolean or `None` when absent.
    pub fn bool_opt(&self, key: &str) -> Result<Option<bool>, String> {
        match self.get(key) {
            None => Ok(None),
            Some(Value::Boolean(b)) => Ok(Some(*b)),
            Some(v) => Err(format!(
                "`{}`: expected true or false, found {}",
                self.name(key),
                describe(v)
            )),
        }
    }

    /// A string or `None` when absent.
    pub fn str_opt(&self, key: &str) -> Result<Option<&'a str>, String> {
        match self.get(key) {
            None => Ok(None),
            Some(Value::String(s)) => Ok(Some(s.as_str())),
            Some(v) => Err(format!(
                "`{}`: expected a string, found {}",
                self.name(key),
                describe(v)
            )),
        }
    }

    /// An array of numbers with `min ..= max` entries, or `None` when absent.
    pub fn numbers_opt(
        &self,
        key: &str,
        min: usize,
        max: usize,
    ) -> Result<Option<Vec<f64>>, String> {
        let Some(v) = self.get(key) else {
            return Ok(None);
        };
        let Value::Array(a) = v else {
            return Err(format!(
                "`{}`: expected an array of numbers, found {}",
                self.name(key),
                describe(v)
            ));
        };
        if a.len() < min || a.len() > max {
            return Err(format!(
                "`{}`: expected {min} to {max} numbers, found {}",
                self.name(key),
                a.len()
            ));
        }
        a.iter()
            .enumerate()
            .map(|(i, x)| {
                number(x).filter(|x| x.is_finite()).ok_or_else(|| {
                    format!(
                        "`{}[{i}]`: expected a number, found {}",
                        self.name(key),
                        describe(x)
                    )
                })
            })
            .collect::<Result<Vec<f64>, String>>()
            .map(Some)
    }

    /// Fails on any key of this table that no one asked for.
    pub fn finish(&self) -> Result<(), String> {
        let taken = self.taken.borrow();
        let mut unknown: Vec<&String> = self
            .table
            .keys()
            .filter(|k| !taken.iter().any(|t| t == *k))
            .collect();
        unknown.sort();
        match unknown.first() {
            None => Ok(()),
            Some(k) => Err(format!(
                "unknown key {} (misspelt? the README lists the keys)",
                excerpt(&self.name(k), '`')
            )),
        }
    }
}

fn number(v: &Value) -> Option<f64> {
    match v {
        Value::Integer(i) => Some(*i as f64),
        Value::Float(f) => Some(*f),
        _ => None,
    }
}

fn describe(v: &Value) -> String {
    match v {
        Value::String(s) => format!("the string {}", excerpt(s, '"')),
        Value::Integer(i) => format!("the whole number {i}"),
        Value::Float(f) => format!("the number {f}"),
        Value::Boolean(b) => format!("{b}"),
        other => other.type_str().to_string(),
    }
}

/// Parses TOML text, naming the file in the error.
///
/// The parser's own report prints the whole offending line (megabytes, for a huge value); this one
/// says where, what, and quotes an excerpt of the line.
pub fn parse(text: &str, what: &str) -> Result<Table, String> {
    text.parse::<Table>().map_err(|e| {
        let message = e.message().trim_end();
        let Some(at) = e.span().map(|s| s.start.min(text.len())) else {
            return format!("{what}: not valid TOML: {message}");
        };
        // Byte offsets from the parser fall on character boundaries; `get` keeps a wrong one harmless.
        let before = text.get(..at).unwrap_or("");
        let line_start = before.rfind('\n').map_or(0, |i| i + 1);
        let line_no = before.matches('\n').count() + 1;
        let column = before.get(line_start..).map_or(0, |s| s.chars().count()) + 1;
        let rest = text.get(line_start..).unwrap_or("");
        let line = rest.split('\n').next().unwrap_or("").trim_end_matches('\r');
        format!(
            "{what}: not valid TOML: TOML parse error at line {line_no}, column {column}: {message} (line {line_no} is {})",
            excerpt(line, '"')
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_errors_say_where_and_quote_the_line() {
        let e = parse("a = 1\nb = [1,\n\"x\" = 2\n", "test file").unwrap_err();
        assert!(
            e.starts_with("test file: not valid TOML: TOML parse error at line 3, column "),
            "{e}"
        );
        let e = parse("[t]\nλ = 1\n", "f").unwrap_err();
        assert!(e.contains("at line 2, column 1: "), "{e}");
        assert!(e.ends_with("(line 2 is \"λ = 1\")"), "{e}");
        let e = parse("name = \"bench\n", "f").unwrap_err();
        assert!(e.contains("at line 1, column 14: "), "{e}");
    }

    #[test]
    fn errors_quote_a_bounded_excerpt() {
        let huge = "x".repeat(1 << 20);
        let texts = [
            format!("pixels = 7{}\n", "7".repeat(1 << 20)),
            format!("name = \"{huge}\n"),
            format!("a = 1\na = \"{huge}\"\n"),
        ];
        for t in &texts {
            let e = parse(t, "f").unwrap_err();
            crate::excerpt::assert_bounded(&e, 400);
        }
        let table = parse(&format!("v = \"{huge}\"\n{huge} = 1\n"), "f").unwrap();
        let top = Section::top(&table);
        let e = top.int_opt("v", 0, 1).unwrap_err();
        assert!(e.len() < 200 && e.contains("(1048576 bytes)"), "{e}");
        let e = top.finish().unwrap_err();
        assert!(e.len() < 200 && e.starts_with("unknown key `xxx"), "{e}");
        assert!(e.contains("…` (1048576 bytes)"), "{e}");
    }
}
