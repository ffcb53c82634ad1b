//! The binary family's dialect: what its TOML keys say and the frames it
//! implies (our poll queries, and what a rig would send, for tests and
//! scenarios).

use super::super::bcd;
use super::super::keys::{DialectError, Reader};
use super::super::meter::{MeterKind, MeterScale};

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
    /// Poll query for the split state (`[poll] split`), sent with every
    /// poll where the rig has it: split set on the rig itself is learnt.
    pub poll_split: Option<Vec<Slot>>,
    /// Poll query for the other VFO's frequency (`[poll] other_vfo`), sent
    /// only while the rig works split.
    pub poll_other_vfo: Option<Vec<Slot>>,
    /// Commands only the station decoder reads.
    pub station: StationCodes,
    /// The meter reads (`[meter]`, optional): only the station decoder
    /// reads their answers.
    pub meters: Vec<BinaryMeter>,
}

/// One meter read of a binary dialect (`[meter.signal]`, `[meter.swr]`,
/// `[meter.power]`): a read query with a sub-command, answered with the
/// same command and sub-command and two BCD bytes, most significant first
/// (0000 to 9999; the family's meters read 0000 to 0255, recalled).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BinaryMeter {
    pub kind: MeterKind,
    /// The read query (`read`), checked like every poll query.
    pub read: Vec<Slot>,
    /// The query's command and sub-command, which its answer repeats.
    pub command: u8,
    pub sub: u8,
    /// Raw reading to value (`scale`).
    pub scale: MeterScale,
}

/// Commands of a binary dialect that only the station decoder reads
/// (`[station]` table).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct StationCodes {
    /// Frequency set of the VFO in use, acknowledged by the rig.
    pub frequency_set: u8,
    /// VFO select, and its data bytes naming VFO A and B.
    pub select_vfo: u8,
    pub vfo_a: u8,
    pub vfo_b: u8,
    /// Split, and its data bytes for off and on.
    pub split: u8,
    pub split_off: u8,
    pub split_on: u8,
    /// Frequency of the selected/unselected VFO, and the two sub-commands.
    pub vfo_frequency: u8,
    pub selected_sub: u8,
    pub unselected_sub: u8,
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

impl BinarySpec {
    /// An unsolicited broadcast from `rig_address` announcing `hz`. A
    /// frequency wider than the field keeps only its low digits, as a rig
    /// with that field would.
    pub fn encode_frequency(&self, hz: u64, rig_address: u8) -> Vec<u8> {
        let mut f = vec![
            self.preamble,
            self.preamble,
            self.broadcast,
            rig_address,
            self.frequency_broadcast,
        ];
        let at = f.len();
        f.resize(at + self.frequency_bytes, 0);
        if let Some(field) = f.get_mut(at..) {
            bcd::encode_le_into(hz, field);
        }
        f.push(self.terminator);
        f
    }

    /// The rig's answer to our controller address: transmit on/off.
    pub fn encode_transmit(&self, on: bool, rig_address: u8) -> Vec<u8> {
        vec![
            self.preamble,
            self.preamble,
            self.controller,
            rig_address,
            self.transmit,
            self.transmit_sub,
            u8::from(on),
            self.terminator,
        ]
    }

    /// The frame of `m` (see `StationMessage`): the rig's broadcast of
    /// its operating frequency, or a command from the controller address
    /// to `rig_address`: `frequency_set` (the selected VFO) or
    /// `vfo_frequency` with the unselected sub-command and the frequency,
    /// `select_vfo`, `split`, and the transmit command with its
    /// sub-command and 01/00.
    pub fn encode_station(&self, m: &super::super::StationMessage, rig_address: u8) -> Vec<u8> {
        use super::super::StationMessage as M;
        let st = &self.station;
        let field = |hz: u64| {
            let mut f = vec![0; self.frequency_bytes];
            bcd::encode_le_into(hz, &mut f);
            f
        };
        let body: Vec<u8> = match *m {
            M::Operating { hz, .. } => return self.encode_frequency(hz, rig_address),
            M::SetFrequency {
                selected: true, hz, ..
            } => [&[st.frequency_set][..], &field(hz)].concat(),
            M::SetFrequency { hz, .. } => {
                [&[st.vfo_frequency, st.unselected_sub][..], &field(hz)].concat()
            }
            M::SelectVfo { vfo } => vec![
                st.select_vfo,
                match vfo {
                    super::super::Vfo::A => st.vfo_a,
                    super::super::Vfo::B => st.vfo_b,
                },
            ],
            M::Split { on, .. } => vec![st.split, if on { st.split_on } else { st.split_off }],
            M::Transmit { on } => vec![self.transmit, self.transmit_sub, u8::from(on)],
        };
        [
            &[self.preamble, self.preamble, rig_address, self.controller][..],
            &body,
            &[self.terminator],
        ]
        .concat()
    }

    /// The rig's answer to our controller address for a meter read: the
    /// meter's command and sub-command, and `raw` (0..=9999) as two BCD
    /// bytes, most significant first; None where the dialect has no such
    /// meter.
    pub fn encode_meter(&self, kind: MeterKind, raw: u16, rig_address: u8) -> Option<Vec<u8>> {
        let m = self.meters.iter().find(|m| m.kind == kind)?;
        let raw = raw.min(9999);
        let bcd2 = |v: u16| ((v / 10) << 4 | (v % 10)) as u8;
        Some(vec![
            self.preamble,
            self.preamble,
            self.controller,
            rig_address,
            m.command,
            m.sub,
            bcd2(raw / 100),
            bcd2(raw % 100),
            self.terminator,
        ])
    }

    /// A poll query with the addresses filled in.
    pub fn query(&self, slots: &[Slot], rig_address: u8) -> Vec<u8> {
        fill(slots, rig_address, self.controller)
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

impl BinarySpec {
    /// Reads the family's tables of a dialect file (the top-level keys
    /// already checked by the loader).
    pub(crate) fn from_toml(r: &Reader, t: &toml::Table) -> Result<BinarySpec, DialectError> {
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
                "station",
                "meter",
            ],
        )?;
        let station = r.table(t, "", "station")?;
        let station_keys = [
            "frequency_set",
            "select_vfo",
            "vfo_a",
            "vfo_b",
            "split",
            "split_off",
            "split_on",
            "vfo_frequency",
            "selected_sub",
            "unselected_sub",
        ];
        r.only(station, "station", &station_keys)?;
        let sb = |key: &str| r.byte(station, "station", key);
        let station = StationCodes {
            frequency_set: sb("frequency_set")?,
            select_vfo: sb("select_vfo")?,
            vfo_a: sb("vfo_a")?,
            vfo_b: sb("vfo_b")?,
            split: sb("split")?,
            split_off: sb("split_off")?,
            split_on: sb("split_on")?,
            vfo_frequency: sb("vfo_frequency")?,
            selected_sub: sb("selected_sub")?,
            unselected_sub: sb("unselected_sub")?,
        };
        for (a, b, key) in [
            (station.vfo_a, station.vfo_b, "station.vfo_b"),
            (station.split_off, station.split_on, "station.split_on"),
            (
                station.selected_sub,
                station.unselected_sub,
                "station.unselected_sub",
            ),
        ] {
            if a == b {
                return Err(r.err(key, "a byte different from its pair", format!("0x{b:02X}")));
            }
        }
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
        r.only(
            poll,
            "poll",
            &["frequency", "transmit", "split", "other_vfo"],
        )?;

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
            poll_frequency: binary_query(
                r,
                poll,
                "poll.frequency",
                preamble,
                terminator,
                max_frame,
            )?,
            poll_transmit: binary_query(r, poll, "poll.transmit", preamble, terminator, max_frame)?,
            poll_split: match poll.contains_key("split") {
                true => Some(binary_query(
                    r,
                    poll,
                    "poll.split",
                    preamble,
                    terminator,
                    max_frame,
                )?),
                false => None,
            },
            poll_other_vfo: match poll.contains_key("other_vfo") {
                true => Some(binary_query(
                    r,
                    poll,
                    "poll.other_vfo",
                    preamble,
                    terminator,
                    max_frame,
                )?),
                false => None,
            },
            station,
            meters: Vec::new(),
        };
        let meters = match t.contains_key("meter") {
            true => binary_meters(r, r.table(t, "", "meter")?, &spec)?,
            false => Vec::new(),
        };
        Ok(BinarySpec { meters, ..spec })
    }
}

/// `[meter]`: a table per meter kind, each `read` (a read query with a
/// sub-command, refused otherwise like every poll query) and `scale`. The
/// command must not be one the decoder reads for something else, and no
/// two meters may share a command and sub-command.
fn binary_meters(
    r: &Reader,
    meter: &toml::Table,
    spec: &BinarySpec,
) -> Result<Vec<BinaryMeter>, DialectError> {
    let st = &spec.station;
    let taken = [
        ("command.frequency_broadcast", spec.frequency_broadcast),
        ("command.frequency_read", spec.frequency_read),
        ("command.transmit", spec.transmit),
        ("command.collision", spec.collision),
        ("command.ack_ok", spec.ack_ok),
        ("command.ack_ng", spec.ack_ng),
        ("station.frequency_set", st.frequency_set),
        ("station.select_vfo", st.select_vfo),
        ("station.split", st.split),
        ("station.vfo_frequency", st.vfo_frequency),
    ];
    let mut out: Vec<BinaryMeter> = Vec::new();
    for (kind, table) in r.meter_tables(meter)? {
        let prefix = format!("meter.{}", kind.as_str());
        r.only(table, &prefix, &["read", "scale"])?;
        let key = format!("{prefix}.read");
        let read = binary_query_in(
            r,
            table,
            &prefix,
            "read",
            spec.preamble,
            spec.terminator,
            spec.max_frame,
        )?;
        let (command, sub) = match read.as_slice() {
            [_, _, _, _, Slot::Byte(c), Slot::Byte(s), _] => (*c, *s),
            _ => return Err(r.err(
                &key,
                "a meter read with a sub-command: FE FE rig controller <command> <sub-command> FD",
                format!("{:?}", r.string(table, &prefix, "read")?),
            )),
        };
        if let Some((other, _)) = taken.iter().find(|(_, c)| *c == command) {
            return Err(r.err(
                &key,
                &format!("a command other than `{other}`"),
                format!("0x{command:02X}"),
            ));
        }
        if let Some(m) = out.iter().find(|m| m.command == command && m.sub == sub) {
            return Err(r.err(
                &key,
                &format!(
                    "a command and sub-command other than those of `meter.{}.read`",
                    m.kind.as_str()
                ),
                format!("0x{command:02X} 0x{sub:02X}"),
            ));
        }
        let scale = r.scale(table, &prefix, "scale")?;
        out.push(BinaryMeter {
            kind,
            read,
            command,
            sub,
            scale,
        });
    }
    Ok(out)
}

/// A binary query: hex bytes and the words `rig` and `controller`,
/// separated by spaces. It must be a read: two preamble bytes, `rig`,
/// `controller`, a command, at most a sub-command, the terminator. A
/// query carrying data would be a *set* command, which we never send.
fn binary_query(
    r: &Reader,
    poll: &toml::Table,
    key: &str,
    pre: u8,
    term: u8,
    max: usize,
) -> Result<Vec<Slot>, DialectError> {
    let short = key.trim_start_matches("poll.");
    binary_query_in(r, poll, "poll", short, pre, term, max)
}

/// [`binary_query`] at any table: `prefix.short`.
fn binary_query_in(
    r: &Reader,
    table: &toml::Table,
    prefix: &str,
    short: &str,
    pre: u8,
    term: u8,
    max: usize,
) -> Result<Vec<Slot>, DialectError> {
    let key = &format!("{prefix}.{short}");
    let s = r.string(table, prefix, short)?;
    let mut slots = Vec::new();
    for word in s.split_whitespace() {
        let slot = match word {
            "rig" => Slot::Rig,
            "controller" => Slot::Controller,
            w => match u8::from_str_radix(w.trim_start_matches("0x"), 16) {
                Ok(b) if w.len() <= 4 => Slot::Byte(b),
                _ => return Err(r.err(
                    key,
                    "hex bytes (e.g. FE) and the words `rig` and `controller`, separated by spaces",
                    format!("{w:?} in {s:?}"),
                )),
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
        return Err(r.err(
            key,
            &format!("a read query: {pre:02X} {pre:02X} rig controller <command> [<sub-command>] {term:02X}"),
            format!("{s:?}"),
        ));
    }
    Ok(slots)
}
