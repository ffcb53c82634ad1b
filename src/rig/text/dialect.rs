//! The text family's dialect: what its TOML keys say and the messages it
//! implies (what a rig would send, for tests and scenarios).

use super::super::keys::{DialectError, Reader};

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
    /// Offset of the one-character transmit flag in the status payload.
    pub status_transmit_offset: usize,
    /// Where the station decoder finds the status answer's other flags.
    pub status_station: StatusFlags,
    /// Message meaning "transmitting" (optional one-digit payload).
    pub transmit_on: [u8; 2],
    /// Message meaning "receiving" (optional one-digit payload).
    pub transmit_off: [u8; 2],
    pub poll_frequency: Vec<u8>,
    pub poll_transmit: Vec<u8>,
}

/// Offsets in the status payload of what only the station decoder reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct StatusFlags {
    /// One character naming the VFO in use (`select_a`/`select_b`).
    pub vfo: usize,
    /// One character: split off `0`, on `1`.
    pub split: usize,
    /// One character each: RIT, XIT off `0`, on `1`.
    pub rit: usize,
    pub xit: usize,
    /// The RIT/XIT offset: a sign then `offset_digits` digits, in Hz.
    pub offset: usize,
    pub offset_digits: usize,
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

    /// Every command whose messages the reporting decoder understands.
    pub(crate) fn known_commands(&self) -> impl Iterator<Item = &[u8; 2]> {
        [
            &self.vfo_a,
            &self.vfo_b,
            &self.status,
            &self.transmit_on,
            &self.transmit_off,
        ]
        .into_iter()
    }

    /// The commands only the station decoder understands.
    pub(crate) fn station_commands(&self) -> impl Iterator<Item = &[u8; 2]> {
        [&self.receive_vfo, &self.transmit_vfo].into_iter()
    }

    /// The transmit or receive message.
    pub fn encode_transmit(&self, on: bool) -> Vec<u8> {
        let mut f = if on {
            self.transmit_on
        } else {
            self.transmit_off
        }
        .to_vec();
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
            vfo: flag("vfo_offset")?,
            split: flag("split_offset")?,
            rit: flag("rit_offset")?,
            xit: flag("xit_offset")?,
            offset,
            offset_digits,
        };
        let transmit_on = r.code(transmit, "transmit", "on")?;
        let transmit_off = r.code(transmit, "transmit", "off")?;
        let codes = [
            ("frequency.vfo_a", vfo_a),
            ("frequency.vfo_b", vfo_b),
            ("status.command", status_cmd),
            ("transmit.on", transmit_on),
            ("transmit.off", transmit_off),
            ("frequency.receive_vfo", receive_vfo),
            ("frequency.transmit_vfo", transmit_vfo),
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
        let poll_frequency = text_query(r, poll, "poll.frequency", terminator, transmit_on)?;
        let poll_transmit = text_query(r, poll, "poll.transmit", terminator, transmit_on)?;
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
            poll_frequency,
            poll_transmit,
        })
    }
}

/// A text query: printable ASCII ending in the terminator; never the
/// transmit command, which would key the rig.
fn text_query(
    r: &Reader,
    poll: &toml::Table,
    key: &str,
    term: u8,
    transmit_on: [u8; 2],
) -> Result<Vec<u8>, DialectError> {
    let short = key.trim_start_matches("poll.");
    let s = r.string(poll, "poll", short)?;
    let b = s.as_bytes();
    let printable = b.iter().all(|c| (0x20..0x7F).contains(c));
    let one_message = b.iter().position(|&c| c == term) == Some(b.len().saturating_sub(1));
    if !printable || !one_message || b.len() < 3 {
        return Err(r.err(
            key,
            &format!("one printable ASCII message ending in {:?}", term as char),
            format!("{s:?}"),
        ));
    }
    if b.starts_with(&transmit_on) {
        return Err(r.err(
            key,
            "a query that does not start with the transmit command (it would key the rig)",
            format!("{s:?}"),
        ));
    }
    Ok(b.to_vec())
}
