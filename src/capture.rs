//! Capture files: a text log of the bytes on a rig's control port, with time.
//! The format is specified in `protocols/capture.md`; in short, one record a
//! line:
//!
//! ```text
//! # comment
//! 12.345 rx FE FE 00 5A 00 00 40 07 14 00 FD
//! ```
//!
//! The reader streams: it holds one line at a time and refuses a line longer
//! than [`MAX_LINE_BYTES`] without ever holding it. Every malformed line is an
//! error naming the file, the line, what was expected and what was found;
//! after a malformed line the reader carries on with the next one, after an
//! I/O error it stops.

use std::fs::File;
use std::io::{self, BufRead, BufReader, Write};
use std::path::{Path, PathBuf};
use std::time::Duration;

use crate::error::{Located, Place};
use crate::rig::Direction;

/// Longest line accepted, newline excluded.
pub const MAX_LINE_BYTES: usize = 1 << 20;

/// One line of a capture: bytes seen travelling one way at one time.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Record {
    /// Time since the capture's origin (whatever it is).
    pub t: Duration,
    pub dir: Direction,
    pub bytes: Vec<u8>,
    /// 1-based line number in the file.
    pub line: usize,
}

/// A reading of the hardware transmit-sense line (`<seconds> sense on|off`):
/// the line said the rig transmits (`on`) or not, at `t`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SenseRecord {
    pub t: Duration,
    pub on: bool,
    /// 1-based line number in the file.
    pub line: usize,
}

/// Any record of a capture: bytes on the port, or a sense-line reading.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Item {
    Bytes(Record),
    Sense(SenseRecord),
}

impl Item {
    pub fn t(&self) -> Duration {
        match self {
            Item::Bytes(r) => r.t,
            Item::Sense(s) => s.t,
        }
    }
    pub fn line(&self) -> usize {
        match self {
            Item::Bytes(r) => r.line,
            Item::Sense(s) => s.line,
        }
    }
}

/// Why a capture could not be read.
#[derive(Debug, thiserror::Error)]
pub enum CaptureError {
    #[error("{path}: cannot read the capture: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: io::Error,
    },
    #[error("{}", Located::render(Place::Line { file: path.clone(), line: *line }, expected, found))]
    Line {
        path: PathBuf,
        line: usize,
        expected: String,
        found: String,
    },
}

/// Streams [`Record`]s out of a capture.
pub struct CaptureReader<R> {
    reader: R,
    name: PathBuf,
    /// The current line, reused.
    line: Vec<u8>,
    line_no: usize,
    /// Time and line of the last record, for the order check.
    last: Option<(Duration, usize)>,
    done: bool,
}

impl CaptureReader<BufReader<File>> {
    pub fn open(path: &Path) -> Result<Self, CaptureError> {
        let f = File::open(path).map_err(|source| CaptureError::Io {
            path: path.to_path_buf(),
            source,
        })?;
        Ok(CaptureReader::new(BufReader::new(f), path))
    }
}

/// How a line read ended.
enum Got {
    Eof,
    Line,
    /// The line was longer than the limit; this many bytes were skipped.
    TooLong(usize),
}

impl<R: BufRead> CaptureReader<R> {
    /// `name` is only used to name errors.
    pub fn new(reader: R, name: impl Into<PathBuf>) -> Self {
        CaptureReader {
            reader,
            name: name.into(),
            line: Vec::new(),
            line_no: 0,
            last: None,
            done: false,
        }
    }

    /// Reads the next line into `self.line` (newline stripped), never
    /// holding more than [`MAX_LINE_BYTES`].
    fn next_line(&mut self) -> io::Result<Got> {
        self.line.clear();
        let mut total = 0usize;
        let mut any = false;
        loop {
            let avail = match self.reader.fill_buf() {
                Ok(a) => a,
                Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                Err(e) => return Err(e),
            };
            if avail.is_empty() {
                break;
            }
            any = true;
            let (take, newline) = match avail.iter().position(|&b| b == b'\n') {
                Some(i) => (i, true),
                None => (avail.len(), false),
            };
            total = total.saturating_add(take);
            if total <= MAX_LINE_BYTES {
                self.line
                    .extend_from_slice(avail.get(..take).unwrap_or_default());
            }
            self.reader.consume(take + usize::from(newline));
            if newline {
                break;
            }
        }
        if !any {
            return Ok(Got::Eof);
        }
        self.line_no += 1;
        if total > MAX_LINE_BYTES {
            self.line.clear();
            return Ok(Got::TooLong(total));
        }
        Ok(Got::Line)
    }

    fn err(&self, expected: impl Into<String>, found: impl Into<String>) -> CaptureError {
        CaptureError::Line {
            path: self.name.clone(),
            line: self.line_no,
            expected: expected.into(),
            found: found.into(),
        }
    }

    /// Parses `self.line`; `Ok(None)` for blank and comment lines.
    fn parse_line(&self) -> Result<Option<Item>, CaptureError> {
        let text = match std::str::from_utf8(&self.line) {
            Ok(t) => t,
            Err(e) => {
                let at = e.valid_up_to();
                let b = self.line.get(at).copied().unwrap_or_default();
                return Err(self.err(
                    "UTF-8 text",
                    format!("the byte 0x{b:02X} at column {}", at + 1),
                ));
            }
        };
        let text = text.strip_suffix('\r').unwrap_or(text);
        let body = text.trim_end_matches([' ', '\t']);
        let lead = body.trim_start_matches([' ', '\t']);
        if lead.is_empty() || lead.starts_with('#') {
            return Ok(None);
        }
        if lead.len() != body.len() {
            return Err(self.err(
                "a record starting at column 1 (or a `#` comment)",
                "leading whitespace",
            ));
        }
        let mut fields = body.split(' ');
        let seconds = fields.next().unwrap_or_default();
        let t = parse_seconds(seconds).map_err(|why| self.err(why, quote(seconds)))?;
        let kind = "`rx` or `tx` (or `sense`) after the time";
        let dir = match fields.next() {
            Some("rx") => Direction::Rx,
            Some("tx") => Direction::Tx,
            Some("sense") => return self.sense_record(t, fields).map(Some),
            Some(other) => return Err(self.err(kind, quote(other))),
            None => return Err(self.err(kind, "the end of the line")),
        };
        let mut bytes = Vec::new();
        for (i, field) in fields.enumerate() {
            let b = match field.as_bytes() {
                [h, l] => hex(*h).zip(hex(*l)).map(|(h, l)| (h << 4) | l),
                _ => None,
            };
            match b {
                Some(b) => bytes.push(b),
                None if field.is_empty() => {
                    return Err(self.err("fields separated by single spaces", "two spaces in a row"))
                }
                None => {
                    return Err(self.err(
                        "a byte as two hex digits (e.g. FE)",
                        format!("{} as byte {}", quote(field), i + 1),
                    ))
                }
            }
        }
        if bytes.is_empty() {
            return Err(self.err(
                "at least one hex byte after the direction",
                "the end of the line",
            ));
        }
        self.in_order(t)?;
        Ok(Some(Item::Bytes(Record {
            t,
            dir,
            bytes,
            line: self.line_no,
        })))
    }

    fn in_order(&self, t: Duration) -> Result<(), CaptureError> {
        if let Some((last, line)) = self.last {
            if t < last {
                return Err(self.err(
                    format!("a time no earlier than {} s (line {line})", show(last)),
                    format!("{} s", show(t)),
                ));
            }
        }
        Ok(())
    }

    /// The rest of a `sense` record: exactly `on` or `off`.
    fn sense_record<'a>(
        &self,
        t: Duration,
        mut fields: impl Iterator<Item = &'a str>,
    ) -> Result<Item, CaptureError> {
        let want = "`on` or `off` after `sense`";
        let on = match fields.next() {
            Some("on") => true,
            Some("off") => false,
            Some("") => {
                return Err(self.err("fields separated by single spaces", "two spaces in a row"))
            }
            Some(other) => return Err(self.err(want, quote(other))),
            None => return Err(self.err(want, "the end of the line")),
        };
        if let Some(extra) = fields.next() {
            return Err(self.err("the end of the line after a sense reading", quote(extra)));
        }
        self.in_order(t)?;
        Ok(Item::Sense(SenseRecord {
            t,
            on,
            line: self.line_no,
        }))
    }

    /// The next record of any kind (bytes or a sense reading).
    fn next_item(&mut self) -> Option<Result<Item, CaptureError>> {
        while !self.done {
            match self.next_line() {
                Err(source) => {
                    self.done = true;
                    return Some(Err(CaptureError::Io {
                        path: self.name.clone(),
                        source,
                    }));
                }
                Ok(Got::Eof) => self.done = true,
                Ok(Got::TooLong(n)) => {
                    return Some(Err(self.err(
                        format!("a line of at most {MAX_LINE_BYTES} bytes"),
                        format!("a line of {n} bytes"),
                    )))
                }
                Ok(Got::Line) => match self.parse_line() {
                    Ok(None) => {}
                    Ok(Some(item)) => {
                        self.last = Some((item.t(), item.line()));
                        return Some(Ok(item));
                    }
                    Err(e) => return Some(Err(e)),
                },
            }
        }
        None
    }

    /// Every record, sense readings included (a replay wants them; the
    /// plain iterator yields the byte records only).
    pub fn items(self) -> Items<R> {
        Items(self)
    }
}

/// [`CaptureReader::items`]: every record of a capture.
pub struct Items<R>(CaptureReader<R>);

impl<R: BufRead> Iterator for Items<R> {
    type Item = Result<Item, CaptureError>;

    fn next(&mut self) -> Option<Self::Item> {
        self.0.next_item()
    }
}

/// The byte records only; sense readings are passed over (use
/// [`CaptureReader::items`] for them).
impl<R: BufRead> Iterator for CaptureReader<R> {
    type Item = Result<Record, CaptureError>;

    fn next(&mut self) -> Option<Self::Item> {
        loop {
            match self.next_item()? {
                Ok(Item::Bytes(r)) => return Some(Ok(r)),
                Ok(Item::Sense(_)) => {}
                Err(e) => return Some(Err(e)),
            }
        }
    }
}

fn hex(c: u8) -> Option<u8> {
    (c as char).to_digit(16).and_then(|d| u8::try_from(d).ok())
}

/// A field for an error message, shortened if long.
fn quote(s: &str) -> String {
    const MAX: usize = 40;
    if s.chars().count() > MAX {
        let head: String = s.chars().take(MAX).collect();
        format!("`{head}…`")
    } else {
        format!("`{s}`")
    }
}

/// Seconds as written in a capture, shortest exact form.
fn show(t: Duration) -> String {
    let ns = t.subsec_nanos();
    if ns == 0 {
        return t.as_secs().to_string();
    }
    let frac = format!("{ns:09}");
    format!("{}.{}", t.as_secs(), frac.trim_end_matches('0'))
}

/// `<digits>[.<1 to 9 digits>]`, exactly, into a `Duration`.
pub fn parse_seconds(s: &str) -> Result<Duration, &'static str> {
    const EXPECTED: &str = "seconds as digits with at most 9 after the point (e.g. 12.345)";
    let (whole, frac) = match s.split_once('.') {
        Some((w, f)) => (w, Some(f)),
        None => (s, None),
    };
    let all_digits = |x: &str| !x.is_empty() && x.bytes().all(|b| b.is_ascii_digit());
    if !all_digits(whole) {
        return Err(EXPECTED);
    }
    let secs: u64 = whole
        .parse()
        .map_err(|_| "seconds below 18446744073709551616")?;
    let nanos = match frac {
        None => 0,
        Some(f) if all_digits(f) && f.len() <= 9 => {
            let padded = format!("{f:0<9}");
            padded.parse::<u32>().map_err(|_| EXPECTED)?
        }
        Some(_) => return Err(EXPECTED),
    };
    Ok(Duration::new(secs, nanos))
}

/// Writes capture files that [`CaptureReader`] reads back.
pub struct CaptureWriter<W: Write> {
    w: W,
    last: Option<Duration>,
}

impl<W: Write> CaptureWriter<W> {
    pub fn new(w: W) -> Self {
        CaptureWriter { w, last: None }
    }

    /// One record, the time with 6 decimals (sub-microsecond parts are
    /// dropped). Refuses, as `InvalidInput`, an empty record and a time
    /// earlier than the previous record's: the file stays readable.
    pub fn write_record(&mut self, t: Duration, dir: Direction, bytes: &[u8]) -> io::Result<()> {
        let t = Duration::new(t.as_secs(), t.subsec_micros() * 1000);
        if bytes.is_empty() {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                "a capture record needs at least one byte",
            ));
        }
        self.order(t)?;
        let mut line = String::with_capacity(20 + bytes.len() * 3);
        line.push_str(&format!(
            "{}.{:06} {}",
            t.as_secs(),
            t.subsec_micros(),
            dir.as_str()
        ));
        for b in bytes {
            line.push_str(&format!(" {b:02X}"));
        }
        line.push('\n');
        self.w.write_all(line.as_bytes())
    }

    /// A sense-line reading (`<seconds> sense on|off`), the time with 6
    /// decimals. Refuses, as `InvalidInput`, a time earlier than the
    /// previous record's.
    pub fn write_sense(&mut self, t: Duration, on: bool) -> io::Result<()> {
        let t = Duration::new(t.as_secs(), t.subsec_micros() * 1000);
        self.order(t)?;
        writeln!(
            self.w,
            "{}.{:06} sense {}",
            t.as_secs(),
            t.subsec_micros(),
            if on { "on" } else { "off" }
        )
    }

    fn order(&mut self, t: Duration) -> io::Result<()> {
        if let Some(last) = self.last {
            if t < last {
                return Err(io::Error::new(
                    io::ErrorKind::InvalidInput,
                    format!(
                        "capture times must not decrease: {} s after {} s",
                        show(t),
                        show(last)
                    ),
                ));
            }
        }
        self.last = Some(t);
        Ok(())
    }

    /// A comment; each line of `text` becomes one `# ` line.
    pub fn comment(&mut self, text: &str) -> io::Result<()> {
        for l in text.split('\n') {
            let l = l.trim_end_matches('\r');
            if l.is_empty() {
                writeln!(self.w, "#")?;
            } else {
                writeln!(self.w, "# {l}")?;
            }
        }
        Ok(())
    }

    pub fn flush(&mut self) -> io::Result<()> {
        self.w.flush()
    }

    pub fn into_inner(self) -> W {
        self.w
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read_all(text: &str) -> Vec<Result<Record, CaptureError>> {
        CaptureReader::new(text.as_bytes(), "t.cap").collect()
    }

    fn line_error(text: &str) -> (usize, String, String) {
        let errors: Vec<_> = read_all(text).into_iter().filter_map(|r| r.err()).collect();
        match errors.as_slice() {
            [CaptureError::Line {
                line,
                expected,
                found,
                ..
            }] => (*line, expected.clone(), found.clone()),
            other => panic!("expected one line error, got {other:?}"),
        }
    }

    #[test]
    fn reads_records_comments_and_blank_lines() {
        let text = "# a scenario\n\n12.345 rx FE FE 00 5A 00 00 40 07 14 00 FD\r\n12.5 tx fe fe 5a e0 03 fd  \n13 rx 00";
        let recs: Vec<Record> = read_all(text).into_iter().map(|r| r.unwrap()).collect();
        assert_eq!(recs.len(), 3);
        assert_eq!(recs[0].t, Duration::new(12, 345_000_000));
        assert_eq!(recs[0].dir, Direction::Rx);
        assert_eq!(
            recs[0].bytes,
            vec![0xFE, 0xFE, 0x00, 0x5A, 0x00, 0x00, 0x40, 0x07, 0x14, 0x00, 0xFD]
        );
        assert_eq!(recs[0].line, 3);
        assert_eq!(recs[1].dir, Direction::Tx);
        assert_eq!(recs[1].bytes, vec![0xFE, 0xFE, 0x5A, 0xE0, 0x03, 0xFD]);
        assert_eq!((recs[2].t, recs[2].line), (Duration::from_secs(13), 5));
    }

    #[test]
    fn sense_readings_are_records_of_their_own() {
        let text = "1 sense on\n1.5 rx 00\n2.25 sense off\n";
        let items: Vec<Item> = CaptureReader::new(text.as_bytes(), "s.cap")
            .items()
            .map(|r| r.unwrap())
            .collect();
        assert_eq!(
            items[0],
            Item::Sense(SenseRecord {
                t: Duration::from_secs(1),
                on: true,
                line: 1
            })
        );
        assert!(matches!(&items[1], Item::Bytes(r) if r.bytes == [0]));
        assert!(matches!(
            items[2],
            Item::Sense(SenseRecord {
                on: false,
                line: 3,
                ..
            })
        ));
        // The byte iterator passes them over.
        let recs: Vec<Record> = read_all(text).into_iter().map(|r| r.unwrap()).collect();
        assert_eq!(recs.len(), 1);
        // Malformed ones are named; order holds across kinds.
        let (line, expected, found) = line_error("1 sense maybe\n");
        assert_eq!((line, found.as_str()), (1, "`maybe`"));
        assert!(expected.contains("`on` or `off`"), "{expected}");
        let (_, _, found) = line_error("1 sense on 00\n");
        assert_eq!(found, "`00`");
        let (_, _, found) = line_error("1 sense\n");
        assert_eq!(found, "the end of the line");
        let (line, expected, _) = line_error("2 rx 00\n1 sense on\n");
        assert_eq!(line, 2);
        assert!(expected.contains("no earlier than 2 s"), "{expected}");
    }

    #[test]
    fn written_sense_readings_read_back() {
        let mut w = CaptureWriter::new(Vec::new());
        w.write_sense(Duration::from_millis(1500), true).unwrap();
        w.write_record(Duration::from_secs(2), Direction::Rx, &[0xFD])
            .unwrap();
        w.write_sense(Duration::from_secs(3), false).unwrap();
        assert!(w.write_sense(Duration::from_secs(1), true).is_err());
        let text = w.into_inner();
        assert_eq!(
            String::from_utf8(text.clone()).unwrap(),
            "1.500000 sense on\n2.000000 rx FD\n3.000000 sense off\n"
        );
        let back: Vec<Item> = CaptureReader::new(text.as_slice(), "w.cap")
            .items()
            .map(|r| r.unwrap())
            .collect();
        assert_eq!(back.len(), 3);
    }

    #[test]
    fn seconds_are_exact() {
        assert_eq!(parse_seconds("0.1"), Ok(Duration::new(0, 100_000_000)));
        assert_eq!(parse_seconds("3.000000001"), Ok(Duration::new(3, 1)));
        assert_eq!(
            parse_seconds("86400.999999999"),
            Ok(Duration::new(86_400, 999_999_999))
        );
        assert!(parse_seconds("1.0000000001").is_err());
        assert!(parse_seconds("-1").is_err());
        assert!(parse_seconds("1.").is_err());
        assert!(parse_seconds(".5").is_err());
        assert!(parse_seconds("1e3").is_err());
        assert!(parse_seconds("99999999999999999999").is_err());
    }

    #[test]
    fn malformed_lines_are_named() {
        let (line, expected, found) = line_error("1 rx 00\n2 up 00\n");
        assert_eq!((line, found.as_str()), (2, "`up`"));
        assert!(expected.contains("`rx` or `tx`"), "{expected}");
        let (line, _, found) = line_error("# c\n1.5 rx FE GG\n");
        assert_eq!((line, found.as_str()), (2, "`GG` as byte 2"));
        let (_, _, found) = line_error("1 rx FE  FD\n");
        assert_eq!(found, "two spaces in a row");
        let (_, _, found) = line_error("1 rx\n");
        assert_eq!(found, "the end of the line");
        let (_, _, found) = line_error("1,5 rx 00\n");
        assert_eq!(found, "`1,5`");
        let (line, expected, found) = line_error("2.5 rx 00\n2.25 rx 00\n");
        assert_eq!(line, 2);
        assert!(
            expected.contains("no earlier than 2.5 s (line 1)"),
            "{expected}"
        );
        assert_eq!(found, "2.25 s");
        let (_, expected, found) = line_error("1 rx \u{00ff}\n");
        assert!(expected.contains("two hex digits"), "{expected}");
        assert_eq!(found, "`\u{00ff}` as byte 1");
        let (_, expected, found) = line_error("  1 rx 00\n");
        assert!(expected.contains("column 1"), "{expected}");
        assert_eq!(found, "leading whitespace");
    }

    #[test]
    fn non_utf8_is_an_error_not_a_panic() {
        let bytes: &[u8] = b"1 rx 00\n2 rx \xff\xfe\n3 rx 01\n";
        let out: Vec<_> = CaptureReader::new(bytes, "b.cap").collect();
        assert_eq!(out.len(), 3);
        assert!(out[0].is_ok() && out[2].is_ok());
        let msg = out[1].as_ref().unwrap_err().to_string();
        assert_eq!(
            msg,
            "b.cap, line 2: expected UTF-8 text, found the byte 0xFF at column 6"
        );
    }

    #[test]
    fn ten_megabyte_line_is_refused_without_being_held() {
        use std::io::Read;
        let long = io::repeat(b'7').take(10_000_000);
        let rest: &[u8] = b"\n# after\n4 rx 01\n";
        let mut reader = CaptureReader::new(BufReader::new(long.chain(rest)), "big.cap");
        match reader.next() {
            Some(Err(CaptureError::Line { line, found, .. })) => {
                assert_eq!(line, 1);
                assert_eq!(found, "a line of 10000000 bytes");
            }
            other => panic!("{other:?}"),
        }
        assert!(reader.line.capacity() <= 2 * MAX_LINE_BYTES);
        let r = reader.next().unwrap().unwrap();
        assert_eq!((r.line, r.bytes), (3, vec![0x01]));
        assert!(reader.next().is_none());
    }

    #[test]
    fn writer_round_trips() {
        let mut w = CaptureWriter::new(Vec::new());
        w.comment("invented scenario\nsecond line").unwrap();
        w.write_record(
            Duration::new(0, 0),
            Direction::Tx,
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x03, 0xFD],
        )
        .unwrap();
        w.write_record(Duration::new(12, 345_678_999), Direction::Rx, &[0x00, 0xFF])
            .unwrap();
        assert!(w
            .write_record(Duration::new(1, 0), Direction::Rx, &[1])
            .is_err());
        assert!(w
            .write_record(Duration::new(20, 0), Direction::Rx, &[])
            .is_err());
        let text = String::from_utf8(w.into_inner()).unwrap();
        assert_eq!(
            text,
            "# invented scenario\n# second line\n0.000000 tx FE FE 5A E0 03 FD\n12.345678 rx 00 FF\n"
        );
        let recs: Vec<Record> = read_all(&text).into_iter().map(|r| r.unwrap()).collect();
        assert_eq!(recs[1].t, Duration::new(12, 345_678_000));
        assert_eq!(recs[1].bytes, vec![0x00, 0xFF]);
    }
}
