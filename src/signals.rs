//! Shutdown requests from outside: Ctrl-C (SIGINT) or SIGTERM, the one
//! place every long-running command (`run`, `capture`, `sim-tuner`) waits
//! for them.

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

/// A flag that turns true on Ctrl-C or SIGTERM, for tasks that watch one.
/// Spawns its waiting task on the current tokio runtime.
pub fn stop_flag() -> tokio::sync::watch::Receiver<bool> {
    let (tx, rx) = tokio::sync::watch::channel(false);
    tokio::spawn(async move {
        interrupted().await;
        tracing::info!("shutting down");
        tx.send_replace(true);
    });
    rx
}
