//! Pseudo-terminals reachable at a symlink: the far end of the proxy mode
//! (the station's other software opens the link instead of the rig's port)
//! and of the controller simulator.

use std::io;
use std::path::{Path, PathBuf};

/// Puts a symlink at `link` pointing to `target`, replacing an existing
/// symlink there but never a regular file or folder.
pub fn place_symlink(link: &Path, target: &Path) -> io::Result<()> {
    match std::fs::symlink_metadata(link) {
        Ok(m) if m.file_type().is_symlink() => std::fs::remove_file(link)?,
        Ok(_) => {
            return Err(io::Error::new(
                io::ErrorKind::AlreadyExists,
                format!(
                    "{}: expected nothing or a symlink there, found an existing file; refusing to replace it",
                    link.display()
                ),
            ))
        }
        Err(e) if e.kind() == io::ErrorKind::NotFound => {}
        Err(e) => return Err(e),
    }
    std::os::unix::fs::symlink(target, link)
}

/// A pseudo-terminal whose far end is reachable at a symlink; the symlink
/// is removed on drop. The far end stays open, so a program may open and
/// close the link as often as it likes without our end seeing a hang-up.
pub struct PtyLink {
    /// Held open so the terminal survives the other program closing it.
    _slave: tokio_serial::SerialStream,
    link: PathBuf,
    slave_path: PathBuf,
}

impl PtyLink {
    /// Creates a pseudo-terminal, points `link` at its far end, and returns
    /// the guard and our (master) end.
    pub fn create(link: &Path) -> io::Result<(PtyLink, tokio_serial::SerialStream)> {
        use tokio_serial::SerialPort;
        let (master, slave) = tokio_serial::SerialStream::pair().map_err(io::Error::from)?;
        let slave_path = slave.name().map(PathBuf::from).ok_or_else(|| {
            io::Error::other("pseudo-terminal has no name; cannot place the symlink")
        })?;
        place_symlink(link, &slave_path)?;
        let guard = PtyLink {
            _slave: slave,
            link: link.to_path_buf(),
            slave_path,
        };
        Ok((guard, master))
    }

    /// The device the symlink points to.
    pub fn slave_path(&self) -> &Path {
        &self.slave_path
    }

    /// Where the symlink is.
    pub fn link(&self) -> &Path {
        &self.link
    }

    /// The port speed last set on the far end (by whoever opened the link):
    /// a pseudo-terminal keeps the opener's termios, speed included.
    pub fn far_end_baud(&self) -> io::Result<u32> {
        use tokio_serial::SerialPort;
        self._slave.baud_rate().map_err(io::Error::from)
    }
}

impl Drop for PtyLink {
    fn drop(&mut self) {
        // Only our own symlink: someone may have re-pointed it since.
        if std::fs::read_link(&self.link).ok().as_deref() == Some(self.slave_path.as_path()) {
            let _ = std::fs::remove_file(&self.link);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn existing_regular_file_is_not_replaced_by_a_symlink() {
        let dir = tempfile::tempdir().unwrap();
        let f = dir.path().join("port");
        std::fs::write(&f, b"keep").unwrap();
        let e = place_symlink(&f, Path::new("/dev/null")).unwrap_err();
        assert!(e.to_string().contains("refusing"), "{e}");
        assert_eq!(std::fs::read(&f).unwrap(), b"keep");
        let l = dir.path().join("link");
        place_symlink(&l, Path::new("/dev/null")).unwrap();
        place_symlink(&l, Path::new("/dev/zero")).unwrap();
        assert_eq!(std::fs::read_link(&l).unwrap(), Path::new("/dev/zero"));
    }
}
