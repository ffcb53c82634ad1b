//! The MQTT front end (topics and payloads: `protocols/mqtt.md`, the
//! contract): the state retained on `<prefix>/state` at every change, the
//! availability on `<prefix>/status` (`online`, and a retained last will
//! `offline`), and, only when configured, commands on `<prefix>/command`
//! answered on `<prefix>/reply`.
//!
//! Like the control socket it decides nothing: a command payload is read by
//! the control protocol's own parser ([`parse_request`]) and sent through
//! the same [`OperatorLink`] into the core, whose rules (limits, transmit
//! deferral, inhibit, journal) apply as to every other source. It only
//! reads the state `watch` the driver updates, so a slow or absent broker
//! never holds up a decision: a state not yet sent is replaced by the next
//! one. A lost broker is retried with a growing pause (0.5 s to 30 s).

use std::time::Duration;

use rumqttc::{AsyncClient, Event, EventLoop, LastWill, MqttOptions, Packet, QoS};
use tokio::sync::mpsc;
use tokio::task::JoinHandle;

use super::protocol::{parse_request, Answer, Request, StateView, MAX_REQUEST_BYTES};
use super::OperatorLink;
use crate::error::Located;
use crate::shutdown::Shutdown;

/// What the MQTT front end connects to and how (the station layer builds
/// it from `[mqtt]`: `station::settings::mqtt_settings`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MqttSettings {
    pub host: String,
    pub port: u16,
    /// The topic prefix (no trailing `/`).
    pub prefix: String,
    pub client_id: String,
    /// Subscribe to `<prefix>/command` and take what arrives there.
    pub commands: bool,
    /// User name and password for the broker.
    pub login: Option<(String, String)>,
}

impl MqttSettings {
    pub fn state_topic(&self) -> String {
        format!("{}/state", self.prefix)
    }
    pub fn status_topic(&self) -> String {
        format!("{}/status", self.prefix)
    }
    pub fn command_topic(&self) -> String {
        format!("{}/command", self.prefix)
    }
    pub fn reply_topic(&self) -> String {
        format!("{}/reply", self.prefix)
    }
}

/// The availability payloads.
pub const ONLINE: &str = "online";
pub const OFFLINE: &str = "offline";

/// The first pause after a failed connection; it doubles up to
/// [`BACKOFF_MAX`] and starts again after a connection is made.
const BACKOFF_START: Duration = Duration::from_millis(500);
const BACKOFF_MAX: Duration = Duration::from_secs(30);
/// How often a state that could not be queued is tried again.
const STATE_RETRY: Duration = Duration::from_millis(100);
/// How long the goodbye (`offline`, then DISCONNECT) may take at the end.
const GOODBYE_WAIT: Duration = Duration::from_secs(2);
/// Commands waiting for the core, at most; more are answered with an error.
const COMMAND_QUEUE: usize = 16;

/// Starts the front end; it runs until `shutdown`, then says `offline`
/// and disconnects.
pub fn spawn(settings: MqttSettings, link: OperatorLink, shutdown: Shutdown) -> JoinHandle<()> {
    tokio::spawn(keep_connected(settings, link, shutdown))
}

fn options(s: &MqttSettings) -> MqttOptions {
    let mut o = MqttOptions::new(s.client_id.clone(), s.host.clone(), s.port);
    o.set_keep_alive(Duration::from_secs(10));
    o.set_clean_session(true);
    // Commands are short lines; a bigger packet is refused by the client.
    o.set_max_packet_size(64 * 1024, 64 * 1024);
    o.set_last_will(LastWill::new(
        s.status_topic(),
        OFFLINE,
        QoS::AtLeastOnce,
        true,
    ));
    if let Some((user, password)) = &s.login {
        o.set_credentials(user.clone(), password.clone());
    }
    o
}

/// The state as its topic's payload.
pub fn state_payload(state: &StateView) -> Vec<u8> {
    serde_json::to_vec(state).unwrap_or_default()
}

/// A command payload read, or why it is not taken (the words of the
/// error reply). The control protocol's parser reads it, so the two front
/// ends take exactly the same requests.
pub fn read_command(payload: &[u8], retained: bool) -> Result<Request, Located> {
    let at = || "command payload".to_string();
    if retained {
        return Err(Located::named(
            at(),
            "a command sent now",
            "a retained message (a retained command would run again at every start; it is not taken)",
        ));
    }
    if payload.len() > MAX_REQUEST_BYTES {
        return Err(Located::named(
            at(),
            format!("a request of at most {MAX_REQUEST_BYTES} bytes"),
            format!("{} bytes", payload.len()),
        ));
    }
    let text = std::str::from_utf8(payload)
        .map_err(|_| Located::named(at(), "a request in UTF-8 text", "other bytes"))?;
    let request = parse_request(text)?;
    if request == Request::Watch {
        return Err(Located::named(
            at(),
            "a command",
            "`watch`: over MQTT the state is the retained `state` topic; subscribe to it",
        ));
    }
    Ok(request)
}

async fn keep_connected(settings: MqttSettings, link: OperatorLink, mut shutdown: Shutdown) {
    let (client, mut events) = AsyncClient::new(options(&settings), 32);
    let mut state = link.state.clone();
    let (cmd_tx, cmd_rx) = mpsc::channel::<Vec<u8>>(COMMAND_QUEUE);
    let answering = settings.commands.then(|| {
        tokio::spawn(answer_commands(
            cmd_rx,
            link.clone(),
            client.clone(),
            settings.reply_topic(),
        ))
    });
    let (state_topic, command_topic) = (settings.state_topic(), settings.command_topic());
    let mut backoff = BACKOFF_START;
    let mut connected = false;
    // A state not yet handed to the client (a change while disconnected,
    // or the client's queue full): the latest is sent when it can be.
    let mut unsent = true;
    let mut was_down = false;
    let mut ever_connected = false;
    loop {
        let retry = if unsent && connected {
            Some(tokio::time::Instant::now() + STATE_RETRY)
        } else {
            None
        };
        tokio::select! {
            _ = shutdown.wait() => break,
            changed = state.changed() => {
                if changed.is_err() {
                    break;
                }
                unsent = true;
            }
            _ = crate::timing::sleep_until_opt(retry) => {}
            event = events.poll() => match event {
                Ok(Event::Incoming(Packet::ConnAck(_))) => {
                    tracing::info!(
                        broker = %format!("{}:{}", settings.host, settings.port),
                        prefix = %settings.prefix,
                        commands = settings.commands,
                        "mqtt: connected to the broker"
                    );
                    connected = true;
                    ever_connected = true;
                    was_down = false;
                    backoff = BACKOFF_START;
                    unsent = true;
                    let _ = client.try_publish(settings.status_topic(), QoS::AtLeastOnce, true, ONLINE);
                    if settings.commands {
                        let _ = client.try_subscribe(command_topic.clone(), QoS::AtLeastOnce);
                    }
                }
                Ok(Event::Incoming(Packet::Publish(p))) if p.topic == command_topic && settings.commands => {
                    let payload = p.payload.to_vec();
                    match read_command(&payload, p.retain) {
                        Ok(_) => {
                            if cmd_tx.try_send(payload).is_err() {
                                reply(&client, &settings.reply_topic(), &Answer::error(
                                    "expected one command at a time, found too many waiting; this one is not taken",
                                ));
                            }
                        }
                        Err(why) => reply(&client, &settings.reply_topic(), &Answer::error(why.to_string())),
                    }
                }
                Ok(_) => {}
                Err(e) => {
                    connected = false;
                    if !was_down {
                        let broker = format!("{}:{}", settings.host, settings.port);
                        if ever_connected {
                            tracing::warn!(%broker, error = %e, "mqtt: broker connection lost; retrying (0.5 s, doubling to 30 s)");
                        } else {
                            tracing::warn!(%broker, error = %e, "mqtt: cannot reach the broker; retrying (0.5 s, doubling to 30 s)");
                        }
                        was_down = true;
                    } else {
                        tracing::debug!(error = %e, retry_in_ms = backoff.as_millis() as u64, "mqtt: broker still unreachable");
                    }
                    tokio::select! {
                        _ = shutdown.wait() => break,
                        _ = tokio::time::sleep(backoff) => {}
                    }
                    backoff = (backoff * 2).min(BACKOFF_MAX);
                }
            },
        }
        if unsent && connected {
            let Some(view) = state.borrow_and_update().clone() else {
                unsent = false;
                continue;
            };
            if client
                .try_publish(
                    state_topic.clone(),
                    QoS::AtLeastOnce,
                    true,
                    state_payload(&view),
                )
                .is_ok()
            {
                unsent = false;
            }
        }
    }
    if let Some(task) = answering {
        task.abort();
    }
    if connected {
        goodbye(&client, &mut events, &settings).await;
    }
}

/// `offline` (retained), then a clean disconnect, within [`GOODBYE_WAIT`].
async fn goodbye(client: &AsyncClient, events: &mut EventLoop, settings: &MqttSettings) {
    let _ = client.try_publish(settings.status_topic(), QoS::AtLeastOnce, true, OFFLINE);
    let _ = client.try_disconnect();
    let _ = tokio::time::timeout(GOODBYE_WAIT, async {
        loop {
            match events.poll().await {
                Ok(Event::Outgoing(rumqttc::Outgoing::Disconnect)) | Err(_) => return,
                Ok(_) => {}
            }
        }
    })
    .await;
}

fn reply(client: &AsyncClient, topic: &str, answer: &Answer) {
    let Ok(payload) = serde_json::to_vec(answer) else {
        return;
    };
    if client
        .try_publish(topic.to_string(), QoS::AtLeastOnce, false, payload)
        .is_err()
    {
        tracing::warn!("mqtt: a reply could not be queued (client busy); it is dropped");
    }
}

/// Takes the commands in the order they arrived, one at a time, through
/// the operator link (the core decides), and publishes each answer.
async fn answer_commands(
    mut commands: mpsc::Receiver<Vec<u8>>,
    link: OperatorLink,
    client: AsyncClient,
    reply_topic: String,
) {
    while let Some(payload) = commands.recv().await {
        let answer = match read_command(&payload, false) {
            Ok(request) => match request.ask() {
                Some(ask) => link.ask(ask).await,
                None => Answer::error("expected a command, found none"),
            },
            Err(why) => Answer::error(why.to_string()),
        };
        let Ok(bytes) = serde_json::to_vec(&answer) else {
            continue;
        };
        if client
            .publish(reply_topic.clone(), QoS::AtLeastOnce, false, bytes)
            .await
            .is_err()
        {
            return;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn command_payloads_go_through_the_control_parser() {
        assert_eq!(
            read_command(br#"{"do":"nudge","steps":-20}"#, false),
            Ok(Request::Nudge { steps: -20 })
        );
        for (bad, words) in [
            (&b"nudge 20"[..], "expected a request"),
            (&b"\xff\xfe"[..], "UTF-8"),
            (&br#"{"do":"watch"}"#[..], "retained `state` topic"),
            (&br#"{"do":"mark","x":1}"#[..], "field `x`"),
            (&b""[..], "empty"),
        ] {
            let reason = read_command(bad, false).unwrap_err().to_string();
            assert!(reason.contains(words), "{reason}");
            assert!(reason.contains("expected"), "{reason}");
        }
        let big = vec![b' '; MAX_REQUEST_BYTES + 1];
        assert!(read_command(&big, false)
            .unwrap_err()
            .to_string()
            .contains("at most"));
        let a = read_command(br#"{"do":"goto","steps":10}"#, true)
            .unwrap_err()
            .to_string();
        assert!(a.contains("retained"));
    }
}
