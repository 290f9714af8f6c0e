//! A [`Figure`] drawn with plotters' chart machinery on our backend.
//!
//! Per panel a `ChartBuilder` chart: `configure_mesh` (grid, ticks, tick
//! labels, axis descriptions), the series (`DashedLineSeries`, plotters'
//! `Circle`, `Rectangle`, `TriangleMarker` and `Cross` markers), bands and
//! limits as `Rectangle` and `PathElement`, and the legend by
//! `configure_series_labels` on a chart of its own right of the panel.
//! Ours, because plotters 0.3.7 lacks it: panels stacked on one x axis,
//! log ticks 1-2-5 with plain labels, series broken at gaps and cut at the
//! plot edge (plotters clamps points to the plot area), the hatched
//! infeasible side of a limit, and labels placed where they cover the
//! least ink, chosen on the finished pixels.

use plotters::coord::Shift;
use plotters::coord::ranged1d::{DefaultFormatting, KeyPointHint, Ranged};
use plotters::coord::types::RangedCoordf64;
use plotters::element::{DashedPathElement, Drawable, PointCollection};
use plotters::prelude::*;
use plotters::style::text_anchor::Pos;
use plotters::style::{FontTransform, RGBAColor, TextStyle};
use plotters_backend::{BackendCoord, DrawingErrorKind};
use tiny_skia::{PathBuilder, Transform};

use super::backend::{CanvasBackend, HPos, TextFont, VPos};
use super::canvas::{Canvas, Rect, Rgb, clip_segment, path};
use super::{
    Axis, Draw, Figure, MAX_PIXELS, MAX_SIDE, MIN_SIDE, MarkStyle, PALETTE_LEN, Panel, Series, Side,
};
use crate::error::PlotError;

type Chart<'a, 'b> = ChartContext<'a, CanvasBackend<'b>, Cartesian2d<Ax, Ax>>;

/// Series styles: a colour and a dash (visible and gap lengths in line
/// widths, round caps included; `None` solid); the marker is plotters'
/// circle, square, triangle or cross, filled for the first four entries
/// and hollow for the next. Neighbours differ in hue, lightness, dash and
/// marker, so series stay apart in greyscale and for colour-blind readers.
const PENS: [(Rgb, Option<(f64, f64)>); PALETTE_LEN] = [
    (Rgb(0x17, 0x85, 0x7b), None),              // teal
    (Rgb(0xb2, 0x3a, 0x6d), Some((5.0, 2.5))),  // raspberry
    (Rgb(0x80, 0x84, 0x1c), Some((9.0, 3.5))),  // olive
    (Rgb(0x1d, 0x4f, 0x91), Some((1.0, 2.0))),  // deep blue
    (Rgb(0x4a, 0x4a, 0x4a), Some((14.0, 4.0))), // charcoal
    (Rgb(0xd4, 0x6f, 0x12), Some((2.5, 2.5))),  // burnt orange
    (Rgb(0x7b, 0x4d, 0xa6), Some((1.0, 4.0))),  // violet
    (Rgb(0x3f, 0x97, 0xd0), Some((20.0, 3.0))), // sky blue
];
const BACKGROUND: Rgb = Rgb(255, 255, 255);
const TEXT: Rgb = Rgb(0x22, 0x25, 0x2a);
const TEXT_SOFT: Rgb = Rgb(0x55, 0x5a, 0x62);
const FRAME: Rgb = Rgb(0x7c, 0x82, 0x8a);
const GRID: Rgb = Rgb(0xdf, 0xe3, 0xe8);
const GRID_MINOR: Rgb = Rgb(0xef, 0xf1, 0xf4);
/// Spec limits and their infeasible side.
const LIMIT: Rgb = Rgb(0xb0, 0x2e, 0x36);
/// Vertical marks and annotation pointers.
const MARK: Rgb = Rgb(0x2b, 0x2f, 0x36);
/// Shaded x intervals (a feasible window) and y intervals (a settling band).
const XBAND: Rgb = Rgb(0x3c, 0xa0, 0x6a);
const YBAND: Rgb = Rgb(0x5a, 0x7d, 0xb0);

/// Sizes from the figure size, in pixels (em sizes for text): 21 px at
/// 1600x1000, so text stays legible shown at half size, scaled with the
/// image area.
struct Metrics {
    base: f64,
    tick: f64,
    small: f64,
    lw: f64,
    /// The embedded font's em size at plotters' font size 1.
    em_unit: f64,
}

impl Metrics {
    fn new(w: u32, h: u32, font: &TextFont) -> Self {
        let base = (21.0 * (f64::from(w) * f64::from(h) / 1.6e6).sqrt()).clamp(9.0, 42.0);
        let (tick, small, lw) = (base * 0.9, base * 0.82, (base * 0.11).max(1.5).round());
        Metrics {
            base,
            tick,
            small,
            lw,
            em_unit: font.em_of_scale(1.0),
        }
    }
}

/// One axis in drawing space (log axes in decades) with its ticks; a
/// plotters coordinate (`Ranged`) with plotters' own linear map.
#[derive(Clone, Default)]
struct Ax {
    lo: f64,
    hi: f64,
    log: bool,
    /// Tick labels show values times this (`Axis::label_scale`).
    scale: f64,
    bold: Vec<f64>,
    light: Vec<f64>,
}

impl Ax {
    /// A data value in drawing space; `None` where it cannot be drawn.
    fn t(&self, v: f64) -> Option<f64> {
        let v = if self.log { v.log10() } else { v };
        v.is_finite().then_some(v)
    }

    /// A value clamped to the visible range (infinite ends run to it).
    fn clamped(&self, v: f64) -> Option<f64> {
        match v {
            v if v.is_infinite() => Some(if v > 0.0 { self.hi } else { self.lo }),
            v => self.t(v).map(|t| t.clamp(self.lo, self.hi)),
        }
    }

    fn contains(&self, v: f64) -> bool {
        self.t(v).is_some_and(|t| t >= self.lo && t <= self.hi)
    }

    /// With ticks for about `n` labels: plotters' round steps on a linear
    /// axis; on a log axis decades, with 2 and 5 (or every digit) on short
    /// ranges, since plotters' log axis labels a one-decade range once.
    fn ticked(mut self, n: usize) -> Self {
        if !self.log {
            self.bold = RangedCoordf64::from(self.lo..self.hi).key_points(n.max(2));
            return self;
        }
        let span = self.hi - self.lo;
        let step = ((span / n.max(1) as f64).ceil() as i32).max(1);
        let room = n.max(2) as f64 + 1.0;
        // Every digit only on a short range: the last gap of a decade (9
        // to 10) is 0.046 decades, 2.4 times less than the mean of 1/9.
        let mults: &[i32] = match span {
            s if s * 3.0 > room => &[1],
            s if s * 22.0 > room => &[1, 2, 5],
            _ => &[1, 2, 3, 4, 5, 6, 7, 8, 9],
        };
        for d in (self.lo.floor() as i32)..=(self.hi.ceil() as i32) {
            for k in 1..=9 {
                let v = f64::from(d) + f64::from(k).log10();
                if v < self.lo - 1e-9 || v > self.hi + 1e-9 {
                    continue;
                }
                if (k == 1 && d.rem_euclid(step) == 0) || (step == 1 && mults.contains(&k)) {
                    self.bold.push(v);
                } else if span < 7.0 {
                    self.light.push(v);
                }
            }
        }
        self
    }

    /// A tick label: plain numbers, k/M/G above 10^4, powers of ten as
    /// `1e-5` below 10^-3 (no SI prefixes below one: they misread on axes
    /// in percent or seconds); decimals from the tick step.
    fn label(&self, v: f64) -> String {
        if self.log {
            let x = 10f64.powf(v) * self.scale;
            return fmt_tick(x, x);
        }
        let step = self.bold.windows(2).map(|w| w[1] - w[0]).next();
        fmt_tick(v * self.scale, step.unwrap_or(1.0) * self.scale)
    }
}

impl Ranged for Ax {
    type FormatOption = DefaultFormatting;
    type ValueType = f64;

    fn map(&self, v: &f64, limit: (i32, i32)) -> i32 {
        RangedCoordf64::from(self.lo..self.hi).map(v, limit)
    }

    fn key_points<H: KeyPointHint>(&self, hint: H) -> Vec<f64> {
        match hint.weight().allow_light_points() {
            true => self.light.clone(),
            false => self.bold.clone(),
        }
    }

    fn range(&self) -> std::ops::Range<f64> {
        self.lo..self.hi
    }
}

fn fmt_tick(v: f64, step: f64) -> String {
    let a = v.abs();
    if a < 1e-12 * step.abs().max(1e-300) || v == 0.0 {
        return "0".into();
    }
    if a >= 1e4 {
        let (d, s) = [(1e9, "G"), (1e6, "M"), (1e3, "k")]
            .into_iter()
            .find(|(d, _)| a >= *d)
            .unwrap_or((1e3, "k"));
        return format!("{}{s}", fmt_tick(v / d, step / d));
    }
    let digits = |x: f64| x.abs().log10().floor() as i32;
    if a < 1e-3 {
        let p = (digits(v) - digits(step)).max(0) as usize;
        return format!("{v:.p$e}");
    }
    let dec = (-digits(step)).max(0) as usize;
    format!("{v:.dec$}")
}

/// Why a figure cannot be drawn at all.
fn validate(fig: &Figure) -> Result<(), PlotError> {
    let (width, height, side) = (fig.width, fig.height, MIN_SIDE..=MAX_SIDE);
    let pixels = u64::from(width) * u64::from(height);
    if !side.contains(&width) || !side.contains(&height) || pixels > MAX_PIXELS {
        let (min_side, max_side, max_pixels) = (MIN_SIDE, MAX_SIDE, MAX_PIXELS);
        return Err(PlotError::InvalidSize {
            width,
            height,
            min_side,
            max_side,
            max_pixels,
        });
    }
    if fig.panels.is_empty() {
        return Err(PlotError::NoPanels);
    }
    let axes = std::iter::once(("x", &fig.x)).chain(fig.panels.iter().map(|p| ("y", &p.y)));
    for (name, a) in axes {
        let Some((lo, hi)) = a.range else { continue };
        let reason = match () {
            _ if !(lo.is_finite() && hi.is_finite()) => "ends must be finite",
            _ if a.log && (lo <= 0.0 || hi <= 0.0) => "a log axis needs positive ends",
            _ => continue,
        };
        let axis = format!("{name} ({})", a.label);
        return Err(PlotError::InvalidRange {
            axis,
            lo,
            hi,
            reason,
        });
    }
    Ok(())
}

/// The visible range of an axis: the explicit one, else the values'
/// span padded by 5 % (a linear range that starts near zero starts at it).
fn fit(axis: &Axis, values: impl Iterator<Item = f64>) -> Ax {
    let (log, scale) = (axis.log, axis.label_scale);
    let mut ax = Ax {
        log,
        scale,
        ..Ax::default()
    };
    let (lo, hi) = match axis.range {
        // Checked finite (and positive on a log axis) by `validate`.
        Some((a, b)) => (ax.t(a.min(b)).unwrap_or(0.0), ax.t(a.max(b)).unwrap_or(1.0)),
        None => (values.filter_map(|v| ax.t(v)))
            .fold((f64::INFINITY, f64::NEG_INFINITY), |r, v| {
                (r.0.min(v), r.1.max(v))
            }),
    };
    if !lo.is_finite() {
        return Ax { hi: 1.0, ..ax };
    }
    (ax.lo, ax.hi) = (lo, hi);
    if hi - lo <= 1e-12 * lo.abs().max(1.0) {
        let d = if log { 0.5 } else { 0.5 * lo.abs().max(1.0) };
        (ax.lo, ax.hi) = (lo - d, hi + d);
    } else if axis.range.is_none() {
        let pad = 0.05 * (hi - lo);
        let from_zero = !log && lo >= 0.0 && lo < 0.3 * (hi - lo);
        (ax.lo, ax.hi) = (if from_zero { 0.0 } else { lo - pad }, hi + pad);
    }
    ax
}

/// Maximal stretches of a series inside the view, in drawing space:
/// non-drawable points break the line, segments are cut at the edges
/// (plotters neither breaks nor clips a line: it clamps points to the
/// plot area).
fn runs(points: &[(f64, f64)], x: &Ax, y: &Ax) -> Vec<Vec<(f64, f64)>> {
    let view = Rect::new(x.lo, y.lo, x.hi, y.hi);
    let mut out: Vec<Vec<(f64, f64)>> = Vec::new();
    let (mut prev, mut open) = (None, false);
    for &(px, py) in points {
        let Some(p) = x.t(px).zip(y.t(py)) else {
            (prev, open) = (None, false);
            continue;
        };
        match prev.and_then(|q| Some((q, clip_segment(q, p, &view)?))) {
            None if prev.is_none() && view.contains_rect(&Rect::new(p.0, p.1, p.0, p.1)) => {
                out.push(vec![p]);
                open = true;
            }
            None => open = false,
            Some((q, (t0, t1))) => {
                let at = |t: f64| (q.0 + (p.0 - q.0) * t, q.1 + (p.1 - q.1) * t);
                if !open || t0 > 0.0 {
                    out.push(vec![at(t0)]);
                }
                out.last_mut().into_iter().for_each(|r| r.push(at(t1)));
                open = t1 >= 1.0;
            }
        }
        prev = Some(p);
    }
    out
}

fn color(c: Rgb, alpha: f64) -> RGBAColor {
    RGBAColor(c.0, c.1, c.2, alpha)
}

fn err(e: impl std::fmt::Display) -> PlotError {
    PlotError::Draw(e.to_string())
}

/// plotters' text style for the chart font at em size `em`, anchored by
/// its top left corner.
fn text_style(m: &Metrics, em: f64, c: Rgb) -> TextStyle<'static> {
    let font_desc = ("sans-serif", em / m.em_unit).into_font();
    font_desc.color(&color(c, 1.0))
}

/// How palette entry `style` draws: its line, dash and gap in pixels
/// (round caps add half a width to each end of a dash) and its marker.
fn ink(style: usize, m: &Metrics) -> (ShapeStyle, (u32, u32), Mark) {
    let (c, dash) = PENS[style % PALETTE_LEN];
    let line = color(c, 1.0).stroke_width(m.lw as u32);
    let px = |k: f64| (k * m.lw).round().max(1.0) as u32;
    let dash = dash.map_or((1_000_000, 1), |(on, off)| (px(on - 1.0), px(off + 1.0)));
    let mark = if style % PALETTE_LEN < 4 {
        line.filled()
    } else {
        line
    };
    (
        line,
        dash,
        Mark((0, 0), Some(style % 4), (m.base * 0.24) as i32, mark),
    )
}

/// plotters' marker: at a pixel offset, of a shape (circle, square,
/// triangle, cross; `None` for none), radius and style; one element type
/// for series and legend samples.
#[derive(Clone, Copy)]
struct Mark(BackendCoord, Option<usize>, i32, ShapeStyle);

impl<'a> PointCollection<'a, BackendCoord> for &'a Mark {
    type Point = BackendCoord;
    type IntoIter = std::iter::Once<BackendCoord>;
    fn point_iter(self) -> Self::IntoIter {
        std::iter::once(self.0)
    }
}

impl<DB: DrawingBackend> Drawable<DB> for Mark {
    fn draw<I: Iterator<Item = BackendCoord>>(
        &self,
        mut pos: I,
        b: &mut DB,
        dim: (u32, u32),
    ) -> Result<(), DrawingErrorKind<DB::ErrorType>> {
        let (Some(c), Mark(_, Some(k), r, st)) = (pos.next(), *self) else {
            return Ok(());
        };
        let (at, d, line) = (
            std::iter::once(c),
            r * 4 / 5,
            ShapeStyle {
                filled: false,
                ..st
            },
        );
        let square = [(c.0 - d, c.1 - d), (c.0 + d, c.1 + d)];
        match k {
            0 => Circle::new(c, r, st).draw(at, b, dim),
            1 => Rectangle::new(square, st).draw(square.into_iter(), b, dim),
            2 => TriangleMarker::new(c, r + r / 3, st).draw(at, b, dim),
            _ => Cross::new(c, r, line).draw(at, b, dim),
        }
    }
}

/// A candidate spot for a label: its anchor point in pixels and style.
type Spot = (f64, f64, TextStyle<'static>);

/// A label still to be placed: its text, candidate spots (best first),
/// its panel's plot area, and the data point a note points at (in
/// pixels; drawn with a dot).
struct Pending(String, Vec<Spot>, Rect, Option<(f64, f64)>);

/// The series of `p` that its legend lists.
fn listed(p: &Panel) -> impl Iterator<Item = &Series> {
    p.series.iter().filter(|s| !s.label.trim().is_empty())
}

/// The largest of `v`, at least 0.
fn max_of(v: impl Iterator<Item = f64>) -> f64 {
    v.fold(0.0, f64::max)
}

/// Draw the whole figure: the legend column and the panels' sizes, then
/// per panel plotters' chart (mesh, series) with our extras and its
/// legend, the title and note, and last the labels placed off the data.
pub(crate) fn render(fig: &Figure) -> Result<Canvas, PlotError> {
    validate(fig)?;
    let font = TextFont::embedded()?;
    let m = Metrics::new(fig.width, fig.height, &font);
    let (w, h, n) = (
        f64::from(fig.width),
        f64::from(fig.height),
        fig.panels.len(),
    );
    let (margin, line) = (0.8 * m.base, |em: f64| font.line_height(em));
    let (width, height, panels) = (fig.width, fig.height, n);
    let too_small = PlotError::TooSmall {
        width,
        height,
        panels,
    };
    // Legend column: the widest label, wrapped at a fifth of the width.
    let lines = |s: &Series| wrap(&font, s.label.trim(), m.tick, 0.2 * w);
    let all = fig.panels.iter().flat_map(listed).flat_map(lines);
    let widest = max_of(all.map(|l| font.width(&l, m.tick)));
    let sample_w = (2.6 * m.base).round();
    let legend_w = match widest > 0.0 {
        true => widest + sample_w + 2.0 * m.base,
        false => m.base,
    };
    // Vertical: title, equal panels, x axis, note.
    let (title_em, note_em) = (m.base * 1.25, m.base * 0.72);
    let title = Some(fig.title.trim()).filter(|t| !t.is_empty());
    let top = margin + title.map_or(0.0, |_| line(title_em) + 0.5 * m.base);
    let note_h = (fig.note.as_ref()).map_or(0.0, |_| line(note_em) + 0.4 * m.base);
    let x_area = (0.65 * m.base + line(m.tick) + line(m.base)).round();
    let gap = (0.9 * m.base).round();
    let avail = h - top - margin * 0.7 - note_h - x_area - gap * (n - 1) as f64;
    let ph = (avail / n as f64).floor();
    if ph < 2.5 * line(m.tick) {
        return Err(too_small);
    }
    // Axes: x fitted to everything drawn along it, each y to what is
    // visible in that x range.
    let xv = fig.panels.iter().flat_map(|p| {
        let s = p.series.iter().flat_map(|s| s.points.iter().map(|q| q.0));
        let v = (p.vmarks.iter().map(|v| v.x)).chain(p.notes.iter().map(|a| a.x));
        let b = p.bands.iter().flat_map(|b| [b.from, b.to]);
        s.chain(v).chain(b.filter(|v| v.is_finite()))
    });
    let xa = fit(&fig.x, xv);
    let y_ticks = ((ph / (2.2 * line(m.tick))) as usize).clamp(2, 9);
    let ys: Vec<Ax> = (fig.panels.iter())
        .map(|p| {
            let s = p.series.iter().flat_map(|s| s.points.iter());
            let s = s.filter(|q| xa.contains(q.0)).map(|q| q.1);
            let l = (p.limits.iter().map(|l| l.value)).chain(p.notes.iter().map(|a| a.y));
            let b = (p.hbands.iter().flat_map(|b| [b.from, b.to])).filter(|v| v.is_finite());
            fit(&p.y, s.chain(l).chain(b)).ticked(y_ticks)
        })
        .collect();
    let tick_labels = ys.iter().flat_map(|y| y.bold.iter().map(|v| y.label(*v)));
    let tick_w = max_of(tick_labels.map(|l| font.width(&l, m.tick)));
    let y_area = (tick_w + 0.9 * m.base + line(m.base)).round();
    let plot_w = w - margin.round() - y_area - margin - legend_w;
    if plot_w < 6.0 * m.base {
        return Err(too_small);
    }
    let xs = xa.ticked((plot_w / (5.5 * m.base)) as usize);

    let mut canvas = Canvas::new(fig.width, fig.height, BACKGROUND).ok_or(too_small)?;
    let mut pending: Vec<Pending> = Vec::new();
    {
        let root = CanvasBackend::new(&mut canvas, &font).into_drawing_area();
        let (mut y0, mut legend_end) = (top, top);
        for (i, (p, ys)) in fig.panels.iter().zip(&ys).enumerate() {
            let bottom = i + 1 == n;
            let x_area = if bottom { x_area } else { 0.0 };
            let size = ((y_area + plot_w) as u32, (ph + x_area) as u32);
            let area = root
                .clone()
                .shrink((margin.round() as i32, y0.round() as i32), size);
            let mut chart = ChartBuilder::on(&area)
                .set_label_area_size(LabelAreaPosition::Left, y_area as i32)
                .set_label_area_size(LabelAreaPosition::Bottom, x_area as i32)
                .build_cartesian_2d(xs.clone(), ys.clone())
                .map_err(err)?;
            let xf = |v: &f64| if bottom { xs.label(*v) } else { String::new() };
            let yf = |v: &f64| ys.label(*v);
            chart
                .configure_mesh()
                .x_desc(if bottom { fig.x.label.as_str() } else { "" })
                .y_desc(p.y.label.as_str())
                .x_label_formatter(&xf)
                .y_label_formatter(&yf)
                .x_labels(xs.bold.len() + xs.light.len())
                .y_labels(ys.bold.len() + ys.light.len())
                .label_style(text_style(&m, m.tick, TEXT))
                .axis_desc_style(text_style(&m, m.base, TEXT))
                .bold_line_style(color(GRID, 1.0))
                .light_line_style(color(GRID_MINOR, 1.0))
                .axis_style(color(FRAME, 1.0))
                .set_all_tick_mark_size((0.35 * m.base) as i32)
                .draw()
                .map_err(err)?;
            draw_extras(&mut chart, p, (&xs, ys), &m, &mut pending)?;
            draw_series(&mut chart, p, (&xs, ys), &m)?;
            let (px, py) = chart.plotting_area().get_pixel_range();
            let frame = Rectangle::new([(px.start, py.start), (px.end, py.end)], color(FRAME, 1.0));
            root.draw(&frame).map_err(err)?;
            if listed(p).next().is_some() {
                // The legend gets a chart of its own in the column right of
                // the plot (plotters keeps a legend inside its chart's
                // area), beside its panel or below the legend above when
                // that runs longer (plotters' lines are 1.25 em).
                let start = y0.max(legend_end);
                let (style, n) = (
                    text_style(&m, m.tick, TEXT),
                    listed(p).flat_map(lines).count(),
                );
                legend_end = start + n as f64 * 1.25 * style.font.get_size() + gap;
                let corner = (px.end + (0.6 * m.base) as i32, start.round() as i32);
                let la = root
                    .clone()
                    .shrink(corner, (legend_w as u32, (h - start).max(1.0) as u32));
                draw_legend(&la, p, &m, (sample_w as i32, style), lines)?;
            }
            y0 += ph + gap;
        }
        root.present().map_err(err)?;
    }
    // Title and footer, both from the left margin.
    if let Some(t) = title {
        let size = title_em * ((w - 2.0 * margin) / font.width(t, title_em)).min(1.0);
        font.draw(&mut canvas, t, margin, margin, &text_style(&m, size, TEXT));
    }
    if let Some(note) = &fig.note {
        let st = text_style(&m, note_em, TEXT_SOFT).pos(Pos::new(HPos::Left, VPos::Bottom));
        font.draw(&mut canvas, note.trim(), margin, h - margin * 0.7, &st);
    }
    place_labels(&mut canvas, &font, &m, pending);
    Ok(canvas)
}

/// `text` in lines no wider than `max_w` at em size `em`, split at plain
/// spaces (a number keeps its unit by a no-break space; a longer word
/// keeps a line of its own: a legend is never cut short).
fn wrap(font: &TextFont, text: &str, em: f64, max_w: f64) -> Vec<String> {
    let mut lines: Vec<String> = Vec::new();
    for word in text.split(' ').filter(|w| !w.is_empty()) {
        match lines.last_mut() {
            Some(l) if font.width(&format!("{l} {word}"), em) <= max_w => *l += &format!(" {word}"),
            _ => lines.push(word.to_string()),
        }
    }
    lines
}

/// A panel's legend by plotters' `configure_series_labels`, on a chart of
/// its own in `area`: one empty series per labelled series, whose sample
/// is its line (dash) and marker, and one more per further line of its
/// label (`lines`).
fn draw_legend(
    area: &DrawingArea<CanvasBackend, Shift>,
    p: &Panel,
    m: &Metrics,
    (sw, style): (i32, TextStyle),
    lines: impl Fn(&Series) -> Vec<String>,
) -> Result<(), PlotError> {
    let mut chart = ChartBuilder::on(area)
        .build_cartesian_2d(0.0..1.0, 0.0..1.0)
        .map_err(err)?;
    for s in listed(p) {
        let ((line, (on, off), Mark(_, shape, r, st)), draw) = (ink(s.style, m), s.draw);
        let seg: Vec<_> = [(0, 0), (sw, 0)]
            .into_iter()
            .filter(|_| draw != Draw::Markers)
            .collect();
        let empty = || std::iter::empty::<Circle<(f64, f64), i32>>();
        let text = lines(s);
        let anno = chart.draw_series(empty()).map_err(err)?;
        anno.label(text.first().map_or("", |l| l.as_str()))
            .legend(move |c| {
                let mark = Mark((sw / 2, 0), shape.filter(|_| draw != Draw::Line), r, st);
                EmptyElement::at(c)
                    + DashedPathElement::new(seg.clone(), on.min(sw as u32), off, line)
                    + mark
            });
        for more in text.iter().skip(1) {
            chart
                .draw_series(empty())
                .map_err(err)?
                .label(more.as_str());
        }
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperLeft)
        .legend_area_size(sw + (0.5 * m.base) as i32)
        .margin(0)
        .label_font(style)
        .background_style(color(BACKGROUND, 0.0))
        .border_style(color(BACKGROUND, 0.0))
        .draw()
        .map_err(err)
}

/// Bands, hatched limits and vertical marks under the data; the panel's
/// labels (theirs, the caption, the notes) queued for placement.
fn draw_extras(
    chart: &mut Chart,
    p: &Panel,
    (xs, ys): (&Ax, &Ax),
    m: &Metrics,
    pending: &mut Vec<Pending>,
) -> Result<(), PlotError> {
    use HPos::{Center, Left, Right};
    use VPos::{Bottom, Center as Middle, Top};
    let (px, py) = chart.plotting_area().get_pixel_range();
    let f = |v: i32| f64::from(v);
    let plot = Rect::new(f(px.start), f(py.start), f(px.end), f(py.end));
    // Pixel position of a point in drawing space.
    let at = |x: f64, y: f64| {
        let (a, b) = chart.backend_coord(&(x, y));
        (f64::from(a), f64::from(b))
    };
    let area = chart.plotting_area();
    let fill = |(x0, x1): (f64, f64), (y0, y1): (f64, f64), c: Rgb, a: f64| {
        let r = Rectangle::new([(x0, y0), (x1, y1)], color(c, a).filled());
        area.draw(&r).map_err(err)
    };
    let (b, lo, hi) = (m.base, (xs.lo, ys.lo), (xs.hi, ys.hi));
    // Spots at every (x, h) with every (y, v), in that order.
    let grid = |xh: &[(f64, HPos)], yv: &[(f64, VPos)], c: Rgb| -> Vec<Spot> {
        let st = |h, v| st_of(m, c, h, v);
        let spot = |&(x, h): &(f64, HPos)| yv.iter().map(move |&(y, v)| (x, y, st(h, v)));
        xh.iter().flat_map(spot).collect()
    };
    let mut queue = |text: &str, spots: Vec<Spot>| {
        if !text.trim().is_empty() {
            pending.push(Pending(text.trim().into(), spots, plot, None));
        }
    };
    let (left, right) = ((plot.x0 + 0.5 * b, Left), (plot.x1 - 0.5 * b, Right));
    let (top, bottom) = ((plot.y0 + 0.3 * b, Top), (plot.y1 - 0.3 * b, Bottom));
    let middle = ((plot.y0 + plot.y1) / 2.0, Middle);
    for band in &p.hbands {
        let (Some(a), Some(c)) = (ys.clamped(band.from), ys.clamped(band.to)) else {
            continue;
        };
        fill((lo.0, hi.0), (a, c), YBAND, 0.16)?;
        let (y0, y1) = (at(lo.0, a.max(c)).1, at(lo.0, a.min(c)).1);
        let (over, under) = ((y0 - 0.2 * b, Bottom), (y1 + 0.2 * b, Top));
        let yv = [over, under, ((y0 + y1) / 2.0, Middle)];
        queue(&band.label, grid(&[left, right], &yv, TEXT_SOFT));
    }
    for band in &p.bands {
        let (Some(a), Some(c)) = (xs.clamped(band.from), xs.clamped(band.to)) else {
            continue;
        };
        fill((a, c), (lo.1, hi.1), XBAND, 0.14)?;
        let cx = ((at(a, lo.1).0 + at(c, lo.1).0) / 2.0, Center);
        queue(&band.label, grid(&[cx], &[bottom, top, middle], TEXT_SOFT));
    }
    for l in &p.limits {
        let Some(v) = ys.clamped(l.value) else {
            continue;
        };
        let (y, above) = (at(lo.0, v).1, l.bad_side == Side::Above);
        let (edge, side) = if above {
            (plot.y0, hi.1)
        } else {
            (plot.y1, lo.1)
        };
        let bad = Rect::new(plot.x0, y, plot.x1, edge);
        if bad.height() >= 1.0 {
            fill((lo.0, hi.0), (v, side), LIMIT, 0.05)?;
            // Diagonal hatch, aligned to the canvas so panels line up;
            // in pixels from the plot's corner.
            let (g, pixels) = ((0.7 * b).max(3.0), area.strip_coord_spec());
            let hatch = color(LIMIT, 0.22).stroke_width(1);
            let (k0, k1) = ((bad.x0 + bad.y0) / g, (bad.x1 + bad.y1) / g);
            for c0 in (k0.floor() as i64..=k1.ceil() as i64).map(|k| k as f64 * g) {
                let (p0, p1) = ((c0 - bad.y1, bad.y1), (c0 - bad.y0, bad.y0));
                let Some((t0, t1)) = clip_segment(p0, p1, &bad) else {
                    continue;
                };
                let at_t = |t: f64| {
                    let (x, y) = (p0.0 + (p1.0 - p0.0) * t, p0.1 + (p1.1 - p0.1) * t);
                    ((x - plot.x0).round() as i32, (y - plot.y0).round() as i32)
                };
                let path = PathElement::new(vec![at_t(t0), at_t(t1)], hatch);
                pixels.draw(&path).map_err(err)?;
            }
        }
        if !ys.contains(l.value) {
            continue;
        }
        let stroke = color(LIMIT, 1.0).stroke_width(2);
        area.draw(&PathElement::new(vec![(lo.0, v), (hi.0, v)], stroke))
            .map_err(err)?;
        let (over, under) = ((y - 0.3 * b, Bottom), (y + 0.3 * b, Top));
        let sides = if above { [over, under] } else { [under, over] };
        let mid = ((plot.x0 + plot.x1) / 2.0, Center);
        queue(&l.label, grid(&[right, left, mid], &sides, LIMIT));
    }
    for vm in p.vmarks.iter().filter(|vm| xs.contains(vm.x)) {
        let t = xs.t(vm.x).unwrap_or(xs.lo);
        let (on, off) = match vm.style {
            MarkStyle::Solid => (1_000_000, 1),
            MarkStyle::Dashed => (7, 6),
            MarkStyle::Dotted => (1, 5),
        };
        let st = color(MARK, 0.9).stroke_width(2);
        let path = DashedPathElement::new([(t, hi.1), (t, lo.1)], on, off, st);
        area.draw(&path).map_err(err)?;
        // Along the line first (reading upwards), then level beside it.
        let (x, d) = (at(t, lo.1).0, 0.3 * b);
        let turned = |y, h, dx, v| {
            let st = st_of(m, MARK, h, v).transform(FontTransform::Rotate270);
            (x + dx, y, st)
        };
        let (y0, y1) = (plot.y0 + 0.4 * b, plot.y1 - 0.4 * b);
        let mut spots = vec![turned(y0, Right, d, Top), turned(y0, Right, -d, Bottom)];
        spots.extend([turned(y1, Left, d, Top), turned(y1, Left, -d, Bottom)]);
        spots.extend(grid(&[(x + d, Left), (x - d, Right)], &[top], MARK));
        spots.extend(grid(&[(x + d, Left), (x - d, Right)], &[bottom], MARK));
        queue(&vm.label, spots);
    }
    let caption = [
        grid(&[left, right], &[bottom], TEXT_SOFT),
        grid(&[left, right], &[top], TEXT_SOFT),
    ];
    queue(&p.caption, caption.concat());
    for a in p
        .notes
        .iter()
        .filter(|a| xs.contains(a.x) && ys.contains(a.y))
    {
        let (x, y) = at(xs.t(a.x).unwrap_or(0.0), ys.t(a.y).unwrap_or(0.0));
        let spots = [1.1 * b, 2.2 * b].map(|d| {
            let yv = [(y - 0.7 * d, Bottom), (y + 0.7 * d, Top)];
            grid(&[(x + d, Left), (x - d, Right)], &yv, TEXT)
        });
        // Notes point at data: placed first, with their dot.
        let first = pending.iter().take_while(|q| q.3.is_some()).count();
        let note = Pending(a.text.trim().into(), spots.concat(), plot, Some((x, y)));
        pending.insert(first, note);
    }
    Ok(())
}

/// A label style: small text in colour `c`, anchored.
fn st_of(m: &Metrics, c: Rgb, h: HPos, v: VPos) -> TextStyle<'static> {
    text_style(m, m.small, c).pos(Pos::new(h, v))
}

/// The series through plotters: dashed lines, and markers (every point
/// without a line; with one, only to identify the series: at least 10
/// radii apart, staggered by series).
fn draw_series(
    chart: &mut Chart,
    p: &Panel,
    (xs, ys): (&Ax, &Ax),
    m: &Metrics,
) -> Result<(), PlotError> {
    for s in &p.series {
        let ((line, (on, off), mark), runs) = (ink(s.style, m), runs(&s.points, xs, ys));
        for run in runs.iter().filter(|_| s.draw != Draw::Markers) {
            let series = DashedLineSeries::new(run.clone(), on, off, line);
            chart.draw_series(series).map_err(err)?;
        }
        let spacing = if s.draw == Draw::Markers {
            0.0
        } else {
            10.0 * f64::from(mark.2)
        };
        let (mut travelled, mut kept) = (spacing * (s.style % 4) as f64 / 4.0, Vec::new());
        for run in runs.iter().filter(|_| s.draw != Draw::Line) {
            let px: Vec<_> = run.iter().map(|q| chart.backend_coord(q)).collect();
            for (k, q) in run.iter().enumerate() {
                let (c, o) = (px[k], px[k.saturating_sub(1)]);
                travelled += f64::from(c.0 - o.0).hypot(f64::from(c.1 - o.1));
                if travelled >= spacing {
                    travelled = 0.0;
                    kept.push(*q);
                }
            }
        }
        let marks = kept.into_iter().map(|q| EmptyElement::at(q) + mark);
        chart.draw_series(marks).map_err(err)?;
    }
    Ok(())
}

/// Place each queued label at the candidate spot that stays inside its
/// area, overlaps no placed label and covers the least ink; drawn on a
/// light backing (notes with their dot and pointer).
fn place_labels(canvas: &mut Canvas, font: &TextFont, m: &Metrics, pending: Vec<Pending>) {
    let (pad, dot) = (0.18 * m.base, 0.19 * m.base);
    let mut placed: Vec<Rect> = Vec::new();
    for Pending(text, spots, area, pointer) in pending {
        if let Some((x, y)) = pointer {
            let disc = PathBuilder::from_circle(x as f32, y as f32, dot as f32);
            canvas.fill(disc, MARK, 1.0, Transform::identity());
            placed.push(Rect::new(x - dot, y - dot, x + dot, y + dot));
        }
        if text.is_empty() {
            continue;
        }
        let score = |i: usize, r: &Rect| {
            let outside = if area.contains_rect(r) { 0.0 } else { 1e7 };
            let overlaps = placed.iter().filter(|q| q.overlaps(r)).count() as f64;
            i as f64 * 3.0 + canvas.ink_in(*r, 190) as f64 + outside + overlaps * 1e6
        };
        let scored = spots.iter().enumerate().map(|(i, s)| {
            let r = font.bounds(&text, s.0, s.1, &s.2).expand(pad);
            (score(i, &r), s, r)
        });
        let Some((_, (x, y, st), r)) = scored.min_by(|a, b| a.0.total_cmp(&b.0)) else {
            continue;
        };
        if let Some((px, py)) = pointer {
            let corner = (
                if *x >= px { r.x0 } else { r.x1 },
                if *y <= py { r.y1 } else { r.y0 },
            );
            let (dx, dy) = (corner.0 - px, corner.1 - py);
            let len = dx.hypot(dy).max(1e-9);
            let start = (px + dx / len * dot * 1.6, py + dy / len * dot * 1.6);
            canvas.stroke(path(&[start, corner], false), 1.3, false, MARK, 0.85);
        }
        canvas.fill(r.path(), BACKGROUND, 0.82, Transform::identity());
        font.draw(canvas, &text, *x, *y, st);
        placed.push(r);
    }
}
