//! `tuneward set-position` writes a clean journal record beside the config.

use std::process::Command;

use tuneward::journal::{Journal, Recorded};

mod common;

use common::{assert_success, forty_metres, BIN};

/// An invented station whose motor runs -200 to 9000 steps.
fn station() -> String {
    format!(
        "[tuner]\nmin_steps = -200\nmax_steps = 9000\n{}",
        forty_metres(&[(7_000_000, 4000), (7_300_000, 3600)])
    )
}

fn run(args: &[&str]) -> std::process::Output {
    Command::new(BIN).args(args).output().unwrap()
}

#[test]
fn set_position_replaces_an_unfinished_move_with_a_clean_record() {
    let dir = tempfile::tempdir().unwrap();
    let config = dir.path().join("station.toml");
    std::fs::write(&config, station()).unwrap();
    let journal = Journal::new(dir.path().join("tuneward-position.state"));
    journal.record_intent(100, 3000).unwrap();

    let out = run(&["set-position", "-150", "--config", config.to_str().unwrap()]);
    assert_success(&out);
    assert!(String::from_utf8_lossy(&out.stdout).contains("tuneward-position.state"));
    assert_eq!(journal.load().unwrap(), Some(Recorded::Known(-150)));
}

#[test]
fn set_position_honours_state_file_and_refuses_positions_beyond_limits() {
    let dir = tempfile::tempdir().unwrap();
    let config = dir.path().join("station.toml");
    let text = station().replace(
        "max_steps = 9000",
        "max_steps = 9000\nstate_file = \"motor.state\"",
    );
    std::fs::write(&config, text).unwrap();

    let out = run(&["set-position", "9001", "--config", config.to_str().unwrap()]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("9001") && err.contains("-200..9000"), "{err}");
    assert!(!dir.path().join("motor.state").exists());

    let out = run(&["set-position", "9000", "--config", config.to_str().unwrap()]);
    assert_success(&out);
    let j = Journal::new(dir.path().join("motor.state"));
    assert_eq!(j.load().unwrap(), Some(Recorded::Known(9000)));
}
