//! The library's top-level error: everything a command can fail with.

use crate::case::CaseError;
use crate::plot::PlotError;
use crate::state_space::ModelError;

#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// The case file is unreadable or invalid (names the file and field).
    #[error(transparent)]
    Case(#[from] CaseError),
    /// A model could not be realised or analysed.
    // The reason is in the message, not a `source`: a chain printer would
    // print it twice otherwise.
    #[error("{context}: {reason}")]
    Model { context: String, reason: ModelError },
    /// A command-line value is out of range.
    #[error("{0}")]
    Input(String),
    /// An output file could not be written (nothing half-written is left
    /// under the final name).
    #[error("cannot write {path}: {message}")]
    Output { path: String, message: String },
    /// A chart could not be drawn or written.
    #[error(transparent)]
    Chart(#[from] PlotError),
}
