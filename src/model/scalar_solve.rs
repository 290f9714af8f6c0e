//! One-dimensional root and minimum finding on closures, through argmin's
//! Brent solvers (with the traps from the dependency notes handled: NaN
//! ends, missing sign change, unlimited iterations).

use argmin::core::{CostFunction, Error, Executor, State};
use argmin::solver::brent::{BrentOpt, BrentRoot};

struct Closure<'a>(&'a dyn Fn(f64) -> f64);

impl CostFunction for Closure<'_> {
    type Param = f64;
    type Output = f64;
    fn cost(&self, x: &f64) -> Result<f64, Error> {
        Ok((self.0)(*x))
    }
}

/// A root of `f` in `[lo, hi]` to absolute tolerance `tol` in x, when `f`
/// is finite at both ends and changes sign; `None` otherwise.
pub fn root(f: &dyn Fn(f64) -> f64, lo: f64, hi: f64, tol: f64) -> Option<f64> {
    let (flo, fhi) = (f(lo), f(hi));
    if !flo.is_finite() || !fhi.is_finite() {
        return None;
    }
    if flo == 0.0 {
        return Some(lo);
    }
    if fhi == 0.0 {
        return Some(hi);
    }
    if flo.signum() == fhi.signum() {
        return None;
    }
    let res = Executor::new(Closure(f), BrentRoot::new(lo, hi, tol))
        .configure(|s| s.max_iters(200))
        .run()
        .ok()?;
    res.state()
        .get_best_param()
        .copied()
        .filter(|x| x.is_finite())
}

/// A local minimum of `f` in `[lo, hi]`, to about `rel` relative plus
/// `abs` absolute in x; returns `(x, f(x))`.
pub fn minimum(f: &dyn Fn(f64) -> f64, lo: f64, hi: f64, rel: f64, abs: f64) -> Option<(f64, f64)> {
    let res = Executor::new(Closure(f), BrentOpt::new(lo, hi).set_tolerance(rel, abs))
        .configure(|s| s.max_iters(200))
        .run()
        .ok()?;
    let x = res.state().get_best_param().copied()?;
    let fx = res.state().get_best_cost();
    (x.is_finite() && fx.is_finite()).then_some((x, fx))
}
