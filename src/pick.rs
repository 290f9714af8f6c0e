//! The answer a user comes for: per method the slowest rate that meets the
//! spec, the recommended method and rate with headroom, its CPU load, and
//! the rate window between the spec and the CPU budget.

use rayon::prelude::*;
use serde::Serialize;

use crate::budget::{self, RateWindow};
use crate::case::Case;
use crate::discretize::Method;
use crate::error::Error;
use crate::evaluate::{Evaluation, Figures, Point, PreparedLoop};
use crate::feasibility::{LimitCheck, assess, check_figures};
use crate::search::{SearchObserver, SlowestRate, method_label, slowest_rate};
use crate::sweep::{self, SweepRow};
use crate::tf::Controller;
use crate::time_response::TimeOptions;

/// Build the rate-independent part of the loop from a case (nominal
/// parameter values).
pub fn prepare(case: &Case) -> Result<PreparedLoop, Error> {
    let m = case.nominal()?;
    let time = TimeOptions {
        band: case.spec.settling_band_pct / 100.0,
        ..TimeOptions::default()
    };
    PreparedLoop::new(&m.plant, &m.sensor, &m.controller, case.prewarp_hz, time).map_err(|e| {
        Error::Model {
            context: format!("{}: preparing the loop", case.source.display()),
            source: e,
        }
    })
}

/// The methods of the sweep: the case's list, or "given in z".
pub fn case_methods(case: &Case) -> Vec<Option<Method>> {
    if case.methods.is_empty() {
        vec![None]
    } else {
        case.methods.iter().copied().map(Some).collect()
    }
}

/// The grid of points the case asks for: the case's rates, or only the
/// controller's own rate when it is given in z.
pub fn case_grid(case: &Case, lp: &PreparedLoop) -> Vec<Point> {
    let rates = match &lp.controller {
        Controller::Discrete(d) => vec![1.0 / d.period_s],
        Controller::Continuous(_) => case.rates.grid(),
    };
    sweep::grid(&rates, &case_methods(case), &case.compute_delays)
}

/// The recommended design.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Recommended {
    pub method: String,
    pub compute_delay: f64,
    /// `f_star` of this method, Hz.
    pub slowest_rate_hz: f64,
    /// `f_star * headroom`, rounded up to a timer rate when a timer is given.
    pub rate_hz: f64,
    pub period_s: f64,
    /// Timer divider that makes `rate_hz`, when `[budget] timer_hz` is given.
    pub timer_divider: Option<u64>,
    pub cpu_load_pct: Option<f64>,
    pub cycles_per_update: Option<f64>,
    pub figures: Option<Figures>,
    pub checks: Vec<LimitCheck>,
    pub feasible: bool,
}

/// The whole answer (`pick.json`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PickReport {
    pub title: String,
    /// The continuous design's figures, and the limits it already fails.
    pub design: Option<Figures>,
    pub design_failures: Vec<LimitCheck>,
    pub methods: Vec<SlowestRate>,
    pub recommended: Option<Recommended>,
    /// `[low, high]` when a budget is given and the window is not empty.
    pub window_hz: Option<[f64; 2]>,
    /// The window with both ends even when empty.
    pub window: Option<RateWindow>,
    /// The budget's ceiling rate for the recommended method, Hz.
    pub cpu_ceiling_hz: Option<f64>,
    /// What would open an empty window.
    pub advice: Vec<String>,
    pub headroom: f64,
    /// The computation delay the recommendation is made at (the largest
    /// the case lists: the conservative choice).
    pub design_delay: f64,
    pub notes: Vec<String>,
}

impl PickReport {
    /// True when there is a usable answer: a recommendation inside a
    /// non-empty window (or no budget to bound it).
    pub fn has_answer(&self) -> bool {
        self.recommended.is_some() && !self.window.as_ref().is_some_and(|w| w.empty)
    }
}

/// A report with no search made (for `sweep`): the design's figures and
/// nothing else, so outputs that need no answer can still be drawn.
pub fn unsearched(case: &Case, lp: &PreparedLoop) -> PickReport {
    PickReport {
        title: case.title.clone(),
        design: lp.design.as_ref().and_then(|d| d.figures.clone()),
        design_failures: Vec::new(),
        methods: Vec::new(),
        recommended: None,
        window_hz: None,
        window: None,
        cpu_ceiling_hz: None,
        advice: Vec::new(),
        headroom: case.spec.headroom,
        design_delay: case.compute_delays.iter().copied().fold(0.0, f64::max),
        notes: vec!["sweep only: no search was made".into()],
    }
}

/// Search every (method, delay) series of a finished sweep and make the
/// recommendation.
pub fn pick(
    case: &Case,
    lp: &PreparedLoop,
    rows: &[SweepRow],
    observer: &dyn SearchObserver,
) -> PickReport {
    let spec = &case.spec;
    let mut report = PickReport {
        design: None,
        notes: Vec::new(),
        ..unsearched(case, lp)
    };
    let design_delay = report.design_delay;
    if case.params.iter().any(|p| p.min < p.max) || case.uncertainty.is_some() {
        report.notes.push(
            "parameter ranges and [uncertainty] are read but not evaluated yet: every figure is for the nominal parameters".into(),
        );
    }
    if let Some(design) = &lp.design {
        match &design.figures {
            Some(f) => {
                report.design = Some(f.clone());
                report.design_failures = check_figures(f, spec)
                    .into_iter()
                    .filter(|c| !c.pass)
                    .collect();
            }
            None => report.notes.push(format!(
                "the continuous design is {}",
                design.status.label()
            )),
        }
        if !report.design_failures.is_empty() || design.figures.is_none() {
            report.notes.push(
                "the continuous design already fails the spec: no sampling rate can fix that; revise the controller or the spec first".into(),
            );
            return report;
        }
    }

    // Series in grid order: (method, delay) -> rows sorted by rate.
    let mut series: Vec<Vec<&SweepRow>> = Vec::new();
    for r in rows {
        match series.last_mut() {
            Some(s) if s[0].point.method == r.point.method && s[0].point.delay == r.point.delay => {
                s.push(r)
            }
            _ => series.push(vec![r]),
        }
    }
    for s in series.iter_mut() {
        s.sort_by(|a, b| a.point.rate_hz.total_cmp(&b.point.rate_hz));
    }
    report.methods = series
        .par_iter()
        .map(|s| slowest_rate(lp, spec, s, observer))
        .collect();
    if let Controller::Discrete(_) = &lp.controller {
        // One rate only: "at or below" the range floor does not apply.
        for m in report.methods.iter_mut() {
            m.at_range_floor = false;
        }
    }

    let best = report
        .methods
        .iter()
        .filter(|m| m.compute_delay == design_delay)
        .filter_map(|m| m.slowest_rate_hz.map(|f| (m, f)))
        .min_by(|a, b| a.1.total_cmp(&b.1));
    let Some((best, f_star)) = best else {
        report
            .notes
            .push("no method meets the spec at the fastest swept rate".into());
        return report;
    };
    let method = case_methods(case)
        .into_iter()
        .find(|m| method_label(*m) == best.method)
        .flatten();
    let mut rate = f_star * spec.headroom;
    let mut divider = None;
    if let Controller::Discrete(d) = &lp.controller {
        // A controller given in z runs at its own rate only: no headroom,
        // no timer rounding.
        rate = 1.0 / d.period_s;
        report.notes.push(format!(
            "the controller is given in z at {rate} Hz: it can run only at that rate, so no headroom is applied"
        ));
        if let Some(timer) = case.budget.as_ref().and_then(|b| b.timer_hz) {
            let n = (timer / rate).round();
            if n < 1.0 || ((timer / n) - rate).abs() > 1e-9 * rate {
                report.notes.push(format!(
                    "the timer ({timer} Hz) cannot make exactly {rate} Hz"
                ));
            } else {
                divider = Some(n as u64);
            }
        }
    } else if let Some(timer) = case.budget.as_ref().and_then(|b| b.timer_hz) {
        match budget::timer_rate_at_least(timer, rate) {
            Some((r, n)) => {
                rate = r;
                divider = Some(n);
            }
            None => report.notes.push(format!(
                "the timer ({timer} Hz) cannot make {rate:.6} Hz: the rate is shown unrounded"
            )),
        }
    }
    if rate > case.rates.max_hz {
        report.notes.push(format!(
            "the recommended rate {rate:.6} Hz is above the swept range (max_hz = {} Hz)",
            case.rates.max_hz
        ));
    }
    let p = Point {
        rate_hz: rate,
        method,
        delay: design_delay,
    };
    let eval: Evaluation = lp.sampled(&p);
    let a = assess(&eval, spec);
    let controller = lp.controller_at(rate, method).ok();
    let (cycles, load) = match case.budget.as_ref() {
        Some(b) => {
            let c = budget::cycles_per_update(b, controller.as_ref());
            (c, c.map(|c| budget::load_pct(b, c, rate)))
        }
        None => (None, None),
    };
    report.recommended = Some(Recommended {
        method: best.method.clone(),
        compute_delay: design_delay,
        slowest_rate_hz: f_star,
        rate_hz: rate,
        period_s: 1.0 / rate,
        timer_divider: divider,
        cpu_load_pct: load,
        cycles_per_update: cycles,
        figures: eval.figures.clone(),
        checks: a.checks.clone(),
        feasible: a.feasible,
    });
    if let (Some(b), Some(c)) = (case.budget.as_ref(), cycles) {
        let ceiling = budget::ceiling_hz(b, c);
        let w = RateWindow::new(rate, ceiling);
        report.cpu_ceiling_hz = Some(ceiling);
        if w.empty {
            report.advice = empty_window_advice(case, &report, rate, ceiling, c);
        } else {
            report.window_hz = Some([rate, ceiling]);
        }
        report.window = Some(w);
    }
    report
}

fn empty_window_advice(
    case: &Case,
    report: &PickReport,
    rate: f64,
    ceiling: f64,
    cycles: f64,
) -> Vec<String> {
    let mut out = Vec::new();
    let Some(b) = case.budget.as_ref() else {
        return out;
    };
    out.push(format!(
        "a faster CPU: at least {:.1} MHz at {} % load",
        rate * cycles / (b.max_load_pct / 100.0) / 1e6,
        b.max_load_pct
    ));
    out.push(format!(
        "a cheaper update: at most {:.0} cycles per update (now {:.0})",
        (b.max_load_pct / 100.0) * b.cpu_hz / rate,
        cycles
    ));
    out.push(format!(
        "a higher load limit: {:.1} % would be needed",
        rate * cycles / b.cpu_hz * 100.0
    ));
    if let Some(r) = &report.recommended {
        let lim = report
            .methods
            .iter()
            .find(|m| m.method == r.method && m.compute_delay == r.compute_delay)
            .and_then(|m| m.limiting.clone())
            .unwrap_or_default();
        out.push(format!(
            "a looser spec: `{lim}` is what sets the slowest rate"
        ));
    }
    let shorter: Vec<String> = report
        .methods
        .iter()
        .filter(|m| m.compute_delay < report.design_delay)
        .filter_map(|m| m.slowest_rate_hz.map(|f| (m, f)))
        .filter(|(_, f)| f * case.spec.headroom <= ceiling)
        .map(|(m, f)| {
            format!(
                "{} at delay {} (f_star {:.4} Hz)",
                m.method, m.compute_delay, f
            )
        })
        .collect();
    if !shorter.is_empty() {
        out.push(format!(
            "a shorter computation delay fits the budget: {}",
            shorter.join(", ")
        ));
    }
    out
}
