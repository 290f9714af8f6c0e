//! Layout and drawing of a [`Figure`] onto a canvas.
//!
//! Layout, outside in: title on top; footer note, x-axis label and x tick
//! labels at the bottom; rotated y labels and y tick labels on the left
//! (one width for all panels so their plot areas line up); the legend in
//! a column right of the plot areas, so it never covers data. Labels that
//! live inside a plot (limits, markers, bands, notes) pick, from a few
//! candidate spots, the one that covers the least already-drawn ink and
//! no other label.

use super::canvas::{Canvas, Poly, Rect, capsule, circle, stroke_polyline};
use super::scale::{Scale, Ticks, choose_range, choose_ticks};
use super::style::{self, Marker, dash_px, pen};
use super::text::{HAlign, TextFont, TextStyle, VAlign};
use super::{Draw, Figure, MAX_PIXELS, MAX_SIDE, MIN_SIDE, MarkStyle, Panel, Series, Side};
use crate::error::PlotError;

/// Sizes derived from the figure size, all in pixels.
struct Metrics {
    /// Base em size: axis labels.
    base: f64,
    title: f64,
    tick: f64,
    legend: f64,
    /// In-plot labels.
    small: f64,
    note: f64,
    margin: f64,
    tick_len: f64,
    /// Series line width.
    lw: f64,
}

impl Metrics {
    fn new(w: u32, h: u32) -> Self {
        // 21 px at 1600x1000, so text stays legible when the image is
        // shown at half size; scaled with the image area.
        let area = f64::from(w) * f64::from(h);
        let base = (21.0 * (area / 1.6e6).sqrt()).clamp(9.0, 42.0);
        Metrics {
            base,
            title: base * 1.3,
            tick: base * 0.9,
            legend: base * 0.9,
            small: base * 0.82,
            note: base * 0.72,
            margin: base * 0.8,
            tick_len: (base * 0.35).round(),
            lw: (base * 0.11).max(1.5),
        }
    }
}

/// Everything drawing needs besides the canvas.
struct Ctx<'a> {
    font: &'a TextFont,
    m: &'a Metrics,
}

/// Check what cannot be drawn at all and say why.
fn validate(fig: &Figure) -> Result<(), PlotError> {
    let (w, h) = (fig.width, fig.height);
    if !(MIN_SIDE..=MAX_SIDE).contains(&w)
        || !(MIN_SIDE..=MAX_SIDE).contains(&h)
        || u64::from(w) * u64::from(h) > MAX_PIXELS
    {
        return Err(PlotError::InvalidSize {
            width: w,
            height: h,
            min_side: MIN_SIDE,
            max_side: MAX_SIDE,
            max_pixels: MAX_PIXELS,
        });
    }
    if fig.panels.is_empty() {
        return Err(PlotError::NoPanels);
    }
    let check = |axis: String, log: bool, range: Option<(f64, f64)>| match range {
        Some((lo, hi)) if !lo.is_finite() || !hi.is_finite() => Err(PlotError::InvalidRange {
            axis,
            lo,
            hi,
            reason: "ends must be finite",
        }),
        Some((lo, hi)) if log && lo.min(hi) <= 0.0 => Err(PlotError::InvalidRange {
            axis,
            lo,
            hi,
            reason: "a log axis needs positive ends",
        }),
        _ => Ok(()),
    };
    check("x".into(), fig.x.log, fig.x.range)?;
    for (i, p) in fig.panels.iter().enumerate() {
        check(format!("panel {} y", i + 1), p.y.log, p.y.range)?;
    }
    Ok(())
}

/// Values that should be visible on the shared x axis.
fn x_values(fig: &Figure) -> Vec<f64> {
    let mut v = Vec::new();
    for p in &fig.panels {
        for s in &p.series {
            v.extend(
                s.points
                    .iter()
                    .filter(|(x, y)| x.is_finite() && y.is_finite())
                    .map(|(x, _)| *x),
            );
        }
        v.extend(p.vmarks.iter().map(|m| m.x));
        v.extend(p.bands.iter().flat_map(|b| [b.from, b.to]));
        v.extend(p.notes.iter().map(|n| n.x));
    }
    v
}

/// Values that should be visible on a panel's y axis, given the x range.
fn y_values(p: &Panel, xs: &Scale) -> Vec<f64> {
    let mut v = Vec::new();
    for s in &p.series {
        v.extend(
            s.points
                .iter()
                .filter(|(x, _)| xs.contains(*x))
                .map(|(_, y)| *y),
        );
    }
    v.extend(p.limits.iter().map(|l| l.value));
    v.extend(p.hbands.iter().flat_map(|b| [b.from, b.to]));
    v.extend(p.notes.iter().filter(|n| xs.contains(n.x)).map(|n| n.y));
    v
}

/// Draw the whole figure.
pub(crate) fn render(fig: &Figure) -> Result<Canvas, PlotError> {
    validate(fig)?;
    let font = TextFont::embedded()?;
    let m = Metrics::new(fig.width, fig.height);
    let cx = Ctx { font: &font, m: &m };
    let (w, h) = (f64::from(fig.width), f64::from(fig.height));
    let mut canvas = Canvas::new(fig.width, fig.height, style::BACKGROUND);
    let too_small = || PlotError::TooSmall {
        width: fig.width,
        height: fig.height,
        panels: fig.panels.len(),
    };

    // Vertical layout.
    let mut top = m.margin;
    let title = fig.title.trim();
    if !title.is_empty() {
        top += font.line_height(m.title) + 0.45 * m.base;
    }
    let tick_lh = font.line_height(m.tick);
    let mut bottom = h - m.margin * 0.7;
    let note = fig.note.as_deref().map(str::trim).unwrap_or("");
    if !note.is_empty() {
        bottom -= font.line_height(m.note) + 0.3 * m.base;
    }
    let x_label = fig.x.label.trim();
    if !x_label.is_empty() {
        bottom -= font.line_height(m.base) + 0.2 * m.base;
    }
    bottom -= m.tick_len + 0.2 * m.base + tick_lh;
    let n = fig.panels.len();
    // Room between panels for the y tick labels centred on both edges.
    let gap = (tick_lh + 0.35 * m.base).max(0.9 * m.base).round();
    let avail = bottom - top - gap * (n as f64 - 1.0);
    let weights: Vec<f64> = fig
        .panels
        .iter()
        .map(|p| {
            if p.height_weight.is_finite() && p.height_weight > 0.0 {
                p.height_weight
            } else {
                1.0
            }
        })
        .collect();
    let total: f64 = weights.iter().sum();
    let mut rows = Vec::with_capacity(n);
    let mut y = top;
    for wt in &weights {
        let ph = (avail * wt / total).floor();
        if ph < 2.5 * tick_lh {
            return Err(too_small());
        }
        rows.push((y.round(), (y + ph).round()));
        y += ph + gap;
    }

    // y scales and ticks (they depend on panel heights only).
    let mut y_scales = Vec::with_capacity(n);
    let mut y_ticks = Vec::with_capacity(n);
    let provisional_x = Scale {
        lo: 0.0,
        hi: 1.0,
        log: fig.x.log,
        p0: 0.0,
        p1: 1.0,
    };
    let (xlo, xhi) = choose_range(fig.x.range, &x_values(fig), fig.x.log);
    let x_for_data = Scale {
        lo: xlo,
        hi: xhi,
        ..provisional_x
    };
    for (p, (y0, y1)) in fig.panels.iter().zip(&rows) {
        let (lo, hi) = choose_range(p.y.range, &y_values(p, &x_for_data), p.y.log);
        let ys = Scale {
            lo,
            hi,
            log: p.y.log,
            p0: *y1,
            p1: *y0,
        };
        let fits = |t: &Ticks| {
            let pos: Vec<f64> = t.major.iter().filter_map(|(v, _)| ys.map(*v)).collect();
            t.major.len() <= 9 && pos.windows(2).all(|w| (w[0] - w[1]).abs() >= 1.9 * tick_lh)
        };
        y_ticks.push(choose_ticks(&ys, &fits));
        y_scales.push(ys);
    }

    // Horizontal layout.
    let any_ylabel = fig.panels.iter().any(|p| !p.y.label.trim().is_empty());
    let tick_w = y_ticks
        .iter()
        .flat_map(|t| t.major.iter())
        .map(|(_, l)| font.width(l, m.tick))
        .fold(0.0, f64::max);
    let mut left = m.margin + tick_w + 0.3 * m.base + m.tick_len;
    if any_ylabel {
        left += font.line_height(m.base) + 0.35 * m.base;
    }
    let left = left.round();
    let sample_w = 2.6 * m.base;
    let legend_entries: Vec<Vec<&Series>> = fig
        .panels
        .iter()
        .map(|p| {
            p.series
                .iter()
                .filter(|s| !s.label.trim().is_empty())
                .collect()
        })
        .collect();
    let legend_text_max = (0.26 * w - sample_w).max(4.0 * m.base);
    let legend_text_w = legend_entries
        .iter()
        .flatten()
        .map(|s| font.width(s.label.trim(), m.legend).min(legend_text_max))
        .fold(0.0, f64::max);
    let right = if legend_text_w > 0.0 {
        w - m.margin - legend_text_w - sample_w - 0.5 * m.base - 1.0 * m.base
    } else {
        w - m.margin.max(1.6 * m.base)
    }
    .round();
    if right - left < 6.0 * m.base {
        return Err(too_small());
    }
    let xs = Scale {
        lo: xlo,
        hi: xhi,
        log: fig.x.log,
        p0: left,
        p1: right,
    };
    let x_fits = |t: &Ticks| {
        let pos: Vec<(f64, f64)> = t
            .major
            .iter()
            .filter_map(|(v, l)| xs.map(*v).map(|p| (p, font.width(l, m.tick))))
            .collect();
        t.major.len() <= 14
            && pos.windows(2).all(|w| {
                w[1].0 - w[0].0 >= ((w[0].1 + w[1].1) / 2.0 + 1.2 * m.base).max(3.0 * m.base)
            })
    };
    let x_ticks = choose_ticks(&xs, &x_fits);

    // Title, centred over the plot areas and shrunk to fit if long.
    if !title.is_empty() {
        let mut size = m.title;
        let tw = font.width(title, size);
        let room = w - 2.0 * m.margin;
        if tw > room {
            size *= room / tw;
        }
        let centre = ((left + right) / 2.0).clamp(
            m.margin + tw.min(room) / 2.0,
            w - m.margin - tw.min(room) / 2.0,
        );
        font.draw(
            &mut canvas,
            title,
            centre,
            m.margin,
            &TextStyle::new(size, style::TEXT).anchor(HAlign::Center, VAlign::Top),
        );
    }

    for (i, p) in fig.panels.iter().enumerate() {
        let (y0, y1) = rows[i];
        let plot = Rect::new(left, y0, right, y1);
        let is_bottom = i + 1 == n;
        draw_panel(
            &mut canvas,
            &cx,
            p,
            &PanelGeom {
                plot,
                xs: &xs,
                ys: &y_scales[i],
                xt: &x_ticks,
                yt: &y_ticks[i],
                is_bottom,
            },
        );
        draw_legend(
            &mut canvas,
            &cx,
            &legend_entries[i],
            Rect::new(
                right + m.base,
                y0,
                w - m.margin,
                y1 + if is_bottom { 0.0 } else { gap },
            ),
            sample_w,
            legend_text_max,
        );
    }

    let last_bottom = rows[n - 1].1;
    if !x_label.is_empty() {
        let ly = last_bottom + m.tick_len + 0.2 * m.base + tick_lh + 0.2 * m.base;
        font.draw(
            &mut canvas,
            x_label,
            (left + right) / 2.0,
            ly,
            &TextStyle::new(m.base, style::TEXT).anchor(HAlign::Center, VAlign::Top),
        );
    }
    if !note.is_empty() {
        let text = ellipsize(&font, note, m.note, w - 2.0 * m.margin);
        font.draw(
            &mut canvas,
            &text,
            m.margin,
            h - m.margin * 0.7,
            &TextStyle::new(m.note, style::TEXT_SOFT).anchor(HAlign::Left, VAlign::Bottom),
        );
    }
    Ok(canvas)
}

/// Where one panel goes and how it maps data.
struct PanelGeom<'a> {
    plot: Rect,
    xs: &'a Scale,
    ys: &'a Scale,
    xt: &'a Ticks,
    yt: &'a Ticks,
    is_bottom: bool,
}

fn draw_panel(canvas: &mut Canvas, cx: &Ctx, p: &Panel, g: &PanelGeom) {
    let m = cx.m;
    let plot = g.plot;

    // Shaded intervals under everything else.
    for b in &p.hbands {
        if let (Some(a), Some(c)) = (g.ys.map_clamped(b.from), g.ys.map_clamped(b.to)) {
            let r = Rect::new(plot.x0, a, plot.x1, c);
            canvas.fill_rect(r, style::YBAND, 0.14);
            for (v, pix) in [(b.from, a), (b.to, c)] {
                if g.ys.contains(v) {
                    canvas.hline(pix, plot.x0, plot.x1, style::YBAND, 0.55);
                }
            }
        }
    }
    for b in &p.bands {
        if let (Some(a), Some(c)) = (g.xs.map_clamped(b.from), g.xs.map_clamped(b.to)) {
            let r = Rect::new(a, plot.y0, c, plot.y1);
            canvas.fill_rect(r, style::XBAND, 0.13);
            for (v, pix) in [(b.from, a), (b.to, c)] {
                if g.xs.contains(v) {
                    canvas.vline(pix, plot.y0, plot.y1, style::XBAND, 0.6);
                }
            }
        }
    }
    // Infeasible sides of limits: a light tint and a diagonal hatch.
    for l in &p.limits {
        let Some(py) = g.ys.map_clamped(l.value) else {
            continue;
        };
        let r = match l.bad_side {
            Side::Above => Rect::new(plot.x0, plot.y0, plot.x1, py),
            Side::Below => Rect::new(plot.x0, py, plot.x1, plot.y1),
        };
        if r.height() < 0.5 {
            continue;
        }
        canvas.fill_rect(r, style::LIMIT, 0.05);
        hatch(canvas, r, 0.7 * m.base, style::LIMIT, 0.22);
    }

    // Grid.
    for v in &g.yt.minor {
        if let Some(py) = g.ys.map(*v) {
            canvas.hline(py, plot.x0, plot.x1, style::GRID_MINOR, 1.0);
        }
    }
    for v in &g.xt.minor {
        if let Some(px) = g.xs.map(*v) {
            canvas.vline(px, plot.y0, plot.y1, style::GRID_MINOR, 1.0);
        }
    }
    for (v, _) in &g.yt.major {
        if let Some(py) = g.ys.map(*v) {
            canvas.hline(py, plot.x0, plot.x1, style::GRID, 1.0);
        }
    }
    for (v, _) in &g.xt.major {
        if let Some(px) = g.xs.map(*v) {
            canvas.vline(px, plot.y0, plot.y1, style::GRID, 1.0);
        }
    }

    // Limit lines and vertical markers, under the data.
    for l in &p.limits {
        if let (true, Some(py)) = (g.ys.contains(l.value), g.ys.map(l.value)) {
            let mut polys = Vec::new();
            capsule((plot.x0, py), (plot.x1, py), 1.9, &mut polys);
            canvas.fill_polys(&polys, style::LIMIT, 1.0, plot);
        }
    }
    for vm in &p.vmarks {
        if let (true, Some(px)) = (g.xs.contains(vm.x), g.xs.map(vm.x)) {
            let w = 1.7;
            let dash: &[f64] = match vm.style {
                MarkStyle::Solid => &[],
                MarkStyle::Dashed => &[6.0, 3.5],
                MarkStyle::Dotted => &[1.0, 2.2],
            };
            let mut polys = Vec::new();
            stroke_polyline(
                &[(px, plot.y0), (px, plot.y1)],
                w,
                &dash_px(dash, w),
                &plot.expand(4.0),
                &mut polys,
            );
            canvas.fill_polys(&polys, style::MARK, 0.9, plot);
        }
    }

    for s in &p.series {
        draw_series(canvas, m, s, g);
    }

    // Frame and ticks.
    let frame = style::FRAME;
    canvas.hline(plot.y0, plot.x0, plot.x1 + 1.0, frame, 1.0);
    canvas.hline(plot.y1, plot.x0, plot.x1 + 1.0, frame, 1.0);
    canvas.vline(plot.x0, plot.y0, plot.y1 + 1.0, frame, 1.0);
    canvas.vline(plot.x1, plot.y0, plot.y1 + 1.0, frame, 1.0);
    for (v, _) in &g.xt.major {
        if let Some(px) = g.xs.map(*v) {
            canvas.vline(px, plot.y1, plot.y1 + m.tick_len, frame, 1.0);
        }
    }
    for v in &g.xt.minor {
        if let Some(px) = g.xs.map(*v) {
            canvas.vline(px, plot.y1, plot.y1 + m.tick_len * 0.55, frame, 1.0);
        }
    }
    for (v, _) in &g.yt.major {
        if let Some(py) = g.ys.map(*v) {
            canvas.hline(py, plot.x0 - m.tick_len, plot.x0, frame, 1.0);
        }
    }
    for v in &g.yt.minor {
        if let Some(py) = g.ys.map(*v) {
            canvas.hline(py, plot.x0 - m.tick_len * 0.55, plot.x0, frame, 1.0);
        }
    }

    // Tick labels and axis labels.
    let tick_style = TextStyle::new(m.tick, style::TEXT);
    for (v, label) in &g.yt.major {
        if let Some(py) = g.ys.map(*v) {
            cx.font.draw(
                canvas,
                label,
                plot.x0 - m.tick_len - 0.25 * m.base,
                py,
                &tick_style.anchor(HAlign::Right, VAlign::Middle),
            );
        }
    }
    if g.is_bottom {
        for (v, label) in &g.xt.major {
            if let Some(px) = g.xs.map(*v) {
                cx.font.draw(
                    canvas,
                    label,
                    px,
                    plot.y1 + m.tick_len + 0.2 * m.base,
                    &tick_style.anchor(HAlign::Center, VAlign::Top),
                );
            }
        }
    }
    let ylabel = p.y.label.trim();
    if !ylabel.is_empty() {
        let mut size = m.base;
        let lw = cx.font.width(ylabel, size);
        if lw > plot.height() {
            size *= plot.height() / lw;
        }
        cx.font.draw(
            canvas,
            ylabel,
            m.margin,
            (plot.y0 + plot.y1) / 2.0,
            &TextStyle::new(size, style::TEXT)
                .anchor(HAlign::Center, VAlign::Top)
                .rotated(),
        );
    }

    draw_inplot_labels(canvas, cx, p, g);
}

/// Diagonal hatch lines (running up to the right) over `r`, aligned to
/// the canvas so neighbouring hatched areas line up.
fn hatch(canvas: &mut Canvas, r: Rect, spacing: f64, c: super::Rgb, alpha: f32) {
    let spacing = spacing.max(3.0);
    let mut polys = Vec::new();
    let first = ((r.x0 + r.y0) / spacing).floor() as i64;
    let last = ((r.x1 + r.y1) / spacing).ceil() as i64;
    for k in first..=last {
        let c0 = k as f64 * spacing;
        // Points on x + y = c0 at the top and bottom edges of r.
        capsule((c0 - r.y1, r.y1), (c0 - r.y0, r.y0), 1.1, &mut polys);
    }
    canvas.fill_polys(&polys, c, alpha, r);
}

/// Pixel-space runs of a series: maximal stretches of drawable points.
fn runs(points: &[(f64, f64)], g: &PanelGeom) -> Vec<Vec<(f64, f64)>> {
    let mut out = Vec::new();
    let mut cur = Vec::new();
    for (x, y) in points {
        match (g.xs.map(*x), g.ys.map(*y)) {
            (Some(px), Some(py)) => cur.push((px, py)),
            _ => {
                if !cur.is_empty() {
                    out.push(std::mem::take(&mut cur));
                }
            }
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    out
}

/// Turn points into a staircase that holds each value until the next x.
fn staircase(points: &[(f64, f64)]) -> Vec<(f64, f64)> {
    let mut out = Vec::with_capacity(points.len() * 2);
    for (i, p) in points.iter().enumerate() {
        if i > 0 {
            let prev = points[i - 1];
            if prev.1.is_finite() && p.0.is_finite() && prev.0.is_finite() && p.1.is_finite() {
                out.push((p.0, prev.1));
            }
        }
        out.push(*p);
    }
    out
}

fn draw_series(canvas: &mut Canvas, m: &Metrics, s: &Series, g: &PanelGeom) {
    let pen = pen(s.style.0);
    let plot = g.plot;
    let lw = m.lw;
    let line = matches!(s.draw, Draw::Line | Draw::LineAndMarkers | Draw::Steps);
    let marks = matches!(s.draw, Draw::Markers | Draw::LineAndMarkers);
    if line {
        let pts = if s.draw == Draw::Steps {
            staircase(&s.points)
        } else {
            s.points.clone()
        };
        let keep = plot.expand(2.0 * lw);
        let dash = dash_px(pen.dash, lw);
        let mut polys = Vec::new();
        for run in runs(&pts, g) {
            let span = run.iter().fold(0.0_f64, |a, p| {
                a.max((p.0 - run[0].0).abs()).max((p.1 - run[0].1).abs())
            });
            if span < lw {
                // A lone point (or a run that collapses onto one pixel)
                // would vanish as a line: show it as a dot.
                if keep.contains_rect(&Rect::new(run[0].0, run[0].1, run[0].0, run[0].1)) {
                    polys.push(circle(run[0].0, run[0].1, lw * 1.4));
                }
            } else {
                stroke_polyline(&run, lw, &dash, &keep, &mut polys);
            }
        }
        canvas.fill_polys(&polys, pen.color, 1.0, plot);
    }
    if marks {
        let r = m.base * 0.24;
        // With a line, markers only identify the series: keep them at
        // least 10 radii apart (staggered by series) so dense data does not
        // merge them into a solid band. Without a line every point shows.
        let spacing = if line { 10.0 * r } else { 0.0 };
        let mut travelled = spacing * (s.style.0 % 4) as f64 / 4.0;
        let mut polys = Vec::new();
        for run in runs(&s.points, g) {
            let mut prev: Option<(f64, f64)> = None;
            for (px, py) in run {
                if let Some((qx, qy)) = prev {
                    travelled += (px - qx).hypot(py - qy);
                }
                prev = Some((px, py));
                if travelled < spacing {
                    continue;
                }
                travelled = 0.0;
                if plot.expand(r).contains_rect(&Rect::new(px, py, px, py)) {
                    marker(pen.marker, px, py, r, &mut polys);
                }
            }
        }
        canvas.fill_polys(&polys, pen.color, 1.0, plot.expand(1.0));
    }
}

/// The outline of marker shape `k` of nominal radius `r` at `(x, y)`.
fn marker(k: Marker, x: f64, y: f64, r: f64, out: &mut Vec<Poly>) {
    let reg = |n: usize, rad: f64, rot: f64| -> Poly {
        (0..n)
            .map(|i| {
                let t = rot + std::f64::consts::TAU * i as f64 / n as f64;
                (x + rad * t.cos(), y + rad * t.sin())
            })
            .collect()
    };
    use std::f64::consts::FRAC_PI_2;
    match k {
        Marker::Circle => out.push(circle(x, y, r * 0.95)),
        Marker::Square => {
            let a = r * 0.82;
            out.push(vec![
                (x - a, y - a),
                (x + a, y - a),
                (x + a, y + a),
                (x - a, y + a),
            ]);
        }
        Marker::TriangleUp => out.push(reg(3, r * 1.2, -FRAC_PI_2)),
        Marker::TriangleDown => out.push(reg(3, r * 1.2, FRAC_PI_2)),
        Marker::Diamond => out.push(reg(4, r * 1.15, 0.0)),
        Marker::Hexagon => out.push(reg(6, r, 0.0)),
        Marker::Cross => {
            let a = r * 0.8;
            capsule((x - a, y - a), (x + a, y + a), r * 0.45, out);
            capsule((x - a, y + a), (x + a, y - a), r * 0.45, out);
        }
        Marker::Plus => {
            let a = r * 1.05;
            capsule((x - a, y), (x + a, y), r * 0.45, out);
            capsule((x, y - a), (x, y + a), r * 0.45, out);
        }
    }
}

/// A candidate spot for a label.
struct Spot {
    x: f64,
    y: f64,
    st: TextStyle,
}

/// Choose the candidate that stays inside `area`, overlaps no placed
/// label and covers the least ink; draw it on a light backing. Returns
/// the backing rectangle.
fn place_label(
    canvas: &mut Canvas,
    cx: &Ctx,
    text: &str,
    spots: &[Spot],
    area: Rect,
    placed: &mut Vec<Rect>,
) -> Option<Rect> {
    let pad = 0.18 * cx.m.base;
    let mut best: Option<(f64, usize, Rect)> = None;
    for (i, s) in spots.iter().enumerate() {
        let r = cx.font.bounds(text, s.x, s.y, &s.st).expand(pad);
        let mut score = i as f64 * 3.0 + canvas.ink_in(r, 190) as f64;
        if !area.contains_rect(&r) {
            score += 1e7;
        }
        score += placed.iter().filter(|p| p.overlaps(&r)).count() as f64 * 1e6;
        if best.as_ref().is_none_or(|b| score < b.0) {
            best = Some((score, i, r));
        }
    }
    let (_, i, r) = best?;
    canvas.fill_rect(r, style::BACKGROUND, 0.82);
    let s = &spots[i];
    cx.font.draw(canvas, text, s.x, s.y, &s.st);
    placed.push(r);
    Some(r)
}

fn draw_inplot_labels(canvas: &mut Canvas, cx: &Ctx, p: &Panel, g: &PanelGeom) {
    let m = cx.m;
    let plot = g.plot;
    let b = m.base;
    let mut placed: Vec<Rect> = Vec::new();
    let small = |c| TextStyle::new(m.small, c);

    // Notes first: they point at specific data.
    for n in &p.notes {
        let (Some(px), Some(py)) = (g.xs.map(n.x), g.ys.map(n.y)) else {
            continue;
        };
        if !(g.xs.contains(n.x) && g.ys.contains(n.y)) {
            continue;
        }
        let dot = 0.19 * b;
        let mut polys = vec![circle(px, py, dot)];
        canvas.fill_polys(&polys, style::MARK, 1.0, plot);
        polys.clear();
        let text = n.text.trim();
        if text.is_empty() {
            continue;
        }
        let st = small(style::TEXT);
        let mut spots = Vec::new();
        for d in [1.1 * b, 2.2 * b] {
            spots.push(Spot {
                x: px + d,
                y: py - d * 0.7,
                st: st.anchor(HAlign::Left, VAlign::Bottom),
            });
            spots.push(Spot {
                x: px - d,
                y: py - d * 0.7,
                st: st.anchor(HAlign::Right, VAlign::Bottom),
            });
            spots.push(Spot {
                x: px + d,
                y: py + d * 0.7,
                st: st.anchor(HAlign::Left, VAlign::Top),
            });
            spots.push(Spot {
                x: px - d,
                y: py + d * 0.7,
                st: st.anchor(HAlign::Right, VAlign::Top),
            });
        }
        // Reserve the dot so later labels keep off it.
        placed.push(Rect::new(px - dot, py - dot, px + dot, py + dot));
        // Score spots before drawing the pointer, then draw pointer and label.
        let pad = 0.18 * b;
        let mut best = (f64::MAX, 0usize);
        for (i, s) in spots.iter().enumerate() {
            let r = cx.font.bounds(text, s.x, s.y, &s.st).expand(pad);
            let mut score = i as f64 * 3.0 + canvas.ink_in(r, 190) as f64;
            if !plot.contains_rect(&r) {
                score += 1e7;
            }
            score += placed.iter().filter(|q| q.overlaps(&r)).count() as f64 * 1e6;
            if score < best.0 {
                best = (score, i);
            }
        }
        let s = &spots[best.1];
        let r = cx.font.bounds(text, s.x, s.y, &s.st).expand(pad);
        let corner = (
            if s.x >= px { r.x0 } else { r.x1 },
            if s.y <= py { r.y1 } else { r.y0 },
        );
        let (dx, dy) = (corner.0 - px, corner.1 - py);
        let len = dx.hypot(dy).max(1e-9);
        let start = (px + dx / len * dot * 1.6, py + dy / len * dot * 1.6);
        capsule(start, corner, 1.3, &mut polys);
        canvas.fill_polys(&polys, style::MARK, 0.85, plot);
        place_label(canvas, cx, text, std::slice::from_ref(s), plot, &mut placed);
    }

    for l in &p.limits {
        let text = l.label.trim();
        if text.is_empty() || !g.ys.contains(l.value) {
            continue;
        }
        let Some(py) = g.ys.map(l.value) else {
            continue;
        };
        let st = small(style::LIMIT);
        let above = |x: f64, h: HAlign| Spot {
            x,
            y: py - 0.3 * b,
            st: st.anchor(h, VAlign::Bottom),
        };
        let below = |x: f64, h: HAlign| Spot {
            x,
            y: py + 0.3 * b,
            st: st.anchor(h, VAlign::Top),
        };
        let mut spots = Vec::new();
        for (x, h) in [
            (plot.x1 - 0.5 * b, HAlign::Right),
            (plot.x0 + 0.5 * b, HAlign::Left),
            ((plot.x0 + plot.x1) / 2.0, HAlign::Center),
        ] {
            match l.bad_side {
                Side::Above => spots.extend([above(x, h), below(x, h)]),
                Side::Below => spots.extend([below(x, h), above(x, h)]),
            }
        }
        place_label(canvas, cx, text, &spots, plot, &mut placed);
    }

    for vm in &p.vmarks {
        let text = vm.label.trim();
        if text.is_empty() || !g.xs.contains(vm.x) {
            continue;
        }
        let Some(px) = g.xs.map(vm.x) else {
            continue;
        };
        let st = small(style::MARK);
        let d = 0.3 * b;
        let spots = [
            // Rotated, reading upwards, beside the line at the top.
            Spot {
                x: px + d,
                y: plot.y0 + 0.4 * b,
                st: st.anchor(HAlign::Right, VAlign::Top).rotated(),
            },
            Spot {
                x: px - d,
                y: plot.y0 + 0.4 * b,
                st: st.anchor(HAlign::Right, VAlign::Bottom).rotated(),
            },
            Spot {
                x: px + d,
                y: plot.y1 - 0.4 * b,
                st: st.anchor(HAlign::Left, VAlign::Top).rotated(),
            },
            Spot {
                x: px - d,
                y: plot.y1 - 0.4 * b,
                st: st.anchor(HAlign::Left, VAlign::Bottom).rotated(),
            },
            // Horizontal, for short panels.
            Spot {
                x: px + d,
                y: plot.y0 + 0.3 * b,
                st: st.anchor(HAlign::Left, VAlign::Top),
            },
            Spot {
                x: px - d,
                y: plot.y0 + 0.3 * b,
                st: st.anchor(HAlign::Right, VAlign::Top),
            },
        ];
        place_label(canvas, cx, text, &spots, plot, &mut placed);
    }

    for band in &p.bands {
        let text = band.label.trim();
        if text.is_empty() {
            continue;
        }
        let (Some(a), Some(c)) = (g.xs.map_clamped(band.from), g.xs.map_clamped(band.to)) else {
            continue;
        };
        if (a - c).abs() < 1.0 {
            continue;
        }
        let st = small(style::TEXT_SOFT);
        let tw = cx.font.width(text, m.small);
        let half = tw / 2.0 + 0.5 * b;
        let centre = ((a + c) / 2.0).clamp(plot.x0 + half, (plot.x1 - half).max(plot.x0 + half));
        let spots = [
            Spot {
                x: centre,
                y: plot.y1 - 0.3 * b,
                st: st.anchor(HAlign::Center, VAlign::Bottom),
            },
            Spot {
                x: centre,
                y: plot.y0 + 0.3 * b,
                st: st.anchor(HAlign::Center, VAlign::Top),
            },
            Spot {
                x: centre,
                y: (plot.y0 + plot.y1) / 2.0,
                st: st.anchor(HAlign::Center, VAlign::Middle),
            },
        ];
        place_label(canvas, cx, text, &spots, plot, &mut placed);
    }

    for band in &p.hbands {
        let text = band.label.trim();
        if text.is_empty() {
            continue;
        }
        let (Some(a), Some(c)) = (g.ys.map_clamped(band.from), g.ys.map_clamped(band.to)) else {
            continue;
        };
        let (top, bot) = (a.min(c), a.max(c));
        let st = small(style::TEXT_SOFT);
        let lh = cx.font.line_height(m.small);
        let mid = (top + bot) / 2.0;
        let mut spots = Vec::new();
        for (x, h) in [
            (plot.x0 + 0.5 * b, HAlign::Left),
            (plot.x1 - 0.5 * b, HAlign::Right),
        ] {
            if bot - top > lh * 1.3 {
                spots.push(Spot {
                    x,
                    y: mid,
                    st: st.anchor(h, VAlign::Middle),
                });
            }
            spots.push(Spot {
                x,
                y: top - 0.2 * b,
                st: st.anchor(h, VAlign::Bottom),
            });
            spots.push(Spot {
                x,
                y: bot + 0.2 * b,
                st: st.anchor(h, VAlign::Top),
            });
        }
        place_label(canvas, cx, text, &spots, plot, &mut placed);
    }
}

/// Shorten `text` with an ellipsis until it fits in `max_w` pixels.
fn ellipsize(font: &TextFont, text: &str, size: f64, max_w: f64) -> String {
    if font.width(text, size) <= max_w {
        return text.to_string();
    }
    let mut chars: Vec<char> = text.chars().collect();
    while !chars.is_empty() {
        chars.pop();
        let s: String = chars.iter().collect::<String>().trim_end().to_string() + "\u{2026}";
        if font.width(&s, size) <= max_w {
            return s;
        }
    }
    "\u{2026}".to_string()
}

/// The legend for one panel, in the column right of its plot area:
/// a line sample (with marker when the series has markers) and the label.
fn draw_legend(
    canvas: &mut Canvas,
    cx: &Ctx,
    entries: &[&Series],
    area: Rect,
    sample_w: f64,
    text_max: f64,
) {
    if entries.is_empty() {
        return;
    }
    let m = cx.m;
    let lh = cx.font.line_height(m.legend);
    let mut row = lh + 0.3 * m.base;
    let fits = ((area.height() / row).floor() as usize).max(1);
    let (shown, more) = if entries.len() <= fits {
        (entries.len(), 0)
    } else {
        row = lh;
        let fits = ((area.height() / row).floor() as usize).max(1);
        if entries.len() <= fits {
            (entries.len(), 0)
        } else {
            (fits - 1, entries.len() - (fits - 1))
        }
    };
    let x0 = area.x0;
    let mut y = area.y0 + row / 2.0;
    for s in entries.iter().take(shown) {
        let pen = pen(s.style.0);
        let line = matches!(s.draw, Draw::Line | Draw::LineAndMarkers | Draw::Steps);
        let marks = matches!(s.draw, Draw::Markers | Draw::LineAndMarkers);
        let mut polys = Vec::new();
        let keep = canvas.bounds();
        if line {
            stroke_polyline(
                &[(x0, y), (x0 + sample_w, y)],
                m.lw,
                &dash_px(pen.dash, m.lw),
                &keep,
                &mut polys,
            );
        }
        if marks {
            marker(
                pen.marker,
                x0 + sample_w / 2.0,
                y,
                m.base * 0.24,
                &mut polys,
            );
        }
        canvas.fill_polys(&polys, pen.color, 1.0, keep);
        let text = ellipsize(cx.font, s.label.trim(), m.legend, text_max);
        cx.font.draw(
            canvas,
            &text,
            x0 + sample_w + 0.5 * m.base,
            y,
            &TextStyle::new(m.legend, style::TEXT).anchor(HAlign::Left, VAlign::Middle),
        );
        y += row;
    }
    if more > 0 {
        cx.font.draw(
            canvas,
            &format!("\u{2026} {more} more"),
            x0 + sample_w + 0.5 * m.base,
            y,
            &TextStyle::new(m.legend, style::TEXT_SOFT).anchor(HAlign::Left, VAlign::Middle),
        );
    }
}
