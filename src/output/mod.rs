//! Outputs: files written whole or not at all, CSV tables, the terminal
//! summary, the report, and the charts.

pub mod cascade;
pub mod cascade_charts;
pub mod chart_rows;
pub mod charts;
pub mod plot;
pub mod report;
pub mod summary;
pub mod tables;
pub mod writer;
