//! Test equipment of our own.
//!
//! `rig.rs` is `SimRig`, a transceiver's control port as a pure state
//! machine (both rig families, a scripted operator, a truth log); `driver.rs`
//! runs it on a pseudo-terminal for `tuneward sim-rig`; `meters.rs` is the
//! simulated loop and the meters it gives (signal and SWR, pure);
//! `sweep_trial.rs` is a calibration made by the sweep alone on an
//! invented loop, judged by bench-follow on that loop. The controller
//! simulator (`tuneward sim-tuner`) lives in `src/tuner/`.

pub mod driver;
pub mod meters;
pub mod rig;
pub mod sweep_trial;
