//! "Why is it silent?": a rig port that delivers only unreadable bytes.
//!
//! With the wrong baud rate, parity or dialect, the decoder sees bytes but
//! never a report, and the only symptom used to be silence. [`RejectWatch`]
//! is told of every decoded report and every reject from the rig (with the
//! time, like the core: no clock here) and says once per such spell, when
//! rejects alone have arrived for [`QUIET_AFTER`], what the likely causes
//! are, with the counts. The live session logs it as a warning and
//! `tuneward capture` shows it in its progress line.

use std::fmt;
use std::time::Duration;

use crate::rig::RejectReason;

/// How long rejects alone must last before the hint is given.
pub const QUIET_AFTER: Duration = Duration::from_secs(3);

/// Watches for a spell of bytes from the rig without a single report.
///
/// It counts bytes as they arrive, not reject events: a decoder reports a
/// run of garbage only when the run ends, and at the wrong speed it may
/// never end.
#[derive(Debug, Clone, Default)]
pub struct RejectWatch {
    /// When the first byte of the spell came.
    since: Option<Duration>,
    /// Bytes from the rig in this spell.
    bytes: usize,
    /// Rejected bytes per reason reported in this spell.
    counts: Vec<(RejectReason, usize)>,
    /// The hint was given for this spell.
    told: bool,
}

/// What a spell without reports looked like.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct QuietHint {
    /// How long the spell has lasted.
    pub lasted: Duration,
    /// Bytes the rig sent in it.
    pub bytes: usize,
    /// Rejected bytes per reason the decoder has reported so far, most
    /// first (a run still going is not in it yet).
    pub counts: Vec<(RejectReason, usize)>,
}

impl fmt::Display for QuietHint {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "no readable report from the rig for {} s although it sent {} bytes (rejected:",
            self.lasted.as_secs(),
            self.bytes
        )?;
        if self.counts.is_empty() {
            f.write_str(" one run of garbage, still going")?;
        }
        for (i, (reason, n)) in self.counts.iter().enumerate() {
            write!(f, "{} {reason} {n}", if i == 0 { "" } else { "," })?;
        }
        f.write_str(
            "); likely causes: the port's baud rate or parity differs from the rig's \
             (check its menu), the wrong dialect ([rig] protocol), \
             or the rig's auto-report (transceive) is off and it is not polled",
        )
    }
}

impl RejectWatch {
    pub fn new() -> RejectWatch {
        RejectWatch::default()
    }

    /// A report was decoded (or the port reopened): a later spell is a new
    /// one.
    pub fn report(&mut self) {
        *self = RejectWatch::default();
    }

    /// The decoder rejected `bytes` for `reason` (counted for the hint).
    pub fn rejected(&mut self, reason: RejectReason, bytes: usize) {
        match self.counts.iter_mut().find(|(r, _)| *r == reason) {
            Some((_, n)) => *n = n.saturating_add(bytes),
            None => self.counts.push((reason, bytes)),
        }
    }

    /// `n` bytes from the rig came at `now` and gave no report. Returns the
    /// hint the first time a spell reaches [`QUIET_AFTER`].
    pub fn unread(&mut self, now: Duration, n: usize) -> Option<QuietHint> {
        if n == 0 {
            return None;
        }
        self.since.get_or_insert(now);
        self.bytes = self.bytes.saturating_add(n);
        if self.told {
            return None;
        }
        let hint = self.hint(now)?;
        self.told = true;
        Some(hint)
    }

    /// The spell under way at `now`, once it has lasted [`QUIET_AFTER`]
    /// (for a progress line, which shows it as long as it lasts).
    pub fn hint(&self, now: Duration) -> Option<QuietHint> {
        let lasted = now.saturating_sub(self.since?);
        if lasted < QUIET_AFTER {
            return None;
        }
        let mut counts = self.counts.clone();
        counts.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
        Some(QuietHint {
            lasted,
            bytes: self.bytes,
            counts,
        })
    }

    /// Feeds one chunk's outcome: the events the decoder made of `n` bytes
    /// from the rig at `now`. Returns the hint when it is due.
    pub fn chunk(
        &mut self,
        now: Duration,
        n: usize,
        events: &[crate::rig::RigEvent],
    ) -> Option<QuietHint> {
        use crate::rig::RigEvent;
        let mut reported = false;
        for ev in events {
            match *ev {
                RigEvent::Reject { reason, bytes } => self.rejected(reason, bytes),
                _ => reported = true,
            }
        }
        if reported {
            self.report();
            return None;
        }
        self.unread(now, n)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rig::RigEvent;

    fn s(v: f64) -> Duration {
        Duration::from_secs_f64(v)
    }

    fn reject(reason: RejectReason, bytes: usize) -> RigEvent {
        RigEvent::Reject { reason, bytes }
    }

    #[test]
    fn a_spell_without_reports_is_told_once_with_the_counts() {
        let mut w = RejectWatch::new();
        assert_eq!(
            w.chunk(s(10.0), 40, &[reject(RejectReason::Garbage, 40)]),
            None
        );
        assert_eq!(
            w.chunk(s(11.5), 7, &[reject(RejectReason::BadLength, 7)]),
            None
        );
        // A run still going: bytes, no event yet.
        let h = w.chunk(s(13.0), 60, &[]).unwrap();
        assert_eq!((h.lasted, h.bytes), (s(3.0), 107));
        assert_eq!(
            h.counts,
            vec![(RejectReason::Garbage, 40), (RejectReason::BadLength, 7)]
        );
        let text = h.to_string();
        for word in [
            "107 bytes",
            "garbage 40, bad-length 7",
            "baud",
            "parity",
            "dialect",
            "auto-report",
        ] {
            assert!(text.contains(word), "{word} missing from {text}");
        }
        // Once per spell.
        assert_eq!(w.chunk(s(20.0), 1, &[]), None);
        // The progress line keeps showing it while the spell lasts.
        assert_eq!(w.hint(s(20.0)).unwrap().bytes, 108);
    }

    #[test]
    fn a_report_ends_the_spell_and_a_new_one_is_told_again() {
        let mut w = RejectWatch::new();
        w.chunk(s(0.0), 5, &[]);
        let fa = RigEvent::Frequency { hz: 7_100_000 };
        assert_eq!(
            w.chunk(s(2.9), 19, &[reject(RejectReason::Garbage, 5), fa]),
            None
        );
        // Bytes either side of a report are not one spell.
        assert_eq!(w.chunk(s(3.5), 5, &[]), None);
        assert_eq!(w.hint(s(4.0)), None);
        let h = w.chunk(s(6.5), 5, &[]).unwrap();
        assert!(
            h.to_string().contains("one run of garbage, still going"),
            "{h}"
        );
        w.report();
        w.chunk(s(100.0), 3, &[reject(RejectReason::Unknown, 3)]);
        assert!(w.chunk(s(103.0), 3, &[]).is_some());
        // Nothing arriving is not a spell (silence has its own warning).
        let mut quiet = RejectWatch::new();
        assert_eq!(quiet.unread(s(50.0), 0), None);
        assert_eq!(quiet.hint(s(60.0)), None);
    }
}
