//! Run diagnostics.
