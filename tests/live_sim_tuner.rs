//! Runs the real `tuneward sim-tuner` binary and talks the line protocol to
//! it over loopback TCP.

use std::io::{BufRead, BufReader, Write};
use std::net::TcpStream;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

mod common;

use common::{Proc, BIN};

/// `tuneward sim-tuner` on a free loopback port with `extra` flags; the
/// process and its address.
fn start(extra: &[&str]) -> (Proc, String) {
    common::sim_tuner(&[&["--listen", "127.0.0.1:0"], extra].concat())
}

fn exchange(w: &mut TcpStream, r: &mut BufReader<TcpStream>, send: &str) -> String {
    w.write_all(send.as_bytes()).unwrap();
    read(r)
}

fn read(r: &mut BufReader<TcpStream>) -> String {
    let mut line = String::new();
    r.read_line(&mut line).unwrap();
    line.trim_end().to_string()
}

#[test]
fn sim_tuner_moves_refuses_and_reports_over_tcp() {
    let (_sim, addr) = start(&[
        "--steps-per-second",
        "2000",
        "--settle-ms",
        "30",
        "--min",
        "-100",
        "--max",
        "5000",
        "--start",
        "-50",
    ]);
    let mut w = TcpStream::connect(&addr).unwrap();
    w.set_read_timeout(Some(Duration::from_secs(5))).unwrap();
    let mut r = BufReader::new(w.try_clone().unwrap());

    assert_eq!(exchange(&mut w, &mut r, "WHERE\n"), "AT -50");
    let t0 = Instant::now();
    assert_eq!(exchange(&mut w, &mut r, "GOTO 950\r\n"), "MOVING 950");
    assert_eq!(read(&mut r), "AT 950");
    // 1000 steps at 2000 steps/s + 30 ms settle: at least 530 ms.
    assert!(
        t0.elapsed() >= Duration::from_millis(530),
        "{:?}",
        t0.elapsed()
    );

    let err = exchange(&mut w, &mut r, "GOTO 5001\n");
    assert!(err.starts_with("ERR ") && err.contains("5001"), "{err}");
    let err = exchange(&mut w, &mut r, "JUMP 3\n");
    assert!(err.starts_with("ERR "), "{err}");
    assert_eq!(exchange(&mut w, &mut r, "ZERO 10\n"), "AT 10");
    assert_eq!(exchange(&mut w, &mut r, "GOTO 4010\n"), "MOVING 4010");
    let stopped = exchange(&mut w, &mut r, "STOP\n");
    let at: i64 = stopped.strip_prefix("AT ").unwrap().parse().unwrap();
    assert!((10..4010).contains(&at), "{stopped}");
    assert_eq!(exchange(&mut w, &mut r, "WHERE\n"), format!("AT {at}"));
}

#[test]
fn a_new_connection_takes_over_and_sees_the_same_motor() {
    let (_sim, addr) = start(&["--start", "7"]);
    let mut a = TcpStream::connect(&addr).unwrap();
    a.set_read_timeout(Some(Duration::from_secs(5))).unwrap();
    let mut ra = BufReader::new(a.try_clone().unwrap());
    assert_eq!(exchange(&mut a, &mut ra, "ZERO 300\n"), "AT 300");
    let mut b = TcpStream::connect(&addr).unwrap();
    b.set_read_timeout(Some(Duration::from_secs(5))).unwrap();
    let mut rb = BufReader::new(b.try_clone().unwrap());
    assert_eq!(exchange(&mut b, &mut rb, "WHERE\n"), "AT 300");
}

#[test]
fn bad_flags_are_refused_with_a_reason() {
    let out = Command::new(BIN)
        .args(["sim-tuner", "--listen", "127.0.0.1:0", "--start", "20000"])
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("start") && err.contains("20000"), "{err}");
}

#[test]
fn absurd_speed_or_travel_is_refused_not_a_crash() {
    for args in [
        &["--steps-per-second", "1e-300"][..],
        &[
            "--min",
            "-9223372036854775808",
            "--max",
            "9223372036854775807",
        ][..],
        &["--steps-per-second", "NaN"][..],
    ] {
        let out = Command::new(BIN)
            .args(["sim-tuner", "--listen", "127.0.0.1:0"])
            .args(args)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(1), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("expected"), "{args:?}: {err}");
    }
}

#[tokio::test]
async fn sim_tuner_on_a_pseudo_terminal_behind_a_symlink() {
    use tokio::io::{AsyncBufReadExt, AsyncWriteExt};
    let dir = tempfile::tempdir().unwrap();
    let link = dir.path().join("controller");
    let child = Command::new(BIN)
        .args(["sim-tuner", "--pty"])
        .arg(&link)
        .args(["--start", "42", "--steps-per-second", "10000"])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut sim = Proc(child);
    common::wait_symlink(&link);
    let port =
        tokio_serial::SerialStream::open(&tokio_serial::new(link.to_string_lossy(), 115_200))
            .unwrap();
    let (r, mut w) = tokio::io::split(port);
    let mut lines = tokio::io::BufReader::new(r).lines();
    let mut heard = Vec::new();
    w.write_all(b"WHERE\nGOTO 1042\n").await.unwrap();
    while heard.len() < 3 {
        let l = tokio::time::timeout(Duration::from_secs(5), lines.next_line())
            .await
            .unwrap()
            .unwrap()
            .unwrap();
        heard.push(l);
    }
    assert_eq!(heard, ["AT 42", "MOVING 1042", "AT 1042"]);

    // Ctrl-C: a clean exit that takes the symlink away.
    sim.signal(libc::SIGINT);
    let status = sim.0.wait().unwrap();
    assert!(status.success(), "{status:?}");
    assert!(std::fs::symlink_metadata(&link).is_err());
}
