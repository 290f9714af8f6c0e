//! looprate library.
