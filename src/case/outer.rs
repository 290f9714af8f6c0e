//! `[outer]`: a cascaded outer loop around the case's loop, sharing its
//! processor (`docs/figures.md`, "Cascaded loops").
//!
//! The outer tables mirror the loop's own (`[outer.plant]`, `[outer.sensor]`,
//! `[outer.controller]` in every controller form, `[outer.timing]`,
//! `[outer.methods]`, `[outer.spec]`) and are read by the same functions,
//! with every field name prefixed `outer.`; `[outer.budget]` gives the
//! outer update's cost and `[outer.rates] ratios` the integer divisions of
//! the inner rate to try.

use super::*;

/// Ratios tried when `[outer.rates]` is absent (outer rate = inner rate /
/// ratio).
pub const DEFAULT_RATIOS: [usize; 8] = [1, 2, 4, 5, 8, 10, 16, 20];

/// The largest ratio accepted: one outer period lifts `ratio` inner
/// periods, each with its points between samples, so the lifted model's
/// output rows grow with it.
pub const MAX_RATIO: usize = 1000;

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
pub(super) struct RawOuter {
    plant: Option<RawTransfer>,
    sensor: Option<RawTransfer>,
    controller: Option<RawController>,
    timing: Option<RawTiming>,
    methods: Option<RawMethods>,
    spec: Option<RawSpec>,
    budget: Option<RawOuterBudget>,
    rates: Option<RawOuterRates>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawOuterBudget {
    cycles_per_update: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, expecting = "a table")]
struct RawOuterRates {
    ratios: Option<Vec<toml::Value>>,
}

/// The outer loop of a cascade, validated.
#[derive(Debug, Clone, PartialEq)]
pub struct OuterLoop {
    /// Integer divisions of the inner rate to try, ascending.
    pub ratios: Vec<usize>,
    /// How the outer command is shaped as the inner loop's reference
    /// between outer updates (`[outer.timing] hold`, in file order;
    /// default `zero-order`).
    pub holds: Vec<HoldKind>,
    /// Outer computation delays, as fractions of the outer period (any
    /// finite value >= 0); the new command reaches the inner loop at the
    /// first inner tick at or after it.
    pub compute_delays: Vec<f64>,
    /// Discretization methods for a continuous outer controller (empty for
    /// one given in z).
    pub methods: Vec<Method>,
    /// Pre-warp frequency for `tustin-prewarped`, Hz.
    pub prewarp_hz: Option<f64>,
    /// The outer loop's limits.
    pub spec: Spec,
    /// Whether the case has a `[spec]` for the inner loop (without one the
    /// inner loop is only checked for stability).
    pub inner_spec_given: bool,
    /// Cycles one outer update costs (`[outer.budget] cycles_per_update`);
    /// None: estimated from the outer controller like the inner one.
    pub cycles_per_update: Option<f64>,
    blocks: Blocks,
}

/// The outer loop's models for one set of parameter values: the outer
/// plant (from the inner plant's output to the outer quantity, driven
/// continuously by it), the outer sensor (1 when not given) and the outer
/// controller, continuous or in z.
pub type OuterModels = LoopModels;

impl OuterLoop {
    /// The outer controller's own rate when it is given in z, Hz.
    pub fn rate_in_z_hz(&self) -> Option<f64> {
        match &self.blocks.controller {
            ControllerModel::Discrete(d) => Some(1.0 / d.period_s),
            ControllerModel::Continuous(_) => None,
        }
    }

    /// Whether the outputs name the outer hold (an `outer_hold` column in
    /// the cascade rows, an `outer_hold` key in `pick.json`): when the case
    /// lists anything but `zero-order` alone, so a case that does not use
    /// ramped outer holds keeps its outputs as they were.
    pub fn hold_named(&self) -> bool {
        self.holds != [HoldKind::ZeroOrder]
    }

    /// The outer blocks in the form the file wrote them.
    pub fn written(&self) -> WrittenLoop {
        self.blocks.written()
    }

    /// The expressions of the outer blocks (for the parameter checks).
    pub(super) fn models(&self) -> Vec<&Model> {
        self.blocks.models()
    }

    /// The inner rates, each with the ratio that puts the outer rate on
    /// the rate of an outer controller given in z (all pairs of the grid
    /// for a continuous outer controller).
    pub fn pairs(&self, inner_rates: &[f64], inner_range: (f64, f64)) -> Vec<(f64, usize)> {
        match self.rate_in_z_hz() {
            None => inner_rates
                .iter()
                .flat_map(|&f| self.ratios.iter().map(move |&n| (f, n)))
                .collect(),
            Some(fo) => self
                .ratios
                .iter()
                .map(|&n| (fo * n as f64, n))
                .filter(|&(f, _)| {
                    f >= inner_range.0 * (1.0 - 1e-9) && f <= inner_range.1 * (1.0 + 1e-9)
                })
                .collect(),
        }
    }
}

/// A prefix-aware context for the outer tables.
fn outer_ctx(ctx: &Ctx) -> Ctx {
    Ctx {
        file: ctx.file.clone(),
        prefix: "outer.",
    }
}

/// A model of the outer loop with its field named in full (`outer.plant.transfer`).
fn prefixed(mut m: Model) -> Model {
    m.field = format!("outer.{}", m.field);
    m
}

fn ratios_from(ctx: &Ctx, raw: Option<RawOuterRates>) -> Result<Vec<usize>, CaseError> {
    let Some(values) = raw.and_then(|r| r.ratios) else {
        return Ok(DEFAULT_RATIOS.to_vec());
    };
    if values.is_empty() {
        return Err(ctx.invalid("rates.ratios", "empty list; give at least one ratio"));
    }
    let mut out: Vec<usize> = Vec::new();
    for (i, v) in values.iter().enumerate() {
        let f = format!("rates.ratios[{i}]");
        let n = match v {
            toml::Value::Integer(n) => *n as f64,
            toml::Value::Float(x) => *x,
            other => {
                return Err(ctx.invalid(
                    &f,
                    format!("expected a whole number, found {}", a_kind(other)),
                ));
            }
        };
        if !n.is_finite() || n.fract() != 0.0 {
            return Err(ctx.invalid(
                &f,
                format!(
                    "must be a whole number (the outer rate is the inner rate divided by it), got {n}"
                ),
            ));
        }
        if n < 1.0 || n > MAX_RATIO as f64 {
            return Err(ctx.invalid(
                &f,
                format!("must be from 1 to {MAX_RATIO} (the outer loop updates every N-th inner tick), got {n}"),
            ));
        }
        let n = n as usize;
        if out.contains(&n) {
            return Err(ctx.invalid(&f, format!("{n} is listed twice")));
        }
        out.push(n);
    }
    out.sort_unstable();
    Ok(out)
}

/// Validate `[outer]`; `inner_spec_given` says whether `[spec]` is there.
pub(super) fn outer_from(
    ctx: &Ctx,
    raw: RawOuter,
    inner_spec_given: bool,
) -> Result<OuterLoop, CaseError> {
    let octx = outer_ctx(ctx);
    let ctx = &octx;
    for (name, block) in [("plant", &raw.plant), ("sensor", &raw.sensor)] {
        if let Some(b) = block
            && b.delay_s.is_some()
        {
            return Err(ctx.invalid(
                format!("{name}.delay_s"),
                "a transport delay in the outer loop is not built; model it in the inner loop's [plant] or [sensor], or as outer compute_delay",
            ));
        }
    }
    let (blocks, assumed_hold) = blocks_from(
        ctx,
        raw.plant,
        raw.sensor,
        raw.controller,
        &BlockWords {
            plant_missing: "the outer plant (from the inner plant's output to the outer quantity), as `transfer = \"...\"` or `zeros`/`poles`/`gain` under [outer.plant]",
            sensor_missing: "`transfer` or `zeros`/`poles`/`gain` (or drop [outer.sensor])",
            controller_missing: "the [outer.controller] table",
            controller_delay: "a controller has no transport delay: give the time the processor takes as [outer.timing] compute_delay (a fraction of the outer period)",
            hold_of_continuous: "only a controller given in z assumes a hold",
        },
    )?;
    // The outer command is the inner loop's reference, held or ramped
    // between outer updates as the single loop's command is (the ramp read
    // at the inner ticks; `docs/figures.md`, "Cascaded loops").
    let holds = holds_from(
        ctx,
        raw.timing.as_ref().and_then(|t| t.hold.as_ref()),
        &blocks.controller,
        assumed_hold,
    )?;
    let compute_delays = delays_from(ctx, raw.timing)?;
    let (methods, prewarp_hz) = methods_from(ctx, raw.methods, &blocks.controller)?;
    let spec = spec_from(ctx, raw.spec)?;
    let cycles_per_update = match raw.budget {
        Some(b) => {
            let c = b.cycles_per_update.ok_or_else(|| {
                ctx.missing(
                    "budget.cycles_per_update",
                    "the cost of one outer update, cycles",
                )
            })?;
            Some(ctx.positive("budget.cycles_per_update", c)?)
        }
        None => None,
    };
    let ratios = ratios_from(ctx, raw.rates)?;
    Ok(OuterLoop {
        ratios,
        holds,
        compute_delays,
        methods,
        prewarp_hz,
        spec,
        inner_spec_given,
        cycles_per_update,
        blocks: Blocks {
            plant: prefixed(blocks.plant),
            sensor: blocks.sensor.map(prefixed),
            controller: match blocks.controller {
                ControllerModel::Continuous(m) => ControllerModel::Continuous(prefixed(m)),
                d => d,
            },
        },
    })
}

/// `[outer.budget]` against the case's `[budget]`: the outer cost needs the
/// processor, and a measured inner cost needs a measured outer one.
pub(super) fn check_outer_budget(
    ctx: &Ctx,
    outer: &OuterLoop,
    budget: Option<&Budget>,
) -> Result<(), CaseError> {
    let ctx = &outer_ctx(ctx);
    match budget {
        None if outer.cycles_per_update.is_some() => Err(ctx.invalid(
            "budget",
            "the outer update's cost needs the processor: give [budget] (cpu_hz and the inner update's cost)",
        )),
        Some(b) if matches!(b.cycles, Cycles::PerUpdate(_)) && outer.cycles_per_update.is_none() => {
            Err(ctx.missing(
                "budget.cycles_per_update",
                "the cost of one outer update (the case's [budget] gives the inner update's cost as cycles_per_update)",
            ))
        }
        _ => Ok(()),
    }
}

/// An outer controller given in z must run at `inner rate / ratio` for
/// some listed ratio and some inner rate the case can run.
pub(super) fn check_outer_rate(
    ctx: &Ctx,
    outer: &OuterLoop,
    inner: &Rates,
    inner_in_z: bool,
) -> Result<(), CaseError> {
    let Some(fo) = outer.rate_in_z_hz() else {
        return Ok(());
    };
    let pairs = outer.pairs(&inner.grid(), (inner.min_hz, inner.max_hz));
    let fits = pairs
        .iter()
        .any(|&(f, _)| !inner_in_z || ((f - inner.max_hz) / inner.max_hz).abs() <= 1e-9);
    if fits {
        return Ok(());
    }
    Err(ctx.invalid(
        "outer.controller.rate_hz",
        format!(
            "the outer controller is given in z at {fo} Hz, which is no listed ratio ({}) of any inner rate ({} Hz): the outer rate must be the inner rate divided by a whole number",
            outer
                .ratios
                .iter()
                .map(|n| n.to_string())
                .collect::<Vec<_>>()
                .join(", "),
            if inner_in_z {
                format!("{}", inner.max_hz)
            } else {
                format!("{} to {}", inner.min_hz, inner.max_hz)
            }
        ),
    ))
}

impl Case {
    /// The outer loop's models for parameter `values` (order of
    /// [`Case::params`]); None without `[outer]`.
    pub fn outer_models_at(&self, values: &[f64]) -> Result<Option<OuterModels>, CaseError> {
        self.outer
            .as_ref()
            .map(|outer| self.blocks_at(&outer.blocks, values))
            .transpose()
    }

    /// The outer loop's models at the nominal parameter values.
    pub fn outer_nominal(&self) -> Result<Option<OuterModels>, CaseError> {
        let values: Vec<f64> = self.params.iter().map(|p| p.nominal).collect();
        self.outer_models_at(&values)
    }
}
