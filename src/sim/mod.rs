//! Test equipment of our own.
//!
//! `rig.rs` is `SimRig`, a transceiver's control port as a pure state
//! machine (both rig families, a scripted operator, a truth log); `driver.rs`
//! runs it on a pseudo-terminal for `tuneward sim-rig`; `meters.rs` is the
//! simulated loop and the meters it gives (signal and SWR, pure). The controller
//! simulator (`tuneward sim-tuner`) lives in `src/tuner/`.

pub mod driver;
pub mod meters;
pub mod rig;
