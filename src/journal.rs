//! The position journal: a small state file that says where the motor is,
//! or that it was moving when the service stopped, so that a crash or a
//! power cut never leaves the service believing a position it cannot know.
//!
//! # Format
//!
//! Plain text, one `key=value` per line; lines starting with `#` and blank
//! lines are ignored. Every file has `format=2` (files written before legs
//! were recorded say `format=1`, and are read as before) and a `state`:
//!
//! ```text
//! # tuneward position journal (change it with `tuneward set-position`)
//! format=2
//! state=at
//! position=4200
//! ```
//!
//! `state=at` with `position=N`: the controller said the motor came to rest
//! at step `N` (a position is never written from a command sent or a
//! timeout, only from the controller's `AT`).
//!
//! `state=moving`: a leg of a move was sent and its end never recorded.
//! `from=A` is where the move started (at rest, confirmed), `to=B` its final
//! target, `direction=up|down` the direction of the leg under way. A move
//! with a backlash approach has two legs: `via=O` is the overshoot target
//! (the first leg goes `A`→`O`, the final one `O`→`B`) and `leg=first|final`
//! says which was under way. Without `via` the move is one leg, `A`→`B`.
//! The motor is then at a target of a leg, or somewhere on the straight
//! path of the leg under way (or anywhere, if the controller lost steps):
//!
//! ```text
//! format=2
//! state=moving
//! from=4982
//! to=971
//! via=911
//! leg=first
//! direction=down
//! ```
//!
//! A `format=1` file has no `via`, `leg` or `direction`. A `format=3` file
//! is a `format=2` one with `boot=N`: the controller's power-on number
//! (its answer to `BOOT`, protocols/tuner-line.md version 3) when the
//! record was written; the next start compares it with the controller's
//! answer then, to tell a controller that restarted from one that did not.
//!
//! `state=lost` (no other keys): the count cannot be trusted whatever the
//! controller says: an end-stop switch stopped the motor, or a homing run
//! was started and its end (`HOMED`) never recorded. Only a homing run (or
//! `tuneward set-position`) gives a position again.
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
    /// A one-leg move from `from` to `to` was under way and did not finish
    /// (as far as the file knows). A `format=1` intent reads as this.
    Unknown { from: i64, to: i64 },
    /// A two-leg (backlash) approach from `from` over `via` to `to` was under
    /// way and did not finish; `final_leg`: the second leg (`via`→`to`) had
    /// been sent, after the controller confirmed the motor at `via`.
    Approach {
        from: i64,
        via: i64,
        to: i64,
        final_leg: bool,
    },
    /// The count is not to be trusted (`state=lost`): an end stop was hit,
    /// or a homing run was under way.
    Lost,
}

/// One straight stretch of travel a leg covers, `start` to `end`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Stretch {
    pub start: i64,
    pub end: i64,
}

impl Stretch {
    /// `steps` lies on the stretch (its ends included).
    pub fn contains(&self, steps: i64) -> bool {
        let (lo, hi) = (self.start.min(self.end), self.start.max(self.end));
        (lo..=hi).contains(&steps)
    }
}

impl Recorded {
    /// The targets of an unfinished move's legs (empty for a position).
    pub fn leg_targets(&self) -> Vec<i64> {
        match *self {
            Recorded::Known(_) | Recorded::Lost => Vec::new(),
            Recorded::Unknown { to, .. } => vec![to],
            Recorded::Approach { via, to, .. } => vec![via, to],
        }
    }

    /// The straight stretch of the leg that was under way, if a move was.
    pub fn leg_path(&self) -> Option<Stretch> {
        match *self {
            Recorded::Known(_) | Recorded::Lost => None,
            Recorded::Unknown { from, to } => Some(Stretch {
                start: from,
                end: to,
            }),
            Recorded::Approach {
                from,
                via,
                final_leg: false,
                ..
            } => Some(Stretch {
                start: from,
                end: via,
            }),
            Recorded::Approach {
                via,
                to,
                final_leg: true,
                ..
            } => Some(Stretch {
                start: via,
                end: to,
            }),
        }
    }

    /// The move did not finish (the position is not known).
    pub fn is_unfinished(&self) -> bool {
        !matches!(self, Recorded::Known(_))
    }

    /// The file's body for this record (after the `format` line).
    fn body(&self) -> String {
        let direction = |a: i64, b: i64| if b >= a { "up" } else { "down" };
        match *self {
            Recorded::Known(p) => format!("state=at\nposition={p}\n"),
            Recorded::Lost => "state=lost\n".to_string(),
            Recorded::Unknown { from, to } => format!(
                "state=moving\nfrom={from}\nto={to}\ndirection={}\n",
                direction(from, to)
            ),
            Recorded::Approach {
                from,
                via,
                to,
                final_leg,
            } => {
                let (leg, dir) = if final_leg {
                    ("final", direction(via, to))
                } else {
                    ("first", direction(from, via))
                };
                format!(
                    "state=moving\nfrom={from}\nto={to}\nvia={via}\nleg={leg}\ndirection={dir}\n"
                )
            }
        }
    }
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
    /// The controller's power-on number (`BOOT`), written with every
    /// record once known (`format=3`).
    boot: Option<i64>,
}

/// File name used when the config names none.
pub const DEFAULT_STATE_FILE: &str = "tuneward-position.state";

impl Journal {
    pub fn new(path: impl Into<PathBuf>) -> Journal {
        Journal {
            path: path.into(),
            boot: None,
        }
    }

    /// From now on every record says it was written while the controller
    /// was in its power-on `boot` (`None`: not known; `format=2`).
    pub fn set_boot(&mut self, boot: Option<i64>) {
        self.boot = boot;
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// What the journal says; `None` if there is no journal yet.
    pub fn load(&self) -> Result<Option<Recorded>, JournalError> {
        Ok(self.load_entry()?.map(|(r, _)| r))
    }

    /// What the journal says and the controller's power-on number it was
    /// written in, if it says one; `None` if there is no journal yet.
    pub fn load_entry(&self) -> Result<Option<(Recorded, Option<i64>)>, JournalError> {
        match fs::read(&self.path) {
            Ok(bytes) => parse_entry(&bytes, &self.path).map(Some),
            Err(e) if e.kind() == io::ErrorKind::NotFound => Ok(None),
            Err(source) => Err(JournalError::Io {
                path: self.path.clone(),
                action: "cannot read",
                source,
            }),
        }
    }

    /// Records that a one-leg move from `from` to `to` is starting.
    pub fn record_intent(&self, from: i64, to: i64) -> Result<(), JournalError> {
        self.record(&Recorded::Unknown { from, to })
    }

    /// Records that the motor is at rest at `steps`.
    pub fn record_position(&self, steps: i64) -> Result<(), JournalError> {
        self.record(&Recorded::Known(steps))
    }

    /// Records `what` (a position, or the intent of the leg about to be
    /// sent), flushed to disk before it returns.
    pub fn record(&self, what: &Recorded) -> Result<(), JournalError> {
        self.write(&what.body())
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
        let text = match self.boot {
            Some(b) => format!(
                "# tuneward position journal (change it with `tuneward set-position`)\nformat=3\nboot={b}\n{body}"
            ),
            None => format!(
                "# tuneward position journal (change it with `tuneward set-position`)\nformat=2\n{body}"
            ),
        };
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
    parse_entry(bytes, path).map(|(r, _)| r)
}

/// [`parse`], with the controller's power-on number a `format=3` file
/// says it was written in.
pub fn parse_entry(bytes: &[u8], path: &Path) -> Result<(Recorded, Option<i64>), JournalError> {
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
    let mut via = None;
    let mut leg = None;
    let mut direction = None;
    let mut boot = None;
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
        let slot =
            match key {
                "format" => &mut format,
                "state" => &mut state,
                "position" => &mut position,
                "from" => &mut from,
                "to" => &mut to,
                "via" => &mut via,
                "leg" => &mut leg,
                "direction" => &mut direction,
                "boot" => &mut boot,
                _ => return Err(corrupt(
                    Some(n),
                    "one of the keys format, boot, state, position, from, to, via, leg, direction",
                    format!("`{}`", clip(key)),
                )),
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
    let version = match &format {
        Some((_, v)) if v == "1" => 1,
        Some((_, v)) if v == "2" => 2,
        Some((_, v)) if v == "3" => 3,
        Some((n, v)) => {
            return Err(corrupt(
                Some(*n),
                "`format=1`, `format=2` or `format=3`",
                format!("`format={}`", clip(v)),
            ))
        }
        None => {
            return Err(corrupt(
                None,
                "a `format=1`, `format=2` or `format=3` line",
                "none (empty or truncated file?)".to_string(),
            ))
        }
    };
    // The controller's power-on number: `format=3` only.
    let boot =
        match &boot {
            Some((n, v)) if version < 3 => {
                return Err(corrupt(
                    Some(*n),
                    "no `boot` before `format=3`",
                    format!("`boot={}`", clip(v)),
                ))
            }
            Some((n, v)) => Some(v.parse::<i64>().map_err(|_| {
                corrupt(Some(*n), "`boot=` a whole number", format!("`{}`", clip(v)))
            })?),
            None => None,
        };
    let recorded = recorded_of(
        version, &state, &position, &from, &to, &via, &leg, &direction, &corrupt,
    )?;
    Ok((recorded, boot))
}

type Slot = Option<(usize, String)>;

/// The record a journal's keys describe (see [`parse`]).
#[allow(clippy::too_many_arguments)]
fn recorded_of(
    version: u8,
    state: &Slot,
    position: &Slot,
    from: &Slot,
    to: &Slot,
    via: &Slot,
    leg: &Slot,
    direction: &Slot,
    corrupt: &dyn Fn(Option<usize>, &str, String) -> JournalError,
) -> Result<Recorded, JournalError> {
    let number = |slot: &Slot, key: &str| -> Result<i64, JournalError> {
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
    let unexpected = |slot: &Slot, key: &str, state: &str| match slot {
        Some((n, _)) => Err(corrupt(
            Some(*n),
            &format!("no `{key}` with `state={state}`"),
            format!("`{key}`"),
        )),
        None => Ok(()),
    };
    if version == 1 {
        for (slot, key) in [(via, "via"), (leg, "leg"), (direction, "direction")] {
            if let Some((n, _)) = slot {
                return Err(corrupt(
                    Some(*n),
                    &format!("no `{key}` in a `format=1` file"),
                    format!("`{key}`"),
                ));
            }
        }
    }
    match state.as_ref().map(|(n, v)| (*n, v.as_str())) {
        Some((_, "at")) => {
            for (slot, key) in [
                (from, "from"),
                (to, "to"),
                (via, "via"),
                (leg, "leg"),
                (direction, "direction"),
            ] {
                unexpected(slot, key, "at")?;
            }
            Ok(Recorded::Known(number(position, "position")?))
        }
        Some((n, "lost")) if version >= 2 => {
            for (slot, key) in [
                (position, "position"),
                (from, "from"),
                (to, "to"),
                (via, "via"),
                (leg, "leg"),
                (direction, "direction"),
            ] {
                unexpected(slot, key, "lost")?;
            }
            let _ = n;
            Ok(Recorded::Lost)
        }
        Some((_, "moving")) => {
            unexpected(position, "position", "moving")?;
            let (from_n, to_n) = (number(from, "from")?, number(to, "to")?);
            let recorded = match (via, leg) {
                (None, None) => Recorded::Unknown {
                    from: from_n,
                    to: to_n,
                },
                (Some(_), Some((n, l))) => Recorded::Approach {
                    from: from_n,
                    via: number(via, "via")?,
                    to: to_n,
                    final_leg: match l.as_str() {
                        "first" => false,
                        "final" => true,
                        other => {
                            return Err(corrupt(
                                Some(*n),
                                "`leg=first` or `leg=final`",
                                format!("`leg={}`", clip(other)),
                            ))
                        }
                    },
                },
                (Some((n, _)), None) => {
                    return Err(corrupt(Some(*n), "a `leg=` line with `via`", "none".into()))
                }
                (None, Some((n, _))) => {
                    return Err(corrupt(Some(*n), "a `via=` line with `leg`", "none".into()))
                }
            };
            if version >= 2 {
                // The direction is written for a reader; it must agree with
                // the leg it describes, or the file is not what we wrote.
                let want = match recorded.leg_path() {
                    Some(p) if p.end < p.start => "down",
                    _ => "up",
                };
                match direction {
                    Some((_, d)) if d == want => {}
                    Some((n, d)) => {
                        return Err(corrupt(
                            Some(*n),
                            &format!("`direction={want}` (the leg under way)"),
                            format!("`direction={}`", clip(d)),
                        ))
                    }
                    None => return Err(corrupt(None, "a `direction=` line", "none".into())),
                }
            }
            Ok(recorded)
        }
        Some((n, other)) => Err(corrupt(
            Some(n),
            "`state=at`, `state=moving` or (format 2) `state=lost`",
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

    /// With the controller's power-on number known every record carries it
    /// (`format=3`), and the files without it read as before.
    #[test]
    fn the_controllers_power_on_number_is_written_with_each_record() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::new(dir.path().join("p.state"));
        j.record_position(10).unwrap();
        assert_eq!(j.load_entry().unwrap(), Some((Recorded::Known(10), None)));
        assert!(fs::read_to_string(j.path()).unwrap().contains(
            "format=2
"
        ));
        j.set_boot(Some(-4_000_000_000));
        j.record_intent(10, 900).unwrap();
        let text = fs::read_to_string(j.path()).unwrap();
        assert!(
            text.contains(
                "format=3
boot=-4000000000
"
            ),
            "{text}"
        );
        assert_eq!(
            j.load_entry().unwrap(),
            Some((
                Recorded::Unknown { from: 10, to: 900 },
                Some(-4_000_000_000)
            ))
        );
        assert_eq!(
            j.load().unwrap(),
            Some(Recorded::Unknown { from: 10, to: 900 })
        );
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
            (b"format=4\nstate=at\nposition=1\n", ":1", "format=4"),
            (b"format=2\nboot=5\nstate=at\nposition=1\n", ":2", "boot=5"),
            (b"format=3\nboot=x5\nstate=at\nposition=1\n", ":2", "x5"),
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
    fn every_leg_record_reads_back_as_written() {
        let dir = tempfile::tempdir().unwrap();
        let j = Journal::new(dir.path().join("p.state"));
        let records = [
            Recorded::Known(-7),
            Recorded::Lost,
            Recorded::Unknown {
                from: 4982,
                to: 9004,
            },
            Recorded::Unknown {
                from: 9004,
                to: 4982,
            },
            Recorded::Approach {
                from: 4982,
                via: 911,
                to: 971,
                final_leg: false,
            },
            Recorded::Approach {
                from: 4982,
                via: 911,
                to: 971,
                final_leg: true,
            },
        ];
        for r in records {
            j.record(&r).unwrap();
            assert_eq!(j.load().unwrap(), Some(r));
        }
        let text = fs::read_to_string(j.path()).unwrap();
        assert!(text.contains("format=2\n"), "{text}");
        // The final leg 911 -> 971 goes up.
        assert!(text.contains("leg=final\ndirection=up\n"), "{text}");
    }

    #[test]
    fn a_format_1_journal_still_loads() {
        let p = Path::new("old");
        assert_eq!(
            parse(b"format=1\nstate=moving\nfrom=-30\nto=900\n", p).unwrap(),
            Recorded::Unknown { from: -30, to: 900 }
        );
        assert_eq!(
            parse(b"format=1\nstate=at\nposition=12\n", p).unwrap(),
            Recorded::Known(12)
        );
        let e = parse(
            b"format=1\nstate=moving\nfrom=1\nto=5\nvia=0\nleg=first\n",
            p,
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains(":5") && e.contains("format=1"), "{e}");
    }

    #[test]
    fn format_2_leg_records_are_checked() {
        let p = Path::new("/s/p.state");
        let cases: &[(&[u8], &str, &str)] = &[
            (
                b"format=2\nstate=moving\nfrom=1\nto=5\ndirection=down\n",
                ":5",
                "direction=down",
            ),
            (
                b"format=2\nstate=moving\nfrom=1\nto=5\n",
                "direction=",
                "none",
            ),
            (
                b"format=2\nstate=moving\nfrom=9\nto=5\nvia=3\ndirection=down\n",
                ":5",
                "leg=",
            ),
            (
                b"format=2\nstate=moving\nfrom=9\nto=5\nvia=3\nleg=second\ndirection=down\n",
                ":6",
                "leg=second",
            ),
            (b"format=2\nstate=at\nposition=3\nvia=3\n", ":4", "`via`"),
        ];
        for (bytes, want1, want2) in cases {
            let e = parse(bytes, p).unwrap_err().to_string();
            assert!(e.contains(want1) && e.contains(want2), "{e}");
        }
    }

    #[test]
    fn a_legs_path_and_targets() {
        let r = Recorded::Approach {
            from: 2000,
            via: 940,
            to: 1000,
            final_leg: false,
        };
        assert_eq!(r.leg_targets(), vec![940, 1000]);
        let path = r.leg_path().unwrap();
        assert!(path.contains(2000) && path.contains(940) && path.contains(1500));
        assert!(!path.contains(939) && !path.contains(2001));
        let last = Recorded::Approach {
            from: 2000,
            via: 940,
            to: 1000,
            final_leg: true,
        };
        let path = last.leg_path().unwrap();
        assert!(path.contains(940) && path.contains(970) && path.contains(1000));
        assert!(!path.contains(2000) && !path.contains(1001));
        assert_eq!(Recorded::Known(5).leg_path(), None);
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
