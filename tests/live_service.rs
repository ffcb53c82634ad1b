//! The live driver end to end, in process: rig bytes in a built-in dialect,
//! the follow core, the in-process simulated controller, a recording
//! inhibit line and a real journal file.
//!
//! These check the IO: real links, the journal file and inhibit line
//! written by the driver, the hand-over of read times. The decisions
//! (transmit, restarts, unfinished moves, faults, relax, shutdown, a deaf
//! rig) are tested on virtual time in `src/follow/session_tests.rs`. Waits
//! here are on observable conditions, bounded only so a broken build fails
//! instead of hanging.

use std::sync::Arc;
use std::time::Duration;

use tokio::sync::{mpsc, watch};
use tokio::time::Instant;
use tuneward::follow::{Follower, Policy};
use tuneward::inhibit::RecordingLine;
use tuneward::journal::{Journal, Recorded};
use tuneward::port::link::LinkEvent;
use tuneward::rig::dialect::Dialect;
use tuneward::rig::Direction;
use tuneward::sense::ScriptedSense;
use tuneward::service::{run, RigSource, RunSummary, ServiceParts};
use tuneward::tuner::client::{ClientConfig, ControllerUrl};

mod common;

use common::{policy, Linear};

/// The demo policy with the tests' 30 ms debounce.
fn demo_policy() -> Policy {
    policy(Duration::from_millis(30))
}

fn controller(start: i64) -> ClientConfig {
    ClientConfig {
        url: ControllerUrl::Sim,
        min_steps: 0,
        max_steps: 3000,
        steps_per_second: 20_000.0,
        settle: Duration::from_millis(10),
        reply_margin: Duration::from_millis(500),
        backoff_cap: Duration::from_millis(200),
        sim_start: start,
        sim_backlash: 0,
        home_line: None,
    }
}

/// Asks the service to stop and waits (5 s at most) for its outcome.
async fn stop_and_join(
    stop: &watch::Sender<bool>,
    task: tokio::task::JoinHandle<Result<RunSummary, tuneward::service::ServiceError>>,
) -> RunSummary {
    stop.send_replace(true);
    tokio::time::timeout(Duration::from_secs(5), task)
        .await
        .unwrap()
        .unwrap()
        .unwrap()
}

struct Running {
    rig: mpsc::Sender<LinkEvent>,
    stop: watch::Sender<bool>,
    task: tokio::task::JoinHandle<Result<RunSummary, tuneward::service::ServiceError>>,
    inhibit: RecordingLine,
    journal: Journal,
    dialect: Dialect,
    _dir: tempfile::TempDir,
}

/// The service on a first start (no journal yet), the in-process
/// controller simulator counting 0, a working inhibit line.
async fn start(policy: Policy) -> Running {
    start_with(policy, None).await
}

/// [`start`], with `sense` as the station's transmit-sense line.
async fn start_with(policy: Policy, sense: Option<ScriptedSense>) -> Running {
    let dir = tempfile::tempdir().unwrap();
    let journal = Journal::new(dir.path().join("pos.state"));
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    let inhibit = RecordingLine::new();
    let (rig_tx, rig_rx) = mpsc::channel(64);
    let (stop, shutdown) = watch::channel(false);
    let service = ServiceParts {
        follower: Follower::new(policy, Arc::new(Linear), None),
        decoder: dialect.decoder(None),
        rig: RigSource::Events(rig_rx),
        controller: controller(0),
        inhibit: Box::new(inhibit.clone()),
        sense: sense.map(|s| Box::new(s) as Box<dyn tuneward::sense::SenseInput>),
        journal: Some(journal.clone()),
        relax_on_exit: false,
        home: None,
        candidates: None,
        swr_watch: None,
        signal_meter: None,
        frequency_set: None,
    };
    let task = tokio::spawn(run(service, shutdown));
    Running {
        rig: rig_tx,
        stop,
        task,
        inhibit,
        journal,
        dialect,
        _dir: dir,
    }
}

impl Running {
    async fn rig_says(&self, bytes: Vec<u8>) {
        self.rig_said_at(bytes, Instant::now()).await;
    }
    /// Bytes the rig link read at `at`.
    async fn rig_said_at(&self, bytes: Vec<u8>, at: Instant) {
        self.rig
            .send(LinkEvent::Bytes {
                dir: Direction::Rx,
                bytes: bytes.into(),
                at,
            })
            .await
            .unwrap();
    }
    async fn frequency(&self, hz: u64) {
        self.rig_says(self.dialect.encode_frequency(hz, 0)).await;
    }
    async fn wait_journal(&self, want: Recorded) {
        wait_for(&self.journal, want).await;
    }
    async fn finish(self) -> (RunSummary, Vec<bool>, Option<Recorded>) {
        let out = stop_and_join(&self.stop, self.task).await;
        (out, self.inhibit.levels(), self.journal.load().unwrap())
    }
}

#[tokio::test]
async fn follows_the_vfo_with_the_inhibit_around_the_move_and_journals_it() {
    let r = start(demo_policy()).await;
    // First start: the controller's count is taken and recorded.
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    r.wait_journal(Recorded::Known(1000)).await;
    // The inhibit tail ends by itself, before any shutdown.
    eventually(
        || r.inhibit.levels() == [true, false, true, false],
        || format!("inhibit levels {:?}", r.inhibit.levels()),
    )
    .await;
    let (out, levels, journal) = r.finish().await;
    assert_eq!(out.position, Some(1000));
    assert_eq!(out.moves, 1);
    assert_eq!(out.faults, 0);
    assert_eq!(journal, Some(Recorded::Known(1000)));
    // On while unknown at start, off once known, on for the move, off after.
    assert_eq!(levels, vec![true, false, true, false]);
}

/// The controller simulator on loopback TCP, limits 0 to `max_steps`,
/// 20000 steps/s; its address, and the sender that stops it (kept alive
/// while it runs).
async fn sim_on_loopback(max_steps: i64) -> (std::net::SocketAddr, watch::Sender<bool>) {
    use tuneward::tuner::server::{run_tcp, SimController};
    use tuneward::tuner::sim::SimParams;
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let (sim_stop, sim_shutdown) = watch::channel(false);
    let params = SimParams {
        steps_per_second: 20_000.0,
        settle_ms: 10,
        backlash_steps: 0,
        min_steps: 0,
        max_steps,
    };
    tokio::spawn(run_tcp(
        listener,
        SimController::new(params, 0).unwrap(),
        sim_shutdown,
    ));
    (addr, sim_stop)
}

/// The whole service from the demo station's config file, with real link
/// tasks: a rig on a pseudo-terminal behind a symlink, the controller
/// simulator on loopback TCP; `extra_rig` adds keys to `[rig]`.
struct FromConfig {
    rig: tokio_serial::SerialStream,
    station: tuneward::station::Station,
    journal: Journal,
    stop: watch::Sender<bool>,
    task: tokio::task::JoinHandle<Result<RunSummary, tuneward::service::ServiceError>>,
    _rig_far: tokio_serial::SerialStream,
    _sim: watch::Sender<bool>,
    dir: tempfile::TempDir,
}

impl FromConfig {
    /// Started, and the controller's count taken (0) and journalled.
    async fn start(extra_rig: &str) -> FromConfig {
        let dir = tempfile::tempdir().unwrap();
        let (rig, rig_far, rig_link) = common::rig_behind_symlink(dir.path());
        let (addr, sim) = sim_on_loopback(3000).await;
        let config =
            common::station_config(dir.path(), &rig_link, &addr.to_string(), 20_000, extra_rig);
        let station = tuneward::station::Station::load(&config).unwrap();
        let service = ServiceParts::from_station(&station).unwrap();
        let (stop, shutdown) = watch::channel(false);
        let task = tokio::spawn(run(service, shutdown));
        let journal = Journal::new(dir.path().join("motor.state"));
        wait_for(&journal, Recorded::Known(0)).await;
        FromConfig {
            rig,
            station,
            journal,
            stop,
            task,
            _rig_far: rig_far,
            _sim: sim,
            dir,
        }
    }
    async fn finish(self) -> RunSummary {
        stop_and_join(&self.stop, self.task).await
    }
}

/// Polls `ready` until it holds; fails saying `what` once a generous bound
/// has passed (tokio's clock, so virtual on a paused one). The bound only
/// keeps a broken build from hanging: nothing here measures time.
async fn eventually(mut ready: impl FnMut() -> bool, what: impl Fn() -> String) {
    let until = Instant::now() + Duration::from_secs(6);
    while !ready() {
        assert!(Instant::now() < until, "gave up waiting: {}", what());
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
}

async fn wait_for(journal: &Journal, want: Recorded) {
    eventually(
        || journal.load().unwrap() == Some(want),
        || format!("journal {:?}, waiting for {want:?}", journal.load()),
    )
    .await;
}

/// The whole service from a config file, with real link tasks.
#[tokio::test]
async fn runs_from_a_station_config_with_real_links() {
    use tokio::io::AsyncWriteExt;

    let mut s = FromConfig::start("").await;
    let bytes = s.station.dialect.encode_frequency(7_150_000, 0);
    s.rig.write_all(&bytes).await.unwrap();
    // Half way between the two invented points.
    wait_for(&s.journal, Recorded::Known(1500)).await;
    let out = s.finish().await;
    assert_eq!(out.position, Some(1500));
    assert_eq!(out.moves, 1);
}

/// `mode = "proxy"` with `poll_ms`: the service polls a silent rig through the
/// proxy, another program shares the port, and the rig's answer moves the
/// tuner. (20 ms: below the tests' 30 ms debounce, as `check` asks.)
#[tokio::test]
async fn shares_the_port_and_polls_a_silent_rig() {
    use tokio::io::AsyncWriteExt;

    let mut s = FromConfig::start("mode = \"proxy\"\npoll_ms = 20\nproxy_link = \"shared\"").await;

    // The rig hears our query, exactly as the dialect words it.
    let query = [
        s.station.dialect.poll_frequency(0),
        s.station.dialect.poll_transmit(0),
    ]
    .concat();
    assert_eq!(common::read_exactly(&mut s.rig, query.len()).await, query);

    // Another program on the shared port hears the rig's answer too.
    let shared = s.dir.path().join("shared");
    let mut other = common::open_port(&shared, 38_400);
    let answer = s.station.dialect.encode_frequency(7_030_000, 0);
    s.rig.write_all(&answer).await.unwrap();
    assert_eq!(common::read_exactly(&mut other, answer.len()).await, answer);
    wait_for(&s.journal, Recorded::Known(300)).await;
    let out = s.finish().await;
    assert_eq!(out.position, Some(300));
    // The symlink goes with the service.
    assert!(std::fs::symlink_metadata(&shared).is_err());
}

#[test]
fn bad_serial_framing_names_the_key() {
    let mut rig = tuneward::config::RigConfig {
        data_bits: 9,
        ..Default::default()
    };
    let e = tuneward::station::port_settings(&rig, "/dev/x".into())
        .unwrap_err()
        .to_string();
    assert!(e.contains("rig.data_bits") && e.contains('9'), "{e}");
    rig.data_bits = 7;
    rig.stop_bits = 3;
    let e = tuneward::station::port_settings(&rig, "/dev/x".into())
        .unwrap_err()
        .to_string();
    assert!(e.contains("rig.stop_bits"), "{e}");
    rig.stop_bits = 2;
    let s = tuneward::station::port_settings(&rig, "/dev/x".into()).unwrap();
    assert_eq!(s.data_bits, tuneward::port::link::DataBits::Seven);
    assert_eq!(s.stop_bits, tuneward::port::link::StopBits::Two);
}

/// A debounce runs from when the rig link read the report, not from when
/// the driver got to it: a report read long enough ago is acted on at once
/// (the hand-over between tasks never delays the move it releases). On
/// tokio's paused clock, so the times below are exact and no machine's
/// load can move them (and the driver's precise sleep is seen to fall back
/// to the timer on such a clock rather than wait for ever).
#[tokio::test(start_paused = true)]
async fn the_debounce_runs_from_when_the_report_was_read() {
    let debounce = Duration::from_secs(2);
    let mut p = demo_policy();
    p.debounce = debounce;
    p.bands[0].debounce = debounce;
    let r = start(p).await;
    r.wait_journal(Recorded::Known(0)).await;
    // Let the start-up settle, so that the report's time is later than
    // anything the driver has handled.
    tokio::time::sleep(Duration::from_millis(2500)).await;
    let read = Instant::now() - Duration::from_millis(2200);
    r.rig_said_at(r.dialect.encode_frequency(7_100_000, 0), read)
        .await;
    let handed = Instant::now();
    r.wait_journal(Recorded::Known(1000)).await;
    // Counted from the hand-over, the move could not start for 2 s; from
    // the read, it is due at once: the inhibit lead (5 ms), 1000 steps at
    // 20 000 steps/s (50 ms) and the settle (10 ms), give or take the
    // polling of the journal.
    let took = handed.elapsed();
    assert!(
        took >= Duration::from_millis(65) && took < Duration::from_millis(200),
        "moved {took:?} after the hand-over"
    );
    let (out, _, _) = r.finish().await;
    assert_eq!(out.moves, 1);
}

/// A report stamped earlier than the driver's own last step (read while the
/// driver was busy) counts from that step: the core's clock never goes
/// back, so even a stamp from before the service started is followed as
/// usual (one move, the inhibit around it).
#[tokio::test]
async fn a_report_stamped_before_the_driver_started_still_waits_its_debounce() {
    let r = start(demo_policy()).await;
    r.wait_journal(Recorded::Known(0)).await;
    // The start-up window first ends (the journal is written before its
    // tail is over): a report inside it would move within that window and
    // leave one window, not two, in the levels below.
    eventually(
        || r.inhibit.levels() == [true, false],
        || format!("inhibit levels {:?}", r.inhibit.levels()),
    )
    .await;
    let long_ago = Instant::now()
        .checked_sub(Duration::from_secs(3600))
        .unwrap_or_else(Instant::now);
    r.rig_said_at(r.dialect.encode_frequency(7_100_000, 0), long_ago)
        .await;
    r.wait_journal(Recorded::Known(1000)).await;
    let (out, levels, _) = r.finish().await;
    assert_eq!(out.moves, 1);
    assert_eq!(levels, vec![true, false, true, false]);
}

/// A transmission seen only on the hardware sense line (the rig's own
/// report says receive) defers every move, through the live driver with the
/// sense line's trait double; a line that cannot be read defers them too
/// (fail-safe). On the paused clock, "no move for 3 s" is a fact about
/// virtual time, not a wait.
#[tokio::test(start_paused = true)]
async fn a_transmission_seen_only_on_the_sense_line_defers_every_move() {
    let sense = ScriptedSense::new();
    sense.set(true);
    let r = start_with(demo_policy(), Some(sense.clone())).await;
    r.wait_journal(Recorded::Known(0)).await;
    // The rig says receive, then where it is: only the line says transmit.
    let mut chunk = r.dialect.encode_transmit(false, 0);
    chunk.extend(r.dialect.encode_frequency(7_100_000, 0));
    r.rig_says(chunk).await;
    tokio::time::sleep(Duration::from_secs(3)).await;
    assert_eq!(r.journal.load().unwrap(), Some(Recorded::Known(0)));
    // The line drops: the move goes ahead.
    sense.set(false);
    r.wait_journal(Recorded::Known(1000)).await;
    // A line that cannot be read is taken as transmitting.
    sense.set_failing(true);
    tokio::time::sleep(Duration::from_millis(500)).await;
    r.frequency(7_150_000).await;
    tokio::time::sleep(Duration::from_secs(3)).await;
    assert_eq!(r.journal.load().unwrap(), Some(Recorded::Known(1000)));
    sense.set_failing(false);
    r.wait_journal(Recorded::Known(1500)).await;
    let (out, _, _) = r.finish().await;
    assert_eq!(out.moves, 2);
}
