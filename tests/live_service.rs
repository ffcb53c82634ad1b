//! The live driver end to end, in process: rig bytes in a built-in dialect,
//! the follow core, the in-process simulated controller, a recording
//! inhibit line and a real journal file.

use std::sync::Arc;
use std::time::Duration;

use tokio::sync::{mpsc, watch};
use tokio::time::Instant;
use tuneward::calibrate::StepMap;
use tuneward::config::Approach;
use tuneward::follow::{Band, Follower, Policy};
use tuneward::inhibit::RecordingLine;
use tuneward::journal::{Journal, Recorded};
use tuneward::rig::dialect::Dialect;
use tuneward::rig::link::LinkEvent;
use tuneward::rig::Direction;
use tuneward::service::{run, Outcome, RigSource, Service};
use tuneward::tuner::client::{ClientConfig, ControllerUrl};

/// Invented demo calibration: 7.000 MHz at step 0, 100 Hz per step.
struct Linear;
impl StepMap for Linear {
    fn steps_at(&self, hz: f64) -> f64 {
        (hz - 7_000_000.0) / 100.0
    }
}

fn policy() -> Policy {
    Policy {
        bands: vec![Band {
            name: "40m".into(),
            low_hz: 7_000_000,
            high_hz: 7_300_000,
            guard_hz: 0,
            hysteresis_hz: 200,
            debounce: Duration::from_millis(30),
        }],
        min_steps: 0,
        max_steps: 3000,
        backlash_steps: 0,
        approach: Approach::Up,
        debounce: Duration::from_millis(30),
        min_move_steps: 1,
        inhibit_lead: Duration::from_millis(5),
        inhibit_tail: Duration::from_millis(20),
        candidate_dwell: Duration::from_secs(60),
        inhibit_while_detuned: false,
    }
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

struct Running {
    rig: mpsc::Sender<LinkEvent>,
    stop: watch::Sender<bool>,
    task: tokio::task::JoinHandle<Result<Outcome, String>>,
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
    start_custom(controller, journal_before, failing_inhibit, policy(), false).await
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
    let service = Service {
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
    async fn finish(self) -> (Outcome, Vec<bool>, Option<Recorded>) {
        self.stop.send_replace(true);
        let out = tokio::time::timeout(Duration::from_secs(5), self.task)
            .await
            .unwrap()
            .unwrap()
            .unwrap();
        (out, self.inhibit.levels(), self.journal.load().unwrap())
    }
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
    r.transmit(true).await;
    // Stopped part way, and the stop position is on record.
    let until = Instant::now() + Duration::from_secs(3);
    let stopped = loop {
        if let Some(Recorded::Known(p)) = r.journal.load().unwrap() {
            break p;
        }
        assert!(Instant::now() < until, "{:?}", r.journal.load());
        tokio::time::sleep(Duration::from_millis(10)).await;
    };
    assert!((1..1000).contains(&stopped), "{stopped}");
    tokio::time::sleep(Duration::from_millis(600)).await;
    assert_eq!(r.journal.load().unwrap(), Some(Recorded::Known(stopped)));
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

/// Invented demo station: the rig on `rig_link`, the controller simulator
/// at `addr`, 0 to 3000 steps over 7.0 to 7.3 MHz; `extra_rig` adds keys
/// to `[rig]`.
fn station_config(
    dir: &std::path::Path,
    rig_link: &std::path::Path,
    addr: std::net::SocketAddr,
    extra_rig: &str,
) -> std::path::PathBuf {
    let config = dir.join("station.toml");
    std::fs::write(
        &config,
        format!(
            r#"
[rig]
protocol = "text-semicolon"
port = "{rig}"
baud = 38400
{extra_rig}

[tuner]
link = "tcp://{addr}"
min_steps = 0
max_steps = 3000
steps_per_second = 20000
settle_ms = 10
state_file = "motor.state"

[follow]
debounce_ms = 30
hysteresis_hz = 100
inhibit_lead_ms = 5
inhibit_tail_ms = 20

[calibration]
model = "interpolate"
points = [{{ hz = 7000000, steps = 0 }}, {{ hz = 7300000, steps = 3000 }}]

[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7300000
"#,
            rig = rig_link.display()
        ),
    )
    .unwrap();
    config
}

/// A rig on a pseudo-terminal behind a symlink, and the controller
/// simulator on loopback TCP.
async fn rig_and_controller(
    dir: &std::path::Path,
) -> (
    tokio_serial::SerialStream,
    tokio_serial::SerialStream,
    std::path::PathBuf,
    std::net::SocketAddr,
    watch::Sender<bool>,
) {
    use tokio_serial::SerialPort;
    use tuneward::tuner::server::{place_symlink, run_tcp, SimController};
    use tuneward::tuner::sim::SimParams;
    let (rig, rig_far) = tokio_serial::SerialStream::pair().unwrap();
    let rig_link = dir.join("rig");
    place_symlink(&rig_link, std::path::Path::new(&rig_far.name().unwrap())).unwrap();
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let (sim_stop, sim_shutdown) = watch::channel(false);
    let params = SimParams {
        steps_per_second: 20_000.0,
        settle_ms: 10,
        backlash_steps: 0,
        min_steps: 0,
        max_steps: 3000,
    };
    tokio::spawn(run_tcp(
        listener,
        SimController::new(params, 0).unwrap(),
        sim_shutdown,
    ));
    (rig, rig_far, rig_link, addr, sim_stop)
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
    use tuneward::station::Station;

    let dir = tempfile::tempdir().unwrap();
    let (mut rig, _rig_far, rig_link, addr, _sim) = rig_and_controller(dir.path()).await;
    let config = station_config(dir.path(), &rig_link, addr, "");
    let station = Station::load(&config).unwrap();
    let service = Service::from_station(&station).unwrap();
    let (stop, shutdown) = watch::channel(false);
    let task = tokio::spawn(run(service, shutdown));

    let journal = Journal::new(dir.path().join("motor.state"));
    wait_for(&journal, Recorded::Known(0)).await;
    let bytes = station.dialect.encode_frequency(7_150_000, 0);
    rig.write_all(&bytes).await.unwrap();
    // Half way between the two invented points.
    wait_for(&journal, Recorded::Known(1500)).await;
    stop.send_replace(true);
    let out = tokio::time::timeout(Duration::from_secs(5), task)
        .await
        .unwrap()
        .unwrap()
        .unwrap();
    assert_eq!(out.position, Some(1500));
    assert_eq!(out.moves, 1);
}

/// `mode = "proxy"` with `poll_ms`: the service polls a silent rig through the
/// proxy, another program shares the port, and the rig's answer moves the
/// tuner.
#[tokio::test]
async fn shares_the_port_and_polls_a_silent_rig() {
    use tokio::io::{AsyncReadExt, AsyncWriteExt};
    use tuneward::station::Station;

    let dir = tempfile::tempdir().unwrap();
    let (mut rig, _rig_far, rig_link, addr, _sim) = rig_and_controller(dir.path()).await;
    let config = station_config(
        dir.path(),
        &rig_link,
        addr,
        "mode = \"proxy\"\npoll_ms = 50\nproxy_link = \"shared\"",
    );
    let station = Station::load(&config).unwrap();
    let service = Service::from_station(&station).unwrap();
    let (stop, shutdown) = watch::channel(false);
    let task = tokio::spawn(run(service, shutdown));
    let journal = Journal::new(dir.path().join("motor.state"));
    wait_for(&journal, Recorded::Known(0)).await;

    // The rig hears our query, exactly as the dialect words it.
    let query = [
        station.dialect.poll_frequency(0),
        station.dialect.poll_transmit(0),
    ]
    .concat();
    let mut heard = vec![0u8; query.len()];
    tokio::time::timeout(Duration::from_secs(5), rig.read_exact(&mut heard))
        .await
        .unwrap()
        .unwrap();
    assert_eq!(heard, query);

    // Another program on the shared port hears the rig's answer too.
    let shared = dir.path().join("shared");
    let mut other =
        tokio_serial::SerialStream::open(&tokio_serial::new(shared.to_string_lossy(), 38_400))
            .unwrap();
    let answer = station.dialect.encode_frequency(7_030_000, 0);
    rig.write_all(&answer).await.unwrap();
    let mut got = vec![0u8; answer.len()];
    tokio::time::timeout(Duration::from_secs(5), other.read_exact(&mut got))
        .await
        .unwrap()
        .unwrap();
    assert_eq!(got, answer);
    wait_for(&journal, Recorded::Known(300)).await;
    stop.send_replace(true);
    let out = tokio::time::timeout(Duration::from_secs(5), task)
        .await
        .unwrap()
        .unwrap()
        .unwrap();
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
    let e = tuneward::service::port_settings(&rig, "/dev/x".into()).unwrap_err();
    assert!(e.contains("rig.data_bits") && e.contains('9'), "{e}");
    rig.data_bits = 7;
    rig.stop_bits = 3;
    let e = tuneward::service::port_settings(&rig, "/dev/x".into()).unwrap_err();
    assert!(e.contains("rig.stop_bits"), "{e}");
    rig.stop_bits = 2;
    let s = tuneward::service::port_settings(&rig, "/dev/x".into()).unwrap();
    assert_eq!(s.data_bits, tuneward::rig::link::DataBits::Seven);
    assert_eq!(s.stop_bits, tuneward::rig::link::StopBits::Two);
}

/// A controller that refuses a leg (its limits are narrower than the
/// config's) is a fault, but with the link up all along its count is still
/// trusted: the position comes back without a restart.
#[tokio::test]
async fn a_refused_leg_is_a_fault_and_the_position_comes_back() {
    use tuneward::tuner::server::{run_tcp, SimController};
    use tuneward::tuner::sim::SimParams;
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let (_sim_stop, sim_shutdown) = watch::channel(false);
    let narrow = SimParams {
        steps_per_second: 20_000.0,
        settle_ms: 10,
        backlash_steps: 0,
        min_steps: 0,
        max_steps: 1500,
    };
    tokio::spawn(run_tcp(
        listener,
        SimController::new(narrow, 0).unwrap(),
        sim_shutdown,
    ));
    let mut cfg = controller(0);
    cfg.url = ControllerUrl::Tcp {
        addr: addr.to_string(),
    };
    let r = start_with(cfg, None, false).await;
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
    let mut p = policy();
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
    let mut p = policy();
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
    let mut cfg = controller(0);
    cfg.url = ControllerUrl::Tcp {
        addr: addr.to_string(),
    };
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
    let mut slow = controller(0);
    slow.steps_per_second = 2000.0;
    let r = start_with(slow, None, false).await;
    r.wait_journal(Recorded::Known(0)).await;
    r.frequency(7_100_000).await;
    tokio::time::sleep(Duration::from_millis(200)).await;
    assert_eq!(
        r.journal.load().unwrap(),
        Some(Recorded::Unknown { from: 0, to: 1000 })
    );
    r.rig
        .send(LinkEvent::Down {
            reason: "unplugged".into(),
        })
        .await
        .unwrap();
    let until = Instant::now() + Duration::from_secs(3);
    let stopped = loop {
        if let Some(Recorded::Known(p)) = r.journal.load().unwrap() {
            break p;
        }
        assert!(Instant::now() < until, "{:?}", r.journal.load());
        tokio::time::sleep(Duration::from_millis(10)).await;
    };
    assert!((1..1000).contains(&stopped), "{stopped}");
    tokio::time::sleep(Duration::from_millis(600)).await;
    assert_eq!(r.journal.load().unwrap(), Some(Recorded::Known(stopped)));
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
/// (the hand-over between tasks never delays the move it releases).
#[tokio::test]
async fn the_debounce_runs_from_when_the_report_was_read() {
    let debounce = Duration::from_secs(2);
    let mut p = policy();
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
    // the read, it is due already. A second of slack for a loaded machine.
    let took = handed.elapsed();
    assert!(
        took < Duration::from_secs(1),
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
