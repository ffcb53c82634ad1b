//! The one shape of a located error: where a value was read (a file and a
//! key, a line of a file, a column of a line), what was expected there and
//! what was found. Every layer's "expected … found …" message is built by
//! [`Located`]'s `Display`, whether the layer's error embeds a `Located` or
//! keeps its own fields and renders through [`Located::render`].
//!
//! This module is pure: it names no config, station or driver type, so every
//! layer may use it. The commands' error, [`crate::Error`], is the station
//! layer's (`src/station/error.rs`).

use std::fmt;
use std::path::PathBuf;

/// Where a value was read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Place {
    /// A key of a TOML file: `file: key `k``, or `key `k`` while the file
    /// is not known yet (see [`Located::within`]).
    Key { file: Option<PathBuf>, key: String },
    /// A line of a line-by-line file: `file, line N`.
    Line { file: PathBuf, line: usize },
    /// A column of a line of a table: `file:N: column`.
    Cell {
        file: PathBuf,
        line: usize,
        column: String,
    },
    /// A place already put in words (`position journal x.state:3`).
    Named(String),
}

impl Place {
    /// `file: key `k``.
    pub fn key(file: impl Into<PathBuf>, key: impl Into<String>) -> Place {
        Place::Key {
            file: Some(file.into()),
            key: key.into(),
        }
    }

    /// `key `k``, its file named later.
    pub fn bare_key(key: impl Into<String>) -> Place {
        Place::Key {
            file: None,
            key: key.into(),
        }
    }
}

impl fmt::Display for Place {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Place::Key {
                file: Some(file),
                key,
            } => write!(f, "{}: key `{key}`", file.display()),
            Place::Key { file: None, key } => write!(f, "key `{key}`"),
            Place::Line { file, line } => write!(f, "{}, line {line}", file.display()),
            Place::Cell { file, line, column } => {
                write!(f, "{}:{line}: {column}", file.display())
            }
            Place::Named(words) => f.write_str(words),
        }
    }
}

/// A value that is not what it should be: `{at}: expected {expected},
/// found {found}`.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{at}: expected {expected}, found {found}")]
pub struct Located {
    pub at: Place,
    pub expected: String,
    pub found: String,
}

impl Located {
    pub fn new(at: Place, expected: impl Into<String>, found: impl Into<String>) -> Located {
        Located {
            at,
            expected: expected.into(),
            found: found.into(),
        }
    }

    /// A value read at a place put in words (a device, a file, a URL, a
    /// command-line option).
    pub fn named(
        at: impl Into<String>,
        expected: impl Into<String>,
        found: impl Into<String>,
    ) -> Located {
        Located::new(Place::Named(at.into()), expected, found)
    }

    /// The message for an error that keeps its own fields (a variant that
    /// callers destructure): the same words as a `Located`.
    pub fn render(at: Place, expected: &str, found: &str) -> String {
        Located::new(at, expected, found).to_string()
    }

    /// The same error, its key placed in `file` (a key named before the
    /// file was known); other places are left as they are.
    pub fn within(self, file: &str) -> Located {
        let at = match self.at {
            Place::Key { file: None, key } => Place::key(file, key),
            other => other,
        };
        Located { at, ..self }
    }
}

/// An operation a driver carried out for a pure layer (an output line set,
/// a journal written, a config read again) that failed: what it acted on
/// and what went wrong, worded by the driver. The sans-IO core takes its
/// driver's failures in this shape and never holds an `io::Error`.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{what}: {detail}")]
pub struct IoFailure {
    pub what: String,
    pub detail: String,
}

impl IoFailure {
    pub fn new(what: impl Into<String>, detail: impl fmt::Display) -> IoFailure {
        IoFailure {
            what: what.into(),
            detail: detail.to_string(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_place_reads_before_expected_and_found() {
        let cases = [
            (Place::key("s.toml", "rig.baud"), "s.toml: key `rig.baud`"),
            (Place::bare_key("rig.baud"), "key `rig.baud`"),
            (
                Place::Line {
                    file: "c.cap".into(),
                    line: 7,
                },
                "c.cap, line 7",
            ),
            (
                Place::Cell {
                    file: "p.csv".into(),
                    line: 3,
                    column: "hz".into(),
                },
                "p.csv:3: hz",
            ),
            (
                Place::Named("position journal j:2".into()),
                "position journal j:2",
            ),
        ];
        for (at, words) in cases {
            let e = Located::new(at, "a positive baud rate", "0");
            assert_eq!(
                e.to_string(),
                format!("{words}: expected a positive baud rate, found 0")
            );
        }
    }

    #[test]
    fn an_io_failure_names_what_it_acted_on_first() {
        let e = IoFailure::new("inhibit line", "permission denied");
        assert_eq!(e.to_string(), "inhibit line: permission denied");
    }

    #[test]
    fn within_names_the_file_of_a_bare_key_only() {
        let e = Located::new(Place::bare_key("rig.baud"), "x", "y").within("s.toml");
        assert_eq!(e.to_string(), "s.toml: key `rig.baud`: expected x, found y");
        let e = Located::new(Place::key("a.toml", "k"), "x", "y").within("s.toml");
        assert_eq!(e.to_string(), "a.toml: key `k`: expected x, found y");
    }
}
