//! The catalogue of figures: every figure an evaluation yields, with its
//! key (CSV columns, JSON fields), its name in words and unit (tables,
//! report, charts), the direction that is worse, how it is read from an
//! evaluation, what its absence means, and the spec limit that bounds it.
//! Every table, CSV header, chart panel and the feasibility check read
//! the figures from here; meanings are in `docs/figures.md`.
//!
//! Adding a figure: a variant here (and in [`Figure::ALL`]), its field in
//! `evaluate::Figures` with its computation, its row in `docs/figures.md`,
//! and its tests.

use serde::{Serialize, Serializer};

use crate::engineering::{hz, seconds, sig4};
use crate::model::rounding::StructuralFailure;
use crate::sampled::evaluate::Figures;
use crate::sampled::stretch::{TimeFigure, Wanted};
use crate::spec::Spec;

/// One figure of an evaluated loop.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Figure {
    /// Final value of the reference step, output units.
    FinalValue,
    /// Step overshoot, percent of the final value.
    Overshoot,
    /// Settling time into the settling band, s.
    SettlingTime,
    /// 10-90 % rise time, s.
    RiseTime,
    /// Largest output excursion after a unit load step, output units.
    DisturbancePeak,
    /// Time to recover from a unit load step, s.
    RecoveryTime,
    /// Largest controller output in the reference step, actuator units.
    CommandPeak,
    /// Gain margin, dB (signed).
    GainMargin,
    /// Phase margin, degrees (signed).
    PhaseMargin,
    /// Gain-crossover frequency, Hz.
    Crossover,
    /// Exact delay margin, s.
    DelayMargin,
    /// Delay margin estimated from the phase margin, s.
    DelayMarginEstimate,
    /// Sensitivity peak Ms = max |1/(1+L)|, a plain ratio.
    SensitivityPeak,
}

/// The unit a figure is given in.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    /// Units of the plant output (the step is 1).
    Output,
    /// Units of the controller output.
    Actuator,
    Percent,
    Seconds,
    Hertz,
    Decibel,
    Degree,
    /// A plain ratio.
    Ratio,
}

impl Unit {
    /// The unit as written after a number or in a heading.
    pub fn symbol(self) -> &'static str {
        match self {
            Unit::Output => "output units",
            Unit::Actuator => "actuator units",
            Unit::Percent => "%",
            Unit::Seconds => "s",
            Unit::Hertz => "Hz",
            Unit::Decibel => "dB",
            Unit::Degree => "deg",
            Unit::Ratio => "ratio",
        }
    }
}

/// Which way a figure gets worse: the side a spec limit bounds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Worse {
    /// Larger is worse (an upper limit: `max_...`).
    Higher,
    /// Smaller is worse (a lower limit: `min_...`).
    Lower,
    /// Neither (a figure no spec limit bounds).
    Neither,
}

/// What a figure's absence means. Text tables and the report say it in
/// words; CSV keeps a machine-readable token (`inf` for an infinite
/// margin, so a reader parses it as a number).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Missing {
    /// The figure always exists.
    Never,
    /// The final value is zero (no tracking), so no overshoot exists.
    NoFinalValue,
    /// The response did not settle into the band within the horizon.
    NotSettled,
    /// The step did not reach 90 %.
    NotReached,
    /// The load step was not recovered from within the horizon.
    NotRecovered,
    /// The margin is infinite (no crossing to measure it at).
    Infinite,
    /// No gain crossing: no crossover frequency.
    NoCrossing,
    /// The exact delay margin was not searched (a sweep reports the
    /// estimate instead).
    NotSearched,
    /// The exact delay-margin search gave up (a note says why).
    NotLocated,
    /// Neither the bound at the end of the horizon nor the bounded search
    /// work could decide the figure (`Figures::undecided`); fails a limit.
    Undecided,
    /// Not computed: no limit reads it where it was left out
    /// (`Figures::not_computed`).
    NotComputed,
}

impl Missing {
    /// Words for tables and the report.
    pub fn text(self) -> &'static str {
        match self {
            Missing::Never => "-",
            Missing::NoFinalValue => "no final value",
            Missing::NotSettled => "not settled",
            Missing::NotReached => "not reached",
            Missing::NotRecovered => "not recovered",
            Missing::Infinite => "infinite",
            Missing::NoCrossing => "none",
            Missing::NotSearched => "not searched",
            Missing::NotLocated => "not located",
            Missing::Undecided => "undecided",
            Missing::NotComputed => "not computed",
        }
    }

    /// The CSV cell: the words, except `inf` for an infinite margin.
    pub fn csv(self) -> &'static str {
        match self {
            Missing::Never => "",
            Missing::Infinite => "inf",
            other => other.text(),
        }
    }

    /// Slack of a limit on a missing figure: an infinite margin passes
    /// any lower limit; every other absence fails an upper limit.
    fn slack(self) -> f64 {
        match self {
            Missing::Infinite => f64::INFINITY,
            _ => f64::NEG_INFINITY,
        }
    }
}

impl Figure {
    /// Every figure, in table and CSV order.
    pub const ALL: [Figure; 13] = [
        Figure::FinalValue,
        Figure::Overshoot,
        Figure::SettlingTime,
        Figure::RiseTime,
        Figure::DisturbancePeak,
        Figure::RecoveryTime,
        Figure::CommandPeak,
        Figure::GainMargin,
        Figure::PhaseMargin,
        Figure::Crossover,
        Figure::DelayMargin,
        Figure::DelayMarginEstimate,
        Figure::SensitivityPeak,
    ];

    /// The figures a spec can limit, in the order their limits are
    /// checked (the order of `[spec]` in the case-file reference).
    pub const LIMITED: [Figure; 9] = [
        Figure::Overshoot,
        Figure::SettlingTime,
        Figure::RiseTime,
        Figure::PhaseMargin,
        Figure::GainMargin,
        Figure::SensitivityPeak,
        Figure::RecoveryTime,
        Figure::DisturbancePeak,
        Figure::CommandPeak,
    ];

    /// The figures given at their worst over plant variants (the CSV's
    /// `worst_` columns), in table order.
    pub const WORST_OVER_VARIANTS: [Figure; 10] = [
        Figure::Overshoot,
        Figure::SettlingTime,
        Figure::RiseTime,
        Figure::DisturbancePeak,
        Figure::RecoveryTime,
        Figure::CommandPeak,
        Figure::GainMargin,
        Figure::PhaseMargin,
        Figure::DelayMargin,
        Figure::SensitivityPeak,
    ];

    /// Key in CSV headers, JSON fields and limit verdicts.
    pub fn key(self) -> &'static str {
        if let Some(t) = self.time() {
            return t.key();
        }
        match self {
            Figure::FinalValue => "y_final",
            Figure::Overshoot
            | Figure::SettlingTime
            | Figure::RiseTime
            | Figure::DisturbancePeak
            | Figure::RecoveryTime
            | Figure::CommandPeak => unreachable!("a time figure's key is its TimeFigure's"),
            Figure::GainMargin => "gain_margin_db",
            Figure::PhaseMargin => "phase_margin_deg",
            Figure::Crossover => "crossover_hz",
            Figure::DelayMargin => "delay_margin_s",
            Figure::DelayMarginEstimate => "delay_margin_estimate_s",
            Figure::SensitivityPeak => "sensitivity_peak",
        }
    }

    /// The time figure it is, if it is one (the name the time responses
    /// use for it in `undecided` and `not_computed`).
    pub fn time(self) -> Option<TimeFigure> {
        match self {
            Figure::Overshoot => Some(TimeFigure::Overshoot),
            Figure::SettlingTime => Some(TimeFigure::SettlingTime),
            Figure::RiseTime => Some(TimeFigure::RiseTime),
            Figure::DisturbancePeak => Some(TimeFigure::DisturbancePeak),
            Figure::RecoveryTime => Some(TimeFigure::RecoveryTime),
            Figure::CommandPeak => Some(TimeFigure::CommandPeak),
            _ => None,
        }
    }

    /// The figure whose key is `key`.
    pub fn from_key(key: &str) -> Option<Figure> {
        Figure::ALL.into_iter().find(|f| f.key() == key)
    }

    /// Name in words, without the unit.
    pub fn label(self) -> &'static str {
        match self {
            Figure::FinalValue => "final value",
            Figure::Overshoot => "overshoot",
            Figure::SettlingTime => "settling time",
            Figure::RiseTime => "rise time 10-90 %",
            Figure::DisturbancePeak => "load-step peak",
            Figure::RecoveryTime => "load-step recovery",
            Figure::CommandPeak => "peak command",
            Figure::GainMargin => "gain margin",
            Figure::PhaseMargin => "phase margin",
            Figure::Crossover => "crossover",
            Figure::DelayMargin => "delay margin",
            Figure::DelayMarginEstimate => "delay margin estimate",
            Figure::SensitivityPeak => "sensitivity peak Ms",
        }
    }

    /// A short name for a chart axis, where five panels share a column.
    pub fn short_label(self) -> &'static str {
        match self {
            Figure::PhaseMargin => "PM",
            Figure::GainMargin => "|GM|",
            Figure::SensitivityPeak => "Ms",
            other => other.label(),
        }
    }

    pub fn unit(self) -> Unit {
        match self {
            Figure::FinalValue | Figure::DisturbancePeak => Unit::Output,
            Figure::CommandPeak => Unit::Actuator,
            Figure::Overshoot => Unit::Percent,
            Figure::SettlingTime
            | Figure::RiseTime
            | Figure::RecoveryTime
            | Figure::DelayMargin
            | Figure::DelayMarginEstimate => Unit::Seconds,
            Figure::Crossover => Unit::Hertz,
            Figure::GainMargin => Unit::Decibel,
            Figure::PhaseMargin => Unit::Degree,
            Figure::SensitivityPeak => Unit::Ratio,
        }
    }

    /// The column heading in text tables and the report: the name, and
    /// the unit in parentheses unless each cell carries it (times and
    /// frequencies are written with their SI prefix: `716.3 µs`).
    pub fn heading(self) -> String {
        match self.unit() {
            Unit::Seconds | Unit::Hertz | Unit::Ratio => self.label().to_string(),
            u => format!("{} ({})", self.label(), u.symbol()),
        }
    }

    /// The axis title of a chart panel: the short name and the unit.
    pub fn axis_title(self) -> String {
        format!("{} ({})", self.short_label(), self.unit().symbol())
    }

    pub fn worse(self) -> Worse {
        match self {
            Figure::Overshoot
            | Figure::SettlingTime
            | Figure::RiseTime
            | Figure::DisturbancePeak
            | Figure::RecoveryTime
            | Figure::CommandPeak
            | Figure::SensitivityPeak => Worse::Higher,
            Figure::GainMargin
            | Figure::PhaseMargin
            | Figure::DelayMargin
            | Figure::DelayMarginEstimate => Worse::Lower,
            Figure::FinalValue | Figure::Crossover => Worse::Neither,
        }
    }

    /// The figure's value in `f`; None when it does not exist or could
    /// not be decided (see [`Figure::missing`]).
    pub fn value(self, f: &Figures) -> Option<f64> {
        if (self.time()).is_some_and(|t| f.is_undecided(t) || f.is_not_computed(t)) {
            return None;
        }
        match self {
            Figure::FinalValue => Some(f.y_final),
            Figure::Overshoot => f.overshoot_pct,
            Figure::SettlingTime => f.settling_time_s,
            Figure::RiseTime => f.rise_time_s,
            Figure::DisturbancePeak => Some(f.disturbance_peak),
            Figure::RecoveryTime => f.recovery_time_s,
            Figure::CommandPeak => Some(f.u_peak),
            Figure::GainMargin => f.gain_margin_db,
            Figure::PhaseMargin => f.phase_margin_deg,
            Figure::Crossover => f.crossover_hz,
            Figure::DelayMargin => f.delay_margin_s,
            Figure::DelayMarginEstimate => f.delay_margin_estimate_s,
            Figure::SensitivityPeak => Some(f.sensitivity_peak),
        }
    }

    /// The value a spec limit bounds: the figure itself, except the gain
    /// margin, whose size is bounded (a negative margin is a
    /// gain-reduction margin; `docs/figures.md`).
    pub fn limited_value(self, f: &Figures) -> Option<f64> {
        match self {
            Figure::GainMargin => f.gain_margin_db.map(f64::abs),
            other => other.value(f),
        }
    }

    /// What the figure's absence in `f` means.
    pub fn missing(self, f: &Figures) -> Missing {
        if self.time().is_some_and(|t| f.is_not_computed(t)) {
            return Missing::NotComputed;
        }
        if self.time().is_some_and(|t| f.is_undecided(t)) {
            return Missing::Undecided;
        }
        match self {
            Figure::FinalValue
            | Figure::DisturbancePeak
            | Figure::CommandPeak
            | Figure::SensitivityPeak => Missing::Never,
            Figure::Overshoot => Missing::NoFinalValue,
            Figure::SettlingTime => Missing::NotSettled,
            Figure::RiseTime => Missing::NotReached,
            Figure::RecoveryTime => Missing::NotRecovered,
            Figure::GainMargin | Figure::PhaseMargin | Figure::DelayMarginEstimate => {
                Missing::Infinite
            }
            Figure::Crossover => Missing::NoCrossing,
            Figure::DelayMargin => {
                if !f.delay_margin_searched {
                    Missing::NotSearched
                } else if f.loop_notes.iter().any(|n| n.starts_with("delay margin")) {
                    Missing::NotLocated
                } else {
                    Missing::Infinite
                }
            }
        }
    }

    /// The limit `spec` puts on this figure, if any.
    pub fn limit(self, spec: &Spec) -> Option<f64> {
        match self {
            Figure::Overshoot => spec.max_overshoot_pct,
            Figure::SettlingTime => spec.max_settling_s,
            Figure::RiseTime => spec.max_rise_s,
            Figure::PhaseMargin => spec.min_phase_margin_deg,
            Figure::GainMargin => spec.min_gain_margin_db,
            Figure::SensitivityPeak => spec.max_sensitivity_peak,
            Figure::RecoveryTime => spec.max_recovery_s,
            Figure::DisturbancePeak => spec.max_disturbance_peak,
            Figure::CommandPeak => spec.max_u_peak,
            Figure::FinalValue
            | Figure::Crossover
            | Figure::DelayMargin
            | Figure::DelayMarginEstimate => None,
        }
    }

    /// Slack of `value` against `limit` as a fraction of the limit
    /// (`docs/figures.md`, "Feasibility"): positive passes. A missing
    /// value gets the slack its absence means.
    pub fn slack(self, limit: f64, value: Option<f64>, missing: Missing) -> f64 {
        let scale = limit.abs().max(1e-300);
        match (value, self.worse()) {
            (None, _) => missing.slack(),
            (Some(v), Worse::Lower) => (v - limit) / scale,
            (Some(v), _) => (limit - v) / scale,
        }
    }

    /// A value as text tables and the report write it: times and
    /// frequencies with an SI prefix and unit, the rest in four
    /// significant digits (the heading carries their unit).
    pub fn text(self, v: f64) -> String {
        match self.unit() {
            Unit::Seconds => seconds(v),
            Unit::Hertz => hz(v),
            _ => sig4(v),
        }
    }

    /// A value with its unit, as a label writes it: `716.3 µs`,
    /// `25.31 %`, `52.62 deg`, `1.422` (a ratio or output units: no unit).
    pub fn quantity(self, v: f64) -> String {
        match self.unit() {
            Unit::Seconds | Unit::Hertz => self.text(v),
            Unit::Percent | Unit::Decibel | Unit::Degree => {
                format!("{} {}", sig4(v), self.unit().symbol())
            }
            _ => sig4(v),
        }
    }

    /// The figure of `f` with its unit (`24.46 %`, `831.9 µs`), or its
    /// absence in words.
    pub fn quantity_or_absence(self, f: &Figures) -> String {
        match self.value(f) {
            Some(v) => self.quantity(v),
            None => self.missing(f).text().to_string(),
        }
    }

    /// Why the figure can be absent, in words for a chart's caption of
    /// gaps (whatever the particular evaluation).
    pub fn absence_reason(self) -> &'static str {
        match self {
            Figure::GainMargin => "no -180 deg crossing (infinite)",
            Figure::PhaseMargin | Figure::DelayMarginEstimate => "no gain crossing (infinite)",
            Figure::Crossover => "no gain crossing",
            Figure::Overshoot => Missing::NoFinalValue.text(),
            Figure::SettlingTime => Missing::NotSettled.text(),
            Figure::RiseTime => Missing::NotReached.text(),
            Figure::RecoveryTime => Missing::NotRecovered.text(),
            Figure::DelayMargin => "not searched, not located or infinite",
            Figure::FinalValue
            | Figure::DisturbancePeak
            | Figure::CommandPeak
            | Figure::SensitivityPeak => "undecided",
        }
    }

    /// The figure of `f` as a table cell: its value, or its absence in
    /// words.
    pub fn cell(self, f: &Figures) -> String {
        match self.value(f) {
            Some(v) => self.text(v),
            None => self.missing(f).text().to_string(),
        }
    }

    /// The limit as a table or chart writes it, with its side: `max 20 %`,
    /// `min 45 deg`, `max 1.6`.
    pub fn limit_text(self, limit: f64) -> String {
        let side = match self.worse() {
            Worse::Lower => "min",
            _ => "max",
        };
        match self.unit() {
            Unit::Seconds | Unit::Hertz => format!("{side} {}", self.text(limit)),
            Unit::Ratio | Unit::Output | Unit::Actuator => format!("{side} {}", sig4(limit)),
            u => format!("{side} {} {}", sig4(limit), u.symbol()),
        }
    }
}

impl std::fmt::Display for Figure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.key())
    }
}

impl Serialize for Figure {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.key())
    }
}

/// What decides a verdict: a figure against its limit, or a failure that
/// no figure describes. Serialized to the same strings the files always
/// carried (`overshoot_pct`, `stability`, `integral_action`, ...).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Limiting {
    /// A figure at its limit (the least slack).
    Figure(Figure),
    /// A time figure the spec limits that the bounded time search left
    /// undecided (`docs/figures.md`, "Undecided"): the verdict fails for
    /// want of an answer, not because the figure was seen over its limit.
    /// Files carry the figure's key (its own column reads `undecided`).
    Undecided(Figure),
    /// The loop is not stable, or could not be evaluated.
    Stability,
    /// Rounding changed what the controller is.
    Rounding(StructuralFailure),
    /// The coefficients do not fit the number format's word.
    Coefficients,
    /// The controller cannot be built at this rate.
    Controller,
}

impl Limiting {
    /// Key in files: a figure's key, or the failure's name.
    pub fn key(self) -> &'static str {
        match self {
            Limiting::Figure(f) | Limiting::Undecided(f) => f.key(),
            Limiting::Stability => "stability",
            Limiting::Rounding(s) => s.key(),
            Limiting::Coefficients => "coefficients",
            Limiting::Controller => "controller",
        }
    }

    /// Name in words for tables and the report.
    pub fn label(self) -> std::borrow::Cow<'static, str> {
        match self {
            Limiting::Figure(f) => f.label().into(),
            Limiting::Undecided(f) => format!("{} undecided", f.label()).into(),
            Limiting::Stability => "stability".into(),
            Limiting::Rounding(s) => s.label().into(),
            Limiting::Coefficients => "coefficient word".into(),
            Limiting::Controller => "controller".into(),
        }
    }

    /// Whether this verdict is a structural failure of the rounded
    /// controller rather than a figure or instability.
    pub fn is_structural(self) -> bool {
        matches!(
            self,
            Limiting::Rounding(_) | Limiting::Coefficients | Limiting::Controller
        )
    }
}

impl std::fmt::Display for Limiting {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.key())
    }
}

impl Serialize for Limiting {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.key())
    }
}

impl Wanted {
    /// The time figures `spec` limits: what a verdict reads. The step's
    /// peak search runs whenever another step search does, limited or
    /// not: it runs first and the later searches reuse the bounds it
    /// leaves (`stretch::Run::nodes`, tighter for its parabola), so the
    /// figures computed are the full evaluation's own numbers.
    pub fn limited_by(spec: &Spec) -> Wanted {
        let limited = |f: Figure| f.limit(spec).is_some();
        let (rise, settling, u_peak) = (
            limited(Figure::RiseTime),
            limited(Figure::SettlingTime),
            limited(Figure::CommandPeak),
        );
        Wanted {
            overshoot: limited(Figure::Overshoot) || rise || settling || u_peak,
            rise,
            settling,
            u_peak,
            load_step: limited(Figure::DisturbancePeak) || limited(Figure::RecoveryTime),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_are_unique_and_read_back() {
        for f in Figure::ALL {
            assert_eq!(Figure::from_key(f.key()), Some(f));
        }
        let mut keys: Vec<&str> = Figure::ALL.iter().map(|f| f.key()).collect();
        keys.sort();
        keys.dedup();
        assert_eq!(keys.len(), Figure::ALL.len());
    }

    #[test]
    fn every_limited_figure_has_a_direction_and_every_limit_is_listed() {
        for f in Figure::LIMITED {
            assert_ne!(f.worse(), Worse::Neither, "{f}");
        }
        // A spec with every limit set names exactly the LIMITED figures.
        let spec = Spec {
            max_overshoot_pct: Some(1.0),
            max_settling_s: Some(1.0),
            settling_band_pct: 2.0,
            min_phase_margin_deg: Some(1.0),
            min_gain_margin_db: Some(1.0),
            max_sensitivity_peak: Some(1.0),
            max_rise_s: Some(1.0),
            max_recovery_s: Some(1.0),
            max_disturbance_peak: Some(1.0),
            max_u_peak: Some(1.0),
            headroom: 1.25,
        };
        let limited: Vec<Figure> = Figure::ALL
            .into_iter()
            .filter(|f| f.limit(&spec).is_some())
            .collect();
        let mut expected = Figure::LIMITED.to_vec();
        expected.sort();
        assert_eq!(limited, expected);
    }

    #[test]
    fn slack_is_a_fraction_of_the_limit_on_the_worse_side() {
        // By hand: overshoot 15 % against max 20 % leaves 25 % of the limit;
        // a phase margin of 30 deg against min 45 deg misses by a third.
        let os = Figure::Overshoot.slack(20.0, Some(15.0), Missing::NoFinalValue);
        assert!((os - 0.25).abs() < 1e-12);
        let pm = Figure::PhaseMargin.slack(45.0, Some(30.0), Missing::Infinite);
        assert!((pm + 1.0 / 3.0).abs() < 1e-12);
        assert_eq!(
            Figure::PhaseMargin.slack(45.0, None, Missing::Infinite),
            f64::INFINITY
        );
        assert_eq!(
            Figure::SettlingTime.slack(1.0, None, Missing::NotSettled),
            f64::NEG_INFINITY
        );
    }

    #[test]
    fn headings_carry_units_unless_the_cells_do() {
        assert_eq!(Figure::Overshoot.heading(), "overshoot (%)");
        assert_eq!(Figure::SettlingTime.heading(), "settling time");
        assert_eq!(Figure::SettlingTime.text(7.163e-4), "716.3 µs");
        assert_eq!(Figure::Crossover.text(369_400.0), "369.4 kHz");
        assert_eq!(Figure::GainMargin.heading(), "gain margin (dB)");
        assert_eq!(Figure::PhaseMargin.limit_text(45.0), "min 45.00 deg");
        assert_eq!(Figure::SettlingTime.limit_text(0.05), "max 50.00 ms");
    }

    #[test]
    fn limiting_serializes_to_the_file_strings() {
        let v = serde_json::to_value([
            Limiting::Figure(Figure::Overshoot),
            Limiting::Stability,
            Limiting::Rounding(StructuralFailure::IntegralActionLost),
        ])
        .unwrap();
        assert_eq!(
            v,
            serde_json::json!(["overshoot_pct", "stability", "integral_action"])
        );
    }
}
