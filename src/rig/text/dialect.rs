//! The text family's dialect: what its TOML keys say and the messages it
//! implies (what a rig would send, for tests and scenarios).

use super::super::keys::{DialectError, Reader};
use super::super::meter::{MeterKind, MeterScale};

pub use super::super::Vfo;

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
    /// The command reading or setting the receive VFO (station decoder).
    pub receive_vfo: [u8; 2],
    /// The command reading or setting the transmit VFO (station decoder).
    pub transmit_vfo: [u8; 2],
    /// The one-character payloads of those commands naming VFO A and B.
    pub select_a: u8,
    pub select_b: u8,
    /// The status answer carrying frequency and transmit flag.
    pub status: [u8; 2],
    /// Payload length of a status answer.
    pub status_length: usize,
    /// Offset of the frequency field in the status payload.
    pub status_frequency_offset: usize,
    /// Offset of the one-character transmit flag in the status payload;
    /// `None`: the family's status answer does not carry the transmit state.
    pub status_transmit_offset: Option<usize>,
    /// Where the station decoder finds the status answer's other flags.
    pub status_station: StatusFlags,
    /// Message meaning "transmitting" (optional one-digit payload), or, with
    /// `transmit_digits`, the transmit-state message whose digit says.
    pub transmit_on: [u8; 2],
    /// Message meaning "receiving" (optional one-digit payload); `None`: the
    /// family has none (its `transmit_on` message's digit says receive).
    pub transmit_off: Option<[u8; 2]>,
    /// What the digit of a `transmit_on` message means, where the family
    /// gives it a meaning (`TX0;` can mean *receive*); `None`: any payload
    /// means transmitting.
    pub transmit_digits: Option<TransmitDigits>,
    pub poll_frequency: Vec<u8>,
    pub poll_transmit: Vec<u8>,
    /// Poll query for the split state (`[poll] split`), with every poll,
    /// where the status answer does not carry it.
    pub poll_split: Option<Vec<u8>>,
    /// Poll query for the other VFO's frequency (`[poll] other_vfo`), sent
    /// only while the rig works split.
    pub poll_other_vfo: Option<Vec<u8>>,
    /// The meter reads (`[meter]`, optional): only the station decoder
    /// reads their answers.
    pub meters: Vec<TextMeter>,
}

/// One meter read of a text dialect (`[meter.signal]`, `[meter.swr]`,
/// `[meter.power]`): a read query, and its answer: `answer` (the command
/// letters and any fixed characters after them, such as the meter's
/// number), then `digits` decimal digits, the raw reading.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TextMeter {
    pub kind: MeterKind,
    /// The read query, checked like every poll query (never keys the rig).
    pub read: Vec<u8>,
    /// The answer's two command letters.
    pub command: [u8; 2],
    /// What follows them in every answer, before the digits.
    pub prefix: Vec<u8>,
    /// Digits of the raw reading.
    pub digits: usize,
    /// Raw reading to value.
    pub scale: MeterScale,
}

/// Offsets in the status payload of what only the station decoder reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct StatusFlags {
    /// One character naming the VFO in use (`select_a`/`select_b`);
    /// `None`: the family's status answer does not name it.
    pub vfo: Option<usize>,
    /// One character: split off `0`, on `1`; `None`: not carried.
    pub split: Option<usize>,
    /// One character each: RIT, XIT off `0`, on `1`.
    pub rit: usize,
    pub xit: usize,
    /// The RIT/XIT offset: a sign then `offset_digits` digits, in Hz.
    pub offset: usize,
    pub offset_digits: usize,
}

/// The meaning of the one digit after the transmit-state command.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TransmitDigits {
    /// Digits that mean the rig receives.
    pub receive: Vec<u8>,
    /// Digits that mean the rig transmits (whatever keyed it).
    pub transmit: Vec<u8>,
    /// The command with no digit is a read of the transmit state (answered
    /// with a digit), not a key: it may be polled.
    pub bare_is_read: bool,
}

impl TransmitDigits {
    /// Whether `digit` means transmitting; `None` for a digit without a
    /// meaning.
    pub fn means_transmit(&self, digit: u8) -> Option<bool> {
        if self.transmit.contains(&digit) {
            Some(true)
        } else if self.receive.contains(&digit) {
            Some(false)
        } else {
            None
        }
    }
}

impl TextSpec {
    /// The active VFO's message announcing `hz`. A frequency wider than the
    /// field keeps only its low digits, as a rig with that field would.
    pub fn encode_frequency(&self, hz: u64) -> Vec<u8> {
        let vfo = match self.active_vfo {
            Vfo::A => self.vfo_a,
            Vfo::B => self.vfo_b,
        };
        let modulus = 10u64.saturating_pow(self.digits as u32);
        let mut f = vfo.to_vec();
        f.extend_from_slice(format!("{:0width$}", hz % modulus, width = self.digits).as_bytes());
        f.push(self.terminator);
        f
    }

    /// The message `m` (see `StationMessage`): `FA`/`FB` with the
    /// frequency for a report or a set, the receive-VFO command for a VFO
    /// select, the transmit-VFO command for split (on: the VFO other than
    /// the receive VFO), the transmit and receive messages for keying.
    pub fn encode_station(&self, m: &super::super::StationMessage) -> Vec<u8> {
        use super::super::StationMessage as M;
        let name = |v: Vfo| match v {
            Vfo::A => self.select_a,
            Vfo::B => self.select_b,
        };
        let other = |v: Vfo| match v {
            Vfo::A => Vfo::B,
            Vfo::B => Vfo::A,
        };
        let mut f = match *m {
            M::Operating { vfo, hz } | M::SetFrequency { vfo, hz, .. } => {
                let modulus = 10u64.saturating_pow(self.digits as u32);
                let mut f = match vfo {
                    Vfo::A => self.vfo_a,
                    Vfo::B => self.vfo_b,
                }
                .to_vec();
                f.extend_from_slice(
                    format!("{:0width$}", hz % modulus, width = self.digits).as_bytes(),
                );
                f
            }
            M::SelectVfo { vfo } => [&self.receive_vfo[..], &[name(vfo)]].concat(),
            M::Split { on, rx } => {
                let tx = if on { other(rx) } else { rx };
                [&self.transmit_vfo[..], &[name(tx)]].concat()
            }
            M::Transmit { on } => {
                let mut t = self.encode_transmit(on);
                t.pop();
                t
            }
        };
        f.push(self.terminator);
        f
    }

    /// Every command whose messages the reporting decoder understands.
    pub(crate) fn known_commands(&self) -> impl Iterator<Item = &[u8; 2]> {
        [
            Some(&self.vfo_a),
            Some(&self.vfo_b),
            Some(&self.status),
            Some(&self.transmit_on),
            self.transmit_off.as_ref(),
        ]
        .into_iter()
        .flatten()
    }

    /// The commands only the station decoder understands.
    pub(crate) fn station_commands(&self) -> impl Iterator<Item = &[u8; 2]> {
        [&self.receive_vfo, &self.transmit_vfo]
            .into_iter()
            .chain(self.meters.iter().map(|m| &m.command))
    }

    /// The rig's answer to a meter read: the answer's letters and prefix,
    /// then `raw` in the meter's digits (kept to its low digits); None
    /// where the dialect has no such meter.
    pub fn encode_meter(&self, kind: MeterKind, raw: u16) -> Option<Vec<u8>> {
        let m = self.meters.iter().find(|m| m.kind == kind)?;
        let modulus = 10u64.saturating_pow(m.digits as u32);
        let mut f = m.command.to_vec();
        f.extend_from_slice(&m.prefix);
        f.extend_from_slice(
            format!("{:0width$}", u64::from(raw) % modulus, width = m.digits).as_bytes(),
        );
        f.push(self.terminator);
        Some(f)
    }

    /// The transmit or receive message a rig sends: with digit meanings,
    /// the transmit-state command and the first digit of that meaning.
    pub fn encode_transmit(&self, on: bool) -> Vec<u8> {
        let mut f = match (&self.transmit_digits, self.transmit_off) {
            (Some(m), _) => {
                let digits = if on { &m.transmit } else { &m.receive };
                let mut f = self.transmit_on.to_vec();
                f.extend(digits.first());
                f
            }
            (None, Some(off)) if !on => off.to_vec(),
            (None, _) => self.transmit_on.to_vec(),
        };
        f.push(self.terminator);
        f
    }
}

impl TextSpec {
    /// Reads the family's tables of a dialect file (the top-level keys
    /// already checked by the loader).
    pub(crate) fn from_toml(r: &Reader, t: &toml::Table) -> Result<TextSpec, DialectError> {
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
                "meter",
            ],
        )?;
        let message = r.table(t, "", "message")?;
        r.only(message, "message", &["terminator", "max_length"])?;
        let frequency = r.table(t, "", "frequency")?;
        r.only(
            frequency,
            "frequency",
            &[
                "digits",
                "vfo_a",
                "vfo_b",
                "active_vfo",
                "receive_vfo",
                "transmit_vfo",
                "select_a",
                "select_b",
            ],
        )?;
        let status = r.table(t, "", "status")?;
        r.only(
            status,
            "status",
            &[
                "command",
                "length",
                "frequency_offset",
                "transmit_offset",
                "vfo_offset",
                "split_offset",
                "rit_offset",
                "xit_offset",
                "offset_offset",
                "offset_digits",
            ],
        )?;
        let transmit = r.table(t, "", "transmit")?;
        r.only(
            transmit,
            "transmit",
            &[
                "on",
                "off",
                "receive_digits",
                "transmit_digits",
                "bare_is_read",
            ],
        )?;
        let poll = r.table(t, "", "poll")?;
        r.only(
            poll,
            "poll",
            &["frequency", "transmit", "split", "other_vfo"],
        )?;

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
        let receive_vfo = r.code(frequency, "frequency", "receive_vfo")?;
        let transmit_vfo = r.code(frequency, "frequency", "transmit_vfo")?;
        let select = |key: &str| -> Result<u8, DialectError> {
            let v = r.string(frequency, "frequency", key)?;
            match v.as_bytes() {
                [b] if b.is_ascii_alphanumeric() => Ok(*b),
                _ => Err(r.err(
                    &format!("frequency.{key}"),
                    "one ASCII letter or digit",
                    format!("{v:?}"),
                )),
            }
        };
        let select_a = select("select_a")?;
        let select_b = select("select_b")?;
        if select_a == select_b {
            return Err(r.err(
                "frequency.select_b",
                "a character different from `frequency.select_a`",
                format!("{:?}", select_b as char),
            ));
        }
        let status_cmd = r.code(status, "status", "command")?;
        let status_length = r.int(status, "status", "length", 1, 4094)? as usize;
        let status_frequency_offset =
            r.int(status, "status", "frequency_offset", 0, 4094)? as usize;
        if status_frequency_offset + digits > status_length {
            return Err(r.err(
                "status.frequency_offset",
                &format!(
                    "an offset leaving room for {digits} digits in a payload of {status_length}"
                ),
                status_frequency_offset.to_string(),
            ));
        }
        let status_transmit_offset = match status.get("transmit_offset") {
            None => None,
            Some(_) => {
                let at = r.int(status, "status", "transmit_offset", 0, 4094)? as usize;
                if at >= status_length
                    || (status_frequency_offset..status_frequency_offset + digits).contains(&at)
                {
                    return Err(r.err(
                        "status.transmit_offset",
                        &format!("an offset below {status_length}, outside the frequency field"),
                        at.to_string(),
                    ));
                }
                Some(at)
            }
        };
        let transmit_on = r.code(transmit, "transmit", "on")?;
        let transmit_off = match transmit.get("off") {
            None => None,
            Some(_) => Some(r.code(transmit, "transmit", "off")?),
        };
        let transmit_digits = transmit_digits(r, transmit)?;
        if transmit_off.is_none() && transmit_digits.is_none() && status_transmit_offset.is_none() {
            return Err(r.err(
                "transmit.off",
                "a way to learn that the rig receives: `transmit.off`, `transmit.receive_digits` or `status.transmit_offset`",
                "none of them".into(),
            ));
        }
        let freq_field = status_frequency_offset..status_frequency_offset + digits;
        let flag = |key: &str| -> Result<usize, DialectError> {
            let at = r.int(status, "status", key, 0, 4094)? as usize;
            if at >= status_length || freq_field.contains(&at) {
                return Err(r.err(
                    &format!("status.{key}"),
                    &format!("an offset below {status_length}, outside the frequency field"),
                    at.to_string(),
                ));
            }
            Ok(at)
        };
        let optional_flag = |key: &str| -> Result<Option<usize>, DialectError> {
            match status.get(key) {
                None => Ok(None),
                Some(_) => flag(key).map(Some),
            }
        };
        let offset_digits = r.int(status, "status", "offset_digits", 1, 9)? as usize;
        let offset = r.int(status, "status", "offset_offset", 0, 4094)? as usize;
        if offset + 1 + offset_digits > status_length
            || (offset < freq_field.end && freq_field.start < offset + 1 + offset_digits)
        {
            return Err(r.err(
                "status.offset_offset",
                &format!(
                    "an offset leaving room for a sign and {offset_digits} digits in a payload of {status_length}, outside the frequency field"
                ),
                offset.to_string(),
            ));
        }
        let status_station = StatusFlags {
            vfo: optional_flag("vfo_offset")?,
            split: optional_flag("split_offset")?,
            rit: flag("rit_offset")?,
            xit: flag("xit_offset")?,
            offset,
            offset_digits,
        };
        let off_code = transmit_off.unwrap_or(transmit_on);
        let mut codes = vec![
            ("frequency.vfo_a", vfo_a),
            ("frequency.vfo_b", vfo_b),
            ("status.command", status_cmd),
            ("transmit.on", transmit_on),
            ("frequency.receive_vfo", receive_vfo),
            ("frequency.transmit_vfo", transmit_vfo),
        ];
        if transmit_off.is_some() {
            codes.push(("transmit.off", off_code));
        }
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
        let keys = Keying {
            on: transmit_on,
            off: transmit_off,
            bare_is_read: transmit_digits.as_ref().is_some_and(|m| m.bare_is_read),
            term: terminator,
        };
        let poll_frequency = text_query(r, poll, "poll.frequency", &keys)?;
        let poll_transmit = text_query(r, poll, "poll.transmit", &keys)?;
        let optional = |key: &str| -> Result<Option<Vec<u8>>, DialectError> {
            match poll.contains_key(key.trim_start_matches("poll.")) {
                true => Ok(Some(text_query(r, poll, key, &keys)?)),
                false => Ok(None),
            }
        };
        let poll_split = optional("poll.split")?;
        let poll_other_vfo = optional("poll.other_vfo")?;
        let meters = match t.contains_key("meter") {
            true => text_meters(r, r.table(t, "", "meter")?, &keys, &codes, max_message)?,
            false => Vec::new(),
        };
        Ok(TextSpec {
            terminator,
            max_message,
            digits,
            vfo_a,
            vfo_b,
            active_vfo,
            receive_vfo,
            transmit_vfo,
            select_a,
            select_b,
            status: status_cmd,
            status_length,
            status_frequency_offset,
            status_transmit_offset,
            status_station,
            transmit_on,
            transmit_off,
            transmit_digits,
            poll_frequency,
            poll_transmit,
            poll_split,
            poll_other_vfo,
            meters,
        })
    }
}

/// `[meter]`: a table per meter kind, each `read` (refused like every poll
/// query), `answer` (two upper-case letters, not a command the decoder
/// reads for something else, and any fixed printable characters after
/// them), `digits` (1 to 4) and `scale`.
fn text_meters(
    r: &Reader,
    meter: &toml::Table,
    keys: &Keying,
    codes: &[(&str, [u8; 2])],
    max_message: usize,
) -> Result<Vec<TextMeter>, DialectError> {
    let mut out: Vec<TextMeter> = Vec::new();
    for (kind, table) in r.meter_tables(meter)? {
        let prefix = format!("meter.{}", kind.as_str());
        r.only(table, &prefix, &["read", "answer", "digits", "scale"])?;
        let read = text_query_in(r, table, &prefix, "read", keys)?;
        let answer = r.string(table, &prefix, "answer")?;
        let key = format!("{prefix}.answer");
        let (command, rest) = match answer.as_bytes() {
            [a, b, rest @ ..]
                if a.is_ascii_uppercase()
                    && b.is_ascii_uppercase()
                    && rest
                        .iter()
                        .all(|c| (0x21..0x7F).contains(c) && *c != keys.term) =>
            {
                ([*a, *b], rest.to_vec())
            }
            _ => return Err(r.err(
                &key,
                "two upper-case letters, then any fixed printable characters (not the terminator)",
                format!("{answer:?}"),
            )),
        };
        if let Some((other, _)) = codes.iter().find(|(_, c)| *c == command) {
            return Err(r.err(
                &key,
                &format!("a command other than `{other}`"),
                format!("{answer:?}"),
            ));
        }
        if let Some(m) = out.iter().find(|m| {
            m.command == command && (m.prefix.starts_with(&rest) || rest.starts_with(&m.prefix))
        }) {
            return Err(r.err(
                &key,
                &format!(
                    "an answer that `meter.{}.answer` does not already begin",
                    m.kind.as_str()
                ),
                format!("{answer:?}"),
            ));
        }
        let digits = r.int(table, &prefix, "digits", 1, 4)? as usize;
        if 2 + rest.len() + digits > max_message {
            return Err(r.err(
                &key,
                &format!(
                    "an answer that fits in `message.max_length` ({max_message}) with its digits"
                ),
                format!("{answer:?}"),
            ));
        }
        let scale = r.scale(table, &prefix, "scale")?;
        out.push(TextMeter {
            kind,
            read,
            command,
            prefix: rest,
            digits,
            scale,
        });
    }
    Ok(out)
}

/// `[transmit] receive_digits`, `transmit_digits`, `bare_is_read`: all or
/// none (the digits as strings of decimal digits, no digit in both).
fn transmit_digits(
    r: &Reader,
    transmit: &toml::Table,
) -> Result<Option<TransmitDigits>, DialectError> {
    let present = ["receive_digits", "transmit_digits", "bare_is_read"]
        .iter()
        .filter(|k| transmit.contains_key(**k))
        .count();
    if present == 0 {
        return Ok(None);
    }
    let digit_set = |key: &str| -> Result<Vec<u8>, DialectError> {
        let s = r.string(transmit, "transmit", key)?;
        let b = s.as_bytes().to_vec();
        if b.is_empty() || !b.iter().all(u8::is_ascii_digit) {
            return Err(r.err(
                &format!("transmit.{key}"),
                "one or more decimal digits, such as \"0\"",
                format!("{s:?}"),
            ));
        }
        Ok(b)
    };
    let receive = digit_set("receive_digits")?;
    let transmit_set = digit_set("transmit_digits")?;
    if let Some(d) = receive.iter().find(|d| transmit_set.contains(d)) {
        return Err(r.err(
            "transmit.transmit_digits",
            "digits other than those of `transmit.receive_digits`",
            format!("{:?} in both", *d as char),
        ));
    }
    let bare_is_read = match r.get(transmit, "transmit", "bare_is_read", "true or false")? {
        toml::Value::Boolean(b) => *b,
        v => return Err(r.err("transmit.bare_is_read", "true or false", format!("{v}"))),
    };
    Ok(Some(TransmitDigits {
        receive,
        transmit: transmit_set,
        bare_is_read,
    }))
}

/// What keys or unkeys the rig in this family, for the poll check.
struct Keying {
    on: [u8; 2],
    off: Option<[u8; 2]>,
    /// The `on` command alone is a read.
    bare_is_read: bool,
    term: u8,
}

/// A text query: printable ASCII ending in the terminator; never a command
/// that keys the rig or ends its transmission: the transmit command (with
/// any digit; alone too, unless the family reads the state with it) and
/// the receive command (which would cut the operator's over short).
fn text_query(
    r: &Reader,
    poll: &toml::Table,
    key: &str,
    keys: &Keying,
) -> Result<Vec<u8>, DialectError> {
    let short = key.trim_start_matches("poll.");
    text_query_in(r, poll, "poll", short, keys)
}

/// [`text_query`] at any table: `prefix.short`.
fn text_query_in(
    r: &Reader,
    table: &toml::Table,
    prefix: &str,
    short: &str,
    keys: &Keying,
) -> Result<Vec<u8>, DialectError> {
    let key = &format!("{prefix}.{short}");
    let s = r.string(table, prefix, short)?;
    let b = s.as_bytes();
    let term = keys.term;
    let printable = b.iter().all(|c| (0x20..0x7F).contains(c));
    let one_message = b.iter().position(|&c| c == term) == Some(b.len().saturating_sub(1));
    if !printable || !one_message || b.len() < 3 {
        return Err(r.err(
            key,
            &format!("one printable ASCII message ending in {:?}", term as char),
            format!("{s:?}"),
        ));
    }
    let bare_read = b.len() == 3 && keys.bare_is_read;
    if b.starts_with(&keys.on) && !bare_read {
        let why = if keys.bare_is_read {
            "the transmit-state read alone (with a digit the transmit command keys the rig or ends its transmission)"
        } else {
            "a query that does not start with the transmit command (it would key the rig)"
        };
        return Err(r.err(key, why, format!("{s:?}")));
    }
    if keys.off.is_some_and(|off| b.starts_with(&off)) {
        return Err(r.err(
            key,
            "a query that does not start with the receive command (it would end the operator's transmission)",
            format!("{s:?}"),
        ));
    }
    Ok(b.to_vec())
}
