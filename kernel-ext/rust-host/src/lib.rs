//! What a `%%rust` cell sees as `waypath`: the whole library (re-exported)
//! and the bridge functions (`wp_table`, `wp_draws`, `wp_publish`) that trade
//! tables with the declarative session.
//!
//! The Rust-cell runner links this crate once per build as a Rust dynamic
//! library and hands it to every cell with `--extern waypath=…`, so a cell
//! compiles only its own code: no dependency of the library is compiled for
//! the Rust context, and nothing is resolved or downloaded when a cell runs.

pub use waypath::*;

#[path = "../../src/rust_cells/bridge_prelude.rs"]
mod bridge;

pub use bridge::*;
