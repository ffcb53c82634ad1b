//! The proxy between the rig's port and another program, on
//! pseudo-terminals: byte-exact forwarding both ways, both directions on the
//! decoder channel, and poll queries only between the program's messages.

use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::{mpsc, watch};
use tokio::time::timeout;
use tokio_serial::{SerialPort, SerialStream};
use tuneward::port::link::{LinkEvent, PollConfig, PortSettings};
use tuneward::port::proxy::{ends_with, every, spawn, Boundary, ProxyConfig};
use tuneward::rig::Direction;

mod common;

use common::{collect, next_event as next, open_port, read_exactly};

struct Setup {
    rig: SerialStream,
    _rig_far: SerialStream,
    other: SerialStream,
    events: mpsc::Receiver<LinkEvent>,
    _stop: watch::Sender<bool>,
    _dir: tempfile::TempDir,
}

async fn setup(poll: Option<PollConfig>) -> Setup {
    setup_with(poll, Box::new(ends_with(b';')), None).await
}

async fn setup_with(
    poll: Option<PollConfig>,
    boundary: Box<dyn Boundary>,
    writes: Option<watch::Receiver<Vec<u8>>>,
) -> Setup {
    let dir = tempfile::tempdir().unwrap();
    let (rig, rig_far) = SerialStream::pair().unwrap();
    let rig_path = rig_far.name().unwrap();
    let link = dir.path().join("shared-port");
    let (tx, mut events) = mpsc::channel(256);
    let (stop_tx, stop) = watch::channel(false);
    let cfg = ProxyConfig {
        port: PortSettings::new(rig_path, 19_200),
        link: link.clone(),
        poll,
        backoff_cap: Duration::from_millis(200),
        meters: None,
        writes,
    };
    spawn(cfg, boundary, tx, stop).unwrap();
    assert!(matches!(next(&mut events).await, LinkEvent::Up { .. }));
    // The other program opens the symlink like any serial port.
    let other = open_port(&link, 19_200);
    Setup {
        rig,
        _rig_far: rig_far,
        other,
        events,
        _stop: stop_tx,
        _dir: dir,
    }
}

#[tokio::test]
async fn forwards_every_byte_both_ways_unchanged_and_in_order() {
    let mut s = setup(None).await;
    let from_rig: Vec<u8> = (0..2048u32).map(|i| (i * 7 % 256) as u8).collect();
    let from_other: Vec<u8> = (0..2048u32).map(|i| (255 - i % 256) as u8).collect();
    for chunk in from_rig.chunks(97) {
        s.rig.write_all(chunk).await.unwrap();
    }
    assert_eq!(read_exactly(&mut s.other, from_rig.len()).await, from_rig);
    for chunk in from_other.chunks(61) {
        s.other.write_all(chunk).await.unwrap();
    }
    assert_eq!(read_exactly(&mut s.rig, from_other.len()).await, from_other);
    // The decoder channel saw both directions, each complete and in order.
    let mut rx = Vec::new();
    let mut txd = Vec::new();
    while rx.len() < from_rig.len() || txd.len() < from_other.len() {
        if let LinkEvent::Bytes { dir, bytes, .. } = next(&mut s.events).await {
            match dir {
                Direction::Rx => rx.extend_from_slice(&bytes),
                Direction::Tx => txd.extend_from_slice(&bytes),
            }
        }
    }
    assert_eq!(rx, from_rig);
    assert_eq!(txd, from_other);
}

#[tokio::test]
async fn poll_queries_wait_for_the_end_of_the_other_programs_message() {
    let mut s = setup(Some(PollConfig {
        query: b"IF;".to_vec(),
        every: Duration::from_millis(20),
        max_every: Duration::from_millis(40),
        while_split: Vec::new(),
    }))
    .await;
    // Let a few queries go out, then half a message, then a pause long
    // enough for several more to fall due, then the rest of the message.
    tokio::time::sleep(Duration::from_millis(100)).await;
    s.other.write_all(b"FA").await.unwrap();
    tokio::time::sleep(Duration::from_millis(200)).await;
    s.other.write_all(b"00014074000;").await.unwrap();

    // The rig never answers, so queries keep coming: read until the
    // message and the query after it have arrived.
    let mut wire = Vec::new();
    let mut b = [0u8; 256];
    let done = |w: &[u8]| {
        let t = String::from_utf8_lossy(w);
        t.find("FA00014074000;")
            .is_some_and(|i| t.len() >= i + 14 + 3)
    };
    while !done(&wire) {
        let n = timeout(Duration::from_secs(5), s.rig.read(&mut b))
            .await
            .expect("the rig hears something within 5 s")
            .unwrap();
        wire.extend_from_slice(&b[..n]);
    }
    let text = String::from_utf8(wire).unwrap();
    // Only whole messages on the wire: the program's, and our queries
    // around it, never inside it.
    let messages: Vec<&str> = text.split_terminator(';').collect();
    assert!(
        messages.iter().all(|m| *m == "IF" || *m == "FA00014074000"),
        "{text}"
    );
    let at = messages.iter().position(|m| *m == "FA00014074000").unwrap();
    assert!(at >= 1, "a query before the message: {text}");
    assert!(messages.len() > at + 1, "a query after the message: {text}");
    // The query held back during the message went out right after it.
    assert_eq!(messages[at + 1], "IF");
    // Our queries are on the decoder channel too, the other program's
    // message unchanged.
    let tx = collect(&mut s.events, Direction::Tx, text.len()).await;
    assert_eq!(String::from_utf8(tx).unwrap(), text);
}

/// A write the service asks for (a calibration sweep's frequency set)
/// while the other program is half-way through a message: it waits for the
/// message's end like a poll, then goes at once, ahead of the query (so the
/// query's answer tells what the rig made of it), and only once.
#[tokio::test]
async fn a_write_waits_for_the_other_programs_message_and_goes_ahead_of_a_poll() {
    let (writes_tx, writes_rx) = watch::channel(Vec::new());
    let mut s = setup_with(
        Some(PollConfig {
            query: b"IF;".to_vec(),
            // Slow polls: the write brings the next one forward.
            every: Duration::from_secs(5),
            max_every: Duration::from_secs(5),
            while_split: Vec::new(),
        }),
        Box::new(ends_with(b';')),
        Some(writes_rx),
    )
    .await;
    // The first poll goes at once; then half a message from the program.
    tokio::time::sleep(Duration::from_millis(100)).await;
    s.other.write_all(b"FA000140").await.unwrap();
    tokio::time::sleep(Duration::from_millis(50)).await;
    writes_tx.send_replace(b"FA00007033000;".to_vec());
    tokio::time::sleep(Duration::from_millis(200)).await;
    s.other.write_all(b"74000;").await.unwrap();
    let mut wire = Vec::new();
    let mut b = [0u8; 256];
    while let Ok(r) = timeout(Duration::from_millis(500), s.rig.read(&mut b)).await {
        wire.extend_from_slice(&b[..r.unwrap()]);
    }
    let text = String::from_utf8(wire).unwrap();
    assert_eq!(text, "IF;FA00014074000;FA00007033000;IF;", "{text}");
}

/// Framing by count (the block family): the other program loses a byte of
/// a block. Our queries wait while the block is unfinished, go again once
/// it is given up after the dialect's quiet gap, and the program's next
/// whole block is counted as one (the count resynchronised), so our
/// queries keep going between its blocks.
#[tokio::test]
async fn block_framing_resynchronises_after_a_lost_byte() {
    let query = vec![0, 0, 0, 0, 0x03];
    let mut s = setup_with(
        Some(PollConfig {
            query: query.clone(),
            every: Duration::from_millis(20),
            max_every: Duration::from_millis(40),
            while_split: Vec::new(),
        }),
        Box::new(every(5, Duration::from_millis(100))),
        None,
    )
    .await;
    tokio::time::sleep(Duration::from_millis(100)).await;
    // The transmit-status read 00 00 00 00 F7 with one 00 lost.
    let fragment = [0u8, 0, 0, 0xF7];
    s.other.write_all(&fragment).await.unwrap();
    tokio::time::sleep(Duration::from_millis(400)).await;
    // A whole block (00 00 00 00 F7), then time for queries after it.
    let whole = [0u8, 0, 0, 0, 0xF7];
    s.other.write_all(&whole).await.unwrap();
    tokio::time::sleep(Duration::from_millis(300)).await;
    let mut wire = Vec::new();
    let mut b = [0u8; 4096];
    while let Ok(r) = timeout(Duration::from_millis(100), s.rig.read(&mut b)).await {
        wire.extend_from_slice(&b[..r.unwrap()]);
    }
    // Before the fragment: whole queries only.
    let at = wire
        .windows(4)
        .position(|w| w == fragment)
        .unwrap_or_else(|| panic!("no fragment in {wire:02X?}"));
    assert_eq!(at % 5, 0, "{wire:02X?}");
    assert!(wire[..at].chunks(5).all(|c| c == query), "{wire:02X?}");
    // After it: whole blocks, our queries and the program's one block.
    let rest = &wire[at + 4..];
    assert_eq!(rest.len() % 5, 0, "{wire:02X?}");
    let blocks: Vec<&[u8]> = rest.chunks(5).collect();
    let w = blocks
        .iter()
        .position(|c| *c == whole)
        .unwrap_or_else(|| panic!("no whole block after the fragment: {wire:02X?}"));
    assert!(
        blocks.iter().all(|c| *c == query || *c == whole),
        "{wire:02X?}"
    );
    // Queries went while the program was quiet after the lost byte (the
    // fragment given up) and between its blocks afterwards.
    assert!(
        w >= 2,
        "no query after the fragment was given up: {wire:02X?}"
    );
    assert!(
        blocks.len() > w + 2,
        "no query after the whole block: {wire:02X?}"
    );
}

#[tokio::test]
async fn an_existing_file_at_the_link_path_is_not_replaced() {
    let dir = tempfile::tempdir().unwrap();
    let link = dir.path().join("ttyUSB-config");
    std::fs::write(&link, b"precious").unwrap();
    let (tx, _events) = mpsc::channel(8);
    let (_stop_tx, stop) = watch::channel(false);
    let cfg = ProxyConfig {
        port: PortSettings::new("/nonexistent/port", 9600),
        link: link.clone(),
        poll: None,
        backoff_cap: Duration::from_millis(200),
        meters: None,
        writes: None,
    };
    let e = spawn(cfg, Box::new(ends_with(b';')), tx, stop)
        .unwrap_err()
        .to_string();
    assert!(
        e.starts_with(&format!("proxy link {}: expected ", link.display()))
            && e.contains("refusing"),
        "{e}"
    );
    assert_eq!(std::fs::read(&link).unwrap(), b"precious");
}

/// The rig's port goes away and comes back under a new device name: the
/// other program keeps its end open throughout and hears the rig again.
#[tokio::test]
async fn the_shared_port_survives_the_rig_being_unplugged() {
    use tuneward::port::pty::place_symlink;
    let dir = tempfile::tempdir().unwrap();
    let rig_link = dir.path().join("rig-by-id");
    let (rig1, rig1_far) = SerialStream::pair().unwrap();
    place_symlink(&rig_link, std::path::Path::new(&rig1_far.name().unwrap())).unwrap();
    let shared = dir.path().join("shared-port");
    let (tx, mut events) = mpsc::channel(256);
    let (_stop_tx, stop) = watch::channel(false);
    let cfg = ProxyConfig {
        port: PortSettings::new(&rig_link, 9600),
        link: shared.clone(),
        poll: None,
        backoff_cap: Duration::from_millis(100),
        meters: None,
        writes: None,
    };
    spawn(cfg, Box::new(ends_with(b';')), tx, stop).unwrap();
    assert!(matches!(next(&mut events).await, LinkEvent::Up { .. }));
    let mut other = open_port(&shared, 9600);

    let (mut rig2, rig2_far) = SerialStream::pair().unwrap();
    drop(rig1);
    drop(rig1_far);
    assert!(matches!(next(&mut events).await, LinkEvent::Down { .. }));
    place_symlink(&rig_link, std::path::Path::new(&rig2_far.name().unwrap())).unwrap();
    assert!(matches!(next(&mut events).await, LinkEvent::Up { .. }));

    rig2.write_all(b"FA00003573000;").await.unwrap();
    assert_eq!(read_exactly(&mut other, 14).await, b"FA00003573000;");
    other.write_all(b"FA;").await.unwrap();
    assert_eq!(read_exactly(&mut rig2, 3).await, b"FA;");
}
