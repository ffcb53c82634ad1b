//! The controller line protocol, version 3 (see `protocols/tuner-line.md`;
//! version 2 added `HOME` and the `HOMING`, `HOMED` and `LIMIT` answers, version 3 `BOOT`):
//! sans-IO encoding and decoding of lines, and framing over a [`BytesMut`].
//!
//! Framing is check-then-parse: [`LineFramer::next_line`] looks for a `\n`
//! in the buffer and only then splits a line off, so partial reads cost
//! nothing. A line that grows past [`MAX_LINE`] without a terminator is
//! discarded up to its next `\n` and reported once as [`LineError::TooLong`];
//! the buffer never grows without bound, whatever the peer sends.

use std::fmt;

use bytes::{BufMut, BytesMut};

pub use super::HomeSide;

/// Longest line (without its terminator) either side accepts.
pub const MAX_LINE: usize = 80;
/// Longest `ERR` text we send, so that `ERR <text>` fits in [`MAX_LINE`].
pub const MAX_ERR_TEXT: usize = MAX_LINE - 4;

/// A line from the host to the controller.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Request {
    /// `GOTO <steps>`: move to an absolute position.
    Goto(i64),
    /// `WHERE`: report the position.
    Where,
    /// `STOP`: stop at once.
    Stop,
    /// `ZERO <steps>`: define the current position.
    Zero(i64),
    /// `HOME <LOW|HIGH> <steps> <speed>`: run toward `side` at `speed`
    /// steps/s (or the controller's own homing speed, if lower) until the
    /// home switch closes, and call that position `steps`.
    Home {
        side: HomeSide,
        position: i64,
        speed: u32,
    },
    /// `BOOT`: which power-on of the controller this is (version 3).
    Boot,
}

/// A line from the controller to the host.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Reply {
    /// `MOVING <target>`: a move is under way to `target`.
    Moving(i64),
    /// `AT <steps>`: at rest at `steps`.
    At(i64),
    /// `ERR <text>`: a line was refused.
    Err(String),
    /// `HOMING`: a `HOME` was accepted; the motor runs toward the switch.
    Homing,
    /// `HOMED <steps>`: the home switch closed; the motor is at rest and its
    /// count is now `steps` (the `HOME` request's position).
    Homed(i64),
    /// `LIMIT <LOW|HIGH> <steps>`: an end-stop switch closed; the motor was
    /// stopped at once at the count `steps` (which may be wrong: the motor
    /// went where no target should have taken it).
    Limit { side: HomeSide, steps: i64 },
    /// `BOOT <id>`: the answer to `BOOT`: a number the controller chose at
    /// power-on and keeps until the next (version 3).
    Boot(i64),
}

/// Why bytes were not a line of the protocol.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum LineError {
    #[error("line longer than {MAX_LINE} bytes (discarded)")]
    TooLong,
    #[error("expected printable ASCII, found byte 0x{byte:02x} at column {column}")]
    NotAscii { byte: u8, column: usize },
    #[error("expected one of {expected}, found `{found}`")]
    UnknownKeyword {
        expected: &'static str,
        found: String,
    },
    #[error("`{keyword}` expects a signed step count, found nothing")]
    MissingNumber { keyword: &'static str },
    #[error("`{keyword}` expects a signed step count (up to 18 digits), found `{found}`")]
    BadNumber {
        keyword: &'static str,
        found: String,
    },
    #[error("`{keyword}` expects a side, `LOW` or `HIGH`, found `{found}`")]
    BadSide {
        keyword: &'static str,
        found: String,
    },
    #[error("`{keyword}` takes {takes}, found extra `{found}`")]
    Extra {
        keyword: &'static str,
        takes: &'static str,
        found: String,
    },
}

impl fmt::Display for Request {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Request::Goto(s) => write!(f, "GOTO {s}"),
            Request::Where => f.write_str("WHERE"),
            Request::Stop => f.write_str("STOP"),
            Request::Zero(s) => write!(f, "ZERO {s}"),
            Request::Home {
                side,
                position,
                speed,
            } => write!(f, "HOME {side} {position} {speed}"),
            Request::Boot => f.write_str("BOOT"),
        }
    }
}

impl fmt::Display for Reply {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Reply::Moving(s) => write!(f, "MOVING {s}"),
            Reply::At(s) => write!(f, "AT {s}"),
            Reply::Err(text) => write!(f, "ERR {}", sanitize_err_text(text)),
            Reply::Homing => f.write_str("HOMING"),
            Reply::Homed(s) => write!(f, "HOMED {s}"),
            Reply::Limit { side, steps } => write!(f, "LIMIT {side} {steps}"),
            Reply::Boot(id) => write!(f, "BOOT {id}"),
        }
    }
}

/// Makes `text` safe to send after `ERR `: printable ASCII only (others
/// become `?`), at most [`MAX_ERR_TEXT`] bytes, never empty.
pub fn sanitize_err_text(text: &str) -> String {
    let mut out: String = text
        .chars()
        .map(|c| if (' '..='~').contains(&c) { c } else { '?' })
        .take(MAX_ERR_TEXT)
        .collect();
    if out.trim().is_empty() {
        out = "error".to_string();
    }
    out
}

impl Request {
    /// Appends the line, with its `\n`, to `buf`.
    pub fn encode(&self, buf: &mut BytesMut) {
        buf.put_slice(self.to_string().as_bytes());
        buf.put_u8(b'\n');
    }

    /// Reads one line (without terminator).
    pub fn parse(line: &str) -> Result<Request, LineError> {
        let mut words = line.split_ascii_whitespace();
        let Some(keyword) = words.next() else {
            return Err(LineError::UnknownKeyword {
                expected: "GOTO, WHERE, STOP, ZERO, HOME, BOOT",
                found: String::new(),
            });
        };
        let req = match keyword {
            "GOTO" => Request::Goto(number("GOTO", words.next())?),
            "ZERO" => Request::Zero(number("ZERO", words.next())?),
            "WHERE" => Request::Where,
            "STOP" => Request::Stop,
            "BOOT" => Request::Boot,
            "HOME" => {
                let side = side("HOME", words.next())?;
                let position = number("HOME", words.next())?;
                let speed = number("HOME", words.next())?;
                let speed = u32::try_from(speed)
                    .ok()
                    .filter(|s| *s > 0)
                    .ok_or_else(|| LineError::BadNumber {
                        keyword: "HOME",
                        found: speed.to_string(),
                    })?;
                Request::Home {
                    side,
                    position,
                    speed,
                }
            }
            other => {
                return Err(LineError::UnknownKeyword {
                    expected: "GOTO, WHERE, STOP, ZERO, HOME, BOOT",
                    found: clip(other),
                })
            }
        };
        if let Some(extra) = words.next() {
            let (keyword, takes) = match req {
                Request::Goto(_) => ("GOTO", "one number"),
                Request::Zero(_) => ("ZERO", "one number"),
                Request::Where => ("WHERE", "no arguments"),
                Request::Stop => ("STOP", "no arguments"),
                Request::Boot => ("BOOT", "no arguments"),
                Request::Home { .. } => ("HOME", "a side, a position and a speed"),
            };
            return Err(LineError::Extra {
                keyword,
                takes,
                found: clip(extra),
            });
        }
        Ok(req)
    }
}

impl Reply {
    /// Appends the line, with its `\n`, to `buf`.
    pub fn encode(&self, buf: &mut BytesMut) {
        buf.put_slice(self.to_string().as_bytes());
        buf.put_u8(b'\n');
    }

    /// Reads one line (without terminator).
    pub fn parse(line: &str) -> Result<Reply, LineError> {
        let trimmed = line.trim_matches(' ');
        let (keyword, rest) = trimmed.split_once(' ').unwrap_or((trimmed, ""));
        match keyword {
            "ERR" => Ok(Reply::Err(rest.trim().to_string())),
            "HOMING" => match rest.split_ascii_whitespace().next() {
                None => Ok(Reply::Homing),
                Some(extra) => Err(LineError::Extra {
                    keyword: "HOMING",
                    takes: "no arguments",
                    found: clip(extra),
                }),
            },
            "LIMIT" => {
                let mut words = rest.split_ascii_whitespace();
                let side = side("LIMIT", words.next())?;
                let steps = number("LIMIT", words.next())?;
                if let Some(extra) = words.next() {
                    return Err(LineError::Extra {
                        keyword: "LIMIT",
                        takes: "a side and a number",
                        found: clip(extra),
                    });
                }
                Ok(Reply::Limit { side, steps })
            }
            "MOVING" | "AT" | "HOMED" | "BOOT" => {
                let kw: &'static str = match keyword {
                    "AT" => "AT",
                    "HOMED" => "HOMED",
                    "BOOT" => "BOOT",
                    _ => "MOVING",
                };
                let mut words = rest.split_ascii_whitespace();
                let n = number(kw, words.next())?;
                if let Some(extra) = words.next() {
                    return Err(LineError::Extra {
                        keyword: kw,
                        takes: "one number",
                        found: clip(extra),
                    });
                }
                Ok(match kw {
                    "AT" => Reply::At(n),
                    "HOMED" => Reply::Homed(n),
                    "BOOT" => Reply::Boot(n),
                    _ => Reply::Moving(n),
                })
            }
            other => Err(LineError::UnknownKeyword {
                expected: "MOVING, AT, ERR, HOMING, HOMED, LIMIT, BOOT",
                found: clip(other),
            }),
        }
    }
}

/// `LOW` or `HIGH`.
fn side(keyword: &'static str, word: Option<&str>) -> Result<HomeSide, LineError> {
    match word {
        Some("LOW") => Ok(HomeSide::Low),
        Some("HIGH") => Ok(HomeSide::High),
        Some(other) => Err(LineError::BadSide {
            keyword,
            found: clip(other),
        }),
        None => Err(LineError::BadSide {
            keyword,
            found: String::new(),
        }),
    }
}

/// At most 24 characters of a word, for error messages.
fn clip(s: &str) -> String {
    s.chars().take(24).collect()
}

fn number(keyword: &'static str, word: Option<&str>) -> Result<i64, LineError> {
    let word = word.ok_or(LineError::MissingNumber { keyword })?;
    let digits = word.strip_prefix(['-', '+']).unwrap_or(word);
    let bad = || LineError::BadNumber {
        keyword,
        found: clip(word),
    };
    if digits.is_empty() || digits.len() > 18 || !digits.bytes().all(|b| b.is_ascii_digit()) {
        return Err(bad());
    }
    word.parse::<i64>().map_err(|_| bad())
}

/// Splits `\n`-terminated lines off a receive buffer.
#[derive(Debug, Default)]
pub struct LineFramer {
    /// Inside an over-long line: drop bytes until the next `\n`.
    discarding: bool,
}

impl LineFramer {
    pub fn new() -> Self {
        LineFramer::default()
    }

    /// The next complete, non-empty line in `buf` (consumed from it), an
    /// error for a line that could not be taken, or `None` when more bytes
    /// are needed. Call repeatedly until `None`.
    pub fn next_line(&mut self, buf: &mut BytesMut) -> Option<Result<String, LineError>> {
        loop {
            let newline = buf.iter().position(|&b| b == b'\n');
            match newline {
                None => {
                    if self.discarding {
                        buf.clear();
                        return None;
                    }
                    if buf.len() > MAX_LINE + 1 {
                        // +1: room for a '\r' still waiting for its '\n'.
                        buf.clear();
                        self.discarding = true;
                        return Some(Err(LineError::TooLong));
                    }
                    return None;
                }
                Some(end) => {
                    let line = buf.split_to(end + 1);
                    if self.discarding {
                        self.discarding = false;
                        continue;
                    }
                    let body = line.get(..end).unwrap_or_default();
                    let body = body.strip_suffix(b"\r").unwrap_or(body);
                    if body.len() > MAX_LINE {
                        return Some(Err(LineError::TooLong));
                    }
                    if let Some((column, &byte)) = body
                        .iter()
                        .enumerate()
                        .find(|(_, &b)| !(b' '..=b'~').contains(&b))
                    {
                        return Some(Err(LineError::NotAscii {
                            byte,
                            column: column + 1,
                        }));
                    }
                    if body.iter().all(|&b| b == b' ') {
                        continue;
                    }
                    // All bytes are printable ASCII, so this is valid UTF-8.
                    return Some(Ok(String::from_utf8_lossy(body).into_owned()));
                }
            }
        }
    }

    /// Every line [`next_line`](Self::next_line) can take from `buf` now.
    pub fn drain(&mut self, buf: &mut BytesMut) -> Vec<Result<String, LineError>> {
        let mut out = Vec::new();
        while let Some(l) = self.next_line(buf) {
            out.push(l);
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn lines(bytes: &[u8]) -> Vec<Result<String, LineError>> {
        let mut buf = BytesMut::from(bytes);
        LineFramer::new().drain(&mut buf)
    }

    #[test]
    fn requests_round_trip() {
        for r in [
            Request::Goto(4200),
            Request::Goto(-17),
            Request::Where,
            Request::Stop,
            Request::Zero(0),
            Request::Zero(-999_999_999_999_999_999),
            Request::Home {
                side: HomeSide::Low,
                position: 0,
                speed: 200,
            },
            Request::Home {
                side: HomeSide::High,
                position: -40,
                speed: 1,
            },
            Request::Boot,
        ] {
            let mut buf = BytesMut::new();
            r.encode(&mut buf);
            assert_eq!(buf.last(), Some(&b'\n'));
            let got = lines(&buf);
            assert_eq!(got.len(), 1);
            assert_eq!(Request::parse(got[0].as_ref().unwrap()), Ok(r));
        }
    }

    #[test]
    fn replies_round_trip() {
        for r in [
            Reply::Moving(10),
            Reply::At(-3),
            Reply::Err("target 99999 outside limits 0..10000".into()),
            Reply::Homing,
            Reply::Homed(-12),
            Reply::Limit {
                side: HomeSide::High,
                steps: 3001,
            },
            Reply::Boot(918_273_645),
        ] {
            let mut buf = BytesMut::new();
            r.encode(&mut buf);
            let got = lines(&buf);
            assert_eq!(Reply::parse(got[0].as_ref().unwrap()), Ok(r));
        }
    }

    /// Version 3's `BOOT`: no argument asked, one number answered.
    #[test]
    fn boot_is_asked_bare_and_answered_with_one_number() {
        assert_eq!(Request::parse("BOOT"), Ok(Request::Boot));
        assert!(matches!(
            Request::parse("BOOT 5"),
            Err(LineError::Extra {
                keyword: "BOOT",
                ..
            })
        ));
        assert_eq!(Reply::parse("BOOT 77"), Ok(Reply::Boot(77)));
        assert!(matches!(
            Reply::parse("BOOT"),
            Err(LineError::MissingNumber { keyword: "BOOT" })
        ));
        assert!(matches!(
            Reply::parse("BOOT 7 8"),
            Err(LineError::Extra {
                keyword: "BOOT",
                ..
            })
        ));
    }

    #[test]
    fn crlf_and_spaces_are_accepted_and_empty_lines_skipped() {
        let got = lines(b"\r\n  GOTO   +12  \r\n\nWHERE\n");
        let parsed: Vec<_> = got
            .iter()
            .map(|l| Request::parse(l.as_ref().unwrap()).unwrap())
            .collect();
        assert_eq!(parsed, vec![Request::Goto(12), Request::Where]);
    }

    #[test]
    fn partial_line_waits_for_its_terminator() {
        let mut f = LineFramer::new();
        let mut buf = BytesMut::from(&b"GO"[..]);
        assert_eq!(f.next_line(&mut buf), None);
        buf.extend_from_slice(b"TO 5\nST");
        assert_eq!(f.next_line(&mut buf), Some(Ok("GOTO 5".into())));
        assert_eq!(f.next_line(&mut buf), None);
        assert_eq!(&buf[..], b"ST");
    }

    #[test]
    fn bad_lines_say_what_was_expected() {
        let e = Request::parse("GOTO").unwrap_err();
        assert_eq!(e, LineError::MissingNumber { keyword: "GOTO" });
        let e = Request::parse("GOTO 12x").unwrap_err().to_string();
        assert!(e.contains("signed step count") && e.contains("12x"), "{e}");
        let e = Request::parse("GOTO 1234567890123456789").unwrap_err();
        assert!(matches!(e, LineError::BadNumber { .. }));
        let e = Request::parse("goto 5").unwrap_err().to_string();
        assert!(
            e.contains("GOTO, WHERE, STOP, ZERO") && e.contains("goto"),
            "{e}"
        );
        let e = Request::parse("STOP now").unwrap_err().to_string();
        assert!(e.contains("no arguments") && e.contains("now"), "{e}");
        assert!(Reply::parse("AT").is_err());
        assert!(Reply::parse("MOVING 1 2").is_err());
        assert!(Reply::parse("HELLO").is_err());
    }

    #[test]
    fn home_lines_say_what_was_expected() {
        let e = Request::parse("HOME UP 0 100").unwrap_err().to_string();
        assert!(e.contains("LOW") && e.contains("UP"), "{e}");
        let e = Request::parse("HOME LOW 0").unwrap_err();
        assert_eq!(e, LineError::MissingNumber { keyword: "HOME" });
        for bad in ["HOME LOW 0 0", "HOME LOW 0 -5", "HOME LOW 0 99999999999"] {
            assert!(
                matches!(Request::parse(bad), Err(LineError::BadNumber { .. })),
                "{bad}"
            );
        }
        assert!(Request::parse("HOME LOW 0 10 fast").is_err());
        assert!(Reply::parse("HOMING now").is_err());
        assert!(Reply::parse("HOMED").is_err());
        assert!(Reply::parse("LIMIT 5").is_err());
        assert!(Reply::parse("LIMIT LOW 5 6").is_err());
        assert_eq!(
            Reply::parse("LIMIT LOW -3"),
            Ok(Reply::Limit {
                side: HomeSide::Low,
                steps: -3
            })
        );
    }

    #[test]
    fn overlong_line_is_reported_once_and_skipped() {
        let mut input = vec![b'9'; 500];
        input.extend_from_slice(b"\nWHERE\n");
        let mut f = LineFramer::new();
        let mut buf = BytesMut::new();
        let mut got = Vec::new();
        // Arrives in chunks, as it would from a port.
        for chunk in input.chunks(37) {
            buf.extend_from_slice(chunk);
            got.extend(f.drain(&mut buf));
            assert!(buf.len() <= MAX_LINE + 1 + 37);
        }
        assert_eq!(got, vec![Err(LineError::TooLong), Ok("WHERE".into())]);
    }

    #[test]
    fn line_of_exactly_max_length_is_taken() {
        let mut input = b"ERR ".to_vec();
        input.extend(std::iter::repeat_n(b'x', MAX_LINE - 4));
        input.extend_from_slice(b"\r\n");
        let got = lines(&input);
        assert_eq!(got.len(), 1);
        assert!(got[0].is_ok());
        input.insert(5, b'y');
        assert_eq!(lines(&input), vec![Err(LineError::TooLong)]);
    }

    #[test]
    fn control_bytes_are_refused_with_column() {
        let got = lines(b"GO\x00TO 1\n");
        assert_eq!(got, vec![Err(LineError::NotAscii { byte: 0, column: 3 })]);
    }

    #[test]
    fn err_text_is_made_safe() {
        let r = Reply::Err("bad\nline \u{e9}".repeat(40));
        let s = r.to_string();
        assert!(s.len() <= MAX_LINE);
        assert!(!s.contains('\n'));
        assert_eq!(Reply::Err(String::new()).to_string(), "ERR error");
    }

    proptest! {
        #[test]
        fn framer_never_panics_and_stays_bounded(chunks in proptest::collection::vec(proptest::collection::vec(any::<u8>(), 0..120), 0..20)) {
            let mut f = LineFramer::new();
            let mut buf = BytesMut::new();
            for c in chunks {
                buf.extend_from_slice(&c);
                for l in f.drain(&mut buf).into_iter().flatten() {
                    prop_assert!(l.len() <= MAX_LINE);
                    let _ = Request::parse(&l);
                    let _ = Reply::parse(&l);
                }
                prop_assert!(buf.len() <= MAX_LINE + 1);
            }
        }

        #[test]
        fn goto_round_trips_any_18_digit_number(n in -999_999_999_999_999_999i64..=999_999_999_999_999_999i64) {
            let mut buf = BytesMut::new();
            Request::Goto(n).encode(&mut buf);
            let l = LineFramer::new().next_line(&mut buf).unwrap().unwrap();
            prop_assert_eq!(Request::parse(&l), Ok(Request::Goto(n)));
        }
    }
}
