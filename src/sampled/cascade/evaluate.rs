//! One cascade point: the inner loop at its rate, method and delay, the
//! outer loop at `inner rate / ratio` with its method and delay, and the
//! figures of both (`docs/figures.md`, "Cascaded loops").
//!
//! The inner figures are the single loop's, taken with the outer loop
//! open (the outer plant does not act back on the inner one). The outer
//! figures are those of the lifted system (`lift`): its step and load
//! responses on the outer plant output, points between inner samples
//! included; its loop gain broken at the outer controller's output; its
//! delay margin on the lifted loop's poles.

use serde::Serialize;

use crate::case::OuterModels;
use crate::model::discretize::Method;
use crate::model::matrix::ModelError;
use crate::model::poly::C64;
use crate::model::transfer::{Controller, DiscreteTransfer};
use crate::sampled::cascade::lift::{CombinedPlant, InnerClosed, LiftError, Rows, combined_plant};
use crate::sampled::closed_loop::{ClosedLoop, LoopError, Stability};
use crate::sampled::delay_margin::{
    CountError, DelayMargin, Fraction, first_loss, fraction_of, margin_of,
};
use crate::sampled::evaluate::{
    Evaluation, Given, Point, PointError, PreparedLoop, Status, finish, record_delay_margin,
};
use crate::sampled::feasibility::{Assessment, LimitCheck, UNSTABLE_SLACK};
use crate::sampled::figure::{Figure, Limiting, Missing};
use crate::sampled::frequency::{FrequencyRange, LoopFigures, loop_figures};
use crate::sampled::hold::{HoldEquivalent, MAX_DELAY_STATES};
use crate::sampled::time_response::{
    TimeOptions, TracePoint, Wanted, horizon_steps, sampled_figures, sampled_trace_spanning,
};
use crate::spec::{HoldKind, Spec};
use nalgebra::DVector;

/// A point of the cascade grid.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CascadePoint {
    /// The inner loop's rate, method, hold and computation delay.
    pub inner: Point,
    /// Outer rate = inner rate / ratio (a whole number >= 1).
    pub ratio: usize,
    /// Method for a continuous outer controller (None: given in z).
    pub outer_method: Option<Method>,
    /// Outer computation delay, a fraction of the outer period.
    pub outer_delay: f64,
    /// How the outer command is shaped as the inner loop's reference
    /// between outer updates (`[outer.timing] hold`).
    pub outer_hold: HoldKind,
}

impl CascadePoint {
    /// The outer loop's rate, Hz.
    pub fn outer_rate_hz(&self) -> f64 {
        self.inner.rate_hz / self.ratio as f64
    }
}

/// Both loops' figures at a cascade point.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CascadeEvaluation {
    /// The inner loop with the outer loop open.
    pub inner: Evaluation,
    /// The outer loop, lifted over one outer period.
    pub outer: Evaluation,
}

/// Everything about a cascade that does not depend on the rates.
#[derive(Debug, Clone)]
pub struct PreparedCascade {
    /// The inner loop as a single loop.
    pub inner: PreparedLoop,
    /// The outer loop around an ideal inner loop (inner output = its
    /// reference): the outer controller's discretization (and its
    /// pre-warp frequency) comes from it, and it is the limit the outer
    /// figures tend to as the inner loop gets fast.
    pub ideal: PreparedLoop,
    pub outer_models: OuterModels,
    pub combined: CombinedPlant,
    /// Time-response options of the outer loop (its settling band).
    pub outer_time: TimeOptions,
    /// Continuous poles and zeros of the outer plant, sensor and
    /// controller (rad/s), for the outer frequency grid.
    outer_roots: Vec<C64>,
}

/// The two controllers of a pair, each discretized once and shared by
/// everything evaluated at it (both loops' figures, the lifted loop, the
/// traces, the CPU cost), or why it could not be built.
#[derive(Debug, Clone)]
pub struct PairControllers {
    /// At the inner rate.
    pub inner: Result<DiscreteTransfer, PointError>,
    /// At the outer rate (inner rate / ratio).
    pub outer: Result<DiscreteTransfer, CascadeError>,
}

/// The outer loop at a point: its figures, or, when a limit on a loop
/// figure already fails, that verdict (the search
/// then skips the time responses).
#[derive(Debug, Clone)]
pub enum OuterOutcome {
    Figures(Box<Evaluation>),
    FailsLoopFigures(Assessment),
    /// A limit on a time figure fails already on a short stretch of the
    /// exact step response (`simulated_limits_fail`): neither the loop
    /// figures nor the full time responses were computed.
    FailsSimulation(Assessment),
}

/// Outer periods the search's short simulation runs at most
/// (`simulated_limits_fail`): long enough to pass the first peaks of a
/// loop that is worth evaluating, short enough to cost a small part of a
/// full evaluation. Past it nothing is concluded.
pub const SCREEN_PERIODS: usize = 512;

/// The search's short simulation also stops once its state has come within
/// this fraction of the end state (`|z_k - z_end| <= SCREEN_QUIET |z_end|`,
/// Euclidean, a measure of the whole state) and the settling limit, if any,
/// has passed: what is left of the response is small, and a limit it still
/// breaks is found by the full figures. Stopping concludes nothing, so it
/// changes no verdict, only whether a pair failing late carries the
/// screen's bound or its full figures (`docs/figures.md`, "Cascaded
/// loops").
pub const SCREEN_QUIET: f64 = 1e-3;

/// The lifted outer loop's plant at point `p`: the ratio, the outer
/// delay in inner ticks and the outer hold of `p` (`InnerClosed::lifted`).
fn lift(inner: &InnerClosed, p: &CascadePoint, rows: Rows) -> HoldEquivalent {
    let ticks = InnerClosed::delay_ticks(p.ratio, p.outer_delay);
    inner.lifted(p.ratio, ticks, p.outer_hold, rows)
}

/// Why a cascade could not be prepared, or its loops at a point could not
/// be built (the text is then the reason its grid row carries).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CascadeError {
    #[error("{0}")]
    Lift(#[from] LiftError),
    #[error("the outer loop around an ideal inner loop: {0}")]
    Ideal(ModelError),
    #[error("the ratio must be a whole number of 1 or more, got 0")]
    RatioZero,
    #[error(
        "the outer computation delay must be finite and >= 0 (a fraction of the outer period), got {0}"
    )]
    OuterDelay(f64),
    #[error(
        "the outer computation delay spans {}, more than the {max} the lifted loop is built with (each is one more state of it)",
        crate::engineering::periods_of(*periods, "outer period")
    )]
    OuterDelayTooLong { periods: f64, max: usize },
    #[error("outer controller: {0}")]
    OuterController(PointError),
    #[error(transparent)]
    InnerController(PointError),
    #[error("inner loop on the whole plant: {0}")]
    InnerOnWholePlant(ModelError),
    #[error("closing the outer loop: {0}")]
    ClosingOuter(ModelError),
    /// The outer loop's poles could not be solved.
    #[error(transparent)]
    Loop(#[from] LoopError),
}

/// The limits of `spec` on loop figures (phase margin, gain margin,
/// sensitivity peak), judged as `feasibility::check_figures` judges them;
/// Some(verdict) when one fails.
pub fn loop_limits_fail(f: &LoopFigures, spec: &Spec) -> Option<Assessment> {
    let values = [
        (Figure::PhaseMargin, f.phase_margin_deg, Missing::Infinite),
        (
            Figure::GainMargin,
            f.gain_margin_db.map(f64::abs),
            Missing::Infinite,
        ),
        (
            Figure::SensitivityPeak,
            Some(f.sensitivity_peak),
            Missing::Never,
        ),
    ];
    let checks = limit_checks(values, spec);
    if checks.iter().any(|c| c.value.is_some_and(f64::is_nan)) {
        return None;
    }
    failed_verdict(checks)
}

/// Each `(figure, value, meaning of a missing value)` with a limit in
/// `spec`, judged as `feasibility::check_figures` judges it.
fn limit_checks(
    values: impl IntoIterator<Item = (Figure, Option<f64>, Missing)>,
    spec: &Spec,
) -> Vec<LimitCheck> {
    values
        .into_iter()
        .filter_map(|(figure, value, missing)| {
            let limit = figure.limit(spec)?;
            let slack = figure.slack(limit, value, missing);
            Some(LimitCheck {
                figure,
                limit,
                value,
                slack,
                pass: slack >= 0.0,
            })
        })
        .collect()
}

/// The failing verdict of `checks`, limited by the one with the least
/// slack; None when every check passes.
fn failed_verdict(checks: Vec<LimitCheck>) -> Option<Assessment> {
    if checks.iter().all(|c| c.pass) {
        return None;
    }
    let worst = checks.iter().min_by(|a, b| a.slack.total_cmp(&b.slack))?;
    Some(Assessment {
        feasible: false,
        limiting: Some(Limiting::Figure(worst.figure)),
        slack: worst.slack.clamp(UNSTABLE_SLACK, 1e6),
        checks,
    })
}

/// The limits of `spec` on step-response figures that a short exact
/// simulation already proves failed: the outer loop's step response is
/// computed at every inner sample instant (rows `0, stride, 2 stride, ...`
/// of the lifted model, each an exact point of the output the full figures
/// read) for at most `SCREEN_PERIODS` outer periods, and a value seen there
/// bounds the figure from the side the limit reads:
///
/// - overshoot: the largest excursion past `y_final` seen is at most the
///   true one (`max_t y(t)` is at least any point's value);
/// - settling time: a point outside the band at time `t` means the
///   settling time is at least `t`;
/// - command peak: `|u_k|` seen is at most the largest.
///
/// Some(verdict) with those lower bounds when one already exceeds its
/// limit; None when nothing is proven (the full figures decide).
/// `docs/figures.md`, "Cascaded loops", says how the search uses it.
pub fn simulated_limits_fail(
    cl: &ClosedLoop,
    lifted: &HoldEquivalent,
    poles: &[C64],
    spec: &Spec,
    band: f64,
    stride: usize,
) -> Option<Assessment> {
    let os_limit = spec.max_overshoot_pct;
    let ts_limit = spec.max_settling_s;
    let u_limit = spec.max_u_peak;
    if os_limit.is_none() && ts_limit.is_none() && u_limit.is_none() {
        return None;
    }
    let n = cl.plant_states;
    let dim = cl.a.nrows();
    let stride = stride.max(1);
    // Output rows y_j = g_j . z + h_j r (as `output_map::OutputMap` forms them).
    let rows: Vec<(DVector<f64>, f64, f64)> = lifted
        .intersample
        .iter()
        .step_by(stride)
        .map(|row| {
            let mut g = &cl.ku * row.cu0;
            for i in 0..n {
                g[i] += row.ey[i];
            }
            g[n] += row.cu1;
            (g, row.cu0 * cl.dur, row.offset_s)
        })
        .collect();
    if rows.is_empty() {
        return None;
    }
    let zr = cl.fixed_point(1.0, 0.0)?;
    let y_final = rows[0].0.dot(&zr) + rows[0].1;
    if !y_final.is_finite() {
        return None;
    }
    let rho = poles.iter().map(|p| p.norm()).fold(0.0, f64::max);
    let periods = (horizon_steps(rho.min(0.999_999), dim).min(SCREEN_PERIODS as f64)) as usize;
    let scale = y_final.abs();
    let sign = y_final.signum();
    let t = lifted.period_s;
    let quiet = SCREEN_QUIET * zr.norm();
    let mut z = DVector::<f64>::zeros(dim);
    let mut next = DVector::<f64>::zeros(dim);
    let (mut os_seen, mut late_out, mut u_seen) = (0.0_f64, 0.0_f64, 0.0_f64);
    for k in 0..periods {
        let u = cl.ku.dot(&z) + cl.dur;
        u_seen = u_seen.max(u.abs());
        for (g, h, offset) in &rows {
            let y = g.dot(&z) + h;
            if scale > 0.0 {
                os_seen = os_seen.max(sign * (y - y_final) / scale * 100.0);
                if (y - y_final).abs() > band * scale {
                    late_out = late_out.max(k as f64 * t + offset);
                }
            }
        }
        let over = |v: f64, l: Option<f64>| l.is_some_and(|l| v > l);
        if over(os_seen, os_limit) || over(late_out, ts_limit) || over(u_seen, u_limit) {
            break;
        }
        next.gemv(1.0, &cl.a, &z, 0.0);
        next += &cl.br;
        std::mem::swap(&mut z, &mut next);
        if !z.iter().all(|v| v.is_finite()) {
            return None;
        }
        let settling_passed = ts_limit.is_none_or(|l| (k + 1) as f64 * t > l);
        if settling_passed && z.metric_distance(&zr) <= quiet {
            break;
        }
    }
    let values = [
        (Figure::Overshoot, os_seen, scale > 0.0),
        (Figure::SettlingTime, late_out, scale > 0.0),
        (Figure::CommandPeak, u_seen, true),
    ];
    failed_verdict(limit_checks(
        values
            .into_iter()
            .filter(|(_, _, known)| *known)
            .map(|(figure, seen, _)| (figure, Some(seen), Missing::Never)),
        spec,
    ))
}

impl PreparedCascade {
    /// Prepare from the inner loop and the outer models; `outer_prewarp_hz`
    /// None: the crossover of the outer loop around an ideal inner loop.
    pub fn new(
        inner: PreparedLoop,
        outer_models: OuterModels,
        outer_prewarp_hz: Option<f64>,
        outer_band: f64,
    ) -> Result<PreparedCascade, CascadeError> {
        let combined = combined_plant(
            &inner.plant,
            &inner.sensor,
            &outer_models.plant,
            &outer_models.sensor,
        )?;
        let outer_time = TimeOptions {
            band: outer_band,
            ..inner.time
        };
        let ideal = PreparedLoop::new(
            &outer_models.plant,
            &outer_models.sensor,
            &outer_models.controller,
            outer_prewarp_hz,
            outer_time,
        )
        .map_err(CascadeError::Ideal)?;
        let mut outer_roots: Vec<C64> = Vec::new();
        let mut blocks = vec![&outer_models.plant, &outer_models.sensor];
        if let Controller::Continuous(tf) = &outer_models.controller {
            blocks.push(tf);
        }
        for tf in blocks {
            outer_roots.extend(tf.poles().ok_or(CascadeError::Ideal(ModelError::Eigen))?);
            outer_roots.extend(tf.zeros().ok_or(CascadeError::Ideal(ModelError::Eigen))?);
        }
        if let Controller::Discrete(d) = &outer_models.controller {
            let back = |z: &C64| z.ln() / d.period_s;
            let p = d
                .transfer
                .poles()
                .ok_or(CascadeError::Ideal(ModelError::Eigen))?;
            let z = d
                .transfer
                .zeros()
                .ok_or(CascadeError::Ideal(ModelError::Eigen))?;
            outer_roots.extend(
                p.iter()
                    .chain(z.iter())
                    .filter(|z| z.norm() > 0.0)
                    .map(back),
            );
        }
        Ok(PreparedCascade {
            inner,
            ideal,
            outer_models,
            combined,
            outer_time,
            outer_roots,
        })
    }

    /// The outer controller at the point's outer rate.
    pub fn outer_controller(&self, p: &CascadePoint) -> Result<DiscreteTransfer, CascadeError> {
        self.ideal
            .controller_at(p.outer_rate_hz(), p.outer_method)
            .map_err(CascadeError::OuterController)
    }

    /// Both controllers of a pair, each discretized once here.
    pub fn controllers(&self, p: &CascadePoint) -> PairControllers {
        PairControllers {
            inner: self.inner.controller_at(p.inner.rate_hz, p.inner.method),
            outer: self.outer_controller(p),
        }
    }

    /// The inner loop closed on the whole plant at the point's inner rate.
    pub fn inner_closed(
        &self,
        p: &CascadePoint,
        points: usize,
    ) -> Result<InnerClosed, CascadeError> {
        let c = self
            .inner
            .controller_at(p.inner.rate_hz, p.inner.method)
            .map_err(CascadeError::InnerController)?;
        self.inner_closed_around(p, &c, points)
    }

    /// [`PreparedCascade::inner_closed`] around the inner controller `c`
    /// (the one discretized for the pair, shared with the inner figures
    /// and the CPU cost).
    pub fn inner_closed_around(
        &self,
        p: &CascadePoint,
        c: &DiscreteTransfer,
        points: usize,
    ) -> Result<InnerClosed, CascadeError> {
        if p.ratio == 0 {
            return Err(CascadeError::RatioZero);
        }
        if !(p.outer_delay >= 0.0 && p.outer_delay.is_finite()) {
            return Err(CascadeError::OuterDelay(p.outer_delay));
        }
        // Each whole outer period of delay is a state of the lifted loop
        // (1e300 once asked the allocator for more than exists: a panic).
        if p.outer_delay > MAX_DELAY_STATES as f64 {
            let (periods, max) = (p.outer_delay, MAX_DELAY_STATES);
            return Err(CascadeError::OuterDelayTooLong { periods, max });
        }
        InnerClosed::new(
            &self.combined,
            c,
            1.0 / p.inner.rate_hz,
            &self.inner.actuation(&p.inner),
            points,
        )
        .map_err(CascadeError::InnerOnWholePlant)
    }

    /// The lifted outer loop at a point (its hold equivalent, controller
    /// and closed loop); `rows` says which output points a period the
    /// lifted model carries (`Rows`).
    pub fn outer_loop(
        &self,
        p: &CascadePoint,
        rows: Rows,
    ) -> Result<(InnerClosed, HoldEquivalent, DiscreteTransfer, ClosedLoop), CascadeError> {
        let c = self.controllers(p);
        let (inner, lifted, cl) = self.outer_loop_with(p, &c, rows)?;
        Ok((inner, lifted, c.outer?, cl))
    }

    /// [`PreparedCascade::outer_loop`] around the pair's controllers.
    pub fn outer_loop_with(
        &self,
        p: &CascadePoint,
        c: &PairControllers,
        rows: Rows,
    ) -> Result<(InnerClosed, HoldEquivalent, ClosedLoop), CascadeError> {
        let inner_c = (c.inner.as_ref()).map_err(|e| CascadeError::InnerController(e.clone()))?;
        let inner = self.inner_closed_around(p, inner_c, self.outer_time.points_per_period)?;
        let outer_c = c.outer.as_ref().map_err(CascadeError::clone)?;
        let (lifted, cl) = self.outer_loop_on(&inner, p, outer_c, rows)?;
        Ok((inner, lifted, cl))
    }

    /// The lifted loop around outer controller `c` on an inner loop
    /// already closed at the point's inner rate (`inner_closed`; the
    /// ratios at one inner rate share it).
    pub fn outer_loop_on(
        &self,
        inner: &InnerClosed,
        p: &CascadePoint,
        c: &DiscreteTransfer,
        rows: Rows,
    ) -> Result<(HoldEquivalent, ClosedLoop), CascadeError> {
        let lifted = lift(inner, p, rows);
        let cl = ClosedLoop::new(&lifted, c).map_err(CascadeError::ClosingOuter)?;
        Ok((lifted, cl))
    }

    /// A cheap screen before the full figures: None when the lifted loop's
    /// poles are all inside the unit circle, else its evaluation (unstable,
    /// marginal or the error).
    pub fn screen(&self, p: &CascadePoint) -> Option<Evaluation> {
        let c = match self.outer_controller(p) {
            Ok(c) => c,
            Err(e) => return Some(Evaluation::error(e)),
        };
        match self.inner_closed(p, 1) {
            Ok(inner) => self.screen_on(&inner, p, &c),
            Err(e) => Some(Evaluation::error(e)),
        }
    }

    /// `screen` on an inner loop already closed (`inner_closed`) around
    /// outer controller `c`.
    pub fn screen_on(
        &self,
        inner: &InnerClosed,
        p: &CascadePoint,
        c: &DiscreteTransfer,
    ) -> Option<Evaluation> {
        let cl = match self.outer_loop_on(inner, p, c, Rows::None) {
            Ok((_, cl)) => cl,
            Err(e) => return Some(Evaluation::error(e)),
        };
        match cl.poles() {
            Ok(poles) => match ClosedLoop::stability(&poles) {
                Stability::Stable => None,
                Stability::Unstable => Some(Evaluation::poles_only(Status::Unstable, &poles)),
                Stability::Marginal => Some(Evaluation::poles_only(Status::Marginal, &poles)),
            },
            Err(e) => Some(Evaluation::error(LoopError::Poles(e))),
        }
    }

    /// Both loops' figures at a point; `exact_margin` also searches each
    /// loop's exact delay margin (for `eval` and the chosen pair).
    pub fn evaluate(&self, p: &CascadePoint, exact_margin: bool) -> CascadeEvaluation {
        self.evaluate_with(p, &self.controllers(p), exact_margin)
    }

    /// [`PreparedCascade::evaluate`] around the pair's controllers.
    pub fn evaluate_with(
        &self,
        p: &CascadePoint,
        c: &PairControllers,
        exact_margin: bool,
    ) -> CascadeEvaluation {
        let inner = self.inner.evaluate(
            &p.inner,
            Given {
                controller: Some(c.inner.as_ref()),
                exact_delay_margin: exact_margin,
                ..Given::default()
            },
        );
        CascadeEvaluation {
            inner,
            outer: self.evaluate_outer_with(p, c, exact_margin),
        }
    }

    /// The outer loop's figures at a point.
    pub fn evaluate_outer(&self, p: &CascadePoint, exact_margin: bool) -> Evaluation {
        self.evaluate_outer_with(p, &self.controllers(p), exact_margin)
    }

    /// [`PreparedCascade::evaluate_outer`] around the pair's controllers.
    pub fn evaluate_outer_with(
        &self,
        p: &CascadePoint,
        c: &PairControllers,
        exact_margin: bool,
    ) -> Evaluation {
        let inner = (c.inner.as_ref())
            .map_err(|e| CascadeError::InnerController(e.clone()))
            .and_then(|ic| self.inner_closed_around(p, ic, self.outer_time.points_per_period));
        let inner = match inner {
            Ok(v) => v,
            Err(e) => return Evaluation::error(e),
        };
        match self.evaluate_outer_on(&inner, p, c.outer.as_ref(), exact_margin, None) {
            OuterOutcome::Figures(e) => *e,
            // Without a spec to screen on, every figure is computed.
            OuterOutcome::FailsLoopFigures(_) | OuterOutcome::FailsSimulation(_) => {
                Evaluation::error("screened")
            }
        }
    }

    /// The outer loop's figures on an inner loop already closed
    /// (`inner_closed` with the outer loop's points per period). With
    /// `screen_on_spec`, the poles and the short simulation
    /// (`simulated_limits_fail`) come first, then the loop figures, and a
    /// failing limit on either ends the evaluation there (the time
    /// responses are not computed); a pair that gets that far computes only
    /// the time figures the spec limits (`Wanted::limited_by`; the others
    /// are `not computed`: nothing in a pick reads them but the verdict,
    /// and the chosen and recommended pairs are evaluated again in full).
    pub fn evaluate_outer_on(
        &self,
        inner: &InnerClosed,
        p: &CascadePoint,
        outer_c: Result<&DiscreteTransfer, &CascadeError>,
        exact_margin: bool,
        screen_on_spec: Option<&Spec>,
    ) -> OuterOutcome {
        let fail =
            |e: &dyn std::fmt::Display| OuterOutcome::Figures(Box::new(Evaluation::error(e)));
        let c = match outer_c {
            Ok(c) => c,
            Err(e) => return fail(e),
        };
        // The search first needs only the poles and the short simulation
        // (rows at the inner samples); every row is built once a pair
        // gets past them (the same rows, built the same way).
        let rows = match screen_on_spec {
            Some(_) => Rows::Samples,
            None => Rows::All,
        };
        let (lifted, cl) = match self.outer_loop_on(inner, p, c, rows) {
            Ok(v) => v,
            Err(e) => return fail(&e),
        };
        let poles = match cl.poles() {
            Ok(v) => v,
            Err(e) => return fail(&LoopError::Poles(e)),
        };
        match ClosedLoop::stability(&poles) {
            Stability::Stable => {}
            Stability::Unstable => {
                return OuterOutcome::Figures(Box::new(Evaluation::poles_only(
                    Status::Unstable,
                    &poles,
                )));
            }
            Stability::Marginal => {
                return OuterOutcome::Figures(Box::new(Evaluation::poles_only(
                    Status::Marginal,
                    &poles,
                )));
            }
        }
        if let Some(spec) = screen_on_spec
            && let Some(a) = simulated_limits_fail(
                &cl,
                &lifted,
                &poles,
                spec,
                self.outer_time.band,
                rows.per_tick(inner.hold.intersample.len()),
            )
        {
            return OuterOutcome::FailsSimulation(a);
        }
        let t = lifted.period_s;
        let pulse = lifted.pulse();
        let l = |w: f64| {
            let z = C64::from_polar(1.0, w * t);
            c.transfer.eval(z) * pulse.response(z)
        };
        let range = self.outer_range(inner, t);
        let freq = loop_figures(&l, &range);
        if let Some(spec) = screen_on_spec
            && let Some(a) = loop_limits_fail(&freq, spec)
        {
            return OuterOutcome::FailsLoopFigures(a);
        }
        let opts = TimeOptions {
            wanted: screen_on_spec.map_or(Wanted::ALL, Wanted::limited_by),
            ..self.outer_time
        };
        let lifted = match rows {
            Rows::All => lifted,
            Rows::Samples | Rows::None => lift(inner, p, Rows::All),
        };
        let (step, dist) = match sampled_figures(&cl, &lifted, &poles, &opts) {
            Ok(v) => v,
            Err(e) => return fail(&e),
        };
        let margin = exact_margin.then(|| self.outer_delay_margin(inner, c, p));
        let mut e = finish(step, dist, freq, &poles);
        record_delay_margin(&mut e, margin);
        OuterOutcome::Figures(Box::new(e))
    }

    /// The outer loop's frequency range up to its Nyquist frequency, dense
    /// around the outer blocks' modes and the inner closed loop's.
    fn outer_range(&self, inner: &InnerClosed, t_outer: f64) -> FrequencyRange {
        let w_hi = std::f64::consts::PI / t_outer;
        let roots = self.outer_roots.iter().chain(inner.poles_s.iter());
        let inside: Vec<C64> = roots
            .clone()
            .copied()
            .filter(|r| r.norm() < w_hi && r.is_finite())
            .collect();
        let mut range = FrequencyRange::from_roots(&inside, Some(w_hi));
        let slowest = roots
            .map(|r| r.norm())
            .filter(|&v| v > 0.0 && v.is_finite())
            .fold(f64::INFINITY, f64::min);
        if slowest.is_finite() {
            range.w_lo = range.w_lo.min(slowest / 1e3);
        }
        range
    }

    /// The exact delay margin of the outer loop: the smallest extra delay
    /// of the outer command at which the lifted loop loses stability. The
    /// command reaches the inner loop only at inner ticks, so a delay acts
    /// in whole inner ticks: with `D` the outer delay (outer periods) and
    /// `j` the first tick count that is unstable, the margin is
    /// `(j - 1) T - D N T`, T the inner period (any extra delay beyond it
    /// moves the command to tick `j`). Counted as the single loop's
    /// (`delay_margin::first_loss`), on the lifted loops of the ticks
    /// within an outer period (`docs/figures.md`).
    fn outer_delay_margin(
        &self,
        inner: &InnerClosed,
        c: &DiscreteTransfer,
        p: &CascadePoint,
    ) -> DelayMargin {
        let t = inner.hold.period_s;
        let n = p.ratio;
        let t_outer = n as f64 * t;
        let range = self.outer_range(inner, t_outer);
        // The lifted loop of a total delay of `d` outer periods: its ticks
        // within the period (as `InnerClosed::lifted` splits them) and its
        // whole periods.
        let loop_at = |d: f64, branch: Option<f64>| -> Result<(Fraction, f64), CountError> {
            let ticks = (d * n as f64).round().max(0.0) as usize;
            let whole = if ticks <= n { 0 } else { ticks.div_ceil(n) - 1 };
            let lifted = inner.lifted(n, ticks - whole * n, p.outer_hold, Rows::None);
            let pulse = lifted.pulse();
            let l = |w: f64| {
                let z = C64::from_polar(1.0, w * t_outer);
                c.transfer.eval(z) * pulse.response(z)
            };
            Ok((fraction_of(&l, &range, t_outer, branch, d)?, whole as f64))
        };
        let start = InnerClosed::delay_ticks(n, p.outer_delay) as f64 / n as f64;
        let loss = first_loss(start, Some(n), &loop_at);
        margin_of(loss, |_, unstable| {
            let first_unstable = (unstable * n as f64).round();
            ((first_unstable - 1.0) * t - p.outer_delay * t_outer).max(0.0)
        })
    }

    /// Exact traces of the outer loop (step, outer load), `periods` outer
    /// periods long (None: the horizon of its slowest pole).
    pub fn outer_traces(
        &self,
        p: &CascadePoint,
        periods: Option<usize>,
    ) -> Result<(Vec<TracePoint>, Vec<TracePoint>), CascadeError> {
        self.outer_traces_with(p, &self.controllers(p), periods)
    }

    /// [`PreparedCascade::outer_traces`] around the pair's controllers.
    pub fn outer_traces_with(
        &self,
        p: &CascadePoint,
        c: &PairControllers,
        periods: Option<usize>,
    ) -> Result<(Vec<TracePoint>, Vec<TracePoint>), CascadeError> {
        let (_, lifted, cl) = self.outer_loop_with(p, c, Rows::All)?;
        let poles = cl.poles().map_err(LoopError::Poles)?;
        // An unstable or marginal loop's trace is a few periods of its
        // start, as the single loop's (`horizon_periods`): it was 200 000
        // periods, diverging to NaN.
        let rho = poles.iter().map(|p| p.norm()).fold(0.0, f64::max);
        let dim = cl.a.nrows();
        let n = periods.unwrap_or_else(|| match rho < 1.0 {
            true => (horizon_steps(rho, dim) as usize).min(self.outer_time.max_steps),
            false => dim + 2,
        });
        // At most `TRACE_PERIODS` periods' worth of points drawn point by
        // point, as the single loop's traces.
        Ok((
            sampled_trace_spanning(&cl, &lifted, 1.0, 0.0, n as u64),
            sampled_trace_spanning(&cl, &lifted, 0.0, 1.0, n as u64),
        ))
    }
}
