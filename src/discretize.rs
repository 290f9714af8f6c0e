//! Conversion of a continuous controller `C(s)` into the `C(z)` that runs
//! on the processor, by the eight methods of the loop model.

use std::fmt;
use std::str::FromStr;

/// A discretization method for a continuous controller.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Method {
    /// Step invariant (zero-order hold).
    Zoh,
    /// Ramp invariant, triangle (non-causal first-order) hold.
    Foh,
    /// Impulse invariant, scaled by T.
    Impulse,
    /// Bilinear map s = (2/T)(z-1)/(z+1).
    Tustin,
    /// Bilinear map with frequency pre-warping at w0.
    TustinPrewarp,
    /// Pole-zero matching z = e^{sT}.
    Matched,
    /// s = (z-1)/T.
    ForwardEuler,
    /// s = (z-1)/(T z).
    BackwardEuler,
}

impl Method {
    /// Every method, in a fixed order (the order of output rows).
    pub const ALL: [Method; 8] = [
        Method::Zoh,
        Method::Foh,
        Method::Impulse,
        Method::Tustin,
        Method::TustinPrewarp,
        Method::Matched,
        Method::ForwardEuler,
        Method::BackwardEuler,
    ];

    /// The name used in case files and output.
    pub fn name(self) -> &'static str {
        match self {
            Method::Zoh => "zoh",
            Method::Foh => "foh",
            Method::Impulse => "impulse",
            Method::Tustin => "tustin",
            Method::TustinPrewarp => "tustin-prewarp",
            Method::Matched => "matched",
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
#[error(
    "unknown method `{0}`; known: zoh, foh, impulse, tustin, tustin-prewarp, matched, forward-euler, backward-euler"
)]
pub struct UnknownMethod(pub String);

impl FromStr for Method {
    type Err = UnknownMethod;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Method::ALL
            .iter()
            .copied()
            .find(|m| m.name() == s)
            .ok_or_else(|| UnknownMethod(s.to_string()))
    }
}
