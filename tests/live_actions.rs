//! The shared action table (`fixtures/control/actions.toml`) through the
//! control socket of the real binary: every operator command gets the
//! answer the core's unit test gets for it
//! (`follow::command_tests::the_shared_action_table_holds_in_the_core`),
//! and the controller double is sent the same GOTOs. `tests/live_mqtt.rs`
//! runs the same table over MQTT.

use std::path::Path;

use tokio::io::{AsyncBufReadExt, AsyncWriteExt, BufReader};
use tokio::net::UnixStream;

mod common;

use common::actions::{run_table, FrontEnd, TableStation};

/// One connection to the control socket: a line out, a line back.
struct Socket {
    r: BufReader<tokio::net::unix::OwnedReadHalf>,
    w: tokio::net::unix::OwnedWriteHalf,
}

impl Socket {
    async fn connect(path: &Path) -> Socket {
        let (r, w) = UnixStream::connect(path).await.unwrap().into_split();
        Socket {
            r: BufReader::new(r),
            w,
        }
    }
}

impl FrontEnd for Socket {
    async fn ask(&mut self, line: &str) -> serde_json::Value {
        self.w.write_all(line.as_bytes()).await.unwrap();
        self.w.write_all(b"\n").await.unwrap();
        let mut answer = String::new();
        let read = tokio::time::timeout(
            std::time::Duration::from_secs(10),
            self.r.read_line(&mut answer),
        )
        .await;
        assert!(matches!(read, Ok(Ok(n)) if n > 0), "{line}: no answer");
        serde_json::from_str(&answer).unwrap_or_else(|e| panic!("{line}: {e}: {answer}"))
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_action_table_through_the_control_socket() {
    let mut station = TableStation::start("");
    let mut socket = Socket::connect(&station.socket()).await;
    run_table(&mut station, &mut socket).await;
    station
        .run
        .wait_log(&["calibration point candidate", "hz=7150000", "steps=1540"]);
    station.run.proc.signal(libc::SIGTERM);
    let status = station
        .run
        .proc
        .wait_exit(std::time::Duration::from_secs(10));
    assert_eq!(status.code(), Some(0));
}
