//! What the rig is doing, as far as the core knows it: the station model.
//!
//! The core follows a *station*, not a frequency: each VFO's frequency,
//! which VFO receives and which transmits (split), the XIT/RIT offsets where
//! the family reports them, and the transmit state with where that knowledge
//! came from and since when. Decoders (through the session) and the
//! hardware sense line feed it [`StationEvent`]s; the core asks it which
//! frequency the loop must be tuned for ([`Station::tune_hz`]) and whether
//! the rig may be transmitting.
//!
//! The transmit state has three values and *unknown is never receive*: it is
//! unknown at start, after the rig's port came back, and stays unknown until
//! a report, a poll answer, a command seen going to the rig or the sense line
//! says otherwise. When a sense line is wired it is the authority: any source
//! saying "transmit" means transmit, and while the line reads transmitting
//! nothing but the line itself may end it.
//!
//! Pure: no IO, no clock (times are the driver's `Duration`s).

use std::fmt;
use std::time::Duration;

pub use crate::rig::Vfo;
use crate::rig::{OffsetKind, RigEvent, Seen};

/// The other VFO.
fn other(v: Vfo) -> Vfo {
    match v {
        Vfo::A => Vfo::B,
        Vfo::B => Vfo::A,
    }
}

fn index(v: Vfo) -> usize {
    match v {
        Vfo::A => 0,
        Vfo::B => 1,
    }
}

/// Which VFO a frequency report is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Which {
    /// The VFO the rig receives on (the "operating" or "selected" VFO of a
    /// report that does not name one).
    Receive,
    /// The VFO the rig does not receive on (the binary family's
    /// "unselected" VFO).
    Other,
    /// A VFO named by the report.
    Vfo(Vfo),
}

/// Whether the rig transmits, as far as anything has told us.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum TransmitState {
    Receive,
    Transmit,
    /// Nothing has said, or what was said no longer holds (the port came
    /// back). Never treated as receive.
    Unknown,
}

impl TransmitState {
    pub fn as_str(self) -> &'static str {
        match self {
            TransmitState::Receive => "receive",
            TransmitState::Transmit => "transmit",
            TransmitState::Unknown => "unknown",
        }
    }
}

impl fmt::Display for TransmitState {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Where a piece of knowledge about the rig came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Source {
    /// The rig said so on its own (a transceive report).
    RigReport,
    /// The rig answered one of our poll queries.
    PollAnswer,
    /// A command seen going *to* the rig from another program (proxy mode,
    /// or the echo on a shared bus): taken as what the rig will do.
    CommandSeen,
    /// The hardware transmit-sense input.
    SenseLine,
}

impl Source {
    pub fn as_str(self) -> &'static str {
        match self {
            Source::RigReport => "rig-report",
            Source::PollAnswer => "poll-answer",
            Source::CommandSeen => "command-seen",
            Source::SenseLine => "sense-line",
        }
    }
}

impl fmt::Display for Source {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// The transmit state with its origin and the time it was last confirmed
/// (by any source agreeing with it) or changed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct TransmitKnowledge {
    pub state: TransmitState,
    /// `None` while unknown.
    pub source: Option<Source>,
    /// When this state was last told (its age is `now - since`).
    pub since: Duration,
}

impl TransmitKnowledge {
    /// How old the knowledge is at `now`.
    pub fn age(&self, now: Duration) -> Duration {
        now.saturating_sub(self.since)
    }
}

/// Which frequency the loop is tuned for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum TuneFor {
    /// The transmit VFO, XIT included: where the power goes (default).
    #[default]
    Transmit,
    /// The receive VFO, RIT included.
    Receive,
}

/// Something learnt about the station.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StationEvent {
    /// A VFO's frequency, in Hz.
    Frequency {
        which: Which,
        hz: u64,
        source: Source,
    },
    /// The rig receives on `vfo` (a VFO select). Without split it also
    /// transmits there.
    ReceiveVfo { vfo: Vfo, source: Source },
    /// The rig transmits on `vfo`.
    TransmitVfo { vfo: Vfo, source: Source },
    /// The A/B toggle: receive and transmit VFOs swap to the other. What
    /// the VFO now in use was known at is forgotten: a family that toggles
    /// without naming the VFO cannot read the other one, so it may be
    /// stale; the next set or read says it.
    ToggleVfo { source: Source },
    /// Split on (transmit on the VFO it does not receive on) or off.
    Split { on: bool, source: Source },
    /// The XIT offset in Hz while XIT is on, `None` while off.
    Xit { offset_hz: Option<i64> },
    /// The RIT offset in Hz while RIT is on, `None` while off.
    Rit { offset_hz: Option<i64> },
    /// The rig transmits (`true`) or receives.
    Transmit { on: bool, source: Source },
    /// What was known of the transmit state no longer holds (the rig's
    /// port came back after a drop): unknown until told again. A wired
    /// sense line keeps its reading.
    TransmitUnknown,
}

/// What an event changed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Changed {
    /// The transmit state changed (not only its age or source).
    pub transmit: bool,
}

/// The station model. See the module documentation.
#[derive(Debug, Clone)]
pub struct Station {
    vfo: [Option<u64>; 2],
    rx: Vfo,
    tx: Vfo,
    xit: Option<i64>,
    rit: Option<i64>,
    transmit: TransmitKnowledge,
    /// A sense line is wired: its last reading (`None` until first read).
    sense: Option<Option<bool>>,
}

impl Default for Station {
    fn default() -> Self {
        Station::new(false)
    }
}

impl Station {
    /// A station about which nothing is known yet; `sense_wired`: a hardware
    /// transmit-sense line will report.
    pub fn new(sense_wired: bool) -> Station {
        Station {
            vfo: [None, None],
            rx: Vfo::A,
            tx: Vfo::A,
            xit: None,
            rit: None,
            transmit: TransmitKnowledge {
                state: TransmitState::Unknown,
                source: None,
                since: Duration::ZERO,
            },
            sense: sense_wired.then_some(None),
        }
    }

    /// Takes in what was learnt at `now`.
    pub fn apply(&mut self, now: Duration, ev: StationEvent) -> Changed {
        let before = self.transmit.state;
        match ev {
            StationEvent::Frequency { which, hz, source } => {
                let vfo = match which {
                    Which::Receive if self.split() => match self.operating_vfo(hz, source) {
                        Some(v) => v,
                        None => return Changed::default(),
                    },
                    Which::Receive => self.rx,
                    Which::Other => other(self.rx),
                    Which::Vfo(v) => v,
                };
                if let Some(slot) = self.vfo.get_mut(index(vfo)) {
                    *slot = Some(hz);
                }
            }
            StationEvent::ReceiveVfo { vfo, .. } => {
                let split = self.split();
                self.rx = vfo;
                self.tx = if split { other(vfo) } else { vfo };
            }
            StationEvent::TransmitVfo { vfo, .. } => self.tx = vfo,
            StationEvent::ToggleVfo { .. } => {
                self.rx = other(self.rx);
                self.tx = other(self.tx);
                if let Some(slot) = self.vfo.get_mut(index(self.rx)) {
                    *slot = None;
                }
                if let Some(slot) = self.vfo.get_mut(index(self.tx)) {
                    *slot = None;
                }
            }
            StationEvent::Split { on, .. } => {
                self.tx = if on { other(self.rx) } else { self.rx };
            }
            StationEvent::Xit { offset_hz } => self.xit = offset_hz,
            StationEvent::Rit { offset_hz } => self.rit = offset_hz,
            StationEvent::Transmit { on, source } => self.told_transmit(now, on, source),
            StationEvent::TransmitUnknown => match self.sense {
                Some(Some(on)) => self.set_transmit(now, on, Source::SenseLine),
                _ => {
                    self.transmit = TransmitKnowledge {
                        state: TransmitState::Unknown,
                        source: None,
                        since: now,
                    }
                }
            },
        }
        Changed {
            transmit: self.transmit.state != before,
        }
    }

    /// In split, which VFO a report of the rig's *operating* frequency (a
    /// report naming no VFO) is about, or `None` when it is news about
    /// neither. The rig reports the transmit VFO's frequency while it
    /// transmits and the receive VFO's otherwise, as its display shows; but
    /// what we know of the transmit state lags the rig at every key and
    /// unkey: a poll's frequency answer is read before its transmit answer
    /// (binary family: `03` before `1C 00`), a status answer's frequency is
    /// decoded before its own transmit flag (text family). Read against the
    /// old state, the first report after an unkey (the receive VFO's) would
    /// be taken for the transmit VFO, and the loop moved off the transmit
    /// frequency (issue 10's polled-split bug). So a report equal to what
    /// the *other* VFO is known at is that VFO seen through the edge, not
    /// news; a report new to both VFOs is taken for the VFO the transmit
    /// state says (unknown counts as receive here, as without split). The
    /// named and unselected-VFO reads (`FA;`/`FB;`, `25 01`) put right
    /// anything this leaves stale. A command seen going to the rig (a set
    /// of the VFO in use) is an intent, not an echo: taken by the state.
    fn operating_vfo(&self, hz: u64, source: Source) -> Option<Vfo> {
        let by_state = if self.transmit.state == TransmitState::Transmit {
            self.tx
        } else {
            self.rx
        };
        if source == Source::CommandSeen {
            return Some(by_state);
        }
        let seen_through_the_edge =
            self.vfo_hz(other(by_state)) == Some(hz) && self.vfo_hz(by_state) != Some(hz);
        (!seen_through_the_edge).then_some(by_state)
    }

    fn told_transmit(&mut self, now: Duration, on: bool, source: Source) {
        if source == Source::SenseLine {
            if self.sense.is_none() {
                // A reading from a line the station did not say was wired:
                // still believed when it says transmit.
                if on {
                    self.set_transmit(now, true, source);
                }
                return;
            }
            self.sense = Some(Some(on));
            self.set_transmit(now, on, source);
            return;
        }
        if !on && self.sense == Some(Some(true)) {
            // The sense line says the rig is on the air: only the line may
            // end the transmission.
            return;
        }
        self.set_transmit(now, on, source);
    }

    fn set_transmit(&mut self, now: Duration, on: bool, source: Source) {
        let state = if on {
            TransmitState::Transmit
        } else {
            TransmitState::Receive
        };
        self.transmit = TransmitKnowledge {
            state,
            source: Some(source),
            since: now,
        };
    }

    /// The VFO's frequency, if reported.
    pub fn vfo_hz(&self, vfo: Vfo) -> Option<u64> {
        self.vfo.get(index(vfo)).copied().flatten()
    }
    pub fn receive_vfo(&self) -> Vfo {
        self.rx
    }
    pub fn transmit_vfo(&self) -> Vfo {
        self.tx
    }
    /// The rig transmits on a VFO it does not receive on.
    pub fn split(&self) -> bool {
        self.rx != self.tx
    }
    /// Where the rig transmits: the transmit VFO plus the XIT offset.
    pub fn transmit_hz(&self) -> Option<u64> {
        offset(self.vfo_hz(self.tx)?, self.xit)
    }
    /// Where the rig receives: the receive VFO plus the RIT offset.
    pub fn receive_hz(&self) -> Option<u64> {
        offset(self.vfo_hz(self.rx)?, self.rit)
    }
    /// The frequency the loop must be tuned for.
    pub fn tune_hz(&self, tune_for: TuneFor) -> Option<u64> {
        match tune_for {
            TuneFor::Transmit => self.transmit_hz(),
            TuneFor::Receive => self.receive_hz(),
        }
    }
    /// What the loop would be tuned for after a split toggle or an A/B
    /// swap: the other VFO than the one `tune_for` names, with the same
    /// offset (XIT for the transmit frequency, RIT for the receive one).
    /// `None` while that VFO's frequency is not known.
    pub fn alternate_hz(&self, tune_for: TuneFor) -> Option<u64> {
        match tune_for {
            TuneFor::Transmit => offset(self.vfo_hz(other(self.tx))?, self.xit),
            TuneFor::Receive => offset(self.vfo_hz(other(self.rx))?, self.rit),
        }
    }
    pub fn transmit(&self) -> TransmitKnowledge {
        self.transmit
    }
    pub fn sense_wired(&self) -> bool {
        self.sense.is_some()
    }
}

/// What a decoder's event says about the station, if anything. `next` is
/// the event after it: the station decoder follows the active VFO's
/// `Frequency` with the `Vfo` event of the same message, and then the VFO
/// event alone says which VFO it was (the operator may be on the other).
/// `polled`: the session polls the rig, so reports are poll answers.
pub fn from_rig(ev: &RigEvent, next: Option<&RigEvent>, polled: bool) -> Option<StationEvent> {
    let report = if polled {
        Source::PollAnswer
    } else {
        Source::RigReport
    };
    let source = |seen: Seen| match seen {
        Seen::Report => report,
        Seen::Command => Source::CommandSeen,
    };
    Some(match *ev {
        RigEvent::Frequency { hz } => {
            if matches!(next, Some(RigEvent::Vfo { hz: h, .. } | RigEvent::SelectedFrequency { hz: h, .. }) if *h == hz)
            {
                return None;
            }
            StationEvent::Frequency {
                which: Which::Receive,
                hz,
                source: report,
            }
        }
        RigEvent::Transmit { on } => StationEvent::Transmit { on, source: report },
        RigEvent::TransmitCommand { on } => StationEvent::Transmit {
            on,
            source: Source::CommandSeen,
        },
        RigEvent::Vfo { vfo: v, hz, seen } => StationEvent::Frequency {
            which: Which::Vfo(v),
            hz,
            source: source(seen),
        },
        RigEvent::SelectedFrequency { hz, seen } => StationEvent::Frequency {
            which: Which::Receive,
            hz,
            source: source(seen),
        },
        RigEvent::UnselectedFrequency { hz, seen } => StationEvent::Frequency {
            which: Which::Other,
            hz,
            source: source(seen),
        },
        RigEvent::ReceiveVfo { vfo: v, seen } => StationEvent::ReceiveVfo {
            vfo: v,
            source: source(seen),
        },
        RigEvent::TransmitVfo { vfo: v, seen } => StationEvent::TransmitVfo {
            vfo: v,
            source: source(seen),
        },
        RigEvent::VfoToggle { seen } => StationEvent::ToggleVfo {
            source: source(seen),
        },
        RigEvent::Split { on, seen } => StationEvent::Split {
            on,
            source: source(seen),
        },
        RigEvent::Offset { kind, on, hz, .. } => {
            // On without the offset carried: taken as zero until a message
            // carries it (the loop's dead band is wider than a RIT/XIT
            // step on every band we follow).
            let offset_hz = on.then(|| i64::from(hz.unwrap_or(0)));
            match kind {
                OffsetKind::Xit => StationEvent::Xit { offset_hz },
                OffsetKind::Rit => StationEvent::Rit { offset_hz },
            }
        }
        // A meter reading is not the station's state: the session takes
        // it for the search or the SWR watch that asked for it.
        RigEvent::Reject { .. } | RigEvent::Meter { .. } => return None,
    })
}

fn offset(hz: u64, by: Option<i64>) -> Option<u64> {
    match by {
        None => Some(hz),
        Some(d) => hz.checked_add_signed(d),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const T0: Duration = Duration::ZERO;

    fn freq(which: Which, hz: u64) -> StationEvent {
        StationEvent::Frequency {
            which,
            hz,
            source: Source::RigReport,
        }
    }

    #[test]
    fn unknown_at_start_and_after_reconnect() {
        let mut s = Station::new(false);
        assert_eq!(s.transmit().state, TransmitState::Unknown);
        s.apply(
            T0,
            StationEvent::Transmit {
                on: false,
                source: Source::PollAnswer,
            },
        );
        assert_eq!(s.transmit().state, TransmitState::Receive);
        assert_eq!(s.transmit().source, Some(Source::PollAnswer));
        let c = s.apply(Duration::from_secs(3), StationEvent::TransmitUnknown);
        assert!(c.transmit);
        assert_eq!(s.transmit().state, TransmitState::Unknown);
        assert_eq!(
            s.transmit().age(Duration::from_secs(5)),
            Duration::from_secs(2)
        );
    }

    #[test]
    fn split_tunes_for_the_transmit_vfo_with_xit() {
        let mut s = Station::new(false);
        s.apply(T0, freq(Which::Vfo(Vfo::A), 14_195_000));
        s.apply(T0, freq(Which::Vfo(Vfo::B), 14_200_000));
        assert_eq!(s.tune_hz(TuneFor::Transmit), Some(14_195_000));
        s.apply(
            T0,
            StationEvent::Split {
                on: true,
                source: Source::RigReport,
            },
        );
        assert!(s.split());
        assert_eq!(s.tune_hz(TuneFor::Transmit), Some(14_200_000));
        assert_eq!(s.tune_hz(TuneFor::Receive), Some(14_195_000));
        s.apply(
            T0,
            StationEvent::Xit {
                offset_hz: Some(-300),
            },
        );
        assert_eq!(s.transmit_hz(), Some(14_199_700));
        // Selecting B while split swaps: receive B, transmit A.
        s.apply(
            T0,
            StationEvent::ReceiveVfo {
                vfo: Vfo::B,
                source: Source::CommandSeen,
            },
        );
        assert_eq!(s.receive_hz(), Some(14_200_000));
        assert_eq!(s.transmit_vfo(), Vfo::A);
        // Transmitting split, the operating frequency is the transmit VFO's.
        s.apply(
            T0,
            StationEvent::Transmit {
                on: true,
                source: Source::RigReport,
            },
        );
        s.apply(T0, freq(Which::Receive, 14_200_100));
        assert_eq!(s.vfo_hz(Vfo::A), Some(14_200_100));
        assert_eq!(s.receive_hz(), Some(14_200_000));
        s.apply(
            T0,
            StationEvent::Transmit {
                on: false,
                source: Source::RigReport,
            },
        );
        // "Other" is the VFO not receiving.
        s.apply(T0, freq(Which::Other, 14_190_000));
        assert_eq!(s.vfo_hz(Vfo::A), Some(14_190_000));
    }

    #[test]
    fn in_split_an_operating_report_equal_to_the_other_vfo_is_no_news() {
        // Receive A 7.100 MHz, transmit B 7.105 MHz.
        let mut s = Station::new(false);
        s.apply(T0, freq(Which::Vfo(Vfo::A), 7_100_000));
        s.apply(T0, freq(Which::Vfo(Vfo::B), 7_105_000));
        let split_on = StationEvent::Split {
            on: true,
            source: Source::PollAnswer,
        };
        s.apply(T0, split_on);
        let tx = |on| StationEvent::Transmit {
            on,
            source: Source::PollAnswer,
        };
        // Just keyed, not yet heard: the transmit VFO's frequency read as
        // if the rig received. Not the receive VFO's news.
        s.apply(T0, tx(false));
        s.apply(T0, freq(Which::Receive, 7_105_000));
        assert_eq!(s.vfo_hz(Vfo::A), Some(7_100_000));
        // A receive retune new to both VFOs is the receive VFO's.
        s.apply(T0, freq(Which::Receive, 7_101_000));
        assert_eq!(s.vfo_hz(Vfo::A), Some(7_101_000));
        // Just unkeyed, not yet heard: the receive VFO's frequency read as
        // if the rig transmitted. Not the transmit VFO's news.
        s.apply(T0, tx(true));
        s.apply(T0, freq(Which::Receive, 7_101_000));
        assert_eq!(s.transmit_hz(), Some(7_105_000));
        // The transmit VFO tuned during the over.
        s.apply(T0, freq(Which::Receive, 7_106_000));
        assert_eq!(s.transmit_hz(), Some(7_106_000));
        assert_eq!(s.receive_hz(), Some(7_101_000));
        // A set seen going to the rig is an intent: taken by the state,
        // whatever the other VFO is at.
        s.apply(T0, tx(false));
        s.apply(
            T0,
            StationEvent::Frequency {
                which: Which::Receive,
                hz: 7_106_000,
                source: Source::CommandSeen,
            },
        );
        assert_eq!(s.receive_hz(), Some(7_106_000));
    }

    #[test]
    fn sense_line_is_the_authority() {
        let mut s = Station::new(true);
        let tx = |on, source| StationEvent::Transmit { on, source };
        s.apply(T0, tx(true, Source::SenseLine));
        // A CAT report of receive does not end what the line sees.
        s.apply(T0, tx(false, Source::RigReport));
        assert_eq!(s.transmit().state, TransmitState::Transmit);
        s.apply(T0, tx(false, Source::SenseLine));
        assert_eq!(s.transmit().state, TransmitState::Receive);
        // Any source saying transmit means transmit.
        s.apply(T0, tx(true, Source::CommandSeen));
        assert_eq!(s.transmit().state, TransmitState::Transmit);
        // Which the line may end early.
        s.apply(T0, tx(false, Source::SenseLine));
        assert_eq!(s.transmit().state, TransmitState::Receive);
        // A reconnect keeps the line's reading.
        s.apply(T0, StationEvent::TransmitUnknown);
        assert_eq!(s.transmit().state, TransmitState::Receive);
    }

    #[test]
    fn offsets_never_wrap() {
        let mut s = Station::new(false);
        s.apply(T0, freq(Which::Receive, 100));
        s.apply(
            T0,
            StationEvent::Xit {
                offset_hz: Some(-1_000),
            },
        );
        assert_eq!(s.transmit_hz(), None);
    }
}
