//! A real MQTT broker for the tests: Debian's `mosquitto`, started on a
//! free loopback port with a config file of its own, and a probe client
//! (rumqttc) that subscribes and collects what it is sent.
//!
//! Without mosquitto the tests fail saying how to install it: a silent skip
//! would let CI pass without ever talking to a broker.

use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use rumqttc::{AsyncClient, Event, MqttOptions, Packet, QoS};
use tokio::sync::mpsc;

use super::Proc;

/// Where mosquitto is: on `PATH`, or Debian's `/usr/sbin/mosquitto`.
fn mosquitto() -> PathBuf {
    let on_path = std::env::var_os("PATH").and_then(|paths| {
        std::env::split_paths(&paths)
            .map(|p| p.join("mosquitto"))
            .find(|p| p.is_file())
    });
    on_path
        .or_else(|| Some(PathBuf::from("/usr/sbin/mosquitto")).filter(|p| p.is_file()))
        .unwrap_or_else(|| {
            panic!(
                "the MQTT tests need a real broker: install mosquitto (`apt-get install -y mosquitto`; .ci/run does)"
            )
        })
}

/// A private mosquitto on 127.0.0.1, killed when dropped.
pub struct Broker {
    pub port: u16,
    proc: Option<Proc>,
    dir: tempfile::TempDir,
}

impl Broker {
    pub fn start() -> Broker {
        let dir = tempfile::tempdir().unwrap();
        // A free port: bind, read it, let it go (mosquitto binds it next);
        // if something else took it meanwhile, mosquitto exits: another.
        for _ in 0..5 {
            let port = std::net::TcpListener::bind("127.0.0.1:0")
                .unwrap()
                .local_addr()
                .unwrap()
                .port();
            if let Some(proc) = Broker::launch(dir.path(), port) {
                return Broker {
                    port,
                    proc: Some(proc),
                    dir,
                };
            }
        }
        panic!("mosquitto did not stay up on five free loopback ports");
    }

    /// Kills the broker (SIGKILL): its clients lose the connection.
    pub fn stop(&mut self) {
        self.proc = None;
    }

    /// A new broker on the same port (nothing retained survives).
    pub fn restart(&mut self) {
        self.proc = None;
        let proc = Broker::launch(self.dir.path(), self.port);
        assert!(
            proc.is_some(),
            "mosquitto did not start again on {}",
            self.port
        );
        self.proc = proc;
    }

    /// Starts mosquitto on `port`; `None` if it exited (port taken).
    fn launch(dir: &std::path::Path, port: u16) -> Option<Proc> {
        let bin = mosquitto();
        let conf = dir.join("mosquitto.conf");
        std::fs::write(
            &conf,
            format!("listener {port} 127.0.0.1\nallow_anonymous true\npersistence false\n"),
        )
        .unwrap();
        let child = Command::new(bin)
            .arg("-c")
            .arg(&conf)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .expect("mosquitto starts");
        let mut proc = Proc(child);
        let until = Instant::now() + Duration::from_secs(10);
        loop {
            if proc.0.try_wait().unwrap().is_some() {
                return None;
            }
            if std::net::TcpStream::connect(("127.0.0.1", port)).is_ok() {
                // Listening, and it is mosquitto that listens (a broker that
                // lost the port to another program exits at once).
                std::thread::sleep(Duration::from_millis(50));
                return proc.0.try_wait().unwrap().is_none().then_some(proc);
            }
            assert!(
                Instant::now() < until,
                "mosquitto did not listen on 127.0.0.1:{port}"
            );
            std::thread::sleep(Duration::from_millis(20));
        }
    }

    pub fn url(&self) -> String {
        format!("mqtt://127.0.0.1:{}", self.port)
    }
}

/// A message the probe was sent.
#[derive(Debug, Clone)]
pub struct Message {
    pub topic: String,
    pub payload: Vec<u8>,
    pub retain: bool,
}

impl Message {
    pub fn text(&self) -> String {
        String::from_utf8_lossy(&self.payload).into_owned()
    }
    pub fn json(&self) -> serde_json::Value {
        serde_json::from_slice(&self.payload)
            .unwrap_or_else(|e| panic!("{}: not JSON ({e}): {}", self.topic, self.text()))
    }
}

enum Seen {
    Message(Message),
    Subscribed,
}

/// An MQTT client of the test's own, subscribed to some topics.
pub struct Probe {
    pub client: AsyncClient,
    seen: mpsc::UnboundedReceiver<Seen>,
    /// Messages received but not yet asked for (in order).
    early: std::collections::VecDeque<Message>,
    task: tokio::task::JoinHandle<()>,
}

impl Drop for Probe {
    fn drop(&mut self) {
        self.task.abort();
    }
}

impl Probe {
    /// Connects as `id` and subscribes to `topics`, returning once the
    /// broker has confirmed every subscription (retained messages follow).
    pub async fn connect(port: u16, id: &str, topics: &[&str]) -> Probe {
        let mut o = MqttOptions::new(id, "127.0.0.1", port);
        o.set_keep_alive(Duration::from_secs(10));
        let (client, mut events) = AsyncClient::new(o, 32);
        let (tx, mut seen) = mpsc::unbounded_channel();
        let task = tokio::spawn(async move {
            loop {
                match events.poll().await {
                    Ok(Event::Incoming(Packet::Publish(p))) => {
                        let m = Message {
                            topic: p.topic.clone(),
                            payload: p.payload.to_vec(),
                            retain: p.retain,
                        };
                        if tx.send(Seen::Message(m)).is_err() {
                            return;
                        }
                    }
                    Ok(Event::Incoming(Packet::SubAck(_))) => {
                        if tx.send(Seen::Subscribed).is_err() {
                            return;
                        }
                    }
                    Ok(_) => {}
                    Err(_) => tokio::time::sleep(Duration::from_millis(50)).await,
                }
            }
        });
        for t in topics {
            client.subscribe(*t, QoS::AtLeastOnce).await.unwrap();
        }
        let mut early = std::collections::VecDeque::new();
        let mut acks = 0;
        while acks < topics.len() {
            match tokio::time::timeout(Duration::from_secs(10), seen.recv()).await {
                Ok(Some(Seen::Subscribed)) => acks += 1,
                Ok(Some(Seen::Message(m))) => early.push_back(m),
                _ => panic!("the broker did not confirm the subscriptions to {topics:?}"),
            }
        }
        Probe {
            client,
            seen,
            early,
            task,
        }
    }

    /// The next message on `topic` within `within`; messages on other
    /// topics are kept for their own turn.
    pub async fn next_on(&mut self, topic: &str, within: Duration) -> Option<Message> {
        if let Some(i) = self.early.iter().position(|m| m.topic == topic) {
            return self.early.remove(i);
        }
        let until = tokio::time::Instant::now() + within;
        loop {
            match tokio::time::timeout_at(until, self.seen.recv()).await {
                Ok(Some(Seen::Message(m))) if m.topic == topic => return Some(m),
                Ok(Some(Seen::Message(m))) => self.early.push_back(m),
                Ok(Some(Seen::Subscribed)) => continue,
                Ok(None) | Err(_) => return None,
            }
        }
    }

    /// Waits (10 s at most) for a message on `topic` that `want` accepts.
    pub async fn wait_for(&mut self, topic: &str, want: impl Fn(&Message) -> bool) -> Message {
        let until = tokio::time::Instant::now() + Duration::from_secs(10);
        loop {
            let left = until.saturating_duration_since(tokio::time::Instant::now());
            match self.next_on(topic, left).await {
                Some(m) if want(&m) => return m,
                Some(_) => continue,
                None => panic!("no wanted message on {topic} within 10 s"),
            }
        }
    }

    /// The retained message on `topic` (the first one the broker sends
    /// after subscribing must be it), or, when `want` does not accept it,
    /// the live one after it that does: a retained state may be from just
    /// before the change the test waits for.
    pub async fn retained_then(&mut self, topic: &str, want: impl Fn(&Message) -> bool) -> Message {
        let first = self
            .next_on(topic, Duration::from_secs(10))
            .await
            .unwrap_or_else(|| panic!("nothing retained on {topic}"));
        assert!(
            first.retain,
            "{topic}: the first message is the retained one"
        );
        if want(&first) {
            return first;
        }
        self.wait_for(topic, want).await
    }

    pub async fn publish(&self, topic: &str, payload: &[u8], retain: bool) {
        self.client
            .publish(topic, QoS::AtLeastOnce, retain, payload.to_vec())
            .await
            .unwrap();
    }
}
