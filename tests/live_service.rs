//! The live driver end to end, in process: rig bytes in a built-in dialect,
//! the follow core, the in-process simulated controller, a recording
//! inhibit line and a real journal file.

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
    }
}

/// [`controller`] at 0, but a real controller on loopback TCP at `addr`.
fn controller_on(addr: std::net::SocketAddr) -> ClientConfig {
    ClientConfig {
        url: ControllerUrl::Tcp {
            addr: addr.to_string(),
        },
        ..controller(0)
    }
}

/// Asks the service to stop and waits (5 s at most) for its outcome.
async fn stop_and_join(
    stop: &watch::Sender<bool>,
    task: tokio::task::JoinHandle<Result<RunSummary, String>>,
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
    task: tokio::task::JoinHandle<Result<RunSummary, String>>,
    inhibit: RecordingLine,
    journal: Journal,
    dialect: Dialect,
    _dir: tempfile::TempDir,
}

async fn start(
    controller_at: i64,
    journal_before: Option<Recorded>,
    failing_inhibit: bool,
) -> Running {
    start_with(controller(controller_at), journal_before, failing_inhibit).await
}

async fn start_with(
    controller: ClientConfig,
    journal_before: Option<Recorded>,
    failing_inhibit: bool,
) -> Running {
    start_custom(
        controller,
        journal_before,
        failing_inhibit,
        demo_policy(),
        false,
    )
    .await
}

async fn start_custom(
    controller: ClientConfig,
    journal_before: Option<Recorded>,
    failing_inhibit: bool,
    policy: Policy,
    relax_on_exit: bool,
) -> Running {
    let dir = tempfile::tempdir().unwrap();
    let journal = Journal::new(dir.path().join("pos.state"));
    match journal_before {
        Some(Recorded::Known(p)) => journal.record_position(p).unwrap(),
        Some(Recorded::Unknown { from, to }) => journal.record_intent(from, to).unwrap(),
        None => {}
    }
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    let inhibit = RecordingLine::new();
    inhibit.set_failing(failing_inhibit);
    let (rig_tx, rig_rx) = mpsc::channel(64);
    let (stop, shutdown) = watch::channel(false);
    let service = ServiceParts {
        follower: Follower::new(policy, Arc::new(Linear), None),
        decoder: dialect.decoder(None),
        rig: RigSource::Events(rig_rx),
        controller,
        inhibit: Box::new(inhibit.clone()),
        journal: Some(journal.clone()),
        relax_on_exit,
        candidates: None,
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
    async fn transmit(&self, on: bool) {
        self.rig_says(self.dialect.encode_transmit(on, 0)).await;
    }
    async fn wait_journal(&self, want: Recorded) {
        let until = Instant::now() + Duration::from_secs(6);
        loop {
            let got = self.journal.load().unwrap();
            if got == Some(want) {
                return;
            }
            assert!(
                Instant::now() < until,
                "journal {got:?}, waiting for {want:?}"
            );
            tokio::time::sleep(Duration::from_millis(10)).await;
        }
    }
    /// After the motor stopped part way through the 0 to 1000 move of
    /// [`slow_move_under_way`]: where it stopped, once it has stayed there
    /// for longer than the rest of the move would have taken.
    async fn stopped_part_way(&self) -> i64 {
        let until = Instant::now() + Duration::from_secs(3);
        let stopped = loop {
            if let Some(Recorded::Known(p)) = self.journal.load().unwrap() {
                break p;
            }
            assert!(Instant::now() < until, "{:?}", self.journal.load());
            tokio::time::sleep(Duration::from_millis(10)).await;
        };
        assert!((1..1000).contains(&stopped), "{stopped}");
        tokio::time::sleep(Duration::from_millis(600)).await;
        assert_eq!(self.journal.load().unwrap(), Some(Recorded::Known(stopped)));
        stopped
    }
    async fn finish(self) -> (RunSummary, Vec<bool>, Option<Recorded>) {
        let out = stop_and_join(&self.stop, self.task).await;
        (out, self.inhibit.levels(), self.journal.load().unwrap())
    }
}

/// A controller at 0 moving 2000 steps/s, told 7.1 MHz (1000 steps): the
/// service once the move is under way, and journalled as unfinished.
async fn slow_move_under_way() -> Running {
    let mut slow = controller(0);
    slow.steps_per_second = 2000.0;
    let r = start_with(slow, None, false).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    // Debounce 30 ms, lead 5 ms, then 1000 steps take 500 ms.
    tokio::time::sleep(Duration::from_millis(200)).await;
    assert_eq!(
        r.journal.load().unwrap(),
        Some(Recorded::Unknown { from: 0, to: 1000 })
    );
    r
}

#[tokio::test]
async fn follows_the_vfo_with_the_inhibit_around_the_move_and_journals_it() {
    let r = start(0, None, false).await;
    // First start: the controller's count is taken and recorded.
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    r.wait_journal(Recorded::Known(1000)).await;
    tokio::time::sleep(Duration::from_millis(100)).await;
    let (out, levels, journal) = r.finish().await;
    assert_eq!(out.position, Some(1000));
    assert_eq!(out.moves, 1);
    assert_eq!(out.faults, 0);
    assert_eq!(journal, Some(Recorded::Known(1000)));
    // On while unknown at start, off once known, on for the move, off after.
    assert_eq!(levels, vec![true, false, true, false]);
}

#[tokio::test]
async fn no_move_while_transmitting_then_the_move_on_receive() {
    let r = start(0, None, false).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.transmit(true).await;
    r.frequency(7_050_000).await;
    tokio::time::sleep(Duration::from_millis(300)).await;
    assert_eq!(r.journal.load().unwrap(), Some(Recorded::Known(0)));
    r.transmit(false).await;
    r.wait_journal(Recorded::Known(500)).await;
    let (out, _, _) = r.finish().await;
    assert_eq!(out.position, Some(500));
}

#[tokio::test]
async fn transmitting_mid_move_stops_the_motor_and_receive_finishes_the_move() {
    let r = slow_move_under_way().await;
    r.transmit(true).await;
    // Stopped part way, and the stop position is on record.
    r.stopped_part_way().await;
    r.transmit(false).await;
    r.wait_journal(Recorded::Known(1000)).await;
    let (out, _, _) = r.finish().await;
    assert_eq!(out.position, Some(1000));
    assert_eq!(out.faults, 0);
}

#[tokio::test]
async fn a_restarted_controller_is_given_the_journal_position() {
    // The journal says 2000 at rest; the controller restarted and counts 0.
    let r = start(0, Some(Recorded::Known(2000)), false).await;
    tokio::time::sleep(Duration::from_millis(200)).await;
    // Following from 2000: 7.25 MHz is 2500.
    r.frequency(7_250_000).await;
    r.wait_journal(Recorded::Known(2500)).await;
    let (out, _, _) = r.finish().await;
    assert_eq!(out.position, Some(2500));
    assert_eq!(out.moves, 1);
}

#[tokio::test]
async fn an_unfinished_move_in_the_journal_keeps_everything_still() {
    let r = start(0, Some(Recorded::Unknown { from: 100, to: 900 }), false).await;
    r.frequency(7_100_000).await;
    tokio::time::sleep(Duration::from_millis(400)).await;
    let (out, levels, journal) = r.finish().await;
    assert_eq!(out.position, None);
    assert_eq!(out.moves, 0);
    assert_eq!(journal, Some(Recorded::Unknown { from: 100, to: 900 }));
    // Asserted at start and held until shutdown releases it.
    assert_eq!(levels, vec![true, false]);
}

#[tokio::test]
async fn the_controller_finishing_the_journalled_move_is_trusted() {
    let r = start(900, Some(Recorded::Unknown { from: 100, to: 900 }), false).await;
    r.wait_journal(Recorded::Known(900)).await;
    let (out, _, _) = r.finish().await;
    assert_eq!(out.position, Some(900));
}

#[tokio::test]
async fn a_failing_inhibit_output_means_no_move() {
    let r = start(0, None, true).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    tokio::time::sleep(Duration::from_millis(400)).await;
    let (out, _, journal) = r.finish().await;
    assert_eq!(journal, Some(Recorded::Known(0)));
    assert_eq!(out.moves, 0);
    assert!(out.faults >= 1);
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
    task: tokio::task::JoinHandle<Result<RunSummary, String>>,
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

async fn wait_for(journal: &Journal, want: Recorded) {
    let until = Instant::now() + Duration::from_secs(5);
    loop {
        if journal.load().unwrap() == Some(want) {
            return;
        }
        assert!(Instant::now() < until, "journal {:?}", journal.load());
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
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
/// tuner.
#[tokio::test]
async fn shares_the_port_and_polls_a_silent_rig() {
    use tokio::io::AsyncWriteExt;

    let mut s = FromConfig::start("mode = \"proxy\"\npoll_ms = 50\nproxy_link = \"shared\"").await;

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

/// A controller that refuses a leg (its limits are narrower than the
/// config's) is a fault, but with the link up all along its count is still
/// trusted: the position comes back without a restart.
#[tokio::test]
async fn a_refused_leg_is_a_fault_and_the_position_comes_back() {
    let (addr, _sim_stop) = sim_on_loopback(1500).await;
    let r = start_with(controller_on(addr), None, false).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_200_000).await;
    r.wait_journal(Recorded::Unknown { from: 0, to: 2000 })
        .await;
    // Refused, fault, WHERE after 2 s, position taken again.
    r.wait_journal(Recorded::Known(0)).await;
    let (out, _, _) = r.finish().await;
    assert!(out.faults >= 1);
}

/// `relax_on_exit`: after a move that ended with its final approach (from
/// below), shutdown backs off half the backlash downward, under the
/// inhibit, and records where the motor came to rest.
#[tokio::test]
async fn relax_on_exit_backs_off_half_the_backlash_toward_the_approach_side() {
    let mut p = demo_policy();
    p.backlash_steps = 40;
    let mut c = controller(0);
    c.sim_backlash = 40;
    let r = start_custom(c, None, false, p, true).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    r.wait_journal(Recorded::Known(1000)).await;
    let (out, levels, journal) = r.finish().await;
    assert_eq!(out.position, Some(980));
    assert_eq!(journal, Some(Recorded::Known(980)));
    // The last level is the release, after the relaxing move.
    assert_eq!(levels.last(), Some(&false));
}

/// Nothing to relax when this run moved nothing (the last run may have
/// relaxed already), and nothing unless asked.
#[tokio::test]
async fn relax_on_exit_only_after_an_approach_and_only_when_asked() {
    let mut p = demo_policy();
    p.backlash_steps = 40;
    let r = start_custom(
        controller(1000),
        Some(Recorded::Known(1000)),
        false,
        p.clone(),
        true,
    )
    .await;
    // The controller's answer releases the inhibit asserted at start.
    let until = Instant::now() + Duration::from_secs(5);
    while r.inhibit.levels() != [true, false] {
        assert!(Instant::now() < until, "{:?}", r.inhibit.levels());
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
    let (out, _, journal) = r.finish().await;
    assert_eq!(out.position, Some(1000));
    assert_eq!(journal, Some(Recorded::Known(1000)));

    let r = start_custom(controller(0), None, false, p, false).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    r.wait_journal(Recorded::Known(1000)).await;
    let (out, _, journal) = r.finish().await;
    assert_eq!(out.position, Some(1000));
    assert_eq!(journal, Some(Recorded::Known(1000)));
}

/// A controller that accepts a move and never arrives: at shutdown the
/// driver waits for the time the leg needs, then sends `STOP`, and records
/// where the motor stopped.
#[tokio::test]
async fn shutdown_stops_a_move_that_does_not_end_in_time() {
    use tokio::io::{AsyncBufReadExt, AsyncWriteExt, BufReader};
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let (seen_tx, mut seen) = mpsc::unbounded_channel::<String>();
    tokio::spawn(async move {
        let (sock, _) = listener.accept().await.unwrap();
        let (rd, mut wr) = sock.into_split();
        let mut lines = BufReader::new(rd).lines();
        while let Ok(Some(line)) = lines.next_line().await {
            let answer = match line.split_whitespace().collect::<Vec<_>>()[..] {
                ["WHERE"] => "AT 0".to_string(),
                ["GOTO", n] => format!("MOVING {n}"),
                ["STOP"] => "AT 321".to_string(),
                _ => "ERR unexpected".to_string(),
            };
            let _ = seen_tx.send(line);
            wr.write_all(format!("{answer}\n").as_bytes())
                .await
                .unwrap();
        }
    });
    let mut cfg = controller_on(addr);
    cfg.reply_margin = Duration::from_millis(400);
    let r = start_with(cfg, None, false).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    r.wait_journal(Recorded::Unknown { from: 0, to: 1000 })
        .await;
    let (out, levels, journal) = r.finish().await;
    assert_eq!(out.position, Some(321));
    assert_eq!(journal, Some(Recorded::Known(321)));
    assert_eq!(levels.last(), Some(&false));
    let mut lines = Vec::new();
    while let Ok(l) = seen.try_recv() {
        lines.push(l);
    }
    assert_eq!(lines, vec!["WHERE", "GOTO 1000", "STOP"]);
}

/// The rig's port going down mid-move stops the motor (we could not hear a
/// transmission start); nothing moves until it is back, then the move
/// finishes.
#[tokio::test]
async fn rig_port_down_mid_move_stops_it_and_the_move_finishes_when_back() {
    let r = slow_move_under_way().await;
    r.rig
        .send(LinkEvent::Down {
            reason: "unplugged".into(),
        })
        .await
        .unwrap();
    r.stopped_part_way().await;
    r.rig
        .send(LinkEvent::Up {
            device: "/dev/pts/99".into(),
        })
        .await
        .unwrap();
    r.wait_journal(Recorded::Known(1000)).await;
    let (out, _, _) = r.finish().await;
    assert_eq!(out.position, Some(1000));
    assert_eq!(out.faults, 0);
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
    let r = start_custom(controller(0), None, false, p, false).await;
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
    let r = start(0, None, false).await;
    r.wait_journal(Recorded::Known(0)).await;
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
