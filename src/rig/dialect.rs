//! Dialects: what differs between rigs of one protocol family, as data.
//!
//! A dialect is a small TOML file (see `protocols/*.toml`): the family, its
//! framing, addresses, command codes, digit widths, field offsets and the poll
//! queries. The built-in dialects are those same files compiled in, so what a
//! station reads in `protocols/` is exactly what runs. Every key is required
//! and unknown keys are refused: a dialect is copied from a built-in and
//! edited, never guessed at. Errors name the file, the key, what was expected
//! and what was found.

use std::path::{Path, PathBuf};

use super::binary::BinaryDecoder;
use super::text::TextDecoder;
use super::{bcd, Decode};

/// The two wire-protocol families tuneward understands.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Family {
    /// Framed binary: preamble, addresses, command, packed BCD, terminator.
    Binary,
    /// ASCII messages: two upper-case letters, a payload, a terminator.
    Text,
}

/// One rig dialect, loaded and checked.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Dialect {
    /// The dialect's own name (`name` key), e.g. `binary-bcd`.
    pub name: String,
    /// The family's parameters.
    pub spec: Spec,
}

/// Family-specific parameters of a [`Dialect`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Spec {
    Binary(BinarySpec),
    Text(TextSpec),
}

/// Parameters of a binary-family dialect.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BinarySpec {
    /// Preamble byte; a frame starts with two of them.
    pub preamble: u8,
    /// Terminator byte ending every frame.
    pub terminator: u8,
    /// Longest frame believed, preamble and terminator included.
    pub max_frame: usize,
    /// Our own (and the usual controller's) bus address.
    pub controller: u8,
    /// Address unsolicited broadcasts are sent to.
    pub broadcast: u8,
    /// Command of an unsolicited frequency broadcast.
    pub frequency_broadcast: u8,
    /// Command of a frequency read (and of its answer).
    pub frequency_read: u8,
    /// Command for the transmit state.
    pub transmit: u8,
    /// Sub-command of `transmit` that reads/reports transmit on/off.
    pub transmit_sub: u8,
    /// Bus collision marker.
    pub collision: u8,
    /// Acknowledgement "OK".
    pub ack_ok: u8,
    /// Acknowledgement "not good".
    pub ack_ng: u8,
    /// Width of the frequency field in bytes (two BCD digits per byte).
    pub frequency_bytes: usize,
    /// Poll query for the frequency.
    pub poll_frequency: Vec<Slot>,
    /// Poll query for the transmit state.
    pub poll_transmit: Vec<Slot>,
}

/// One byte of a binary poll query: literal, or filled in when sent.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Slot {
    Byte(u8),
    /// The rig's address.
    Rig,
    /// Our controller address.
    Controller,
}

/// Which VFO's reports count as the operating frequency.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Vfo {
    A,
    B,
}

/// Parameters of a text-family dialect.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TextSpec {
    /// The byte ending every message.
    pub terminator: u8,
    /// Longest message believed, command letters included, terminator not.
    pub max_message: usize,
    /// Digits of a frequency field (Hz).
    pub digits: usize,
    pub vfo_a: [u8; 2],
    pub vfo_b: [u8; 2],
    pub active_vfo: Vfo,
    /// The status answer carrying frequency and transmit flag.
    pub status: [u8; 2],
    /// Payload length of a status answer.
    pub status_length: usize,
    /// Offset of the frequency field in the status payload.
    pub status_frequency_offset: usize,
    /// Offset of the one-character transmit flag in the status payload.
    pub status_transmit_offset: usize,
    /// Message meaning "transmitting" (optional one-digit payload).
    pub transmit_on: [u8; 2],
    /// Message meaning "receiving" (optional one-digit payload).
    pub transmit_off: [u8; 2],
    pub poll_frequency: Vec<u8>,
    pub poll_transmit: Vec<u8>,
}

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
    #[error("{file}: key `{key}`: expected {expected}, found {found}")]
    Key {
        file: PathBuf,
        key: String,
        expected: String,
        found: String,
    },
    #[error("unknown dialect `{name}`: expected a built-in dialect ({builtins}) or a path to a dialect TOML file (ending in .toml or containing a `/`)")]
    Unknown { name: String, builtins: String },
}

const BUILTINS: &[(&str, &str)] = &[
    (
        "binary-bcd",
        include_str!("../../protocols/binary-bcd.toml"),
    ),
    (
        "binary-bcd-4",
        include_str!("../../protocols/binary-bcd-4.toml"),
    ),
    (
        "text-semicolon",
        include_str!("../../protocols/text-semicolon.toml"),
    ),
    (
        "text-semicolon-9",
        include_str!("../../protocols/text-semicolon-9.toml"),
    ),
];

const BUILTIN_NAMES: &[&str] = &[
    "binary-bcd",
    "binary-bcd-4",
    "text-semicolon",
    "text-semicolon-9",
];

impl Dialect {
    /// A built-in dialect by name.
    pub fn builtin(name: &str) -> Option<Dialect> {
        let (n, text) = BUILTINS.iter().find(|(n, _)| *n == name)?;
        // The built-ins are checked by a unit test; `ok()` keeps a broken one
        // from panicking here all the same.
        Dialect::parse(text, Path::new(&format!("<built-in {n}>"))).ok()
    }

    pub fn builtin_names() -> &'static [&'static str] {
        BUILTIN_NAMES
    }

    /// A built-in name, or a path to a dialect TOML (relative paths against
    /// `base_dir`, typically the config file's folder).
    pub fn resolve(name_or_path: &str, base_dir: Option<&Path>) -> Result<Dialect, DialectError> {
        if let Some(d) = Dialect::builtin(name_or_path) {
            return Ok(d);
        }
        let looks_like_path = name_or_path.ends_with(".toml")
            || name_or_path.contains('/')
            || name_or_path.contains(std::path::MAIN_SEPARATOR);
        if !looks_like_path {
            return Err(DialectError::Unknown {
                name: name_or_path.to_string(),
                builtins: BUILTIN_NAMES.join(", "),
            });
        }
        let p = Path::new(name_or_path);
        let path = match base_dir {
            Some(base) if p.is_relative() => base.join(p),
            _ => p.to_path_buf(),
        };
        Dialect::load(&path)
    }

    /// Reads a dialect TOML file.
    pub fn load(path: &Path) -> Result<Dialect, DialectError> {
        let text = std::fs::read_to_string(path).map_err(|source| DialectError::Io {
            file: path.to_path_buf(),
            source,
        })?;
        Dialect::parse(&text, path)
    }

    /// Parses dialect TOML text; `file` is only used to name errors.
    pub fn parse(text: &str, file: &Path) -> Result<Dialect, DialectError> {
        let table: toml::Table = text.parse().map_err(|e: toml::de::Error| {
            let what = e.message().trim_end().replace('\n', " ");
            let message = match e.span() {
                Some(span) => {
                    let before = text.get(..span.start).unwrap_or(text);
                    let line = before.matches('\n').count() + 1;
                    let column = before.len() - before.rfind('\n').map_or(0, |i| i + 1) + 1;
                    format!("line {line}, column {column}: {what}")
                }
                None => what,
            };
            DialectError::Syntax {
                file: file.to_path_buf(),
                message,
            }
        })?;
        let r = Reader { file };
        r.only(
            &table,
            "",
            &[
                "name",
                "family",
                "frame",
                "address",
                "command",
                "frequency",
                "message",
                "status",
                "transmit",
                "poll",
            ],
        )?;
        let name = r.string(&table, "", "name")?;
        let family = r.string(&table, "", "family")?;
        let spec = match family.as_str() {
            "binary" => Spec::Binary(binary_spec(&r, &table)?),
            "text" => Spec::Text(text_spec(&r, &table)?),
            other => return Err(r.err("family", "\"binary\" or \"text\"", format!("{other:?}"))),
        };
        if name.is_empty() {
            return Err(r.err("name", "a non-empty name", "\"\"".into()));
        }
        Ok(Dialect { name, spec })
    }

    pub fn family(&self) -> Family {
        match self.spec {
            Spec::Binary(_) => Family::Binary,
            Spec::Text(_) => Family::Text,
        }
    }

    /// A decoder for this dialect; `rig_address` only matters for the binary
    /// family (None: reports from any address except our controller's).
    pub fn decoder(&self, rig_address: Option<u8>) -> Box<dyn Decode> {
        match &self.spec {
            Spec::Binary(s) => Box::new(BinaryDecoder::new(s.clone(), rig_address)),
            Spec::Text(s) => Box::new(TextDecoder::new(s.clone())),
        }
    }

    /// Bytes the rig would send to announce `hz`: binary, an unsolicited
    /// broadcast from `rig_address`; text, the active VFO's message. A
    /// frequency wider than the field keeps only its low digits, as a rig
    /// with that field would. For tests, demos and scenario generation.
    pub fn encode_frequency(&self, hz: u64, rig_address: u8) -> Vec<u8> {
        match &self.spec {
            Spec::Binary(s) => {
                let mut f = vec![
                    s.preamble,
                    s.preamble,
                    s.broadcast,
                    rig_address,
                    s.frequency_broadcast,
                ];
                let at = f.len();
                f.resize(at + s.frequency_bytes, 0);
                if let Some(field) = f.get_mut(at..) {
                    bcd::encode_le_into(hz, field);
                }
                f.push(s.terminator);
                f
            }
            Spec::Text(s) => {
                let vfo = match s.active_vfo {
                    Vfo::A => s.vfo_a,
                    Vfo::B => s.vfo_b,
                };
                let modulus = 10u64.saturating_pow(s.digits as u32);
                let mut f = vfo.to_vec();
                f.extend_from_slice(
                    format!("{:0width$}", hz % modulus, width = s.digits).as_bytes(),
                );
                f.push(s.terminator);
                f
            }
        }
    }

    /// Bytes the rig would send to report transmit on/off: binary, an answer
    /// to our controller address; text, the transmit/receive message.
    pub fn encode_transmit(&self, on: bool, rig_address: u8) -> Vec<u8> {
        match &self.spec {
            Spec::Binary(s) => vec![
                s.preamble,
                s.preamble,
                s.controller,
                rig_address,
                s.transmit,
                s.transmit_sub,
                u8::from(on),
                s.terminator,
            ],
            Spec::Text(s) => {
                let mut f = if on { s.transmit_on } else { s.transmit_off }.to_vec();
                f.push(s.terminator);
                f
            }
        }
    }

    /// The query we send to ask the rig for its frequency.
    pub fn poll_frequency(&self, rig_address: u8) -> Vec<u8> {
        match &self.spec {
            Spec::Binary(s) => fill(&s.poll_frequency, rig_address, s.controller),
            Spec::Text(s) => s.poll_frequency.clone(),
        }
    }

    /// The query we send to ask the rig whether it transmits.
    pub fn poll_transmit(&self, rig_address: u8) -> Vec<u8> {
        match &self.spec {
            Spec::Binary(s) => fill(&s.poll_transmit, rig_address, s.controller),
            Spec::Text(s) => s.poll_transmit.clone(),
        }
    }
}

fn fill(slots: &[Slot], rig: u8, controller: u8) -> Vec<u8> {
    slots
        .iter()
        .map(|s| match s {
            Slot::Byte(b) => *b,
            Slot::Rig => rig,
            Slot::Controller => controller,
        })
        .collect()
}

fn binary_spec(r: &Reader, t: &toml::Table) -> Result<BinarySpec, DialectError> {
    r.only(
        t,
        "",
        &[
            "name",
            "family",
            "frame",
            "address",
            "command",
            "frequency",
            "poll",
        ],
    )?;
    let frame = r.table(t, "", "frame")?;
    r.only(frame, "frame", &["preamble", "terminator", "max_length"])?;
    let address = r.table(t, "", "address")?;
    r.only(address, "address", &["controller", "broadcast"])?;
    let command = r.table(t, "", "command")?;
    r.only(
        command,
        "command",
        &[
            "frequency_broadcast",
            "frequency_read",
            "transmit",
            "transmit_sub",
            "collision",
            "ack_ok",
            "ack_ng",
        ],
    )?;
    let frequency = r.table(t, "", "frequency")?;
    r.only(frequency, "frequency", &["bytes"])?;
    let poll = r.table(t, "", "poll")?;
    r.only(poll, "poll", &["frequency", "transmit"])?;

    let preamble = r.byte(frame, "frame", "preamble")?;
    let terminator = r.byte(frame, "frame", "terminator")?;
    if terminator == preamble {
        return Err(r.err(
            "frame.terminator",
            "a byte different from the preamble",
            format!("0x{terminator:02X}"),
        ));
    }
    let frequency_bytes = r.int(frequency, "frequency", "bytes", 4, 9)? as usize;
    // Smallest useful frame: two preamble bytes, to, from, command,
    // frequency field, terminator.
    let min_frame = 2 + 3 + frequency_bytes + 1;
    let max_frame = r.int(frame, "frame", "max_length", min_frame as i64, 4096)? as usize;
    let controller = r.byte(address, "address", "controller")?;
    let broadcast = r.byte(address, "address", "broadcast")?;
    let transmit = r.byte(command, "command", "transmit")?;
    let transmit_sub = r.byte(command, "command", "transmit_sub")?;
    let frequency_read = r.byte(command, "command", "frequency_read")?;
    let spec = BinarySpec {
        preamble,
        terminator,
        max_frame,
        controller,
        broadcast,
        frequency_broadcast: r.byte(command, "command", "frequency_broadcast")?,
        frequency_read,
        transmit,
        transmit_sub,
        collision: r.byte(command, "command", "collision")?,
        ack_ok: r.byte(command, "command", "ack_ok")?,
        ack_ng: r.byte(command, "command", "ack_ng")?,
        frequency_bytes,
        poll_frequency: r.binary_query(poll, "poll.frequency", preamble, terminator, max_frame)?,
        poll_transmit: r.binary_query(poll, "poll.transmit", preamble, terminator, max_frame)?,
    };
    Ok(spec)
}

fn text_spec(r: &Reader, t: &toml::Table) -> Result<TextSpec, DialectError> {
    r.only(
        t,
        "",
        &[
            "name",
            "family",
            "message",
            "frequency",
            "status",
            "transmit",
            "poll",
        ],
    )?;
    let message = r.table(t, "", "message")?;
    r.only(message, "message", &["terminator", "max_length"])?;
    let frequency = r.table(t, "", "frequency")?;
    r.only(
        frequency,
        "frequency",
        &["digits", "vfo_a", "vfo_b", "active_vfo"],
    )?;
    let status = r.table(t, "", "status")?;
    r.only(
        status,
        "status",
        &["command", "length", "frequency_offset", "transmit_offset"],
    )?;
    let transmit = r.table(t, "", "transmit")?;
    r.only(transmit, "transmit", &["on", "off"])?;
    let poll = r.table(t, "", "poll")?;
    r.only(poll, "poll", &["frequency", "transmit"])?;

    let term_s = r.string(message, "message", "terminator")?;
    let terminator = match term_s.as_bytes() {
        [b] if b.is_ascii_punctuation() => *b,
        _ => {
            return Err(r.err(
                "message.terminator",
                "one ASCII punctuation character",
                format!("{term_s:?}"),
            ))
        }
    };
    let digits = r.int(frequency, "frequency", "digits", 6, 18)? as usize;
    let vfo_a = r.code(frequency, "frequency", "vfo_a")?;
    let vfo_b = r.code(frequency, "frequency", "vfo_b")?;
    let active_vfo = match r.string(frequency, "frequency", "active_vfo")?.as_str() {
        "A" | "a" => Vfo::A,
        "B" | "b" => Vfo::B,
        other => {
            return Err(r.err(
                "frequency.active_vfo",
                "\"A\" or \"B\"",
                format!("{other:?}"),
            ))
        }
    };
    let status_cmd = r.code(status, "status", "command")?;
    let status_length = r.int(status, "status", "length", 1, 4094)? as usize;
    let status_frequency_offset = r.int(status, "status", "frequency_offset", 0, 4094)? as usize;
    if status_frequency_offset + digits > status_length {
        return Err(r.err(
            "status.frequency_offset",
            &format!("an offset leaving room for {digits} digits in a payload of {status_length}"),
            status_frequency_offset.to_string(),
        ));
    }
    let status_transmit_offset = r.int(status, "status", "transmit_offset", 0, 4094)? as usize;
    if status_transmit_offset >= status_length
        || (status_frequency_offset..status_frequency_offset + digits)
            .contains(&status_transmit_offset)
    {
        return Err(r.err(
            "status.transmit_offset",
            &format!("an offset below {status_length}, outside the frequency field"),
            status_transmit_offset.to_string(),
        ));
    }
    let transmit_on = r.code(transmit, "transmit", "on")?;
    let transmit_off = r.code(transmit, "transmit", "off")?;
    let codes = [
        ("frequency.vfo_a", vfo_a),
        ("frequency.vfo_b", vfo_b),
        ("status.command", status_cmd),
        ("transmit.on", transmit_on),
        ("transmit.off", transmit_off),
    ];
    for (i, (key, c)) in codes.iter().enumerate() {
        if let Some((other, _)) = codes.iter().take(i).find(|(_, o)| o == c) {
            return Err(r.err(
                key,
                &format!("a command different from `{other}`"),
                String::from_utf8_lossy(c).into_owned(),
            ));
        }
    }
    let longest = 2 + status_length.max(digits);
    let max_message = r.int(message, "message", "max_length", longest as i64, 4096)? as usize;
    let poll_frequency = r.text_query(poll, "poll.frequency", terminator, transmit_on)?;
    let poll_transmit = r.text_query(poll, "poll.transmit", terminator, transmit_on)?;
    Ok(TextSpec {
        terminator,
        max_message,
        digits,
        vfo_a,
        vfo_b,
        active_vfo,
        status: status_cmd,
        status_length,
        status_frequency_offset,
        status_transmit_offset,
        transmit_on,
        transmit_off,
        poll_frequency,
        poll_transmit,
    })
}

/// Typed access to TOML tables with located errors.
struct Reader<'a> {
    file: &'a Path,
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
    fn err(&self, key: &str, expected: &str, found: String) -> DialectError {
        DialectError::Key {
            file: self.file.to_path_buf(),
            key: key.to_string(),
            expected: expected.to_string(),
            found,
        }
    }

    fn get<'t>(
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

    fn only(&self, t: &toml::Table, prefix: &str, allowed: &[&str]) -> Result<(), DialectError> {
        match t.keys().find(|k| !allowed.contains(&k.as_str())) {
            Some(k) => Err(self.err(
                &dotted(prefix, k),
                &format!("one of the keys {}", allowed.join(", ")),
                "an unknown key".into(),
            )),
            None => Ok(()),
        }
    }

    fn table<'t>(
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

    fn string(&self, t: &toml::Table, prefix: &str, key: &str) -> Result<String, DialectError> {
        match self.get(t, prefix, key, "a string")? {
            toml::Value::String(s) => Ok(s.clone()),
            v => Err(self.err(&dotted(prefix, key), "a string", describe(v))),
        }
    }

    fn int(
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

    fn byte(&self, t: &toml::Table, prefix: &str, key: &str) -> Result<u8, DialectError> {
        let v = self.int(t, prefix, key, 0, 255)?;
        u8::try_from(v).map_err(|_| self.err(&dotted(prefix, key), "a byte", v.to_string()))
    }

    /// A two-letter upper-case command.
    fn code(&self, t: &toml::Table, prefix: &str, key: &str) -> Result<[u8; 2], DialectError> {
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

    /// A binary query: hex bytes and the words `rig` and `controller`,
    /// separated by spaces. It must be a read: two preamble bytes, `rig`,
    /// `controller`, a command, at most a sub-command, the terminator. A
    /// query carrying data would be a *set* command, which we never send.
    fn binary_query(
        &self,
        poll: &toml::Table,
        key: &str,
        pre: u8,
        term: u8,
        max: usize,
    ) -> Result<Vec<Slot>, DialectError> {
        let short = key.trim_start_matches("poll.");
        let s = self.string(poll, "poll", short)?;
        let mut slots = Vec::new();
        for word in s.split_whitespace() {
            let slot = match word {
                "rig" => Slot::Rig,
                "controller" => Slot::Controller,
                w => match u8::from_str_radix(w.trim_start_matches("0x"), 16) {
                    Ok(b) if w.len() <= 4 => Slot::Byte(b),
                    _ => {
                        return Err(self.err(
                            key,
                            "hex bytes (e.g. FE) and the words `rig` and `controller`, separated by spaces",
                            format!("{w:?} in {s:?}"),
                        ))
                    }
                },
            };
            slots.push(slot);
        }
        let shape_ok = matches!(
            slots.as_slice(),
            [Slot::Byte(a), Slot::Byte(b), Slot::Rig, Slot::Controller, Slot::Byte(_), rest @ ..]
                if *a == pre && *b == pre
                    && matches!(rest, [Slot::Byte(t)] | [Slot::Byte(_), Slot::Byte(t)] if *t == term)
        );
        if !shape_ok || slots.len() > max {
            return Err(self.err(
                key,
                &format!("a read query: {pre:02X} {pre:02X} rig controller <command> [<sub-command>] {term:02X}"),
                format!("{s:?}"),
            ));
        }
        Ok(slots)
    }

    /// A text query: printable ASCII ending in the terminator; never the
    /// transmit command, which would key the rig.
    fn text_query(
        &self,
        poll: &toml::Table,
        key: &str,
        term: u8,
        transmit_on: [u8; 2],
    ) -> Result<Vec<u8>, DialectError> {
        let short = key.trim_start_matches("poll.");
        let s = self.string(poll, "poll", short)?;
        let b = s.as_bytes();
        let printable = b.iter().all(|c| (0x20..0x7F).contains(c));
        let one_message = b.iter().position(|&c| c == term) == Some(b.len().saturating_sub(1));
        if !printable || !one_message || b.len() < 3 {
            return Err(self.err(
                key,
                &format!("one printable ASCII message ending in {:?}", term as char),
                format!("{s:?}"),
            ));
        }
        if b.starts_with(&transmit_on) {
            return Err(self.err(
                key,
                "a query that does not start with the transmit command (it would key the rig)",
                format!("{s:?}"),
            ));
        }
        Ok(b.to_vec())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_builtin_parses_and_is_named_as_listed() {
        for name in Dialect::builtin_names() {
            let d = Dialect::builtin(name).unwrap_or_else(|| panic!("{name} does not load"));
            assert_eq!(d.name, *name);
            let (_, text) = BUILTINS.iter().find(|(n, _)| n == name).unwrap();
            Dialect::parse(text, Path::new(name)).unwrap();
        }
        assert_eq!(BUILTINS.len(), BUILTIN_NAMES.len());
    }

    #[test]
    fn binary_encoding_matches_hand_worked_frame() {
        // Frame layout FE FE <to> <from> <cmd> <data> FD; 14 074 000 Hz as
        // five BCD bytes, least significant first, worked by hand.
        let d = Dialect::builtin("binary-bcd").unwrap();
        assert_eq!(d.family(), Family::Binary);
        assert_eq!(
            d.encode_frequency(14_074_000, 0x5A),
            vec![0xFE, 0xFE, 0x00, 0x5A, 0x00, 0x00, 0x40, 0x07, 0x14, 0x00, 0xFD]
        );
        assert_eq!(
            d.encode_transmit(true, 0x5A),
            vec![0xFE, 0xFE, 0xE0, 0x5A, 0x1C, 0x00, 0x01, 0xFD]
        );
        assert_eq!(
            d.poll_frequency(0x5A),
            vec![0xFE, 0xFE, 0x5A, 0xE0, 0x03, 0xFD]
        );
        assert_eq!(
            d.poll_transmit(0x5A),
            vec![0xFE, 0xFE, 0x5A, 0xE0, 0x1C, 0x00, 0xFD]
        );
    }

    #[test]
    fn text_encoding() {
        let d = Dialect::builtin("text-semicolon").unwrap();
        assert_eq!(d.family(), Family::Text);
        assert_eq!(
            d.encode_frequency(14_074_000, 0),
            b"FA00014074000;".to_vec()
        );
        assert_eq!(d.encode_transmit(true, 0), b"TX;".to_vec());
        assert_eq!(d.encode_transmit(false, 0), b"RX;".to_vec());
        assert_eq!(d.poll_frequency(0), b"FA;".to_vec());
        assert_eq!(d.poll_transmit(0), b"IF;".to_vec());
        let d9 = Dialect::builtin("text-semicolon-9").unwrap();
        assert_eq!(d9.encode_frequency(7_074_000, 0), b"FA007074000;".to_vec());
    }

    fn text_with(from: &str, to: &str) -> String {
        let base = BUILTINS[2].1;
        assert!(base.contains(from), "{from}");
        base.replacen(from, to, 1)
    }

    fn key_error(text: &str) -> (String, String) {
        match Dialect::parse(text, Path::new("mine.toml")) {
            Err(e @ DialectError::Key { .. }) => {
                let msg = e.to_string();
                assert!(msg.starts_with("mine.toml: "), "{msg}");
                match e {
                    DialectError::Key { key, found, .. } => (key, found),
                    _ => unreachable!(),
                }
            }
            other => panic!("expected a key error, got {other:?}"),
        }
    }

    #[test]
    fn unknown_key_is_refused_and_named() {
        let t = text_with("[status]", "[status]\ncolour = 3");
        assert_eq!(
            key_error(&t),
            ("status.colour".into(), "an unknown key".into())
        );
        let t = format!("{}\nextra = 1\n", BUILTINS[0].1).replacen("name =", "nam =", 1);
        assert_eq!(key_error(&t).0, "nam");
    }

    #[test]
    fn wrong_type_and_range_are_named() {
        let t = text_with("digits = 11", "digits = \"eleven\"");
        assert_eq!(
            key_error(&t),
            ("frequency.digits".into(), "the string \"eleven\"".into())
        );
        let t = BUILTINS[0]
            .1
            .replacen("preamble = 0xFE", "preamble = 300", 1);
        assert_eq!(
            key_error(&t),
            ("frame.preamble".into(), "the integer 300".into())
        );
        let t = text_with("transmit_offset = 26", "transmit_offset = 3");
        assert_eq!(key_error(&t).0, "status.transmit_offset");
    }

    #[test]
    fn missing_key_is_named() {
        let t = BUILTINS[0].1.replacen("collision = 0xFC", "", 1);
        assert_eq!(
            key_error(&t),
            (
                "command.collision".into(),
                "nothing (the key is missing)".into()
            )
        );
    }

    #[test]
    fn poll_that_would_key_the_rig_is_refused() {
        let t = text_with("transmit = \"IF;\"", "transmit = \"TX;\"");
        assert_eq!(key_error(&t).0, "poll.transmit");
    }

    #[test]
    fn binary_poll_carrying_data_is_refused() {
        let t = BUILTINS[0].1.replacen(
            "transmit = \"FE FE rig controller 1C 00 FD\"",
            "transmit = \"FE FE rig controller 1C 00 01 FD\"",
            1,
        );
        assert_eq!(key_error(&t).0, "poll.transmit");
    }

    #[test]
    fn resolve_builtin_path_and_unknown() {
        assert!(Dialect::resolve("binary-bcd", None).is_ok());
        assert!(matches!(
            Dialect::resolve("no-such-dialect", None),
            Err(DialectError::Unknown { .. })
        ));
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(
            dir.path().join("mine.toml"),
            BUILTINS[1].1.replace("binary-bcd-4", "mine"),
        )
        .unwrap();
        let d = Dialect::resolve("mine.toml", Some(dir.path())).unwrap();
        assert_eq!(d.name, "mine");
        let e = Dialect::resolve("absent.toml", Some(dir.path())).unwrap_err();
        assert!(matches!(e, DialectError::Io { .. }));
        assert!(e.to_string().contains("absent.toml"), "{e}");
    }

    #[test]
    fn syntax_error_names_file() {
        let e = Dialect::parse("name = ", Path::new("bad.toml")).unwrap_err();
        assert!(matches!(e, DialectError::Syntax { .. }));
        assert!(
            e.to_string()
                .starts_with("bad.toml: not valid TOML: line 1, column 8: "),
            "{e}"
        );
    }
}
