//! looprate: choose the slowest loop rate for a digital controller that
//! still meets the spec, from an exact model of the sampled-data loop.
//!
//! The folders follow the data's path, and each floor imports only the
//! floors below it (`DEVELOPERS.md` has the map):
//!
//! | floor | module | owns |
//! |---|---|---|
//! | 0 | [`spec`], [`engineering`] | plain shared types and identities, numbers as an engineer writes them |
//! | 1 | [`model`] | polynomials, transfer functions, state space, discretization, coefficient rounding |
//! | 2 | [`case`] | case files: schema, validation, expressions, parameter evaluation |
//! | 2 | [`error`] | the library's error: case, model, input, output and chart errors |
//! | 3 | [`sampled`] | the sampled loop and its figures: hold, closed loop, time and frequency figures, the figure catalogue, feasibility |
//! | 4 | [`explore`] | rates and variants: sweep, search, CPU budget, precision ceilings, pick |
//! | 5 | [`output`] | files, tables, text, report, charts |

pub mod engineering;
pub mod error;
pub mod spec;

pub mod model;

pub mod case;

pub mod sampled;

pub mod explore;

pub mod output;
