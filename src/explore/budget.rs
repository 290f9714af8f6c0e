//! The CPU budget: cycles per controller update, load at a rate, the
//! budget's ceiling rate, timer-achievable rates and the rate window.

use crate::engineering::hz;
use crate::model::rounding;
use serde::Serialize;

use crate::model::transfer::DiscreteTransfer;
use crate::sampled::figure::Limiting;
use crate::spec::{Budget, Cycles};
use crate::spec::{Format, Structure};

/// Multiply-accumulates of one update of `c` in direct form II transposed:
/// one per non-zero numerator coefficient and one per non-zero
/// denominator coefficient after the leading one (an exactly-zero
/// coefficient is not multiplied on a real target).
pub fn transposed_direct_macs(c: &DiscreteTransfer) -> usize {
    let lead = c.transfer.denominator.leading();
    let num = c
        .transfer
        .numerator
        .coeffs()
        .iter()
        .filter(|v| **v != 0.0)
        .count();
    let den = c
        .transfer
        .denominator
        .coeffs()
        .iter()
        .filter(|v| **v != 0.0)
        .count()
        .saturating_sub(usize::from(lead != 0.0));
    num + den
}

/// Multiply-accumulates of one update of `c` as second-order sections
/// (`rounding::realize`): per section one per non-zero coefficient, the
/// numerator's normalised leading 1 excepted, plus one for the overall gain
/// unless it is exactly 1. None when the sections cannot be formed.
pub fn sos_macs(c: &DiscreteTransfer, integrators: usize) -> Option<usize> {
    let r = rounding::realize(c, Structure::Sos, integrators).ok()?;
    let nonzero = |v: &[f64]| v.iter().filter(|x| **x != 0.0).count();
    let sections: usize = r
        .sections
        .iter()
        .map(|s| {
            nonzero(&s.b).saturating_sub(usize::from(s.b.first() == Some(&1.0))) + nonzero(&s.a)
        })
        .sum();
    Some(sections + usize::from(r.gain != 1.0))
}

/// Multiply-accumulates of one update of `c` in `structure`
/// (`integrators`: the design's poles at z = 1, kept in their own sections).
pub fn macs(c: &DiscreteTransfer, structure: Structure, integrators: usize) -> Option<usize> {
    match structure {
        Structure::TransposedDirect => Some(transposed_direct_macs(c)),
        Structure::Sos => sos_macs(c, integrators),
    }
}

/// Cycles one update costs: measured, or estimated from the controller
/// arranged in `structure` (transposed-direct when the case gives no `[arithmetic]`).
pub fn cycles_per_update(
    budget: &Budget,
    controller: Option<&DiscreteTransfer>,
    structure: Structure,
    integrators: usize,
) -> Option<f64> {
    match budget.cycles {
        Cycles::PerUpdate(c) => Some(c),
        Cycles::Estimate {
            cycles_per_mac,
            overhead_cycles,
        } => controller
            .and_then(|c| macs(c, structure, integrators))
            .map(|m| cycles_per_mac * m as f64 + overhead_cycles),
    }
}

/// CPU load in percent at `rate_hz`.
pub fn load_pct(budget: &Budget, cycles: f64, rate_hz: f64) -> f64 {
    cycles * rate_hz / budget.cpu_hz * 100.0
}

/// What one controller costs at `rate_hz`: cycles per update and the CPU
/// load in percent. The one place a load is computed from a controller
/// (the sweep's column, the recommendation, the CPU chart).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cost {
    pub cycles: f64,
    pub load_pct: f64,
}

/// [`Cost`] of `controller` arranged in `structure` at `rate_hz`; None
/// when the cycles are estimated and the controller cannot be built.
pub fn cost_at(
    budget: &Budget,
    controller: Option<&DiscreteTransfer>,
    structure: Structure,
    integrators: usize,
    rate_hz: f64,
) -> Option<Cost> {
    let cycles = cycles_per_update(budget, controller, structure, integrators)?;
    Some(Cost {
        cycles,
        load_pct: load_pct(budget, cycles, rate_hz),
    })
}

/// The fastest rate the budget allows, Hz.
pub fn ceiling_hz(budget: &Budget, cycles: f64) -> f64 {
    budget.max_load_pct / 100.0 * budget.cpu_hz / cycles
}

/// The slowest rate at or above `rate_hz` the timer can make
/// (`timer_hz / N`, N a whole divider >= 1); None when even N = 1 is too
/// slow, or when the divider would pass 2^53, where a double no longer
/// holds it exactly (a 1e300 Hz timer gave a divider saturated at 2^64
/// and a rate of 5e280 Hz).
pub fn timer_rate_at_least(timer_hz: f64, rate_hz: f64) -> Option<(f64, u64)> {
    if rate_hz > timer_hz || timer_hz / rate_hz >= 2f64.powi(53) {
        return None;
    }
    let n = (timer_hz / rate_hz).floor().max(1.0) as u64;
    let mut r = timer_hz / n as f64;
    let mut n = n;
    // Guard against rounding in the division.
    while r < rate_hz && n > 1 {
        n -= 1;
        r = timer_hz / n as f64;
    }
    Some((r, n))
}

/// What sets the top of the rate window (`pick.json`: `window.high_bound`,
/// an object with a `kind`). Printed with `Display` in the summary, the
/// report and the CPU chart.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum WindowBound {
    /// The CPU budget's ceiling rate (checked for the spec and the
    /// coefficients up to there).
    CpuBudget,
    /// A number format's precision ceiling: the rounded controller fails
    /// just above it; `fails_at_start` holds the failing figure when it
    /// fails already at the window's low end.
    Coefficients {
        format: Format,
        structure: Structure,
        fails_at_start: Option<Limiting>,
    },
    /// The last rate checked: the bound `beyond` (CPU budget or
    /// coefficients) would allow up to `beyond_hz`, but the spec and the
    /// coefficients were checked only up to `checked_hz` (`max_hz`, or the
    /// rate of a controller given in z), so the window stops there.
    LastRateChecked {
        checked_hz: f64,
        beyond: Box<WindowBound>,
        beyond_hz: f64,
    },
}

impl WindowBound {
    /// True when the rounded coefficients set the top (directly, not a
    /// cut at the last rate checked).
    pub fn is_coefficients(&self) -> bool {
        matches!(self, WindowBound::Coefficients { .. })
    }

    /// True when the top is cut at the last rate checked.
    pub fn is_last_rate_checked(&self) -> bool {
        matches!(self, WindowBound::LastRateChecked { .. })
    }
}

impl std::fmt::Display for WindowBound {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            WindowBound::CpuBudget => f.write_str("CPU budget"),
            WindowBound::Coefficients {
                format,
                structure,
                fails_at_start: None,
            } => write!(f, "{format} coefficients ({structure})"),
            WindowBound::Coefficients {
                format,
                structure,
                fails_at_start: Some(lim),
            } => write!(
                f,
                "{format} coefficients ({structure}) fail already at the rate the spec alone needs (`{lim}`)"
            ),
            WindowBound::LastRateChecked {
                checked_hz,
                beyond,
                beyond_hz,
            } => write!(
                f,
                "last rate checked, {}, while the {beyond} would allow up to {} unchecked",
                hz(*checked_hz),
                hz(*beyond_hz)
            ),
        }
    }
}

/// The rate window: from the recommended rate up to the lowest ceiling
/// (the CPU budget's, or a coefficient format's precision ceiling), never
/// above the last rate checked.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateWindow {
    pub low_hz: f64,
    pub high_hz: f64,
    /// What sets `high_hz`.
    pub high_bound: WindowBound,
    /// The CPU budget's ceiling rate, Hz, beside the bound (None without
    /// a budget or when the update's cost is unknown).
    pub cpu_ceiling_hz: Option<f64>,
    /// Empty when the recommended rate is above the ceiling.
    pub empty: bool,
}

impl RateWindow {
    pub fn new(
        low_hz: f64,
        high_hz: f64,
        high_bound: WindowBound,
        cpu_ceiling_hz: Option<f64>,
    ) -> Self {
        RateWindow {
            low_hz,
            high_hz,
            high_bound,
            cpu_ceiling_hz,
            empty: low_hz > high_hz,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::poly::Poly;
    use crate::model::transfer::Transfer;

    fn budget(cycles: Cycles) -> Budget {
        Budget {
            cpu_hz: 170e6,
            cycles,
            max_load_pct: 25.0,
            timer_hz: Some(170e6),
        }
    }

    #[test]
    fn hand_computed_budget() {
        // By hand: 900 cycles at 10 kHz on 170 MHz = 9e6/170e6 = 5.294 %;
        // ceiling at 25 % = 0.25 * 170e6 / 900 = 47 222.2 Hz.
        let b = budget(Cycles::PerUpdate(900.0));
        assert!((load_pct(&b, 900.0, 10_000.0) - 5.294_117_647_058_823).abs() < 1e-12);
        assert!((ceiling_hz(&b, 900.0) - 47_222.222_222_222_22).abs() < 1e-6);
        // A second-order controller with all five coefficients non-zero:
        // 3 numerator + 2 denominator MACs; at 12 cycles each + 300
        // overhead = 360 cycles (by hand).
        let c = DiscreteTransfer {
            transfer: Transfer::new(
                Poly::from_descending(&[0.5, -0.4, 0.1]),
                Poly::from_descending(&[1.0, -1.2, 0.3]),
            ),
            period_s: 1e-4,
        };
        assert_eq!(transposed_direct_macs(&c), 5);
        let e = budget(Cycles::Estimate {
            cycles_per_mac: 12.0,
            overhead_cycles: 300.0,
        });
        assert_eq!(
            cycles_per_update(&e, Some(&c), Structure::TransposedDirect, 0),
            Some(360.0)
        );
        // C(z) = 0.5 (z - 0.2) / ((z - 1)(z - 0.6)) as sections (by hand):
        // the integrator's section takes the zero, (1 - 0.2q)/(1 - q): one
        // MAC for -0.2 (the leading 1 is free) and one for -1; the other,
        // 1/(1 - 0.6q): one; the gain 0.5: one. Total 4. In transposed-direct:
        // b = [0, 0.5, -0.1], a = [-1.6, 0.6]: 2 + 2 = 4 as well.
        let pi = DiscreteTransfer {
            transfer: Transfer::new(
                Poly::from_descending(&[0.5, -0.1]),
                Poly::from_descending(&[1.0, -1.6, 0.6]),
            ),
            period_s: 1e-3,
        };
        assert_eq!(sos_macs(&pi, 1), Some(4));
        assert_eq!(transposed_direct_macs(&pi), 4);
        // (2z^2 - z + 0.1) / ((z - 0.6)(z - 0.5)(z - 0.4)), by hand: the
        // poles pair largest first, (1 - 1.1q + 0.3q^2) and (1 - 0.4q);
        // the section nearer the unit circle takes both zeros,
        // (1 - 0.5q + 0.05q^2): 2 + 2 MACs, then 1, then the gain 2: 6.
        // transposed-direct: b = [0, 2, -1, 0.1], a = [-1.5, 0.74, -0.12]: 3 + 3 = 6.
        let third = DiscreteTransfer {
            transfer: Transfer::new(
                Poly::from_descending(&[2.0, -1.0, 0.1]),
                Poly::from_descending(&[1.0, -1.5, 0.74, -0.12]),
            ),
            period_s: 1e-3,
        };
        assert_eq!(transposed_direct_macs(&third), 6);
        assert_eq!(sos_macs(&third, 0), Some(6));
        // Timer: 170 MHz / 3 kHz = 56 666.7 -> divider 56666 gives
        // 3000.0176 Hz >= 3 kHz (by hand).
        let (r, n) = timer_rate_at_least(170e6, 3000.0).unwrap();
        assert_eq!(n, 56_666);
        assert!(r >= 3000.0 && (r - 170e6 / 56_666.0).abs() < 1e-9);
    }

    /// A timer so fast that the divider no longer fits a double exactly
    /// makes no rounded rate (it made 5e280 Hz of a 1 kHz request).
    #[test]
    fn a_divider_past_a_doubles_integers_is_no_timer_rate() {
        assert_eq!(timer_rate_at_least(1e300, 1000.0), None);
        assert_eq!(timer_rate_at_least(1e20, 1.0), None);
        let (r, n) = timer_rate_at_least(2f64.powi(52), 1.0).unwrap();
        assert_eq!((r, n), (1.0, 1u64 << 52));
    }
}
