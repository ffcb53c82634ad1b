//! The live service in process, against a controller double on loopback
//! TCP:
//!
//! - **latency** from the debounce deadline of a settled frequency to the
//!   `GOTO` line leaving the socket (the bench hands the frequency to the
//!   driver at `t`; the deadline is `t + debounce`, and the `inhibit_lead`
//!   is 0, so the `GOTO` is due at the deadline). "Left" is when the
//!   controller link's write of the line returned, taken from the link's
//!   own `sent` log event by a tracing layer of this bench (nothing in the
//!   service is built for the bench); "read" is when the controller double
//!   on the other end of the loopback had read the line, an upper bound
//!   that adds the wake-up of the bench's own reader. Both include the
//!   hand-over of the frequency event, the timer, the journal's fsync of
//!   the move's intent (in the "journal" variant) and the hop to the link
//!   task. p50 and p99 are printed after each variant; target p99 < 1 ms
//!   for "left", without the journal.
//! - **idle cost**: the service with no traffic for a few seconds: CPU time
//!   (getrusage) and context switches of the whole process, and the
//!   driver's own timer wake-ups (expected: only the inhibit release that
//!   follows the start-up `WHERE`).

use std::sync::{Arc, Mutex};
use std::time::Duration;

use criterion::{criterion_group, Criterion};
use tokio::io::{AsyncBufReadExt, AsyncWriteExt, BufReader};
use tokio::sync::{mpsc, watch};
use tokio::time::Instant;
use tracing_subscriber::layer::{Context, SubscriberExt};
use tracing_subscriber::Layer;
use tuneward::follow::{Follower, Policy};
use tuneward::inhibit::RecordingLine;
use tuneward::journal::Journal;
use tuneward::port::link::LinkEvent;
use tuneward::rig::dialect::Dialect;
use tuneward::rig::Direction;
use tuneward::service::{run, RigSource, RunSummary, ServiceParts};
use tuneward::tuner::client::{ClientConfig, ControllerUrl};

#[path = "../tests/common/mod.rs"]
mod common;

const DEBOUNCE: Duration = Duration::from_millis(5);

/// The demo station's policy with the bench's short debounce and no
/// inhibit lead (the `GOTO` is due at the debounce deadline).
fn policy() -> Policy {
    Policy {
        inhibit_lead: Duration::ZERO,
        candidate_dwell: Duration::from_secs(3600),
        ..common::policy(DEBOUNCE)
    }
}

/// Notes the instant of every `sent` event of the controller link whose
/// request is a `GOTO`: the write of the line has just returned.
struct GotoLeft(Arc<Mutex<Vec<std::time::Instant>>>);

impl<S: tracing::Subscriber> Layer<S> for GotoLeft {
    fn on_event(&self, event: &tracing::Event<'_>, _: Context<'_, S>) {
        let now = std::time::Instant::now();
        struct Req(bool);
        impl tracing::field::Visit for Req {
            fn record_debug(&mut self, f: &tracing::field::Field, v: &dyn std::fmt::Debug) {
                if f.name() == "req" {
                    self.0 = format!("{v:?}").starts_with("GOTO");
                }
            }
        }
        let mut req = Req(false);
        event.record(&mut req);
        if req.0 && event.metadata().target() == "tuneward::tuner::client" {
            self.0.lock().unwrap().push(now);
        }
    }
}

/// A controller that arrives at once; the time each `GOTO` line was read
/// goes to `gotos`.
async fn controller_double(gotos: mpsc::UnboundedSender<Instant>) -> std::net::SocketAddr {
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    tokio::spawn(async move {
        while let Ok((sock, _)) = listener.accept().await {
            sock.set_nodelay(true).unwrap();
            let gotos = gotos.clone();
            tokio::spawn(async move {
                let (rd, mut wr) = sock.into_split();
                let mut lines = BufReader::new(rd).lines();
                let mut at = 0i64;
                while let Ok(Some(line)) = lines.next_line().await {
                    let now = Instant::now();
                    let reply = match line.split_whitespace().collect::<Vec<_>>()[..] {
                        ["GOTO", n] => {
                            let _ = gotos.send(now);
                            at = n.parse().unwrap_or(at);
                            format!("MOVING {at}\nAT {at}\n")
                        }
                        ["STOP"] | ["WHERE"] => format!("AT {at}\n"),
                        ["ZERO", n] => {
                            at = n.parse().unwrap_or(at);
                            format!("AT {at}\n")
                        }
                        _ => "ERR ?\n".to_string(),
                    };
                    if wr.write_all(reply.as_bytes()).await.is_err() {
                        return;
                    }
                }
            });
        }
    });
    addr
}

struct Live {
    rig: mpsc::Sender<LinkEvent>,
    gotos: mpsc::UnboundedReceiver<Instant>,
    stop: watch::Sender<bool>,
    task: tokio::task::JoinHandle<Result<RunSummary, tuneward::service::ServiceError>>,
    _dir: tempfile::TempDir,
}

async fn start(journal: bool) -> Live {
    let dir = tempfile::tempdir().unwrap();
    let (goto_tx, gotos) = mpsc::unbounded_channel();
    let addr = controller_double(goto_tx).await;
    let (rig, rig_rx) = mpsc::channel(64);
    let (stop, shutdown) = watch::channel(false);
    let service = ServiceParts {
        follower: Follower::new(policy(), Arc::new(common::Linear), None),
        decoder: Dialect::builtin("text-semicolon").unwrap().decoder(None),
        rig: RigSource::Events(rig_rx),
        controller: ClientConfig {
            url: ControllerUrl::Tcp {
                addr: addr.to_string(),
            },
            min_steps: 0,
            max_steps: 3000,
            steps_per_second: 100_000.0,
            settle: Duration::from_millis(1),
            reply_margin: Duration::from_millis(500),
            backoff_cap: Duration::from_millis(200),
            sim_start: 0,
            sim_backlash: 0,
            home_line: None,
        },
        inhibit: Box::new(RecordingLine::new()),
        sense: None,
        journal: journal.then(|| Journal::new(dir.path().join("pos.state"))),
        relax_on_exit: false,
        home: None,
        candidates: None,
        swr_watch: None,
        signal_meter: None,
        frequency_set: None,
    };
    let task = tokio::spawn(run(service, shutdown));
    // Let the start-up WHERE be answered and the inhibit released.
    tokio::time::sleep(Duration::from_millis(100)).await;
    Live {
        rig,
        gotos,
        stop,
        task,
        _dir: dir,
    }
}

impl Live {
    async fn finish(self) -> RunSummary {
        self.stop.send_replace(true);
        self.task.await.unwrap().unwrap()
    }
}

fn percentile(sorted: &[Duration], p: f64) -> Duration {
    let i = ((sorted.len() as f64 - 1.0) * p).round() as usize;
    sorted.get(i).copied().unwrap_or_default()
}

fn latency(c: &mut Criterion) {
    let left = Arc::new(Mutex::new(Vec::new()));
    let filter = tracing_subscriber::filter::Targets::new()
        .with_target("tuneward::tuner::client", tracing::Level::DEBUG);
    let subscriber =
        tracing_subscriber::registry().with(GotoLeft(Arc::clone(&left)).with_filter(filter));
    tracing::subscriber::set_global_default(subscriber).expect("one subscriber");
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap();
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    let mut group = c.benchmark_group("live");
    group.sample_size(20);
    group.measurement_time(Duration::from_secs(4));
    for journal in [false, true] {
        let samples = Arc::new(Mutex::new(Vec::<Duration>::new()));
        let lefts = Arc::new(Mutex::new(Vec::<Duration>::new()));
        let name = if journal {
            "debounce deadline to GOTO on the socket, journal on disk"
        } else {
            "debounce deadline to GOTO on the socket, no journal"
        };
        let all = Arc::clone(&samples);
        let all_left = Arc::clone(&lefts);
        group.bench_function(name, |b| {
            b.iter_custom(|iters| {
                let dialect = dialect.clone();
                let all = Arc::clone(&all);
                let all_left = Arc::clone(&all_left);
                let left = Arc::clone(&left);
                rt.block_on(async move {
                    let mut live = start(journal).await;
                    let mut total = Duration::ZERO;
                    for i in 0..iters {
                        let hz = if i % 2 == 0 { 7_100_000 } else { 7_200_000 };
                        let bytes = dialect.encode_frequency(hz, 0);
                        let sent = Instant::now();
                        live.rig
                            .send(LinkEvent::Bytes {
                                dir: Direction::Rx,
                                bytes: bytes.into(),
                                at: sent,
                            })
                            .await
                            .unwrap();
                        let goto = tokio::time::timeout(Duration::from_secs(2), live.gotos.recv())
                            .await
                            .expect("no GOTO within 2 s")
                            .unwrap();
                        let due = sent + DEBOUNCE;
                        let late = goto.saturating_duration_since(due);
                        all.lock().unwrap().push(late);
                        // The GOTO was read, so its `sent` event is in.
                        if let Some(&at) = left.lock().unwrap().last() {
                            let at = Instant::from_std(at);
                            all_left
                                .lock()
                                .unwrap()
                                .push(at.saturating_duration_since(due));
                        }
                        total += late;
                        // Let the arrival be handled (and journalled).
                        tokio::time::sleep(Duration::from_millis(10)).await;
                    }
                    live.finish().await;
                    total
                })
            })
        });
        for (what, samples) in [("left", &lefts), ("read", &samples)] {
            let mut s = samples.lock().unwrap().clone();
            s.sort();
            if !s.is_empty() {
                println!(
                    "live latency to GOTO {what} ({}): n = {}, p50 = {:?}, p99 = {:?}, max = {:?}",
                    if journal { "journal" } else { "no journal" },
                    s.len(),
                    percentile(&s, 0.50),
                    percentile(&s, 0.99),
                    s.last().copied().unwrap_or_default()
                );
            }
        }
    }
    group.finish();
}

/// CPU time (user + system) and context switches (voluntary, involuntary)
/// of this process so far.
fn usage() -> (Duration, i64, i64) {
    // SAFETY: getrusage fills the struct we hand it; nothing else is touched.
    let mut u: libc::rusage = unsafe { std::mem::zeroed() };
    let rc = unsafe { libc::getrusage(libc::RUSAGE_SELF, &mut u) };
    assert_eq!(rc, 0);
    let tv = |t: libc::timeval| {
        Duration::from_secs(t.tv_sec as u64) + Duration::from_micros(t.tv_usec as u64)
    };
    (
        tv(u.ru_utime) + tv(u.ru_stime),
        u.ru_nvcsw as i64,
        u.ru_nivcsw as i64,
    )
}

/// The service with no traffic: what it costs to sit there.
fn idle(window: Duration) {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap();
    rt.block_on(async {
        let live = start(true).await;
        let (cpu0, v0, i0) = usage();
        tokio::time::sleep(window).await;
        let (cpu1, v1, i1) = usage();
        let out = live.finish().await;
        println!(
            "live idle for {window:?}: CPU {:?} ({:.4} % of one core), context switches {} voluntary + {} involuntary (whole process, incl. this bench's own sleep), driver timer wake-ups {} for the whole run (1 expected: the inhibit release after start-up)",
            cpu1 - cpu0,
            (cpu1 - cpu0).as_secs_f64() / window.as_secs_f64() * 100.0,
            v1 - v0,
            i1 - i0,
            out.timer_wakeups
        );
    });
}

criterion_group!(benches, latency);

fn main() {
    // `cargo test --benches` runs benches once in test mode: keep it short.
    let quick = std::env::args().any(|a| a == "--test");
    idle(if quick {
        Duration::from_millis(300)
    } else {
        Duration::from_secs(5)
    });
    benches();
    Criterion::default().configure_from_args().final_summary();
}
