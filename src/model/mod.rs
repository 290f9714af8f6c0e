//! Models: polynomials, continuous and discrete transfer functions, state
//! space, discretization of a continuous controller, and the rounding of
//! a controller's coefficients to a number format. Pure numerics: no
//! case files, no loop, no IO.

pub mod discretize;
pub mod matrix;
pub mod poly;
pub mod rounding;
pub mod scalar_solve;
pub mod state_space;
pub mod transfer;
