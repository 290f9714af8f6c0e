//! The library's top-level error: everything a command can fail with.

use crate::case::CaseError;
use crate::model::matrix::ModelError;
use std::path::PathBuf;

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

/// Why a chart could not be drawn or written.
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    /// Width or height outside the drawable sides, or too many pixels
    /// (the limits are the chart layer's, carried here for the message).
    #[error(
        "figure size {width}x{height} is not usable (each side {min_side}..={max_side} px, at most {max_pixels} pixels)"
    )]
    InvalidSize {
        width: u32,
        height: u32,
        min_side: u32,
        max_side: u32,
        max_pixels: u64,
    },
    /// A figure needs at least one panel.
    #[error("figure has no panels")]
    NoPanels,
    /// An explicit axis range that cannot be drawn (non-finite, or not
    /// positive on a log axis).
    #[error("{axis} axis range ({lo}, {hi}) is unusable: {reason}")]
    InvalidRange {
        axis: String,
        lo: f64,
        hi: f64,
        reason: &'static str,
    },
    /// The panels, titles and tick labels do not fit in the figure size.
    #[error("figure {width}x{height} is too small for {panels} panel(s) and their labels")]
    TooSmall {
        width: u32,
        height: u32,
        panels: usize,
    },
    /// The embedded font could not be parsed (a damaged build).
    #[error("embedded chart font could not be read: {0}")]
    Font(String),
    /// plotters reported a drawing error.
    #[error("chart drawing failed: {0}")]
    Draw(String),
    /// The PNG encoder reported an error.
    #[error("PNG encoding for {} failed: {message}", path.display())]
    Encode { path: PathBuf, message: String },
}
