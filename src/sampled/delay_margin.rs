//! The exact delay margin of a sampled loop: the smallest extra actuator
//! delay, of any length, at which the exact sampled loop loses stability
//! (`docs/figures.md`).
//!
//! A continuous delay in the actuator path does not just rotate
//! `L(e^{jwT})` (the hold, the plant and the sensor see the command shifted
//! inside the period), so the phase-over-frequency figure is only an
//! estimate. The exact loop of a delay of `m + f` periods (`m` whole, `f`
//! the fraction: `hold::split_delay`) is `z^-m` times the exact loop of the
//! fraction alone: it has that loop's gain crossings, with phases turned by
//! `m wT`. By the Nyquist criterion it is stable exactly when its
//! encirclements of -1 equal those of the loop as it is, and those are
//! counted from the crossings (`Fraction::encirclements`). So the search
//! (`first_loss`, shared with the cascade's outer loop, whose delays come
//! in whole inner ticks) builds the loops of a few fractions of a period
//! once each, finds for each the first whole number of periods that
//! changes the count in closed form (`Fraction::first_change`), and refines
//! the earliest by bisection. Its cost does not grow with the number of
//! periods. Every loop is capped.

use crate::model::poly::C64;
use crate::model::state_space::StateSpace;
use crate::model::transfer::DiscreteTransfer;
use crate::sampled::closed_loop::LoopError;
use crate::sampled::frequency::{FrequencyRange, unwrapped_crossings};
use crate::sampled::hold::{Actuation, HoldEquivalent, split_delay};

/// Largest turn (rad) of the fastest gain crossing from one trial fraction
/// of a period to the next.
const STEP_RAD: f64 = 0.1;
/// Fewest fractions of a period whose loops the search builds: a delay
/// changes the shape of the command inside the period, which repeats every
/// period, and a closed-loop pole next to the unit circle can cross it and
/// come back within a period (random loops had windows of 0.47 and 0.14
/// of a period: `docs/figures.md`).
const FRACTIONS_PER_PERIOD: usize = 16;
/// Most fractions per period (the fastest crossing's turn per fraction
/// kept under `STEP_RAD` up to Nyquist needs 32).
const MAX_FRACTIONS: usize = 32;
/// Most level passings followed in one fraction's closed form before it is
/// taken to stay stable (the first one loses stability on every loop but
/// a symmetric one).
const MAX_EVENTS: usize = 64;
/// Most bisection steps (the bracket shrinks by 2^-64 of a fraction).
const MAX_BISECT: usize = 64;

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

/// One fraction's loop: its gain crossings in radians a period (`theta`,
/// in (0, pi)), their unwrapped phases (rad) and how |L| stands at the
/// ends; the loop with `m` more whole periods of delay has the same
/// crossings with phases `phi - m theta` (`z^-m` rotates, the magnitude
/// stays).
#[derive(Debug, Clone)]
pub(crate) struct Fraction {
    theta: Vec<f64>,
    phi: Vec<f64>,
    above_low: bool,
    /// `Some(j)`: |L| > 1 at Nyquist, where the phase is `j pi`.
    nyquist_turns: Option<i64>,
    /// The low end's unwrapped phase, deg (the branch for the others).
    low_phase_deg: f64,
}

/// The band of a phase (rad) between two -180 deg levels:
/// `floor((x - pi) / 2 pi)`, clamped far beyond any loop's phase so that
/// sums of bands cannot overflow.
fn band(x: f64) -> i64 {
    ((x - std::f64::consts::PI) / std::f64::consts::TAU)
        .floor()
        .clamp(-1e15, 1e15) as i64
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
            // Clamped: a count that far out means nothing, but must not
            // wrap (a delay of 2^40 periods is past any loop's margin).
            let turns = j.saturating_sub(m as i64).clamp(-(1 << 40), 1 << 40);
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

/// The crossings of a fraction's loop gain `l` (rad/s, at period
/// `period_s`) over `range`, as a [`Fraction`]; `branch` is the low end's
/// phase (deg) the others unwrap from, `delay` (periods) names the loop in
/// an error.
pub(crate) fn fraction_of(
    l: &dyn Fn(f64) -> C64,
    range: &FrequencyRange,
    period_s: f64,
    branch: Option<f64>,
    delay: f64,
) -> Result<Fraction, CountError> {
    let x = unwrapped_crossings(l, range, branch).ok_or(CountError::Uncounted(delay))?;
    // |L| alternates about 1 from crossing to crossing: a crossing missed
    // would miscount.
    if x.above_low ^ (x.at.len() % 2 == 1) != x.above_high {
        return Err(CountError::NotAlternating(delay));
    }
    let turns = x.high_phase_deg / 180.0;
    Ok(Fraction {
        theta: x.at.iter().map(|c| c.0 * period_s).collect(),
        phi: x.at.iter().map(|c| c.1.to_radians()).collect(),
        above_low: x.above_low,
        nyquist_turns: x.above_high.then(|| turns.round() as i64),
        low_phase_deg: x.low_phase_deg,
    })
}

/// Why a search could not count a loop's encirclements of -1.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CountError {
    #[error(transparent)]
    Loop(#[from] LoopError),
    #[error("the crossings of |L| = 1 could not be counted with {0:.6} periods of delay")]
    Uncounted(f64),
    #[error("the crossings of |L| = 1 with {0:.6} periods of delay do not alternate")]
    NotAlternating(f64),
}

/// How `first_loss` ended.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Loss {
    /// Stable with a total delay of `stable` periods (and every trial
    /// below), not with `unstable`; within 1e-10 relative, or one tick.
    Between { stable: f64, unstable: f64 },
    /// No fraction's loop ever changes its count: no gain crossing at any
    /// fraction and |L| < 1 at Nyquist.
    Never,
    /// Every fraction kept its count through `MAX_EVENTS` level passings.
    StableThroughout(usize),
}

/// The first total delay (periods) past `start` at which a loop is not
/// stable, from `loop_at(d, branch)`: the loop of a total delay of `d`
/// periods as its fraction's crossings and its whole periods. `ticks`:
/// Some(N) when the delay comes in whole N-ths of a period (a cascade's
/// inner ticks), so every trial is one and the bisection stops at one.
/// The loop at `start` must be stable.
pub(crate) fn first_loss(
    start: f64,
    ticks: Option<usize>,
    loop_at: &dyn Fn(f64, Option<f64>) -> Result<(Fraction, f64), CountError>,
) -> Result<Loss, CountError> {
    let (own, m0) = loop_at(start, None)?;
    let reference = own.encirclements(m0);
    let branch = Some(own.low_phase_deg);
    // Fractions: every frequency up to the fastest crossing turns by at
    // most STEP_RAD from one to the next; every tick when there are few.
    let theta_fast = own.theta.iter().copied().fold(0.0, f64::max);
    let wanted =
        ((theta_fast / STEP_RAD).ceil() as usize).clamp(FRACTIONS_PER_PERIOD, MAX_FRACTIONS);
    let (n, unit) = match ticks {
        Some(t) if t <= MAX_FRACTIONS => (t, 1.0 / t as f64),
        Some(t) => (wanted, 1.0 / t as f64),
        None => (wanted, 0.0),
    };
    // The offset of fraction j (1..=n) past `start`, in periods (whole
    // ticks when there are ticks).
    let offset = |j: usize| match ticks {
        Some(t) => ((j * t) as f64 / n as f64).round() * unit,
        None => j as f64 / n as f64,
    };
    // The earliest fraction's first change, and which fraction it is.
    let mut first: Option<(f64, usize)> = None;
    for j in 1..=n {
        let d = start + offset(j);
        let (f, m) = loop_at(d, branch)?;
        let r = if f.encirclements(m) != reference {
            Some(0.0)
        } else {
            f.first_change(m, reference)
        };
        if let Some(r) = r
            && first.is_none_or(|(v, _)| d + r < v)
        {
            first = Some((d + r, j));
        }
    }
    let Some((unstable, j)) = first else {
        return Ok(if own.theta.is_empty() && own.nyquist_turns.is_none() {
            Loss::Never
        } else {
            Loss::StableThroughout(n)
        });
    };
    // Every trial below `unstable` is stable: it is a fraction's trial
    // before that fraction's first change. The one before it brackets.
    let below = unstable - offset(j) + offset(j - 1);
    let (mut lo, mut hi) = (below.max(start), unstable);
    for _ in 0..MAX_BISECT {
        let mid = match ticks {
            Some(_) if hi - lo <= 1.5 * unit => break,
            Some(_) => lo + ((hi - lo) / (2.0 * unit)).floor() * unit,
            None if hi - lo <= 1e-10 * hi => break,
            None => 0.5 * (lo + hi),
        };
        let (f, m) = loop_at(mid, branch)?;
        if f.encirclements(m) == reference {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Ok(Loss::Between {
        stable: lo,
        unstable: hi,
    })
}

/// The margin a search ended with: `seconds(stable, unstable)` from the
/// bracket of total delays (periods) it found.
pub(crate) fn margin_of(
    loss: Result<Loss, CountError>,
    seconds: impl FnOnce(f64, f64) -> f64,
) -> DelayMargin {
    match loss {
        Ok(Loss::Between { stable, unstable }) => DelayMargin::Seconds(seconds(stable, unstable)),
        Ok(Loss::Never) => DelayMargin::NoCrossing,
        Ok(Loss::StableThroughout(n)) => DelayMargin::NotLocated(format!(
            "the loop stayed stable at every delay counted ({MAX_EVENTS} level passings at each of {n} fractions of a period)"
        )),
        Err(e) => DelayMargin::NotLocated(e.to_string()),
    }
}

/// The exact delay margin of the loop of `plant_model` (from
/// `hold::plant_and_sensor`) closed by `controller` at `period_s` with the
/// hold and delays of `act` (the extra delay adds to its actuator delay),
/// whose loop figures are computed on `range`. The loop must be stable
/// without extra delay.
pub fn exact_delay_margin(
    plant_model: &StateSpace,
    controller: &DiscreteTransfer,
    period_s: f64,
    act: &Actuation,
    range: &FrequencyRange,
) -> DelayMargin {
    let loop_at = |d: f64, branch: Option<f64>| -> Result<(Fraction, f64), CountError> {
        let (whole, fraction) = split_delay(d);
        let at = Actuation {
            delay_periods: fraction,
            ..*act
        };
        let hold = HoldEquivalent::with(plant_model, period_s, &at, 1)
            .map_err(LoopError::PlantEquivalent)?;
        let pulse = hold.pulse();
        let l = |w: f64| {
            let z = C64::from_polar(1.0, w * period_s);
            controller.transfer.eval(z) * pulse.response(z)
        };
        Ok((fraction_of(&l, range, period_s, branch, d)?, whole as f64))
    };
    let start = act.delay_periods;
    margin_of(first_loss(start, None, &loop_at), |stable, unstable| {
        (0.5 * (stable + unstable) - start) * period_s
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    /// A loop with |L| > 1 below one crossing at `theta` (rad a period) and
    /// below 1 up to Nyquist, whose phase there is `phi` (rad).
    fn one_crossing(theta: f64, phi: f64) -> Fraction {
        Fraction {
            theta: vec![theta],
            phi: vec![phi],
            above_low: true,
            nyquist_turns: None,
            low_phase_deg: -90.0,
        }
    }

    #[test]
    fn bands_change_at_the_minus_180_levels() {
        assert_eq!(band(-PI + 1e-9), -1);
        assert_eq!(band(-PI - 1e-9), -2);
        assert_eq!(band(PI + 1e-9), 0);
        assert_eq!(band(3.0 * PI - 1e-9), 0);
    }

    /// Phase margin 0.55 rad at a crossing turning 0.125 rad a period:
    /// whole periods of delay use it up at the fifth (0.55 / 0.125 = 4.4),
    /// where the count changes by two (the crossing and its mirror image).
    #[test]
    fn first_change_is_the_whole_period_that_uses_up_the_phase_margin() {
        let f = one_crossing(0.125, -PI + 0.55);
        let reference = f.encirclements(0.0);
        assert_eq!(f.encirclements(4.0), reference);
        assert_eq!((f.encirclements(5.0) - reference).abs(), 2);
        assert_eq!(f.first_change(0.0, reference), Some(5.0));
        // From two periods on, three more.
        assert_eq!(f.first_change(2.0, reference), Some(3.0));
    }

    /// |L| > 1 up to Nyquist: the loop gain there is real and turns from
    /// `a` to `-a` over every period, so the count changes within the next.
    #[test]
    fn gain_above_one_at_nyquist_changes_the_count_every_period() {
        let f = Fraction {
            theta: Vec::new(),
            phi: Vec::new(),
            above_low: true,
            nyquist_turns: Some(0),
            low_phase_deg: 0.0,
        };
        let reference = f.encirclements(0.0);
        assert_ne!(f.encirclements(1.0), reference);
        assert_eq!(f.first_change(0.0, reference), Some(1.0));
    }

    /// A loop whose delay only turns its one crossing, as a continuous
    /// delay does: phase margin 0.9 rad at 0.25 rad a period, so stability
    /// is lost at 3.6 periods (closed form).
    fn rotating(d: f64, _: Option<f64>) -> Result<(Fraction, f64), CountError> {
        let (m, f) = split_delay(d);
        Ok((one_crossing(0.25, -PI + 0.9 - 0.25 * f), m as f64))
    }

    #[test]
    fn first_loss_finds_the_closed_form_margin() {
        match first_loss(0.0, None, &rotating) {
            Ok(Loss::Between { stable, unstable }) => {
                assert!(stable < 3.6 && unstable >= 3.6, "{stable} .. {unstable}");
                assert!(unstable - stable <= 1e-9, "{stable} .. {unstable}");
            }
            other => panic!("{other:?}"),
        }
        // From a delay of half a period, 3.1 periods more.
        let Ok(Loss::Between { unstable, .. }) = first_loss(0.5, None, &rotating) else {
            panic!("no loss from 0.5");
        };
        assert!((unstable - 3.6).abs() < 1e-9);
    }

    /// In whole eighths of a period: stable at 28 ticks (3.5 periods), not
    /// at 29.
    #[test]
    fn first_loss_in_whole_ticks_stops_at_one_tick() {
        let Ok(Loss::Between { stable, unstable }) = first_loss(0.0, Some(8), &rotating) else {
            panic!("no loss");
        };
        assert_eq!((stable * 8.0, unstable * 8.0), (28.0, 29.0));
    }

    #[test]
    fn no_crossing_is_never_lost() {
        let never = |d: f64, _: Option<f64>| {
            let (m, _) = split_delay(d);
            let f = Fraction {
                theta: Vec::new(),
                phi: Vec::new(),
                above_low: false,
                nyquist_turns: None,
                low_phase_deg: 0.0,
            };
            Ok((f, m as f64))
        };
        assert_eq!(first_loss(0.0, None, &never), Ok(Loss::Never));
    }
}
