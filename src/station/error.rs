//! The one error type the commands return: a located value (where, what
//! was expected, what was found), or the located error of the layer that
//! failed. `main` prints every command's error the same way. It lives in the
//! station layer because it carries the config's and the station's errors;
//! the shape it shares with every layer is [`crate::error::Located`].

use crate::config::ConfigError;
use crate::control::client::ClientError;
use crate::error::{Located, Place};
use crate::rig::DialectError;
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
    /// The running service's control socket did not answer as it should.
    #[error(transparent)]
    Control(#[from] ClientError),
    /// A dialect named on the command line (`option`) that is not one.
    #[error("{option}: {source}")]
    Dialect {
        option: &'static str,
        #[source]
        source: DialectError,
    },
}

impl Error {
    pub fn invalid(at: Place, expected: impl Into<String>, found: impl Into<String>) -> Error {
        Error::Invalid(Located::new(at, expected, found))
    }

    /// The same error, a bare key placed in `file` (named first, as every
    /// message about a config names its file first). The config's and the
    /// station's errors already name their file and are left as they are.
    pub fn within(self, file: &str) -> Error {
        match self {
            Error::Invalid(located) => Error::Invalid(located.within(file)),
            other => other,
        }
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
        // A place already put in words keeps its words.
        let e = Error::from(Located::named(
            "/dev/ttyUSB0",
            "a serial port that opens",
            "no such file",
        ))
        .within("s.toml");
        assert_eq!(
            e.to_string(),
            "/dev/ttyUSB0: expected a serial port that opens, found no such file"
        );
    }
}
