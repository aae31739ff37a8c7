//! Waypath's delivery: the headless notebook runner and its HTML report.
//!
//! Everything statistical lives in the `waypath` library; this crate only
//! moves cells in and rich outputs out.

pub mod notebook;
pub mod report;
