//! The one shutdown request every task of a long-running command watches:
//! a [`ShutdownTrigger`] sets it once, any number of cloned [`Shutdown`]
//! handles see it. Driver layer only (tokio); the pure layers know nothing
//! of it.
//!
//! A handle whose trigger is gone counts as set for [`Shutdown::wait`]: a
//! task whose owner has vanished stops rather than run unsupervised.
//! [`Shutdown::is_set`] reports only an explicit request.

use tokio::sync::watch;

/// Sets the shutdown request for every [`Shutdown`] made from it.
#[derive(Debug)]
pub struct ShutdownTrigger {
    tx: watch::Sender<bool>,
}

/// A cloneable view of one shutdown request.
#[derive(Debug, Clone)]
pub struct Shutdown {
    rx: watch::Receiver<bool>,
}

/// A new, unset shutdown request and its first handle.
pub fn channel() -> (ShutdownTrigger, Shutdown) {
    let (tx, rx) = watch::channel(false);
    (ShutdownTrigger { tx }, Shutdown { rx })
}

impl ShutdownTrigger {
    /// Sets the request; every handle's `wait` returns. Setting it twice is
    /// harmless.
    pub fn trigger(&self) {
        self.tx.send_replace(true);
    }

    /// Another handle on the same request.
    pub fn subscribe(&self) -> Shutdown {
        Shutdown {
            rx: self.tx.subscribe(),
        }
    }
}

impl Shutdown {
    /// Returns once the request is set or its trigger is gone.
    pub async fn wait(&mut self) {
        loop {
            if *self.rx.borrow_and_update() {
                return;
            }
            if self.rx.changed().await.is_err() {
                return;
            }
        }
    }

    /// Whether the request has been set.
    pub fn is_set(&self) -> bool {
        *self.rx.borrow()
    }
}

/// A bare `watch` flag (true = shut down) works as a handle, so callers that
/// already hold one need not change.
impl From<watch::Receiver<bool>> for Shutdown {
    fn from(rx: watch::Receiver<bool>) -> Self {
        Shutdown { rx }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    #[tokio::test(start_paused = true)]
    async fn every_handle_sees_one_trigger() {
        let (trigger, mut first) = channel();
        let mut second = first.clone();
        let mut third = trigger.subscribe();
        assert!(!first.is_set() && !third.is_set());

        // Unset, `wait` does not return: a timer 1 s out wins.
        tokio::select! {
            _ = first.wait() => panic!("wait returned before the trigger"),
            _ = tokio::time::sleep(Duration::from_secs(1)) => {}
        }

        trigger.trigger();
        trigger.trigger();
        assert!(first.is_set() && second.is_set() && third.is_set());
        first.wait().await;
        second.wait().await;
        third.wait().await;
        // Seen once, still set: a second wait returns too.
        first.wait().await;
    }

    #[tokio::test]
    async fn a_vanished_trigger_ends_the_wait_but_is_not_a_request() {
        let (trigger, mut handle) = channel();
        drop(trigger);
        handle.wait().await;
        assert!(!handle.is_set());
    }

    #[tokio::test]
    async fn a_bare_watch_flag_is_a_handle() {
        let (tx, rx) = watch::channel(false);
        let mut handle = Shutdown::from(rx);
        let waiter = tokio::spawn(async move {
            handle.wait().await;
            handle.is_set()
        });
        tx.send_replace(true);
        assert!(waiter.await.unwrap());
    }
}
