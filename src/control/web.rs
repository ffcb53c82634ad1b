//! The live web page: one static page (`page.html`, embedded), the state
//! as JSON and as server-sent events, and the operator's commands.
//!
//! A front end like the control socket, and no more: a command is the
//! control protocol's request (`{"do":"nudge","steps":20}`, see
//! `protocols/control.md`) POSTed to `/api/do`, turned into the same
//! [`Ask`](super::Ask) and sent down the same [`OperatorLink`]; the answer
//! is the protocol's. The events are the same state `watch` streams. Every
//! rule (limits, the transmit interlock, the journal) is the core's.
//!
//! Security (README, "The web page"):
//! - the `Host` of every request must be the server's own (a DNS-rebinding
//!   page names the attacker's host and is refused);
//! - with a token (required when listening beyond loopback) every request
//!   but the page itself carries it (`Authorization: Bearer`, or `?token=`
//!   for the event stream, which a browser cannot give headers);
//! - a command needs a JSON body (a cross-site HTML form cannot send one
//!   without the browser asking first) and, without a token, a same-origin
//!   browser's word for it: `Sec-Fetch-Site: same-origin`, or else an
//!   `Origin` naming this server. A request with neither is refused.

use std::convert::Infallible;
use std::io;
use std::net::SocketAddr;
use std::sync::Arc;
use std::time::Duration;

use axum::body::Bytes;
use axum::extract::{DefaultBodyLimit, Request as HttpRequest, State};
use axum::http::{header, HeaderMap, HeaderValue, Method, StatusCode};
use axum::middleware::{self, Next};
use axum::response::sse::{Event, KeepAlive, Sse};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Json, Router};
use tokio::net::TcpListener;
use tokio::task::JoinHandle;

use super::protocol::{parse_request, Answer, Request, MAX_REQUEST_BYTES};
use super::OperatorLink;
use crate::shutdown::Shutdown;

/// The page, embedded in the binary (no build step, no framework).
pub const PAGE: &str = include_str!("page.html");

/// Where the page listens and what it asks of a request.
#[derive(Debug, Clone)]
pub struct WebSetup {
    pub listen: SocketAddr,
    /// Required on every request but the page's own when set; the station
    /// sets one whenever `listen` is beyond loopback.
    pub token: Option<String>,
    /// Host names (without the port) that also name this server, besides
    /// its address (and `localhost` on loopback).
    pub host_names: Vec<String>,
}

struct Web {
    link: OperatorLink,
    token: Option<String>,
    /// The port requests must name in `Host`.
    port: u16,
    /// The listening address (`None`: every address, `0.0.0.0` / `::`).
    ip: Option<std::net::IpAddr>,
    host_names: Vec<String>,
    shutdown: Shutdown,
}

/// Binds `setup.listen` and serves the page until `shutdown`. Returns the
/// bound address (port 0 picks one).
pub async fn serve(
    setup: WebSetup,
    link: OperatorLink,
    shutdown: Shutdown,
) -> io::Result<(SocketAddr, JoinHandle<()>)> {
    if !setup.listen.ip().is_loopback() && setup.token.is_none() {
        return Err(io::Error::new(
            io::ErrorKind::PermissionDenied,
            format!(
                "the web page listens beyond loopback ({}) only with a token",
                setup.listen
            ),
        ));
    }
    let listener = TcpListener::bind(setup.listen).await.map_err(|e| {
        io::Error::new(
            e.kind(),
            format!("cannot listen for the web page on {}: {e}", setup.listen),
        )
    })?;
    let bound = listener.local_addr()?;
    let web = Arc::new(Web {
        link,
        token: setup.token,
        port: bound.port(),
        ip: (!bound.ip().is_unspecified()).then_some(bound.ip()),
        host_names: setup.host_names,
        shutdown: shutdown.clone(),
    });
    let app = router(web);
    let mut stop = shutdown;
    let task = tokio::spawn(async move {
        let served = axum::serve(listener, app)
            .with_graceful_shutdown(async move { stop.wait().await })
            .await;
        if let Err(e) = served {
            tracing::warn!(error = %e, "web page: server ended");
        }
    });
    Ok((bound, task))
}

fn router(web: Arc<Web>) -> Router {
    Router::new()
        .route("/", get(page))
        .route("/api/state", get(state))
        .route("/api/events", get(events))
        .route("/api/do", post(command))
        .fallback(not_found)
        .layer(middleware::from_fn_with_state(Arc::clone(&web), guard))
        .layer(DefaultBodyLimit::max(MAX_REQUEST_BYTES))
        .with_state(web)
}

/// A refusal: the status and the protocol's error answer, saying what was
/// expected and what was found.
fn refuse(status: StatusCode, reason: String) -> Response {
    (status, Json(Answer::error(reason))).into_response()
}

/// The checks every request passes before its handler (see the module
/// doc): `Host`, the token, and for commands the same-origin rule.
async fn guard(State(web): State<Arc<Web>>, req: HttpRequest, next: Next) -> Response {
    let headers = req.headers();
    let host = headers
        .get(header::HOST)
        .and_then(|h| h.to_str().ok())
        .unwrap_or("");
    if !web.is_own_host(host) {
        return refuse(
            StatusCode::MISDIRECTED_REQUEST,
            format!(
                "expected a Host naming this server (port {}), found `{}`",
                web.port,
                shown(host)
            ),
        );
    }
    let is_page = req.method() == Method::GET && req.uri().path() == "/";
    if let Some(token) = &web.token {
        if !is_page && !carries_token(headers, req.uri().query(), token) {
            return refuse(
                StatusCode::UNAUTHORIZED,
                "expected the station's token (Authorization: Bearer …), found none or another; it is in the token file beside the journal".into(),
            );
        }
    }
    if req.method() == Method::POST {
        let json = headers
            .get(header::CONTENT_TYPE)
            .and_then(|h| h.to_str().ok())
            .map(|t| t.split(';').next().unwrap_or("").trim())
            .unwrap_or("");
        if !json.eq_ignore_ascii_case("application/json") {
            return refuse(
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                format!(
                    "expected a command as Content-Type application/json, found `{}`",
                    shown(json)
                ),
            );
        }
        if web.token.is_none() {
            if let Err(why) = same_origin(headers, host) {
                return refuse(StatusCode::FORBIDDEN, why.to_string());
            }
        }
    }
    let mut response = next.run(req).await;
    let h = response.headers_mut();
    h.insert(header::X_FRAME_OPTIONS, HeaderValue::from_static("DENY"));
    h.insert(
        header::REFERRER_POLICY,
        HeaderValue::from_static("no-referrer"),
    );
    h.insert(
        header::X_CONTENT_TYPE_OPTIONS,
        HeaderValue::from_static("nosniff"),
    );
    h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    response
}

/// At most 60 characters of something a client sent, for a message.
fn shown(text: &str) -> String {
    text.chars().take(60).collect()
}

impl Web {
    /// `host` (a `Host` header) names this server: its address with its
    /// port, `localhost` on loopback, one of the configured names; when
    /// listening on every address, any IP literal with the port.
    fn is_own_host(&self, host: &str) -> bool {
        let Some((name, port)) = split_host(host) else {
            return false;
        };
        if port != Some(self.port) {
            return false;
        }
        let ip = name
            .trim_start_matches('[')
            .trim_end_matches(']')
            .parse::<std::net::IpAddr>()
            .ok();
        match (self.ip, ip) {
            (Some(own), Some(ip)) if own == ip => return true,
            (None, Some(_)) => return true,
            _ => {}
        }
        let loopback = self.ip.is_none_or(|ip| ip.is_loopback());
        (loopback && name.eq_ignore_ascii_case("localhost"))
            || self.host_names.iter().any(|n| n.eq_ignore_ascii_case(name))
    }
}

/// `name:port` (or `[v6]:port`) into its parts; the port is `None` when
/// absent or not a number.
fn split_host(host: &str) -> Option<(&str, Option<u16>)> {
    if host.is_empty() {
        return None;
    }
    let (name, port) = if let Some(rest) = host.strip_prefix('[') {
        let end = rest.find(']')?;
        let after = &rest[end + 1..];
        (&host[..end + 2], after.strip_prefix(':'))
    } else {
        match host.rsplit_once(':') {
            Some((n, p)) => (n, Some(p)),
            None => (host, None),
        }
    };
    Some((name, port.and_then(|p| p.parse().ok())))
}

/// The request carries `token`: `Authorization: Bearer TOKEN`, or
/// `token=TOKEN` in the query (the event stream).
fn carries_token(headers: &HeaderMap, query: Option<&str>, token: &str) -> bool {
    let bearer = headers
        .get(header::AUTHORIZATION)
        .and_then(|h| h.to_str().ok())
        .and_then(|h| h.strip_prefix("Bearer "))
        .map(str::trim);
    let queried = query.and_then(|q| q.split('&').find_map(|kv| kv.strip_prefix("token=")));
    [bearer, queried]
        .into_iter()
        .flatten()
        .any(|given| same_bytes(given.as_bytes(), token.as_bytes()))
}

/// Compares without stopping at the first difference (a token's bytes are
/// not to be guessed one at a time from response times).
fn same_bytes(a: &[u8], b: &[u8]) -> bool {
    if a.len() != b.len() {
        return false;
    }
    a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

/// A command without a token must come from this server's own page:
/// `Sec-Fetch-Site: same-origin` (what browsers send), or, from a
/// browser without it, an `Origin` of `http://HOST`. A cross-site form
/// post carries `cross-site` and a foreign `Origin`; a request with
/// neither header is refused too.
fn same_origin(headers: &HeaderMap, host: &str) -> Result<(), crate::error::Located> {
    let at = "the command's origin";
    let text = |name| {
        headers
            .get(name)
            .and_then(|h: &HeaderValue| h.to_str().ok())
    };
    if let Some(site) = text(header::HeaderName::from_static("sec-fetch-site")) {
        return if site == "same-origin" {
            Ok(())
        } else {
            Err(crate::error::Located::named(
                at,
                "a command from this server's own page (Sec-Fetch-Site: same-origin)",
                format!("Sec-Fetch-Site: {}", shown(site)),
            ))
        };
    }
    match text(header::ORIGIN) {
        Some(origin) if origin == format!("http://{host}") => Ok(()),
        Some(origin) => Err(crate::error::Located::named(
            at,
            format!("a command from this server's own page (Origin http://{})", shown(host)),
            format!("Origin {}", shown(origin)),
        )),
        None => Err(crate::error::Located::named(
            at,
            "a command from this server's own page (an Origin or Sec-Fetch-Site header; scripts use `tuneward ctl` or the control socket)",
            "neither",
        )),
    }
}

async fn page() -> Response {
    (
        [
            (header::CONTENT_TYPE, "text/html; charset=utf-8"),
            (
                header::CONTENT_SECURITY_POLICY,
                "default-src 'none'; script-src 'unsafe-inline'; style-src 'unsafe-inline'; connect-src 'self'; img-src 'self' data:; form-action 'none'; frame-ancestors 'none'; base-uri 'none'",
            ),
        ],
        PAGE,
    )
        .into_response()
}

async fn not_found() -> Response {
    refuse(
        StatusCode::NOT_FOUND,
        "expected /, /api/state, /api/events or POST /api/do".into(),
    )
}

/// The state, as `status` answers it (from the state the driver last
/// published; no core round trip).
async fn state(State(web): State<Arc<Web>>) -> Response {
    let current = web.link.state.borrow().clone();
    match current {
        Some(s) => Json(Answer::watching(s)).into_response(),
        None => refuse(
            StatusCode::SERVICE_UNAVAILABLE,
            "the service has no state yet".into(),
        ),
    }
}

/// Server-sent events: an `state` event now and at every change, the same
/// state the socket's `watch` streams; the stream ends with the service.
async fn events(State(web): State<Arc<Web>>) -> Response {
    let rx = web.link.state.clone();
    let stop = web.shutdown.clone();
    let stream =
        futures_util::stream::unfold((rx, stop, true), |(mut rx, mut stop, first)| async move {
            if !first {
                tokio::select! {
                    _ = stop.wait() => return None,
                    changed = rx.changed() => if changed.is_err() { return None },
                }
            }
            let current = rx.borrow_and_update().clone();
            let data = match current {
                Some(s) => serde_json::to_string(&s).unwrap_or_default(),
                None => "{}".to_string(),
            };
            let event: Result<Event, Infallible> = Ok(Event::default().event("state").data(data));
            Some((event, (rx, stop, false)))
        });
    Sse::new(stream)
        .keep_alive(KeepAlive::new().interval(Duration::from_secs(15)))
        .into_response()
}

/// A command: the control protocol's request as the body, its answer
/// back (200 when `ok`, 409 when refused, 400 when not understood).
async fn command(State(web): State<Arc<Web>>, body: Bytes) -> Response {
    let request = match std::str::from_utf8(&body) {
        Ok(text) => parse_request(text),
        Err(_) => Err(super::protocol::bad_request(
            "a request as UTF-8 JSON",
            "other bytes",
        )),
    };
    let request = match request {
        Ok(Request::Watch) => {
            return refuse(
                StatusCode::BAD_REQUEST,
                "expected a command; `watch` is GET /api/events here".into(),
            )
        }
        Ok(r) => r,
        Err(e) => return refuse(StatusCode::BAD_REQUEST, e.to_string()),
    };
    let Some(ask) = request.ask() else {
        return refuse(StatusCode::BAD_REQUEST, "nothing to do".into());
    };
    let answer = web.link.ask(ask).await;
    let status = match (answer.ok, answer.outcome.as_str()) {
        (true, _) => StatusCode::OK,
        (false, "refused") => StatusCode::CONFLICT,
        (false, _) => StatusCode::SERVICE_UNAVAILABLE,
    };
    (status, Json(answer)).into_response()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn web(ip: Option<&str>, names: &[&str]) -> Web {
        let (link, _port) = super::super::operator_channel();
        Web {
            link,
            token: None,
            port: 8080,
            ip: ip.map(|i| i.parse().unwrap()),
            host_names: names.iter().map(|s| s.to_string()).collect(),
            shutdown: crate::shutdown::channel().1,
        }
    }

    #[test]
    fn only_the_servers_own_host_is_taken() {
        let w = web(Some("127.0.0.1"), &[]);
        for ok in ["127.0.0.1:8080", "localhost:8080", "LOCALHOST:8080"] {
            assert!(w.is_own_host(ok), "{ok}");
        }
        for bad in [
            "",
            "evil.example:8080",
            "127.0.0.1:8081",
            "127.0.0.1",
            "localhost",
            "127.0.0.2:8080",
            "[::1]:8080",
            "[::1",
            ":8080",
            "127.0.0.1:99999",
        ] {
            assert!(!w.is_own_host(bad), "{bad}");
        }
        let w = web(Some("::1"), &[]);
        assert!(w.is_own_host("[::1]:8080"));
        let w = web(Some("192.168.1.20"), &["shack"]);
        assert!(w.is_own_host("192.168.1.20:8080"));
        assert!(w.is_own_host("shack:8080"));
        assert!(!w.is_own_host("localhost:8080"));
        let w = web(None, &[]);
        assert!(w.is_own_host("10.0.0.5:8080"));
        assert!(!w.is_own_host("attacker.example:8080"));
    }

    #[test]
    fn the_token_is_taken_from_the_header_or_the_query() {
        let mut h = HeaderMap::new();
        assert!(!carries_token(&h, None, "abc"));
        assert!(carries_token(&h, Some("x=1&token=abc"), "abc"));
        assert!(!carries_token(&h, Some("token=abd"), "abc"));
        assert!(!carries_token(&h, Some("token=ab"), "abc"));
        h.insert(header::AUTHORIZATION, "Bearer abc".parse().unwrap());
        assert!(carries_token(&h, None, "abc"));
        assert!(!carries_token(&h, None, "abcd"));
    }

    #[test]
    fn a_cross_site_command_is_refused() {
        let mut h = HeaderMap::new();
        assert!(same_origin(&h, "127.0.0.1:8080").is_err());
        h.insert(header::ORIGIN, "http://127.0.0.1:8080".parse().unwrap());
        assert!(same_origin(&h, "127.0.0.1:8080").is_ok());
        h.insert(header::ORIGIN, "http://evil.example".parse().unwrap());
        assert!(same_origin(&h, "127.0.0.1:8080").is_err());
        h.insert("sec-fetch-site", "cross-site".parse().unwrap());
        let e = same_origin(&h, "127.0.0.1:8080").unwrap_err().to_string();
        assert!(e.contains("expected") && e.contains("found"), "{e}");
        h.insert("sec-fetch-site", "same-origin".parse().unwrap());
        assert!(same_origin(&h, "127.0.0.1:8080").is_ok());
    }
}
