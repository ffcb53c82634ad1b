//! Invented station scenarios: what an operator does over an evening (dwell,
//! turn the knob, transmit, change band, listen to a broadcast station), and
//! the bytes the rig would put on its control port meanwhile, line noise
//! included. Used by the demo, the tests and the benchmarks; never a source of
//! truth about the world.

use std::time::Duration;

use crate::rig::Direction;

/// Something the rig reports, or noise on the line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Happening {
    /// The rig reports its frequency.
    Report { hz: u64 },
    /// The rig reports transmit on or off.
    Transmit { on: bool },
    /// Bytes that are not a report: RF on the cable, a half frame.
    Noise { bytes: Vec<u8> },
}

/// How a rig family puts a report on the wire.
pub trait Wire {
    fn frequency(&self, hz: u64) -> Vec<u8>;
    fn transmit(&self, on: bool) -> Vec<u8>;
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
        self.steps.push((self.now, what));
    }

    /// Lets `d` pass on the current frequency, with repeats if enabled.
    pub fn wait(&mut self, d: Duration) -> &mut Self {
        let end = self.now + d;
        if let Some(every) = self.repeat.filter(|e| !e.is_zero()) {
            while self.now + every < end {
                self.now += every;
                let hz = self.hz;
                self.push(Happening::Report { hz });
            }
        }
        self.now = end;
        self
    }

    fn close_dwell(&mut self) {
        if self.now > self.dwell_start {
            self.dwells.push(Dwell {
                hz: self.hz,
                from: self.dwell_start,
                to: self.now,
            });
        }
    }

    /// Turns the knob to `to_hz` in steps of `step_hz`, one report every
    /// `every` (as a rig reports while its VFO turns).
    pub fn sweep(&mut self, to_hz: u64, step_hz: u64, every: Duration) -> &mut Self {
        self.close_dwell();
        let step = step_hz.max(1);
        let turned = self.hz != to_hz;
        while self.hz != to_hz {
            self.now += every;
            self.hz = if to_hz > self.hz {
                (self.hz + step).min(to_hz)
            } else {
                self.hz.saturating_sub(step).max(to_hz)
            };
            let hz = self.hz;
            self.push(Happening::Report { hz });
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
        self.close_dwell();
        self.now += Duration::from_millis(50);
        self.hz = hz;
        self.push(Happening::Report { hz });
        self.dwell_start = self.now;
        self.retunes.push(Retune {
            at: self.now,
            hz,
            kind: RetuneKind::Jump,
        });
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
        w.write_record(*t, Direction::Rx, &bytes)?;
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
            out.push((*t, Direction::Rx, bytes));
        }
        out
    }

    /// The rig's bytes only, one chunk per step (`steps[i]` gave
    /// `answers[i]`), for a driver that decides step by step when each
    /// goes out (bench-follow); [`Wire::request`] gives the read before it.
    pub fn answers(&self, wire: &dyn Wire) -> Vec<(Duration, Direction, Vec<u8>)> {
        self.steps
            .iter()
            .map(|(t, what)| (*t, Direction::Rx, answer(wire, what)))
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
                let to = if rng.bool() {
                    s.hz().saturating_add(delta)
                } else {
                    s.hz().saturating_sub(delta)
                }
                .clamp(band.0, band.1);
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
                let to = if rng.bool() {
                    s.hz().saturating_add(delta)
                } else {
                    s.hz().saturating_sub(delta)
                }
                .clamp(band.0, band.1);
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
                let to = if rng.bool() {
                    s.hz().saturating_add(delta)
                } else {
                    s.hz().saturating_sub(delta)
                }
                .clamp(band.0, band.1);
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
                Happening::Noise { .. } => Vec::new(),
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
                Happening::Noise { .. } => continue,
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
