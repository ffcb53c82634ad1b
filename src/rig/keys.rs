//! Typed access to a dialect's TOML tables, with errors that name the file,
//! the key, what was expected and what was found. Shared by the dialect
//! loader and each family's own spec reader.

use std::path::{Path, PathBuf};

use super::meter::{MeterKind, MeterScale};
use crate::error::{Located, Place};

/// Why a dialect could not be had.
#[derive(Debug, thiserror::Error)]
pub enum DialectError {
    #[error("{file}: cannot read the dialect file: {source}")]
    Io {
        file: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{file}: not valid TOML: {message}")]
    Syntax { file: PathBuf, message: String },
    #[error("{}", Located::render(Place::key(file, key.as_str()), expected, found))]
    Key {
        file: PathBuf,
        key: String,
        expected: String,
        found: String,
    },
    #[error("unknown dialect `{name}`: expected a built-in dialect ({builtins}) or a path to a dialect TOML file (ending in .toml or containing a `/`)")]
    Unknown { name: String, builtins: String },
}

/// Typed access to TOML tables with located errors.
pub(crate) struct Reader<'a> {
    pub(crate) file: &'a Path,
}

fn dotted(prefix: &str, key: &str) -> String {
    if prefix.is_empty() {
        key.to_string()
    } else {
        format!("{prefix}.{key}")
    }
}

fn describe(v: &toml::Value) -> String {
    match v {
        toml::Value::String(s) => format!("the string {s:?}"),
        toml::Value::Integer(i) => format!("the integer {i}"),
        toml::Value::Float(f) => format!("the float {f}"),
        toml::Value::Boolean(b) => format!("the boolean {b}"),
        toml::Value::Datetime(d) => format!("the date {d}"),
        toml::Value::Array(_) => "an array".to_string(),
        toml::Value::Table(_) => "a table".to_string(),
    }
}

impl Reader<'_> {
    pub(crate) fn err(&self, key: &str, expected: &str, found: String) -> DialectError {
        DialectError::Key {
            file: self.file.to_path_buf(),
            key: key.to_string(),
            expected: expected.to_string(),
            found,
        }
    }

    pub(crate) fn get<'t>(
        &self,
        t: &'t toml::Table,
        prefix: &str,
        key: &str,
        expected: &str,
    ) -> Result<&'t toml::Value, DialectError> {
        t.get(key).ok_or_else(|| {
            self.err(
                &dotted(prefix, key),
                expected,
                "nothing (the key is missing)".into(),
            )
        })
    }

    pub(crate) fn only(
        &self,
        t: &toml::Table,
        prefix: &str,
        allowed: &[&str],
    ) -> Result<(), DialectError> {
        match t.keys().find(|k| !allowed.contains(&k.as_str())) {
            Some(k) => Err(self.err(
                &dotted(prefix, k),
                &format!("one of the keys {}", allowed.join(", ")),
                "an unknown key".into(),
            )),
            None => Ok(()),
        }
    }

    pub(crate) fn table<'t>(
        &self,
        t: &'t toml::Table,
        prefix: &str,
        key: &str,
    ) -> Result<&'t toml::Table, DialectError> {
        match self.get(t, prefix, key, "a table")? {
            toml::Value::Table(inner) => Ok(inner),
            v => Err(self.err(&dotted(prefix, key), "a table", describe(v))),
        }
    }

    pub(crate) fn string(
        &self,
        t: &toml::Table,
        prefix: &str,
        key: &str,
    ) -> Result<String, DialectError> {
        match self.get(t, prefix, key, "a string")? {
            toml::Value::String(s) => Ok(s.clone()),
            v => Err(self.err(&dotted(prefix, key), "a string", describe(v))),
        }
    }

    pub(crate) fn int(
        &self,
        t: &toml::Table,
        prefix: &str,
        key: &str,
        min: i64,
        max: i64,
    ) -> Result<i64, DialectError> {
        let expected = format!("an integer from {min} to {max}");
        match self.get(t, prefix, key, &expected)? {
            toml::Value::Integer(i) if (min..=max).contains(i) => Ok(*i),
            v => Err(self.err(&dotted(prefix, key), &expected, describe(v))),
        }
    }

    pub(crate) fn byte(
        &self,
        t: &toml::Table,
        prefix: &str,
        key: &str,
    ) -> Result<u8, DialectError> {
        let v = self.int(t, prefix, key, 0, 255)?;
        u8::try_from(v).map_err(|_| self.err(&dotted(prefix, key), "a byte", v.to_string()))
    }

    /// A two-letter upper-case command.
    pub(crate) fn code(
        &self,
        t: &toml::Table,
        prefix: &str,
        key: &str,
    ) -> Result<[u8; 2], DialectError> {
        let s = self.string(t, prefix, key)?;
        match s.as_bytes() {
            [a, b] if a.is_ascii_uppercase() && b.is_ascii_uppercase() => Ok([*a, *b]),
            _ => Err(self.err(
                &dotted(prefix, key),
                "two upper-case letters",
                format!("{s:?}"),
            )),
        }
    }

    /// A meter scale: an array of `[raw, value]` pairs, raw an integer
    /// 0..=65535 rising, value a number rising (an integer is taken as a
    /// number).
    pub(crate) fn scale(
        &self,
        t: &toml::Table,
        prefix: &str,
        key: &str,
    ) -> Result<MeterScale, DialectError> {
        const EXPECTED: &str =
            "an array of [raw, value] pairs, raw an integer from 0 to 65535, value a number";
        let at = dotted(prefix, key);
        let v = self.get(t, prefix, key, EXPECTED)?;
        let toml::Value::Array(items) = v else {
            return Err(self.err(&at, EXPECTED, describe(v)));
        };
        let mut points = Vec::with_capacity(items.len());
        for (i, item) in items.iter().enumerate() {
            let pair = match item {
                toml::Value::Array(p) => p.as_slice(),
                v => return Err(self.err(&at, EXPECTED, format!("{} at {i}", describe(v)))),
            };
            let point = match pair {
                [toml::Value::Integer(r), v] => {
                    let value = match v {
                        toml::Value::Float(f) => Some(*f),
                        toml::Value::Integer(n) => Some(*n as f64),
                        _ => None,
                    };
                    u16::try_from(*r).ok().zip(value)
                }
                _ => None,
            };
            match point {
                Some(p) => points.push(p),
                None => {
                    return Err(self.err(
                        &at,
                        EXPECTED,
                        format!("{} at {i}", toml::Value::Array(pair.to_vec())),
                    ))
                }
            }
        }
        MeterScale::new(points).map_err(|e| self.err(&at, e.expected, e.found))
    }

    /// The meter kinds a `[meter]` table may name, each an optional table
    /// of its own; the key names of the kinds present, in
    /// [`MeterKind::ALL`] order.
    pub(crate) fn meter_tables<'t>(
        &self,
        meter: &'t toml::Table,
    ) -> Result<Vec<(MeterKind, &'t toml::Table)>, DialectError> {
        let names: Vec<&str> = MeterKind::ALL.iter().map(|k| k.as_str()).collect();
        self.only(meter, "meter", &names)?;
        let mut out = Vec::new();
        for kind in MeterKind::ALL {
            if meter.contains_key(kind.as_str()) {
                out.push((kind, self.table(meter, "meter", kind.as_str())?));
            }
        }
        Ok(out)
    }
}
