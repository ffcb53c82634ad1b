//! Shutdown requests from outside: Ctrl-C (SIGINT), SIGTERM or SIGHUP, the one
//! place every long-running command (`run`, `capture`, `sim-tuner`) waits
//! for them.

use crate::shutdown::Shutdown;

/// Resolves on Ctrl-C or SIGTERM. If SIGTERM cannot be watched (not a Unix
/// process), Ctrl-C alone ends it.
pub async fn interrupted() {
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    tokio::select! {
        _ = tokio::signal::ctrl_c() => {}
        _ = term => {}
    }
}

/// A [`Shutdown`] that is set on Ctrl-C, SIGTERM or SIGHUP, for tasks
/// that watch one. SIGHUP (the terminal or SSH session that started the
/// command closed) is a request to stop like SIGTERM: the default action
/// would kill the process mid-move like a crash, and ignoring it would
/// leave a service nobody started on purpose running unseen. Spawns its waiting task on the current tokio runtime.
///
/// A second Ctrl-C or SIGTERM during the shutdown ends the process at once
/// with status 130, as an operator who presses Ctrl-C twice expects. Nothing
/// is finished then: like a crash, a move under way leaves its intent in the
/// journal, so the next start does not trust the position; ports close, and
/// fail-safe inhibit wiring holds the rig off.
pub fn stop_flag() -> Shutdown {
    use tokio::signal::unix::{signal, SignalKind};
    let (trigger, handle) = crate::shutdown::channel();
    tokio::spawn(async move {
        // Both streams exist before the first signal, so the second one
        // cannot slip through between the two waits.
        let (Ok(mut int), Ok(mut term), Ok(mut hup)) = (
            signal(SignalKind::interrupt()),
            signal(SignalKind::terminate()),
            signal(SignalKind::hangup()),
        ) else {
            interrupted().await;
            tracing::info!("shutting down");
            trigger.trigger();
            return;
        };
        for round in 0..2 {
            tokio::select! {
                _ = int.recv() => {}
                _ = term.recv() => {}
                _ = hup.recv() => {}
            }
            if round == 0 {
                tracing::info!("shutting down (interrupt again to stop at once)");
                trigger.trigger();
            }
        }
        tracing::warn!(
            "second interrupt: stopping at once, without finishing the shutdown; \
             a move under way leaves the position unknown for the next start"
        );
        std::process::exit(130);
    });
    handle
}
