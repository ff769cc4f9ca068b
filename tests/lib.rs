//! test support
