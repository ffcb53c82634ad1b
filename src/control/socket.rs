//! The local control socket: JSON lines (see `protocols/control.md`), one
//! request, one answer; `watch` streams the state after its answer.
//!
//! A Unix socket, mode 0600, beside the journal by default; optionally a
//! TCP listener, loopback only (the config refuses anything else: this
//! socket takes no token, so only the station's own machine may reach it).

use std::io;
use std::net::SocketAddr;
use std::os::unix::fs::PermissionsExt;
use std::path::{Path, PathBuf};

use tokio::io::{AsyncBufReadExt, AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt, BufReader};
use tokio::net::{TcpListener, UnixListener};
use tokio::task::JoinHandle;

use super::protocol::{bad_request, parse_request, Answer, Request, StateLine, MAX_REQUEST_BYTES};
use super::OperatorLink;
use crate::error::Located;
use crate::shutdown::Shutdown;

/// Binds the Unix socket at `path` (a stale socket file left by a crash is
/// replaced; anything else there is an error) and serves it until
/// `shutdown`. The socket file is removed at the end.
pub fn serve_unix(
    path: PathBuf,
    link: OperatorLink,
    shutdown: Shutdown,
) -> Result<JoinHandle<()>, Located> {
    let at = || format!("control socket {}", path.display());
    remove_stale(&path, at())?;
    let listener = UnixListener::bind(&path)
        .map_err(|e| Located::named(at(), "a Unix socket to listen on", e.to_string()))?;
    std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o600)).map_err(|e| {
        Located::named(
            at(),
            "a socket this user may restrict to mode 0600",
            e.to_string(),
        )
    })?;
    Ok(tokio::spawn(async move {
        let mut stop = shutdown.clone();
        loop {
            tokio::select! {
                _ = stop.wait() => break,
                conn = listener.accept() => match conn {
                    Ok((stream, _)) => {
                        tokio::spawn(converse(stream, link.clone(), shutdown.clone()));
                    }
                    Err(e) => {
                        tracing::warn!(error = %e, "control socket: accept failed");
                        tokio::time::sleep(std::time::Duration::from_millis(100)).await;
                    }
                },
            }
        }
        let _ = std::fs::remove_file(&path);
    }))
}

/// Serves the same protocol on a TCP listener (loopback; checked by the
/// config). Returns the bound address (port 0 picks one).
pub async fn serve_tcp(
    addr: SocketAddr,
    link: OperatorLink,
    shutdown: Shutdown,
) -> Result<(SocketAddr, JoinHandle<()>), Located> {
    let at = || format!("control TCP {addr}");
    if !addr.ip().is_loopback() {
        return Err(Located::named(
            at(),
            "a loopback address",
            addr.ip().to_string(),
        ));
    }
    let listening = |e: io::Error| Located::named(at(), "an address to listen on", e.to_string());
    let listener = TcpListener::bind(addr).await.map_err(listening)?;
    let bound = listener.local_addr().map_err(listening)?;
    Ok((
        bound,
        tokio::spawn(async move {
            let mut stop = shutdown.clone();
            loop {
                tokio::select! {
                    _ = stop.wait() => break,
                    conn = listener.accept() => match conn {
                        Ok((stream, peer)) if peer.ip().is_loopback() => {
                            tokio::spawn(converse(stream, link.clone(), shutdown.clone()));
                        }
                        Ok((_, peer)) => tracing::warn!(%peer, "control TCP: refused a peer not on loopback"),
                        Err(e) => {
                            tracing::warn!(error = %e, "control TCP: accept failed");
                            tokio::time::sleep(std::time::Duration::from_millis(100)).await;
                        }
                    },
                }
            }
        }),
    ))
}

/// Removes a socket file a crash left at `path` (named `at` in errors);
/// anything else there is an error.
fn remove_stale(path: &Path, at: String) -> Result<(), Located> {
    use std::os::unix::fs::FileTypeExt;
    let found = match std::fs::symlink_metadata(path) {
        Ok(m) if m.file_type().is_socket() => match std::fs::remove_file(path) {
            Ok(()) => return Ok(()),
            Err(e) => format!("a socket that cannot be removed ({e})"),
        },
        Ok(_) => "something other than a socket".to_string(),
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(()),
        Err(e) => format!("a path that cannot be read ({e})"),
    };
    Err(Located::named(at, "a stale socket or nothing", found))
}

/// One connection: requests in, answers out, until the peer closes, a line
/// is too long, or the service stops.
async fn converse<S: AsyncRead + AsyncWrite + Unpin>(
    stream: S,
    link: OperatorLink,
    mut shutdown: Shutdown,
) {
    let (r, mut w) = tokio::io::split(stream);
    let mut r = BufReader::new(r);
    let mut buf = Vec::new();
    loop {
        buf.clear();
        let mut limited = (&mut r).take(MAX_REQUEST_BYTES as u64 + 1);
        let read = tokio::select! {
            _ = shutdown.wait() => return,
            read = limited.read_until(b'\n', &mut buf) => read,
        };
        match read {
            Ok(0) | Err(_) => return,
            Ok(_) => {}
        }
        if buf.len() > MAX_REQUEST_BYTES {
            let _ = send(
                &mut w,
                &Answer::error(format!(
                    "{}; closing",
                    bad_request(
                        format!("at most {MAX_REQUEST_BYTES} bytes"),
                        "a longer line"
                    )
                )),
            )
            .await;
            return;
        }
        let request = match std::str::from_utf8(&buf) {
            Ok(text) => parse_request(text),
            Err(_) => Err(bad_request("UTF-8 text", "other bytes")),
        };
        let request = match request {
            Ok(r) => r,
            Err(e) => {
                if send(&mut w, &Answer::error(e.to_string())).await.is_err() {
                    return;
                }
                continue;
            }
        };
        if request == Request::Watch {
            watch(&mut w, link.clone(), shutdown.clone()).await;
            return;
        }
        let Some(ask) = request.ask() else { continue };
        let answer = link.ask(ask).await;
        if send(&mut w, &answer).await.is_err() {
            return;
        }
    }
}

/// `watch`: the state now, then at every change.
async fn watch<W: AsyncWrite + Unpin>(w: &mut W, link: OperatorLink, mut shutdown: Shutdown) {
    let mut state = link.state.clone();
    let first = state.borrow_and_update().clone();
    let answer = match first {
        Some(s) => Answer::watching(s),
        None => Answer::error("the service has no state yet"),
    };
    if send(w, &answer).await.is_err() {
        return;
    }
    loop {
        tokio::select! {
            _ = shutdown.wait() => return,
            changed = state.changed() => if changed.is_err() { return },
        }
        let Some(s) = state.borrow_and_update().clone() else {
            continue;
        };
        let Ok(mut line) = serde_json::to_vec(&StateLine { state: s }) else {
            return;
        };
        line.push(b'\n');
        if w.write_all(&line).await.is_err() {
            return;
        }
    }
}

async fn send<W: AsyncWrite + Unpin>(w: &mut W, answer: &Answer) -> io::Result<()> {
    let mut line = serde_json::to_vec(answer).map_err(io::Error::other)?;
    line.push(b'\n');
    w.write_all(&line).await?;
    w.flush().await
}
