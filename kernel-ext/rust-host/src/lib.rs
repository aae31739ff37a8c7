//! What a `%%rust` cell sees as `waypath`: the whole library, re-exported.
//!
//! The Rust-cell runner links this crate once per build as a Rust dynamic
//! library and hands it to every cell with `--extern waypath=…`, so a cell
//! compiles only its own code: no dependency of the library is compiled for
//! the Rust context, and nothing is resolved or downloaded when a cell runs.
//! (The bridge functions, `wp_table` and friends, are compiled into the
//! context from source, so that evcxr's type inference can see them.)

pub use waypath::*;
