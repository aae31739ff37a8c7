//! The one error type of the query layer: each message names the place
//! (model, node, simulate line, column) and what to do.

use thiserror::Error;

use crate::draws::DrawsError;
use crate::graph::GraphError;
use crate::model::ModelError;
use crate::table::TableError;

/// Why a query could not be answered.
#[derive(Debug, Error)]
pub enum QueryError {
    /// A model could not be built or could not predict.
    #[error(transparent)]
    Model(#[from] ModelError),

    /// The graph could not answer a question.
    #[error(transparent)]
    Graph(#[from] GraphError),

    /// A table could not be assembled.
    #[error(transparent)]
    Table(#[from] TableError),

    /// Draws could not be read or summarised.
    #[error(transparent)]
    Draws(#[from] DrawsError),

    /// A fit failed; `what` names the model or node.
    #[error("fitting {what} failed: {message}")]
    Fit { what: String, message: String },

    /// A request that does not fit the model, graph or table it is asked of.
    #[error("{message}")]
    Request { message: String },

    /// The cancel flag was set (an interrupt) while `what` ran.
    #[error("{what} was interrupted")]
    Interrupted { what: String },

    /// A line of a `simulate` body that cannot be used (1-based cell line).
    #[error("simulate line {line}: {message}")]
    Mechanism { line: usize, message: String },
}

impl QueryError {
    /// A request error with the given message.
    pub(crate) fn request(message: impl Into<String>) -> Self {
        QueryError::Request { message: message.into() }
    }

    /// [`QueryError::Interrupted`] when `cancel` is set.
    pub(crate) fn stop_if(cancel: &std::sync::atomic::AtomicBool, what: &str) -> Result<(), Self> {
        if cancel.load(std::sync::atomic::Ordering::Relaxed) {
            return Err(QueryError::Interrupted { what: what.to_string() });
        }
        Ok(())
    }
}
