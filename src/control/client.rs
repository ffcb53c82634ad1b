//! The client side of the control socket, for `tuneward ctl`: blocking, one
//! request and its answer, or the `watch` stream; and readable wording of
//! answers and states.

use std::io::{BufRead, BufReader, Write};
use std::os::unix::net::UnixStream;
use std::path::{Path, PathBuf};
use std::time::Duration;

use super::protocol::{Answer, Request, StateLine, StateView};

/// Why the client could not get an answer.
#[derive(Debug, thiserror::Error)]
pub enum ClientError {
    #[error("no tuneward service is running for this station (nothing answers at {path}); start one with `tuneward run -c CONFIG`")]
    NotRunning { path: PathBuf },
    #[error("control socket {path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("control socket {path}: expected an answer line (JSON), found `{found}`")]
    BadAnswer { path: PathBuf, found: String },
}

/// A connection to a running service.
pub struct Client {
    path: PathBuf,
    reader: BufReader<UnixStream>,
    writer: UnixStream,
}

/// How long an answer may take (a `status` is answered at once; a command
/// waits only for the core's decision, never for the move).
const ANSWER_WAIT: Duration = Duration::from_secs(10);

impl Client {
    pub fn connect(path: &Path) -> Result<Client, ClientError> {
        let io = |source| ClientError::Io {
            path: path.to_path_buf(),
            source,
        };
        let stream = UnixStream::connect(path).map_err(|e| match e.kind() {
            std::io::ErrorKind::NotFound | std::io::ErrorKind::ConnectionRefused => {
                ClientError::NotRunning {
                    path: path.to_path_buf(),
                }
            }
            _ => io(e),
        })?;
        stream.set_read_timeout(Some(ANSWER_WAIT)).map_err(io)?;
        let writer = stream.try_clone().map_err(io)?;
        Ok(Client {
            path: path.to_path_buf(),
            reader: BufReader::new(stream),
            writer,
        })
    }

    fn io(&self, source: std::io::Error) -> ClientError {
        ClientError::Io {
            path: self.path.clone(),
            source,
        }
    }

    fn send(&mut self, request: &Request) -> Result<(), ClientError> {
        let mut line =
            serde_json::to_vec(request).map_err(|e| self.io(std::io::Error::other(e)))?;
        line.push(b'\n');
        self.writer.write_all(&line).map_err(|e| self.io(e))
    }

    fn read_line<T: serde::de::DeserializeOwned>(&mut self) -> Result<Option<T>, ClientError> {
        let mut line = String::new();
        let n = self.reader.read_line(&mut line).map_err(|e| self.io(e))?;
        if n == 0 {
            return Ok(None);
        }
        serde_json::from_str(&line)
            .map(Some)
            .map_err(|_| ClientError::BadAnswer {
                path: self.path.clone(),
                found: line.trim().chars().take(120).collect(),
            })
    }

    /// One request, its answer.
    pub fn request(&mut self, request: &Request) -> Result<Answer, ClientError> {
        self.send(request)?;
        match self.read_line()? {
            Some(a) => Ok(a),
            None => Err(ClientError::BadAnswer {
                path: self.path.clone(),
                found: "the connection closed".into(),
            }),
        }
    }

    /// `watch`: the first answer, then `each` for every state line until the
    /// service closes the connection or `each` returns `false`.
    pub fn watch(
        &mut self,
        mut first: impl FnMut(&Answer),
        mut each: impl FnMut(&StateView) -> bool,
    ) -> Result<(), ClientError> {
        let answer = self.request(&Request::Watch)?;
        first(&answer);
        if !answer.ok {
            return Ok(());
        }
        self.reader
            .get_ref()
            .set_read_timeout(None)
            .map_err(|e| self.io(e))?;
        while let Some(line) = self.read_line::<StateLine>()? {
            if !each(&line.state) {
                break;
            }
        }
        Ok(())
    }
}

/// An answer in words, for people.
pub fn describe(answer: &Answer) -> String {
    let mut s = match answer.outcome.as_str() {
        "done" => "done".to_string(),
        "queued" => "queued".to_string(),
        "watching" => "watching".to_string(),
        "refused" => "refused".to_string(),
        other => other.to_string(),
    };
    if let Some(reason) = &answer.reason {
        s.push_str(": ");
        s.push_str(reason);
    }
    if let Some(state) = &answer.state {
        s = describe_state(state);
    }
    s
}

fn mhz(hz: u64) -> String {
    format!("{:.6} MHz", hz as f64 / 1e6)
}

/// A state in a few readable lines.
pub fn describe_state(s: &StateView) -> String {
    let mut lines = Vec::new();
    let rig = match (s.rig_hz, &s.band) {
        (Some(hz), Some(band)) => format!("{} ({band})", mhz(hz)),
        (Some(hz), None) => format!("{} (outside the followed bands)", mhz(hz)),
        (None, _) => "not heard yet".into(),
    };
    let mut rig_line = format!("rig        {rig}");
    if s.transmitting {
        rig_line.push_str(", transmitting");
    }
    if s.rig_silent {
        rig_line.push_str(", port silent");
    }
    lines.push(rig_line);
    lines.push(format!(
        "tuned for  {}",
        s.tuned_hz.map_or("nothing yet".to_string(), mhz)
    ));
    let pos = match (s.position, s.heading) {
        (Some(p), Some(h)) => format!("step {p}, moving to {h}"),
        (Some(p), None) => format!("step {p}"),
        (None, _) => "unknown".into(),
    };
    lines.push(format!(
        "capacitor  {pos} (travel {}..{})",
        s.min_steps, s.max_steps
    ));
    let mut flags = Vec::new();
    if s.paused {
        flags.push("paused");
    } else {
        flags.push("following");
    }
    if s.moving {
        flags.push("moving");
    }
    if s.inhibit {
        flags.push("transmit inhibited");
    }
    if s.fault {
        flags.push("controller fault");
    }
    if s.shutting_down {
        flags.push("shutting down");
    }
    lines.push(format!("state      {}", flags.join(", ")));
    lines.push(format!(
        "profile    {} (of {})",
        s.profile,
        if s.profiles.is_empty() {
            "none".to_string()
        } else {
            s.profiles.join(", ")
        }
    ));
    if !s.presets.is_empty() {
        let names: Vec<String> = s
            .presets
            .iter()
            .map(|p| match (p.hz, p.steps) {
                (Some(hz), _) => format!("{} ({})", p.name, mhz(hz)),
                (_, Some(st)) => format!("{} (step {st})", p.name),
                _ => p.name.clone(),
            })
            .collect();
        lines.push(format!("presets    {}", names.join(", ")));
    }
    if let Some(hz) = s.peak_hz {
        lines.push(format!("searching  the band noise at {}", mhz(hz)));
    }
    match (&s.sweep, &s.last_sweep) {
        (Some(w), _) => lines.push(format!(
            "sweep      {}: point {} of {} ({}), {} {}, {} found",
            w.band,
            w.point,
            w.of,
            mhz(w.hz),
            w.doing,
            if w.doing == "restoring" {
                "the rig's frequency"
            } else {
                "here"
            },
            w.found
        )),
        (None, Some(words)) => lines.push(format!("last sweep {words}")),
        (None, None) => {}
    }
    lines.join("\n")
}
