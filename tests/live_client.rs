//! The controller link task against the simulator over loopback TCP, a
//! pseudo-terminal and in-process, and against a controller that misbehaves.

use std::time::Duration;

use tokio::io::{AsyncBufReadExt, AsyncWriteExt, BufReader};
use tokio::net::TcpListener;
use tokio::sync::{mpsc, watch};
use tokio::time::timeout;
use tuneward::tuner::client::{spawn, ClientConfig, ControllerUrl, TunerCommand, TunerEvent};
use tuneward::tuner::server::{run_pty, run_tcp, SimController};
use tuneward::tuner::sim::SimParams;

fn params() -> SimParams {
    SimParams {
        steps_per_second: 5000.0,
        settle_ms: 20,
        backlash_steps: 0,
        min_steps: 0,
        max_steps: 10_000,
    }
}

fn config(url: ControllerUrl) -> ClientConfig {
    ClientConfig {
        url,
        min_steps: 0,
        max_steps: 10_000,
        steps_per_second: 5000.0,
        settle: Duration::from_millis(20),
        reply_margin: Duration::from_millis(400),
        backoff_cap: Duration::from_millis(300),
        sim_start: 250,
        sim_backlash: 0,
        home_line: None,
    }
}

async fn next(ev: &mut mpsc::Receiver<TunerEvent>) -> TunerEvent {
    timeout(Duration::from_secs(5), ev.recv())
        .await
        .expect("an event within 5 s")
        .expect("link task alive")
}

/// The link comes up and the controller answers `BOOT` (asked before
/// `WHERE` at every connection): its power-on number, or `None` from a
/// controller of version 2.
async fn link_up(events: &mut tokio::sync::mpsc::Receiver<TunerEvent>) -> Option<i64> {
    assert_eq!(next(events).await, TunerEvent::LinkUp);
    match next(events).await {
        TunerEvent::Boot { id } => id,
        other => panic!("expected the answer to BOOT, got {other:?}"),
    }
}

/// Up, asks WHERE, moves, refuses a target beyond the limits without
/// sending it.
async fn exercise(url: ControllerUrl, start: i64) {
    let (_stop_tx, stop) = watch::channel(false);
    let mut h = spawn(config(url), None, stop);
    // The simulator speaks version 3: a power-on number.
    assert!(link_up(&mut h.events).await.is_some());
    assert_eq!(next(&mut h.events).await, TunerEvent::At { steps: start });
    h.commands.send(TunerCommand::Goto(3000)).await.unwrap();
    assert_eq!(
        next(&mut h.events).await,
        TunerEvent::Accepted { target: 3000 }
    );
    assert_eq!(next(&mut h.events).await, TunerEvent::At { steps: 3000 });
    h.commands.send(TunerCommand::Goto(10_001)).await.unwrap();
    match next(&mut h.events).await {
        TunerEvent::Error { text } => assert!(text.contains("outside limits"), "{text}"),
        other => panic!("expected a refusal, got {other:?}"),
    }
    h.commands.send(TunerCommand::Where).await.unwrap();
    assert_eq!(next(&mut h.events).await, TunerEvent::At { steps: 3000 });
}

#[tokio::test]
async fn works_with_the_simulator_over_tcp() {
    let listener = TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap().to_string();
    let (_tx, shutdown) = watch::channel(false);
    tokio::spawn(run_tcp(
        listener,
        SimController::new(params(), 40).unwrap(),
        shutdown,
    ));
    exercise(ControllerUrl::Tcp { addr }, 40).await;
}

#[tokio::test]
async fn works_with_the_simulator_on_a_pseudo_terminal() {
    let dir = tempfile::tempdir().unwrap();
    let link = dir.path().join("controller");
    let (_tx, shutdown) = watch::channel(false);
    let l2 = link.clone();
    tokio::spawn(async move {
        run_pty(&l2, SimController::new(params(), 77).unwrap(), shutdown)
            .await
            .unwrap()
    });
    let until = tokio::time::Instant::now() + Duration::from_secs(5);
    while !link.exists() {
        assert!(
            tokio::time::Instant::now() < until,
            "no controller link at {}",
            link.display()
        );
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
    exercise(
        ControllerUrl::Serial {
            path: link,
            baud: 115_200,
        },
        77,
    )
    .await;
}

#[tokio::test]
async fn works_with_the_in_process_simulator() {
    exercise(ControllerUrl::Sim, 250).await;
}

/// A controller that accepts moves but never arrives: the link reports a
/// fault, reconnects and asks WHERE again.
#[tokio::test]
async fn a_move_that_never_ends_is_a_fault_and_the_link_recovers() {
    let listener = TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap().to_string();
    let (seen_tx, mut seen) = mpsc::unbounded_channel::<(usize, String)>();
    tokio::spawn(async move {
        let mut conn = 0;
        loop {
            let (s, _) = listener.accept().await.unwrap();
            conn += 1;
            let seen_tx = seen_tx.clone();
            tokio::spawn(async move {
                let (r, mut w) = s.into_split();
                let mut lines = BufReader::new(r).lines();
                while let Ok(Some(l)) = lines.next_line().await {
                    seen_tx.send((conn, l.clone())).unwrap();
                    // A version 2 controller: BOOT is no word of its own.
                    let reply = match l.split_once(' ') {
                        Some(("GOTO", n)) => format!("MOVING {n}\n"),
                        _ if l == "BOOT" => "ERR unknown keyword\n".to_string(),
                        _ => "AT 100\n".to_string(),
                    };
                    if w.write_all(reply.as_bytes()).await.is_err() {
                        return;
                    }
                }
            });
        }
    });
    let (_stop_tx, stop) = watch::channel(false);
    let mut h = spawn(
        config(ControllerUrl::Tcp { addr: addr.clone() }),
        None,
        stop,
    );
    assert_eq!(link_up(&mut h.events).await, None, "a version 2 controller");
    assert_eq!(next(&mut h.events).await, TunerEvent::At { steps: 100 });
    assert_eq!(seen.recv().await.unwrap(), (1, "BOOT".to_string()));
    assert_eq!(seen.recv().await.unwrap(), (1, "WHERE".to_string()));
    h.commands.send(TunerCommand::Goto(600)).await.unwrap();
    assert_eq!(
        next(&mut h.events).await,
        TunerEvent::Accepted { target: 600 }
    );
    // 500 steps at 5000 steps/s + 20 ms + 400 ms margin = 520 ms: then a fault.
    let t0 = tokio::time::Instant::now();
    match next(&mut h.events).await {
        TunerEvent::Error { text } => assert!(
            text.starts_with(&format!("controller fault: tcp://{addr}: expected the move to 600 to end in time, found it still under way")),
            "{text}"
        ),
        other => panic!("expected a fault, got {other:?}"),
    }
    assert!(
        t0.elapsed() >= Duration::from_millis(500),
        "{:?}",
        t0.elapsed()
    );
    assert!(matches!(
        next(&mut h.events).await,
        TunerEvent::LinkDown { .. }
    ));
    link_up(&mut h.events).await;
    assert_eq!(next(&mut h.events).await, TunerEvent::At { steps: 100 });
    assert_eq!(seen.recv().await.unwrap(), (1, "GOTO 600".to_string()));
    assert_eq!(seen.recv().await.unwrap(), (2, "BOOT".to_string()));
    assert_eq!(seen.recv().await.unwrap(), (2, "WHERE".to_string()));
}

/// Nothing listening at first: one LinkDown, however many retries; then a
/// controller appears on that port and the link comes up.
#[tokio::test]
async fn reconnects_when_the_controller_appears_and_reports_down_once() {
    let probe = TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = probe.local_addr().unwrap();
    drop(probe);
    let (_stop_tx, stop) = watch::channel(false);
    let mut h = spawn(
        config(ControllerUrl::Tcp {
            addr: addr.to_string(),
        }),
        None,
        stop,
    );
    assert!(matches!(
        next(&mut h.events).await,
        TunerEvent::LinkDown { .. }
    ));
    // Several retries happen in this time (backoff capped at 300 ms).
    tokio::time::sleep(Duration::from_millis(900)).await;
    h.commands.send(TunerCommand::Goto(5)).await.unwrap();
    match next(&mut h.events).await {
        TunerEvent::Error { text } => assert!(text.contains("link down"), "{text}"),
        other => panic!("expected a refusal while down, got {other:?}"),
    }
    let listener = TcpListener::bind(addr).await.unwrap();
    let (_tx, shutdown) = watch::channel(false);
    tokio::spawn(run_tcp(
        listener,
        SimController::new(params(), 9).unwrap(),
        shutdown,
    ));
    link_up(&mut h.events).await;
    assert_eq!(next(&mut h.events).await, TunerEvent::At { steps: 9 });
}

/// The transmit interlock at the lowest layer: no GOTO leaves while the rig
/// transmits, and a move under way is stopped when transmission starts.
#[tokio::test]
async fn transmit_refuses_moves_and_stops_one_under_way() {
    let listener = TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap().to_string();
    let (_tx, shutdown) = watch::channel(false);
    let mut slow = params();
    slow.steps_per_second = 1000.0;
    tokio::spawn(run_tcp(
        listener,
        SimController::new(slow, 0).unwrap(),
        shutdown,
    ));
    let (tx_on, transmit) = watch::channel(true);
    let (_stop_tx, stop) = watch::channel(false);
    let mut cfg = config(ControllerUrl::Tcp { addr });
    cfg.steps_per_second = 1000.0;
    let mut h = spawn(cfg, Some(transmit), stop);
    link_up(&mut h.events).await;
    assert_eq!(next(&mut h.events).await, TunerEvent::At { steps: 0 });
    h.commands.send(TunerCommand::Goto(5000)).await.unwrap();
    match next(&mut h.events).await {
        TunerEvent::Error { text } => assert!(text.contains("transmitting"), "{text}"),
        other => panic!("expected a refusal, got {other:?}"),
    }
    tx_on.send_replace(false);
    h.commands.send(TunerCommand::Goto(5000)).await.unwrap();
    assert_eq!(
        next(&mut h.events).await,
        TunerEvent::Accepted { target: 5000 }
    );
    tokio::time::sleep(Duration::from_millis(200)).await;
    tx_on.send_replace(true);
    assert_eq!(next(&mut h.events).await, TunerEvent::InterlockStop);
    match next(&mut h.events).await {
        // Stopped part way: 5000 steps take 5 s at 1000 steps/s.
        TunerEvent::At { steps } => assert!((100..2000).contains(&steps), "{steps}"),
        other => panic!("expected where it stopped, got {other:?}"),
    }
}
