//! Precision ceilings' verdict at one grid point: the loop with the
//! controller's coefficients rounded to a number format (see
//! `model::rounding`) evaluated against the spec, with the structural
//! failures (integral action lost, a pole rounded onto z = 1, a word too
//! narrow) as their own verdicts.

use crate::model::rounding::{Damage, design_integrators, quantize};
use crate::sampled::evaluate::{Given, Point, PreparedLoop};
use crate::sampled::feasibility::{Assessment, UNSTABLE_SLACK, assess};
use crate::sampled::figure::Limiting;
use crate::spec::Spec;
use crate::spec::{Format, Structure};

/// One number format's verdict at one grid point.
#[derive(Debug, Clone, PartialEq)]
pub struct PrecisionPoint {
    pub format: Format,
    /// What rounding did; None when the controller could not be built or
    /// its coefficients do not fit the word (`assessment` says which).
    pub damage: Option<Damage>,
    /// The loop with the rounded controller against the spec; a
    /// structural failure (integral action lost, a pole rounded onto
    /// z = 1 or out of the unit circle) is infeasible with that name.
    pub assessment: Assessment,
    /// Why there is no damage figure (controller not built, or a
    /// coefficient too large for the word).
    pub reason: Option<String>,
}

/// A verdict no figure describes: the coefficients do not fit the word
/// ([`Limiting::Coefficients`]), the controller cannot be built at this
/// rate ([`Limiting::Controller`], e.g. `tustin-prewarped` with the
/// pre-warp frequency at or above Nyquist), or rounding changed what the
/// controller is.
fn failed(name: Limiting) -> Assessment {
    Assessment {
        feasible: false,
        limiting: Some(name),
        slack: UNSTABLE_SLACK,
        checks: Vec::new(),
    }
}

/// Round the controller of point `p` in `structure` and `format` and judge
/// the loop it makes on `lp` against `spec`; `check_hz` is where the
/// crossover gain error is measured. `given` hands in what was built for
/// the point already: its controller (`lp.controller_at` at the point's
/// method and rate, built once there and shared by every format, or why it
/// could not be built) and `lp`'s plant side (`hold_at`); what it does not
/// hand in is built here. Its delay-margin flag is not used.
pub fn judge_point(
    lp: &PreparedLoop,
    spec: &Spec,
    p: &Point,
    given: Given,
    structure: Structure,
    format: Format,
    check_hz: Option<f64>,
) -> PrecisionPoint {
    let failure = |name: Limiting, reason: String| PrecisionPoint {
        format,
        damage: None,
        assessment: failed(name),
        reason: Some(reason),
    };
    let own;
    let c = match given.controller {
        Some(Ok(c)) => c,
        Some(Err(e)) => return failure(Limiting::Controller, e.to_string()),
        None => match lp.controller_at(p.rate_hz, p.method) {
            Ok(c) => {
                own = c;
                &own
            }
            Err(e) => return failure(Limiting::Controller, e.to_string()),
        },
    };
    let integrators = design_integrators(&lp.controller);
    let w = check_hz.map(|f| 2.0 * std::f64::consts::PI * f);
    let q = match quantize(c, integrators, structure, format, w) {
        Ok(q) => q,
        Err(e) => return failure(Limiting::Coefficients, e.to_string()),
    };
    let assessment = match q.damage.structural_failure() {
        Some(s) => failed(Limiting::Rounding(s)),
        None => {
            let around = Given {
                plant: given.plant,
                ..Given::around(&q.controller)
            };
            assess(&lp.evaluate(p, around), spec)
        }
    };
    PrecisionPoint {
        format,
        damage: Some(q.damage),
        assessment,
        reason: None,
    }
}
