//! Invented station scenarios: what an operator does over an evening (dwell,
//! turn the knob, transmit, change band, listen to a broadcast station), and
//! the bytes the rig would put on its control port meanwhile, line noise
//! included. Used by the demo, the tests and the benchmarks; never a source of
//! truth about the world.

use std::time::Duration;

use crate::rig::{Direction, StationMessage, Vfo};

/// Something the rig reports, or noise on the line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Happening {
    /// The rig reports its frequency.
    Report { hz: u64 },
    /// The rig reports transmit on or off.
    Transmit { on: bool },
    /// Bytes that are not a report: RF on the cable, a half frame.
    Noise { bytes: Vec<u8> },
    /// The rig's report of the VFO it operates on, or a command another
    /// program sends to the rig (a set, a VFO select, split, keying): see
    /// [`StationMessage`]. Commands travel to the rig ([`Direction::Tx`]).
    Station(StationMessage),
}

impl Happening {
    /// Which way its bytes travel on the rig's port.
    pub fn direction(&self) -> Direction {
        match self {
            Happening::Station(m) if m.to_rig() => Direction::Tx,
            _ => Direction::Rx,
        }
    }
}

fn other(v: Vfo) -> Vfo {
    match v {
        Vfo::A => Vfo::B,
        Vfo::B => Vfo::A,
    }
}

/// What the rig is doing in a scenario, as its happenings say: both VFOs'
/// frequencies, which one receives, and split. The truth a scenario is
/// scored against: the loop must be tuned for [`RigTruth::transmit_hz`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RigTruth {
    vfo: [u64; 2],
    rx: Vfo,
    split: bool,
}

impl RigTruth {
    /// Both VFOs on `hz`, receiving on A, no split.
    pub fn new(hz: u64) -> RigTruth {
        RigTruth {
            vfo: [hz, hz],
            rx: Vfo::A,
            split: false,
        }
    }

    fn slot(v: Vfo) -> usize {
        match v {
            Vfo::A => 0,
            Vfo::B => 1,
        }
    }

    /// Takes in what happened.
    pub fn apply(&mut self, what: &Happening) {
        use StationMessage as M;
        match *what {
            Happening::Report { hz } => self.vfo[Self::slot(self.rx)] = hz,
            Happening::Station(M::Operating { vfo, hz } | M::SetFrequency { vfo, hz, .. }) => {
                self.vfo[Self::slot(vfo)] = hz
            }
            Happening::Station(M::SelectVfo { vfo }) => self.rx = vfo,
            Happening::Station(M::Split { on, .. }) => self.split = on,
            _ => {}
        }
    }

    pub fn receive_vfo(&self) -> Vfo {
        self.rx
    }
    pub fn split(&self) -> bool {
        self.split
    }
    pub fn vfo_hz(&self, v: Vfo) -> u64 {
        self.vfo[Self::slot(v)]
    }
    pub fn receive_hz(&self) -> u64 {
        self.vfo_hz(self.rx)
    }
    /// Where the rig transmits: the VFO other than the receive VFO in split.
    pub fn transmit_hz(&self) -> u64 {
        if self.split {
            self.vfo_hz(other(self.rx))
        } else {
            self.receive_hz()
        }
    }
}

/// How a rig family puts a report on the wire.
pub trait Wire {
    fn frequency(&self, hz: u64) -> Vec<u8>;
    fn transmit(&self, on: bool) -> Vec<u8>;
    /// A [`StationMessage`]'s bytes; empty for a family without it (the
    /// scenario families that need them are not run on such a family).
    fn station(&self, m: &StationMessage) -> Vec<u8> {
        let _ = m;
        Vec::new()
    }
    /// The read that prompts `what`, sent to the rig just before its
    /// answer, for a family that never speaks unasked (the block family
    /// pairs each answer with its request); empty for a family that
    /// reports on its own.
    fn request(&self, what: &Happening) -> Vec<u8> {
        let _ = what;
        Vec::new()
    }
}

/// The bytes a rig of `wire`'s family sends for `what`.
fn answer(wire: &dyn Wire, what: &Happening) -> Vec<u8> {
    match what {
        Happening::Report { hz } => wire.frequency(*hz),
        Happening::Transmit { on } => wire.transmit(*on),
        Happening::Noise { bytes } => bytes.clone(),
        Happening::Station(m) => wire.station(m),
    }
}

/// A span of time the operator stayed on one frequency.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Dwell {
    pub hz: u64,
    pub from: Duration,
    pub to: Duration,
}

/// How the operator got to a new frequency.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum RetuneKind {
    /// The knob turned, one report per step.
    Sweep,
    /// One report and there: a band change, a memory recall, a band-map
    /// click, a return from a broadcast station.
    Jump,
}

/// A change of frequency: the report of the new frequency came `at`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Retune {
    pub at: Duration,
    pub hz: u64,
    pub kind: RetuneKind,
}

/// A scenario being written, step by step, in virtual time.
#[derive(Debug, Clone)]
pub struct Script {
    now: Duration,
    hz: u64,
    rng: fastrand::Rng,
    steps: Vec<(Duration, Happening)>,
    dwells: Vec<Dwell>,
    transmit: Vec<(Duration, Duration)>,
    retunes: Vec<Retune>,
    /// While set, the rig repeats its frequency this often (a rig that is
    /// polled, or one that announces periodically).
    repeat: Option<Duration>,
    dwell_start: Duration,
    /// The rig as the happenings so far leave it; dwells are on its
    /// transmit frequency (`hz` is its receive frequency).
    rig: RigTruth,
}

impl Script {
    /// A scenario starting at time zero on `hz`; `seed` makes noise and
    /// jitter repeatable.
    pub fn new(seed: u64, hz: u64) -> Self {
        let mut s = Script {
            now: Duration::ZERO,
            hz,
            rng: fastrand::Rng::with_seed(seed),
            steps: Vec::new(),
            dwells: Vec::new(),
            transmit: Vec::new(),
            retunes: Vec::new(),
            repeat: None,
            dwell_start: Duration::ZERO,
            rig: RigTruth::new(hz),
        };
        s.push(Happening::Report { hz });
        s
    }

    /// Have the rig repeat its frequency every `every` while nothing else
    /// happens (`None`: it speaks only on change).
    pub fn repeat_every(&mut self, every: Option<Duration>) -> &mut Self {
        self.repeat = every;
        self
    }

    pub fn now(&self) -> Duration {
        self.now
    }

    pub fn hz(&self) -> u64 {
        self.hz
    }

    fn push(&mut self, what: Happening) {
        self.rig.apply(&what);
        self.steps.push((self.now, what));
    }

    /// The rig as the scenario has left it so far.
    pub fn rig(&self) -> RigTruth {
        self.rig
    }

    /// The rig's report of its receive frequency `hz`: the plain report on
    /// VFO A, the named VFO's otherwise.
    fn receive_report(&self, hz: u64) -> Happening {
        match self.rig.receive_vfo() {
            Vfo::A => Happening::Report { hz },
            vfo => Happening::Station(StationMessage::Operating { vfo, hz }),
        }
    }

    /// Lets `d` pass on the current frequency, with repeats if enabled.
    pub fn wait(&mut self, d: Duration) -> &mut Self {
        let end = self.now + d;
        if let Some(every) = self.repeat.filter(|e| !e.is_zero()) {
            while self.now + every < end {
                self.now += every;
                let report = self.receive_report(self.hz);
                self.push(report);
            }
        }
        self.now = end;
        self
    }

    fn close_dwell(&mut self) {
        if self.now > self.dwell_start {
            self.dwells.push(Dwell {
                hz: self.rig.transmit_hz(),
                from: self.dwell_start,
                to: self.now,
            });
        }
    }

    /// Turns the knob to `to_hz` in steps of `step_hz`, one report every
    /// `every` (as a rig reports while its VFO turns).
    /// In split only the receive VFO turns: the transmit frequency, and so
    /// the dwell, stays.
    pub fn sweep(&mut self, to_hz: u64, step_hz: u64, every: Duration) -> &mut Self {
        let split = self.rig.split();
        if !split {
            self.close_dwell();
        }
        let step = step_hz.max(1);
        let turned = self.hz != to_hz;
        while self.hz != to_hz {
            self.now += every;
            self.hz = if to_hz > self.hz {
                (self.hz + step).min(to_hz)
            } else {
                self.hz.saturating_sub(step).max(to_hz)
            };
            let report = self.receive_report(self.hz);
            self.push(report);
        }
        if split {
            return self;
        }
        self.dwell_start = self.now;
        if turned {
            self.retunes.push(Retune {
                at: self.now,
                hz: self.hz,
                kind: RetuneKind::Sweep,
            });
        }
        self
    }

    /// Jumps to `hz` at once (a band change, a memory recall).
    pub fn jump(&mut self, hz: u64) -> &mut Self {
        let report = self.receive_report(hz);
        self.change(&[report], true)
    }

    /// `what`, 50 ms from now and then 20 ms apart (one message after the
    /// other on the port): a change of the rig's state in one go. When it
    /// moves the transmit frequency, the dwell before it ends and a new
    /// one starts at the last message, a retune by jump (`always`: even
    /// onto the same frequency, as a band change or recall is).
    fn change(&mut self, what: &[Happening], always: bool) -> &mut Self {
        let before = self.rig;
        let mut after = before;
        for w in what {
            after.apply(w);
        }
        let retune = always || after.transmit_hz() != before.transmit_hz();
        if retune {
            self.close_dwell();
        }
        self.now += Duration::from_millis(50);
        for (i, w) in what.iter().enumerate() {
            if i > 0 {
                self.now += Duration::from_millis(20);
            }
            self.push(w.clone());
        }
        self.hz = self.rig.receive_hz();
        if retune {
            self.dwell_start = self.now;
            self.retunes.push(Retune {
                at: self.now,
                hz: self.rig.transmit_hz(),
                kind: RetuneKind::Jump,
            });
        }
        self
    }

    /// Another program sets the VFO in use to `hz` (a logging program's
    /// band-map click, a data-mode program's band change), seen going to
    /// the rig; the rig says nothing (the core learns it from the set).
    pub fn set_by_program(&mut self, hz: u64) -> &mut Self {
        let vfo = self.rig.receive_vfo();
        self.change(
            &[Happening::Station(StationMessage::SetFrequency {
                vfo,
                selected: true,
                hz,
            })],
            false,
        )
    }

    /// Split `offset_hz` from the receive frequency: another program sets
    /// the VFO not in use there and turns split on.
    pub fn split_by_program(&mut self, offset_hz: i64) -> &mut Self {
        let rx = self.rig.receive_vfo();
        let hz = self.hz.saturating_add_signed(offset_hz);
        self.change(
            &[
                Happening::Station(StationMessage::SetFrequency {
                    vfo: other(rx),
                    selected: false,
                    hz,
                }),
                Happening::Station(StationMessage::Split { on: true, rx }),
            ],
            false,
        )
    }

    /// Split off, by another program.
    pub fn unsplit_by_program(&mut self) -> &mut Self {
        let rx = self.rig.receive_vfo();
        self.change(
            &[Happening::Station(StationMessage::Split { on: false, rx })],
            false,
        )
    }

    /// The other VFO selected (A/B), by another program; the rig then
    /// reports the frequency it now operates on.
    pub fn swap_vfo_by_program(&mut self) -> &mut Self {
        let vfo = other(self.rig.receive_vfo());
        let hz = self.rig.vfo_hz(vfo);
        self.change(
            &[
                Happening::Station(StationMessage::SelectVfo { vfo }),
                Happening::Station(StationMessage::Operating { vfo, hz }),
            ],
            false,
        )
    }

    /// `times` overs keyed by another program's transmit command (a
    /// data-mode program, a logging program sending a macro): `on`
    /// transmitting from its transmit command to its receive command.
    pub fn cat_overs(&mut self, times: u32, on: Duration, off: Duration) -> &mut Self {
        for _ in 0..times {
            let start = self.now;
            self.push(Happening::Station(StationMessage::Transmit { on: true }));
            self.wait(on);
            self.push(Happening::Station(StationMessage::Transmit { on: false }));
            self.transmit.push((start, self.now));
            self.wait(off);
        }
        self
    }

    /// `times` overs of `on` transmitting and `off` receiving.
    pub fn overs(&mut self, times: u32, on: Duration, off: Duration) -> &mut Self {
        for _ in 0..times {
            let start = self.now;
            self.push(Happening::Transmit { on: true });
            self.wait(on);
            self.push(Happening::Transmit { on: false });
            self.transmit.push((start, self.now));
            self.wait(off);
        }
        self
    }

    /// A burst of `len` random bytes on the line.
    pub fn noise(&mut self, len: usize) -> &mut Self {
        let bytes: Vec<u8> = (0..len).map(|_| self.rng.u8(..)).collect();
        self.push(Happening::Noise { bytes });
        self
    }

    /// Specific bytes on the line (a frame cut short, a doubled preamble).
    pub fn raw(&mut self, bytes: &[u8]) -> &mut Self {
        self.push(Happening::Noise {
            bytes: bytes.to_vec(),
        });
        self
    }

    /// A random whole number in `range`, from the scenario's seed.
    pub fn pick(&mut self, range: std::ops::RangeInclusive<u64>) -> u64 {
        self.rng.u64(range)
    }

    /// Ends the scenario: the steps in time order, the dwells, and the
    /// transmissions.
    pub fn finish(mut self) -> Scenario {
        self.close_dwell();
        Scenario {
            steps: self.steps,
            dwells: self.dwells,
            transmit: self.transmit,
            retunes: self.retunes,
            end: self.now,
        }
    }
}

/// Writes `scenario` as a capture file (the rig's bytes, each after the
/// read that prompted it where the family is polled only),
/// one record at a time: nothing but the scenario itself is held. Returns
/// the number of records written.
pub fn write_capture<W: std::io::Write>(
    scenario: &Scenario,
    wire: &dyn Wire,
    out: W,
) -> std::io::Result<u64> {
    let mut w = crate::capture::CaptureWriter::new(out);
    w.comment("an invented scenario, generated")?;
    let mut records = 0;
    for (t, what) in &scenario.steps {
        let bytes = answer(wire, what);
        if bytes.is_empty() {
            continue;
        }
        let request = wire.request(what);
        if !request.is_empty() {
            w.write_record(*t, Direction::Tx, &request)?;
            records += 1;
        }
        w.write_record(*t, what.direction(), &bytes)?;
        records += 1;
    }
    w.flush()?;
    Ok(records)
}

/// A finished scenario.
#[derive(Debug, Clone)]
pub struct Scenario {
    pub steps: Vec<(Duration, Happening)>,
    /// Where the operator stayed, and how long.
    pub dwells: Vec<Dwell>,
    /// Spans the rig was transmitting.
    pub transmit: Vec<(Duration, Duration)>,
    /// Every change of frequency, in time order.
    pub retunes: Vec<Retune>,
    pub end: Duration,
}

impl Scenario {
    /// The bytes on the rig port, in time order, as a rig of `wire`'s family
    /// would send them, each answer after the read that prompted it where
    /// the family is polled only ([`Wire::request`], at the same time).
    pub fn chunks(&self, wire: &dyn Wire) -> Vec<(Duration, Direction, Vec<u8>)> {
        let mut out = Vec::with_capacity(self.steps.len());
        for (t, what) in &self.steps {
            let bytes = answer(wire, what);
            let request = wire.request(what);
            if !request.is_empty() && !bytes.is_empty() {
                out.push((*t, Direction::Tx, request));
            }
            out.push((*t, what.direction(), bytes));
        }
        out
    }

    /// The rig's bytes only, one chunk per step (`steps[i]` gave
    /// `answers[i]`), for a driver that decides step by step when each
    /// goes out (bench-follow); [`Wire::request`] gives the read before it.
    pub fn answers(&self, wire: &dyn Wire) -> Vec<(Duration, Direction, Vec<u8>)> {
        self.steps
            .iter()
            .map(|(t, what)| (*t, what.direction(), answer(wire, what)))
            .collect()
    }
}

/// The demo's evening: most of an hour on 40 m, 30 m and 20 m, with knob
/// sweeps, transmissions, noise on the line and a visit to a broadcast
/// station outside the amateur bands. Invented for the demo.
pub fn demo_evening() -> Scenario {
    let s = &mut Script::new(7, 7_074_000);
    let sec = Duration::from_secs;
    let ms = Duration::from_millis;
    // 40 m: a digital-mode evening starts with 15-second overs.
    s.wait(sec(90)).overs(6, sec(13), sec(17));
    // Turn the knob up the band, listening, and settle on a voice net.
    s.sweep(7_152_000, 500, ms(60)).wait(sec(30));
    s.overs(3, sec(40), sec(55));
    // RF gets into the cable during a long over: garbage on the line.
    s.overs(1, sec(5), ms(10)).noise(24).wait(sec(1)).noise(7);
    s.wait(sec(120));
    // A small retune inside the loop's window: the tuner should stay.
    s.sweep(7_152_150, 50, ms(80)).wait(sec(60));
    // Out of the band: the evening news on a broadcast station.
    s.jump(9_650_000).wait(sec(600));
    // 30 m: a quick jump, then a sweep down past the band edge into the guard.
    s.jump(10_136_000).wait(sec(30)).overs(4, sec(13), sec(17));
    s.sweep(10_098_000, 1_000, ms(50)).wait(sec(20));
    // A frame cut short, then a doubled preamble and a partial frame.
    s.raw(&[0xFE, 0xFE, 0x00])
        .wait(ms(300))
        .raw(&[0xFE, 0xFE, 0xFE]);
    s.wait(sec(60));
    // 20 m: a contest-style run, many short overs, then a long sweep.
    // Straight onto the air after the jump, before the tuner could move:
    // the move waits for the end of the over.
    s.jump(14_250_000).wait(ms(150)).overs(10, sec(4), sec(8));
    s.sweep(14_020_000, 2_000, ms(40))
        .wait(sec(40))
        .overs(3, sec(20), sec(25));
    // Back to 40 m to close the evening.
    s.jump(7_074_000)
        .wait(sec(30))
        .overs(4, sec(13), sec(17))
        .wait(sec(60));
    s.clone().finish()
}

/// Broadcast bands outside the amateur allocations, where an operator may
/// listen (and where the tuner must stay put). Edges recalled from the
/// shortwave broadcast allocations; only used to place invented excursions.
const BROADCAST_HZ: [(u64, u64); 3] = [
    (5_900_000, 6_200_000),
    (9_400_000, 9_900_000),
    (11_600_000, 12_100_000),
];

/// A random evening of `hours` at a station operating in `bands` (low, high
/// in Hz): dwells with digital-mode or voice overs, small retunes, knob
/// sweeps, band changes, visits to broadcast stations and line noise. The
/// same seed gives the same evening.
pub fn random_evening(seed: u64, hours: f64, bands: &[(u64, u64)]) -> Scenario {
    random_evening_repeating(seed, hours, bands, None)
}

/// [`random_evening`] from a rig that also repeats its frequency every
/// `repeat` while nothing else happens (a polled rig): the same evening, with
/// more reports on the wire.
pub fn random_evening_repeating(
    seed: u64,
    hours: f64,
    bands: &[(u64, u64)],
    repeat: Option<Duration>,
) -> Scenario {
    let first = bands.first().copied().unwrap_or((7_000_000, 7_200_000));
    let mut rng = fastrand::Rng::with_seed(seed ^ 0x5eed);
    let start = rng.u64(first.0..=first.1);
    let s = &mut Script::new(seed, start);
    s.repeat_every(repeat);
    let end = Duration::from_secs_f64(hours.max(0.0) * 3600.0);
    let ms = Duration::from_millis;
    let sec = Duration::from_secs;
    let mut band = first;
    while s.now() < end {
        match rng.u32(0..100) {
            // Stay and operate: digital-mode cycles or voice overs.
            0..=39 => {
                s.wait(sec(rng.u64(5..=60)));
                if rng.bool() {
                    let n = rng.u32(1..=8);
                    s.overs(n, sec(13), sec(17));
                } else {
                    for _ in 0..rng.u32(1..=4) {
                        let on = ms(rng.u64(5_000..=90_000));
                        let off = ms(rng.u64(3_000..=60_000));
                        s.overs(1, on, off);
                        if rng.u32(0..10) == 0 {
                            // RF into the cable during the over.
                            let n = rng.usize(1..=48);
                            s.noise(n);
                        }
                    }
                }
            }
            // A small retune, a few hundred Hz to a few kHz.
            40..=59 => {
                let delta = rng.u64(100..=3_000);
                let to = either_side(s.hz(), delta, rng.bool(), band);
                s.sweep(to, rng.u64(10..=100), ms(rng.u64(20..=80)));
                quick_call(s, &mut rng);
                s.wait(sec(rng.u64(10..=120)));
            }
            // Tune across the band looking for a contact.
            60..=74 => {
                let to = rng.u64(band.0..=band.1);
                s.sweep(to, rng.u64(200..=2_000), ms(rng.u64(20..=100)));
                s.wait(sec(rng.u64(5..=90)));
            }
            // Change band.
            75..=86 => {
                if let Some(b) = bands.get(rng.usize(0..bands.len().max(1))) {
                    band = *b;
                    let hz = rng.u64(b.0..=b.1);
                    s.jump(hz);
                    quick_call(s, &mut rng);
                    s.wait(sec(rng.u64(5..=60)));
                }
            }
            // Listen to a broadcast station, then come back.
            87..=91 => {
                let bc = BROADCAST_HZ[rng.usize(0..BROADCAST_HZ.len())];
                let back = s.hz();
                s.jump(rng.u64(bc.0..=bc.1)).wait(sec(rng.u64(60..=900)));
                s.jump(back).wait(sec(rng.u64(5..=30)));
            }
            // Noise on the line.
            _ => {
                let n = rng.usize(1..=64);
                s.noise(n).wait(ms(rng.u64(100..=5_000)));
            }
        }
    }
    s.clone().finish()
}

/// An evening of chasing stations from a band map and memories: the
/// second scenario family of `bench-follow`. Invented, with proportions
/// judged, not measured (common practice, no source): of the operator's
/// doings, 30 % are band-map clicks (a logging program sets the rig to a
/// spotted station, 5 to 150 kHz away in the same band, and calls within
/// 50 to 100 ms four times in five: it keys the rig itself right after
/// the set), 12 % memory recalls (a stored frequency in any band, a call
/// after 0.3 to 3 s half of the time), 8 % band changes by one press (a
/// call within 0.1 to 1 s a third of the time), 30 % staying to work the
/// station, 15 % small knob retunes and 5 % noise on the line. Memories
/// are four frequencies per band, drawn once per evening.
pub fn spotting_evening(seed: u64, hours: f64, bands: &[(u64, u64)]) -> Scenario {
    let first = bands.first().copied().unwrap_or((7_000_000, 7_200_000));
    let mut rng = fastrand::Rng::with_seed(seed ^ 0x5b07);
    let memories: Vec<u64> = bands
        .iter()
        .flat_map(|b| (0..4).map(|_| rng.u64(b.0..=b.1)).collect::<Vec<_>>())
        .collect();
    let s = &mut Script::new(seed, rng.u64(first.0..=first.1));
    let end = Duration::from_secs_f64(hours.max(0.0) * 3600.0);
    let ms = Duration::from_millis;
    let sec = Duration::from_secs;
    let mut band = first;
    let call = |s: &mut Script, rng: &mut fastrand::Rng, after: Duration| {
        s.wait(after);
        let n = rng.u32(1..=3);
        for _ in 0..n {
            let on = ms(rng.u64(3_000..=15_000));
            s.overs(1, on, ms(rng.u64(2_000..=12_000)));
        }
    };
    while s.now() < end {
        match rng.u32(0..100) {
            // A band-map click: the logging program sets the rig to a spot.
            0..=29 => {
                let delta = rng.u64(5_000..=150_000);
                let to = either_side(s.hz(), delta, rng.bool(), band);
                s.jump(to);
                if rng.u32(0..5) < 4 {
                    let after = ms(rng.u64(50..=100));
                    call(s, &mut rng, after);
                }
                s.wait(sec(rng.u64(5..=40)));
            }
            // A memory recall.
            30..=41 => {
                if let Some(&hz) = memories.get(rng.usize(0..memories.len().max(1))) {
                    if let Some(b) = bands.iter().find(|b| (b.0..=b.1).contains(&hz)) {
                        band = *b;
                    }
                    s.jump(hz);
                    if rng.bool() {
                        let after = ms(rng.u64(300..=3_000));
                        call(s, &mut rng, after);
                    }
                    s.wait(sec(rng.u64(5..=60)));
                }
            }
            // A band change by one press.
            42..=49 => {
                if let Some(b) = bands.get(rng.usize(0..bands.len().max(1))) {
                    band = *b;
                    s.jump(rng.u64(b.0..=b.1));
                    if rng.u32(0..3) == 0 {
                        let after = ms(rng.u64(100..=1_000));
                        call(s, &mut rng, after);
                    }
                    s.wait(sec(rng.u64(5..=60)));
                }
            }
            // Stay and work the station.
            50..=79 => {
                s.wait(sec(rng.u64(2..=30)));
                let after = ms(rng.u64(0..=500));
                call(s, &mut rng, after);
            }
            // A small knob retune, then often a call.
            80..=94 => {
                let delta = rng.u64(100..=3_000);
                let to = either_side(s.hz(), delta, rng.bool(), band);
                s.sweep(to, rng.u64(10..=100), ms(rng.u64(20..=80)));
                quick_call(s, &mut rng);
                s.wait(sec(rng.u64(5..=60)));
            }
            _ => {
                let n = rng.usize(1..=64);
                s.noise(n).wait(ms(rng.u64(100..=5_000)));
            }
        }
    }
    s.clone().finish()
}

/// `delta` above `hz` when `up`, below it otherwise, kept inside `band`:
/// the retunes of every scenario family that go a random way from where
/// the rig is.
fn either_side(hz: u64, delta: u64, up: bool, band: (u64, u64)) -> u64 {
    if up {
        hz.saturating_add(delta)
    } else {
        hz.saturating_sub(delta)
    }
    .clamp(band.0, band.1)
}

/// An evening of working split and swapping VFOs, with a logging program
/// sharing the rig's port (proxy mode): the third scenario family of
/// `bench-follow`. Invented, with proportions judged, not measured (common
/// practice, no source): of the operator's doings, 25 % are going split for
/// a station that listens up (the logging program sets the VFO not in use
/// 1 to 5 kHz above the receive frequency and turns split on; calls on
/// that VFO, the first within 0.3 to 3 s, while the receive VFO is often
/// tuned around the pile-up; split off at the end), 10 % VFO A/B swaps by
/// the program (the rig reports the VFO it now operates on; in split this
/// also swaps which VFO transmits), 25 % staying to work the station, 15 %
/// small knob retunes of the receive VFO (with a call at once a third of
/// the time), 10 % band changes (the program turns split off first; the
/// operator presses the band key 0.3 to 1.5 s later, a person's reaction,
/// not a program's next command), 10 % knob sweeps across the band and 5 %
/// noise on the line.
pub fn split_evening(seed: u64, hours: f64, bands: &[(u64, u64)]) -> Scenario {
    let first = bands.first().copied().unwrap_or((7_000_000, 7_200_000));
    let mut rng = fastrand::Rng::with_seed(seed ^ 0x5b11);
    let s = &mut Script::new(seed, rng.u64(first.0..=first.1.saturating_sub(5_000)));
    let end = Duration::from_secs_f64(hours.max(0.0) * 3600.0);
    let ms = Duration::from_millis;
    let sec = Duration::from_secs;
    let mut band = first;
    let call = |s: &mut Script, rng: &mut fastrand::Rng| {
        for _ in 0..rng.u32(1..=3) {
            let on = ms(rng.u64(3_000..=15_000));
            s.overs(1, on, ms(rng.u64(2_000..=12_000)));
        }
    };
    while s.now() < end {
        match rng.u32(0..100) {
            // Split for a station listening up.
            0..=24 => {
                if !s.rig().split() {
                    // Room above for the transmit VFO inside the band.
                    let room = band.1.saturating_sub(s.hz());
                    if room < 1_000 {
                        s.jump(band.0 + rng.u64(0..=(band.1 - band.0) / 2));
                    }
                    let up = rng.u64(1_000..=5_000).min(band.1.saturating_sub(s.hz()));
                    s.split_by_program(up as i64);
                }
                s.wait(ms(rng.u64(300..=3_000)));
                for _ in 0..rng.u32(1..=4) {
                    call(s, &mut rng);
                    if rng.bool() {
                        // Listening around the pile-up on the receive VFO.
                        let delta = rng.u64(100..=1_500);
                        let to = either_side(s.hz(), delta, rng.bool(), band);
                        s.sweep(to, rng.u64(10..=100), ms(rng.u64(20..=80)));
                        s.wait(ms(rng.u64(200..=3_000)));
                    }
                }
                if rng.u32(0..3) > 0 {
                    s.unsplit_by_program();
                    s.wait(sec(rng.u64(2..=20)));
                }
            }
            // The other VFO.
            25..=34 => {
                s.swap_vfo_by_program();
                // The other VFO may be on another band: what follows is
                // done on the band the rig is now on.
                if let Some(b) = bands.iter().find(|b| (b.0..=b.1).contains(&s.hz())) {
                    band = *b;
                }
                s.wait(ms(rng.u64(300..=5_000)));
                if rng.bool() {
                    call(s, &mut rng);
                }
                s.wait(sec(rng.u64(2..=30)));
            }
            // Stay and work the station.
            35..=59 => {
                s.wait(sec(rng.u64(2..=30)));
                call(s, &mut rng);
            }
            // A small knob retune of the receive VFO.
            60..=74 => {
                let delta = rng.u64(100..=3_000);
                let to = either_side(s.hz(), delta, rng.bool(), band);
                s.sweep(to, rng.u64(10..=100), ms(rng.u64(20..=80)));
                quick_call(s, &mut rng);
                s.wait(sec(rng.u64(5..=60)));
            }
            // Another band: split off first.
            75..=84 => {
                if s.rig().split() {
                    s.unsplit_by_program();
                    s.wait(ms(rng.u64(300..=1_500)));
                }
                if let Some(b) = bands.get(rng.usize(0..bands.len().max(1))) {
                    band = *b;
                    s.jump(rng.u64(b.0..=b.1));
                    quick_call(s, &mut rng);
                    s.wait(sec(rng.u64(5..=60)));
                }
            }
            // Tune across the band (the receive VFO) looking for a contact.
            85..=94 => {
                let to = rng.u64(band.0..=band.1);
                s.sweep(to, rng.u64(200..=2_000), ms(rng.u64(20..=100)));
                s.wait(sec(rng.u64(5..=60)));
            }
            _ => {
                let n = rng.usize(1..=64);
                s.noise(n).wait(ms(rng.u64(100..=5_000)));
            }
        }
    }
    s.clone().finish()
}

/// An evening of other programs driving the rig through the shared port
/// (proxy mode): the fourth scenario family of `bench-follow`. Invented,
/// with proportions judged, not measured (common practice, no source): of
/// the operator's doings, 35 % are band-map clicks (the logging program
/// sets the VFO in use to a spot 5 to 150 kHz away in the band and keys
/// the rig by command 50 to 100 ms later four times in five, overs of 3 to
/// 15 s ended by its receive command), 30 % data-mode cycles (the data
/// program keys the rig by command for 12.6 to 13 s of every other 15 s
/// slot, 2 to 8 overs), 10 % a data-mode program's band change (a set to
/// a frequency in another band, then its cycles), 15 % small knob retunes
/// with a call keyed on the rig a third of the time, 5 % listening and 5 %
/// noise on the line.
pub fn programs_evening(seed: u64, hours: f64, bands: &[(u64, u64)]) -> Scenario {
    let first = bands.first().copied().unwrap_or((7_000_000, 7_200_000));
    let mut rng = fastrand::Rng::with_seed(seed ^ 0xca7);
    let s = &mut Script::new(seed, rng.u64(first.0..=first.1));
    let end = Duration::from_secs_f64(hours.max(0.0) * 3600.0);
    let ms = Duration::from_millis;
    let sec = Duration::from_secs;
    let mut band = first;
    let cycles = |s: &mut Script, rng: &mut fastrand::Rng| {
        let n = rng.u32(2..=8);
        for _ in 0..n {
            let on = ms(rng.u64(12_600..=13_000));
            s.cat_overs(1, on, ms(30_000) - on);
        }
    };
    while s.now() < end {
        match rng.u32(0..100) {
            // A band-map click, the logging program calling at once.
            0..=34 => {
                let delta = rng.u64(5_000..=150_000);
                let to = either_side(s.hz(), delta, rng.bool(), band);
                s.set_by_program(to);
                if rng.u32(0..5) < 4 {
                    s.wait(ms(rng.u64(50..=100)));
                    for _ in 0..rng.u32(1..=3) {
                        let on = ms(rng.u64(3_000..=15_000));
                        s.cat_overs(1, on, ms(rng.u64(2_000..=12_000)));
                    }
                }
                s.wait(sec(rng.u64(5..=40)));
            }
            // Data-mode cycles where the rig is.
            35..=64 => {
                s.wait(ms(rng.u64(500..=15_000)));
                cycles(s, &mut rng);
            }
            // The data program takes the rig to another band.
            65..=74 => {
                if let Some(b) = bands.get(rng.usize(0..bands.len().max(1))) {
                    band = *b;
                    s.set_by_program(rng.u64(b.0..=b.1));
                    s.wait(ms(rng.u64(500..=15_000)));
                    cycles(s, &mut rng);
                }
            }
            // A small knob retune on the rig itself.
            75..=89 => {
                let delta = rng.u64(100..=3_000);
                let to = either_side(s.hz(), delta, rng.bool(), band);
                s.sweep(to, rng.u64(10..=100), ms(rng.u64(20..=80)));
                quick_call(s, &mut rng);
                s.wait(sec(rng.u64(5..=60)));
            }
            90..=94 => {
                s.wait(sec(rng.u64(10..=120)));
            }
            _ => {
                let n = rng.usize(1..=64);
                s.noise(n).wait(ms(rng.u64(100..=5_000)));
            }
        }
    }
    s.clone().finish()
}

/// Sometimes the operator calls at once after tuning, before the debounce
/// has run out: the move then has to wait for the end of the over.
fn quick_call(s: &mut Script, rng: &mut fastrand::Rng) {
    if rng.u32(0..3) == 0 {
        let on = Duration::from_millis(rng.u64(2_000..=20_000));
        s.wait(Duration::from_millis(rng.u64(50..=350)));
        s.overs(1, on, Duration::from_secs(2));
    }
}

/// The fewest repositionings that keep every dwell inside the loop's window,
/// knowing the whole evening in advance: consecutive dwells share one tuning
/// while their frequencies fit inside one window (greedy interval stabbing,
/// which is optimal for intervals taken in order). `window_hz(hz)` is the
/// width of the window around `hz`; `None` means the frequency is not
/// followed (outside the bands) and places no constraint.
pub fn fewest_moves(dwells: &[Dwell], window_hz: impl Fn(u64) -> Option<f64>) -> u64 {
    fewest_moves_plan(dwells, window_hz).len() as u64
}

/// The tunings of [`fewest_moves`], in order: for each repositioning, the
/// range of tuned frequencies (low, high in Hz) that keeps every dwell of its
/// group inside the window.
pub fn fewest_moves_plan(
    dwells: &[Dwell],
    window_hz: impl Fn(u64) -> Option<f64>,
) -> Vec<(f64, f64)> {
    fewest_moves_groups(dwells, window_hz)
        .into_iter()
        .map(|(lo, hi, _)| (lo, hi))
        .collect()
}

/// [`fewest_moves_plan`] with, for each tuning, the index in `dwells` of
/// the first dwell it serves (where the optimum repositions).
pub fn fewest_moves_groups(
    dwells: &[Dwell],
    window_hz: impl Fn(u64) -> Option<f64>,
) -> Vec<(f64, f64, usize)> {
    let mut plan: Vec<(f64, f64, usize)> = Vec::new();
    // The band of tuned frequencies still acceptable to the current group.
    let mut group: Option<(f64, f64, usize)> = None;
    for (i, d) in dwells.iter().enumerate() {
        let Some(w) = window_hz(d.hz) else { continue };
        let (lo, hi) = (d.hz as f64 - w / 2.0, d.hz as f64 + w / 2.0);
        group = match group {
            Some((glo, ghi, first)) if lo.max(glo) <= hi.min(ghi) => {
                Some((lo.max(glo), hi.min(ghi), first))
            }
            _ => {
                if let Some(g) = group {
                    plan.push(g);
                }
                Some((lo, hi, i))
            }
        };
    }
    if let Some(g) = group {
        plan.push(g);
    }
    plan
}

#[cfg(test)]
mod tests {
    use super::*;

    struct Plain;
    impl Wire for Plain {
        fn frequency(&self, hz: u64) -> Vec<u8> {
            format!("F{hz};").into_bytes()
        }
        fn transmit(&self, on: bool) -> Vec<u8> {
            if on {
                b"T;".to_vec()
            } else {
                b"R;".to_vec()
            }
        }
    }

    #[test]
    fn sweep_reports_every_step_and_records_dwells() {
        let s = &mut Script::new(1, 7_000_000);
        s.wait(Duration::from_secs(10));
        s.sweep(7_002_000, 500, Duration::from_millis(100));
        s.wait(Duration::from_secs(5));
        let sc = s.clone().finish();
        let reports: Vec<u64> = sc
            .steps
            .iter()
            .filter_map(|(_, h)| match h {
                Happening::Report { hz } => Some(*hz),
                _ => None,
            })
            .collect();
        assert_eq!(
            reports,
            vec![7_000_000, 7_000_500, 7_001_000, 7_001_500, 7_002_000]
        );
        assert_eq!(sc.dwells.len(), 2);
        assert_eq!(sc.dwells[0].to, Duration::from_secs(10));
        assert_eq!(sc.dwells[1].hz, 7_002_000);
        assert_eq!(sc.end, Duration::from_millis(15_400));
    }

    #[test]
    fn overs_record_transmit_spans_and_chunks_are_in_time_order() {
        let s = &mut Script::new(1, 14_000_000);
        s.repeat_every(Some(Duration::from_secs(1)));
        s.overs(2, Duration::from_secs(3), Duration::from_secs(2));
        let sc = s.clone().finish();
        assert_eq!(
            sc.transmit,
            vec![
                (Duration::ZERO, Duration::from_secs(3)),
                (Duration::from_secs(5), Duration::from_secs(8))
            ]
        );
        let chunks = sc.chunks(&Plain);
        assert!(chunks.windows(2).all(|w| w[0].0 <= w[1].0));
        assert_eq!(chunks[1].2, b"T;");
    }

    #[test]
    fn random_evenings_are_repeatable_and_stay_in_time_order() {
        let bands = [(7_000_000, 7_200_000), (14_000_000, 14_350_000)];
        let a = random_evening(3, 2.0, &bands);
        let b = random_evening(3, 2.0, &bands);
        assert_eq!(a.steps, b.steps);
        assert!(a.steps.windows(2).all(|w| w[0].0 <= w[1].0));
        assert!(a.end >= Duration::from_secs(7_200));
        assert!(!a.transmit.is_empty());
        let c = random_evening(4, 2.0, &bands);
        assert_ne!(a.steps, c.steps);
        // The repeating rig: the same evening, reports added only.
        let r = random_evening_repeating(3, 2.0, &bands, Some(Duration::from_secs(1)));
        assert_eq!(r.dwells, a.dwells);
        assert_eq!(r.transmit, a.transmit);
        assert!(r.steps.len() > a.steps.len() + 3_000, "{}", r.steps.len());
        let not_reports = |sc: &Scenario| -> Vec<(Duration, Happening)> {
            sc.steps
                .iter()
                .filter(|(_, h)| !matches!(h, Happening::Report { .. }))
                .cloned()
                .collect()
        };
        assert_eq!(not_reports(&r), not_reports(&a));
    }

    #[test]
    fn fewest_moves_groups_dwells_that_share_a_window() {
        let d = |hz: u64| Dwell {
            hz,
            from: Duration::ZERO,
            to: Duration::ZERO,
        };
        // Window 10 kHz wide: 7.100, 7.104, 7.108 fit in one (7.103..7.105),
        // 7.120 needs a second, 9.6 MHz is not followed.
        let dwells = [
            d(7_100_000),
            d(7_104_000),
            d(7_108_000),
            d(9_600_000),
            d(7_120_000),
            d(7_121_000),
        ];
        let window = |hz: u64| (hz < 8_000_000).then_some(10_000.0);
        assert_eq!(fewest_moves(&dwells, window), 2);
        // A 5 kHz window that also follows 9.6 MHz: {7.100, 7.104},
        // {7.108}, {9.6}, {7.120, 7.121}.
        assert_eq!(fewest_moves(&dwells, |_| Some(5_000.0)), 4);
        // The plan: where each of the two tunings may sit.
        assert_eq!(
            fewest_moves_plan(&dwells, window),
            vec![(7_103_000.0, 7_105_000.0), (7_116_000.0, 7_125_000.0)]
        );
    }

    #[test]
    fn written_capture_reads_back_as_the_chunks() {
        let sc = random_evening(5, 0.5, &[(7_000_000, 7_200_000)]);
        let mut file = Vec::new();
        let n = write_capture(&sc, &Plain, &mut file).unwrap();
        let back: Vec<(Duration, Direction, Vec<u8>)> =
            crate::capture::CaptureReader::new(file.as_slice(), "s.cap")
                .map(|r| r.map(|r| (r.t, r.dir, r.bytes)))
                .collect::<Result<_, _>>()
                .unwrap();
        assert_eq!(back.len() as u64, n);
        // Times are written to the microsecond, as the scenario makes them.
        assert_eq!(back, sc.chunks(&Plain));
    }

    #[test]
    fn spotting_evenings_jump_and_call_and_record_every_retune() {
        let bands = [(7_000_000, 7_200_000), (14_000_000, 14_350_000)];
        let a = spotting_evening(3, 2.0, &bands);
        assert_eq!(a.steps, spotting_evening(3, 2.0, &bands).steps);
        assert!(a.steps.windows(2).all(|w| w[0].0 <= w[1].0));
        // Every retune is the time and frequency of a report, and starts a
        // dwell on that frequency.
        for r in &a.retunes {
            assert!(a.steps.contains(&(r.at, Happening::Report { hz: r.hz })));
            assert!(a.dwells.iter().any(|d| d.from == r.at && d.hz == r.hz));
        }
        let jumps = a.retunes.iter().filter(|r| r.kind == RetuneKind::Jump);
        let called_within_100ms = jumps
            .clone()
            .filter(|r| {
                a.transmit
                    .iter()
                    .any(|(on, _)| *on >= r.at && *on <= r.at + Duration::from_millis(100))
            })
            .count();
        // About a quarter of all doings are clicks with a call at once.
        let n = jumps.count();
        assert!(n > 50, "{n}");
        assert!(called_within_100ms * 5 > n, "{called_within_100ms} of {n}");
    }

    #[test]
    fn split_and_program_evenings_dwell_on_the_transmit_frequency() {
        let bands = [(7_000_000, 7_200_000), (14_000_000, 14_350_000)];
        let a = split_evening(3, 2.0, &bands);
        assert_eq!(a.steps, split_evening(3, 2.0, &bands).steps);
        assert!(a.steps.windows(2).all(|w| w[0].0 <= w[1].0));
        // Replaying the happenings gives every dwell's frequency as the
        // transmit frequency; split dwells are 1-5 kHz above the receive
        // frequency.
        let mut rig = RigTruth::new(0);
        let mut i = 0;
        let mut split_dwells = 0;
        for d in &a.dwells {
            while i < a.steps.len() && a.steps[i].0 <= d.from {
                rig.apply(&a.steps[i].1);
                i += 1;
            }
            assert_eq!(rig.transmit_hz(), d.hz, "{d:?}");
            if rig.split() {
                split_dwells += 1;
                let up = rig.transmit_hz() as i64 - rig.receive_hz() as i64;
                assert!(up != 0 && up.abs() <= 5_000, "{up}");
            }
        }
        assert!(split_dwells > 20, "{split_dwells}");
        // Commands go to the rig.
        assert!(a.steps.iter().any(|(_, h)| matches!(
            h,
            Happening::Station(StationMessage::Split { on: true, .. })
        ) && h.direction() == Direction::Tx));
        let p = programs_evening(3, 2.0, &bands);
        // Most overs keyed by command (the rest are calls keyed on the rig
        // after a knob retune).
        let keyed = p
            .steps
            .iter()
            .filter(|(_, h)| *h == Happening::Station(StationMessage::Transmit { on: true }))
            .count();
        let n = p.transmit.len();
        assert!(keyed <= n && keyed * 10 >= n * 8, "{keyed} of {n}");
        assert!(keyed > 100, "{keyed}");
    }

    #[test]
    fn demo_evening_is_repeatable() {
        let a = demo_evening();
        let b = demo_evening();
        assert_eq!(a.steps, b.steps);
        assert!(a.end > Duration::from_secs(1_800), "{:?}", a.end);
    }

    /// A polled-only family: `?` before a frequency, `!` before a transmit
    /// state, nothing before noise.
    struct Asked;
    impl Wire for Asked {
        fn frequency(&self, hz: u64) -> Vec<u8> {
            Plain.frequency(hz)
        }
        fn transmit(&self, on: bool) -> Vec<u8> {
            Plain.transmit(on)
        }
        fn request(&self, what: &Happening) -> Vec<u8> {
            match what {
                Happening::Report { .. } => b"?".to_vec(),
                Happening::Transmit { .. } => b"!".to_vec(),
                Happening::Noise { .. } | Happening::Station(_) => Vec::new(),
            }
        }
    }

    #[test]
    fn a_polled_familys_reads_go_just_before_each_answer() {
        let sc = random_evening(6, 0.5, &[(7_000_000, 7_200_000)]);
        let chunks = sc.chunks(&Asked);
        let answers = sc.answers(&Asked);
        // Every answer as before, each report's after its read, same time.
        let rx: Vec<_> = chunks
            .iter()
            .filter(|c| c.1 == Direction::Rx)
            .cloned()
            .collect();
        assert_eq!(rx, answers);
        assert_eq!(answers, sc.chunks(&Plain));
        for (t, what) in &sc.steps {
            let want: &[u8] = match what {
                Happening::Report { .. } => b"?",
                Happening::Transmit { .. } => b"!",
                Happening::Noise { .. } | Happening::Station(_) => continue,
            };
            let at = chunks
                .iter()
                .position(|c| c.0 == *t && c.1 == Direction::Rx && c.2 == answer(&Asked, what))
                .unwrap();
            assert!(at > 0);
            assert_eq!(chunks[at - 1], (*t, Direction::Tx, want.to_vec()));
        }
        // The capture writer writes the same.
        let mut file = Vec::new();
        write_capture(&sc, &Asked, &mut file).unwrap();
        let back: Vec<(Duration, Direction, Vec<u8>)> =
            crate::capture::CaptureReader::new(file.as_slice(), "s.cap")
                .map(|r| r.map(|r| (r.t, r.dir, r.bytes)))
                .collect::<Result<_, _>>()
                .unwrap();
        assert_eq!(back, chunks);
    }
}
