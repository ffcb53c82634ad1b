//! One instance per station: an exclusive `flock` on a file beside the
//! journal, held for as long as `tuneward run` lives. The file carries the
//! holder's process id, so that a second start can name it. The kernel
//! drops the lock when the process ends, however it ends, so a crash never
//! leaves a stale lock behind (the pid left in the file is then ignored).

use std::fs::{File, OpenOptions};
use std::io::{Read, Seek, SeekFrom, Write};
use std::os::unix::fs::OpenOptionsExt;
use std::os::unix::io::AsRawFd;
use std::path::{Path, PathBuf};

/// Why the lock could not be taken.
#[derive(Debug, thiserror::Error)]
pub enum LockError {
    #[error("another tuneward run (pid {}) already drives this station (lock {path}); stop it first, or talk to it with `tuneward ctl`", pid.map_or("unknown".to_string(), |p| p.to_string()))]
    Held { path: PathBuf, pid: Option<u32> },
    #[error("cannot open the instance lock {path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
}

/// The held lock; dropping it releases the lock.
#[derive(Debug)]
pub struct InstanceLock {
    _file: File,
    path: PathBuf,
}

impl InstanceLock {
    pub fn path(&self) -> &Path {
        &self.path
    }
}

fn io_error(path: &Path) -> impl FnOnce(std::io::Error) -> LockError + '_ {
    move |source| LockError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// `flock` without waiting: `Ok(false)` when another holds it.
fn try_flock(file: &File, exclusive: bool) -> std::io::Result<bool> {
    let op = if exclusive {
        libc::LOCK_EX
    } else {
        libc::LOCK_SH
    } | libc::LOCK_NB;
    // SAFETY: flock on a file descriptor we own; no memory is passed.
    let r = unsafe { libc::flock(file.as_raw_fd(), op) };
    if r == 0 {
        return Ok(true);
    }
    let e = std::io::Error::last_os_error();
    if e.raw_os_error() == Some(libc::EWOULDBLOCK) {
        Ok(false)
    } else {
        Err(e)
    }
}

fn read_pid(file: &mut File) -> Option<u32> {
    let mut text = String::new();
    file.seek(SeekFrom::Start(0)).ok()?;
    file.take(32).read_to_string(&mut text).ok()?;
    text.trim().parse().ok()
}

/// Takes the station's lock at `path` (created 0600 if missing) and writes
/// this process's id into it.
pub fn acquire(path: &Path) -> Result<InstanceLock, LockError> {
    let mut file = OpenOptions::new()
        .read(true)
        .write(true)
        .create(true)
        .truncate(false)
        .mode(0o600)
        .open(path)
        .map_err(io_error(path))?;
    if !try_flock(&file, true).map_err(io_error(path))? {
        return Err(LockError::Held {
            path: path.to_path_buf(),
            pid: read_pid(&mut file),
        });
    }
    file.set_len(0).map_err(io_error(path))?;
    file.seek(SeekFrom::Start(0)).map_err(io_error(path))?;
    writeln!(file, "{}", std::process::id()).map_err(io_error(path))?;
    file.sync_all().map_err(io_error(path))?;
    Ok(InstanceLock {
        _file: file,
        path: path.to_path_buf(),
    })
}

/// Whether a running instance holds the lock at `path`, and its pid if
/// the file says. `Ok(None)`: nobody holds it (or there is no lock file).
pub fn holder(path: &Path) -> Result<Option<Option<u32>>, LockError> {
    let mut file = match File::open(path) {
        Ok(f) => f,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(io_error(path)(e)),
    };
    if try_flock(&file, false).map_err(io_error(path))? {
        // Ours for a moment: nobody runs. Dropping the file unlocks.
        return Ok(None);
    }
    Ok(Some(read_pid(&mut file)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_second_lock_is_refused_naming_the_holder_and_freed_on_drop() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("journal.lock");
        assert!(holder(&path).unwrap().is_none());
        let held = acquire(&path).unwrap();
        let me = std::process::id();
        // flock locks belong to the open file: a second open, even in this
        // process, is refused as a second instance would be.
        match acquire(&path) {
            Err(LockError::Held { pid, .. }) => assert_eq!(pid, Some(me)),
            other => panic!("{other:?}"),
        }
        assert_eq!(holder(&path).unwrap(), Some(Some(me)));
        drop(held);
        assert!(holder(&path).unwrap().is_none());
        let again = acquire(&path).unwrap();
        assert_eq!(again.path(), path);
    }
}
