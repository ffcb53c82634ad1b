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
        follower: Follower::new(policy(), Arc::new(Linear), None),
        decoder: dialect.decoder(None),
        rig: RigSource::Events(rig_rx),
        controller: controller(controller_at),
        inhibit: Box::new(inhibit.clone()),
        journal: Some(journal.clone()),
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
        self.rig
            .send(LinkEvent::Bytes {
                dir: Direction::Rx,
                bytes: bytes.into(),
                at: Instant::now(),
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
        let until = Instant::now() + Duration::from_secs(3);
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

/// The whole service from a config file: the rig on a pseudo-terminal
/// behind a symlink, the controller simulator on loopback TCP.
#[tokio::test]
async fn runs_from_a_station_config_with_real_links() {
    use tokio::io::AsyncWriteExt;
    use tokio_serial::SerialPort;
    use tuneward::station::Station;
    use tuneward::tuner::server::{place_symlink, run_tcp, SimController};
    use tuneward::tuner::sim::SimParams;

    let dir = tempfile::tempdir().unwrap();
    let (mut rig, rig_far) = tokio_serial::SerialStream::pair().unwrap();
    let rig_link = dir.path().join("rig");
    place_symlink(&rig_link, std::path::Path::new(&rig_far.name().unwrap())).unwrap();

    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let (_sim_stop, sim_shutdown) = watch::channel(false);
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

    let config = dir.path().join("station.toml");
    std::fs::write(
        &config,
        format!(
            r#"
[rig]
protocol = "text-semicolon"
port = "{rig}"
baud = 38400

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
    let station = Station::load(&config).unwrap();
    let service = Service::from_station(&station).unwrap();
    let (stop, shutdown) = watch::channel(false);
    let task = tokio::spawn(run(service, shutdown));

    let journal = Journal::new(dir.path().join("motor.state"));
    let wait_for = |want: Recorded| {
        let journal = journal.clone();
        async move {
            let until = Instant::now() + Duration::from_secs(5);
            loop {
                if journal.load().unwrap() == Some(want) {
                    return;
                }
                assert!(Instant::now() < until, "journal {:?}", journal.load());
                tokio::time::sleep(Duration::from_millis(10)).await;
            }
        }
    };
    wait_for(Recorded::Known(0)).await;
    let bytes = station.dialect.encode_frequency(7_150_000, 0);
    rig.write_all(&bytes).await.unwrap();
    // Half way between the two invented points.
    wait_for(Recorded::Known(1500)).await;
    stop.send_replace(true);
    let out = tokio::time::timeout(Duration::from_secs(5), task)
        .await
        .unwrap()
        .unwrap()
        .unwrap();
    assert_eq!(out.position, Some(1500));
    assert_eq!(out.moves, 1);
}
