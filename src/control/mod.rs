//! The operator's front ends to the running service: one command set
//! ([`protocol`]), served on a local socket ([`socket`]) for `tuneward ctl`
//! and on an MQTT broker ([`mqtt`]).
//!
//! Front ends decide nothing. Each request becomes an [`Ask`] sent to the
//! live driver with a one-shot for the answer; the driver hands it to the
//! session as a core event, and the core's [`Reply`] comes back. The state
//! the front ends show is a `watch` the driver updates after each event.

pub mod client;
pub mod mqtt;
pub mod protocol;
pub mod socket;
pub mod web;

use tokio::sync::{mpsc, oneshot, watch};

use crate::follow::Reply;
pub use protocol::{Answer, Ask, Request, StateView};

/// One ask and where its reply goes.
pub type AskWithReply = (Ask, oneshot::Sender<Reply>);

/// The front ends' side: send asks, see the state.
#[derive(Clone)]
pub struct OperatorLink {
    pub asks: mpsc::Sender<AskWithReply>,
    pub state: watch::Receiver<Option<StateView>>,
}

/// The driver's side: take asks, publish the state.
pub struct OperatorPort {
    pub asks: mpsc::Receiver<AskWithReply>,
    pub state: watch::Sender<Option<StateView>>,
}

/// A link between the front ends and the driver.
pub fn operator_channel() -> (OperatorLink, OperatorPort) {
    let (ask_tx, ask_rx) = mpsc::channel(32);
    let (state_tx, state_rx) = watch::channel(None);
    (
        OperatorLink {
            asks: ask_tx,
            state: state_rx,
        },
        OperatorPort {
            asks: ask_rx,
            state: state_tx,
        },
    )
}

impl OperatorLink {
    /// Asks the driver and waits for the core's answer.
    pub async fn ask(&self, ask: Ask) -> Answer {
        let (tx, rx) = oneshot::channel();
        if self.asks.send((ask, tx)).await.is_err() {
            return Answer::error("the service is stopping");
        }
        match rx.await {
            Ok(reply) => Answer::from_reply(&reply),
            Err(_) => Answer::error("the service stopped before answering"),
        }
    }
}
