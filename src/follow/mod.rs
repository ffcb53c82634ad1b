//! The follow core.
