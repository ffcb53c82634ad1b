//! Port IO: the rig's serial control port and the pseudo-terminals that
//! share it. Everything here is tokio tasks and file descriptors; what the
//! bytes mean is decided in [`crate::rig`], which knows nothing of ports.

pub mod link;
pub mod probe;
pub mod proxy;
pub mod pty;
