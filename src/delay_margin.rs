//! The exact delay margin of a sampled loop: the smallest extra actuator
//! delay, of any length, at which the exact sampled loop loses stability,
//! found on the loop's poles (`docs/figures.md`).
//!
//! A continuous delay in the actuator path does not just rotate
//! `L(e^{jwT})` (the hold, the plant and the sensor see the command shifted
//! inside the period), so the phase-over-frequency figure is only an
//! estimate. Here every trial delay builds the exact loop with the
//! computation delay plus the extra one (whole periods as unit delays, the
//! fraction exact: `hold`), and asks its poles whether it is still stable.
//!
//! The search: trial delays from 0 upward in steps small enough that the
//! loop's fastest gain crossing turns by at most `STEP_RAD` between two
//! trials (and at most half a period), plus the estimate's own candidates (`phi_i / w_i` at each
//! crossing), up to the first one that is not stable; then bisection between
//! the last stable and the first unstable trial. Both loops are capped.

use crate::closed_loop::{ClosedLoop, Stability};
use crate::frequency::LoopFigures;
use crate::hold::{Actuation, HoldEquivalent};
use crate::state_space::StateSpace;
use crate::transfer::DiscreteTransfer;

/// Largest rotation (rad) of the fastest gain crossing between two trial
/// delays of the scan.
const STEP_RAD: f64 = 0.1;
/// Most trial delays of the scan.
const MAX_SCAN: usize = 1000;
/// Most bisection steps (the bracket shrinks by 2^-48 of a step at most).
const MAX_BISECT: usize = 48;
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

/// The exact delay margin of the loop of `plant_model` (from
/// `hold::plant_and_sensor`) closed by `controller` at `period_s` with the
/// hold and delays of `act` (the extra delay adds to its actuator delay),
/// whose loop figures are `freq`
/// (the crossings seed the step and the candidates). The loop must be
/// stable without extra delay.
pub fn exact_delay_margin(
    plant_model: &StateSpace,
    controller: &DiscreteTransfer,
    period_s: f64,
    act: &Actuation,
    freq: &LoopFigures,
) -> DelayMargin {
    let delay_periods = act.delay_periods;
    let two_pi = 2.0 * std::f64::consts::PI;
    let crossings: Vec<(f64, f64)> = freq
        .gain_crossings_hz
        .iter()
        .zip(&freq.phase_to_go_deg)
        .map(|(&f, &phi)| (two_pi * f, phi.to_radians()))
        .filter(|(w, _)| *w > 0.0 && w.is_finite())
        .collect();
    if crossings.is_empty() {
        return if freq.notes.is_empty() {
            DelayMargin::NoCrossing
        } else {
            DelayMargin::NotLocated(freq.notes.join("; "))
        };
    }
    let max_delay_s = (MAX_DELAY_PERIODS - delay_periods).max(0.0) * period_s;
    let unstable_at = |extra_s: f64| -> Result<bool, String> {
        let d = delay_periods + extra_s / period_s;
        let at = Actuation {
            delay_periods: d,
            ..*act
        };
        let hold = HoldEquivalent::with(plant_model, period_s, &at, 1)
            .map_err(|e| format!("plant equivalent: {e}"))?;
        let cl =
            ClosedLoop::new(&hold, controller).map_err(|e| format!("closing the loop: {e}"))?;
        let poles = cl.poles().map_err(|e| format!("closed-loop poles: {e}"))?;
        Ok(ClosedLoop::stability(&poles) != Stability::Stable)
    };
    let w_fast = crossings.iter().map(|c| c.0).fold(0.0, f64::max);
    // At most half a period: a loop whose |L| stays near 1 up to Nyquist
    // can gain and lose stability within a period of extra delay.
    let step = (STEP_RAD / w_fast).min(0.5 * period_s);
    // Candidates: phi_i / w_i and the same one full turn later, each a
    // hair past, so a crossing the estimate predicts exactly is tried.
    let mut candidates: Vec<f64> = crossings
        .iter()
        .flat_map(|&(w, phi)| [phi / w, (phi + two_pi) / w])
        .map(|d| d * (1.0 + 1e-6))
        .filter(|&d| d > 0.0 && d <= max_delay_s)
        .collect();
    candidates.sort_by(|a, b| a.total_cmp(b));
    let mut next_candidate = 0;
    let (mut lo, mut hi) = (0.0, None);
    let mut x = 0.0;
    for _ in 0..MAX_SCAN {
        let mut next = x + step;
        while next_candidate < candidates.len() && candidates[next_candidate] <= x {
            next_candidate += 1;
        }
        if next_candidate < candidates.len() && candidates[next_candidate] < next {
            next = candidates[next_candidate];
        }
        if next > max_delay_s {
            break;
        }
        match unstable_at(next) {
            Ok(true) => {
                hi = Some(next);
                break;
            }
            Ok(false) => {
                lo = next;
                x = next;
            }
            Err(e) => return DelayMargin::NotLocated(e),
        }
    }
    let Some(mut hi) = hi else {
        return DelayMargin::NotLocated(format!(
            "the loop stayed stable for every extra delay tried up to {:.6e} s ({:.0} periods in all)",
            x,
            delay_periods + x / period_s
        ));
    };
    for _ in 0..MAX_BISECT {
        if hi - lo <= 1e-10 * hi {
            break;
        }
        let mid = 0.5 * (lo + hi);
        match unstable_at(mid) {
            Ok(true) => hi = mid,
            Ok(false) => lo = mid,
            Err(e) => return DelayMargin::NotLocated(e),
        }
    }
    DelayMargin::Seconds(0.5 * (lo + hi))
}
