//! Plain types every floor shares: the limits a loop must meet, the rates
//! to sweep, the processor budget, the coefficient formats asked for, how
//! parameter ranges are explored, and the actuator's hold kind. No
//! behaviour beyond naming and parsing identities; the case-file reader
//! (`case/`) fills them and the core reads them.

use serde::{Deserialize, Serialize};
use std::fmt;
use std::str::FromStr;

/// Most grid points accepted in `[rates]`: far more than any sweep needs,
/// small enough that a typo cannot ask for hours of work.
pub const MAX_POINTS: usize = 100_000;

/// Slowest loop rate accepted anywhere (a period of about 11.6 days), Hz.
/// Below it the matrix exponentials of a period lose every digit.
pub const MIN_RATE_HZ: f64 = 1e-6;

/// Fastest loop rate accepted anywhere (a period of 1 ns), Hz.
pub const MAX_RATE_HZ: f64 = 1e9;

/// Largest coefficient magnitude a model may have once its denominator is
/// made monic (the form every realisation uses). Products of three such
/// models (controller, plant, sensor) and their sums must stay inside the
/// double range with room to spare; beyond it the numbers are refused, not
/// silently turned into infinities.
pub const MAX_MONIC_COEFF: f64 = 1e100;

/// A value of the case file or the command line that is not accepted;
/// the text says what is (the caller names the file and field, or the
/// flag).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SpecError {
    #[error("must be a rate from {min:e} Hz to {max:e} Hz, got {0:e}", min = MIN_RATE_HZ, max = MAX_RATE_HZ)]
    RateOutOfRange(f64),
    #[error(
        "unknown number format `{0}`; expected \"f64\", \"f32\" or \"qN\" with N from {lo} to {hi} (q15: 16-bit word, q31: 32-bit word)",
        lo = FIXED_BITS.start(),
        hi = FIXED_BITS.end()
    )]
    UnknownFormat(String),
    /// An old name, refused with the new one.
    #[error("structure `df2t` is now called `transposed-direct`")]
    RenamedStructure,
    #[error("unknown structure `{0}`; expected \"transposed-direct\" or \"sos\"")]
    UnknownStructure(String),
}

/// Checks a loop rate against [`MIN_RATE_HZ`] and [`MAX_RATE_HZ`]; the
/// message says the limits (used by the case file and the command line).
pub fn rate_in_range(rate_hz: f64) -> Result<f64, SpecError> {
    if !rate_hz.is_finite() || !(MIN_RATE_HZ..=MAX_RATE_HZ).contains(&rate_hz) {
        return Err(SpecError::RateOutOfRange(rate_hz));
    }
    Ok(rate_hz)
}

/// Most samples accepted in `[uncertainty]`: each is a prepared loop held
/// in memory and evaluated at every grid point and search step, so more
/// than this is hours of work (a typo guard, like `MAX_POINTS`).
pub const MAX_SAMPLES: usize = 10_000;

/// How the rate grid is spaced between `min_hz` and `max_hz`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Spacing {
    /// Equal ratios between neighbours (the default).
    Log,
    /// Equal differences between neighbours.
    Linear,
}

/// The loop rates to sweep, in Hz.
#[derive(Debug, Clone, PartialEq)]
pub struct Rates {
    /// Lowest rate, Hz (> 0).
    pub min_hz: f64,
    /// Highest rate, Hz (> `min_hz`; equal to it for the single rate of a
    /// controller given in z).
    pub max_hz: f64,
    /// Number of grid points, 2 to [`MAX_POINTS`] (1 for a controller
    /// given in z).
    pub points: usize,
    /// Grid spacing.
    pub spacing: Spacing,
}

impl Rates {
    /// The one rate a controller given in z runs at, Hz.
    pub fn single(rate_hz: f64) -> Self {
        Rates {
            min_hz: rate_hz,
            max_hz: rate_hz,
            points: 1,
            spacing: Spacing::Log,
        }
    }

    /// The requested rates in Hz, ascending, with the first and last
    /// exactly `min_hz` and `max_hz`.
    pub fn grid(&self) -> Vec<f64> {
        if self.points == 1 || self.min_hz == self.max_hz {
            return vec![self.max_hz];
        }
        let n = self.points.max(2);
        let last = n - 1;
        (0..n)
            .map(|i| {
                if i == 0 {
                    return self.min_hz;
                }
                if i == last {
                    return self.max_hz;
                }
                let t = i as f64 / last as f64;
                match self.spacing {
                    Spacing::Log => self.min_hz * (self.max_hz / self.min_hz).powf(t),
                    Spacing::Linear => self.min_hz + (self.max_hz - self.min_hz) * t,
                }
            })
            .collect()
    }
}

/// The limits a loop must meet. `None` means "no limit on this figure".
/// The figures are defined in the loop model (`shared/loop-model.md`).
#[derive(Debug, Clone, PartialEq)]
pub struct Spec {
    /// Largest step overshoot, percent of the final value.
    pub max_overshoot_pct: Option<f64>,
    /// Longest settling time into the settling band, seconds.
    pub max_settling_s: Option<f64>,
    /// Settling band, percent of the final value (default 2).
    pub settling_band_pct: f64,
    /// Smallest phase margin, degrees.
    pub min_phase_margin_deg: Option<f64>,
    /// Smallest gain margin, dB.
    pub min_gain_margin_db: Option<f64>,
    /// Largest sensitivity peak Ms = max |1/(1+L)|, a plain ratio.
    pub max_sensitivity_peak: Option<f64>,
    /// Longest 10-90 % rise time, seconds.
    pub max_rise_s: Option<f64>,
    /// Longest recovery time after a unit load step, seconds.
    pub max_recovery_s: Option<f64>,
    /// Largest output excursion after a unit load step at the plant input,
    /// in output units.
    pub max_disturbance_peak: Option<f64>,
    /// Largest controller output magnitude |u| in the reference step, in
    /// actuator units.
    pub max_u_peak: Option<f64>,
    /// Factor (>= 1) applied to the slowest feasible rate to give the
    /// recommended rate (default 1.25).
    pub headroom: f64,
}

impl Spec {
    /// A spec with no limit: the default settling band (2 %) and headroom
    /// (1.25), what a case without `[spec]` asks.
    pub fn unlimited() -> Spec {
        Spec {
            max_overshoot_pct: None,
            max_settling_s: None,
            settling_band_pct: 2.0,
            min_phase_margin_deg: None,
            min_gain_margin_db: None,
            max_sensitivity_peak: None,
            max_rise_s: None,
            max_recovery_s: None,
            max_disturbance_peak: None,
            max_u_peak: None,
            headroom: 1.25,
        }
    }
}

/// How the cost of one controller update is given.
#[derive(Debug, Clone, PartialEq)]
pub enum Cycles {
    /// Measured or known CPU cycles per update.
    PerUpdate(f64),
    /// Estimate: cycles per multiply-accumulate times the controller's MAC
    /// count, plus fixed overhead cycles per update.
    Estimate {
        cycles_per_mac: f64,
        overhead_cycles: f64,
    },
}

/// The processor budget the loop must fit in.
#[derive(Debug, Clone, PartialEq)]
pub struct Budget {
    /// CPU clock, Hz.
    pub cpu_hz: f64,
    /// Cost of one update.
    pub cycles: Cycles,
    /// Largest share of the CPU the loop may take, percent, in (0, 100]
    /// (default 100).
    pub max_load_pct: f64,
    /// Timer clock, Hz, when the rate must be an integer division of it.
    pub timer_hz: Option<f64>,
}

/// Most corners `mode = "corners"` evaluates (2^10): beyond that, sample.
pub const MAX_CORNERS: usize = 1 << 10;

/// How the controller's coefficients are stored on the target.
#[derive(Debug, Clone, PartialEq)]
pub struct Arithmetic {
    /// Number formats to check, in file order; the first is the one the
    /// rate window is bounded by.
    pub formats: Vec<Format>,
    /// Arrangement of the difference equation (default `transposed-direct`).
    pub structure: Structure,
}

/// How the parameter ranges are explored.
#[derive(Debug, Clone, PartialEq)]
pub enum UncertaintyMode {
    /// Every corner of the box of parameter ranges.
    Corners,
    /// `samples` points of a Latin hypercube over the box, drawn from
    /// `seed` (the same seed gives the same points).
    Samples { samples: usize, seed: u64 },
}

/// How the actuator turns the commands into a signal between updates
/// (loop model, "Hold kinds"). Each starts at the update instant
/// `t_k = kT + tau` and runs to the next one.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Default, Serialize)]
pub enum HoldKind {
    /// `u(t) = u_k`: the command held flat.
    #[default]
    #[serde(rename = "zero-order")]
    ZeroOrder,
    /// `u(t) = u_k + (u_k - u_{k-1}) (t - t_k) / T`: extrapolated with the
    /// slope of the last two commands (causal first-order hold).
    #[serde(rename = "first-order")]
    FirstOrder,
    /// `u(t) = u_{k-1} + (u_k - u_{k-1}) (t - t_k) / T`: a ramp from the
    /// previous command to the new one (the triangle hold, one period late).
    #[serde(rename = "interpolating")]
    Interpolating,
}

impl HoldKind {
    pub const ALL: [HoldKind; 3] = [
        HoldKind::ZeroOrder,
        HoldKind::FirstOrder,
        HoldKind::Interpolating,
    ];

    /// Name in case files, columns and reports.
    pub fn name(self) -> &'static str {
        match self {
            HoldKind::ZeroOrder => "zero-order",
            HoldKind::FirstOrder => "first-order",
            HoldKind::Interpolating => "interpolating",
        }
    }

    /// The kind with this name, if any.
    pub fn from_name(name: &str) -> Option<HoldKind> {
        HoldKind::ALL.into_iter().find(|k| k.name() == name)
    }

    /// Every name, comma separated (for error messages).
    pub fn names() -> String {
        HoldKind::ALL.map(HoldKind::name).join(", ")
    }
}

impl std::fmt::Display for HoldKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// A number format for the stored coefficients.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Format {
    /// IEEE 754 binary64: the reference.
    F64,
    /// IEEE 754 binary32.
    F32,
    /// Signed fixed point with `magnitude_bits` bits besides the sign
    /// (`q15` is a 16-bit word, `q31` a 32-bit word).
    Fixed { magnitude_bits: u32 },
}

/// Fewest and most magnitude bits accepted for `qN` (a 4- to 32-bit word).
pub const FIXED_BITS: std::ops::RangeInclusive<u32> = 3..=31;

impl Format {
    /// Name in files and output: `f64`, `f32`, `q15`.
    pub fn name(&self) -> String {
        match self {
            Format::F64 => "f64".into(),
            Format::F32 => "f32".into(),
            Format::Fixed { magnitude_bits } => format!("q{magnitude_bits}"),
        }
    }
}

impl fmt::Display for Format {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.name())
    }
}

/// Written as its name (`q15`), as files have always carried it.
impl Serialize for Format {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&self.name())
    }
}

impl FromStr for Format {
    type Err = SpecError;
    fn from_str(s: &str) -> Result<Self, SpecError> {
        match s {
            "f64" => Ok(Format::F64),
            "f32" => Ok(Format::F32),
            _ => {
                let bits = s
                    .strip_prefix('q')
                    .filter(|b| b.bytes().all(|c| c.is_ascii_digit()) && !b.starts_with('0'))
                    .and_then(|b| b.parse::<u32>().ok())
                    .filter(|b| FIXED_BITS.contains(b));
                bits.map(|magnitude_bits| Format::Fixed { magnitude_bits })
                    .ok_or_else(|| SpecError::UnknownFormat(s.to_string()))
            }
        }
    }
}

/// How the controller's difference equation is arranged on the target.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Structure {
    /// One direct form II transposed section of the full order.
    TransposedDirect,
    /// A cascade of second-order sections (each in direct form II
    /// transposed) and one gain.
    Sos,
}

impl Structure {
    /// Name in files and output.
    pub fn name(&self) -> &'static str {
        match self {
            Structure::TransposedDirect => "transposed-direct",
            Structure::Sos => "sos",
        }
    }

    /// The other arrangement (what the advice tries when this one loses
    /// the integral action).
    pub fn other(self) -> Structure {
        match self {
            Structure::TransposedDirect => Structure::Sos,
            Structure::Sos => Structure::TransposedDirect,
        }
    }
}

impl fmt::Display for Structure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Written as its name (`sos`), as files have always carried it.
impl Serialize for Structure {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.name())
    }
}

impl FromStr for Structure {
    type Err = SpecError;
    fn from_str(s: &str) -> Result<Self, SpecError> {
        match s {
            "transposed-direct" => Ok(Structure::TransposedDirect),
            "sos" => Ok(Structure::Sos),
            "df2t" => Err(SpecError::RenamedStructure), // old name
            _ => Err(SpecError::UnknownStructure(s.to_string())),
        }
    }
}
