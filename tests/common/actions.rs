//! The shared action table (`fixtures/control/actions.toml`) run on the
//! real binary: the table's station as a config (`tuneward run` with a rig
//! on a pseudo-terminal and the controller double of `controller.rs`), and
//! a runner that sends each step through a front end and checks the
//! answer and the controller's GOTO lines against the table.
//!
//! What "moved" means is read from the controller double, not from the
//! service: the GOTO lines it received and where its motor is.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use tokio::io::AsyncWriteExt;
use tuneward::journal::{Journal, Recorded};
use tuneward::rig::dialect::Dialect;

use super::actions_table::{table, RigSays, Table};
use super::controller::{Fault, FaultyController};
use super::{rig_behind_symlink, wait_journal, Logged};

/// The controller double's speed, and the service's idea of it.
const STEPS_PER_SECOND: u32 = 4000;

/// A way to put a request line to the running service and read its answer.
#[allow(async_fn_in_trait)]
pub trait FrontEnd {
    async fn ask(&mut self, line: &str) -> serde_json::Value;
}

/// The table's station, running.
pub struct TableStation {
    pub run: Logged,
    pub controller: FaultyController,
    pub config: PathBuf,
    pub journal: Journal,
    pub dir: tempfile::TempDir,
    rig: tokio_serial::SerialStream,
    _far: tokio_serial::SerialStream,
    dialect: Dialect,
}

/// The config of the table's station, with `extra` appended (an `[mqtt]`).
pub fn table_config(dir: &Path, rig_link: &Path, controller: &str, extra: &str) -> PathBuf {
    let t = table();
    let st = &t.station;
    let mut points: Vec<String> = st
        .base_points
        .iter()
        .map(|(hz, s)| format!("{{ hz = {hz}, steps = {s} }}"))
        .collect();
    points.extend(
        st.wet_points
            .iter()
            .map(|(hz, s)| format!("{{ hz = {hz}, steps = {s}, profile = \"wet\" }}")),
    );
    let presets: String = st
        .presets
        .iter()
        .map(|p| match (p.hz, p.steps) {
            (Some(hz), _) => format!("\n[[preset]]\nname = \"{}\"\nhz = {hz}\n", p.name),
            (_, Some(s)) => format!("\n[[preset]]\nname = \"{}\"\nsteps = {s}\n", p.name),
            _ => panic!("preset {} without a goal", p.name),
        })
        .collect();
    let config = dir.join("station.toml");
    let text = format!(
        r#"
[rig]
protocol = "text-semicolon"
port = "{rig}"
baud = 38400

[tuner]
link = "tcp://{controller}"
min_steps = {min}
max_steps = {max}
backlash_steps = 0
steps_per_second = {STEPS_PER_SECOND}
settle_ms = 10
state_file = "motor.state"

[follow]
debounce_ms = 30
hysteresis_hz = 100
inhibit_lead_ms = 5
inhibit_tail_ms = 20

[inhibit]
unprotected_ok = true

[calibration]
model = "interpolate"
points = [{points}]

[[band]]
name = "{band}"
low_hz = {low}
high_hz = {high}
{presets}
{extra}
"#,
        rig = rig_link.display(),
        min = st.min_steps,
        max = st.max_steps,
        points = points.join(", "),
        band = st.band.name,
        low = st.band.low_hz,
        high = st.band.high_hz,
    );
    std::fs::write(&config, text).unwrap();
    config
}

impl TableStation {
    /// Starts `tuneward run` on the table's station (`extra` appended to
    /// its config) and waits until it trusts the start position.
    pub fn start(extra: &str) -> TableStation {
        let t = table();
        let dir = tempfile::tempdir().unwrap();
        let (rig, far, rig_link) = rig_behind_symlink(dir.path());
        let controller = FaultyController::start(
            t.station.start_steps,
            f64::from(STEPS_PER_SECOND),
            Fault::None,
        );
        let config = table_config(dir.path(), &rig_link, &controller.addr, extra);
        let journal = Journal::new(dir.path().join("motor.state"));
        let run = Logged::run(&config);
        wait_journal(&journal, Recorded::Known(t.station.start_steps));
        run.wait_log(&["control socket ready"]);
        TableStation {
            run,
            controller,
            config,
            journal,
            dir,
            rig,
            _far: far,
            dialect: Dialect::builtin("text-semicolon").unwrap(),
        }
    }

    /// The control socket (beside the journal).
    pub fn socket(&self) -> PathBuf {
        self.dir.path().join("motor.state.sock")
    }

    pub async fn say(&mut self, bytes: &[u8]) {
        self.rig.write_all(bytes).await.unwrap();
        self.rig.flush().await.unwrap();
    }

    /// The GOTO lines the controller has received.
    pub fn gotos(&self) -> Vec<String> {
        self.controller
            .received()
            .into_iter()
            .filter(|l| l.starts_with("GOTO"))
            .collect()
    }
}

/// Asks `status` until the state satisfies `want` (10 s at most).
pub async fn wait_state(
    fe: &mut impl FrontEnd,
    what: &str,
    want: impl Fn(&serde_json::Value) -> bool,
) -> serde_json::Value {
    let until = Instant::now() + Duration::from_secs(10);
    loop {
        let a = fe.ask(r#"{"do":"status"}"#).await;
        if want(&a["state"]) {
            return a["state"].clone();
        }
        assert!(Instant::now() < until, "{what}: last state {a}");
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
}

/// How long a step that moves nothing is watched for a stray GOTO. An
/// absence cannot be waited on; the next moving step also checks that it
/// was sent exactly one GOTO since this one, which catches a late stray.
const QUIET_WATCH: Duration = Duration::from_millis(250);

/// Runs every step of the table through `fe` on `station`, checking each
/// answer and the controller's GOTO lines.
pub async fn run_table(station: &mut TableStation, fe: &mut impl FrontEnd) -> Table {
    let t = table();
    let mut seen = station.gotos().len();
    for (i, step) in t.steps.iter().enumerate() {
        let label = step.label(i);
        if let Some(line) = &step.ask {
            let a = fe.ask(line).await;
            assert_eq!(
                a["outcome"].as_str(),
                step.outcome.as_deref(),
                "{label}: {a}"
            );
            assert_eq!(
                a["waits_for"].as_str(),
                step.waits_for.as_deref(),
                "{label}: {a}"
            );
            assert_eq!(
                a["refused"].as_str(),
                step.refused.as_deref(),
                "{label}: {a}"
            );
            if step.refused.is_some() {
                assert!(
                    a["reason"].as_str().is_some_and(|r| !r.is_empty()),
                    "{label}: a refusal says why: {a}"
                );
            }
        }
        match (step.rig, step.rig_hz) {
            (Some(RigSays::Frequency), Some(hz)) => {
                let bytes = station.dialect.encode_frequency(hz, 0);
                station.say(&bytes).await;
                wait_state(fe, &label, |s| s["rig_hz"] == hz).await;
            }
            (Some(RigSays::Transmit), _) => {
                let bytes = station.dialect.encode_transmit(true, 0);
                station.say(&bytes).await;
                wait_state(fe, &label, |s| s["transmitting"] == true).await;
            }
            (Some(RigSays::Receive), _) => {
                let bytes = station.dialect.encode_transmit(false, 0);
                station.say(&bytes).await;
            }
            _ => {}
        }
        match step.moves_to {
            Some(n) => {
                let until = Instant::now() + Duration::from_secs(10);
                while !(station.controller.at_rest() && station.controller.position() == n) {
                    assert!(
                        Instant::now() < until,
                        "{label}: the controller did not reach {n}; GOTOs {:?}",
                        &station.gotos()[seen..]
                    );
                    tokio::time::sleep(Duration::from_millis(10)).await;
                }
                wait_state(fe, &label, |s| s["position"] == n && s["moving"] == false).await;
                let gotos = station.gotos();
                assert_eq!(
                    gotos[seen..].to_vec(),
                    vec![format!("GOTO {n}")],
                    "{label}: the controller's GOTOs"
                );
                seen = gotos.len();
            }
            None => {
                tokio::time::sleep(QUIET_WATCH).await;
                let gotos = station.gotos();
                assert_eq!(
                    gotos[seen..].to_vec(),
                    Vec::<String>::new(),
                    "{label}: moved nothing"
                );
                let s = fe.ask(r#"{"do":"status"}"#).await;
                assert_eq!(s["state"]["moving"], false, "{label}: {s}");
            }
        }
    }
    t
}
