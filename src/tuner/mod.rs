//! The tuner side: controllers that move the capacitor.
pub mod client;
pub mod gpio;
pub mod line;
pub mod ramp;
pub mod server;
pub mod sim;
