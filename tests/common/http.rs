//! A small HTTP/1.1 client of the tests' own, over a plain `TcpStream`, so
//! that a test can send exactly the headers (a foreign `Host`, a
//! cross-site `Origin`) or the broken bytes a browser never would.

use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpStream;
use std::time::Duration;

/// An answer: the status code, the headers (lower-cased names) and the body.
#[derive(Debug, Clone)]
pub struct Answer {
    pub status: u16,
    pub headers: Vec<(String, String)>,
    pub body: String,
}

impl Answer {
    pub fn header(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, v)| v.as_str())
    }

    pub fn json(&self) -> serde_json::Value {
        serde_json::from_str(&self.body)
            .unwrap_or_else(|e| panic!("not JSON ({e}): {} {}", self.status, self.body))
    }
}

/// Sends `raw` as it is and reads the whole answer (the request should
/// say `Connection: close`). `None` if the server closed without an
/// answer.
pub fn exchange(addr: &str, raw: &[u8]) -> Option<Answer> {
    let mut s = TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(10))).unwrap();
    // The server may close early on bad input: a failed write is an answer too.
    let _ = s.write_all(raw);
    let mut got = Vec::new();
    let _ = s.read_to_end(&mut got);
    parse(&got)
}

fn parse(got: &[u8]) -> Option<Answer> {
    let text = String::from_utf8_lossy(got);
    let (head, body) = text.split_once("\r\n\r\n")?;
    let mut lines = head.lines();
    let status = lines.next()?.split_whitespace().nth(1)?.parse().ok()?;
    let headers = lines
        .filter_map(|l| l.split_once(':'))
        .map(|(n, v)| (n.trim().to_ascii_lowercase(), v.trim().to_string()))
        .collect();
    Some(Answer {
        status,
        headers,
        body: body.to_string(),
    })
}

/// A request with `Host: host` and `extra` header lines (each `Name:
/// value`), with a body when given.
pub fn request(
    addr: &str,
    method: &str,
    path: &str,
    host: &str,
    extra: &[&str],
    body: Option<&str>,
) -> Answer {
    let mut raw = format!("{method} {path} HTTP/1.1\r\nHost: {host}\r\nConnection: close\r\n");
    for h in extra {
        raw.push_str(h);
        raw.push_str("\r\n");
    }
    if let Some(b) = body {
        raw.push_str(&format!("Content-Length: {}\r\n", b.len()));
    }
    raw.push_str("\r\n");
    if let Some(b) = body {
        raw.push_str(b);
    }
    exchange(addr, raw.as_bytes()).unwrap_or_else(|| panic!("no answer to {method} {path}"))
}

/// `GET path` naming the server's own address as `Host`.
pub fn get(addr: &str, path: &str, extra: &[&str]) -> Answer {
    request(addr, "GET", path, addr, extra, None)
}

/// A command as this server's own page sends it: JSON, same-origin.
pub fn command(addr: &str, body: &str) -> Answer {
    let origin = format!("Origin: http://{addr}");
    request(
        addr,
        "POST",
        "/api/do",
        addr,
        &[
            "Content-Type: application/json",
            "Sec-Fetch-Site: same-origin",
            &origin,
        ],
        Some(body),
    )
}

/// The first `n` events of `GET /api/events` (their `data:` lines).
pub fn first_events(addr: &str, extra: &[&str], n: usize) -> Vec<String> {
    let mut s = TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(10))).unwrap();
    let mut raw = format!("GET /api/events HTTP/1.1\r\nHost: {addr}\r\nConnection: close\r\n");
    for h in extra {
        raw.push_str(h);
        raw.push_str("\r\n");
    }
    raw.push_str("\r\n");
    s.write_all(raw.as_bytes()).unwrap();
    let mut r = BufReader::new(s);
    let mut events = Vec::new();
    let mut line = String::new();
    while events.len() < n {
        line.clear();
        if r.read_line(&mut line).unwrap_or(0) == 0 {
            break;
        }
        // Chunked transfer: the chunk sizes are lines of their own.
        if let Some(data) = line.trim_end().strip_prefix("data:") {
            events.push(data.trim().to_string());
        }
    }
    events
}
