//! Errors raised while reading a model specification or building it
//! against a table.
//!
//! Every message is one sentence that names the place (cell line, column,
//! row, term) and says what to do, so a scientist can fix the cell without
//! reading the code.

use thiserror::Error;

/// What went wrong with a model, and where.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ModelError {
    /// A body line that could not be read.
    #[error("{message}")]
    Syntax { message: String },

    /// An error attributed to a line of the `model` cell (1-based).
    #[error("model line {line}: {source}")]
    AtLine {
        line: usize,
        #[source]
        source: Box<ModelError>,
    },

    /// Something missing from the whole specification (no outcome line, …).
    #[error("{message}")]
    Incomplete { message: String },

    /// A column the specification names is not in the table.
    #[error("column `{name}` is not in table `{table}`{hint}")]
    UnknownColumn { name: String, table: String, hint: String },

    /// A column of the wrong kind for the place it is used in.
    #[error("column `{column}`: {message}")]
    Column { column: String, message: String },

    /// A data value that the family or term cannot take.
    #[error("table `{table}` row {row}, column `{column}`: {message}")]
    Value { table: String, row: usize, column: String, message: String },

    /// A term that cannot be built as written.
    #[error("term `{term}`: {message}")]
    Term { term: String, message: String },

    /// A prior that does not suit its parameter group.
    #[error("prior for {group}: {message}")]
    Prior { group: String, message: String },

    /// A prediction the model's family does not make (a mean of a category).
    #[error("{message}")]
    Family { message: String },

    /// A parameter vector of the wrong length or with invalid values.
    #[error("{message}")]
    Parameters { message: String },
}

impl ModelError {
    /// A syntax error with the given message.
    pub(crate) fn syntax(message: impl Into<String>) -> Self {
        ModelError::Syntax { message: message.into() }
    }

    /// Attach a 1-based cell line number.
    pub fn at_line(self, line: usize) -> Self {
        ModelError::AtLine { line, source: Box::new(self) }
    }
}
