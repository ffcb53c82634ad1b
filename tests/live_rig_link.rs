//! The rig link task on pseudo-terminals: bytes forwarded in order, unplug
//! and re-plug under a re-pointed symlink, polling that backs off.

use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::{mpsc, watch};
use tokio::time::{timeout, Instant};
use tokio_serial::{SerialPort, SerialStream};
use tuneward::port::link::{spawn, LinkConfig, LinkEvent, PollConfig, PortSettings};
use tuneward::port::pty::place_symlink;
use tuneward::rig::Direction;

mod common;

use common::{collect, next_event as next};

/// A fake rig: the master end of a pseudo-terminal, the link pointed at its
/// far end.
fn rig() -> (SerialStream, SerialStream, std::path::PathBuf) {
    let (master, slave) = SerialStream::pair().unwrap();
    let name = slave.name().unwrap().into();
    (master, slave, name)
}

#[tokio::test]
async fn forwards_bytes_and_survives_an_unplug_with_a_new_device_name() {
    let dir = tempfile::tempdir().unwrap();
    let link = dir.path().join("rig-port");
    let (mut m1, s1, dev1) = rig();
    place_symlink(&link, &dev1).unwrap();

    let (tx, mut ev) = mpsc::channel(64);
    let (_stop_tx, stop) = watch::channel(false);
    let mut cfg = LinkConfig::new(PortSettings::new(&link, 38_400));
    cfg.backoff_cap = Duration::from_millis(200);
    let task = spawn(cfg, tx, stop);

    assert_eq!(
        next(&mut ev).await,
        LinkEvent::Up {
            device: dev1.clone()
        }
    );
    let frame: Vec<u8> = (0u8..=255).collect();
    m1.write_all(&frame).await.unwrap();
    assert_eq!(collect(&mut ev, Direction::Rx, 256).await, frame);

    // The device the rig will come back as (made now, so that it gets a
    // different name from the old one).
    let (mut m2, _s2, dev2) = rig();
    assert_ne!(dev1, dev2);

    // Unplug: both ends of the old terminal vanish.
    drop(m1);
    drop(s1);
    assert!(matches!(next(&mut ev).await, LinkEvent::Down { .. }));

    // Re-plug under the new device name; the symlink follows it.
    place_symlink(&link, &dev2).unwrap();
    // Retries while down report nothing new; the next event is Up.
    assert_eq!(
        next(&mut ev).await,
        LinkEvent::Up {
            device: dev2.clone()
        }
    );
    m2.write_all(b"FA00007074000;").await.unwrap();
    assert_eq!(collect(&mut ev, Direction::Rx, 14).await, b"FA00007074000;");
    task.abort();
}

#[tokio::test]
async fn polls_stretch_while_the_rig_is_silent_and_reset_when_it_answers() {
    let dir = tempfile::tempdir().unwrap();
    let link = dir.path().join("rig-port");
    let (mut m, _s, dev) = rig();
    place_symlink(&link, &dev).unwrap();
    let (tx, mut ev) = mpsc::channel(64);
    let (_stop_tx, stop) = watch::channel(false);
    let mut cfg = LinkConfig::new(PortSettings::new(&link, 9600));
    cfg.poll = Some(PollConfig {
        query: b"FA;".to_vec(),
        every: Duration::from_millis(40),
        max_every: Duration::from_millis(160),
        while_split: Vec::new(),
    });
    let _task = spawn(cfg, tx, stop);
    assert!(matches!(next(&mut ev).await, LinkEvent::Up { .. }));

    // The rig sees the queries on its side, byte-exact.
    let mut seen = Vec::new();
    let mut times = Vec::new();
    while times.len() < 5 {
        let mut b = [0u8; 64];
        let n = timeout(Duration::from_secs(5), m.read(&mut b))
            .await
            .unwrap()
            .unwrap();
        seen.extend_from_slice(&b[..n]);
        while seen.len() >= 3 {
            assert_eq!(&seen[..3], b"FA;");
            seen.drain(..3);
            times.push(Instant::now());
        }
    }
    // Unanswered: the interval doubles (40, 80, 160, 160 ms).
    let gaps: Vec<Duration> = times.windows(2).map(|w| w[1] - w[0]).collect();
    assert!(gaps[2] >= Duration::from_millis(140), "{gaps:?}");
    assert!(gaps[2] > gaps[0], "{gaps:?}");
    // The queries also reach the decoder channel as Tx.
    assert_eq!(collect(&mut ev, Direction::Tx, 3).await, b"FA;");

    // Answer: the next gap is back to the short interval.
    m.write_all(b"FA00014074000;").await.unwrap();
    assert_eq!(collect(&mut ev, Direction::Rx, 14).await, b"FA00014074000;");
    let mut b = [0u8; 64];
    // Drain the query that was already planned on the long interval...
    let _ = timeout(Duration::from_secs(5), m.read(&mut b))
        .await
        .unwrap()
        .unwrap();
    let t = Instant::now();
    // ...then the next comes after the short one.
    let _ = timeout(Duration::from_secs(5), m.read(&mut b))
        .await
        .unwrap()
        .unwrap();
    assert!(
        t.elapsed() < Duration::from_millis(120),
        "{:?}",
        t.elapsed()
    );
}

#[tokio::test]
async fn a_missing_port_is_reported_down_once_with_its_path() {
    let dir = tempfile::tempdir().unwrap();
    let link = dir.path().join("nothing-here");
    let (tx, mut ev) = mpsc::channel(64);
    let (stop_tx, stop) = watch::channel(false);
    let mut cfg = LinkConfig::new(PortSettings::new(&link, 9600));
    cfg.backoff_cap = Duration::from_millis(50);
    let task = spawn(cfg, tx, stop);
    match next(&mut ev).await {
        LinkEvent::Down { reason } => assert!(reason.contains("nothing-here"), "{reason}"),
        other => panic!("expected Down, got {other:?}"),
    }
    // Many retries later, still only the one report.
    assert!(timeout(Duration::from_millis(400), ev.recv())
        .await
        .is_err());
    stop_tx.send_replace(true);
    timeout(Duration::from_secs(2), task)
        .await
        .unwrap()
        .unwrap();
}
