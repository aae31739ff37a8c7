//! Waypath's delivery: the Jupyter kernel, the headless runner of notebooks
//! and plain-text analyses, its HTML report, and conversion between the
//! two forms of an analysis.
//!
//! Everything statistical lives in the `waypath` library; this crate only
//! moves cells in and rich outputs out.

pub mod cell_thread;
pub mod install;
pub mod kernel;
pub mod notebook;
pub mod protocol;
pub mod report;
pub mod rust_cells;
pub mod text_form;
