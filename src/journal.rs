//! The position journal: a small state file that says where the motor is,
//! or that it was moving when the service stopped, so that a crash or a
//! power cut never leaves the service believing a position it cannot know.
//!
//! # Format
//!
//! Plain text, one `key=value` per line; lines starting with `#` and blank
//! lines are ignored. Every file has `format=1` and a `state`:
//!
//! ```text
//! # tuneward position journal (change it with `tuneward set-position`)
//! format=1
//! state=at
//! position=4200
//! ```
//!
//! `state=at` with `position=N`: the motor came to rest at step `N`.
//! `state=moving` with `from=A` and `to=B`: a move from `A` to `B` was
//! started and its arrival was never recorded, so the position is somewhere
//! between (or anywhere, if the controller lost steps).
//!
//! # Crash safety
//!
//! Before each move the service records the intent (`moving`), after the
//! arrival the position (`at`). Each write goes to a temporary file beside
//! the journal (`.<name>.tmp`), is flushed to disk (`fsync`), renamed over
//! the journal (atomic on POSIX file systems) and then the folder is
//! flushed so the rename itself survives a power cut. A reader therefore
//! sees the old record or the new one, never a mixture; a leftover
//! temporary file from an interrupted write is ignored and overwritten.

use std::fs::{self, File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

use crate::error::{Located, Place};
/// What the journal says.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Recorded {
    /// At rest at this position.
    Known(i64),
    /// A move was under way and did not finish (as far as the file knows).
    Unknown { from: i64, to: i64 },
}

/// A journal that could not be read or written.
#[derive(Debug, thiserror::Error)]
pub enum JournalError {
    #[error("position journal {path}: {action}: {source}")]
    Io {
        path: PathBuf,
        action: &'static str,
        #[source]
        source: io::Error,
    },
    #[error("{}; fix it or run `tuneward set-position` once the motor's position is known", Located::render(journal_place(path, *line), expected, found))]
    Corrupt {
        path: PathBuf,
        line: Option<usize>,
        expected: String,
        found: String,
    },
}

/// `position journal FILE` or `position journal FILE:LINE`.
fn journal_place(path: &Path, line: Option<usize>) -> Place {
    Place::Named(match line {
        Some(l) => format!("position journal {}:{l}", path.display()),
        None => format!("position journal {}", path.display()),
    })
}

/// The journal file.
#[derive(Debug, Clone)]
pub struct Journal {
    path: PathBuf,
}

/// File name used when the config names none.
pub const DEFAULT_STATE_FILE: &str = "tuneward-position.state";

impl Journal {
    pub fn new(path: impl Into<PathBuf>) -> Journal {
        Journal { path: path.into() }
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// What the journal says; `None` if there is no journal yet.
    pub fn load(&self) -> Result<Option<Recorded>, JournalError> {
        match fs::read(&self.path) {
            Ok(bytes) => parse(&bytes, &self.path).map(Some),
            Err(e) if e.kind() == io::ErrorKind::NotFound => Ok(None),
            Err(source) => Err(JournalError::Io {
                path: self.path.clone(),
                action: "cannot read",
                source,
            }),
        }
    }

    /// Records that a move from `from` to `to` is starting.
    pub fn record_intent(&self, from: i64, to: i64) -> Result<(), JournalError> {
        self.write(&format!("state=moving\nfrom={from}\nto={to}\n"))
    }

    /// Records that the motor is at rest at `steps`.
    pub fn record_position(&self, steps: i64) -> Result<(), JournalError> {
        self.write(&format!("state=at\nposition={steps}\n"))
    }

    fn temp_path(&self) -> PathBuf {
        let name = self
            .path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| DEFAULT_STATE_FILE.to_string());
        self.path.with_file_name(format!(".{name}.tmp"))
    }

    fn write(&self, body: &str) -> Result<(), JournalError> {
        let io_err = |action: &'static str| {
            let path = self.path.clone();
            move |source| JournalError::Io {
                path,
                action,
                source,
            }
        };
        let text = format!(
            "# tuneward position journal (change it with `tuneward set-position`)\nformat=1\n{body}"
        );
        let tmp = self.temp_path();
        let mut f = OpenOptions::new()
            .write(true)
            .create(true)
            .truncate(true)
            .open(&tmp)
            .map_err(io_err("cannot create the temporary file"))?;
        f.write_all(text.as_bytes())
            .map_err(io_err("cannot write the temporary file"))?;
        f.sync_all()
            .map_err(io_err("cannot flush the temporary file to disk"))?;
        drop(f);
        fs::rename(&tmp, &self.path).map_err(io_err("cannot rename the temporary file"))?;
        let dir = match self.path.parent() {
            Some(d) if !d.as_os_str().is_empty() => d,
            _ => Path::new("."),
        };
        File::open(dir)
            .and_then(|d| d.sync_all())
            .map_err(io_err("cannot flush the folder to disk"))?;
        Ok(())
    }
}

/// Reads a journal's text; `path` only names the file in errors.
pub fn parse(bytes: &[u8], path: &Path) -> Result<Recorded, JournalError> {
    let corrupt = |line: Option<usize>, expected: &str, found: String| JournalError::Corrupt {
        path: path.to_path_buf(),
        line,
        expected: expected.to_string(),
        found,
    };
    let text = std::str::from_utf8(bytes).map_err(|e| {
        corrupt(
            None,
            "UTF-8 text",
            format!("a byte that is not, at offset {}", e.valid_up_to()),
        )
    })?;
    let mut format = None;
    let mut state = None;
    let mut position = None;
    let mut from = None;
    let mut to = None;
    for (i, raw) in text.lines().enumerate() {
        let n = i + 1;
        let line = raw.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let Some((key, value)) = line.split_once('=') else {
            return Err(corrupt(Some(n), "`key=value`", format!("`{}`", clip(line))));
        };
        let (key, value) = (key.trim(), value.trim());
        let slot = match key {
            "format" => &mut format,
            "state" => &mut state,
            "position" => &mut position,
            "from" => &mut from,
            "to" => &mut to,
            _ => {
                return Err(corrupt(
                    Some(n),
                    "one of the keys format, state, position, from, to",
                    format!("`{}`", clip(key)),
                ))
            }
        };
        if slot.is_some() {
            return Err(corrupt(
                Some(n),
                &format!("`{key}` once"),
                "it again".to_string(),
            ));
        }
        *slot = Some((n, value.to_string()));
    }
    match &format {
        Some((_, v)) if v == "1" => {}
        Some((n, v)) => {
            return Err(corrupt(
                Some(*n),
                "`format=1`",
                format!("`format={}`", clip(v)),
            ))
        }
        None => {
            return Err(corrupt(
                None,
                "a `format=1` line",
                "none (empty or truncated file?)".to_string(),
            ))
        }
    }
    let number = |slot: &Option<(usize, String)>, key: &str| -> Result<i64, JournalError> {
        match slot {
            Some((n, v)) => v.parse::<i64>().map_err(|_| {
                corrupt(
                    Some(*n),
                    &format!("`{key}=` a whole number of steps"),
                    format!("`{}`", clip(v)),
                )
            }),
            None => Err(corrupt(
                None,
                &format!("a `{key}=` line"),
                "none".to_string(),
            )),
        }
    };
    let unexpected = |slot: &Option<(usize, String)>, key: &str, state: &str| match slot {
        Some((n, _)) => Err(corrupt(
            Some(*n),
            &format!("no `{key}` with `state={state}`"),
            format!("`{key}`"),
        )),
        None => Ok(()),
    };
    match state.as_ref().map(|(n, v)| (*n, v.as_str())) {
        Some((_, "at")) => {
            unexpected(&from, "from", "at")?;
            unexpected(&to, "to", "at")?;
            Ok(Recorded::Known(number(&position, "position")?))
        }
        Some((_, "moving")) => {
            unexpected(&position, "position", "moving")?;
            Ok(Recorded::Unknown {
                from: number(&from, "from")?,
                to: number(&to, "to")?,
            })
        }
        Some((n, other)) => Err(corrupt(
            Some(n),
            "`state=at` or `state=moving`",
            format!("`state={}`", clip(other)),
        )),
        None => Err(corrupt(None, "a `state=` line", "none".to_string())),
    }
}

fn clip(s: &str) -> String {
    s.chars().take(40).collect()
}

/// What `tuneward set-position` is asked to do: the operator says where
/// the motor is.
#[derive(Debug, Clone)]
pub struct SetPositionOptions {
    /// The motor's position in steps, as the operator has established it
    /// (after homing, or by reading a scale).
    pub steps: i64,
    /// The station's config file; its `tuner.state_file` (default
    /// `tuneward-position.state` beside the config) is written.
    pub config: PathBuf,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_file_is_none() {
        let dir = tempfile::tempdir().unwrap();
        let j = Journal::new(dir.path().join("p.state"));
        assert_eq!(j.load().unwrap(), None);
    }

    #[test]
    fn arrival_after_intent_is_known() {
        let dir = tempfile::tempdir().unwrap();
        let j = Journal::new(dir.path().join("p.state"));
        j.record_intent(100, 4200).unwrap();
        j.record_position(4200).unwrap();
        assert_eq!(j.load().unwrap(), Some(Recorded::Known(4200)));
        let text = fs::read_to_string(j.path()).unwrap();
        assert!(text.contains("state=at\nposition=4200\n"), "{text}");
    }

    #[test]
    fn crash_between_intent_and_arrival_leaves_the_position_unknown() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("p.state");
        {
            let j = Journal::new(&path);
            j.record_position(-30).unwrap();
            j.record_intent(-30, 900).unwrap();
            // The process dies here: no arrival is recorded.
        }
        let after_restart = Journal::new(&path);
        assert_eq!(
            after_restart.load().unwrap(),
            Some(Recorded::Unknown { from: -30, to: 900 })
        );
    }

    #[test]
    fn a_write_interrupted_before_the_rename_leaves_the_old_record() {
        let dir = tempfile::tempdir().unwrap();
        let j = Journal::new(dir.path().join("p.state"));
        j.record_position(77).unwrap();
        // A crash mid-write leaves a partial temporary file behind.
        fs::write(
            dir.path().join(".p.state.tmp"),
            "# tuneward\nformat=1\nstate=mov",
        )
        .unwrap();
        assert_eq!(j.load().unwrap(), Some(Recorded::Known(77)));
        j.record_intent(77, 80).unwrap();
        assert_eq!(
            j.load().unwrap(),
            Some(Recorded::Unknown { from: 77, to: 80 })
        );
        let leftovers: Vec<_> = fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(leftovers, vec![std::ffi::OsString::from("p.state")]);
    }

    #[test]
    fn corrupt_files_name_the_file_line_and_what_was_found() {
        let p = Path::new("/station/p.state");
        let cases: &[(&[u8], &str, &str)] = &[
            (b"", "`format=1`", "none"),
            (b"format=1\nstate=at\nposition=12a\n", ":3", "`12a`"),
            (b"format=1\nstate=parked\n", ":2", "state=parked"),
            (b"format=2\nstate=at\nposition=1\n", ":1", "format=2"),
            (b"format=1\nstate=at\n", "position", "none"),
            (b"format=1\nstate=moving\nfrom=1\n", "`to=`", "none"),
            (
                b"format=1\nstate=at\nposition=1\nposition=2\n",
                ":4",
                "again",
            ),
            (b"format=1\nwhere 5\n", ":2", "`where 5`"),
            (b"format=1\ncolour=red\n", ":2", "colour"),
            (b"format=1\nstate=at\nposition=1\nto=3\n", ":4", "`to`"),
            (b"\xff\xfe", "UTF-8", "offset 0"),
        ];
        for (bytes, want1, want2) in cases {
            let e = parse(bytes, p).unwrap_err().to_string();
            assert!(e.starts_with("position journal /station/p.state"), "{e}");
            assert!(e.contains(want1) && e.contains(want2), "{e}");
            assert!(e.contains("set-position"), "{e}");
        }
    }

    #[test]
    fn hand_written_file_with_comments_and_spaces_is_read() {
        let r = parse(
            b"# note\n\n format = 1\nstate = at\n position=-5 \n",
            Path::new("x"),
        );
        assert_eq!(r.unwrap(), Recorded::Known(-5));
    }

    #[test]
    fn unreadable_journal_is_an_error_not_none() {
        let dir = tempfile::tempdir().unwrap();
        // A folder where the file should be.
        let j = Journal::new(dir.path());
        let e = j.load().unwrap_err().to_string();
        assert!(e.contains("cannot read"), "{e}");
    }
}
