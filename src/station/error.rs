//! The one error type the commands return: a located value (where, what
//! was expected, what was found), or the located error of the layer that
//! failed. `main` prints every command's error the same way. It lives in the
//! station layer because it carries the config's and the station's errors;
//! the shape it shares with every layer is [`crate::error::Located`].

use crate::config::ConfigError;
use crate::error::{Located, Place};
use crate::station::StationError;

/// Anything that stops a command, worded for the operator.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A value that is not what it should be.
    #[error(transparent)]
    Invalid(#[from] Located),
    #[error(transparent)]
    Config(#[from] ConfigError),
    #[error(transparent)]
    Station(#[from] StationError),
    /// A failure already worded by the layer it came from (a port that did
    /// not open, a task that ended), with its place in the message.
    #[error("{0}")]
    Failed(String),
}

impl Error {
    pub fn invalid(at: Place, expected: impl Into<String>, found: impl Into<String>) -> Error {
        Error::Invalid(Located::new(at, expected, found))
    }

    /// The same error, placed in `file` (named first, as every message about
    /// a config names its file first).
    pub fn within(self, file: &str) -> Error {
        match self {
            Error::Invalid(located) => Error::Invalid(located.within(file)),
            other => Error::Failed(format!("{file}: {other}")),
        }
    }
}

impl From<String> for Error {
    fn from(message: String) -> Error {
        Error::Failed(message)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn invalid_reads_where_expected_found_and_within_puts_the_file_first() {
        let e = Error::invalid(Place::bare_key("rig.baud"), "a positive baud rate", "0");
        assert_eq!(
            e.to_string(),
            "key `rig.baud`: expected a positive baud rate, found 0"
        );
        assert_eq!(
            e.within("s.toml").to_string(),
            "s.toml: key `rig.baud`: expected a positive baud rate, found 0"
        );
        let e = Error::from("port gone".to_string()).within("s.toml");
        assert_eq!(e.to_string(), "s.toml: port gone");
    }
}
