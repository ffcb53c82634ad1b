//! The block family's dialect: what its TOML keys say.

use std::path::Path;

use super::super::keys::{DialectError, Reader};
use super::super::meter::{MeterKind, MeterScale};
use super::super::{plausible, RejectReason, RigEvent};

/// Digit order of the frequency answer's packed BCD.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DigitOrder {
    /// Most significant byte first.
    BigEndian,
    /// Least significant byte first.
    LittleEndian,
}

/// Parameters of a fixed-block dialect.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BlockSpec {
    /// Bytes in every command block (parameters and the opcode).
    pub block_length: usize,
    /// Where the opcode sits in a block, counted from 0.
    pub opcode_offset: usize,
    /// Longest quiet gap inside one block or answer; a longer one starts
    /// afresh (the family has no framing bytes to resynchronise on).
    pub gap_ms: u64,
    /// Opcode of the frequency read.
    pub read_frequency: u8,
    /// Bytes of its answer: the frequency field, then a mode byte.
    pub frequency_answer_length: usize,
    /// Bytes of packed BCD at the answer's start.
    pub frequency_bytes: usize,
    pub digit_order: DigitOrder,
    /// Hz per unit of the BCD number.
    pub unit_hz: u64,
    /// Opcode of the transmit-status read.
    pub read_transmit: u8,
    /// Bytes of its answer (the status byte first).
    pub transmit_answer_length: usize,
    /// The bit(s) of the status byte that tell of transmitting.
    pub transmit_mask: u8,
    /// `true`: transmitting when the masked bits are set; `false`: when
    /// they are clear.
    pub transmit_active_high: bool,
    /// Opcode setting the frequency of the VFO in use (parameters: the
    /// frequency read's BCD field, in its digit order and unit; never
    /// polled). Seen from another program, the station decoder reports it
    /// as that VFO's frequency ([`BlockSpec::read_set`]).
    pub set_frequency: u8,
    /// Opcodes keying and unkeying the transmitter.
    pub transmit_on: u8,
    pub transmit_off: u8,
    /// Split on and off (`opcodes.split_on`/`split_off`, optional): seen
    /// from another program, the station decoder reports split.
    pub split_on: Option<u8>,
    pub split_off: Option<u8>,
    /// The A/B toggle (`opcodes.vfo_toggle`, optional): the rig then
    /// receives (and, without split, transmits) on the other VFO, and its
    /// frequency read reports that VFO. It carries no frequency: the
    /// station decoder reports it as [`RigEvent::VfoToggle`], and the next
    /// set or frequency read tells the new VFO's frequency. Never polled.
    pub vfo_toggle: Option<u8>,
    /// Other opcodes that change the rig (never polled).
    pub other_sets: Vec<u8>,
    /// The blocks we send in poll mode (checked to be the reads).
    pub poll_frequency: Vec<u8>,
    pub poll_transmit: Vec<u8>,
    /// The meter reads (`[meter]`, optional): only the station decoder
    /// reports their answers.
    pub meters: Vec<BlockMeter>,
}

/// One meter read of a block dialect (`[meter.signal]`, `[meter.power]`):
/// a read opcode (the transmit-status read itself, for a meter its answer
/// carries), its answer's length, and the bits of the answer's first byte
/// that hold the reading.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BlockMeter {
    pub kind: MeterKind,
    pub read: u8,
    pub answer_length: usize,
    pub mask: u8,
    pub scale: MeterScale,
}

impl BlockMeter {
    /// The reading in an answer's first byte.
    pub fn raw(&self, status: u8) -> u16 {
        u16::from((status & self.mask) >> self.mask.trailing_zeros())
    }
}

impl BlockSpec {
    /// Our query: zero parameters and the read opcode.
    pub fn query(&self, opcode: u8) -> Vec<u8> {
        let mut q = vec![0u8; self.block_length];
        if let Some(o) = q.get_mut(self.opcode_offset) {
            *o = opcode;
        }
        q
    }

    /// The answer a rig gives to a frequency read for `hz` (mode byte 0).
    pub fn encode_frequency(&self, hz: u64) -> Vec<u8> {
        let mut out = self.bcd(hz / self.unit_hz.max(1));
        out.resize(self.frequency_answer_length, 0);
        out
    }

    /// The answer a rig gives to a transmit-status read.
    pub fn encode_transmit(&self, on: bool) -> Vec<u8> {
        let set = on == self.transmit_active_high;
        let mut out = vec![if set { self.transmit_mask } else { 0 }];
        out.resize(self.transmit_answer_length, 0);
        out
    }

    /// `value` as `frequency_bytes` of packed BCD in the dialect's order
    /// (its low digits only, when wider).
    pub fn bcd(&self, value: u64) -> Vec<u8> {
        let mut v = value;
        let mut le: Vec<u8> = (0..self.frequency_bytes)
            .map(|_| {
                let lo = (v % 10) as u8;
                let hi = ((v / 10) % 10) as u8;
                v /= 100;
                (hi << 4) | lo
            })
            .collect();
        if self.digit_order == DigitOrder::BigEndian {
            le.reverse();
        }
        le
    }

    /// Reads a packed-BCD field in the dialect's order: `None` for a
    /// nibble above 9.
    pub fn read_bcd(&self, field: &[u8]) -> Option<u64> {
        let mut value: u64 = 0;
        let mut push = |b: u8| -> Option<()> {
            let (hi, lo) = (b >> 4, b & 0x0F);
            if hi > 9 || lo > 9 {
                return None;
            }
            value = value * 100 + u64::from(hi) * 10 + u64::from(lo);
            Some(())
        };
        match self.digit_order {
            DigitOrder::BigEndian => field.iter().try_for_each(|&b| push(b))?,
            DigitOrder::LittleEndian => field.iter().rev().try_for_each(|&b| push(b))?,
        }
        Some(value)
    }

    /// The frequency a set block (`opcodes.set_frequency`) asks for: its
    /// parameters (the block without the opcode byte, in order) begin with
    /// the same packed-BCD field as the frequency read's answer, in the
    /// dialect's digit order and unit. A nibble above 9 is a bad digit, a
    /// frequency no rig tunes is out of range.
    pub fn read_set(&self, block: &[u8]) -> Result<u64, RejectReason> {
        let params = block
            .iter()
            .enumerate()
            .filter(|(i, _)| *i != self.opcode_offset)
            .map(|(_, b)| *b);
        let field: Vec<u8> = params.take(self.frequency_bytes).collect();
        if field.len() < self.frequency_bytes {
            return Err(RejectReason::BadLength);
        }
        match self.read_bcd(&field) {
            None => Err(RejectReason::BadDigit),
            Some(v) => match plausible(v.saturating_mul(self.unit_hz))? {
                RigEvent::Frequency { hz } => Ok(hz),
                _ => Err(RejectReason::OutOfRange),
            },
        }
    }

    /// The set block the other program sends for `hz` (the frequency
    /// field in the parameters, then the opcode where the dialect puts it).
    pub fn encode_set(&self, hz: u64) -> Vec<u8> {
        let mut field = self.bcd(hz / self.unit_hz.max(1)).into_iter();
        (0..self.block_length)
            .map(|i| {
                if i == self.opcode_offset {
                    self.set_frequency
                } else {
                    field.next().unwrap_or(0)
                }
            })
            .collect()
    }

    /// Bytes the rig answers to a block with `opcode` (0: no answer).
    pub fn answer_length(&self, opcode: u8) -> usize {
        if opcode == self.read_frequency {
            self.frequency_answer_length
        } else if opcode == self.read_transmit {
            self.transmit_answer_length
        } else {
            self.meters
                .iter()
                .find(|m| m.read == opcode)
                .map_or(0, |m| m.answer_length)
        }
    }

    /// The dialect's meter of `kind`, if it reads one.
    pub fn meter(&self, kind: MeterKind) -> Option<&BlockMeter> {
        self.meters.iter().find(|m| m.kind == kind)
    }

    /// Our read block for `opcode` (zero parameters).
    pub fn read_block(&self, opcode: u8) -> Vec<u8> {
        self.query(opcode)
    }

    /// The rig's answer to meter `kind`'s read showing `raw` (kept within
    /// the meter's bits); None where the dialect has no such meter.
    pub fn encode_meter(&self, kind: MeterKind, raw: u16) -> Option<Vec<u8>> {
        let m = self.meter(kind)?;
        let shift = m.mask.trailing_zeros();
        let byte = ((u32::from(raw) << shift) as u8) & m.mask;
        let mut out = vec![byte];
        out.resize(m.answer_length, 0);
        Some(out)
    }

    /// Parses a block dialect's TOML text (`family = "block"`); `file` only
    /// names errors. (The dialect loader does not offer the family yet.)
    pub fn parse(text: &str, file: &Path) -> Result<BlockSpec, DialectError> {
        let table: toml::Table =
            text.parse()
                .map_err(|e: toml::de::Error| DialectError::Syntax {
                    file: file.to_path_buf(),
                    message: e.message().trim_end().replace('\n', " "),
                })?;
        let r = Reader { file };
        match r.string(&table, "", "family")?.as_str() {
            "block" => BlockSpec::from_toml(&r, &table),
            other => Err(r.err("family", "\"block\"", format!("{other:?}"))),
        }
    }

    /// The built-in `block-5` dialect (protocols/block-5.toml).
    pub fn builtin() -> Option<BlockSpec> {
        BlockSpec::parse(
            include_str!("../../../protocols/block-5.toml"),
            Path::new("<built-in block-5>"),
        )
        .ok()
    }

    pub(crate) fn from_toml(r: &Reader, t: &toml::Table) -> Result<BlockSpec, DialectError> {
        r.only(
            t,
            "",
            &[
                "name",
                "family",
                "block",
                "frequency",
                "transmit",
                "opcodes",
                "poll",
                "meter",
            ],
        )?;
        let block = r.table(t, "", "block")?;
        r.only(block, "block", &["length", "opcode_offset", "gap_ms"])?;
        let frequency = r.table(t, "", "frequency")?;
        r.only(
            frequency,
            "frequency",
            &["read", "answer_length", "bytes", "digit_order", "unit_hz"],
        )?;
        let transmit = r.table(t, "", "transmit")?;
        r.only(
            transmit,
            "transmit",
            &["read", "answer_length", "mask", "active_high", "on", "off"],
        )?;
        let opcodes = r.table(t, "", "opcodes")?;
        r.only(
            opcodes,
            "opcodes",
            &[
                "set_frequency",
                "split_on",
                "split_off",
                "vfo_toggle",
                "other_sets",
            ],
        )?;
        let poll = r.table(t, "", "poll")?;
        r.only(poll, "poll", &["frequency", "transmit"])?;

        let block_length = r.int(block, "block", "length", 1, 64)? as usize;
        let opcode_offset = r.int(block, "block", "opcode_offset", 0, 63)? as usize;
        if opcode_offset >= block_length {
            return Err(r.err(
                "block.opcode_offset",
                &format!("an offset below block.length ({block_length})"),
                opcode_offset.to_string(),
            ));
        }
        let gap_ms = r.int(block, "block", "gap_ms", 1, 10_000)? as u64;
        let read_frequency = r.byte(frequency, "frequency", "read")?;
        let frequency_answer_length =
            r.int(frequency, "frequency", "answer_length", 1, 64)? as usize;
        let frequency_bytes = r.int(frequency, "frequency", "bytes", 1, 9)? as usize;
        if frequency_bytes > frequency_answer_length {
            return Err(r.err(
                "frequency.bytes",
                &format!("at most frequency.answer_length ({frequency_answer_length})"),
                frequency_bytes.to_string(),
            ));
        }
        if frequency_bytes >= block_length {
            // A set block carries the same field in its parameters.
            return Err(r.err(
                "frequency.bytes",
                &format!(
                    "at most the parameter bytes of a block ({}: block.length less the opcode), which carry a set's frequency",
                    block_length - 1
                ),
                frequency_bytes.to_string(),
            ));
        }
        let digit_order = match r.string(frequency, "frequency", "digit_order")?.as_str() {
            "big-endian" => DigitOrder::BigEndian,
            "little-endian" => DigitOrder::LittleEndian,
            other => {
                return Err(r.err(
                    "frequency.digit_order",
                    "\"big-endian\" or \"little-endian\"",
                    format!("{other:?}"),
                ))
            }
        };
        let unit_hz = r.int(frequency, "frequency", "unit_hz", 1, 1_000_000)? as u64;
        let read_transmit = r.byte(transmit, "transmit", "read")?;
        let transmit_answer_length = r.int(transmit, "transmit", "answer_length", 1, 64)? as usize;
        let transmit_mask = r.byte(transmit, "transmit", "mask")?;
        if transmit_mask == 0 {
            return Err(r.err(
                "transmit.mask",
                "a mask with at least one bit set",
                "0".into(),
            ));
        }
        let transmit_active_high =
            match r.get(transmit, "transmit", "active_high", "true or false")? {
                toml::Value::Boolean(b) => *b,
                v => return Err(r.err("transmit.active_high", "true or false", v.to_string())),
            };
        let transmit_on = r.byte(transmit, "transmit", "on")?;
        let transmit_off = r.byte(transmit, "transmit", "off")?;
        let set_frequency = r.byte(opcodes, "opcodes", "set_frequency")?;
        let optional = |key: &str| -> Result<Option<u8>, DialectError> {
            match opcodes.get(key) {
                None => Ok(None),
                Some(_) => r.byte(opcodes, "opcodes", key).map(Some),
            }
        };
        let split_on = optional("split_on")?;
        let split_off = optional("split_off")?;
        let vfo_toggle = optional("vfo_toggle")?;
        let other_sets = match r.get(opcodes, "opcodes", "other_sets", "a list of opcodes")? {
            toml::Value::Array(a) => a
                .iter()
                .map(|v| match v {
                    toml::Value::Integer(i) => u8::try_from(*i).ok(),
                    _ => None,
                })
                .collect::<Option<Vec<u8>>>()
                .ok_or_else(|| {
                    r.err(
                        "opcodes.other_sets",
                        "a list of bytes (0 to 255)",
                        format!("{a:?}"),
                    )
                })?,
            v => return Err(r.err("opcodes.other_sets", "a list of opcodes", v.to_string())),
        };
        if read_frequency == read_transmit {
            return Err(r.err(
                "transmit.read",
                "an opcode different from frequency.read",
                format!("{read_transmit:#04X}"),
            ));
        }
        let mut spec = BlockSpec {
            block_length,
            opcode_offset,
            gap_ms,
            read_frequency,
            frequency_answer_length,
            frequency_bytes,
            digit_order,
            unit_hz,
            read_transmit,
            transmit_answer_length,
            transmit_mask,
            transmit_active_high,
            set_frequency,
            transmit_on,
            transmit_off,
            split_on,
            split_off,
            vfo_toggle,
            other_sets,
            poll_frequency: Vec::new(),
            poll_transmit: Vec::new(),
            meters: Vec::new(),
        };
        // The reads must be reads: never an opcode that sets or keys.
        for (key, op) in [
            ("frequency.read", read_frequency),
            ("transmit.read", read_transmit),
        ] {
            if spec.changes_the_rig(op) {
                return Err(r.err(
                    key,
                    "a read opcode, not one that sets the rig or keys it",
                    format!("{op:#04X}"),
                ));
            }
        }
        for (key, want) in [
            ("poll.frequency", read_frequency),
            ("poll.transmit", read_transmit),
        ] {
            let short = key.trim_start_matches("poll.");
            let q = poll_block(r, poll, short, &spec)?;
            let op = q.get(spec.opcode_offset).copied().unwrap_or(0);
            if spec.changes_the_rig(op) || op != want {
                return Err(r.err(
                    key,
                    &format!(
                        "a block whose opcode is the read {want:#04X} (a set or keying opcode is never polled)"
                    ),
                    format!("opcode {op:#04X}"),
                ));
            }
            if want == read_frequency {
                spec.poll_frequency = q;
            } else {
                spec.poll_transmit = q;
            }
        }
        spec.other_sets.sort_unstable();
        if t.contains_key("meter") {
            spec.meters = block_meters(r, r.table(t, "", "meter")?, &spec)?;
        }
        Ok(spec)
    }

    /// Whether `opcode` sets the rig or keys it.
    pub fn changes_the_rig(&self, opcode: u8) -> bool {
        opcode == self.set_frequency
            || opcode == self.transmit_on
            || opcode == self.transmit_off
            || self.split_on == Some(opcode)
            || self.split_off == Some(opcode)
            || self.vfo_toggle == Some(opcode)
            || self.other_sets.contains(&opcode)
    }
}

/// `[meter]`: a table per meter kind, each `read` (a read opcode, never one
/// that sets or keys the rig, nor the frequency read), `answer_length`
/// (that of the transmit-status read where it is that read), `mask` (the
/// bits of the answer's first byte) and `scale`.
fn block_meters(
    r: &Reader,
    meter: &toml::Table,
    spec: &BlockSpec,
) -> Result<Vec<BlockMeter>, DialectError> {
    let mut out: Vec<BlockMeter> = Vec::new();
    for (kind, table) in r.meter_tables(meter)? {
        let prefix = format!("meter.{}", kind.as_str());
        r.only(table, &prefix, &["read", "answer_length", "mask", "scale"])?;
        let read = r.byte(table, &prefix, "read")?;
        if spec.changes_the_rig(read) || read == spec.read_frequency {
            return Err(r.err(
                &format!("{prefix}.read"),
                "a read opcode, not one that sets the rig or keys it, nor `frequency.read`",
                format!("{read:#04X}"),
            ));
        }
        let answer_length = r.int(table, &prefix, "answer_length", 1, 64)? as usize;
        let same_length = if read == spec.read_transmit {
            Some(spec.transmit_answer_length)
        } else {
            out.iter().find(|m| m.read == read).map(|m| m.answer_length)
        };
        if same_length.is_some_and(|n| n != answer_length) {
            return Err(r.err(
                &format!("{prefix}.answer_length"),
                "the length of the other answer to the same read",
                answer_length.to_string(),
            ));
        }
        let mask = r.byte(table, &prefix, "mask")?;
        if mask == 0 || (read == spec.read_transmit && mask & spec.transmit_mask != 0) {
            return Err(r.err(
                &format!("{prefix}.mask"),
                "a mask with at least one bit set, none of them `transmit.mask`'s",
                format!("{mask:#04X}"),
            ));
        }
        let scale = r.scale(table, &prefix, "scale")?;
        out.push(BlockMeter {
            kind,
            read,
            answer_length,
            mask,
            scale,
        });
    }
    Ok(out)
}

/// A poll block: `block.length` bytes.
fn poll_block(
    r: &Reader,
    poll: &toml::Table,
    key: &str,
    spec: &BlockSpec,
) -> Result<Vec<u8>, DialectError> {
    let full = format!("poll.{key}");
    let expected = format!("a list of {} bytes", spec.block_length);
    match r.get(poll, "poll", key, &expected)? {
        toml::Value::Array(a) if a.len() == spec.block_length => a
            .iter()
            .map(|v| match v {
                toml::Value::Integer(i) => u8::try_from(*i).ok(),
                _ => None,
            })
            .collect::<Option<Vec<u8>>>()
            .ok_or_else(|| r.err(&full, &expected, format!("{a:?}"))),
        v => Err(r.err(&full, &expected, v.to_string())),
    }
}
