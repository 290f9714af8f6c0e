//! One evaluation: a loop at one rate, one method and one computation
//! delay, reduced to the figures of the loop model. Also the same figures
//! for the continuous design and for each hold approximation.

use serde::Serialize;

use crate::model::discretize::{DiscretizeError, Method, discretize};
use crate::sampled::closed_loop::{ClosedLoop, LoopError, Stability};
use crate::sampled::continuous::{ContinuousLoop, HoldApprox};
use crate::sampled::delay_margin::{DelayMargin, exact_delay_margin};
use crate::sampled::frequency::{FrequencyRange, LoopFigures, loop_figures};
use crate::sampled::hold::{Actuation, HoldEquivalent, Pulse, pade_delay, plant_and_sensor};
use crate::sampled::stretch::NodeHasher;
use crate::spec::HoldKind;
use std::collections::HashMap;
use std::hash::BuildHasherDefault;
use std::sync::Mutex;

use crate::model::matrix::ModelError;
use crate::model::poly::C64;
use crate::model::state_space::StateSpace;
use crate::model::transfer::{Controller, DiscreteTransfer, Transfer};
use crate::sampled::time_response::{
    DisturbanceFigures, ResponseError, StepFigures, TimeFigure, TimeOptions, TracePoint,
    horizon_periods, sampled_figures, sampled_trace_spanning,
};

/// Why a point could not be evaluated. Its text is the reason a grid row
/// carries (`error: ...` in `sweep.csv`).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PointError {
    #[error("rate must be positive and finite, got {0}")]
    Rate(f64),
    #[error("computation delay must be non-negative and finite (in periods), got {0}")]
    Delay(f64),
    /// The method cannot produce a controller at this rate.
    #[error(transparent)]
    Discretize(#[from] DiscretizeError),
    /// A continuous controller and no method.
    #[error("no discretization method given")]
    NoMethod,
    /// A controller given in z runs at its own rate only.
    #[error("the controller is given in z at {own_hz} Hz and cannot run at {rate_hz} Hz")]
    OwnRate { own_hz: f64, rate_hz: f64 },
    /// A controller given in z has no continuous design.
    #[error("the controller is given in z: no continuous design")]
    NoContinuousDesign,
    /// The exact sampled loop could not be built or solved.
    #[error(transparent)]
    Loop(#[from] LoopError),
    /// A model error met on the way (a trace's poles, a continuous loop).
    #[error(transparent)]
    Model(#[from] ModelError),
    /// The time response could not be computed (its own reason).
    #[error(transparent)]
    TimeResponse(#[from] ResponseError),
}

/// What an evaluation at a point is handed instead of building it: the
/// controller and the plant side, each built once for the point and shared
/// by everything evaluated there, and whether to search the exact delay
/// margin. `Given::default()` builds both and leaves the margin unsearched
/// (a sweep's figures).
#[derive(Debug, Clone, Copy, Default)]
pub struct Given<'a> {
    /// The controller that runs: the point's own discretization
    /// (`PreparedLoop::controller_at`, built once per (method, rate)) or a
    /// rounded one, or why it could not be built. None: discretized here.
    pub controller: Option<Result<&'a DiscreteTransfer, &'a PointError>>,
    /// The plant side at the point's rate, delay and hold
    /// (`PreparedLoop::hold_at`), shared by the methods of a sweep group,
    /// or why it could not be built. None: built here.
    pub plant: Option<Result<&'a PlantAt, &'a PointError>>,
    /// Search the exact delay margin (`docs/figures.md`): `eval` and the
    /// recommended rate do; a sweep's rows leave it unsearched.
    pub exact_delay_margin: bool,
}

impl<'a> Given<'a> {
    /// The loop around controller `c` (a rounded one, or one shared by
    /// several plant variants); the plant side built here.
    pub fn around(c: &'a DiscreteTransfer) -> Given<'a> {
        Given {
            controller: Some(Ok(c)),
            ..Given::default()
        }
    }

    /// Everything built here, and the exact delay margin searched: the
    /// full figures of one point.
    pub fn with_delay_margin() -> Given<'a> {
        Given {
            exact_delay_margin: true,
            ..Given::default()
        }
    }
}

/// Outcome of one evaluation.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    /// Stable: every figure computed.
    Ok,
    /// A closed-loop pole outside the unit circle (or right half-plane).
    Unstable,
    /// A pole on the stability boundary (e.g. z = 1 exactly).
    Marginal,
    /// Could not be evaluated; the reason says why.
    Error(String),
    /// Not evaluated, on purpose: the reason says why (for example, the
    /// continuous design already fails the spec, so no rate can pass).
    NotEvaluated(String),
}

impl Status {
    /// Text used in CSV and tables: `ok`, `unstable`, `marginal`, `error: reason`,
    /// `not evaluated: reason`.
    pub fn label(&self) -> String {
        match self {
            Status::Ok => "ok".into(),
            Status::Unstable => "unstable".into(),
            Status::Marginal => "marginal".into(),
            Status::Error(e) => format!("error: {e}"),
            Status::NotEvaluated(e) => format!("not evaluated: {e}"),
        }
    }
}

/// The figures of a stable loop (units in the names; see `loop-model.md`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Figures {
    pub y_final: f64,
    pub overshoot_pct: Option<f64>,
    pub settling_time_s: Option<f64>,
    pub rise_time_s: Option<f64>,
    pub disturbance_peak: f64,
    pub recovery_time_s: Option<f64>,
    pub u_peak: f64,
    pub gain_margin_db: Option<f64>,
    pub phase_margin_deg: Option<f64>,
    pub crossover_hz: Option<f64>,
    /// The exact delay margin: the smallest extra actuator delay (any
    /// length) at which the exact sampled loop loses stability, s. None:
    /// no gain crossing (infinite), or not located (a note says why); see
    /// `docs/figures.md`. For the continuous design it equals the estimate.
    pub delay_margin_s: Option<f64>,
    /// `min_i phi_i / w_i` over the gain crossings, s; only an estimate for
    /// a sampled loop. None: no gain crossing.
    pub delay_margin_estimate_s: Option<f64>,
    pub sensitivity_peak: f64,
    /// The horizon the time figures cover, s (see `StepFigures`).
    pub horizon_s: f64,
    /// The time figures that could not be decided within the
    /// horizon (their own status: neither a value nor "not settled"); see
    /// `Figures::is_undecided`.
    pub undecided: Vec<TimeFigure>,
    /// True when the exact delay margin was searched for (`eval`, the
    /// recommended rate); a sweep leaves it unsearched (its cost grows
    /// with the delay in periods) and reports the estimate.
    pub delay_margin_searched: bool,
    /// The time figures not computed (`Wanted`: a verdict reads
    /// only what its spec limits): neither a value nor a missing figure's
    /// meaning. Empty (and not serialized) for every full evaluation.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub not_computed: Vec<TimeFigure>,
    /// Why a loop figure is missing when it was not located (|L| = 1 over
    /// an interval, a crossing exactly at an end, a delay margin beyond the
    /// search); empty otherwise.
    pub loop_notes: Vec<String>,
}

impl Figures {
    /// The name of the first figure that is NaN, if any.
    pub fn first_nan(&self) -> Option<&'static str> {
        let opt = |v: Option<f64>| v.is_some_and(f64::is_nan);
        [
            ("final value", self.y_final.is_nan()),
            ("overshoot", opt(self.overshoot_pct)),
            ("settling time", opt(self.settling_time_s)),
            ("rise time", opt(self.rise_time_s)),
            ("disturbance peak", self.disturbance_peak.is_nan()),
            ("recovery time", opt(self.recovery_time_s)),
            ("peak command", self.u_peak.is_nan()),
            ("gain margin", opt(self.gain_margin_db)),
            ("phase margin", opt(self.phase_margin_deg)),
            ("crossover", opt(self.crossover_hz)),
            ("delay margin", opt(self.delay_margin_s)),
            ("delay margin estimate", opt(self.delay_margin_estimate_s)),
            ("sensitivity peak", self.sensitivity_peak.is_nan()),
        ]
        .into_iter()
        .find(|(_, bad)| *bad)
        .map(|(name, _)| name)
    }

    /// The text for a missing `delay_margin_s`: `not searched` in a sweep,
    /// `not located` when the search gave up (the note says why), `inf`
    /// when there is no gain crossing.
    pub fn delay_margin_missing(&self) -> &'static str {
        if !self.delay_margin_searched {
            "not searched"
        } else if self.delay_margin_not_located() {
            "not located"
        } else {
            "inf"
        }
    }

    /// The exact delay margin was searched and the search gave up (its
    /// note is among `loop_notes`).
    pub fn delay_margin_not_located(&self) -> bool {
        self.delay_margin_s.is_none()
            && self.delay_margin_searched
            && self
                .loop_notes
                .iter()
                .any(|n| n.starts_with("delay margin"))
    }

    fn from_parts(step: &StepFigures, dist: &DisturbanceFigures, freq: &LoopFigures) -> Figures {
        Figures {
            y_final: step.y_final,
            overshoot_pct: step.overshoot_pct,
            settling_time_s: step.settling_time_s,
            rise_time_s: step.rise_time_s,
            disturbance_peak: dist.disturbance_peak,
            recovery_time_s: dist.recovery_time_s,
            u_peak: step.u_peak,
            gain_margin_db: freq.gain_margin_db,
            phase_margin_deg: freq.phase_margin_deg,
            crossover_hz: freq.crossover_hz,
            delay_margin_s: None,
            delay_margin_estimate_s: freq.delay_margin_estimate_s,
            sensitivity_peak: freq.sensitivity_peak,
            horizon_s: step.horizon_s,
            loop_notes: freq.notes.clone(),
            delay_margin_searched: false,
            not_computed: (step.not_computed.iter().copied())
                .chain(TimeFigure::LOAD_STEP.into_iter().filter(|_| !dist.computed))
                .collect(),
            undecided: step
                .undecided
                .iter()
                .chain(&dist.undecided)
                .copied()
                .collect(),
        }
    }

    /// True when the time figure `t` could not be decided.
    pub fn is_undecided(&self, t: TimeFigure) -> bool {
        self.undecided.contains(&t)
    }

    /// True when the time figure `t` was not computed (`not_computed`).
    pub fn is_not_computed(&self, t: TimeFigure) -> bool {
        self.not_computed.contains(&t)
    }
}

/// One evaluated loop.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Evaluation {
    pub status: Status,
    pub stable: bool,
    pub figures: Option<Figures>,
    /// Closed-loop poles: z-plane for a sampled loop, s-plane (rad/s) for
    /// a continuous one, as `[re, im]`.
    pub closed_loop_poles: Vec<[f64; 2]>,
    /// Every crossing and the peak's frequency, for charts and reports.
    #[serde(skip)]
    pub loop_detail: Option<LoopFigures>,
}

impl Evaluation {
    /// An evaluation that could not be made, with the reason.
    pub fn error(reason: impl std::fmt::Display) -> Evaluation {
        Evaluation {
            status: Status::Error(reason.to_string()),
            stable: false,
            figures: None,
            closed_loop_poles: Vec::new(),
            loop_detail: None,
        }
    }

    pub(crate) fn poles_only(status: Status, poles: &[C64]) -> Evaluation {
        Evaluation {
            status,
            stable: false,
            figures: None,
            closed_loop_poles: poles.iter().map(|p| [p.re, p.im]).collect(),
            loop_detail: None,
        }
    }
}

/// A grid point: rate, method (None for a controller given in z) and
/// computation delay in periods (any finite value >= 0; 1.5 is a period
/// and a half).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Point {
    pub rate_hz: f64,
    pub method: Option<Method>,
    pub delay: f64,
    /// How the actuator holds each command.
    pub hold: HoldKind,
}

/// The plant side of every loop at one (rate, delay): the hold + delay +
/// plant equivalent, its pulse transfer from `u_k` to the measured sample,
/// and the values of that transfer already computed, keyed by the exact
/// frequency. The methods of a sweep share one (the plant side does not
/// depend on the method), and their frequency grids start from the same
/// points, so most of the loop-gain solves are done once; a value from the
/// memo is the very number `response_at` returned, so figures are
/// unchanged.
#[derive(Debug)]
pub struct PlantAt {
    pub hold: HoldEquivalent,
    pulse: Pulse,
    memo: Mutex<HashMap<u64, C64, BuildHasherDefault<NodeHasher>>>,
}

impl PlantAt {
    fn new(hold: HoldEquivalent) -> PlantAt {
        PlantAt {
            pulse: hold.pulse(),
            hold,
            memo: Mutex::new(HashMap::default()),
        }
    }

    /// Loop gain `C(e^{jwT}) G(e^{jwT})` of this plant side around
    /// controller `c`, as a closure over w (rad/s) that owns what it reads
    /// (the loop chart, the tests' margin checks).
    pub fn loop_gain(self, c: DiscreteTransfer) -> impl Fn(f64) -> C64 {
        move |w: f64| {
            let z = C64::from_polar(1.0, w * self.hold.period_s);
            c.transfer.eval(z) * self.response(w)
        }
    }

    /// G(e^{jwT}) at `w` rad/s, from the memo when already computed.
    fn response(&self, w: f64) -> C64 {
        let key = w.to_bits();
        if let Some(v) = self.memo.lock().ok().and_then(|m| m.get(&key).copied()) {
            return v;
        }
        let v = (self.pulse).response(C64::from_polar(1.0, w * self.hold.period_s));
        if let Ok(mut m) = self.memo.lock() {
            m.insert(key, v);
        }
        v
    }
}

/// Everything about the loop that does not depend on the rate, built once
/// and shared by every evaluation of a sweep.
#[derive(Debug, Clone)]
pub struct PreparedLoop {
    pub plant: Transfer,
    pub sensor: Transfer,
    pub controller: Controller,
    /// Plant and sensor in series (outputs: plant, measured).
    pub plant_model: StateSpace,
    /// Continuous poles and zeros of plant, sensor and controller (rad/s):
    /// where the frequency grid is made dense.
    roots: Vec<C64>,
    /// Pre-warp frequency for `tustin-prewarped`, rad/s.
    pub prewarp_rad_s: Option<f64>,
    pub time: TimeOptions,
    /// The continuous design's own figures (None for a controller in z).
    pub design: Option<Evaluation>,
    /// Transport delays of the plant and of the measurement, s.
    pub transport: Transport,
    /// The model the continuous loops simulate: plant and sensor with the
    /// measurement's transport delay as its Pade approximant.
    continuous_model: StateSpace,
}

/// Pure delays `e^{-sL}` in the loop (`delay_s` on [plant] and [sensor]).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Transport {
    /// Between the actuator and the plant, s (the load disturbance enters
    /// after it, at the plant input).
    pub plant_s: f64,
    /// Between the plant output and the sampler, s.
    pub sensor_s: f64,
}

/// Order of the Pade approximant `[n/n]` that stands in for a transport
/// delay in the continuous loops' time response and poles (their
/// frequency response uses `e^{-jwL}` exactly).
pub const TRANSPORT_PADE_ORDER: usize = 6;

/// Order of the Pade approximant of each exponential in a hold's own
/// rational approximation (`HoldApprox::OwnPade`).
pub const HOLD_PADE_ORDER: usize = 2;

impl Transport {
    /// The total delay around the loop, s.
    pub fn total_s(&self) -> f64 {
        self.plant_s + self.sensor_s
    }
}

/// The exact delay margin's search, when one was made, written into the
/// figures of `e`: the margin in seconds, none without a gain crossing,
/// or a note saying why it was not located (`docs/figures.md`).
pub(crate) fn record_delay_margin(e: &mut Evaluation, margin: Option<DelayMargin>) {
    if let (Some(f), Some(margin)) = (e.figures.as_mut(), margin) {
        f.delay_margin_searched = true;
        f.delay_margin_s = match margin {
            DelayMargin::Seconds(v) => Some(v),
            DelayMargin::NoCrossing => None,
            DelayMargin::NotLocated(why) => {
                f.loop_notes
                    .push(format!("delay margin not located: {why}"));
                None
            }
        };
    }
}

impl PreparedLoop {
    /// Prepare a loop; `prewarp_hz` None means the continuous crossover.
    pub fn new(
        plant: &Transfer,
        sensor: &Transfer,
        controller: &Controller,
        prewarp_hz: Option<f64>,
        time: TimeOptions,
    ) -> Result<PreparedLoop, ModelError> {
        PreparedLoop::with_transport(
            plant,
            sensor,
            controller,
            prewarp_hz,
            time,
            Transport::default(),
        )
    }

    /// `new` with transport delays on the plant and the measurement.
    pub fn with_transport(
        plant: &Transfer,
        sensor: &Transfer,
        controller: &Controller,
        prewarp_hz: Option<f64>,
        time: TimeOptions,
        transport: Transport,
    ) -> Result<PreparedLoop, ModelError> {
        if !(transport.plant_s >= 0.0
            && transport.plant_s.is_finite()
            && transport.sensor_s >= 0.0
            && transport.sensor_s.is_finite())
        {
            return Err(ModelError::NonFinite);
        }
        let plant_model = plant_and_sensor(plant, sensor)?;
        let continuous_model = if transport.sensor_s > 0.0 {
            let (n, d) = pade_delay(transport.sensor_s, TRANSPORT_PADE_ORDER);
            plant_and_sensor(plant, &sensor.cascade(&Transfer::new(n, d)))?
        } else {
            plant_model.clone()
        };
        let mut roots = Vec::new();
        let mut tfs = vec![plant, sensor];
        if let Controller::Continuous(c) = controller {
            tfs.push(c);
        }
        for tf in tfs {
            roots.extend(tf.poles().ok_or(ModelError::Eigen)?);
            roots.extend(tf.zeros().ok_or(ModelError::Eigen)?);
        }
        if let Controller::Discrete(d) = controller {
            // Map the z-plane poles and zeros back to rad/s for the grid.
            let back = |z: &C64| z.ln() / d.period_s;
            let p = d.transfer.poles().ok_or(ModelError::Eigen)?;
            let z = d.transfer.zeros().ok_or(ModelError::Eigen)?;
            roots.extend(
                p.iter()
                    .chain(z.iter())
                    .filter(|z| z.norm() > 0.0)
                    .map(back),
            );
        }
        let mut prepared = PreparedLoop {
            plant: plant.clone(),
            sensor: sensor.clone(),
            controller: controller.clone(),
            plant_model,
            roots,
            prewarp_rad_s: prewarp_hz.map(|f| 2.0 * std::f64::consts::PI * f),
            time,
            design: None,
            transport,
            continuous_model,
        };
        if let Controller::Continuous(_) = controller {
            let design = prepared.continuous(None);
            if prewarp_hz.is_none() {
                prepared.prewarp_rad_s = design
                    .figures
                    .as_ref()
                    .and_then(|f| f.crossover_hz)
                    .map(|f| 2.0 * std::f64::consts::PI * f);
            }
            prepared.design = Some(design);
        }
        Ok(prepared)
    }

    /// The fastest pole or zero of plant, sensor and controller, Hz (0 if
    /// all are at the origin).
    pub fn fastest_mode_hz(&self) -> f64 {
        self.roots.iter().map(|r| r.norm()).fold(0.0, f64::max) / (2.0 * std::f64::consts::PI)
    }

    /// Warnings about a point whose results deserve less trust: a rate so
    /// far above the loop's fastest mode that the discrete coefficients
    /// crowd against z = 1, and time figures left undecided.
    pub fn cautions(&self, p: &Point, e: &Evaluation) -> Vec<String> {
        let mut out = Vec::new();
        let fastest = self.fastest_mode_hz();
        if fastest > 0.0 && p.rate_hz > 1e4 * fastest {
            out.push(format!(
                "the rate is {:.3e} times the fastest pole or zero ({:.4} Hz): the discrete poles crowd against z = 1 and the figures lose accuracy",
                p.rate_hz / fastest,
                fastest
            ));
        }
        if let Some(f) = &e.figures {
            out.extend(f.loop_notes.iter().cloned());
        }
        if let Some(f) = &e.figures
            && !f.undecided.is_empty()
        {
            out.push(format!(
                "undecided within the horizon of {:.4e} s (the slowest mode's decay to 1e-4): {}; neither a bound at its end nor the bounded search work (a walk of at most 2^20 periods) could rule out a later peak, band exit or crossing",
                f.horizon_s,
                TimeFigure::joined(&f.undecided, ", ")
            ));
        }
        out
    }

    /// The controller that runs at `rate_hz`: the one place a controller
    /// is discretized. Whatever needs the controller at one (method, rate)
    /// (the evaluation, every plant variant, every number format, the CPU
    /// cost) is handed the one built here (`Given::controller`).
    pub fn controller_at(
        &self,
        rate_hz: f64,
        method: Option<Method>,
    ) -> Result<DiscreteTransfer, PointError> {
        let period = 1.0 / rate_hz;
        match (&self.controller, method) {
            (Controller::Continuous(c), Some(m)) => {
                Ok(discretize(c, m, period, self.prewarp_rad_s)?)
            }
            (Controller::Continuous(_), None) => Err(PointError::NoMethod),
            (Controller::Discrete(d), _) => {
                let own = 1.0 / d.period_s;
                if ((rate_hz - own) / own).abs() > 1e-9 {
                    Err(PointError::OwnRate {
                        own_hz: own,
                        rate_hz,
                    })
                } else {
                    Ok(d.clone())
                }
            }
        }
    }

    fn range_below(&self, w_hi: f64) -> FrequencyRange {
        let inside: Vec<C64> = self
            .roots
            .iter()
            .copied()
            .filter(|r| r.norm() < w_hi)
            .collect();
        let mut range = FrequencyRange::from_roots(&inside, Some(w_hi));
        let slowest = self
            .roots
            .iter()
            .map(|r| r.norm())
            .filter(|&v| v > 0.0)
            .fold(f64::INFINITY, f64::min);
        if slowest.is_finite() {
            range.w_lo = range.w_lo.min(slowest / 1e3);
        }
        range
    }

    /// Build the exact sampled loop at a point (for a trace, a loop gain,
    /// a test): the hold equivalent, the point's controller, the closed loop.
    pub fn sampled_loop(
        &self,
        p: &Point,
    ) -> Result<(HoldEquivalent, DiscreteTransfer, ClosedLoop), PointError> {
        check_point(p)?;
        let c = self.controller_at(p.rate_hz, p.method)?;
        let (hold, cl) = self.closed_loop_around(p, &c)?;
        Ok((hold, c, cl))
    }

    /// Build the exact sampled loop at a point around a given controller
    /// (a rounded one, or one scaled by a test).
    pub fn closed_loop_around(
        &self,
        p: &Point,
        c: &DiscreteTransfer,
    ) -> Result<(HoldEquivalent, ClosedLoop), PointError> {
        let hold = self.hold_equivalent(p)?;
        let cl = ClosedLoop::new(&hold, c).map_err(LoopError::ClosingLoop)?;
        Ok((hold, cl))
    }

    /// The exact hold + delay + plant equivalent at a point's rate and
    /// delay. It does not depend on the method, so a sweep builds it once
    /// per (rate, delay, hold) and hands it to every method's evaluation
    /// (`Given::plant`).
    pub fn hold_at(&self, p: &Point) -> Result<PlantAt, PointError> {
        self.hold_equivalent(p).map(PlantAt::new)
    }

    /// The exact hold + delay + plant equivalent at a point.
    fn hold_equivalent(&self, p: &Point) -> Result<HoldEquivalent, PointError> {
        check_point(p)?;
        HoldEquivalent::with(
            &self.plant_model,
            1.0 / p.rate_hz,
            &self.actuation(p),
            self.time.points_per_period,
        )
        .map_err(|e| LoopError::PlantEquivalent(e).into())
    }

    /// What lies between controller and plant at a point: its hold, the
    /// computation delay plus the plant's transport delay (in periods: a
    /// transport delay of 0.3 T is 0.3 more computation delay), and the
    /// measurement's transport delay.
    pub fn actuation(&self, p: &Point) -> Actuation {
        Actuation {
            hold: p.hold,
            delay_periods: p.delay + self.transport.plant_s * p.rate_hz,
            sensor_delay_s: self.transport.sensor_s,
        }
    }

    /// Evaluate the exact sampled-data loop at one point, building its
    /// controller and plant side here, without the exact delay margin:
    /// `evaluate(p, Given::default())`.
    pub fn sampled(&self, p: &Point) -> Evaluation {
        self.evaluate(p, Given::default())
    }

    /// Evaluate the exact sampled-data loop at one point with what `given`
    /// hands in (the controller, the plant side, whether to search the
    /// exact delay margin); what it does not hand in is built here. The
    /// figures do not depend on what was handed in: a shared plant side
    /// answers from the values it already computed, which are the very
    /// numbers a fresh one computes.
    pub fn evaluate(&self, p: &Point, given: Given) -> Evaluation {
        match self.try_evaluate(p, given) {
            Ok(e) => e,
            Err(e) => Evaluation::error(e),
        }
    }

    fn try_evaluate(&self, p: &Point, given: Given) -> Result<Evaluation, PointError> {
        check_point(p)?;
        let own;
        let c = match given.controller {
            Some(c) => c.map_err(PointError::clone)?,
            None => {
                own = self.controller_at(p.rate_hz, p.method)?;
                &own
            }
        };
        let built;
        let plant = match given.plant {
            Some(h) => h.map_err(PointError::clone)?,
            None => {
                built = self.hold_at(p)?;
                &built
            }
        };
        let cl = ClosedLoop::new(&plant.hold, c).map_err(LoopError::ClosingLoop)?;
        Ok(self.evaluate_closed(
            &plant.hold,
            c,
            &cl,
            &|w| plant.response(w),
            given.exact_delay_margin,
        ))
    }

    /// Every figure of a closed sampled loop (hold equivalent `hold`,
    /// controller `c`, `plant` the pulse transfer G(e^{jwT}) at w rad/s).
    fn evaluate_closed(
        &self,
        hold: &HoldEquivalent,
        c: &DiscreteTransfer,
        cl: &ClosedLoop,
        plant: &dyn Fn(f64) -> C64,
        exact_margin: bool,
    ) -> Evaluation {
        let poles = match cl.poles() {
            Ok(v) => v,
            Err(e) => return Evaluation::error(LoopError::Poles(e)),
        };
        match ClosedLoop::stability(&poles) {
            Stability::Stable => {}
            Stability::Unstable => return Evaluation::poles_only(Status::Unstable, &poles),
            Stability::Marginal => return Evaluation::poles_only(Status::Marginal, &poles),
        }
        let (step, dist) = match sampled_figures(cl, hold, &poles, &self.time) {
            Ok(v) => v,
            Err(e) => return Evaluation::error(PointError::TimeResponse(e)),
        };
        let t = hold.period_s;
        let l = |w: f64| c.transfer.eval(C64::from_polar(1.0, w * t)) * plant(w);
        let range = self.range_below(std::f64::consts::PI / t);
        let freq = loop_figures(&l, &range);
        let margin = exact_margin
            .then(|| exact_delay_margin(&self.plant_model, c, t, &hold.actuation(), &range));
        let mut e = finish(step, dist, freq, &poles);
        record_delay_margin(&mut e, margin);
        e
    }

    /// Exact traces (step, disturbance) at one point, `periods` long
    /// (None: the horizon of the loop's slowest pole), each with at most
    /// `time_response::TRACE_PERIODS` periods of points
    /// (`time_response::sampled_trace_spanning`).
    pub fn sampled_traces(
        &self,
        p: &Point,
        periods: Option<usize>,
    ) -> Result<(Vec<TracePoint>, Vec<TracePoint>), PointError> {
        check_point(p)?;
        let c = self.controller_at(p.rate_hz, p.method)?;
        self.traces_around(p, &c, periods)
    }

    /// [`PreparedLoop::sampled_traces`] around controller `c` (the point's
    /// own, built once by `controller_at` and shared with its evaluation).
    pub fn traces_around(
        &self,
        p: &Point,
        c: &DiscreteTransfer,
        periods: Option<usize>,
    ) -> Result<(Vec<TracePoint>, Vec<TracePoint>), PointError> {
        check_point(p)?;
        let (hold, cl) = self.closed_loop_around(p, c)?;
        let poles = cl.poles()?;
        // A trace is a file or a chart: no cap in periods, but at most
        // `TRACE_PERIODS` periods drawn point by point (longer spans keep
        // one period in every few, jumped to by matrix powers).
        let n = periods.map_or_else(|| horizon_periods(&poles, cl.a.nrows()), |p| p as u64);
        Ok((
            sampled_trace_spanning(&cl, &hold, 1.0, 0.0, n),
            sampled_trace_spanning(&cl, &hold, 0.0, 1.0, n),
        ))
    }

    /// Loop gain of the sampled loop at a point, as a closure over w (rad/s).
    pub fn sampled_loop_gain(&self, p: &Point) -> Result<impl Fn(f64) -> C64 + use<>, PointError> {
        let (hold, c, _) = self.sampled_loop(p)?;
        Ok(PlantAt::new(hold).loop_gain(c))
    }

    /// The frequency range the sampled loop's figures are computed on at
    /// `rate_hz`: from well below the slowest mode up to Nyquist.
    pub fn sampled_range(&self, rate_hz: f64) -> FrequencyRange {
        self.range_below(std::f64::consts::PI * rate_hz)
    }

    /// Exact step and load-disturbance traces of the continuous design
    /// (no sampling) on `[0, t_end_s]` with `steps` intervals.
    pub fn continuous_traces(
        &self,
        t_end_s: f64,
        steps: usize,
    ) -> Result<(Vec<TracePoint>, Vec<TracePoint>), PointError> {
        let Controller::Continuous(c) = &self.controller else {
            return Err(PointError::NoContinuousDesign);
        };
        let pade = self.plant_pade();
        let cl = ContinuousLoop::new(
            &self.continuous_model,
            &self.plant,
            &self.sensor,
            c,
            None,
            self.loop_delays(&pade),
        )?;
        Ok(cl.traces(t_end_s, steps)?)
    }

    /// The plant's transport delay as its Pade approximant (None without).
    fn plant_pade(&self) -> Option<Transfer> {
        (self.transport.plant_s > 0.0).then(|| {
            let (n, d) = pade_delay(self.transport.plant_s, TRANSPORT_PADE_ORDER);
            Transfer::new(n, d)
        })
    }

    /// The pure delays of a continuous loop: the total exactly for the
    /// loop gain, the plant's as `pade` in the simulation (the
    /// measurement's is in `continuous_model`).
    fn loop_delays<'a>(&self, pade: &'a Option<Transfer>) -> Option<(f64, &'a Transfer)> {
        static ONE: std::sync::OnceLock<Transfer> = std::sync::OnceLock::new();
        let total = self.transport.total_s();
        (total > 0.0).then(|| {
            (
                total,
                pade.as_ref()
                    .unwrap_or_else(|| ONE.get_or_init(|| Transfer::gain(1.0))),
            )
        })
    }

    /// The continuous loop: the design itself (`approx` None), or with the
    /// hold and delay replaced by an approximation (`(kind, theta_s)`).
    pub fn continuous(&self, approx: Option<(HoldApprox, f64)>) -> Evaluation {
        self.continuous_with(approx.map(|(k, theta)| (k.transfer(theta), theta)))
    }

    /// The continuous loop with `act` (a rational actuator, and the delay
    /// it stands for, s) between controller and plant.
    fn continuous_with(&self, act: Option<(Transfer, f64)>) -> Evaluation {
        let Controller::Continuous(c) = &self.controller else {
            return Evaluation::error(PointError::NoContinuousDesign);
        };
        let approx = act.as_ref().map(|a| ((), a.1));
        let pade = self.plant_pade();
        let cl = match ContinuousLoop::new(
            &self.continuous_model,
            &self.plant,
            &self.sensor,
            c,
            act.as_ref().map(|a| &a.0),
            self.loop_delays(&pade),
        ) {
            Ok(v) => v,
            Err(e) => return Evaluation::error(e),
        };
        let poles = match cl.poles() {
            Ok(v) => v,
            Err(e) => return Evaluation::error(e),
        };
        let max_re = poles.iter().map(|p| p.re).fold(f64::NEG_INFINITY, f64::max);
        let scale = poles.iter().map(|p| p.norm()).fold(1e-300, f64::max);
        if max_re > 1e-10 * scale {
            return Evaluation::poles_only(Status::Unstable, &poles);
        }
        if max_re > -1e-10 * scale {
            return Evaluation::poles_only(Status::Marginal, &poles);
        }
        let (step, dist) = match cl.time_figures(&poles, &self.time) {
            Ok(v) => v,
            Err(e) => return Evaluation::error(e),
        };
        let mut roots = self.roots.clone();
        if let Some((_, theta)) = approx
            && theta > 0.0
        {
            roots.push(C64::new(-1.0 / theta, 0.0));
        }
        let total = self.transport.total_s();
        if total > 0.0 {
            // The delay's phase turns fastest around w = 1/L.
            roots.push(C64::new(-1.0 / total, 0.0));
        }
        // A very high loop gain puts the crossover (and the closed-loop
        // poles) far above every open-loop mode, beyond the grid the
        // open-loop roots span; the grid must reach them or the crossover
        // and the sensitivity peak are missed (Ms below 1 was seen).
        let fastest = roots.iter().map(|r| r.norm()).fold(0.0, f64::max);
        if poles.iter().any(|p| p.norm() > 100.0 * fastest) {
            roots.extend(poles.iter().copied());
        }
        let range = FrequencyRange::from_roots(&roots, None);
        let freq = loop_figures(&|w| cl.loop_at(w), &range);
        let mut e = finish(step, dist, freq, &poles);
        // A delay rotates a continuous loop gain exactly, L(jw) e^{-jw tau}:
        // there the estimate is the exact figure.
        if let Some(f) = e.figures.as_mut() {
            f.delay_margin_s = f.delay_margin_estimate_s;
            f.delay_margin_searched = true;
        }
        e
    }

    /// The continuous loop with the hold and computation delay at `p`
    /// replaced by `kind`: a delay approximation of theta = the hold's
    /// low-frequency delay + d T (T/2 + d T for zero-order), or the hold's
    /// own transfer function by Pade (`HoldApprox::HoldPade22`). The
    /// transport delays stay as in the continuous design.
    pub fn hold_approx(&self, p: &Point, kind: HoldApprox) -> Evaluation {
        let period = 1.0 / p.rate_hz;
        // A delay whose phase stays below `NEGLIGIBLE_DELAY_RAD` up to the
        // loop's fastest mode and the sampling rate changes no figure, but
        // its stand-in's pole (about 2 / delay) sat so far out that the
        // stiff loop's slow poles read as marginal (the belt loop with a
        // first-order hold and 1e-10 of a period of delay) or its
        // coefficients overflowed (1e-300): it is left out.
        let w_ref = 2.0 * std::f64::consts::PI * self.fastest_mode_hz().max(p.rate_hz);
        let delay = match p.delay * period {
            d if d * w_ref <= NEGLIGIBLE_DELAY_RAD => 0.0,
            d => d,
        };
        let theta = p.hold.equivalent_delay_s(period) + delay;
        self.continuous_with(kind.actuator(p.hold, period, delay).map(|t| (t, theta)))
    }
}

/// Phase (rad) below which a delay is left out of the hold
/// approximations (`PreparedLoop::hold_approx`): a millionth of a radian
/// at the fastest frequency that matters (common practice, no source).
const NEGLIGIBLE_DELAY_RAD: f64 = 1e-6;

/// A point's rate and delay are usable.
fn check_point(p: &Point) -> Result<(), PointError> {
    if !(p.rate_hz > 0.0 && p.rate_hz.is_finite()) {
        return Err(PointError::Rate(p.rate_hz));
    }
    if !(p.delay >= 0.0 && p.delay.is_finite()) {
        return Err(PointError::Delay(p.delay));
    }
    Ok(())
}

pub(crate) fn finish(
    step: StepFigures,
    dist: DisturbanceFigures,
    freq: LoopFigures,
    poles: &[C64],
) -> Evaluation {
    let figures = Figures::from_parts(&step, &dist, &freq);
    // A NaN never decides a verdict: it means the numbers left double
    // range somewhere, so the point is an error that says so.
    if let Some(name) = figures.first_nan() {
        let mut e = Evaluation::error(format!(
            "the {name} is not a number (the loop's numbers are beyond double precision)"
        ));
        e.closed_loop_poles = poles.iter().map(|p| [p.re, p.im]).collect();
        return e;
    }
    Evaluation {
        status: Status::Ok,
        stable: true,
        figures: Some(figures),
        closed_loop_poles: poles.iter().map(|p| [p.re, p.im]).collect(),
        loop_detail: Some(freq),
    }
}
