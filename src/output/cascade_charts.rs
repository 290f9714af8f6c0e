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

use crate::case::Case;
use crate::engineering;
use crate::engineering::sig4;
use crate::error::Error;
use crate::explore::cascade::{CascadePick, CascadeRow, SeriesNames};
use crate::output::charts::Chart;
use crate::output::plot::{Axis, Draw, Figure, Limit, Panel, Series, Side, render_png_bytes};
use crate::sampled::cascade::evaluate::PreparedCascade;

/// File names of the cascade's charts.
pub const VS_RATIO: &str = "cascade-vs-ratio.png";
pub const CPU_MAP: &str = "cascade-cpu-map.png";

/// Most inner rates drawn on the figures-against-ratio chart.
const MAX_RATE_SERIES: usize = 5;

/// The rows of the series the answer is on (the chosen pair's, else the
/// first series).
fn chart_series<'a>(rows: &'a [CascadeRow], pick: &CascadePick) -> Vec<&'a CascadeRow> {
    let names = match &pick.chosen {
        Some(c) => c.series.clone(),
        None => match rows.first() {
            Some(r) => SeriesNames::of(&r.point),
            None => return Vec::new(),
        },
    };
    rows.iter()
        .filter(|r| SeriesNames::of(&r.point) == names)
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
    let note = format!(
        "{} | looprate {} | model-based: confirm on the hardware",
        case.title,
        env!("CARGO_PKG_VERSION")
    );
    let mut out = Vec::new();
    for (name, fig) in [
        (VS_RATIO, vs_ratio(case, pc, rows, pick)),
        (CPU_MAP, cpu_map(case, rows, pick)),
    ] {
        let Some(fig) = fig else { continue };
        let path = out_dir.join(name);
        let png = render_png_bytes(&fig.with_note(note.clone()), &path)?;
        crate::output::writer::write_atomic(&path, &png)?;
        out.push(Chart { path, png });
    }
    Ok(out)
}

/// Outer figures against the ratio at a few inner rates. Pairs the search
/// did not evaluate are evaluated here (every ratio at the rates drawn).
fn vs_ratio(
    case: &Case,
    pc: &PreparedCascade,
    rows: &[CascadeRow],
    pick: &CascadePick,
) -> Option<Figure> {
    let outer = case.outer.as_ref()?;
    let series = chart_series(rows, pick);
    // Inner rates where the inner loop is stable (elsewhere the outer loop
    // has no figures), evenly spread, the chosen one in place of its
    // nearest neighbour.
    let mut rates: Vec<f64> = Vec::new();
    for r in &series {
        if r.inner.status == crate::sampled::evaluate::Status::Ok
            && !rates.contains(&r.point.inner.rate_hz)
        {
            rates.push(r.point.inner.rate_hz);
        }
    }
    rates.sort_by(f64::total_cmp);
    if rates.is_empty() {
        return None;
    }
    let count = MAX_RATE_SERIES.min(rates.len());
    let mut picked: Vec<f64> = (0..count)
        .map(|i| {
            if count == 1 {
                rates[0]
            } else {
                rates[i * (rates.len() - 1) / (count - 1)]
            }
        })
        .collect();
    if let Some(c) = &pick.chosen
        && !picked.contains(&c.inner_rate_hz)
    {
        let nearest = (0..picked.len())
            .min_by(|&a, &b| {
                (picked[a].ln() - c.inner_rate_hz.ln())
                    .abs()
                    .total_cmp(&(picked[b].ln() - c.inner_rate_hz.ln()).abs())
            })
            .unwrap_or(0);
        picked[nearest] = c.inner_rate_hz;
    }
    picked.sort_by(f64::total_cmp);
    picked.dedup();
    let mut pm = Panel::new(Axis::linear("outer phase margin (deg)"));
    let mut os = Panel::new(Axis::linear("outer overshoot (%)"));
    let mut ts = Panel::new(Axis::log("outer settling time (s)"));
    for (k, &f) in picked.iter().enumerate() {
        let mut points: Vec<(f64, f64, f64, f64)> = Vec::new();
        for r in series.iter().filter(|r| r.point.inner.rate_hz == f) {
            let e = match &r.outer {
                Some(e) if e.figures.is_some() => e.clone(),
                Some(_) => continue,
                None => pc.evaluate_outer(&r.point, false),
            };
            if let Some(fig) = &e.figures {
                points.push((
                    r.point.ratio as f64,
                    fig.phase_margin_deg.unwrap_or(f64::NAN),
                    fig.overshoot_pct.unwrap_or(f64::NAN),
                    fig.settling_time_s.unwrap_or(f64::NAN),
                ));
            }
        }
        points.sort_by(|a, b| a.0.total_cmp(&b.0));
        let label = format!("inner {}", engineering::hz(f));
        let draw = |sel: fn(&(f64, f64, f64, f64)) -> f64| -> Vec<(f64, f64)> {
            points
                .iter()
                .map(|p| (p.0, sel(p)))
                .filter(|p| p.1.is_finite())
                .collect()
        };
        pm.series
            .push(Series::line(label.clone(), draw(|p| p.1), k).drawn(Draw::LineAndMarkers));
        os.series
            .push(Series::line(label.clone(), draw(|p| p.2), k).drawn(Draw::LineAndMarkers));
        ts.series
            .push(Series::line(label, draw(|p| p.3), k).drawn(Draw::LineAndMarkers));
    }
    if let Some(l) = outer.spec.min_phase_margin_deg {
        pm.limits
            .push(Limit::new(l, Side::Below, format!("min {} deg", sig4(l))));
    }
    if let Some(l) = outer.spec.max_overshoot_pct {
        os.limits
            .push(Limit::new(l, Side::Above, format!("max {} %", sig4(l))));
    }
    if let Some(l) = outer.spec.max_settling_s {
        ts.limits.push(Limit::new(
            l,
            Side::Above,
            format!("max {}", engineering::seconds(l)),
        ));
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
    Some(
        Figure::new(title, Axis::log("ratio N (inner ticks per outer update)"))
            .with_panel(pm)
            .with_panel(os)
            .with_panel(ts),
    )
}

/// Every pair on inner rate x ratio, with lines of equal CPU load.
fn cpu_map(case: &Case, rows: &[CascadeRow], pick: &CascadePick) -> Option<Figure> {
    let series = chart_series(rows, pick);
    if series.is_empty() {
        return None;
    }
    let mut panel = Panel::new(Axis::log("ratio N"));
    let pass: Vec<(f64, f64)> = series
        .iter()
        .filter(|r| r.passes())
        .map(|r| (r.point.inner.rate_hz, r.point.ratio as f64))
        .collect();
    let fail: Vec<(f64, f64)> = series
        .iter()
        .filter(|r| r.outer_verdict.is_some() && !r.passes())
        .map(|r| (r.point.inner.rate_hz, r.point.ratio as f64))
        .collect();
    let skipped = |inner_fails: bool| -> Vec<(f64, f64)> {
        series
            .iter()
            .filter(|r| r.outer_verdict.is_none() && r.inner_verdict.feasible != inner_fails)
            .map(|r| (r.point.inner.rate_hz, r.point.ratio as f64))
            .collect()
    };
    panel
        .series
        .push(Series::line("meets both specs", pass, 0).drawn(Draw::Markers));
    panel
        .series
        .push(Series::line("fails the outer spec", fail, 1).drawn(Draw::Markers));
    for (label, pts, style) in [
        (
            "below the largest passing ratio (not evaluated)",
            skipped(false),
            2,
        ),
        ("inner loop fails its spec", skipped(true), 5),
    ] {
        if !pts.is_empty() {
            panel
                .series
                .push(Series::line(label, pts, style).drawn(Draw::Markers));
        }
    }
    if let Some(c) = &pick.chosen {
        panel.series.push(
            Series::line(
                format!(
                    "chosen ({})",
                    c.cost
                        .total_load_pct
                        .map_or_else(|| "no budget".into(), |l| format!("{} % CPU", sig4(l)))
                ),
                vec![(c.inner_rate_hz, c.ratio as f64)],
                3,
            )
            .drawn(Draw::Markers),
        );
    }
    // Lines of equal load: N = co f / (L cpu - ci f), for the cycles of
    // the chosen (or first) pair.
    let cost = pick
        .chosen
        .as_ref()
        .map(|c| c.cost)
        .unwrap_or(series[0].cost);
    let ratios: Vec<f64> = series.iter().map(|r| r.point.ratio as f64).collect();
    let n_max = ratios.iter().copied().fold(1.0, f64::max);
    let rates: Vec<f64> = series.iter().map(|r| r.point.inner.rate_hz).collect();
    let (f_lo, f_hi) = (
        rates.iter().copied().fold(f64::INFINITY, f64::min),
        rates.iter().copied().fold(0.0, f64::max),
    );
    if let (Some(b), Some(ci), Some(co)) =
        (case.budget.as_ref(), cost.inner_cycles, cost.outer_cycles)
        && f_hi > f_lo
    {
        let mut levels = vec![b.max_load_pct];
        for l in [10.0, 25.0, 50.0, 75.0] {
            if (l - b.max_load_pct).abs() > 2.0 && l < 100.0 {
                levels.push(l);
            }
        }
        levels.sort_by(f64::total_cmp);
        for (k, l) in levels.into_iter().enumerate() {
            let k = k + 6;
            let pts: Vec<(f64, f64)> = (0..200)
                .map(|i| f_lo * (f_hi / f_lo).powf(i as f64 / 199.0))
                .filter_map(|f| {
                    let spare = l / 100.0 * b.cpu_hz - ci * f;
                    (spare > 0.0).then(|| (f, co * f / spare))
                })
                // Only where a ratio exists: whole numbers from 1 up to
                // the largest one listed.
                .filter(|p| p.1 >= 1.0 && p.1 <= n_max)
                .collect();
            if pts.len() >= 2 {
                let label = if l == b.max_load_pct {
                    format!("{} % CPU (limit)", engineering::sig4(l))
                } else {
                    format!("{} % CPU", engineering::sig4(l))
                };
                panel.series.push(Series::line(label, pts, k));
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
