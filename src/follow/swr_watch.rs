//! SWR watch while transmitting (pure, sans-IO): SWR-meter readings during
//! each over in, per-over summaries, an alarm and drift reports out.
//!
//! - **Alarm**: a reading above `alarm` starts a hold; if no reading at or
//!   below `alarm` arrives before `hold` has passed, the watch raises the
//!   alarm, at the deadline itself (the driver calls
//!   [`SwrWatch::handle_timeout`] at [`SwrWatch::poll_timeout`], as for the
//!   follow core), not at the next reading. A fault that starts at `t` is
//!   first read at most one meter period later, so the alarm comes at most
//!   `hold` plus one meter period after `t`. With `action = inhibit` and an
//!   inhibit line wired the alarm asks for the inhibit, which ends the over
//!   (the caution: it cuts a transmission short); otherwise it is logged.
//!   An infinite reading (no reflected-power reading possible: a broken
//!   feed) counts as above; a non-finite NaN is ignored.
//! - **Drift**: at the end of an over with a model prediction for its
//!   frequency (`antenna::swr_at` at the position tuneward set), the over's
//!   median reading is compared with the prediction; an excess over
//!   `drift_margin` in `drift_overs` overs running is reported as drift
//!   (the loop has moved: re-peak). An over within the margin ends the run;
//!   an over without a prediction or with fewer than three readings neither
//!   counts nor ends it.

use std::time::Duration;

/// What an alarm does.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SwrAction {
    /// Log (and show) it only.
    Log,
    /// Also assert the inhibit, if a line is wired.
    Inhibit,
}

/// Plain settings of the watch.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SwrWatchSettings {
    /// SWR above which the hold starts.
    pub alarm: f64,
    /// How long the SWR must stay above `alarm` before the alarm.
    pub hold: Duration,
    pub action: SwrAction,
    /// Whether an inhibit line is wired (without one, `Inhibit` only logs).
    pub inhibit_wired: bool,
    /// Excess of an over's median over the model's prediction that counts
    /// toward drift.
    pub drift_margin: f64,
    /// Overs running with that excess before drift is reported.
    pub drift_overs: usize,
}

/// One over's SWR, as seen.
#[derive(Debug, Clone, PartialEq)]
pub struct OverSummary {
    pub start: Duration,
    pub end: Duration,
    /// The frequency transmitted on, when known.
    pub hz: Option<u64>,
    pub reads: usize,
    pub max_swr: Option<f64>,
    pub median_swr: Option<f64>,
    /// The model's prediction for the over, when known.
    pub predicted: Option<f64>,
}

/// What the watch reports.
#[derive(Debug, Clone, PartialEq)]
pub enum SwrReport {
    /// The SWR stayed above the alarm for the hold. `inhibit` says whether
    /// the inhibit is to be asserted.
    Alarm {
        at: Duration,
        swr: f64,
        inhibit: bool,
    },
    /// An over ended.
    Over(OverSummary),
    /// Overs running read more than the model predicts.
    Drift {
        overs: usize,
        seen: f64,
        predicted: f64,
    },
}

#[derive(Debug)]
struct Over {
    start: Duration,
    hz: Option<u64>,
    predicted: Option<f64>,
    reads: Vec<f64>,
    above_since: Option<Duration>,
    last_above: f64,
    alarmed: bool,
}

/// The watch.
#[derive(Debug)]
pub struct SwrWatch {
    settings: SwrWatchSettings,
    over: Option<Over>,
    excess: Vec<(f64, f64)>,
}

impl SwrWatch {
    pub fn new(settings: SwrWatchSettings) -> SwrWatch {
        SwrWatch {
            settings,
            over: None,
            excess: Vec::new(),
        }
    }

    /// The rig started transmitting (from any source) on `hz` (when known),
    /// where the model predicts `predicted` (when known).
    pub fn handle_transmit_on(&mut self, now: Duration, hz: Option<u64>, predicted: Option<f64>) {
        if self.over.is_none() {
            self.over = Some(Over {
                start: now,
                hz,
                predicted: predicted.filter(|p| p.is_finite()),
                reads: Vec::new(),
                above_since: None,
                last_above: f64::NAN,
                alarmed: false,
            });
        }
    }

    /// The rig stopped transmitting: the over's summary, and drift if it
    /// completes a run.
    pub fn handle_transmit_off(&mut self, now: Duration) -> Vec<SwrReport> {
        let Some(over) = self.over.take() else {
            return Vec::new();
        };
        let mut reads = over.reads;
        reads.sort_by(f64::total_cmp);
        let median = reads.get(reads.len() / 2).copied();
        let max = reads.last().copied();
        let summary = OverSummary {
            start: over.start,
            end: now,
            hz: over.hz,
            reads: reads.len(),
            max_swr: max,
            median_swr: median,
            predicted: over.predicted,
        };
        let mut out = vec![SwrReport::Over(summary)];
        if let (Some(m), Some(p)) = (median, over.predicted) {
            if reads.len() >= 3 {
                if m - p > self.settings.drift_margin {
                    self.excess.push((m, p));
                    if self.excess.len() >= self.settings.drift_overs.max(1) {
                        let n = self.excess.len() as f64;
                        out.push(SwrReport::Drift {
                            overs: self.excess.len(),
                            seen: self.excess.iter().map(|e| e.0).sum::<f64>() / n,
                            predicted: self.excess.iter().map(|e| e.1).sum::<f64>() / n,
                        });
                        self.excess.clear();
                    }
                } else {
                    self.excess.clear();
                }
            }
        }
        out
    }

    /// One SWR-meter reading. Readings outside an over are ignored.
    pub fn handle_reading(&mut self, now: Duration, swr: f64) -> Option<SwrReport> {
        let over = self.over.as_mut()?;
        if swr.is_nan() {
            return None;
        }
        over.reads.push(swr);
        if swr > self.settings.alarm {
            over.above_since.get_or_insert(now);
            over.last_above = swr;
        } else {
            over.above_since = None;
        }
        self.handle_timeout(now)
    }

    /// When the watch next needs [`SwrWatch::handle_timeout`].
    pub fn poll_timeout(&self) -> Option<Duration> {
        let over = self.over.as_ref()?;
        if over.alarmed {
            return None;
        }
        over.above_since
            .map(|s| s.saturating_add(self.settings.hold))
    }

    /// Time has passed: the alarm, if the hold is over.
    pub fn handle_timeout(&mut self, now: Duration) -> Option<SwrReport> {
        let due = self.poll_timeout()?;
        if now < due {
            return None;
        }
        let over = self.over.as_mut()?;
        over.alarmed = true;
        Some(SwrReport::Alarm {
            at: now,
            swr: over.last_above,
            inhibit: self.settings.action == SwrAction::Inhibit && self.settings.inhibit_wired,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn settings(action: SwrAction) -> SwrWatchSettings {
        SwrWatchSettings {
            alarm: 2.0,
            hold: Duration::from_millis(1500),
            action,
            inhibit_wired: true,
            drift_margin: 0.3,
            drift_overs: 3,
        }
    }

    /// Drives the watch on virtual time: a reading every `period`, the SWR
    /// given by `swr(t)`, timeouts served in between; the first alarm.
    fn run(
        watch: &mut SwrWatch,
        period: Duration,
        phase: Duration,
        until: Duration,
        swr: impl Fn(Duration) -> f64,
    ) -> Option<SwrReport> {
        watch.handle_transmit_on(Duration::ZERO, Some(14_200_000), Some(1.05));
        let mut next = phase;
        while next < until {
            if let Some(d) = watch.poll_timeout() {
                if d <= next {
                    if let Some(r) = watch.handle_timeout(d) {
                        return Some(r);
                    }
                }
            }
            if let Some(r) = watch.handle_reading(next, swr(next)) {
                return Some(r);
            }
            next += period;
        }
        None
    }

    #[test]
    fn an_injected_fault_asserts_the_inhibit_within_hold_plus_one_period() {
        let period = Duration::from_millis(250);
        let fault = Duration::from_millis(3_100);
        let hold = settings(SwrAction::Inhibit).hold;
        // Every phase of the meter's reads against the fault's start.
        for phase_ms in (0..250).step_by(10) {
            let mut w = SwrWatch::new(settings(SwrAction::Inhibit));
            let r = run(
                &mut w,
                period,
                Duration::from_millis(phase_ms),
                Duration::from_secs(20),
                |t| if t >= fault { 3.0 } else { 1.1 },
            );
            let Some(SwrReport::Alarm { at, swr, inhibit }) = r else {
                panic!("phase {phase_ms} ms: expected an alarm, found {r:?}");
            };
            assert!(inhibit);
            assert_eq!(swr, 3.0);
            assert!(at >= fault + hold, "phase {phase_ms}: alarm at {at:?}");
            assert!(
                at <= fault + hold + period,
                "phase {phase_ms}: alarm at {at:?}, later than hold plus one period"
            );
        }
    }

    #[test]
    fn a_short_spike_or_a_log_action_does_not_inhibit() {
        let period = Duration::from_millis(250);
        let mut w = SwrWatch::new(settings(SwrAction::Inhibit));
        // Above for one second, under the 1.5 s hold.
        let r = run(
            &mut w,
            period,
            Duration::ZERO,
            Duration::from_secs(10),
            |t| {
                if (Duration::from_secs(2)..Duration::from_secs(3)).contains(&t) {
                    3.0
                } else {
                    1.2
                }
            },
        );
        assert_eq!(r, None);
        let mut w = SwrWatch::new(settings(SwrAction::Log));
        let r = run(
            &mut w,
            period,
            Duration::ZERO,
            Duration::from_secs(10),
            |_| 3.0,
        );
        assert!(matches!(r, Some(SwrReport::Alarm { inhibit: false, .. })));
        let mut unwired = settings(SwrAction::Inhibit);
        unwired.inhibit_wired = false;
        let mut w = SwrWatch::new(unwired);
        let r = run(
            &mut w,
            period,
            Duration::ZERO,
            Duration::from_secs(10),
            |_| f64::INFINITY,
        );
        assert!(matches!(r, Some(SwrReport::Alarm { inhibit: false, .. })));
    }

    #[test]
    fn readings_outside_an_over_are_ignored_and_the_over_is_summarised() {
        let mut w = SwrWatch::new(settings(SwrAction::Inhibit));
        assert_eq!(w.handle_reading(Duration::ZERO, 9.0), None);
        assert_eq!(w.poll_timeout(), None);
        w.handle_transmit_on(Duration::from_secs(1), Some(7_100_000), None);
        for (i, s) in [1.2, 1.4, f64::NAN, 1.3].iter().enumerate() {
            w.handle_reading(Duration::from_secs(2 + i as u64), *s);
        }
        let out = w.handle_transmit_off(Duration::from_secs(9));
        let [SwrReport::Over(o)] = out.as_slice() else {
            panic!("expected one summary, found {out:?}");
        };
        assert_eq!(o.reads, 3);
        assert_eq!(o.max_swr, Some(1.4));
        assert_eq!(o.median_swr, Some(1.3));
        assert_eq!(o.hz, Some(7_100_000));
        assert_eq!(o.end, Duration::from_secs(9));
    }

    fn over(w: &mut SwrWatch, t: u64, seen: f64, predicted: Option<f64>) -> Vec<SwrReport> {
        let start = Duration::from_secs(t * 100);
        w.handle_transmit_on(start, Some(14_100_000), predicted);
        for k in 0..5 {
            w.handle_reading(start + Duration::from_secs(k + 1), seen);
        }
        w.handle_transmit_off(start + Duration::from_secs(10))
    }

    #[test]
    fn drift_is_reported_after_consistent_excess_over_several_overs() {
        let mut w = SwrWatch::new(settings(SwrAction::Log));
        assert_eq!(over(&mut w, 0, 1.7, Some(1.1)).len(), 1);
        assert_eq!(over(&mut w, 1, 1.7, Some(1.1)).len(), 1);
        // An over without a prediction neither counts nor ends the run.
        assert_eq!(over(&mut w, 2, 1.7, None).len(), 1);
        let out = over(&mut w, 3, 1.7, Some(1.1));
        let Some(SwrReport::Drift {
            overs,
            seen,
            predicted,
        }) = out.get(1)
        else {
            panic!("expected drift, found {out:?}");
        };
        assert_eq!(*overs, 3);
        assert!((seen - 1.7).abs() < 1e-9 && (predicted - 1.1).abs() < 1e-9);
        // A good over ends a run: two bad, one good, two bad is no drift.
        let mut w = SwrWatch::new(settings(SwrAction::Log));
        for (i, s) in [1.7, 1.7, 1.15, 1.7, 1.7].iter().enumerate() {
            assert_eq!(over(&mut w, i as u64, *s, Some(1.1)).len(), 1, "over {i}");
        }
    }
}
