//! The MQTT front end on the real binary and a real broker (a private
//! mosquitto on loopback, `common::broker`): the shared action table
//! (`fixtures/control/actions.toml`) over the command topic gives the same
//! answers and GOTOs as over the control socket and in the core; the state
//! is retained for late subscribers; the availability topic says `online`,
//! and `offline` by the last will when the service is killed; with commands
//! off nothing on the command topic moves anything; a lost broker is
//! reconnected and does not hold up a move.

use std::time::{Duration, Instant};

mod common;

use common::actions::{run_table, FrontEnd, TableStation};
use common::broker::{Broker, Probe};

fn mqtt_table(broker: &Broker, prefix: &str, commands: bool) -> String {
    format!(
        "[mqtt]\nurl = \"{}\"\ntopic = \"{prefix}\"\nclient_id = \"tw-{}\"\ncommands = {commands}\n",
        broker.url(),
        prefix.replace('/', "-")
    )
}

/// Commands published on the command topic, answers read from the reply
/// topic (one answer per command, in order).
struct Mqtt {
    probe: Probe,
    command: String,
    reply: String,
}

impl FrontEnd for Mqtt {
    async fn ask(&mut self, line: &str) -> serde_json::Value {
        self.probe
            .publish(&self.command, line.as_bytes(), false)
            .await;
        let m = self
            .probe
            .next_on(&self.reply, Duration::from_secs(10))
            .await
            .unwrap_or_else(|| panic!("{line}: no reply on {}", self.reply));
        assert!(!m.retain, "replies are not retained");
        m.json()
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_action_table_through_mqtt_with_retained_state_and_availability() {
    let broker = Broker::start();
    let prefix = "tuneward/table";
    let (state, status, command, reply) = (
        format!("{prefix}/state"),
        format!("{prefix}/status"),
        format!("{prefix}/command"),
        format!("{prefix}/reply"),
    );
    // A retained command left on the broker before the service starts is
    // not taken (it would run again at every start).
    let mut replies = Probe::connect(broker.port, "test-replies", &[&reply]).await;
    replies
        .publish(&command, br#"{"do":"goto","steps":700}"#, true)
        .await;

    let mut station = TableStation::start(&mqtt_table(&broker, prefix, true));
    station.run.wait_log(&["mqtt: connected to the broker"]);
    let a = replies
        .next_on(&reply, Duration::from_secs(10))
        .await
        .expect("an answer to the retained command")
        .json();
    assert_eq!(a["outcome"], "error", "{a}");
    assert!(a["reason"].as_str().unwrap().contains("retained"), "{a}");
    // Clearing it reaches the service as an empty message: an error too.
    replies.publish(&command, b"", true).await;
    let a = replies
        .next_on(&reply, Duration::from_secs(10))
        .await
        .unwrap()
        .json();
    assert_eq!(a["outcome"], "error", "{a}");

    // A late subscriber sees the retained state and "online".
    let mut late = Probe::connect(broker.port, "test-late", &[&state, &status]).await;
    // (The retained one may be from before the position was trusted; the
    // state at 0 then follows.)
    let s = late
        .retained_then(&state, |m| m.json()["position"] == 0)
        .await
        .json();
    assert_eq!(s["max_steps"], 2500, "{s}");
    assert!(s.get("rig_hz").is_none(), "absent values are left out: {s}");
    let st = late.wait_for(&status, |m| m.retain).await;
    assert_eq!(st.text(), "online");

    // Bad payloads get an error reply saying what was expected; nothing moves.
    for bad in [
        &b"nudge 20"[..],
        b"\xff\xfe\x00",
        br#"{"do":"watch"}"#,
        br#"{"do":"goto","steps":"far"}"#,
    ] {
        replies.publish(&command, bad, false).await;
        let a = replies
            .next_on(&reply, Duration::from_secs(10))
            .await
            .unwrap()
            .json();
        assert_eq!(a["ok"], false, "{a}");
        assert_eq!(a["outcome"], "error", "{a}");
        assert!(a["reason"].as_str().unwrap().contains("expected"), "{a}");
    }
    assert!(station.gotos().is_empty(), "{:?}", station.gotos());

    // The table, over MQTT.
    let mut fe = Mqtt {
        probe: replies,
        command: command.clone(),
        reply: reply.clone(),
    };
    run_table(&mut station, &mut fe).await;

    // The state topic followed: the last state the late subscriber got is
    // where the table ended, and a new subscriber gets it retained.
    let until = Instant::now() + Duration::from_secs(10);
    loop {
        let m = late
            .next_on(&state, Duration::from_secs(10))
            .await
            .expect("state changes on the topic");
        let s = m.json();
        if s["position"] == 1500 && s["moving"] == false && s["profile"] == "base" {
            break;
        }
        assert!(
            Instant::now() < until,
            "state topic never showed the end: {s}"
        );
    }
    let mut again = Probe::connect(broker.port, "test-again", &[&state]).await;
    let s = again.wait_for(&state, |m| m.retain).await.json();
    assert_eq!(s["position"], 1500, "{s}");
    assert_eq!(s["rig_hz"], 7_150_000, "{s}");

    // A clean stop says "offline" itself.
    station.run.proc.signal(libc::SIGTERM);
    late.wait_for(&status, |m| m.text() == "offline").await;
    assert_eq!(
        station.run.proc.wait_exit(Duration::from_secs(10)).code(),
        Some(0)
    );
    let mut after = Probe::connect(broker.port, "test-after", &[&status]).await;
    assert_eq!(
        after.wait_for(&status, |m| m.retain).await.text(),
        "offline"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn commands_off_moves_nothing_a_lost_broker_is_retried_and_kill_leaves_the_will() {
    let mut broker = Broker::start();
    let prefix = "tuneward/quiet";
    let (state, status, command, reply) = (
        format!("{prefix}/state"),
        format!("{prefix}/status"),
        format!("{prefix}/command"),
        format!("{prefix}/reply"),
    );
    let mut station = TableStation::start(&mqtt_table(&broker, prefix, false));
    station
        .run
        .wait_log(&["mqtt: connected to the broker", "commands=false"]);
    let mut probe = Probe::connect(broker.port, "test-quiet", &[&state, &status, &reply]).await;
    probe
        .retained_then(&state, |m| m.json()["position"] == 0)
        .await;
    assert_eq!(probe.wait_for(&status, |m| m.retain).await.text(), "online");

    // Commands off: the command topic is not even subscribed to. A command
    // gets no reply (watched for half a second: an absence cannot be waited
    // on) and moves nothing; the next move below is the controller's first
    // GOTO, which catches a late one.
    probe
        .publish(&command, br#"{"do":"goto","steps":900}"#, false)
        .await;
    assert!(probe
        .next_on(&reply, Duration::from_millis(500))
        .await
        .is_none());
    assert!(station.gotos().is_empty(), "{:?}", station.gotos());

    // The rig's own move is published.
    let f = tuneward::rig::dialect::Dialect::builtin("text-semicolon")
        .unwrap()
        .encode_frequency(7_100_000, 0);
    station.say(&f).await;
    probe
        .wait_for(&state, |m| {
            let s = m.json();
            s["position"] == 1000 && s["moving"] == false
        })
        .await;
    assert_eq!(station.gotos(), vec!["GOTO 1000".to_string()]);

    // The broker goes away: the service keeps deciding (a move goes ahead)
    // and, once a broker is back on the port, says "online" and its state
    // again (this broker keeps nothing across a restart).
    broker.stop();
    station.run.wait_log(&["mqtt: broker connection lost"]);
    let f = tuneward::rig::dialect::Dialect::builtin("text-semicolon")
        .unwrap()
        .encode_frequency(7_200_000, 0);
    station.say(&f).await;
    let until = Instant::now() + Duration::from_secs(10);
    while !(station.controller.at_rest() && station.controller.position() == 2000) {
        assert!(Instant::now() < until, "no move while the broker was away");
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
    broker.restart();
    let mut back = Probe::connect(broker.port, "test-back", &[&state, &status]).await;
    assert_eq!(
        back.wait_for(&status, |m| m.text() == "online")
            .await
            .text(),
        "online"
    );
    let s = back
        .wait_for(&state, |m| m.json()["position"] == 2000)
        .await
        .json();
    assert_eq!(s["rig_hz"], 7_200_000);

    // Killed outright: the broker publishes the last will, retained.
    let _ = station.run.proc.0.kill();
    let _ = station.run.proc.0.wait();
    back.wait_for(&status, |m| m.text() == "offline").await;
    let mut after = Probe::connect(broker.port, "test-after", &[&status]).await;
    let m = after.wait_for(&status, |m| m.retain).await;
    assert_eq!(m.text(), "offline");
}
