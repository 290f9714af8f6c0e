//! The exact delay margin of a sampled loop: the smallest extra actuator
//! delay, of any length, at which the exact sampled loop loses stability,
//! found on the loop's poles (`docs/figures.md`).
//!
//! A continuous delay in the actuator path does not just rotate
//! `L(e^{jwT})` (the hold, the plant and the sensor see the command shifted
//! inside the period), so the phase-over-frequency figure is only an
//! estimate. Here every trial delay builds the exact loop with the
//! computation delay plus the extra one (whole periods as unit delays, the
//! fraction exact: `hold`), and takes the largest modulus of its poles
//! (stable below 1).
//!
//! The search (`first_unstable`, shared with the cascade's outer loop,
//! whose delays come in whole inner ticks): trial delays from 0 upward in
//! steps (`scan_step`) small enough that the loop's fastest gain crossing
//! turns by at most `STEP_RAD` between two trials and at most
//! `1 / STEPS_PER_PERIOD` of a period (so every frequency up to Nyquist
//! turns by at most pi / `STEPS_PER_PERIOD`, and the change of the hold's
//! shape, which repeats every period of delay, is seen at that many delays
//! a period), plus the estimate's own candidates (`phi_i / w_i` at each
//! crossing); a local peak of the trials' spectral radius near 1 is
//! searched for a short window of instability between its neighbours; the
//! first unstable trial is refined by bisection against the last stable
//! one. Every loop is capped.

use crate::model::poly::C64;
use crate::model::state_space::StateSpace;
use crate::model::transfer::DiscreteTransfer;
use crate::sampled::closed_loop::{LoopError, STABILITY_TOLERANCE};
use crate::sampled::frequency::{FrequencyRange, LoopFigures, unwrapped_crossings};
use crate::sampled::hold::{Actuation, HoldEquivalent, split_delay};

/// Largest rotation (rad) of the fastest gain crossing between two trial
/// delays of the scan.
const STEP_RAD: f64 = 0.1;
/// Fewest trial delays per period of delay. A delay changes the sampled
/// loop in two ways: whole periods rotate `L(e^{jwT})` by `wT`, and the
/// fraction also changes the shape of the command inside the period, which
/// repeats every period. A loop whose closed-loop pole sits next to the
/// unit circle can cross it and come back within a period (a random loop
/// had a window of 0.47 of a period, which steps of half a period skipped:
/// `docs/figures.md`).
pub const STEPS_PER_PERIOD: f64 = 8.0;
/// Most trial delays of the scan (64 periods at 8 a period is 512).
const MAX_SCAN: usize = 1000;
/// Most bisection steps (the bracket shrinks by 2^-48 of a step at most).
const MAX_BISECT: usize = 48;
/// Most trials of the search for a short window between the neighbours of
/// a peak of the spectral radius.
const MAX_PEAK_TRIALS: usize = 16;
/// The largest total delay searched, in periods: each period of delay is a
/// state of the loop, so its poles cost more with every period (a trial at
/// 400 periods costs a 400-state eigenvalue problem, and a scan of them
/// took minutes at 10 MHz). 64 periods covers loops sampled up to about
/// 500 times their crossover; beyond, the margin is "not located" and the
/// estimate stands beside it (`docs/figures.md`).
pub const MAX_DELAY_PERIODS: f64 = 64.0;

/// How the search ended.
#[derive(Debug, Clone, PartialEq)]
pub enum DelayMargin {
    /// The loop loses stability at this extra delay, s.
    Seconds(f64),
    /// No gain crossing: |L| never reaches 1 and no delay was searched
    /// (the estimate is infinite too).
    NoCrossing,
    /// Not located; the text says why.
    NotLocated(String),
}

/// Fewest fractions of a period whose loops the single-loop search
/// builds (`exact_delay_margin`): a delay changes the shape of the command
/// inside the period, which repeats every period, and a window of
/// instability can open and close within one (`docs/figures.md`).
const FRACTIONS_PER_PERIOD: f64 = 16.0;
/// Most fractions per period (the fastest crossing's turn per fraction
/// kept under `STEP_RAD` up to Nyquist needs 32).
const MAX_FRACTIONS: f64 = 32.0;
/// Most level passings followed in one fraction's closed form before it is
/// taken to stay stable (the first one loses stability on every loop but
/// a symmetric one).
const MAX_EVENTS: usize = 64;

/// One fraction's loop: its gain crossings in radians a period (`theta`,
/// in (0, pi)), their unwrapped phases (rad) and how |L| stands at the
/// ends; the loop with `m` more whole periods of delay has the same
/// crossings with phases `phi - m theta` (`z^-m` rotates, the magnitude
/// stays).
#[derive(Debug, Clone)]
struct Fraction {
    theta: Vec<f64>,
    phi: Vec<f64>,
    above_low: bool,
    /// `Some(j)`: |L| > 1 at Nyquist, where the phase is `j pi`.
    nyquist_turns: Option<i64>,
    /// The low end's unwrapped phase, deg (the branch for the others).
    low_phase_deg: f64,
}

/// The band of a phase (rad) between two -180 deg levels:
/// `floor((x - pi) / 2 pi)`.
fn band(x: f64) -> i64 {
    ((x - std::f64::consts::PI) / std::f64::consts::TAU).floor() as i64
}

impl Fraction {
    /// The signed number of times the loop gain with `m` more whole periods
    /// of delay crosses the ray (-inf, -1) over the whole unit circle, up to
    /// a constant that is the same for every fraction and delay (the
    /// encirclements of -1: `docs/figures.md`, exact delay margin). Each
    /// stretch of the circle where |L| > 1 adds the change of band of its
    /// phase from its start to its end; a stretch between two crossings
    /// counts twice (its mirror image below the real axis), one through
    /// w = 0 or through Nyquist once, from its mirrored end.
    fn encirclements(&self, m: f64) -> i64 {
        let at = |i: usize| self.phi[i] - m * self.theta[i];
        let (mut count, mut inside, mut start) = (0, self.above_low, None);
        for i in 0..self.theta.len() {
            if inside {
                count += match start {
                    None => band(at(i)) - band(-at(i)),
                    Some(a) => 2 * (band(at(i)) - band(at(a))),
                };
            } else {
                start = Some(i);
            }
            inside = !inside;
        }
        if let (true, Some(j)) = (inside, self.nyquist_turns) {
            // The phase at Nyquist, (j - m) pi, mirrors the stretch about it.
            let turns = j - m as i64;
            count += match start {
                None => (turns - 1).div_euclid(2) - (-turns - 1).div_euclid(2),
                Some(a) => turns + band(-at(a)) - band(at(a)),
            };
        }
        count
    }

    /// The first `r >= 1` at which the encirclements with `m0 + r` whole
    /// periods differ from `reference`: a crossing's phase passes a level
    /// (in closed form, `phi - m theta` falls by `theta` a period), or,
    /// with |L| > 1 at Nyquist, the next period (the loop gain there is
    /// real and turns from `a` to `-a` over each period, so it passes -1).
    /// None when it stays equal through `MAX_EVENTS` passings, or nothing
    /// ever passes.
    fn first_change(&self, m0: f64, reference: i64) -> Option<f64> {
        let mut r = 0.0;
        for _ in 0..MAX_EVENTS {
            let mut next = f64::INFINITY;
            if self.nyquist_turns.is_some() {
                next = r + 1.0;
            }
            for (&theta, &phi) in self.theta.iter().zip(&self.phi) {
                let x = phi - (m0 + r) * theta - std::f64::consts::PI;
                let above = x.rem_euclid(std::f64::consts::TAU);
                next = next.min(r + (above / theta).floor() + 1.0);
            }
            if !next.is_finite() {
                return None;
            }
            r = next;
            if self.encirclements(m0 + r) != reference {
                return Some(r);
            }
        }
        None
    }
}

/// The exact delay margin of the loop of `plant_model` (from
/// `hold::plant_and_sensor`) closed by `controller` at `period_s` with the
/// hold and delays of `act` (the extra delay adds to its actuator delay),
/// whose loop figures are computed on `range`. The loop must be stable
/// without extra delay.
///
/// Stability is counted, not searched on poles: a whole period of delay
/// rotates the loop gain by `wT` and leaves |L| alone, so the loop of a
/// delay `m + f` periods has the gain crossings of the loop of its fraction
/// `f` with phases turned by `m wT`, and it is stable exactly when its
/// encirclements of -1 equal those of the loop as it is (Nyquist: the
/// open-loop poles outside the circle do not change with the delay). The
/// loops of `FRACTIONS_PER_PERIOD` (or more) fractions of a period are
/// built once each; for each, the first whole number of periods that loses
/// stability is found in closed form from its crossings; the earliest over
/// the fractions is refined by bisection, each trial building the loop of
/// its own fraction. The cost does not grow with the number of periods.
pub fn exact_delay_margin(
    plant_model: &StateSpace,
    controller: &DiscreteTransfer,
    period_s: f64,
    act: &Actuation,
    range: &FrequencyRange,
) -> DelayMargin {
    let delay0 = act.delay_periods;
    let not_located = |why: String| DelayMargin::NotLocated(why);
    // The loop of a delay of `d` periods, as its fraction's crossings and
    // the whole periods beyond them.
    let fraction_at = |d: f64, branch: Option<f64>| -> Result<(Fraction, f64), String> {
        let (whole, fraction) = split_delay(d);
        let at = Actuation {
            delay_periods: fraction,
            ..*act
        };
        let hold = HoldEquivalent::with(plant_model, period_s, &at, 1)
            .map_err(|e| LoopError::PlantEquivalent(e).to_string())?;
        let pulse = hold.augmented();
        let l = |w: f64| {
            let z = C64::from_polar(1.0, w * period_s);
            controller.transfer.eval(z) * pulse.response_at(z, 0)
        };
        let x = unwrapped_crossings(&l, range, branch).ok_or_else(|| {
            format!("the crossings of |L| = 1 could not be counted with {d:.6} periods of delay")
        })?;
        // |L| alternates about 1 from crossing to crossing: a crossing
        // missed would miscount.
        if x.above_low ^ (x.at.len() % 2 == 1) != x.above_high {
            return Err(format!(
                "the crossings of |L| = 1 with {d:.6} periods of delay do not alternate"
            ));
        }
        let turns = x.high_phase_deg / 180.0;
        let nyquist_turns = x.above_high.then(|| turns.round() as i64);
        let f = Fraction {
            theta: x.at.iter().map(|c| c.0 * period_s).collect(),
            phi: x.at.iter().map(|c| c.1.to_radians()).collect(),
            above_low: x.above_low,
            nyquist_turns,
            low_phase_deg: x.low_phase_deg,
        };
        Ok((f, whole as f64))
    };
    let (f0, m0) = match fraction_at(delay0, None) {
        Ok(v) => v,
        Err(e) => return not_located(e),
    };
    let reference = f0.encirclements(m0);
    let branch = Some(f0.low_phase_deg);
    let stable_at = |d: f64| fraction_at(d, branch).map(|(f, m)| f.encirclements(m) == reference);
    // Fractions: every frequency up to the fastest crossing turns by at
    // most STEP_RAD from one to the next.
    let theta_fast = f0.theta.iter().copied().fold(0.0, f64::max);
    let n = (theta_fast / STEP_RAD)
        .ceil()
        .clamp(FRACTIONS_PER_PERIOD, MAX_FRACTIONS);
    let mut first: Option<f64> = None;
    for j in 1..=(n as usize) {
        let d = delay0 + j as f64 / n;
        let (f, m) = match fraction_at(d, branch) {
            Ok(v) => v,
            Err(e) => return not_located(e),
        };
        let r = if f.encirclements(m) != reference {
            Some(0.0)
        } else {
            f.first_change(m, reference)
        };
        if let Some(r) = r {
            first = Some(first.map_or(d + r, |v: f64| v.min(d + r)));
        }
    }
    let Some(unstable) = first else {
        return if f0.theta.is_empty() && f0.nyquist_turns.is_none() {
            DelayMargin::NoCrossing
        } else {
            not_located(format!(
                "the loop stayed stable at every delay counted ({MAX_EVENTS} level passings at each of {n} fractions of a period)"
            ))
        };
    };
    // Every trial below `unstable` is stable: it is a fraction's trial
    // before that fraction's first change.
    let (mut lo, mut hi) = ((unstable - 1.0 / n).max(delay0), unstable);
    for _ in 0..MAX_BISECT + 16 {
        if hi - lo <= 1e-10 * hi {
            break;
        }
        let mid = 0.5 * (lo + hi);
        match stable_at(mid) {
            Ok(true) => lo = mid,
            Ok(false) => hi = mid,
            Err(e) => return not_located(e),
        }
    }
    DelayMargin::Seconds((0.5 * (lo + hi) - delay0) * period_s)
}

/// The note of a search that had no usable step.
pub fn no_step(step: f64) -> String {
    format!("no usable delay step ({step})")
}

/// What a loop's gain crossings give a delay-margin search.
#[derive(Debug, Clone)]
pub struct CrossingSeeds {
    /// The fastest gain crossing, rad/s (sets the scan step).
    pub w_fast: f64,
    /// The estimate's candidate delays, s, ascending and positive: at each
    /// crossing `phi_i / w_i` and the same one full turn later.
    pub candidates_s: Vec<f64>,
}

/// The seeds of a delay-margin search from a loop's figures `freq`, or the
/// margin itself when there is nothing to search: no gain crossing
/// (`NoCrossing`), or a crossing that could not be located (`NotLocated`,
/// with the figures' notes).
pub fn crossing_seeds(freq: &LoopFigures) -> Result<CrossingSeeds, DelayMargin> {
    let two_pi = 2.0 * std::f64::consts::PI;
    let crossings: Vec<(f64, f64)> = freq
        .gain_crossings_hz
        .iter()
        .zip(&freq.phase_to_go_deg)
        .map(|(&f, &phi)| (two_pi * f, phi.to_radians()))
        .filter(|(w, _)| *w > 0.0 && w.is_finite())
        .collect();
    if crossings.is_empty() {
        return Err(if freq.notes.is_empty() {
            DelayMargin::NoCrossing
        } else {
            DelayMargin::NotLocated(freq.notes.join("; "))
        });
    }
    let mut candidates_s: Vec<f64> = crossings
        .iter()
        .flat_map(|&(w, phi)| [phi / w, (phi + two_pi) / w])
        .filter(|d| *d > 0.0 && d.is_finite())
        .collect();
    candidates_s.sort_by(|a, b| a.total_cmp(b));
    Ok(CrossingSeeds {
        w_fast: crossings.iter().map(|c| c.0).fold(0.0, f64::max),
        candidates_s,
    })
}

/// The scan step of a delay-margin search, s: the fastest gain crossing
/// `w_fast` (rad/s) turns by at most `STEP_RAD` and the delay moves by at
/// most `1 / STEPS_PER_PERIOD` of the loop's period `period_s`.
pub fn scan_step(w_fast: f64, period_s: f64) -> f64 {
    (STEP_RAD / w_fast).min(period_s / STEPS_PER_PERIOD)
}

/// What `first_unstable` searches: extra delays from 0 to `max`, in the
/// caller's unit (seconds, or inner ticks for a cascade).
#[derive(Debug, Clone)]
pub struct DelayScan {
    /// Largest extra delay tried.
    pub max: f64,
    /// Scan step (`scan_step`, in the caller's unit).
    pub step: f64,
    /// Delays tried on the way (the estimate's candidates), ascending.
    pub candidates: Vec<f64>,
    /// Whole units only: every trial is a whole number and the bisection
    /// stops at a bracket of one unit (a cascade's inner ticks).
    pub whole: bool,
}

/// How `first_unstable` ended.
#[derive(Debug, Clone, PartialEq)]
pub enum FirstUnstable<E> {
    /// The loop is stable at `stable` (and at every trial below it) and not
    /// stable at `unstable`; the two are one unit apart (`whole`) or within
    /// 1e-10 relative.
    Between { stable: f64, unstable: f64 },
    /// Stable at every trial up to this extra delay, the last one tried.
    StableUpTo(f64),
    /// The scan step is not a positive finite number (nothing was tried).
    NoStep(f64),
    /// A trial could not be computed; the error says why.
    Failed(E),
}

/// Whether a spectral radius is that of a stable loop (as
/// `ClosedLoop::stability`; NaN is not).
fn stable(rho: f64) -> bool {
    rho <= 1.0 - STABILITY_TOLERANCE
}

/// The first extra delay at which a loop is not stable: `radius_at(x)` is
/// the largest closed-loop pole modulus with extra delay `x` (the loop is
/// stable at 0). Trials from 0 upward by `scan.step` and at the
/// candidates, each one up to the first that is not stable; at a peak of
/// the spectral radius over three successive stable trials that comes
/// near 1 (within twice their own spread),
/// a golden-section search of the peak between its neighbours looks for a
/// window of instability the step would have skipped; then bisection
/// between the last stable and the first unstable trial. Every loop is
/// capped (`MAX_SCAN`, `MAX_PEAK_TRIALS`, `MAX_BISECT`).
pub fn first_unstable<E>(
    scan: &DelayScan,
    radius_at: impl Fn(f64) -> Result<f64, E>,
) -> FirstUnstable<E> {
    let snap = |x: f64| if scan.whole { x.floor() } else { x };
    let step = if scan.whole {
        scan.step.floor().max(1.0)
    } else {
        scan.step
    };
    if !(step > 0.0 && step.is_finite()) {
        return FirstUnstable::NoStep(step);
    }
    // The last three stable trials (delay, spectral radius), newest last.
    let mut recent: Vec<(f64, f64)> = Vec::with_capacity(3);
    let mut bracket = None;
    let mut x = 0.0;
    let mut next_candidate = 0;
    for _ in 0..MAX_SCAN {
        let mut next = x + step;
        while next_candidate < scan.candidates.len() && scan.candidates[next_candidate] <= x {
            next_candidate += 1;
        }
        if next_candidate < scan.candidates.len() && scan.candidates[next_candidate] < next {
            next =
                snap(scan.candidates[next_candidate]).max(x + if scan.whole { 1.0 } else { 0.0 });
        }
        if next > scan.max {
            break;
        }
        let rho = match radius_at(next) {
            Ok(v) => v,
            Err(e) => return FirstUnstable::Failed(e),
        };
        if !stable(rho) {
            bracket = Some((x, next));
            break;
        }
        x = next;
        if recent.len() == 3 {
            recent.remove(0);
        }
        recent.push((next, rho));
        if recent.len() == 3 {
            match window_at_peak(&recent, scan.whole, &radius_at) {
                Ok(Some(b)) => {
                    bracket = Some(b);
                    break;
                }
                Ok(None) => {}
                Err(e) => return FirstUnstable::Failed(e),
            }
        }
    }
    let Some((mut lo, mut hi)) = bracket else {
        return FirstUnstable::StableUpTo(x);
    };
    for _ in 0..MAX_BISECT {
        let done = if scan.whole {
            hi - lo <= 1.0
        } else {
            hi - lo <= 1e-10 * hi
        };
        if done {
            break;
        }
        let mid = snap(0.5 * (lo + hi));
        match radius_at(mid) {
            Ok(rho) if stable(rho) => lo = mid,
            Ok(_) => hi = mid,
            Err(e) => return FirstUnstable::Failed(e),
        }
    }
    FirstUnstable::Between {
        stable: lo,
        unstable: hi,
    }
}

/// A window of instability hidden between three stable trials `t` (ascending
/// delays) whose middle one is a peak of the spectral radius near 1: the
/// golden-section search of the peak between the outer two, stopped at the
/// first trial that is not stable. Returns (the largest stable delay tried
/// below it, that delay), or None when the peak stays stable.
fn window_at_peak<E>(
    t: &[(f64, f64)],
    whole: bool,
    radius_at: &impl Fn(f64) -> Result<f64, E>,
) -> Result<Option<(f64, f64)>, E> {
    let [(x0, r0), (x1, r1), (x2, r2)] = [t[0], t[1], t[2]];
    if !(r1 > r0 && r1 >= r2) {
        return Ok(None);
    }
    // Search only a peak within twice the trials' own spread of 1 (a rule
    // of thumb, common practice, no source: three trials can under-read a
    // sharp peak by about their spread; a peak far below 1 for its spread
    // is taken to hide no window).
    let spread = r1 - r0.min(r2);
    if r1 < 1.0 - STABILITY_TOLERANCE - 2.0 * spread {
        return Ok(None);
    }
    let snap = |x: f64| if whole { x.round() } else { x };
    let g = 0.5 * (5f64.sqrt() - 1.0);
    let (mut a, mut b) = (x0, x2);
    let mut tried = vec![x0, x1, x2];
    // The inner point with the larger radius, as golden section keeps.
    let (mut c, mut rc) = (x1, r1);
    for _ in 0..MAX_PEAK_TRIALS {
        // The larger of the two sub-intervals around c gets the new trial.
        let y = if c - a > b - c {
            snap(c - (1.0 - g) * (c - a))
        } else {
            snap(c + (1.0 - g) * (b - c))
        };
        if y <= a || y >= b || y == c || (whole && b - a <= 2.0) {
            break;
        }
        let ry = radius_at(y)?;
        if !stable(ry) {
            // x0 is stable and below y, so the fold has a stable start.
            let lo = tried.iter().copied().filter(|&v| v < y).fold(x0, f64::max);
            return Ok(Some((lo, y)));
        }
        tried.push(y);
        if ry > rc {
            if y < c {
                b = c;
            } else {
                a = c;
            }
            (c, rc) = (y, ry);
        } else if y < c {
            a = y;
        } else {
            b = y;
        }
        if !whole && b - a <= 1e-6 * b {
            break;
        }
    }
    Ok(None)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scan(step: f64, whole: bool) -> DelayScan {
        DelayScan {
            max: 100.0,
            step,
            candidates: Vec::new(),
            whole,
        }
    }

    #[test]
    fn monotone_radius_is_bisected_to_its_crossing() {
        // Closed form: rho(x) = 0.9 + 0.02 x crosses 1 - 1e-10 at
        // x = (0.1 - 1e-10) / 0.02.
        let r = first_unstable(&scan(0.3, false), |x| Ok::<f64, &str>(0.9 + 0.02 * x));
        let FirstUnstable::Between { stable, unstable } = r else {
            panic!("{r:?}");
        };
        let exact = (0.1 - 1e-10) / 0.02;
        assert!(stable <= exact && unstable >= exact, "{stable} {unstable}");
        assert!(unstable - stable <= 1e-9 * exact);
    }

    #[test]
    fn narrow_window_between_steps_is_found_at_its_peak() {
        // Closed form: a rising trend plus a bump at x = 3.3 that pokes
        // above 1 over |x - 3.3| < 0.05 sqrt(ln 2) (about 0.042), between
        // trials 0.25 apart; the trend alone reaches 1 only at x = 9.
        let rho = |x: f64| {
            Ok::<f64, &str>(0.991 + 0.001 * x + 0.006 * (-((x - 3.3) / 0.05).powi(2)).exp())
        };
        assert!(rho(3.25).unwrap() < 1.0 && rho(3.5).unwrap() < 1.0);
        let r = first_unstable(&scan(0.25, false), rho);
        let FirstUnstable::Between { stable, unstable } = r else {
            panic!("{r:?}");
        };
        assert!((3.24..3.31).contains(&stable), "{stable} {unstable}");
        assert!(unstable - stable <= 1e-9 * unstable);
        assert!(rho(unstable).unwrap() > 1.0 - STABILITY_TOLERANCE);
    }

    #[test]
    fn whole_ticks_end_one_tick_apart() {
        // Unstable from tick 37 on; steps of 5 ticks, a candidate at 36.
        let mut s = scan(5.0, true);
        s.candidates = vec![36.0];
        let r = first_unstable(&s, |x| {
            assert_eq!(x, x.floor(), "a trial between ticks: {x}");
            Ok::<f64, &str>(if x >= 37.0 { 1.01 } else { 0.5 })
        });
        assert_eq!(
            r,
            FirstUnstable::Between {
                stable: 36.0,
                unstable: 37.0
            }
        );
    }

    #[test]
    fn stable_everywhere_says_how_far() {
        let r = first_unstable(&scan(7.0, false), |_| Ok::<f64, &str>(0.5));
        assert_eq!(r, FirstUnstable::StableUpTo(98.0));
        let r = first_unstable(&scan(1.0, false), |_| Err("no poles"));
        assert_eq!(r, FirstUnstable::Failed("no poles"));
    }
}
