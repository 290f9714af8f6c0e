//! Conversion of a continuous controller `C(s)` into the `C(z)` that runs
//! on the processor, by the eight methods of the loop model.

use std::fmt;
use std::str::FromStr;

/// How the controller that runs was obtained: discretized by a method,
/// or given in z by the case (`None`). Written to files and text as the
/// method's name, `given-in-z` for the latter.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct MethodChoice(pub Option<Method>);

impl MethodChoice {
    /// The name written in files and text.
    pub fn name(self) -> &'static str {
        self.0.map_or("given-in-z", Method::name)
    }

    /// True for a controller given in z (nothing discretized).
    pub fn is_given_in_z(self) -> bool {
        self.0.is_none()
    }
}

impl std::fmt::Display for MethodChoice {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

impl serde::Serialize for MethodChoice {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.name())
    }
}

/// A discretization method for a continuous controller.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Method {
    /// Step invariant (zero-order hold).
    StepInvariant,
    /// Ramp invariant, triangle (non-causal first-order) hold.
    RampInvariant,
    /// Impulse invariant, scaled by T.
    ImpulseInvariant,
    /// Bilinear map s = (2/T)(z-1)/(z+1).
    Tustin,
    /// Bilinear map with frequency pre-warping at w0.
    TustinPrewarped,
    /// Pole-zero matching z = e^{sT}.
    PoleZeroMatch,
    /// s = (z-1)/T.
    ForwardEuler,
    /// s = (z-1)/(T z).
    BackwardEuler,
}

impl Method {
    /// Every method, in a fixed order (the order of output rows).
    pub const ALL: [Method; 8] = [
        Method::StepInvariant,
        Method::RampInvariant,
        Method::ImpulseInvariant,
        Method::Tustin,
        Method::TustinPrewarped,
        Method::PoleZeroMatch,
        Method::ForwardEuler,
        Method::BackwardEuler,
    ];

    /// The name used in case files and output.
    pub fn name(self) -> &'static str {
        match self {
            Method::StepInvariant => "step-invariant",
            Method::RampInvariant => "ramp-invariant",
            Method::ImpulseInvariant => "impulse-invariant",
            Method::Tustin => "tustin",
            Method::TustinPrewarped => "tustin-prewarped",
            Method::PoleZeroMatch => "pole-zero-match",
            Method::ForwardEuler => "forward-euler",
            Method::BackwardEuler => "backward-euler",
        }
    }
}

impl fmt::Display for Method {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// The name is not one of the eight methods.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum UnknownMethod {
    #[error(
        "unknown method `{0}`; known: step-invariant, ramp-invariant, impulse-invariant, tustin, tustin-prewarped, pole-zero-match, forward-euler, backward-euler"
    )]
    Unknown(String),
    /// A name an earlier version accepted; the message names its successor.
    #[error("method `{old}` is now called `{new}`")]
    Renamed { old: String, new: &'static str },
}

/// Method names an earlier version accepted, with the name that replaced
/// each (no alias is kept: an old name is refused with this hint).
const RENAMED_METHODS: [(&str, Method); 5] = [
    ("zoh", Method::StepInvariant),              // old name
    ("foh", Method::RampInvariant),              // old name
    ("impulse", Method::ImpulseInvariant),       // old name
    ("tustin-prewarp", Method::TustinPrewarped), // old name
    ("matched", Method::PoleZeroMatch),          // old name
];

impl FromStr for Method {
    type Err = UnknownMethod;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        if let Some(m) = Method::ALL.iter().copied().find(|m| m.name() == s) {
            return Ok(m);
        }
        match RENAMED_METHODS.iter().find(|(old, _)| *old == s) {
            Some((old, m)) => Err(UnknownMethod::Renamed {
                old: old.to_string(),
                new: m.name(),
            }),
            None => Err(UnknownMethod::Unknown(s.to_string())),
        }
    }
}

use nalgebra::{DMatrix, DVector};

use crate::model::matrix::{ModelError, expm, hold_integrals};
use crate::model::poly::{C64, Poly};
use crate::model::state_space::StateSpace;
use crate::model::transfer::{DiscreteTransfer, Transfer};

/// Why a method could not produce a controller at a rate.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DiscretizeError {
    #[error("sample period must be positive and finite, got {0} s")]
    Period(f64),
    #[error(
        "tustin-prewarped needs a pre-warp frequency (none given and the continuous loop has no crossover)"
    )]
    NoPrewarp,
    #[error(
        "tustin-prewarped at {w0_hz:.6} Hz needs w0*T < pi, but w0*T = {product:.4} at this rate"
    )]
    PrewarpAboveNyquist { w0_hz: f64, product: f64 },
    #[error("matched: the gain rule is undefined here ({0})")]
    MatchedGain(String),
    #[error(transparent)]
    Model(#[from] ModelError),
}

/// The controller that runs at period `period_s`, from `c` by `method`.
///
/// `prewarp_rad_s` is used by `tustin-prewarped` only (rad/s).
pub fn discretize(
    c: &Transfer,
    method: Method,
    period_s: f64,
    prewarp_rad_s: Option<f64>,
) -> Result<DiscreteTransfer, DiscretizeError> {
    if !(period_s > 0.0 && period_s.is_finite()) {
        return Err(DiscretizeError::Period(period_s));
    }
    if c.denominator.is_zero() {
        return Err(ModelError::ZeroDenominator.into());
    }
    if !c.is_proper() {
        return Err(ModelError::Improper {
            numerator: c.numerator.degree(),
            denominator: c.denominator.degree(),
        }
        .into());
    }
    let t = period_s;
    let tf = match method {
        Method::StepInvariant => step_invariant(c, t)?,
        Method::RampInvariant => ramp_invariant(c, t)?,
        Method::ImpulseInvariant => impulse_invariant(c, t)?,
        Method::Tustin => substitute(c, 2.0 / t, -2.0 / t, 1.0, 1.0),
        Method::TustinPrewarped => {
            let w0 = prewarp_rad_s.ok_or(DiscretizeError::NoPrewarp)?;
            if !(w0 > 0.0 && w0.is_finite()) {
                return Err(DiscretizeError::NoPrewarp);
            }
            let product = w0 * t;
            if product >= std::f64::consts::PI {
                return Err(DiscretizeError::PrewarpAboveNyquist {
                    w0_hz: w0 / (2.0 * std::f64::consts::PI),
                    product,
                });
            }
            let k = w0 / (product / 2.0).tan();
            substitute(c, k, -k, 1.0, 1.0)
        }
        Method::PoleZeroMatch => matched(c, t)?,
        Method::ForwardEuler => substitute(c, 1.0 / t, -1.0 / t, 0.0, 1.0),
        Method::BackwardEuler => substitute(c, 1.0 / t, -1.0 / t, 1.0, 0.0),
    };
    if !tf.is_finite() || tf.denominator.is_zero() {
        return Err(ModelError::NonFinite.into());
    }
    Ok(DiscreteTransfer {
        transfer: tf.monic(),
        period_s,
    })
}

/// Rational substitution `s = (a z + b) / (c z + d)`, both polynomials
/// multiplied by `(c z + d)^n`, n the denominator degree.
fn substitute(tf: &Transfer, a: f64, b: f64, c: f64, d: f64) -> Transfer {
    let n = tf.denominator.degree();
    Transfer::new(
        tf.numerator.compose_mobius(a, b, c, d, n),
        tf.denominator.compose_mobius(a, b, c, d, n),
    )
}

/// Zero-order-hold (step-invariant) equivalent through Van Loan's integral.
fn step_invariant(c: &Transfer, t: f64) -> Result<Transfer, DiscretizeError> {
    let ss = StateSpace::from_transfer(c)?;
    if ss.order() == 0 {
        return Ok(c.clone());
    }
    let (phi, gam) = hold_integrals(&ss.a, &ss.b, t)?;
    let d = ss.d[0];
    sampled_equivalent(c, t, phi, gam, ss.c, d)
}

/// Characteristic polynomial of `e^{AT}` from the continuous poles mapped
/// by `z = e^{pT}`: exact poles at s = 0 land exactly on z = 1, and poles
/// crowded near z = 1 at fast rates keep the digits that an eigenvalue
/// routine on `e^{AT}` would lose.
fn mapped_den(c: &Transfer, t: f64) -> Result<Poly, DiscretizeError> {
    let poles = c.denominator.roots().ok_or(ModelError::Eigen)?;
    let mapped: Vec<C64> = poles.iter().map(|p| (p * t).exp()).collect();
    Ok(Poly::from_roots(&mapped))
}

/// The transfer function of a sampled equivalent `(e^{AT}, B_d, C, D_d)`
/// of `c`, with the denominator from `c`'s poles mapped by `e^{pT}`.
fn sampled_equivalent(
    c: &Transfer,
    t: f64,
    phi: DMatrix<f64>,
    bd: DVector<f64>,
    cm: DMatrix<f64>,
    dd: f64,
) -> Result<Transfer, DiscretizeError> {
    let den = mapped_den(c, t)?;
    Ok(StateSpace {
        a: phi,
        b: bd,
        c: cm,
        d: DVector::from_element(1, dd),
    }
    .to_transfer_with_denominator(0, den))
}

/// Triangle-hold (ramp-invariant) equivalent: one exponential of
/// `[[A T, B T, 0], [0, 0, 1], [0, 0, 0]]` gives `Phi`, `Gamma1` and
/// `Gamma2`; then `B_d = Gamma1 - Gamma2 + Phi Gamma2`, `D_d = D + C Gamma2`
/// (the non-causal first-order hold; the result is biproper).
fn ramp_invariant(c: &Transfer, t: f64) -> Result<Transfer, DiscretizeError> {
    let ss = StateSpace::from_transfer(c)?;
    let n = ss.order();
    if n == 0 {
        return Ok(c.clone());
    }
    let mut m = DMatrix::zeros(n + 2, n + 2);
    m.view_mut((0, 0), (n, n)).copy_from(&(&ss.a * t));
    m.view_mut((0, n), (n, 1)).copy_from(&(&ss.b * t));
    m[(n, n + 1)] = 1.0;
    let e = expm(&m)?;
    let phi = e.view((0, 0), (n, n)).into_owned();
    let g1: DVector<f64> = e.view((0, n), (n, 1)).column(0).into_owned();
    let g2: DVector<f64> = e.view((0, n + 1), (n, 1)).column(0).into_owned();
    let bd = &g1 - &g2 + &phi * &g2;
    let dd = ss.d[0] + (&ss.c * &g2)[0];
    sampled_equivalent(c, t, phi, bd, ss.c, dd)
}

/// Impulse-invariant equivalent scaled by T:
/// `C(z) = D + T sum_{k>=0} h(kT) z^-k`, realised as
/// `A_d = e^{AT}`, `B_d = e^{AT} B T`, `C_d = C`, `D_d = D + C B T`.
fn impulse_invariant(c: &Transfer, t: f64) -> Result<Transfer, DiscretizeError> {
    let ss = StateSpace::from_transfer(c)?;
    if ss.order() == 0 {
        return Ok(c.clone());
    }
    let phi = expm(&(&ss.a * t))?;
    let bd = &phi * &ss.b * t;
    let dd = ss.d[0] + (&ss.c * &ss.b)[0] * t;
    sampled_equivalent(c, t, phi, bd, ss.c, dd)
}

/// Pole-zero matching: finite poles and zeros by `z = e^{sT}`, zeros at
/// infinity to `z = -1`, gain from the lowest-order behaviour at s = 0
/// (`lim s^k C(s) = lim ((z-1)/T)^k C(z)`), which never divides by zero for
/// integrators because their `(z - 1)` factors are removed exactly.
fn matched(c: &Transfer, t: f64) -> Result<Transfer, DiscretizeError> {
    if c.numerator.is_zero() {
        return Ok(Transfer::new(Poly::zero(), Poly::one()));
    }
    let kz = c.numerator.zero_root_count();
    let kp = c.denominator.zero_root_count();
    let num_nz = c.numerator.shift_down(kz);
    let den_nz = c.denominator.shift_down(kp);
    let zeros = num_nz.roots().ok_or(ModelError::Eigen)?;
    let poles = den_nz.roots().ok_or(ModelError::Eigen)?;
    let map = |r: &C64| (r * t).exp();
    let zeros_z: Vec<C64> = zeros.iter().map(map).collect();
    let poles_z: Vec<C64> = poles.iter().map(map).collect();
    let n_inf = c.denominator.degree() - c.numerator.degree();
    let mut num = Poly::from_roots(&zeros_z)
        .mul(&Poly::from_descending(&[1.0, -1.0]).pow(kz as u32))
        .mul(&Poly::from_descending(&[1.0, 1.0]).pow(n_inf as u32));
    let den = Poly::from_roots(&poles_z).mul(&Poly::from_descending(&[1.0, -1.0]).pow(kp as u32));
    // Low-frequency value of s^k C(s) with k = kp - kz: ratio of the lowest
    // non-zero coefficients.
    let k = kp as i32 - kz as i32;
    let cont = num_nz.coeff(0) / den_nz.coeff(0);
    // Same quantity for the discrete map with (z - 1) factors removed.
    let prod_z: f64 = zeros_z
        .iter()
        .map(|z| C64::new(1.0, 0.0) - z)
        .product::<C64>()
        .re;
    let prod_p: f64 = poles_z
        .iter()
        .map(|p| C64::new(1.0, 0.0) - p)
        .product::<C64>()
        .re;
    if prod_p == 0.0 || prod_z == 0.0 || !cont.is_finite() {
        return Err(DiscretizeError::MatchedGain(
            "a pole or zero maps onto z = 1".into(),
        ));
    }
    let disc = prod_z * 2f64.powi(n_inf as i32) / prod_p * t.powi(-k);
    let gain = cont / disc;
    if !gain.is_finite() {
        return Err(DiscretizeError::MatchedGain(
            "the gain is not finite".into(),
        ));
    }
    num = num.scale(gain);
    Ok(Transfer::new(num, den))
}
