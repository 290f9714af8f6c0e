//! What the rate charts draw of a sweep, gathered row by row while it
//! streams: data reduction, not drawing. [`ChartRows`] keeps, per series
//! the charts show, each rate panel's figure (nominal and at its worst over
//! the plant variants) and each format's rounding errors, thinned to the
//! chart's width ([`CHART_COLUMNS`]), and the captions' counts over every
//! row; [`ChartRows::finish`] gives the [`ChartSeries`] the charts
//! (`output::charts`) are drawn from.

use crate::case::Case;
use crate::explore::sweep::{Grid, SweepRow};
use crate::model::discretize::Method;
use crate::model::transfer::Controller;
use crate::sampled::evaluate::{Evaluation, PreparedLoop, Status};
use crate::sampled::figure::Figure as LoopFigure;
use crate::spec::{Format, HoldKind};

/// Points of a series, `(x, y)`.
pub(crate) type Points = Vec<(f64, f64)>;

/// The panels of `figures-vs-rate.png`, top to bottom (each panel is a
/// figure of the catalogue: its axis title, value, limit and gap text
/// come from `sampled::figure`): the figures gathered against the rate.
pub const RATE_PANELS: [LoopFigure; 5] = [
    LoopFigure::Overshoot,
    LoopFigure::SettlingTime,
    LoopFigure::PhaseMargin,
    LoopFigure::GainMargin,
    LoopFigure::SensitivityPeak,
];

/// A figure of a chart row; NaN (a break in the line) where the loop is
/// unstable or the figure does not exist.
pub(crate) fn figure_of(e: &Evaluation, fig: LoopFigure) -> f64 {
    e.figures
        .as_ref()
        .and_then(|f| fig.limited_value(f))
        .unwrap_or(f64::NAN)
}

/// Columns of a chart's rate axis that a long series is thinned to: about
/// the width in pixels of a rate chart's plotting area (1600-pixel figure
/// less the axis labels and the legend column), so a column is about one
/// pixel column of the plot.
pub const CHART_COLUMNS: usize = 1000;

/// A series of more rates than this is thinned ([`Thinned`]); a shorter
/// one is drawn with every point.
const THIN_ABOVE: usize = 2 * CHART_COLUMNS;

/// One value against the rate as a chart draws it, gathered in ascending
/// rate: every point of a short series; of a long one, in each of
/// [`CHART_COLUMNS`] equal columns of the log rate axis, the lowest and
/// the highest value (in rate order) and, where the column has a gap (NaN:
/// the figure does not exist there), one gap point so the line still
/// breaks: at most three points a column, about two per pixel column of
/// the plot, whatever the grid's size.
#[derive(Debug, Clone, Default)]
struct Thinned {
    points: Points,
    /// The column being gathered, with its lowest and highest value and
    /// its first gap.
    column: Option<usize>,
    low: Option<(f64, f64)>,
    high: Option<(f64, f64)>,
    gap: Option<f64>,
}

impl Thinned {
    fn push(&mut self, column: Option<usize>, x: f64, y: f64) {
        let Some(c) = column else {
            self.points.push((x, y));
            return;
        };
        if self.column != Some(c) {
            self.flush();
            self.column = Some(c);
        }
        if y.is_nan() {
            self.gap.get_or_insert(x);
        } else {
            if self.low.is_none_or(|l| y < l.1) {
                self.low = Some((x, y));
            }
            if self.high.is_none_or(|h| y > h.1) {
                self.high = Some((x, y));
            }
        }
    }

    /// Close the column being gathered.
    fn flush(&mut self) {
        let mut kept: Points = [self.low.take(), self.high.take()]
            .into_iter()
            .flatten()
            .chain(self.gap.take().map(|x| (x, f64::NAN)))
            .collect();
        kept.sort_by(|a, b| a.0.total_cmp(&b.0));
        kept.dedup_by(|a, b| a.0 == b.0);
        self.points.extend(kept);
        self.column = None;
    }

    fn finish(mut self) -> Points {
        self.flush();
        self.points
    }
}

/// What the charts draw of one (method, hold, delay) series of a sweep:
/// each rate panel's figure (nominal, and at its worst over the plant
/// variants) and each format's rounding errors, thinned to the chart's
/// width ([`Thinned`]), and the counts the captions give (exact, over every
/// row).
#[derive(Debug, Clone, Default)]
pub struct RateSeries {
    pub method: Option<Method>,
    pub hold: HoldKind,
    pub delay: f64,
    /// Rows of the series.
    pub rows: usize,
    /// Rows without figures (the loop is not stable, or was not evaluated).
    pub unstable: usize,
    /// Per rate panel ([`RATE_PANELS`]): rows with figures but without
    /// this one.
    pub missing: [usize; RATE_PANELS.len()],
    /// Rows with figures but no worst over the variants (a variant
    /// unstable, or a failing row judged verdict-only: `docs/figures.md`,
    /// "Plant variants").
    pub variant_gaps: usize,
    /// The fastest infeasible rate of the nominal loop, Hz.
    pub last_infeasible_hz: Option<f64>,
    nominal: Vec<Points>,
    worst: Vec<Points>,
    /// Per number format, the pole error and the DC gain error (%).
    pub(crate) precision: Vec<[Points; 2]>,
}

impl RateSeries {
    /// The nominal loop's `fig` (a rate panel) against the rate; NaN where
    /// it does not exist.
    pub(crate) fn nominal(&self, fig: LoopFigure) -> &Points {
        &self.nominal[panel_index(fig)]
    }

    /// `fig` at its worst over the plant variants.
    pub(crate) fn worst(&self, fig: LoopFigure) -> &Points {
        &self.worst[panel_index(fig)]
    }

    pub(crate) fn missing_of(&self, fig: LoopFigure) -> usize {
        self.missing[panel_index(fig)]
    }
}

fn panel_index(fig: LoopFigure) -> usize {
    RATE_PANELS.iter().position(|f| *f == fig).unwrap_or(0)
}

/// A series being gathered.
struct Gathering {
    series: RateSeries,
    nominal: Vec<Thinned>,
    worst: Vec<Thinned>,
    precision: Vec<[Thinned; 2]>,
}

/// What the charts draw of a sweep, gathered row by row while it streams
/// (`push`), so it does not grow with the grid: the series the charts
/// show (those at the design delay, the largest listed; every series of a
/// controller given in z, one point each), thinned to the chart's width.
pub struct ChartRows {
    grid: Grid,
    design_delay: f64,
    /// Formats evaluated per row (f64 left out).
    formats: Vec<Format>,
    /// Per grid series: its gathering, when the charts show it.
    gathering: Vec<Option<Gathering>>,
    /// Log rate bounds of the columns, when the series are long.
    columns: Option<(f64, f64)>,
}

impl ChartRows {
    /// Empty, for a sweep of `grid` (a case's, see `pick::case_sweep_grid`).
    pub fn new(case: &Case, lp: &PreparedLoop, grid: &Grid) -> ChartRows {
        let design_delay = case.compute_delays.iter().copied().fold(0.0, f64::max);
        let every = matches!(lp.controller, Controller::Discrete(_));
        let n = grid.rates.len();
        let gathering = (0..grid.series_count())
            .map(|s| {
                let p = grid.point(s * n);
                (every || p.delay == design_delay).then(|| Gathering {
                    series: RateSeries {
                        method: p.method,
                        hold: p.hold,
                        delay: p.delay,
                        ..RateSeries::default()
                    },
                    nominal: vec![Thinned::default(); RATE_PANELS.len()],
                    worst: vec![Thinned::default(); RATE_PANELS.len()],
                    precision: Vec::new(),
                })
            })
            .collect();
        let (lo, hi) = (
            grid.rates.iter().copied().fold(f64::INFINITY, f64::min),
            grid.rates.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        );
        ChartRows {
            columns: (n > THIN_ABOVE && lo > 0.0 && hi > lo).then(|| (lo.ln(), hi.ln())),
            grid: grid.clone(),
            design_delay,
            formats: Vec::new(),
            gathering,
        }
    }

    /// Add the row of grid point `i`; the rows of one series must come in
    /// ascending rate (as the sweep delivers them).
    pub fn push(&mut self, i: usize, row: &SweepRow) {
        if matches!(row.eval.status, Status::NotEvaluated(_)) {
            // Nothing to draw: the row only says why it was not evaluated.
            return;
        }
        let n = self.grid.rates.len().max(1);
        let column = self.columns.map(|(lo, hi)| {
            let t = (row.point.rate_hz.ln() - lo) / (hi - lo);
            ((t * CHART_COLUMNS as f64) as usize).min(CHART_COLUMNS - 1)
        });
        if i == 0 || (self.formats.is_empty() && !row.precision.is_empty()) {
            self.formats = row.precision.iter().map(|p| p.format).collect();
        }
        let Some(Some(g)) = self.gathering.get_mut(i / n) else {
            return;
        };
        let x = row.point.rate_hz;
        let s = &mut g.series;
        s.rows += 1;
        if !row.assessment.feasible {
            s.last_infeasible_hz = Some(x);
        }
        let figures = row.eval.figures.as_ref();
        if figures.is_none() {
            s.unstable += 1;
        }
        let worst = row.robust.as_ref().and_then(|rb| rb.worst_figures.as_ref());
        if figures.is_some() && worst.is_none() {
            s.variant_gaps += 1;
        }
        for (k, fig) in RATE_PANELS.iter().enumerate() {
            if figures.is_some_and(|f| fig.limited_value(f).is_none()) {
                s.missing[k] += 1;
            }
            g.nominal[k].push(column, x, figure_of(&row.eval, *fig));
            if row.robust.is_some() {
                let w = worst.and_then(|f| fig.limited_value(f)).unwrap_or(f64::NAN);
                g.worst[k].push(column, x, w);
            }
        }
        while g.precision.len() < row.precision.len() {
            g.precision.push([Thinned::default(), Thinned::default()]);
        }
        for (k, p) in row.precision.iter().enumerate() {
            let d = p.damage.as_ref();
            let positive = |v: Option<f64>| v.filter(|v| *v > 0.0).unwrap_or(f64::NAN);
            g.precision[k][0].push(column, x, positive(d.map(|d| d.pole_error_pct)));
            g.precision[k][1].push(column, x, positive(d.and_then(|d| d.dc_gain_error_pct)));
        }
    }

    /// The series gathered, finished (grid order), for the charts' input.
    pub fn finish(self) -> ChartSeries {
        let series = (self.gathering.into_iter().flatten())
            .map(|g| {
                let mut s = g.series;
                s.nominal = g.nominal.into_iter().map(Thinned::finish).collect();
                s.worst = g.worst.into_iter().map(Thinned::finish).collect();
                s.precision = (g.precision.into_iter())
                    .map(|[a, b]| [a.finish(), b.finish()])
                    .collect();
                s
            })
            .filter(|s| s.rows > 0)
            .collect();
        ChartSeries {
            series,
            formats: self.formats,
            design_delay: self.design_delay,
        }
    }
}

/// What the charts draw of a sweep ([`ChartRows::finish`]): the series
/// the charts show, the formats the sweep evaluated (f64 left out) and the
/// design delay (the largest listed: the one the charts show).
#[derive(Debug, Clone)]
pub struct ChartSeries {
    pub(crate) series: Vec<RateSeries>,
    pub(crate) formats: Vec<Format>,
    pub(crate) design_delay: f64,
}

impl ChartSeries {
    /// Every row of a finished sweep of the case's grid, in grid order
    /// (tests and small grids).
    pub fn from_rows(case: &Case, lp: &PreparedLoop, rows: &[SweepRow]) -> ChartSeries {
        let mut c = ChartRows::new(case, lp, &crate::explore::pick::case_sweep_grid(case, lp));
        for (i, r) in rows.iter().enumerate() {
            c.push(i, r);
        }
        c.finish()
    }
}
