//! Capture files: a text log of the bytes on a rig's control port, with time.
//! The format is specified in `protocols/capture.md`.
