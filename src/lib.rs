//! tuneward keeps a remotely tuned narrow-band antenna tuned to wherever the
//! operator puts the transceiver's VFO.
//!
//! The pipeline: bytes from the rig's control port go through a [`rig`]
//! decoder into [`rig::RigEvent`]s; the [`follow`] core, a pure state machine,
//! turns events into actions (move, inhibit, hold); a driver carries the
//! actions out: [`replay`] in virtual time against a simulated tuner, the live
//! service against real ports.

pub mod antenna;
pub mod calibrate;
pub mod capture;
pub mod config;
pub mod control;
pub mod devices;
pub mod error;
pub mod follow;
pub mod inhibit;
pub mod journal;
pub mod lock;
pub mod port;
pub mod quality;
pub mod recorder;
pub mod replay;
pub mod rig;
pub mod scenario;
pub mod sense;
pub mod service;
pub mod shutdown;
pub mod signals;
pub mod sim;
pub mod station;
pub mod timeline;
pub mod timing;
pub mod tuner;

pub use station::error::Error;
