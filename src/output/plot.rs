//! PNG charts for design reviews.
//!
//! A [`Figure`] is plain data (the chart's description, which tests read):
//! one or more [`Panel`]s stacked vertically that share one x axis, each
//! with its own y axis, data [`Series`], spec [`Limit`]s (with the
//! infeasible side hatched), vertical markers, shaded bands and point
//! annotations. [`render_png_bytes`] draws it and encodes a PNG;
//! [`render_rgb`] gives the pixels instead.
//!
//! plotters draws (chart builder, mesh, series, legends: module `draw`) on
//! a backend of ours (`backend`) over an anti-aliased RGB canvas
//! (`canvas`), whose text is laid out with the embedded font's metrics
//! (`text`), because plotters 0.3.7's own text path drops each glyph's
//! left side bearing. No system library (fontconfig, freetype) is
//! involved and output is identical on every machine.

use crate::error::PlotError;

mod backend;
mod canvas;
mod draw;

use std::path::Path;

/// Number of distinct series styles (colour, dash, marker) before the
/// palette repeats.
pub const PALETTE_LEN: usize = 8;

/// Smallest accepted figure side, in pixels.
pub const MIN_SIDE: u32 = 64;
/// Largest accepted figure side, in pixels.
pub const MAX_SIDE: u32 = 10_000;
/// Largest accepted pixel count (keeps memory use bounded).
pub const MAX_PIXELS: u64 = 40_000_000;

/// A chart: panels stacked top to bottom sharing the x axis.
#[derive(Debug, Clone, PartialEq)]
pub struct Figure {
    /// Title across the top; empty for none.
    pub title: String,
    /// Image width in pixels.
    pub width: u32,
    /// Image height in pixels.
    pub height: u32,
    /// Panels from top to bottom.
    pub panels: Vec<Panel>,
    /// The shared x axis; its label and tick labels appear under the
    /// bottom panel only.
    pub x: Axis,
    /// A small footer line (e.g. the case file and tool version).
    pub note: Option<String>,
}

impl Figure {
    /// A 1600x1000 figure with no panels yet.
    pub fn new(title: impl Into<String>, x: Axis) -> Self {
        Figure {
            title: title.into(),
            width: 1600,
            height: 1000,
            panels: Vec::new(),
            x,
            note: None,
        }
    }

    /// Add a panel below the existing ones.
    pub fn with_panel(mut self, panel: Panel) -> Self {
        self.panels.push(panel);
        self
    }

    /// Set the image size in pixels.
    pub fn with_size(mut self, width: u32, height: u32) -> Self {
        self.width = width;
        self.height = height;
        self
    }

    /// Set the footer line.
    pub fn with_note(mut self, note: impl Into<String>) -> Self {
        self.note = Some(note.into());
        self
    }
}

/// One axis: its label (with units) and scale.
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    /// Label with units, e.g. "loop rate (Hz)".
    pub label: String,
    /// Logarithmic (decades) instead of linear.
    pub log: bool,
    /// Visible range; `None` fits the data. A reversed pair is swapped
    /// and a zero-width one widened.
    pub range: Option<(f64, f64)>,
    /// Tick labels show each value times this (1e3 for a time axis in
    /// ms whose data stay in seconds); the label names the unit shown.
    pub label_scale: f64,
}

impl Default for Axis {
    fn default() -> Self {
        Axis::linear("")
    }
}

impl Axis {
    /// A linear axis fitted to the data.
    pub fn linear(label: impl Into<String>) -> Self {
        Axis {
            label: label.into(),
            log: false,
            range: None,
            label_scale: 1.0,
        }
    }

    /// A logarithmic axis fitted to the data.
    pub fn log(label: impl Into<String>) -> Self {
        let log = true;
        Axis {
            log,
            ..Axis::linear(label)
        }
    }

    /// Tick labels in another unit than the data: each value times
    /// `scale` (the label must name that unit).
    pub fn with_label_scale(mut self, scale: f64) -> Self {
        self.label_scale = scale;
        self
    }

    /// Fix the visible range.
    pub fn with_range(mut self, lo: f64, hi: f64) -> Self {
        self.range = Some((lo, hi));
        self
    }
}

/// One panel: a y axis and everything drawn against it.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Panel {
    pub y: Axis,
    pub series: Vec<Series>,
    /// Spec limits drawn as horizontal lines with the bad side hatched.
    pub limits: Vec<Limit>,
    /// Labelled vertical lines (e.g. the chosen rate).
    pub vmarks: Vec<VMark>,
    /// Shaded x intervals (e.g. a feasible rate window).
    pub bands: Vec<Band>,
    /// Shaded y intervals (e.g. a settling band).
    pub hbands: Vec<Band>,
    /// Text labels pointing at data coordinates.
    pub notes: Vec<Annotation>,
    /// A short line inside the panel, placed off the data (e.g. what the
    /// gaps in its curves mean); empty for none.
    pub caption: String,
}

impl Panel {
    /// An empty panel with the given y axis.
    pub fn new(y: Axis) -> Self {
        Panel {
            y,
            ..Panel::default()
        }
    }
}

/// A data series.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Legend text; empty keeps the series out of the legend.
    pub label: String,
    /// `(x, y)` points in drawing order. A point with a NaN or infinite
    /// coordinate (or a non-positive one on a log axis) breaks the line.
    pub points: Vec<(f64, f64)>,
    /// An index into the built-in palette (taken modulo [`PALETTE_LEN`]).
    /// Each entry pairs a colour with its own dash pattern and marker
    /// shape, so series stay distinguishable in greyscale and for
    /// colour-blind readers.
    pub style: usize,
    pub draw: Draw,
}

impl Series {
    /// A series drawn as a line in palette entry `style`.
    pub fn line(label: impl Into<String>, points: Vec<(f64, f64)>, style: usize) -> Self {
        Series {
            label: label.into(),
            points,
            style,
            draw: Draw::Line,
        }
    }

    /// Change how the points are drawn.
    pub fn drawn(mut self, draw: Draw) -> Self {
        self.draw = draw;
        self
    }
}

/// How a series' points are drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Draw {
    /// Straight segments between points.
    #[default]
    Line,
    /// A marker at each point, no line.
    Markers,
    /// Segments and a marker at each point.
    LineAndMarkers,
}

/// Which side of a limit is infeasible.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Side {
    Above,
    Below,
}

/// A horizontal spec limit.
#[derive(Debug, Clone, PartialEq)]
pub struct Limit {
    pub value: f64,
    /// The infeasible side, which gets a light hatch.
    pub bad_side: Side,
    pub label: String,
}

impl Limit {
    /// A limit at `value` whose `bad_side` is infeasible.
    pub fn new(value: f64, bad_side: Side, label: impl Into<String>) -> Self {
        Limit {
            value,
            bad_side,
            label: label.into(),
        }
    }
}

/// Line style of a vertical marker.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum MarkStyle {
    #[default]
    Solid,
    Dashed,
    Dotted,
}

/// A labelled vertical line at `x`.
#[derive(Debug, Clone, PartialEq)]
pub struct VMark {
    pub x: f64,
    pub label: String,
    pub style: MarkStyle,
}

impl VMark {
    /// A vertical marker.
    pub fn new(x: f64, label: impl Into<String>, style: MarkStyle) -> Self {
        VMark {
            x,
            label: label.into(),
            style,
        }
    }
}

/// A shaded interval of x (`Panel::bands`) or y (`Panel::hbands`); an
/// infinite end runs to the plot edge.
#[derive(Debug, Clone, PartialEq)]
pub struct Band {
    pub from: f64,
    pub to: f64,
    pub label: String,
}

impl Band {
    /// A shaded interval from `from` to `to`.
    pub fn new(from: f64, to: f64, label: impl Into<String>) -> Self {
        Band {
            from,
            to,
            label: label.into(),
        }
    }
}

/// A text label with a dot and a short pointer at data coordinates.
#[derive(Debug, Clone, PartialEq)]
pub struct Annotation {
    pub x: f64,
    pub y: f64,
    pub text: String,
}

impl Annotation {
    /// A note at `(x, y)`.
    pub fn new(x: f64, y: f64, text: impl Into<String>) -> Self {
        Annotation {
            x,
            y,
            text: text.into(),
        }
    }
}

/// Draw `fig` and return its pixels: `(width, height, rgb)` with rows
/// top to bottom, three bytes per pixel.
pub fn render_rgb(fig: &Figure) -> Result<(u32, u32, Vec<u8>), PlotError> {
    let canvas = draw::render(fig)?;
    Ok((canvas.width(), canvas.height(), canvas.rgb()))
}

/// Draw `fig` and encode it as an RGB PNG in memory (the `png` crate).
/// The caller writes it (the bytes a report embeds are the bytes
/// written, never a file read back); `name` is only used in an encoder
/// error.
pub fn render_png_bytes(fig: &Figure, name: &Path) -> Result<Vec<u8>, PlotError> {
    let canvas = draw::render(fig)?;
    let mut out = Vec::new();
    let mut enc = png::Encoder::new(&mut out, canvas.width(), canvas.height());
    enc.set_color(png::ColorType::Rgb);
    enc.set_depth(png::BitDepth::Eight);
    // Each row's best filter and the strongest deflate: anti-aliased
    // edges and hatching compress poorly otherwise.
    enc.set_adaptive_filter(png::AdaptiveFilterType::Adaptive);
    enc.set_compression(png::Compression::Best);
    let written = (enc.write_header()).and_then(|mut w| w.write_image_data(&canvas.rgb()));
    written.map_err(|e| PlotError::Encode {
        path: name.to_path_buf(),
        message: e.to_string(),
    })?;
    Ok(out)
}
