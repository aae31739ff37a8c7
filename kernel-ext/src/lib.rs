//! Waypath's delivery: the Jupyter kernel, the headless notebook runner and
//! its HTML report.
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
