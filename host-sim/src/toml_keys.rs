//! Reading typed values out of a parsed TOML table with errors that name the key, and refusing keys
//! nobody reads (a typo must not silently fall back to a default).
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
                "unknown key `{}` (misspelt? the README lists the keys)",
                self.name(k)
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
        Value::String(s) => format!("the string {s:?}"),
        Value::Integer(i) => format!("the whole number {i}"),
        Value::Float(f) => format!("the number {f}"),
        Value::Boolean(b) => format!("{b}"),
        other => other.type_str().to_string(),
    }
}

/// Parses TOML text, naming the file in the error.
pub fn parse(text: &str, what: &str) -> Result<Table, String> {
    text.parse::<Table>()
        .map_err(|e| format!("{what}: not valid TOML: {}", e.to_string().trim_end()))
}
