//! Case files: one TOML file describes one loop (plant, sensor,
//! controller), the rates to sweep, the discretization methods to try,
//! the spec the loop must meet and, optionally, the processor budget and
//! the parameter uncertainty.
//!
//! Loading is strict: unknown keys, wrong types and inconsistent values
//! are errors that name the file and the dotted field (`plant.transfer`,
//! `rates.min_hz`, `methods.use[2]`), and expression errors show the
//! expression with a caret under the column. The key reference is the
//! README's case-file section.
//!
//! Transfer functions written as expressions may use the parameters of
//! `[params]`; they are parsed once and evaluated for any parameter values
//! with [`Case::models_at`].

pub mod expr;

use crate::case::expr::{Expr, ExprError};
use crate::model::discretize::Method;
use crate::model::poly::{C64, Poly};
use crate::model::transfer::{DiscreteTransfer, Transfer};
use crate::spec::{
    Arithmetic, Budget, Cycles, HoldKind, MAX_CORNERS, MAX_MONIC_COEFF, MAX_POINTS, MAX_SAMPLES,
    Rates, Spacing, Spec, UncertaintyMode, rate_in_range,
};
use crate::spec::{Format, Structure};
use serde::Deserialize;
use std::path::{Path, PathBuf};
use std::str::FromStr;

/// Corner checks at load time are done when at most this many parameters
/// have a range (2^10 = 1024 model evaluations).
const MAX_CHECKED_RANGED_PARAMS: usize = 10;

/// An uncertain (or fixed) model parameter, usable by name in expressions.
#[derive(Debug, Clone, PartialEq)]
pub struct Param {
    /// Identifier used in expressions.
    pub name: String,
    /// Value for the nominal design, in the parameter's own units.
    pub nominal: f64,
    /// Lower end of the range; equals `nominal` for a fixed parameter.
    pub min: f64,
    /// Upper end of the range; equals `nominal` for a fixed parameter.
    pub max: f64,
}

pub use crate::model::transfer::Controller;

mod outer;
pub use outer::{DEFAULT_RATIOS, MAX_RATIO, OuterLoop, OuterModels};

/// The loop's models for one set of parameter values.
#[derive(Debug, Clone, PartialEq)]
pub struct LoopModels {
    /// Plant P(s).
    pub plant: Transfer,
    /// Sensor H(s) in the feedback path (1 when not given).
    pub sensor: Transfer,
    /// Controller C(s) or C(z).
    pub controller: Controller,
}

/// A loaded, validated case file.
#[derive(Debug, Clone, PartialEq)]
pub struct Case {
    /// The file it came from (used in messages).
    pub source: PathBuf,
    /// Title for reports; defaults to the file name without extension.
    pub title: String,
    /// Parameters in file order; `models_at` takes values in this order.
    pub params: Vec<Param>,
    /// Computation delays to evaluate, in periods (any finite value >= 0);
    /// `[0.0]` when `[timing]` is absent.
    pub compute_delays: Vec<f64>,
    /// Actuator hold kinds to evaluate, in file order (`[timing] hold`);
    /// `[zero-order]` by default.
    pub holds: Vec<HoldKind>,
    /// Transport delay of the plant (`[plant] delay_s`), s; 0 without.
    pub plant_delay_s: f64,
    /// Transport delay of the measurement (`[sensor] delay_s`), s; 0 without.
    pub sensor_delay_s: f64,
    /// The rate sweep.
    pub rates: Rates,
    /// Discretization methods to try, in file order; empty for a
    /// controller given in z.
    pub methods: Vec<Method>,
    /// Pre-warp frequency for `tustin-prewarped`, Hz.
    pub prewarp_hz: Option<f64>,
    /// The limits to meet.
    pub spec: Spec,
    /// Processor budget, if any.
    pub budget: Option<Budget>,
    /// Parameter exploration, if any.
    pub uncertainty: Option<UncertaintyMode>,
    /// Coefficient formats whose precision ceiling is wanted, if any.
    pub arithmetic: Option<Arithmetic>,
    /// A cascaded outer loop (`[outer]`), if any.
    pub outer: Option<OuterLoop>,
    /// Sanity notes: values that are valid but look like a slip (a CPU
    /// clock below 1 MHz, a range no plant variant can feel). Printed by
    /// `check` and carried into the pick's notes; never an error.
    pub notes: Vec<String>,
    blocks: Blocks,
}

/// A CPU clock below this is probably given in MHz instead of Hz
/// (common practice, no source: microcontrollers run at 1 MHz and up).
const CPU_HZ_SANITY: f64 = 1e6;

/// Everything that can be wrong with a case file.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CaseError {
    /// The file could not be read (missing, unreadable, not UTF-8).
    #[error("{file}: cannot read the file: {message}")]
    Read { file: String, message: String },
    /// The text is not valid TOML.
    #[error("{file}: line {line}, column {column}: TOML syntax error: {message}")]
    Syntax {
        file: String,
        line: usize,
        column: usize,
        message: String,
    },
    /// A key or value has the wrong shape: unknown key, wrong type,
    /// unknown name. Line and column are 1-based, column in characters.
    #[error("{file}: field `{field}` (line {line}, column {column}): {message}")]
    Shape {
        file: String,
        field: String,
        line: usize,
        column: usize,
        message: String,
    },
    /// A value is well-formed but not acceptable.
    #[error("{file}: field `{field}`: {message}")]
    Invalid {
        file: String,
        field: String,
        message: String,
    },
    /// An expression does not parse or evaluate; `column` is 1-based in
    /// characters of `expression`. Displayed with the expression and a
    /// caret line under the column.
    #[error(
        "{file}: field `{field}`: column {column}: {message}\n    {expression}\n    {caret}",
        caret = caret_under(expression, *column)
    )]
    Expression {
        file: String,
        field: String,
        expression: String,
        column: usize,
        message: String,
    },
}

/// A line with `^` under 1-based character `column` of `text`.
fn caret_under(text: &str, column: usize) -> String {
    ExprError {
        column,
        message: String::new(),
    }
    .caret_line(text)
}

impl CaseError {
    /// The dotted field the error is about, when there is one.
    pub fn field(&self) -> Option<&str> {
        match self {
            CaseError::Shape { field, .. }
            | CaseError::Invalid { field, .. }
            | CaseError::Expression { field, .. } => Some(field),
            CaseError::Read { .. } | CaseError::Syntax { .. } => None,
        }
    }
}

// ---------------------------------------------------------------- models

/// A continuous model as written: an expression (evaluated per parameter
/// set) or a fixed transfer function (zeros/poles/gain, pid).
#[derive(Debug, Clone, PartialEq)]
enum Source {
    Expr(Expr),
    Fixed(Transfer),
}

#[derive(Debug, Clone, PartialEq)]
struct Model {
    /// Dotted field of the expression (`plant.transfer`), for messages.
    field: String,
    /// `plant`, `sensor` or `controller`.
    role: &'static str,
    source: Source,
    /// The form the file used, for reports.
    written: Written,
}

/// A block of the loop in the form the case file wrote it, so a report
/// can show what the reader typed rather than the expanded polynomials.
#[derive(Debug, Clone, PartialEq)]
pub enum Written {
    /// `transfer = "..."`: the expression text.
    Expression(String),
    /// `zeros`, `poles`, `gain` (roots in rad/s).
    ZerosPolesGain {
        zeros: Vec<C64>,
        poles: Vec<C64>,
        gain: f64,
    },
    /// `pid = { ... }` (missing gains are zero).
    Pid {
        kp: f64,
        ki: f64,
        kd: f64,
        derivative_filter_hz: Option<f64>,
    },
    /// `numerator_z`, `denominator_z` (descending powers of z) at `rate_hz`.
    InZ {
        numerator: Vec<f64>,
        denominator: Vec<f64>,
        rate_hz: f64,
    },
}

/// The three blocks as written; `sensor` is None when the file has no
/// `[sensor]` (a unit sensor).
#[derive(Debug, Clone, PartialEq)]
pub struct WrittenLoop {
    pub plant: Written,
    pub sensor: Option<Written>,
    pub controller: Written,
}

#[derive(Debug, Clone, PartialEq)]
enum ControllerModel {
    Continuous(Model),
    Discrete(DiscreteTransfer),
}

// ------------------------------------------------------------ raw layout

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawCase {
    title: Option<String>,
    params: Option<toml::Table>,
    plant: Option<RawTransfer>,
    sensor: Option<RawTransfer>,
    controller: Option<RawController>,
    timing: Option<RawTiming>,
    rates: Option<RawRates>,
    methods: Option<RawMethods>,
    spec: Option<RawSpec>,
    budget: Option<RawBudget>,
    uncertainty: Option<RawUncertainty>,
    arithmetic: Option<RawArithmetic>,
    /// A cascaded outer loop (`case::outer`).
    outer: Option<outer::RawOuter>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawTransfer {
    transfer: Option<String>,
    zeros: Option<Vec<toml::Value>>,
    poles: Option<Vec<toml::Value>>,
    gain: Option<f64>,
    delay_s: Option<toml::Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawController {
    transfer: Option<String>,
    zeros: Option<Vec<toml::Value>>,
    poles: Option<Vec<toml::Value>>,
    gain: Option<f64>,
    pid: Option<RawPid>,
    numerator_z: Option<Vec<f64>>,
    denominator_z: Option<Vec<f64>>,
    rate_hz: Option<f64>,
    /// The hold a controller given in z was designed for.
    hold: Option<String>,
    /// Refused with a message: a transport delay belongs to the plant or
    /// the sensor.
    delay_s: Option<toml::Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawPid {
    kp: Option<f64>,
    ki: Option<f64>,
    kd: Option<f64>,
    derivative_filter_hz: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawTiming {
    compute_delay: Option<toml::Value>,
    hold: Option<toml::Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawRates {
    min_hz: Option<f64>,
    max_hz: Option<f64>,
    points: Option<i64>,
    spacing: Option<Spacing>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawMethods {
    #[serde(rename = "use")]
    use_: Option<Vec<String>>,
    prewarp_hz: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawSpec {
    max_overshoot_pct: Option<f64>,
    max_settling_s: Option<f64>,
    settling_band_pct: Option<f64>,
    min_phase_margin_deg: Option<f64>,
    min_gain_margin_db: Option<f64>,
    max_sensitivity_peak: Option<f64>,
    max_rise_s: Option<f64>,
    max_recovery_s: Option<f64>,
    max_disturbance_peak: Option<f64>,
    max_u_peak: Option<f64>,
    headroom: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawBudget {
    cpu_hz: Option<f64>,
    cycles_per_update: Option<f64>,
    cycles_per_mac: Option<f64>,
    overhead_cycles: Option<f64>,
    max_load_pct: Option<f64>,
    timer_hz: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawUncertainty {
    mode: Option<String>,
    samples: Option<i64>,
    seed: Option<u64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawArithmetic {
    formats: Option<Vec<String>>,
    structure: Option<String>,
}

// ---------------------------------------------------------------- errors

/// The file name used in messages, plus error constructors.
struct Ctx {
    file: String,
    /// Put before every field name in messages (`outer.` for the outer
    /// loop's tables, empty for the loop's own).
    prefix: &'static str,
}

impl Ctx {
    fn invalid(&self, field: impl Into<String>, message: impl Into<String>) -> CaseError {
        CaseError::Invalid {
            file: self.file.clone(),
            field: format!("{}{}", self.prefix, Into::<String>::into(field)),
            message: message.into(),
        }
    }

    fn expression(&self, field: &str, text: &str, e: &ExprError) -> CaseError {
        self.expression_with(field, text, e, "")
    }

    fn expression_with(&self, field: &str, text: &str, e: &ExprError, prefix: &str) -> CaseError {
        CaseError::Expression {
            file: self.file.clone(),
            field: format!("{}{field}", self.prefix),
            expression: text.to_string(),
            column: e.column,
            message: format!("{prefix}{}", e.message),
        }
    }

    fn missing(&self, field: &str, what: &str) -> CaseError {
        self.invalid(field, format!("missing: {what}"))
    }

    /// A finite number, with `ok` deciding the allowed range and `range`
    /// describing it for the message.
    fn number(
        &self,
        field: &str,
        v: f64,
        ok: fn(f64) -> bool,
        range: &str,
    ) -> Result<f64, CaseError> {
        if !v.is_finite() {
            return Err(self.invalid(field, format!("must be a finite number, got {v:?}")));
        }
        if !ok(v) {
            return Err(self.invalid(field, format!("must be {range}, got {v:?}")));
        }
        Ok(v)
    }

    fn positive(&self, field: &str, v: f64) -> Result<f64, CaseError> {
        self.number(field, v, |v| v > 0.0, "greater than zero")
    }

    fn opt_positive(&self, field: &str, v: Option<f64>) -> Result<Option<f64>, CaseError> {
        v.map(|v| self.positive(field, v)).transpose()
    }
}

/// A TOML value's kind with its article, for error messages ("an
/// integer", "a string").
pub(crate) fn a_kind(v: &toml::Value) -> String {
    let kind = v.type_str();
    format!("{} {kind}", crate::engineering::article(kind))
}

/// serde names Rust types in its messages; say what the file needs.
fn plain_type_names(message: &str) -> String {
    message
        .replace("expected f64", "expected a number")
        .replace("expected i64", "expected an integer")
        .replace("expected u64", "expected a whole number, 0 or more")
}

/// 1-based line and character column of byte `offset` in `text`.
fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let mut off = offset.min(text.len());
    while !text.is_char_boundary(off) {
        off -= 1;
    }
    let before = &text[..off];
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map_or(0, |i| i + 1);
    let column = text[line_start..off].chars().count() + 1;
    (line, column)
}

fn contains(span: &std::ops::Range<usize>, off: usize) -> bool {
    span.start <= off && off < span.end.max(span.start + 1)
}

/// The dotted path of the key or value covering byte `off`, found by
/// walking the spanned document (serde's errors carry only a span).
fn path_at(doc: &toml::de::DeTable<'_>, off: usize) -> Option<String> {
    fn walk_table(t: &toml::de::DeTable<'_>, off: usize, path: &mut Vec<String>) -> bool {
        for (k, v) in t.iter() {
            path.push(k.get_ref().to_string());
            if contains(&k.span(), off) || walk_value(v.get_ref(), off, path) {
                return true;
            }
            if contains(&v.span(), off) {
                return true;
            }
            path.pop();
        }
        false
    }
    fn walk_value(v: &toml::de::DeValue<'_>, off: usize, path: &mut Vec<String>) -> bool {
        match v {
            toml::de::DeValue::Table(t) => walk_table(t, off, path),
            toml::de::DeValue::Array(a) => {
                for (i, item) in a.iter().enumerate() {
                    if let Some(last) = path.last_mut() {
                        let base = last.clone();
                        last.push_str(&format!("[{i}]"));
                        if walk_value(item.get_ref(), off, path) || contains(&item.span(), off) {
                            return true;
                        }
                        if let Some(last) = path.last_mut() {
                            *last = base;
                        }
                    }
                }
                false
            }
            _ => false,
        }
    }
    let mut path = Vec::new();
    walk_table(doc, off, &mut path).then(|| path.join("."))
}

/// Case-file keys an earlier version accepted, as (table, old key, new
/// key). No alias is kept: an old key is refused with its new name.
const RENAMED_KEYS: [(&str, &str, &str); 5] = [
    ("plant", "tf", "transfer"),              // old name
    ("sensor", "tf", "transfer"),             // old name
    ("controller", "tf", "transfer"),         // old name
    ("controller", "num_z", "numerator_z"),   // old name
    ("controller", "den_z", "denominator_z"), // old name
];

/// The first renamed key in the document, as a `Shape` error at its place.
fn renamed_key(ctx: &Ctx, text: &str, doc: &toml::de::DeTable<'_>) -> Option<CaseError> {
    for (table, old, new) in RENAMED_KEYS {
        let Some((_, v)) = doc.iter().find(|(k, _)| k.get_ref() == table) else {
            continue;
        };
        let toml::de::DeValue::Table(t) = v.get_ref() else {
            continue;
        };
        if let Some((k, _)) = t.iter().find(|(k, _)| k.get_ref() == old) {
            let (line, column) = line_column(text, k.span().start);
            return Some(CaseError::Shape {
                file: ctx.file.clone(),
                field: format!("{table}.{old}"),
                line,
                column,
                message: format!("`{old}` is now called `{new}`"),
            });
        }
    }
    None
}

/// Keys of the table at `path` in file order (the parsed table sorts them).
fn keys_in_file_order(doc: &toml::de::DeTable<'_>, path: &[&str]) -> Vec<String> {
    let mut table = doc;
    for key in path {
        match table.iter().find(|(k, _)| k.get_ref() == key) {
            Some((_, v)) => match v.get_ref() {
                toml::de::DeValue::Table(t) => table = t,
                _ => return Vec::new(),
            },
            None => return Vec::new(),
        }
    }
    let mut keys: Vec<(usize, String)> = table
        .iter()
        .map(|(k, _)| (k.span().start, k.get_ref().to_string()))
        .collect();
    keys.sort();
    keys.into_iter().map(|(_, k)| k).collect()
}

// ------------------------------------------------------- value helpers

fn is_identifier(name: &str) -> bool {
    let mut chars = name.chars();
    matches!(chars.next(), Some(c) if c.is_ascii_alphabetic() || c == '_')
        && chars.all(|c| c.is_ascii_alphanumeric() || c == '_')
}

fn value_as_f64(v: &toml::Value) -> Option<f64> {
    match v {
        toml::Value::Integer(i) => Some(*i as f64),
        toml::Value::Float(f) => Some(*f),
        _ => None,
    }
}

/// Parses `"-3+4j"`, `"2j"`, `"-5"`, `"-j"` (also with `i`, spaces allowed).
fn parse_complex(text: &str) -> Option<C64> {
    let s: String = text.chars().filter(|c| !c.is_whitespace()).collect();
    if s.is_empty() {
        return None;
    }
    let num = |t: &str| -> Option<f64> {
        // Only plain decimal numbers: no `inf`, `nan` spelled out.
        if !t
            .chars()
            .all(|c| c.is_ascii_digit() || matches!(c, '.' | 'e' | 'E' | '+' | '-'))
        {
            return None;
        }
        t.parse::<f64>().ok().filter(|v| v.is_finite())
    };
    let Some(body) = s.strip_suffix(['j', 'i']) else {
        return num(&s).map(|re| C64::new(re, 0.0));
    };
    let bytes = body.as_bytes();
    let split = (1..bytes.len())
        .rev()
        .find(|&k| matches!(bytes[k], b'+' | b'-') && !matches!(bytes[k - 1], b'e' | b'E'));
    let (re, im) = match split {
        Some(k) => (num(&body[..k])?, &body[k..]),
        None => (0.0, body),
    };
    let im = match im {
        "" | "+" => 1.0,
        "-" => -1.0,
        t => num(t)?,
    };
    Some(C64::new(re, im))
}

fn fmt_complex(z: C64) -> String {
    if z.im == 0.0 {
        format!("{}", z.re)
    } else if z.re == 0.0 {
        format!("{}j", z.im)
    } else {
        let sign = if z.im < 0.0 { '-' } else { '+' };
        format!("{}{}{}j", z.re, sign, z.im.abs())
    }
}

/// Reads a list of roots and checks every complex one has its conjugate
/// (with the same multiplicity).
fn roots(ctx: &Ctx, field: &str, values: &[toml::Value]) -> Result<Vec<C64>, CaseError> {
    let mut out = Vec::with_capacity(values.len());
    for (i, v) in values.iter().enumerate() {
        let f = format!("{field}[{i}]");
        let z = match v {
            toml::Value::String(s) => parse_complex(s).ok_or_else(|| {
                ctx.invalid(
                    &f,
                    format!("`{s}` is not a finite number or complex value like \"-3+4j\""),
                )
            })?,
            other => match value_as_f64(other) {
                Some(x) if x.is_finite() => C64::new(x, 0.0),
                Some(x) => return Err(ctx.invalid(&f, format!("must be finite, got {x}"))),
                None => {
                    return Err(ctx.invalid(
                        &f,
                        format!(
                            "expected a number or a complex string like \"-3+4j\", found {}",
                            a_kind(other)
                        ),
                    ));
                }
            },
        };
        out.push(z);
    }
    for (i, z) in out.iter().enumerate() {
        if z.im == 0.0 {
            continue;
        }
        let c = z.conj();
        let count = |w: C64| out.iter().filter(|&&x| x == w).count();
        if count(*z) != count(c) {
            return Err(ctx.invalid(
                format!("{field}[{i}]"),
                format!(
                    "`{}` needs its conjugate `{}` in the same list (a real system has conjugate pairs)",
                    fmt_complex(*z),
                    fmt_complex(c)
                ),
            ));
        }
    }
    Ok(out)
}

/// Checks a model's transfer function: finite, non-zero, proper.
fn check_transfer(
    ctx: &Ctx,
    field: &str,
    role: &str,
    tf: &Transfer,
    prefix: &str,
) -> Result<(), CaseError> {
    if !tf.is_finite() {
        return Err(ctx.invalid(field, format!("{prefix}a coefficient is not finite")));
    }
    if tf.denominator.is_zero() {
        return Err(ctx.invalid(field, format!("{prefix}the denominator is zero")));
    }
    if tf.numerator.is_zero() {
        return Err(ctx.invalid(
            field,
            format!("{prefix}the {role} is identically zero, so the loop is open"),
        ));
    }
    if !tf.is_proper() {
        return Err(ctx.invalid(
            field,
            format!(
                "{prefix}improper {role}: numerator degree {} is above denominator degree {}",
                tf.numerator.degree(),
                tf.denominator.degree()
            ),
        ));
    }
    if let Some(big) = monic_overflow(tf) {
        return Err(ctx.invalid(
            field,
            format!(
                "{prefix}the {role}'s numbers are beyond the range looprate computes in: \
                 divided by the leading denominator coefficient, a coefficient is {big:e} \
                 (at most {MAX_MONIC_COEFF:e} allowed); rescale its time unit or its gain"
            ),
        ));
    }
    Ok(())
}

/// The largest coefficient magnitude of `transfer` with a monic denominator,
/// when it exceeds [`MAX_MONIC_COEFF`] or is not finite (a leading
/// coefficient of 1e-320 divides everything into infinity).
pub fn monic_overflow(tf: &Transfer) -> Option<f64> {
    let lead = tf.denominator.leading();
    let big = tf
        .numerator
        .coeffs()
        .iter()
        .chain(tf.denominator.coeffs())
        .map(|c| (c / lead).abs())
        .fold(0.0f64, |m, v| {
            if v.is_nan() || m.is_nan() {
                f64::NAN
            } else {
                m.max(v)
            }
        });
    if big.is_nan() {
        Some(f64::INFINITY)
    } else {
        (big > MAX_MONIC_COEFF).then_some(big)
    }
}

/// `transfer = "..."` or `zeros`/`poles`/`gain` for the plant or sensor.
fn model_from(
    ctx: &Ctx,
    base: &str,
    role: &'static str,
    transfer: Option<String>,
    zeros: Option<Vec<toml::Value>>,
    poles: Option<Vec<toml::Value>>,
    gain: Option<f64>,
) -> Result<Option<Model>, CaseError> {
    let roots_form = zeros.is_some() || poles.is_some() || gain.is_some();
    match (transfer, roots_form) {
        (Some(_), true) => Err(ctx.invalid(
            base,
            "given two ways: `transfer` and `zeros`/`poles`/`gain`; keep one",
        )),
        (Some(text), false) => {
            let field = format!("{base}.transfer");
            let expr = Expr::parse(&text).map_err(|e| ctx.expression(&field, &text, &e))?;
            Ok(Some(Model {
                field,
                role,
                source: Source::Expr(expr),
                written: Written::Expression(text),
            }))
        }
        (None, true) => {
            let z = roots(
                ctx,
                &format!("{base}.zeros"),
                zeros.as_deref().unwrap_or(&[]),
            )?;
            let p = roots(
                ctx,
                &format!("{base}.poles"),
                poles.as_deref().unwrap_or(&[]),
            )?;
            let k = match gain {
                Some(k) => ctx.number(&format!("{base}.gain"), k, |k| k != 0.0, "non-zero")?,
                None => 1.0,
            };
            if z.len() > p.len() {
                return Err(ctx.invalid(
                    format!("{base}.zeros"),
                    format!(
                        "improper {role}: more zeros ({}) than poles ({})",
                        z.len(),
                        p.len()
                    ),
                ));
            }
            let tf = Transfer::new(Poly::from_roots(&z).scale(k), Poly::from_roots(&p));
            check_transfer(ctx, base, role, &tf, "")?;
            Ok(Some(Model {
                field: base.to_string(),
                role,
                source: Source::Fixed(tf),
                written: Written::ZerosPolesGain {
                    zeros: z,
                    poles: p,
                    gain: k,
                },
            }))
        }
        (None, false) => Ok(None),
    }
}

fn pid(ctx: &Ctx, raw: RawPid) -> Result<(Transfer, Written), CaseError> {
    let term = |name: &str, v: Option<f64>| -> Result<f64, CaseError> {
        match v {
            Some(v) => ctx.number(&format!("controller.pid.{name}"), v, |_| true, "finite"),
            None => Ok(0.0),
        }
    };
    let kp = term("kp", raw.kp)?;
    let ki = term("ki", raw.ki)?;
    let kd = term("kd", raw.kd)?;
    if kp == 0.0 && ki == 0.0 && kd == 0.0 {
        return Err(ctx.invalid(
            "controller.pid",
            "kp, ki and kd are all zero (or missing): the controller is zero",
        ));
    }
    let s = Poly::var();
    // a = s when there is an integral term, b = 1 + s/wf when there is a
    // derivative term: C = (kp a b + ki b + kd s a) / (a b).
    let a = if ki != 0.0 { s.clone() } else { Poly::one() };
    let b = if kd != 0.0 {
        let Some(f) = raw.derivative_filter_hz else {
            return Err(ctx.invalid(
                "controller.pid.kd",
                "kd without derivative_filter_hz is an improper controller (pure derivative); give derivative_filter_hz",
            ));
        };
        let f = ctx.positive("controller.pid.derivative_filter_hz", f)?;
        let wf = 2.0 * std::f64::consts::PI * f;
        Poly::new(vec![1.0, 1.0 / wf])
    } else {
        if let Some(f) = raw.derivative_filter_hz {
            ctx.positive("controller.pid.derivative_filter_hz", f)?;
        }
        Poly::one()
    };
    let den = a.mul(&b);
    let num = den.scale(kp).add(&b.scale(ki)).add(&s.mul(&a).scale(kd));
    let tf = Transfer::new(num, den);
    check_transfer(ctx, "controller.pid", "controller", &tf, "")?;
    let written = Written::Pid {
        kp,
        ki,
        kd,
        derivative_filter_hz: raw.derivative_filter_hz.filter(|_| kd != 0.0),
    };
    Ok((tf, written))
}

fn controller_from(ctx: &Ctx, raw: RawController) -> Result<ControllerModel, CaseError> {
    let mut forms = Vec::new();
    if raw.transfer.is_some() {
        forms.push("`transfer`");
    }
    if raw.zeros.is_some() || raw.poles.is_some() || raw.gain.is_some() {
        forms.push("`zeros`/`poles`/`gain`");
    }
    if raw.pid.is_some() {
        forms.push("`pid`");
    }
    if raw.numerator_z.is_some() || raw.denominator_z.is_some() || raw.rate_hz.is_some() {
        forms.push("`numerator_z`/`denominator_z`/`rate_hz`");
    }
    match forms.len() {
        0 => {
            return Err(ctx.invalid(
                "controller",
                "no controller given: use one of `transfer`, `zeros`/`poles`/`gain`, `pid`, `numerator_z`/`denominator_z`/`rate_hz`",
            ));
        }
        1 => {}
        _ => {
            return Err(ctx.invalid(
                "controller",
                format!(
                    "given {} ways: {}; keep one",
                    forms.len(),
                    forms.join(" and ")
                ),
            ));
        }
    }
    if let Some(p) = raw.pid {
        let (tf, written) = pid(ctx, p)?;
        return Ok(ControllerModel::Continuous(Model {
            field: "controller.pid".into(),
            role: "controller",
            source: Source::Fixed(tf),
            written,
        }));
    }
    if raw.numerator_z.is_some() || raw.denominator_z.is_some() || raw.rate_hz.is_some() {
        let num = raw
            .numerator_z
            .ok_or_else(|| ctx.missing("controller.numerator_z", "numerator coefficients in z"))?;
        let den = raw.denominator_z.ok_or_else(|| {
            ctx.missing("controller.denominator_z", "denominator coefficients in z")
        })?;
        let rate = raw.rate_hz.ok_or_else(|| {
            ctx.missing("controller.rate_hz", "the rate the controller runs at, Hz")
        })?;
        let rate = ctx.positive("controller.rate_hz", rate)?;
        rate_in_range(rate).map_err(|m| ctx.invalid("controller.rate_hz", m.to_string()))?;
        for (name, c) in [("numerator_z", &num), ("denominator_z", &den)] {
            if c.is_empty() {
                return Err(ctx.invalid(format!("controller.{name}"), "empty coefficient list"));
            }
            if let Some(i) = c.iter().position(|v| !v.is_finite()) {
                return Err(ctx.invalid(
                    format!("controller.{name}[{i}]"),
                    format!("must be finite, got {}", c[i]),
                ));
            }
        }
        if den[0] == 0.0 {
            return Err(ctx.invalid(
                "controller.denominator_z",
                "the leading (highest-power) coefficient is zero",
            ));
        }
        let tf = Transfer::new(Poly::from_descending(&num), Poly::from_descending(&den));
        if tf.numerator.is_zero() {
            return Err(ctx.invalid(
                "controller.numerator_z",
                "all coefficients are zero: the controller is zero",
            ));
        }
        if !tf.is_proper() {
            return Err(ctx.invalid(
                "controller.numerator_z",
                format!(
                    "non-causal controller: numerator degree {} is above denominator degree {}",
                    tf.numerator.degree(),
                    tf.denominator.degree()
                ),
            ));
        }
        return Ok(ControllerModel::Discrete(DiscreteTransfer {
            transfer: tf,
            period_s: 1.0 / rate,
        }));
    }
    let model = model_from(
        ctx,
        "controller",
        "controller",
        raw.transfer,
        raw.zeros,
        raw.poles,
        raw.gain,
    )?;
    // One form is present, so the model exists.
    model
        .map(ControllerModel::Continuous)
        .ok_or_else(|| ctx.invalid("controller", "no controller given"))
}

/// The plant, sensor and controller of one loop: the case's own or
/// `[outer]`'s, read by [`blocks_from`] and evaluated by `Case::blocks_at`.
#[derive(Debug, Clone, PartialEq)]
struct Blocks {
    plant: Model,
    sensor: Option<Model>,
    controller: ControllerModel,
}

impl Blocks {
    /// The blocks in the form the file wrote them.
    fn written(&self) -> WrittenLoop {
        WrittenLoop {
            plant: self.plant.written.clone(),
            sensor: self.sensor.as_ref().map(|m| m.written.clone()),
            controller: match &self.controller {
                ControllerModel::Continuous(m) => m.written.clone(),
                ControllerModel::Discrete(d) => Written::InZ {
                    numerator: d.transfer.numerator.descending(),
                    denominator: d.transfer.denominator.descending(),
                    rate_hz: 1.0 / d.period_s,
                },
            },
        }
    }

    /// The continuous models (for the parameter checks).
    fn models(&self) -> Vec<&Model> {
        let mut out = vec![&self.plant];
        out.extend(self.sensor.as_ref());
        if let ControllerModel::Continuous(m) = &self.controller {
            out.push(m);
        }
        out
    }
}

/// What [`blocks_from`] says where the loop's own tables and `[outer.*]`
/// differ (what is missing, where a delay belongs).
struct BlockWords {
    plant_missing: &'static str,
    sensor_missing: &'static str,
    controller_missing: &'static str,
    controller_delay: &'static str,
    hold_of_continuous: &'static str,
}

/// `[plant]`, `[sensor]` and `[controller]` (field names as `ctx`
/// prefixes them), with the hold a controller given in z assumes
/// (`[controller] hold`). The blocks' `delay_s` are read by the caller.
fn blocks_from(
    ctx: &Ctx,
    plant: Option<RawTransfer>,
    sensor: Option<RawTransfer>,
    controller: Option<RawController>,
    words: &BlockWords,
) -> Result<(Blocks, Option<HoldKind>), CaseError> {
    let plant = match plant {
        Some(p) => model_from(ctx, "plant", "plant", p.transfer, p.zeros, p.poles, p.gain)?,
        None => None,
    }
    .ok_or_else(|| ctx.missing("plant", words.plant_missing))?;
    let sensor = match sensor {
        Some(p) => Some(
            model_from(
                ctx, "sensor", "sensor", p.transfer, p.zeros, p.poles, p.gain,
            )?
            .ok_or_else(|| ctx.missing("sensor", words.sensor_missing))?,
        ),
        None => None,
    };
    let raw_controller =
        controller.ok_or_else(|| ctx.missing("controller", words.controller_missing))?;
    if raw_controller.delay_s.is_some() {
        return Err(ctx.invalid("controller.delay_s", words.controller_delay));
    }
    let assumed_hold = raw_controller.hold.clone();
    let controller = controller_from(ctx, raw_controller)?;
    let assumed_hold = match (assumed_hold, &controller) {
        (None, _) => None,
        (Some(h), ControllerModel::Discrete(_)) => Some(hold_kind(ctx, "controller.hold", &h)?),
        (Some(_), ControllerModel::Continuous(_)) => {
            return Err(ctx.invalid("controller.hold", words.hold_of_continuous));
        }
    };
    let blocks = Blocks {
        plant,
        sensor,
        controller,
    };
    Ok((blocks, assumed_hold))
}

fn params_from(ctx: &Ctx, table: toml::Table, order: &[String]) -> Result<Vec<Param>, CaseError> {
    let mut names: Vec<&String> = order.iter().filter(|n| table.contains_key(*n)).collect();
    // Anything the spanned walk missed keeps the table's order after.
    for k in table.keys() {
        if !names.contains(&k) {
            names.push(k);
        }
    }
    let mut out = Vec::new();
    for name in names {
        let field = format!("params.{name}");
        if name == "s" {
            return Err(ctx.invalid(
                &field,
                "`s` is the Laplace variable and cannot be a parameter",
            ));
        }
        if name == crate::case::expr::PI_NAME {
            return Err(ctx.invalid(
                &field,
                "`pi` is built in (3.14159...) and cannot be a parameter",
            ));
        }
        if !is_identifier(name) {
            return Err(ctx.invalid(
                &field,
                "a parameter name must be letters, digits and `_`, not starting with a digit",
            ));
        }
        let v = &table[name];
        let (nominal, min, max) = match v {
            toml::Value::Table(t) => {
                for k in t.keys() {
                    if !matches!(k.as_str(), "nominal" | "min" | "max") {
                        return Err(ctx.invalid(
                            format!("{field}.{k}"),
                            "unknown key; expected `nominal`, `min` or `max`",
                        ));
                    }
                }
                let get = |k: &str| -> Result<Option<f64>, CaseError> {
                    match t.get(k) {
                        None => Ok(None),
                        Some(x) => value_as_f64(x).map(Some).ok_or_else(|| {
                            ctx.invalid(
                                format!("{field}.{k}"),
                                format!("expected a number, found {}", a_kind(x)),
                            )
                        }),
                    }
                };
                let nominal = get("nominal")?
                    .ok_or_else(|| ctx.missing(&format!("{field}.nominal"), "the nominal value"))?;
                let min = get("min")?.unwrap_or(nominal);
                let max = get("max")?.unwrap_or(nominal);
                (nominal, min, max)
            }
            other => {
                let x = value_as_f64(other).ok_or_else(|| {
                    ctx.invalid(
                        &field,
                        format!(
                            "expected a number or a table {{ nominal, min, max }}, found {}",
                            a_kind(other)
                        ),
                    )
                })?;
                (x, x, x)
            }
        };
        for (k, x) in [("nominal", nominal), ("min", min), ("max", max)] {
            if !x.is_finite() {
                return Err(ctx.invalid(
                    format!("{field}.{k}"),
                    format!("must be a finite number, got {x}"),
                ));
            }
        }
        if min > nominal || nominal > max {
            return Err(ctx.invalid(
                &field,
                format!("needs min <= nominal <= max, got min {min}, nominal {nominal}, max {max}"),
            ));
        }
        out.push(Param {
            name: name.clone(),
            nominal,
            min,
            max,
        });
    }
    Ok(out)
}

/// A hold kind by name; the error lists the kinds.
fn hold_kind(ctx: &Ctx, field: &str, name: &str) -> Result<HoldKind, CaseError> {
    HoldKind::from_name(name).ok_or_else(|| {
        ctx.invalid(
            field,
            format!(
                "unknown hold kind `{name}`; the kinds are: {}",
                HoldKind::names()
            ),
        )
    })
}

/// `[timing] hold`: one name or a list (default `zero-order`). A
/// controller given in z runs only with the hold it was designed for
/// (`[controller] hold`, zero-order unless given).
fn holds_from(
    ctx: &Ctx,
    raw: Option<&toml::Value>,
    controller: &ControllerModel,
    assumed: Option<HoldKind>,
) -> Result<Vec<HoldKind>, CaseError> {
    let field = "timing.hold";
    let default = assumed.unwrap_or_default();
    let Some(value) = raw else {
        return Ok(vec![default]);
    };
    let list: Vec<(String, &toml::Value)> = match value {
        toml::Value::Array(a) => {
            if a.is_empty() {
                return Err(ctx.invalid(
                    field,
                    format!("empty list; give at least one of: {}", HoldKind::names()),
                ));
            }
            a.iter()
                .enumerate()
                .map(|(i, v)| (format!("{field}[{i}]"), v))
                .collect()
        }
        v => vec![(field.to_string(), v)],
    };
    let mut out: Vec<HoldKind> = Vec::new();
    for (f, v) in list {
        let Some(name) = v.as_str() else {
            return Err(ctx.invalid(
                &f,
                format!(
                    "expected a hold kind name ({}), found {}",
                    HoldKind::names(),
                    a_kind(v)
                ),
            ));
        };
        let kind = hold_kind(ctx, &f, name)?;
        if out.contains(&kind) {
            return Err(ctx.invalid(&f, format!("`{name}` is listed twice")));
        }
        if let ControllerModel::Discrete(_) = controller
            && kind != default
        {
            return Err(ctx.invalid(
                &f,
                format!(
                    "the controller is given in z and assumes a {} hold{}: it cannot be run with a `{}` hold (set [{p}controller] hold to the hold it was designed for, or give a continuous design to compare holds)",
                    default.name(),
                    if assumed.is_some() {
                        format!(" ([{}controller] hold)", ctx.prefix)
                    } else {
                        " (the default for a controller in z)".to_string()
                    },
                    kind.name(),
                    p = ctx.prefix
                ),
            ));
        }
        out.push(kind);
    }
    Ok(out)
}

/// Longest transport delay accepted, s (about 30 years): the continuous
/// design's Pade approximant of a delay has coefficients up to its sixth
/// power, which overflow near 1e51 s (1e300 s gave "a coefficient is not
/// finite" with no field named).
const MAX_TRANSPORT_DELAY_S: f64 = 1e9;

/// `delay_s` on [plant] or [sensor]: a finite number of seconds >= 0, at
/// most `MAX_TRANSPORT_DELAY_S`.
fn transport_delay(ctx: &Ctx, field: &str, raw: Option<&toml::Value>) -> Result<f64, CaseError> {
    let Some(v) = raw else {
        return Ok(0.0);
    };
    let d = value_as_f64(v).ok_or_else(|| {
        ctx.invalid(
            field,
            format!("expected a number of seconds, found {}", a_kind(v)),
        )
    })?;
    ctx.number(
        field,
        d,
        |d| (0.0..=MAX_TRANSPORT_DELAY_S).contains(&d),
        "a transport delay in seconds, >= 0 and at most 1e9",
    )
}

fn delays_from(ctx: &Ctx, raw: Option<RawTiming>) -> Result<Vec<f64>, CaseError> {
    let Some(value) = raw.and_then(|t| t.compute_delay) else {
        return Ok(vec![0.0]);
    };
    let field = "timing.compute_delay";
    let list: Vec<(String, &toml::Value)> = match &value {
        toml::Value::Array(a) => {
            if a.is_empty() {
                return Err(ctx.invalid(field, "empty list; give at least one delay"));
            }
            a.iter()
                .enumerate()
                .map(|(i, v)| (format!("{field}[{i}]"), v))
                .collect()
        }
        v => vec![(field.to_string(), v)],
    };
    let mut out: Vec<f64> = Vec::new();
    for (f, v) in list {
        let d = value_as_f64(v)
            .ok_or_else(|| ctx.invalid(&f, format!("expected a number, found {}", a_kind(v))))?;
        let d = ctx.number(
            &f,
            d,
            |d| d >= 0.0 && d.is_finite(),
            "a delay in periods, finite and >= 0 (1.5 is a period and a half)",
        )?;
        if out.contains(&d) {
            return Err(ctx.invalid(&f, format!("{d} is listed twice")));
        }
        out.push(d);
    }
    Ok(out)
}

fn rates_from(ctx: &Ctx, raw: Option<RawRates>) -> Result<Rates, CaseError> {
    let raw = raw.ok_or_else(|| ctx.missing("rates", "the [rates] table (min_hz, max_hz)"))?;
    let min_hz = raw
        .min_hz
        .ok_or_else(|| ctx.missing("rates.min_hz", "lowest rate to try, Hz"))?;
    let max_hz = raw
        .max_hz
        .ok_or_else(|| ctx.missing("rates.max_hz", "highest rate to try, Hz"))?;
    let min_hz = ctx.positive("rates.min_hz", min_hz)?;
    let max_hz = ctx.positive("rates.max_hz", max_hz)?;
    rate_in_range(min_hz).map_err(|m| ctx.invalid("rates.min_hz", m.to_string()))?;
    rate_in_range(max_hz).map_err(|m| ctx.invalid("rates.max_hz", m.to_string()))?;
    if min_hz >= max_hz {
        return Err(ctx.invalid(
            "rates.max_hz",
            format!("must be above min_hz ({min_hz}), got {max_hz:?}"),
        ));
    }
    let points = raw.points.unwrap_or(200);
    if points < 2 || points > MAX_POINTS as i64 {
        return Err(ctx.invalid(
            "rates.points",
            format!("must be from 2 to {MAX_POINTS}, got {points}"),
        ));
    }
    Ok(Rates {
        min_hz,
        max_hz,
        points: points as usize,
        spacing: raw.spacing.unwrap_or(Spacing::Log),
    })
}

fn methods_from(
    ctx: &Ctx,
    raw: Option<RawMethods>,
    controller: &ControllerModel,
) -> Result<(Vec<Method>, Option<f64>), CaseError> {
    if let ControllerModel::Discrete(_) = controller {
        if raw.is_some() {
            return Err(ctx.invalid(
                "methods",
                "does not apply: the controller is given in z (numerator_z/denominator_z), so nothing is discretized",
            ));
        }
        return Ok((Vec::new(), None));
    }
    let raw = raw.ok_or_else(|| {
        ctx.missing(
            "methods",
            "the [methods] table; a continuous controller needs `use = [...]`, e.g. [\"tustin\", \"step-invariant\"]",
        )
    })?;
    let names = raw
        .use_
        .ok_or_else(|| ctx.missing("methods.use", "the list of methods to try"))?;
    if names.is_empty() {
        return Err(ctx.invalid("methods.use", "empty list; name at least one method"));
    }
    let mut methods = Vec::new();
    for (i, name) in names.iter().enumerate() {
        let f = format!("methods.use[{i}]");
        let m = Method::from_str(name).map_err(|e| ctx.invalid(&f, e.to_string()))?;
        if methods.contains(&m) {
            return Err(ctx.invalid(&f, format!("`{m}` is listed twice")));
        }
        methods.push(m);
    }
    let prewarp = ctx.opt_positive("methods.prewarp_hz", raw.prewarp_hz)?;
    Ok((methods, prewarp))
}

fn spec_from(ctx: &Ctx, raw: Option<RawSpec>) -> Result<Spec, CaseError> {
    let Some(raw) = raw else {
        return Ok(Spec::unlimited());
    };
    let non_negative = |name: &str, v: Option<f64>| -> Result<Option<f64>, CaseError> {
        v.map(|v| ctx.number(&format!("spec.{name}"), v, |v| v >= 0.0, "zero or more"))
            .transpose()
    };
    let positive = |name: &str, v: Option<f64>| ctx.opt_positive(&format!("spec.{name}"), v);
    Ok(Spec {
        max_overshoot_pct: non_negative("max_overshoot_pct", raw.max_overshoot_pct)?,
        max_settling_s: positive("max_settling_s", raw.max_settling_s)?,
        settling_band_pct: match raw.settling_band_pct {
            Some(v) => ctx.number(
                "spec.settling_band_pct",
                v,
                |v| v > 0.0 && v < 100.0,
                "above 0 and below 100 (percent)",
            )?,
            None => 2.0,
        },
        min_phase_margin_deg: raw
            .min_phase_margin_deg
            .map(|v| {
                ctx.number(
                    "spec.min_phase_margin_deg",
                    v,
                    |v| (0.0..180.0).contains(&v),
                    "from 0 to below 180 degrees",
                )
            })
            .transpose()?,
        min_gain_margin_db: non_negative("min_gain_margin_db", raw.min_gain_margin_db)?,
        max_sensitivity_peak: positive("max_sensitivity_peak", raw.max_sensitivity_peak)?,
        max_rise_s: positive("max_rise_s", raw.max_rise_s)?,
        max_recovery_s: positive("max_recovery_s", raw.max_recovery_s)?,
        max_disturbance_peak: positive("max_disturbance_peak", raw.max_disturbance_peak)?,
        max_u_peak: positive("max_u_peak", raw.max_u_peak)?,
        headroom: match raw.headroom {
            Some(v) => ctx.number(
                "spec.headroom",
                v,
                |v| (1.0..=100.0).contains(&v),
                "from 1 to 100",
            )?,
            None => 1.25,
        },
    })
}

fn budget_from(ctx: &Ctx, raw: Option<RawBudget>) -> Result<Option<Budget>, CaseError> {
    let Some(raw) = raw else {
        return Ok(None);
    };
    let cpu_hz = raw
        .cpu_hz
        .ok_or_else(|| ctx.missing("budget.cpu_hz", "the CPU clock, Hz"))?;
    let cpu_hz = ctx.positive("budget.cpu_hz", cpu_hz)?;
    let cycles = match (raw.cycles_per_update, raw.cycles_per_mac) {
        (Some(_), Some(_)) => {
            return Err(ctx.invalid(
                "budget",
                "cost given two ways: `cycles_per_update` and `cycles_per_mac`; keep one",
            ));
        }
        (Some(c), None) => {
            if raw.overhead_cycles.is_some() {
                return Err(ctx.invalid(
                    "budget.overhead_cycles",
                    "only goes with `cycles_per_mac` (an estimate); `cycles_per_update` is the whole cost",
                ));
            }
            Cycles::PerUpdate(ctx.positive("budget.cycles_per_update", c)?)
        }
        (None, Some(c)) => Cycles::Estimate {
            cycles_per_mac: ctx.positive("budget.cycles_per_mac", c)?,
            overhead_cycles: match raw.overhead_cycles {
                Some(o) => ctx.number("budget.overhead_cycles", o, |o| o >= 0.0, "zero or more")?,
                None => 0.0,
            },
        },
        (None, None) => {
            return Err(ctx.missing(
                "budget.cycles_per_update",
                "the cost of one update: `cycles_per_update`, or `cycles_per_mac` (with `overhead_cycles`)",
            ));
        }
    };
    let max_load_pct = match raw.max_load_pct {
        Some(v) => ctx.number(
            "budget.max_load_pct",
            v,
            |v| v > 0.0 && v <= 100.0,
            "above 0 and at most 100 (percent)",
        )?,
        None => 100.0,
    };
    Ok(Some(Budget {
        cpu_hz,
        cycles,
        max_load_pct,
        timer_hz: ctx.opt_positive("budget.timer_hz", raw.timer_hz)?,
    }))
}

fn uncertainty_from(
    ctx: &Ctx,
    raw: Option<RawUncertainty>,
    params: &[Param],
) -> Result<Option<UncertaintyMode>, CaseError> {
    let Some(raw) = raw else {
        return Ok(None);
    };
    let mode = raw
        .mode
        .ok_or_else(|| ctx.missing("uncertainty.mode", "\"corners\" or \"samples\""))?;
    let out = match mode.as_str() {
        "corners" => {
            if raw.samples.is_some() || raw.seed.is_some() {
                let k = if raw.samples.is_some() {
                    "samples"
                } else {
                    "seed"
                };
                return Err(ctx.invalid(
                    format!("uncertainty.{k}"),
                    "only applies to mode = \"samples\"",
                ));
            }
            let ranged = params.iter().filter(|p| p.min < p.max).count();
            if ranged > MAX_CORNERS.trailing_zeros() as usize {
                return Err(ctx.invalid(
                    "uncertainty.mode",
                    format!(
                        "{ranged} parameters have a range: 2^{ranged} corners is more than the {MAX_CORNERS} allowed; use mode = \"samples\" with `samples = N`"
                    ),
                ));
            }
            UncertaintyMode::Corners
        }
        "samples" => {
            let n = raw
                .samples
                .ok_or_else(|| ctx.missing("uncertainty.samples", "how many samples to draw"))?;
            if n < 1 || n > MAX_SAMPLES as i64 {
                return Err(ctx.invalid(
                    "uncertainty.samples",
                    format!("must be from 1 to {MAX_SAMPLES}, got {n}"),
                ));
            }
            UncertaintyMode::Samples {
                samples: n as usize,
                seed: raw.seed.unwrap_or(0),
            }
        }
        other => {
            return Err(ctx.invalid(
                "uncertainty.mode",
                format!("unknown mode `{other}`; expected \"corners\" or \"samples\""),
            ));
        }
    };
    if params.is_empty() {
        return Err(ctx.invalid(
            "uncertainty",
            "there are no [params] to vary; declare one as { nominal, min, max }",
        ));
    }
    Ok(Some(out))
}

fn arithmetic_from(ctx: &Ctx, raw: Option<RawArithmetic>) -> Result<Option<Arithmetic>, CaseError> {
    let Some(raw) = raw else {
        return Ok(None);
    };
    let names = raw.formats.ok_or_else(|| {
        ctx.missing(
            "arithmetic.formats",
            "the number formats to check, e.g. [\"f32\", \"q15\"]",
        )
    })?;
    if names.is_empty() {
        return Err(ctx.invalid("arithmetic.formats", "empty list; name at least one format"));
    }
    let mut formats = Vec::new();
    for (i, name) in names.iter().enumerate() {
        let f = format!("arithmetic.formats[{i}]");
        let fmt = Format::from_str(name).map_err(|e| ctx.invalid(&f, e.to_string()))?;
        if formats.contains(&fmt) {
            return Err(ctx.invalid(&f, format!("`{fmt}` is listed twice")));
        }
        formats.push(fmt);
    }
    let structure = match raw.structure {
        Some(s) => Structure::from_str(&s)
            .map_err(|e| ctx.invalid("arithmetic.structure", e.to_string()))?,
        None => Structure::TransposedDirect,
    };
    Ok(Some(Arithmetic { formats, structure }))
}

// ------------------------------------------------------------------ Case

impl Case {
    /// The plant, sensor and controller in the form the file wrote them.
    pub fn written(&self) -> WrittenLoop {
        self.blocks.written()
    }

    /// Reads and validates a case file.
    pub fn load(path: &Path) -> Result<Case, CaseError> {
        let text = std::fs::read_to_string(path).map_err(|e| CaseError::Read {
            file: path.display().to_string(),
            message: e.to_string(),
        })?;
        Case::parse(&text, path)
    }

    /// Validates case-file `text`; `source` names the file in messages.
    pub fn parse(text: &str, source: &Path) -> Result<Case, CaseError> {
        let ctx = Ctx {
            file: source.display().to_string(),
            prefix: "",
        };
        let doc = toml::de::DeTable::parse(text).map_err(|e| {
            let (line, column) = line_column(text, e.span().map_or(0, |s| s.start));
            CaseError::Syntax {
                file: ctx.file.clone(),
                line,
                column,
                message: e.message().trim_end().to_string(),
            }
        })?;
        if let Some(e) = renamed_key(&ctx, text, doc.get_ref()) {
            return Err(e);
        }
        let raw: RawCase = toml::from_str(text).map_err(|e| {
            let off = e.span().map_or(0, |s| s.start);
            let (line, column) = line_column(text, off);
            CaseError::Shape {
                file: ctx.file.clone(),
                field: path_at(doc.get_ref(), off).unwrap_or_else(|| "(top level)".into()),
                line,
                column,
                message: plain_type_names(e.message().trim_end()),
            }
        })?;

        let order = keys_in_file_order(doc.get_ref(), &["params"]);
        let params = params_from(&ctx, raw.params.unwrap_or_default(), &order)?;

        let plant_delay_s = transport_delay(
            &ctx,
            "plant.delay_s",
            raw.plant.as_ref().and_then(|p| p.delay_s.as_ref()),
        )?;
        let sensor_delay_s = transport_delay(
            &ctx,
            "sensor.delay_s",
            raw.sensor.as_ref().and_then(|p| p.delay_s.as_ref()),
        )?;
        let (blocks, assumed_hold) = blocks_from(
            &ctx,
            raw.plant,
            raw.sensor,
            raw.controller,
            &BlockWords {
                plant_missing: "the plant, as `transfer = \"...\"` or `zeros`/`poles`/`gain` under [plant]",
                sensor_missing: "`transfer` or `zeros`/`poles`/`gain` (or drop [sensor])",
                controller_missing: "the [controller] table",
                controller_delay: "a controller has no transport delay: give a pure delay as `delay_s` on [plant] (the actuator path) or [sensor] (the measurement), and the time the processor takes as [timing] compute_delay (in periods)",
                hold_of_continuous: "only a controller given in z assumes a hold; a continuous design is discretized for every hold listed in [timing] hold",
            },
        )?;
        let controller = &blocks.controller;

        let outer = raw
            .outer
            .map(|o| outer::outer_from(&ctx, o, raw.spec.is_some()))
            .transpose()?;
        // Every identifier bound, every parameter used.
        let mut exprs: Vec<&Model> = blocks.models();
        if let Some(o) = &outer {
            exprs.extend(o.models());
        }
        let mut used: Vec<String> = Vec::new();
        for m in &exprs {
            if let Source::Expr(e) = &m.source {
                for name in e.identifiers() {
                    if !params.iter().any(|p| p.name == name) {
                        let col = e.identifier_column(&name).unwrap_or(1);
                        let err = ExprError {
                            column: col,
                            message: if name == "z" {
                                crate::case::expr::unbound_message(&name)
                            } else {
                                format!("unbound identifier `{name}`: declare it under [params]")
                            },
                        };
                        return Err(ctx.expression(&m.field, e.source(), &err));
                    }
                    used.push(name);
                }
            }
        }
        if let Some(p) = params.iter().find(|p| !used.contains(&p.name)) {
            return Err(ctx.invalid(
                format!("params.{}", p.name),
                format!("`{}` is declared but not used in any expression", p.name),
            ));
        }

        let holds = holds_from(
            &ctx,
            raw.timing.as_ref().and_then(|t| t.hold.as_ref()),
            controller,
            assumed_hold,
        )?;
        let compute_delays = delays_from(&ctx, raw.timing)?;
        // A controller given in z runs at its own rate only: `[rates]` is
        // optional there, and the "grid" is that one rate.
        let (rates, rates_ignored) = match controller {
            ControllerModel::Discrete(d) => {
                let given = raw.rates.is_some();
                if given {
                    rates_from(&ctx, raw.rates)?;
                }
                (Rates::single(1.0 / d.period_s), given)
            }
            ControllerModel::Continuous(_) => (rates_from(&ctx, raw.rates)?, false),
        };
        let (methods, prewarp_hz) = methods_from(&ctx, raw.methods, controller)?;
        let spec = spec_from(&ctx, raw.spec)?;
        let budget = budget_from(&ctx, raw.budget)?;
        let uncertainty = uncertainty_from(&ctx, raw.uncertainty, &params)?;
        let arithmetic = arithmetic_from(&ctx, raw.arithmetic)?;
        if let Some(o) = &outer {
            outer::check_outer_budget(&ctx, o, budget.as_ref())?;
            outer::check_outer_rate(
                &ctx,
                o,
                &rates,
                matches!(controller, ControllerModel::Discrete(_)),
            )?;
        }
        let title = raw.title.unwrap_or_else(|| {
            source
                .file_stem()
                .map_or_else(|| "case".to_string(), |s| s.to_string_lossy().into_owned())
        });

        let mut notes = Vec::new();
        if rates_ignored {
            notes.push(format!(
                "[rates] does not apply: the controller is given in z at {} Hz and runs only at that rate",
                rates.max_hz
            ));
        }
        if let Some(b) = &budget
            && b.cpu_hz < CPU_HZ_SANITY
        {
            notes.push(format!(
                "budget.cpu_hz = {} Hz is below 1 MHz: the field is in Hz; is this the clock in MHz?",
                b.cpu_hz
            ));
        }
        if uncertainty.is_some() {
            let in_loop_models: Vec<String> = std::iter::once(&blocks.plant)
                .chain(blocks.sensor.as_ref())
                .filter_map(|m| match &m.source {
                    Source::Expr(e) => Some(e.identifiers()),
                    _ => None,
                })
                .flatten()
                .collect();
            for p in params.iter().filter(|p| p.min < p.max) {
                if !in_loop_models.contains(&p.name) {
                    notes.push(format!(
                        "params.{} has a range but appears only in the controller: the controller is designed once, so every plant variant is the same loop",
                        p.name
                    ));
                }
            }
        }

        let case = Case {
            notes,
            source: source.to_path_buf(),
            title,
            params,
            compute_delays,
            holds,
            plant_delay_s,
            sensor_delay_s,
            rates,
            methods,
            prewarp_hz,
            spec,
            budget,
            uncertainty,
            arithmetic,
            outer,
            blocks,
        };
        case.nominal()?;
        case.outer_nominal()?;
        case.check_corners()?;
        Ok(case)
    }

    /// The models with every parameter at its nominal value.
    pub fn nominal(&self) -> Result<LoopModels, CaseError> {
        let values: Vec<f64> = self.params.iter().map(|p| p.nominal).collect();
        self.models_at(&values)
    }

    /// The models for parameter `values`, given in the order of
    /// [`Case::params`]. Each model is checked again (finite, non-zero,
    /// proper), since some values can break a model the nominal ones
    /// do not (a leading coefficient that vanishes, say).
    pub fn models_at(&self, values: &[f64]) -> Result<LoopModels, CaseError> {
        self.blocks_at(&self.blocks, values)
    }

    /// `blocks` (the loop's own or `[outer]`'s) evaluated for parameter
    /// `values`, each model checked (finite, non-zero, proper).
    fn blocks_at(&self, blocks: &Blocks, values: &[f64]) -> Result<LoopModels, CaseError> {
        let ctx = Ctx {
            file: self.source.display().to_string(),
            prefix: "",
        };
        if values.len() != self.params.len() {
            return Err(ctx.invalid(
                "params",
                format!(
                    "{} values given for {} parameters",
                    values.len(),
                    self.params.len()
                ),
            ));
        }
        let is_nominal = self.params.iter().zip(values).all(|(p, &v)| p.nominal == v);
        let prefix = if is_nominal {
            String::new()
        } else {
            let list: Vec<String> = self
                .params
                .iter()
                .zip(values)
                .map(|(p, v)| format!("{} = {v}", p.name))
                .collect();
            format!("with {}: ", list.join(", "))
        };
        let lookup = |name: &str| {
            self.params
                .iter()
                .position(|p| p.name == name)
                .map(|i| values[i])
        };
        let eval = |m: &Model| -> Result<Transfer, CaseError> {
            let tf = match &m.source {
                Source::Fixed(tf) => tf.clone(),
                Source::Expr(e) => {
                    let (num, den) = e
                        .eval(&lookup)
                        .map_err(|err| ctx.expression_with(&m.field, e.source(), &err, &prefix))?;
                    Transfer::new(num, den)
                }
            };
            let tf = tf.with_sane_scale();
            check_transfer(&ctx, &m.field, m.role, &tf, &prefix)?;
            Ok(tf)
        };
        Ok(LoopModels {
            plant: eval(&blocks.plant)?,
            sensor: match &blocks.sensor {
                Some(m) => eval(m)?,
                None => Transfer::gain(1.0),
            },
            controller: match &blocks.controller {
                ControllerModel::Continuous(m) => Controller::Continuous(eval(m)?),
                ControllerModel::Discrete(d) => Controller::Discrete(d.clone()),
            },
        })
    }

    /// Evaluates the models at every corner of the parameter box (when
    /// there are few enough ranged parameters), so a range that breaks a
    /// model is reported when the file is loaded rather than mid-sweep.
    fn check_corners(&self) -> Result<(), CaseError> {
        let ranged: Vec<usize> = (0..self.params.len())
            .filter(|&i| self.params[i].min < self.params[i].max)
            .collect();
        if ranged.is_empty() || ranged.len() > MAX_CHECKED_RANGED_PARAMS {
            return Ok(());
        }
        let mut values: Vec<f64> = self.params.iter().map(|p| p.nominal).collect();
        for mask in 0u32..(1u32 << ranged.len()) {
            for (bit, &i) in ranged.iter().enumerate() {
                let p = &self.params[i];
                values[i] = if mask & (1 << bit) == 0 { p.min } else { p.max };
            }
            self.models_at(&values)?;
        }
        Ok(())
    }
}
