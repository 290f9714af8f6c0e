//! The cascade's two charts, drawn with the project's chart code
//! (`plot::Figure`, `plot::render_png_bytes`):
//!
//! - `cascade-vs-ratio.png`: the outer loop's phase margin, overshoot and
//!   settling time against the ratio, one series per inner rate (a few
//!   inner rates of the chosen series, every ratio evaluated), with the
//!   outer spec's limits.
//! - `cascade-cpu-map.png`: inner rate x ratio, every pair as a marker
//!   (meeting both specs or not), the chosen pair, and lines of equal CPU
//!   load (the budget's limit among them).

use std::path::Path;

use crate::case::{Case, OuterLoop};
use crate::engineering;
use crate::engineering::sig4;
use crate::error::Error;
use crate::explore::cascade::{CascadePick, CascadeRow, SeriesNames};
use crate::output::charts::{Chart, log_spaced, write_figures};
use crate::output::plot::{Axis, Draw, Figure, Limit, Panel, Series, Side};
use crate::sampled::cascade::evaluate::PreparedCascade;
use crate::sampled::evaluate::{Figures, Status};

/// File names of the cascade's charts.
pub const VS_RATIO: &str = "cascade-vs-ratio.png";
pub const CPU_MAP: &str = "cascade-cpu-map.png";

/// Most inner rates drawn on the figures-against-ratio chart.
const MAX_RATE_SERIES: usize = 5;

/// The rows of the series the answer is on (the chosen pair's, else the
/// first series).
fn chart_series<'a>(
    rows: &'a [CascadeRow],
    pick: &CascadePick,
    outer: &OuterLoop,
) -> Vec<&'a CascadeRow> {
    let names = match &pick.chosen {
        Some(c) => c.series.clone(),
        None => match rows.first() {
            Some(r) => SeriesNames::of(&r.point, outer),
            None => return Vec::new(),
        },
    };
    rows.iter()
        .filter(|r| SeriesNames::of(&r.point, outer) == names)
        .collect()
}

/// Draw both charts into `out_dir`; returns them in a fixed order.
pub fn write_cascade_charts(
    out_dir: &Path,
    case: &Case,
    pc: &PreparedCascade,
    rows: &[CascadeRow],
    pick: &CascadePick,
) -> Result<Vec<Chart>, Error> {
    let figures = [
        (VS_RATIO, vs_ratio(case, pc, rows, pick)),
        (CPU_MAP, cpu_map(case, rows, pick)),
    ];
    let figures = (figures.into_iter()).filter_map(|(name, f)| Some((name, f?)));
    write_figures(out_dir, case, figures.collect())
}

/// Outer figures against the ratio at a few inner rates. Pairs the search
/// did not evaluate, or judged on its verdict's figures alone, are
/// evaluated here (every ratio at the rates drawn).
fn vs_ratio(
    case: &Case,
    pc: &PreparedCascade,
    rows: &[CascadeRow],
    pick: &CascadePick,
) -> Option<Figure> {
    let outer = case.outer.as_ref()?;
    let series = chart_series(rows, pick, outer);
    // Inner rates where the inner loop is stable (elsewhere the outer loop
    // has no figures), evenly spread, the chosen one in place of its
    // nearest neighbour.
    let mut rates: Vec<f64> = (series.iter())
        .filter(|r| r.inner.status == Status::Ok)
        .map(|r| r.point.inner.rate_hz)
        .collect();
    rates.sort_by(f64::total_cmp);
    rates.dedup();
    let count = MAX_RATE_SERIES.min(rates.len());
    let last = rates.len().checked_sub(1)?;
    let mut picked: Vec<f64> = (0..count)
        .map(|i| {
            rates[if count == 1 {
                0
            } else {
                i * last / (count - 1)
            }]
        })
        .collect();
    if let Some(c) = &pick.chosen
        && !picked.contains(&c.inner_rate_hz)
    {
        let dist = |f: f64| (f.ln() - c.inner_rate_hz.ln()).abs();
        let nearest = (0..picked.len())
            .min_by(|&a, &b| dist(picked[a]).total_cmp(&dist(picked[b])))
            .unwrap_or(0);
        picked[nearest] = c.inner_rate_hz;
    }
    picked.sort_by(f64::total_cmp);
    picked.dedup();
    let spec = &outer.spec;
    let limit =
        |v: Option<f64>, side, text: fn(f64) -> String| v.map(|l| Limit::new(l, side, text(l)));
    type Get = fn(&Figures) -> Option<f64>;
    let figures: [(Axis, Get); 3] = [
        (Axis::linear("outer phase margin (deg)"), |f| {
            f.phase_margin_deg
        }),
        (Axis::linear("outer overshoot (%)"), |f| f.overshoot_pct),
        (Axis::log("outer settling time (s)"), |f| f.settling_time_s),
    ];
    let mut panels = figures.map(|(y, get)| (Panel::new(y), get));
    let limits = [
        limit(spec.min_phase_margin_deg, Side::Below, |l| {
            format!("min {} deg", sig4(l))
        }),
        limit(spec.max_overshoot_pct, Side::Above, |l| {
            format!("max {} %", sig4(l))
        }),
        limit(spec.max_settling_s, Side::Above, |l| {
            format!("max {}", engineering::seconds(l))
        }),
    ];
    for (k, &f) in picked.iter().enumerate() {
        let mut figures: Vec<(f64, Figures)> = Vec::new();
        for r in series.iter().filter(|r| r.point.inner.rate_hz == f) {
            // A pick's pair judged on its verdict's figures alone
            // (`not_computed`) is evaluated in full here, as one the search
            // did not reach.
            let e = match &r.outer {
                Some(e)
                    if e.figures
                        .as_ref()
                        .is_some_and(|f| f.not_computed.is_empty()) =>
                {
                    (**e).clone()
                }
                Some(e) if e.figures.is_none() => continue,
                _ => pc.evaluate_outer(&r.point, false),
            };
            figures.extend(e.figures.map(|fig| (r.point.ratio as f64, fig)));
        }
        figures.sort_by(|a, b| a.0.total_cmp(&b.0));
        let label = format!("inner {}", engineering::hz(f));
        for (panel, get) in &mut panels {
            let pts = (figures.iter())
                .map(|(n, fig)| (*n, get(fig).unwrap_or(f64::NAN)))
                .filter(|p| p.1.is_finite());
            let s = Series::line(label.clone(), pts.collect(), k);
            panel.series.push(s.drawn(Draw::LineAndMarkers));
        }
    }
    let title = match &pick.chosen {
        Some(c) => format!(
            "Outer loop against the ratio (outer rate = inner rate / ratio); chosen: inner {}, ratio {}",
            engineering::hz(c.inner_rate_hz),
            c.ratio
        ),
        None => {
            "Outer loop against the ratio (outer rate = inner rate / ratio); no pair chosen".into()
        }
    };
    let mut fig = Figure::new(title, Axis::log("ratio N (inner ticks per outer update)"));
    for ((mut panel, _), limit) in panels.into_iter().zip(limits) {
        panel.limits.extend(limit);
        fig = fig.with_panel(panel);
    }
    Some(fig)
}

/// Every pair on inner rate x ratio, with lines of equal CPU load.
fn cpu_map(case: &Case, rows: &[CascadeRow], pick: &CascadePick) -> Option<Figure> {
    let series = chart_series(rows, pick, case.outer.as_ref()?);
    if series.is_empty() {
        return None;
    }
    let mut panel = Panel::new(Axis::log("ratio N"));
    // Every pair by its verdict; the last two kinds only when present.
    type Keep = fn(&CascadeRow) -> bool;
    let kinds: [(&str, usize, Keep); 4] = [
        ("meets both specs", 0, |r| r.passes()),
        ("fails the outer spec", 1, |r| {
            r.outer_verdict.is_some() && !r.passes()
        }),
        ("below the largest passing ratio (not evaluated)", 2, |r| {
            r.outer_verdict.is_none() && r.inner_verdict.feasible
        }),
        ("inner loop fails its spec", 5, |r| {
            r.outer_verdict.is_none() && !r.inner_verdict.feasible
        }),
    ];
    for (i, (label, style, keep)) in kinds.into_iter().enumerate() {
        let pts: Vec<(f64, f64)> = (series.iter())
            .filter(|r| keep(r))
            .map(|r| (r.point.inner.rate_hz, r.point.ratio as f64))
            .collect();
        if i < 2 || !pts.is_empty() {
            (panel.series).push(Series::line(label, pts, style).drawn(Draw::Markers));
        }
    }
    if let Some(c) = &pick.chosen {
        let load =
            (c.cost.total_load_pct).map_or("no budget".into(), |l| format!("{} % CPU", sig4(l)));
        let chosen = Series::line(
            format!("chosen ({load})"),
            vec![(c.inner_rate_hz, c.ratio as f64)],
            3,
        );
        panel.series.push(chosen.drawn(Draw::Markers));
    }
    // Lines of equal load: N = co f / (L cpu - ci f), for the cycles of
    // the chosen (or first) pair, only where a ratio exists (from 1 up to
    // the largest one listed).
    let cost = pick.chosen.as_ref().map_or(series[0].cost, |c| c.cost);
    let n_max = (series.iter())
        .map(|r| r.point.ratio as f64)
        .fold(1.0, f64::max);
    let rates = || series.iter().map(|r| r.point.inner.rate_hz);
    let (f_lo, f_hi) = (
        rates().fold(f64::INFINITY, f64::min),
        rates().fold(0.0, f64::max),
    );
    if let (Some(b), Some(ci), Some(co)) =
        (case.budget.as_ref(), cost.inner_cycles, cost.outer_cycles)
        && f_hi > f_lo
    {
        let others = [10.0, 25.0, 50.0, 75.0].into_iter();
        let mut levels: Vec<f64> = (others.filter(|l| (l - b.max_load_pct).abs() > 2.0))
            .chain([b.max_load_pct])
            .collect();
        levels.sort_by(f64::total_cmp);
        for (k, l) in levels.into_iter().enumerate() {
            let pts: Vec<(f64, f64)> = (log_spaced(f_lo, f_hi, 200).into_iter())
                .filter_map(|f| {
                    let spare = l / 100.0 * b.cpu_hz - ci * f;
                    (spare > 0.0).then(|| (f, co * f / spare))
                })
                .filter(|p| p.1 >= 1.0 && p.1 <= n_max)
                .collect();
            let limit = if l == b.max_load_pct { " (limit)" } else { "" };
            if pts.len() >= 2 {
                let label = format!("{} % CPU{limit}", sig4(l));
                panel.series.push(Series::line(label, pts, k + 6));
            }
        }
    }
    let title = match (&pick.chosen, pick.window_hz) {
        (Some(_), Some([lo, hi])) => format!(
            "CPU load over inner rate x ratio: pairs meeting both specs; inner-rate window {} to {}",
            engineering::hz(lo),
            engineering::hz(hi)
        ),
        (Some(_), None) => "CPU load over inner rate x ratio: pairs meeting both specs".into(),
        (None, _) => {
            "CPU load over inner rate x ratio: NO pair meets both specs within the budget".into()
        }
    };
    Some(Figure::new(title, Axis::log("inner loop rate (Hz)")).with_panel(panel))
}
