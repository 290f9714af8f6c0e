//! Plant variants: the nominal parameter values plus the corners of the
//! parameter box or a Latin hypercube sample of it, each prepared as a
//! loop, and the verdict over all of them at one grid point.
//!
//! The controller is the design: it is built from the nominal parameter
//! values (including the `tustin-prewarped` frequency) and runs unchanged
//! against every variant, as it would on the bench. Its discretization at
//! a rate is therefore computed once and shared by every variant.
//!
//! A rate is robustly feasible when every variant is feasible there; the
//! worst variant is the one with the least slack (the first in variant
//! order on a tie, so results do not depend on the thread count).
//!
//! A coarse sweep row needs only that verdict ([`VariantSet::judge_verdict`]):
//! the variants are tried in an order that puts the likeliest failers first
//! and the row stops at the first that fails, keeping no worst-case figures
//! (a verdict-only row, `docs/figures.md`, "Plant variants"); a row where
//! every variant passes has had every variant evaluated and keeps its
//! worst-case figures. The search and the recommended rate judge every
//! variant ([`VariantSet::judge`]).

use std::sync::OnceLock;

use rayon::prelude::*;
use serde::Serialize;

use crate::case::Case;
use crate::error::Error;
use crate::model::transfer::DiscreteTransfer;
use crate::sampled::evaluate::{
    Evaluation, Figures, Given, PlantAt, Point, PointError, PreparedLoop,
};
use crate::sampled::feasibility::{Assessment, assess};
use crate::sampled::time_response::TimeFigure;
use crate::spec::{Spec, UncertaintyMode};

/// Parameter values of every variant, in the order of [`Case::params`]:
/// the nominal values first, then every corner of the box of ranges (the
/// ranged parameters at min or max, the others nominal) or `samples`
/// points of a Latin hypercube from `seed`. Only the nominal values when
/// the case has no `[uncertainty]`.
pub fn parameter_sets(case: &Case) -> Vec<Vec<f64>> {
    let nominal: Vec<f64> = case.params.iter().map(|p| p.nominal).collect();
    let ranged: Vec<usize> = (0..case.params.len())
        .filter(|&i| case.params[i].min < case.params[i].max)
        .collect();
    let mut out = vec![nominal.clone()];
    match case.uncertainty {
        None => {}
        Some(UncertaintyMode::Corners) => {
            for mask in 0u64..(1u64 << ranged.len()) {
                let mut v = nominal.clone();
                for (bit, &i) in ranged.iter().enumerate() {
                    let p = &case.params[i];
                    v[i] = if mask & (1 << bit) == 0 { p.min } else { p.max };
                }
                out.push(v);
            }
        }
        Some(UncertaintyMode::Samples { samples, seed }) => {
            let mut rng = SplitMix64(seed);
            // One random permutation of the n strata per ranged parameter,
            // and a uniform position inside each stratum.
            let columns: Vec<Vec<f64>> = ranged
                .iter()
                .map(|&i| {
                    let p = &case.params[i];
                    let mut strata: Vec<usize> = (0..samples).collect();
                    for k in (1..samples).rev() {
                        let j = (rng.next_f64() * (k + 1) as f64) as usize;
                        strata.swap(k, j.min(k));
                    }
                    strata
                        .iter()
                        .map(|&s| {
                            let u = (s as f64 + rng.next_f64()) / samples as f64;
                            p.min + u * (p.max - p.min)
                        })
                        .collect()
                })
                .collect();
            out.extend((0..samples).map(|k| {
                let mut v = nominal.clone();
                for (column, &i) in columns.iter().zip(&ranged) {
                    v[i] = column[k];
                }
                v
            }));
        }
    }
    out
}

/// A small, fast, reproducible generator (SplitMix64, Steele, Lea and
/// Flood 2014): enough for stratified sampling, and the same sequence on
/// every platform.
struct SplitMix64(u64);

impl SplitMix64 {
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1), 53 random bits.
    fn next_f64(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// Every variant of the plant, prepared for evaluation.
#[derive(Debug, Clone)]
pub struct VariantSet {
    /// Parameter names, in case order.
    pub names: Vec<String>,
    /// Parameter values per variant; variant 0 is the nominal one.
    pub values: Vec<Vec<f64>>,
    /// One prepared loop per variant, all with the nominal controller.
    pub loops: Vec<PreparedLoop>,
    /// The order a verdict-only row tries the variants in after the
    /// nominal one: farthest from the nominal values first (largest
    /// offset of any ranged parameter as a share of its range; the first
    /// in variant order on a tie), since a spec is lost first at the
    /// edges of the box. Index 0 (nominal) is not in it.
    pub trial_order: Vec<usize>,
}

impl VariantSet {
    /// Prepare every variant of `case` around the nominal loop `nominal`.
    pub fn new(case: &Case, nominal: &PreparedLoop) -> Result<VariantSet, Error> {
        let values = parameter_sets(case);
        let prewarp_hz = nominal
            .prewarp_rad_s
            .map(|w| w / (2.0 * std::f64::consts::PI));
        let loops = values
            .par_iter()
            .enumerate()
            .map(|(i, v)| {
                if i == 0 {
                    return Ok(nominal.clone());
                }
                let m = case.models_at(v)?;
                PreparedLoop::with_transport(
                    &m.plant,
                    &m.sensor,
                    &nominal.controller,
                    prewarp_hz,
                    nominal.time,
                    nominal.transport,
                )
                .map_err(|e| Error::Model {
                    context: format!(
                        "{}: preparing the loop {}",
                        case.source.display(),
                        describe(
                            &case
                                .params
                                .iter()
                                .map(|p| p.name.clone())
                                .collect::<Vec<_>>(),
                            v
                        )
                    ),
                    reason: e,
                })
            })
            .collect::<Result<Vec<_>, Error>>()?;
        let trial_order = trial_order(case, &values);
        Ok(VariantSet {
            names: case.params.iter().map(|p| p.name.clone()).collect(),
            values,
            loops,
            trial_order,
        })
    }

    /// Number of variants, the nominal one included.
    pub fn len(&self) -> usize {
        self.values.len()
    }

    /// Always false: the nominal variant is always there.
    pub fn is_empty(&self) -> bool {
        self.values.is_empty()
    }

    /// `k = 30, tau = 0.12` for variant `i`.
    pub fn describe(&self, i: usize) -> String {
        describe(&self.names, &self.values[i])
    }

    /// Variant `i` as (name, value) pairs.
    pub fn named(&self, i: usize) -> Vec<(String, f64)> {
        self.names
            .iter()
            .cloned()
            .zip(self.values[i].iter().copied())
            .collect()
    }

    /// The plant side of every variant at `p`, each built when first asked
    /// for (a verdict-only row builds only those of the variants it tries).
    pub fn plants_at(&self, p: &Point) -> LazyPlants<'_> {
        LazyPlants::new(&self.loops, p)
    }

    /// The robust verdict at `p` for a coarse sweep row: the nominal
    /// evaluation (always), then the variants in the order `hint` (the
    /// variant that failed at a neighbouring point, tried first), then
    /// [`VariantSet::trial_order`], stopping at the first that fails the
    /// spec. The row is then verdict-only: its verdict is exact (a variant
    /// fails), the variant and limit are that first failure, not the
    /// worst over every variant, and no worst-case figures are kept. When
    /// every variant passes (or the last one tried is the only one that
    /// fails), every variant was evaluated and the result is the one of
    /// [`VariantSet::judge`], bit for bit.
    pub fn judge_verdict(
        &self,
        spec: &Spec,
        p: &Point,
        c: Result<&DiscreteTransfer, &PointError>,
        plants: &LazyPlants,
        hint: Option<usize>,
    ) -> (Evaluation, RobustPoint) {
        let n = self.len();
        let eval_at = |i: usize| {
            let given = Given {
                controller: Some(c),
                plant: Some(plants.get(i)),
                exact_delay_margin: false,
            };
            self.loops[i].evaluate(p, given)
        };
        let mut evals: Vec<Option<Evaluation>> = vec![None; n];
        let mut tried = 0usize;
        let order = std::iter::once(0)
            .chain(hint.filter(|&h| h > 0 && h < n))
            .chain(
                self.trial_order
                    .iter()
                    .copied()
                    .filter(|&i| Some(i) != hint),
            );
        for i in order {
            let e = eval_at(i);
            tried += 1;
            let a = assess(&e, spec);
            if !a.feasible && tried < n {
                let unstable = usize::from(e.figures.is_none())
                    + evals
                        .iter()
                        .flatten()
                        .filter(|e| e.figures.is_none())
                        .count();
                let nominal = match i {
                    0 => e,
                    _ => evals[0].take().unwrap_or_else(|| eval_at(0)),
                };
                let robust = RobustPoint {
                    worst: i,
                    assessment: a,
                    unstable,
                    worst_figures: None,
                    each: Vec::new(),
                    evaluated: tried,
                    verdict_only: true,
                };
                return (nominal, robust);
            }
            evals[i] = Some(e);
        }
        let evals: Vec<Evaluation> = evals.into_iter().flatten().collect();
        let assessments: Vec<Assessment> = evals.iter().map(|e| assess(e, spec)).collect();
        let nominal = evals[0].clone();
        (nominal, RobustPoint::from_parts(evals, assessments, false))
    }

    /// Evaluate every variant at `p` with the controller `c` (the nominal
    /// design at this rate, shared by every variant; `Err` says why it
    /// could not be built) and return the nominal evaluation and the
    /// verdict over all variants, as `how` asks ([`Judging`]).
    pub fn judge(
        &self,
        spec: &Spec,
        p: &Point,
        c: Result<&DiscreteTransfer, &PointError>,
        how: Judging,
    ) -> (Evaluation, RobustPoint) {
        let evals: Vec<Evaluation> = self
            .loops
            .par_iter()
            .enumerate()
            .map(|(i, lp)| {
                let given = Given {
                    controller: Some(c),
                    plant: how.plants.map(|each| each.get(i)),
                    exact_delay_margin: how.exact_delay_margin,
                };
                lp.evaluate(p, given)
            })
            .collect();
        let assessments: Vec<Assessment> = evals.iter().map(|e| assess(e, spec)).collect();
        let nominal = evals[0].clone();
        (
            nominal,
            RobustPoint::from_parts(evals, assessments, how.keep),
        )
    }
}

/// How [`VariantSet::judge`] judges the variants at a point.
#[derive(Clone, Copy, Default)]
pub struct Judging<'a> {
    /// Keep every variant's result (`RobustPoint::each`).
    pub keep: bool,
    /// Each variant's plant side at the point's rate and delay
    /// (`PreparedLoop::hold_at`, built on first use), shared with the
    /// other methods of a sweep group; None builds its own.
    pub plants: Option<&'a LazyPlants<'a>>,
    /// Search every variant's exact delay margin too (the recommended
    /// rate: the worst-case figures then carry the smallest, `worst_of`).
    pub exact_delay_margin: bool,
}

/// The plant side (`PreparedLoop::hold_at`) of each of several loops at
/// one (rate, delay, hold), built on first use and then shared (by the
/// methods of a sweep group): a verdict-only row builds only those of the
/// variants it tries.
pub struct LazyPlants<'a> {
    loops: &'a [PreparedLoop],
    point: Point,
    each: Vec<OnceLock<Result<PlantAt, PointError>>>,
}

impl<'a> LazyPlants<'a> {
    /// The plant sides of `loops` at `p`'s rate, delay and hold, none
    /// built yet.
    pub fn new(loops: &'a [PreparedLoop], p: &Point) -> LazyPlants<'a> {
        LazyPlants {
            loops,
            point: *p,
            each: (0..loops.len()).map(|_| OnceLock::new()).collect(),
        }
    }

    /// Loop `i`'s plant side, built here the first time.
    pub fn get(&self, i: usize) -> Result<&PlantAt, &PointError> {
        self.each[i]
            .get_or_init(|| self.loops[i].hold_at(&self.point))
            .as_ref()
    }
}

/// The order a verdict-only row tries the variants in after the nominal
/// one (see [`VariantSet::trial_order`]).
fn trial_order(case: &Case, values: &[Vec<f64>]) -> Vec<usize> {
    let offset = |v: &[f64]| {
        case.params
            .iter()
            .zip(v)
            .filter(|(p, _)| p.min < p.max)
            .map(|(p, x)| (x - p.nominal).abs() / (p.max - p.min))
            .fold(0.0, f64::max)
    };
    let mut order: Vec<(usize, f64)> = (1..values.len()).map(|i| (i, offset(&values[i]))).collect();
    // Stable: equal offsets keep variant order.
    order.sort_by(|a, b| b.1.total_cmp(&a.1));
    order.into_iter().map(|(i, _)| i).collect()
}

/// `k = 30, tau = 0.12`.
fn describe(names: &[String], values: &[f64]) -> String {
    names
        .iter()
        .zip(values)
        .map(|(n, v)| format!("{n} = {v}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The verdict over every variant at one grid point.
#[derive(Debug, Clone)]
pub struct RobustPoint {
    /// The worst variant (least slack; the first on a tie).
    pub worst: usize,
    /// Its assessment: feasible only when every variant is.
    pub assessment: Assessment,
    /// Variants that are not stable (unstable, marginal or failed).
    pub unstable: usize,
    /// Each figure at its worst over the variants (None when some variant
    /// is not stable).
    pub worst_figures: Option<Figures>,
    /// Every variant's evaluation and verdict, when asked to keep them.
    pub each: Vec<(Evaluation, Assessment)>,
    /// Variants evaluated: all of them, or fewer on a verdict-only row.
    pub evaluated: usize,
    /// True when the row stopped at the first variant that fails
    /// ([`VariantSet::judge_verdict`]): `worst` and `assessment` are that
    /// variant's, `unstable` counts only the variants evaluated, and
    /// there are no worst-case figures.
    pub verdict_only: bool,
}

impl RobustPoint {
    fn from_parts(evals: Vec<Evaluation>, assessments: Vec<Assessment>, keep: bool) -> RobustPoint {
        let mut worst = 0;
        for (i, a) in assessments.iter().enumerate() {
            if a.slack < assessments[worst].slack {
                worst = i;
            }
        }
        let unstable = evals.iter().filter(|e| e.figures.is_none()).count();
        let figs: Vec<&Figures> = evals.iter().filter_map(|e| e.figures.as_ref()).collect();
        let worst_figures = (unstable == 0).then(|| worst_of(&figs)).flatten();
        let assessment = assessments[worst].clone();
        RobustPoint {
            worst,
            assessment,
            unstable,
            worst_figures,
            evaluated: evals.len(),
            verdict_only: false,
            each: if keep {
                evals.into_iter().zip(assessments).collect()
            } else {
                Vec::new()
            },
        }
    }
}

/// Each figure at its worst over `figs`: the largest overshoot, settling,
/// rise and recovery time (a response that never settles is the worst),
/// disturbance peak, command peak and sensitivity peak; the smallest phase
/// and delay margin and the gain margin of smallest size (a missing margin
/// is infinite, the best).
/// `y_final`, the crossover and the horizon come from the variant with the
/// smallest phase margin, the first when none has one.
pub fn worst_of(figs: &[&Figures]) -> Option<Figures> {
    let first = *figs.first()?;
    let max_f = |get: &dyn Fn(&Figures) -> f64| {
        figs.iter()
            .map(|f| get(f))
            .fold(f64::NEG_INFINITY, f64::max)
    };
    // Upper-limited figure that may be missing (missing is worst).
    let max_opt = |get: &dyn Fn(&Figures) -> Option<f64>| {
        figs.iter()
            .map(|f| get(f))
            .try_fold(f64::NEG_INFINITY, |acc, v| v.map(|v| acc.max(v)))
    };
    // Lower-limited margin that may be missing (missing is infinite).
    let min_margin =
        |get: &dyn Fn(&Figures) -> Option<f64>| figs.iter().filter_map(|f| get(f)).reduce(f64::min);
    let by_pm = figs
        .iter()
        .filter(|f| f.phase_margin_deg.is_some())
        .min_by(|a, b| {
            a.phase_margin_deg
                .unwrap()
                .total_cmp(&b.phase_margin_deg.unwrap())
        })
        .copied()
        .unwrap_or(first);
    Some(Figures {
        y_final: by_pm.y_final,
        overshoot_pct: max_opt(&|f| f.overshoot_pct),
        settling_time_s: max_opt(&|f| f.settling_time_s),
        rise_time_s: max_opt(&|f| f.rise_time_s),
        disturbance_peak: max_f(&|f| f.disturbance_peak),
        recovery_time_s: max_opt(&|f| f.recovery_time_s),
        u_peak: max_f(&|f| f.u_peak),
        // The gain margin's size is what the limit bounds (a negative
        // margin keeps its sign): the worst is the one nearest 0 dB.
        gain_margin_db: figs
            .iter()
            .filter_map(|f| f.gain_margin_db)
            .min_by(|a, b| a.abs().total_cmp(&b.abs())),
        phase_margin_deg: min_margin(&|f| f.phase_margin_deg),
        crossover_hz: by_pm.crossover_hz,
        // A margin not located on some variant leaves the worst unknown.
        delay_margin_s: match figs.iter().any(|f| f.delay_margin_not_located()) {
            true => None,
            false => min_margin(&|f| f.delay_margin_s),
        },
        delay_margin_estimate_s: min_margin(&|f| f.delay_margin_estimate_s),
        sensitivity_peak: max_f(&|f| f.sensitivity_peak),
        horizon_s: figs.iter().map(|f| f.horizon_s).fold(0.0, f64::max),
        undecided: union(figs.iter().map(|f| &f.undecided)),
        not_computed: union(figs.iter().map(|f| &f.not_computed)),
        delay_margin_searched: figs.iter().all(|f| f.delay_margin_searched),
        loop_notes: {
            let mut notes: Vec<String> = figs.iter().flat_map(|f| f.loop_notes.clone()).collect();
            notes.dedup();
            notes
        },
    })
}

/// The time figures listed by any of `lists`, each once, in order of
/// appearance.
fn union<'a>(lists: impl Iterator<Item = &'a Vec<TimeFigure>>) -> Vec<TimeFigure> {
    let mut keys: Vec<TimeFigure> = Vec::new();
    for k in lists.flatten() {
        if !keys.contains(k) {
            keys.push(*k);
        }
    }
    keys
}

/// The parameter values of the worst variant, for reports.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct NamedValue {
    pub name: String,
    pub value: f64,
}

#[cfg(test)]
mod tests {
    use super::*;

    fn figs(gm: Option<f64>, pm: Option<f64>, os: Option<f64>) -> Figures {
        Figures {
            y_final: 1.0,
            overshoot_pct: os,
            settling_time_s: Some(0.1),
            rise_time_s: Some(0.01),
            disturbance_peak: 0.5,
            recovery_time_s: Some(0.2),
            u_peak: 3.0,
            gain_margin_db: gm,
            phase_margin_deg: pm,
            crossover_hz: Some(10.0),
            delay_margin_s: Some(0.01),
            delay_margin_estimate_s: Some(0.009),
            sensitivity_peak: 1.5,
            horizon_s: 1.0,
            undecided: Vec::new(),
            not_computed: Vec::new(),
            loop_notes: Vec::new(),
            delay_margin_searched: true,
        }
    }

    #[test]
    fn worst_gain_margin_is_the_one_nearest_zero_db() {
        // -25.8 dB and -13.8 dB: the limit bounds the size, so -13.8 is
        // the worse (the loop tolerates less gain change).
        let a = figs(Some(-25.8), Some(40.0), Some(10.0));
        let b = figs(Some(-13.8), Some(50.0), None);
        let c = figs(None, None, Some(30.0));
        let w = worst_of(&[&a, &b, &c]).unwrap();
        assert_eq!(w.gain_margin_db, Some(-13.8));
        assert_eq!(w.phase_margin_deg, Some(40.0));
        // A response with no overshoot figure (y_final = 0) is the worst.
        assert_eq!(w.overshoot_pct, None);
        let w = worst_of(&[&a, &c]).unwrap();
        assert_eq!(w.overshoot_pct, Some(30.0));
    }
}
