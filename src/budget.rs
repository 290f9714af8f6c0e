//! The CPU budget: cycles per controller update, load at a rate, the
//! budget's ceiling rate, timer-achievable rates and the rate window.

use serde::Serialize;

use crate::case::{Budget, Cycles};
use crate::tf::DiscreteTf;

/// Multiply-accumulates of one update of `c` in direct form II transposed:
/// one per non-zero numerator coefficient and one per non-zero
/// denominator coefficient after the leading one (an exactly-zero
/// coefficient is not multiplied on a real target).
pub fn df2t_macs(c: &DiscreteTf) -> usize {
    let lead = c.tf.den.leading();
    let num = c.tf.num.coeffs().iter().filter(|v| **v != 0.0).count();
    let den =
        c.tf.den
            .coeffs()
            .iter()
            .filter(|v| **v != 0.0)
            .count()
            .saturating_sub(usize::from(lead != 0.0));
    num + den
}

/// Cycles one update costs: measured, or estimated from the controller.
pub fn cycles_per_update(budget: &Budget, controller: Option<&DiscreteTf>) -> Option<f64> {
    match budget.cycles {
        Cycles::PerUpdate(c) => Some(c),
        Cycles::Estimate {
            cycles_per_mac,
            overhead_cycles,
        } => controller.map(|c| cycles_per_mac * df2t_macs(c) as f64 + overhead_cycles),
    }
}

/// CPU load in percent at `rate_hz`.
pub fn load_pct(budget: &Budget, cycles: f64, rate_hz: f64) -> f64 {
    cycles * rate_hz / budget.cpu_hz * 100.0
}

/// The fastest rate the budget allows, Hz.
pub fn ceiling_hz(budget: &Budget, cycles: f64) -> f64 {
    budget.max_load_pct / 100.0 * budget.cpu_hz / cycles
}

/// The slowest rate at or above `rate_hz` the timer can make
/// (`timer_hz / N`, N a whole divider >= 1); None when even N = 1 is too
/// slow.
pub fn timer_rate_at_least(timer_hz: f64, rate_hz: f64) -> Option<(f64, u64)> {
    if rate_hz > timer_hz {
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

/// The rate window: from the recommended rate up to the lowest ceiling
/// (the CPU budget's, or a coefficient format's precision ceiling).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateWindow {
    pub low_hz: f64,
    pub high_hz: f64,
    /// What sets `high_hz`: `CPU budget` or `q15 coefficients (df2t)`.
    pub high_bound: String,
    /// Empty when the recommended rate is above the ceiling.
    pub empty: bool,
}

impl RateWindow {
    pub fn new(low_hz: f64, high_hz: f64, high_bound: impl Into<String>) -> Self {
        RateWindow {
            low_hz,
            high_hz,
            high_bound: high_bound.into(),
            empty: low_hz > high_hz,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::poly::Poly;
    use crate::tf::Tf;

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
        let c = DiscreteTf {
            tf: Tf::new(
                Poly::from_descending(&[0.5, -0.4, 0.1]),
                Poly::from_descending(&[1.0, -1.2, 0.3]),
            ),
            period_s: 1e-4,
        };
        assert_eq!(df2t_macs(&c), 5);
        let e = budget(Cycles::Estimate {
            cycles_per_mac: 12.0,
            overhead_cycles: 300.0,
        });
        assert_eq!(cycles_per_update(&e, Some(&c)), Some(360.0));
        // Timer: 170 MHz / 3 kHz = 56 666.7 -> divider 56666 gives
        // 3000.0176 Hz >= 3 kHz (by hand).
        let (r, n) = timer_rate_at_least(170e6, 3000.0).unwrap();
        assert_eq!(n, 56_666);
        assert!(r >= 3000.0 && (r - 170e6 / 56_666.0).abs() < 1e-9);
    }
}
