//! What a run did, as a timeline: one [`Entry`] per decoded report, decision
//! and tuner happening, written as readable lines or as JSON lines.
//!
//! The JSON form is a contract (see `protocols/timeline.md`): every line is an
//! object with `t` (seconds since the capture's first line) and `kind`; kinds
//! and fields may be added, the existing ones never change.

use std::collections::BTreeMap;
use std::io::{self, Write};
use std::time::Duration;

use serde::Serialize;

/// One thing that happened.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Entry {
    Frequency {
        hz: u64,
    },
    Transmit {
        on: bool,
    },
    Settle {
        hz: u64,
    },
    Reject {
        reason: &'static str,
        bytes: usize,
    },
    Hold {
        hz: u64,
        reason: &'static str,
    },
    Move {
        from: i64,
        to: i64,
        hz: u64,
        tune_hz: u64,
    },
    Arrive {
        steps: i64,
    },
    Inhibit {
        on: bool,
    },
    Stop,
    Candidate {
        hz: u64,
        steps: i64,
        #[serde(skip_serializing_if = "Option::is_none")]
        profile: Option<String>,
    },
    Summary(Summary),
}

/// Totals of a run; the last line of a timeline.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Summary {
    /// Repositionings started.
    pub moves: u64,
    /// Motor steps travelled, overshoots included.
    pub steps: u64,
    /// Reports decoded (frequency and transmit state).
    pub frames: u64,
    /// Stretches of bytes rejected.
    pub rejected: u64,
    /// Rejects counted by reason.
    pub rejects: BTreeMap<&'static str, u64>,
    /// Holds counted by reason.
    pub holds: BTreeMap<&'static str, u64>,
    /// Time the rig spent transmitting, in seconds.
    pub transmit_s: f64,
    /// Safety rules the driver saw broken (always 0; counted independently of
    /// the core as a check on it).
    pub violations: u64,
    /// Malformed capture lines passed over (`replay --skip-bad-lines`).
    pub bad_lines: u64,
}

/// Receives a run's entries.
pub trait Timeline {
    fn entry(&mut self, t: Duration, entry: &Entry) -> io::Result<()>;
}

/// Collects entries in memory (tests, the demo's summary).
#[derive(Debug, Default)]
pub struct Collect(pub Vec<(Duration, Entry)>);

impl Timeline for Collect {
    fn entry(&mut self, t: Duration, entry: &Entry) -> io::Result<()> {
        self.0.push((t, entry.clone()));
        Ok(())
    }
}

/// Discards entries (benchmarks).
#[derive(Debug, Default)]
pub struct Discard;

impl Timeline for Discard {
    fn entry(&mut self, _t: Duration, _entry: &Entry) -> io::Result<()> {
        Ok(())
    }
}

/// One JSON object per line.
pub struct JsonLines<W: Write>(pub W);

#[derive(Serialize)]
struct JsonLine<'a> {
    t: f64,
    #[serde(flatten)]
    entry: &'a Entry,
}

impl<W: Write> Timeline for JsonLines<W> {
    fn entry(&mut self, t: Duration, entry: &Entry) -> io::Result<()> {
        let line = JsonLine {
            t: seconds(t),
            entry,
        };
        serde_json::to_writer(&mut self.0, &line)?;
        self.0.write_all(b"\n")
    }
}

/// Seconds with microsecond resolution, as written in timelines.
pub fn seconds(t: Duration) -> f64 {
    (t.as_micros() as f64) / 1e6
}

/// Readable lines: time, what, details.
pub struct Human<W: Write> {
    out: W,
    /// Print every report and ignored stretch, not only the decisions.
    pub verbose: bool,
    transmit_since: Option<Duration>,
}

impl<W: Write> Human<W> {
    pub fn new(out: W, verbose: bool) -> Self {
        Human {
            out,
            verbose,
            transmit_since: None,
        }
    }
}

/// `14 074 000` as `14.074000 MHz`.
pub fn mhz(hz: u64) -> String {
    format!("{}.{:06} MHz", hz / 1_000_000, hz % 1_000_000)
}

impl<W: Write> Timeline for Human<W> {
    fn entry(&mut self, t: Duration, entry: &Entry) -> io::Result<()> {
        let text = match entry {
            Entry::Frequency { hz } => {
                if !self.verbose {
                    return Ok(());
                }
                format!("rig on      {}", mhz(*hz))
            }
            Entry::Transmit { on } if self.verbose => {
                format!(
                    "rig         {}",
                    if *on { "transmitting" } else { "receiving" }
                )
            }
            // Without --verbose an over is one line, written when it ends.
            Entry::Transmit { on: true } => {
                self.transmit_since.get_or_insert(t);
                return Ok(());
            }
            Entry::Transmit { on: false } => match self.transmit_since.take() {
                Some(since) => format!(
                    "receive     after {:.1} s of transmitting",
                    seconds(t.saturating_sub(since))
                ),
                None => return Ok(()),
            },
            Entry::Settle { hz } => format!("settled     {}", mhz(*hz)),
            Entry::Reject { reason, bytes } => {
                if !self.verbose {
                    return Ok(());
                }
                format!("ignored     {bytes} bytes ({reason})")
            }
            Entry::Hold { hz, reason } => format!("stay        {} ({reason})", mhz(*hz)),
            Entry::Move {
                from,
                to,
                hz,
                tune_hz,
            } if hz == tune_hz => {
                format!("move        {from} -> {to} steps for {}", mhz(*hz))
            }
            Entry::Move {
                from, to, tune_hz, ..
            } => format!(
                "move        {from} -> {to} steps for the band edge, {}",
                mhz(*tune_hz)
            ),
            Entry::Arrive { steps } => format!("at rest     {steps} steps"),
            Entry::Inhibit { on: true } => "inhibit     on".to_string(),
            Entry::Inhibit { on: false } => "inhibit     off".to_string(),
            Entry::Stop => "stop        motor stopped".to_string(),
            Entry::Candidate { hz, steps, profile } => format!(
                "learned     {} at {steps} steps{}",
                mhz(*hz),
                profile
                    .as_deref()
                    .map(|p| format!(" (profile {p})"))
                    .unwrap_or_default()
            ),
            Entry::Summary(s) => {
                let mut text = format!(
                    "summary     {}, {}, {}, {}",
                    counted(s.moves, "move", "moves"),
                    counted(s.steps, "step travelled", "steps travelled"),
                    counted(s.frames, "report", "reports"),
                    counted(s.rejected, "rejected stretch", "rejected stretches")
                );
                if !s.holds.is_empty() {
                    let holds: Vec<String> =
                        s.holds.iter().map(|(k, v)| format!("{k} {v}")).collect();
                    text.push_str(&format!("; stayed: {}", holds.join(", ")));
                }
                if !s.rejects.is_empty() {
                    let rejects: Vec<String> =
                        s.rejects.iter().map(|(k, v)| format!("{k} {v}")).collect();
                    text.push_str(&format!("; ignored: {}", rejects.join(", ")));
                }
                if s.bad_lines > 0 {
                    text.push_str(&format!(
                        "; {} malformed capture lines skipped",
                        s.bad_lines
                    ));
                }
                text
            }
        };
        writeln!(self.out, "{:>10.3}  {text}", seconds(t))
    }
}

/// `1 move`, `2 moves`.
fn counted(n: u64, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn json_lines_follow_the_contract() {
        let mut out = Vec::new();
        let mut j = JsonLines(&mut out);
        j.entry(
            Duration::from_millis(12_345),
            &Entry::Move {
                from: 10,
                to: 20,
                hz: 7_074_000,
                tune_hz: 7_074_000,
            },
        )
        .unwrap();
        j.entry(
            Duration::from_micros(1),
            &Entry::Reject {
                reason: "garbage",
                bytes: 3,
            },
        )
        .unwrap();
        j.entry(
            Duration::ZERO,
            &Entry::Summary(Summary {
                moves: 1,
                ..Summary::default()
            }),
        )
        .unwrap();
        let text = String::from_utf8(out).unwrap();
        let lines: Vec<serde_json::Value> = text
            .lines()
            .map(|l| serde_json::from_str(l).unwrap())
            .collect();
        assert_eq!(
            lines[0],
            serde_json::json!({"t": 12.345, "kind": "move", "from": 10, "to": 20, "hz": 7074000, "tune_hz": 7074000})
        );
        assert_eq!(lines[1]["t"], 0.000001);
        assert_eq!(lines[1]["reason"], "garbage");
        assert_eq!(lines[2]["kind"], "summary");
        assert_eq!(lines[2]["moves"], 1);
        assert_eq!(lines[2]["frames"], 0);
    }

    #[test]
    fn mhz_keeps_every_hertz() {
        assert_eq!(mhz(14_074_000), "14.074000 MHz");
        assert_eq!(mhz(7_000_001), "7.000001 MHz");
        assert_eq!(mhz(145_500_000), "145.500000 MHz");
    }
}
