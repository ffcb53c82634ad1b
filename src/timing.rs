//! The timing helpers every driver task shares: sleeping until an optional
//! deadline, coarsely on tokio's timer or precisely for the core's
//! deadlines. Driver layer only (tokio); the pure layers never read a clock.

use std::time::Duration;

use tokio::time::Instant;

/// Sleeps until `deadline` on tokio's timer; never resolves for `None`.
/// For a `select!` branch whose deadline may not exist.
pub async fn sleep_until_opt(deadline: Option<Instant>) {
    match deadline {
        Some(d) => tokio::time::sleep_until(d).await,
        None => std::future::pending().await,
    }
}

/// The last stretch before a core deadline that is waited out by yielding
/// rather than on tokio's timer.
const PRECISE: Duration = Duration::from_millis(3);

/// Sleeps until `deadline` (forever if `None`) to well under a millisecond.
///
/// tokio's timer works in whole milliseconds and fires on the first tick
/// at or after the deadline, which puts 1 to 2 ms between a debounce
/// deadline and the `GOTO` it releases; a thread sleep handed to another
/// thread adds the cross-thread wake-up, which on a busy or virtual machine
/// is now and then over a millisecond. So the timer only takes us to
/// `PRECISE` before the deadline, and the rest is waited out by yielding
/// to the runtime: every other task (and every other branch of the
/// driver's `select!`, so a report arriving now is still taken in order)
/// runs in between, and the deadline is met to a few microseconds. That
/// costs at most `PRECISE` of one core per core deadline that is reached,
/// a few times a minute while the operator tunes; with no deadline nothing
/// runs.
pub async fn sleep_until_precise(deadline: Option<Instant>) {
    let Some(deadline) = deadline else {
        return std::future::pending().await;
    };
    if let Some(early) = deadline.checked_sub(PRECISE) {
        tokio::time::sleep_until(early).await;
    }
    let mut last = Instant::now();
    while last < deadline {
        tokio::task::yield_now().await;
        let now = Instant::now();
        if now == last {
            // A clock that does not move between polls is tokio's paused
            // test clock, which only the timer advances.
            tokio::time::sleep_until(deadline).await;
            return;
        }
        last = now;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test(start_paused = true)]
    async fn sleeps_end_at_their_deadline_and_none_never_ends() {
        let start = Instant::now();
        let deadline = start + Duration::from_millis(250);
        sleep_until_opt(Some(deadline)).await;
        assert_eq!(Instant::now(), deadline);

        let deadline = Instant::now() + Duration::from_millis(40);
        sleep_until_precise(Some(deadline)).await;
        assert_eq!(
            Instant::now(),
            deadline,
            "the paused clock falls back to the timer"
        );

        // `None` is a branch that never fires: a timer 1 s out wins the race.
        let later = Instant::now() + Duration::from_secs(1);
        tokio::select! {
            _ = sleep_until_opt(None) => panic!("sleep_until_opt(None) ended"),
            _ = sleep_until_precise(None) => panic!("sleep_until_precise(None) ended"),
            _ = tokio::time::sleep_until(later) => {}
        }
        assert_eq!(Instant::now(), later);
    }

    #[tokio::test(start_paused = true)]
    async fn a_deadline_already_past_returns_at_once() {
        let past = Instant::now();
        tokio::time::advance(Duration::from_millis(10)).await;
        let now = Instant::now();
        sleep_until_opt(Some(past)).await;
        sleep_until_precise(Some(past)).await;
        assert_eq!(Instant::now(), now);
    }
}
