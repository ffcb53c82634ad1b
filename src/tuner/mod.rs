//! The tuner side: controllers that move the capacitor.
