//! The cell language: what a scientist types into a notebook cell.
//!
//! A cell is a list of statements. A statement is one header line, followed
//! by an indented body when its header ends with `:`. `#` starts a comment.
//! [`parse::split_statements`] cuts a cell into statements (keeping cell line
//! numbers for error messages); [`Session::run_cell`] executes them in order
//! against the named objects of a session (tables, graphs, models, fits) and
//! returns one [`Display`] per result, each carrying `text/plain`,
//! `text/html`, a JSON structure (`application/vnd.waypath.result+json`) and, where the result has a shape,
//! `image/svg+xml`.
//!
//! This is the top of the library: nothing here knows about Jupyter or
//! notebooks; the kernel and the headless runner only move bytes in and out.

pub mod figures;
pub mod files;
pub mod fit_summary;
pub mod format;
pub mod output;
pub mod parse;
mod session;
pub mod statements;

pub use output::{CellError, CellOutcome, Display, RESULT_MIME};
pub use parse::{split_statements, SourceLine, Statement};
pub use session::{RunControl, Session};
