//! plotters' `DrawingBackend` over our anti-aliased canvas, and the
//! chart text.
//!
//! plotters (chart builder, mesh, series, legends) decides what goes
//! where; this backend decides how it looks: strokes, circles and fills
//! become tiny-skia paths on the canvas (smooth edges; a
//! one-pixel line along a pixel row or column stays crisp), and text is
//! laid out here with the embedded font's metrics: the caret advances by
//! each glyph's advance plus pair kerning, and each glyph outline is filled
//! at its true position (the outline carries the left side bearing, which
//! plotters 0.3.7's own text path drops: words fell apart, "con tinuous"),
//! level or turned a quarter turn. Font sizes are plotters' (the pixel
//! height from ascent to descent); plotters sizes label areas through
//! `estimate_text_size` here. Rectangles keep plotters' default
//! rasterizer, which draws them through `draw_line` here.

use std::convert::Infallible;

use ab_glyph::{Font, FontRef, Glyph, OutlineCurve, PxScale, ScaleFont, point};
use plotters_backend::{
    BackendColor, BackendCoord, BackendStyle, BackendTextStyle, DrawingBackend, DrawingErrorKind,
    FontTransform,
};

use tiny_skia::{PathBuilder, Transform};

use super::canvas::{Canvas, Rect, Rgb, path};
use crate::error::PlotError;

type Result<T> = std::result::Result<T, DrawingErrorKind<Infallible>>;

/// Anchors: which point of the text's line box (advance width by
/// ascent to descent) sits on the given position; plotters' own.
pub(crate) use plotters_backend::text_anchor::{HPos, VPos};

/// The chart font: DejaVu Sans, cut down to the characters charts need
/// (see `assets/fonts/make-subset.sh`).
pub(crate) struct TextFont {
    font: FontRef<'static>,
    /// Converts an em size in pixels to ab_glyph's scale, which is the
    /// pixel height of ascent minus descent (plotters' font size).
    em_to_scale: f32,
}

impl TextFont {
    /// The embedded font. Fails only if the bundled file is damaged.
    pub fn embedded() -> std::result::Result<Self, PlotError> {
        let bytes = include_bytes!("../../../assets/fonts/DejaVuSans-subset.ttf");
        let font = FontRef::try_from_slice(bytes).map_err(|e| PlotError::Font(e.to_string()))?;
        let upem =
            (font.units_per_em()).ok_or_else(|| PlotError::Font("no units per em".into()))?;
        let em_to_scale = font.height_unscaled() / upem;
        Ok(TextFont { font, em_to_scale })
    }

    /// The em size whose ab_glyph scale (plotters' font size) is `scale`.
    pub fn em_of_scale(&self, scale: f64) -> f64 {
        scale / f64::from(self.em_to_scale)
    }

    /// One line laid out from the caret start on the baseline (y down):
    /// advances, side bearings (through the outlines) and pair kerning
    /// from the font's `kern` table; control characters skipped. Also
    /// the width and the line box's ascent and descent (both positive).
    fn layout(&self, text: &str, size: f64) -> (Vec<Glyph>, f64, f64, f64) {
        let scale = PxScale::from((size.max(1.0) as f32) * self.em_to_scale);
        let sf = self.font.as_scaled(scale);
        let (mut caret, mut prev, mut glyphs) = (0.0_f32, None, Vec::new());
        for id in text
            .chars()
            .filter(|c| !c.is_control())
            .map(|c| sf.glyph_id(c))
        {
            caret += prev.map_or(0.0, |p| sf.kern(p, id));
            glyphs.push(id.with_scale_and_position(scale, point(caret, 0.0)));
            caret += sf.h_advance(id);
            prev = Some(id);
        }
        let (ascent, descent) = (f64::from(sf.ascent()), f64::from(-sf.descent()));
        (glyphs, f64::from(caret), ascent, descent)
    }

    /// Logical width of `text` at `size`.
    pub fn width(&self, text: &str, size: f64) -> f64 {
        self.layout(text, size).1
    }

    /// Height of the line box at `size`.
    pub fn line_height(&self, size: f64) -> f64 {
        let (_, _, ascent, descent) = self.layout("", size);
        ascent + descent
    }

    /// Where the caret start goes so that the anchor lands on `(x, y)`,
    /// rounded to whole pixels for crisp text; also the canvas rectangle
    /// of the line box.
    fn place(
        &self,
        text: &str,
        x: f64,
        y: f64,
        st: &impl BackendTextStyle,
    ) -> (Vec<Glyph>, (i64, i64), Rect) {
        let (glyphs, width, ascent, descent) = self.layout(text, self.em_of_scale(st.size()));
        let (anchor, rotated) = (st.anchor(), turned(st));
        let ax = match anchor.h_pos {
            HPos::Left => 0.0,
            HPos::Center => width / 2.0,
            HPos::Right => width,
        };
        // Offset from the baseline, y down.
        let ay = match anchor.v_pos {
            VPos::Top => -ascent,
            VPos::Center => (descent - ascent) / 2.0,
            VPos::Bottom => descent,
        };
        // Turned text: text frame (tx, ty) maps to canvas (ox + ty, oy - tx).
        let (ox, oy) = match rotated {
            true => ((x - ay).round(), (y + ax).round()),
            false => ((x - ax).round(), (y - ay).round()),
        };
        let r = match rotated {
            true => Rect::new(ox - ascent, oy - width, ox + descent, oy),
            false => Rect::new(ox, oy - ascent, ox + width, oy + descent),
        };
        (glyphs, (ox as i64, oy as i64), r)
    }

    /// The canvas rectangle `text` would occupy if drawn with `st` at
    /// `(x, y)`, without drawing it.
    pub fn bounds(&self, text: &str, x: f64, y: f64, st: &impl BackendTextStyle) -> Rect {
        self.place(text, x, y, st).2
    }

    /// Draw `text` anchored at `(x, y)`: the glyph outlines, each at its
    /// caret position, filled as one path (turned by the transform).
    pub fn draw(
        &self,
        canvas: &mut Canvas,
        text: &str,
        x: f64,
        y: f64,
        st: &impl BackendTextStyle,
    ) {
        let (glyphs, (ox, oy), _) = self.place(text, x, y, st);
        let mut pb = PathBuilder::new();
        for g in glyphs {
            let Some(outline) = self.font.outline(g.id) else {
                continue;
            };
            let sf = self.font.as_scaled(g.scale);
            let (fx, fy) = (sf.h_scale_factor(), sf.v_scale_factor());
            // Font units (y up) to the text frame (y down, caret start on
            // the baseline at the origin).
            let at = |p: &ab_glyph::Point| (g.position.x + p.x * fx, -p.y * fy);
            let mut end = None;
            for curve in &outline.curves {
                let (pts, n) = match *curve {
                    OutlineCurve::Line(a, b) => ([a, b, b, b], 2),
                    OutlineCurve::Quad(a, c, b) => ([a, c, b, b], 3),
                    OutlineCurve::Cubic(a, c, d, b) => ([a, c, d, b], 4),
                };
                if end != Some(pts[0]) {
                    let p = at(&pts[0]);
                    pb.move_to(p.0, p.1);
                }
                let [_, p1, p2, p3] = pts.map(|p| at(&p));
                match n {
                    2 => pb.line_to(p1.0, p1.1),
                    3 => pb.quad_to(p1.0, p1.1, p2.0, p2.1),
                    _ => pb.cubic_to(p1.0, p1.1, p2.0, p2.1, p3.0, p3.1),
                }
                end = Some(pts[n - 1]);
            }
        }
        // Turned text: text frame (tx, ty) maps to canvas (ox + ty, oy - tx).
        let (ox, oy) = (ox as f32, oy as f32);
        let tf = match turned(st) {
            true => Transform::from_row(0.0, -1.0, 1.0, 0.0, ox, oy),
            false => Transform::from_translate(ox, oy),
        };
        let (color, _) = rgb(&st.color());
        canvas.fill(pb.finish(), color, 1.0, tf);
    }
}

/// Text turned a quarter turn anticlockwise, reading bottom to top (axis
/// descriptions, labels along a vertical mark); plotters' half turn is
/// drawn level.
fn turned(st: &impl BackendTextStyle) -> bool {
    matches!(
        st.transform(),
        FontTransform::Rotate90 | FontTransform::Rotate270
    )
}

/// The canvas plotters draws on, and the font it writes with.
pub(crate) struct CanvasBackend<'a> {
    pub canvas: &'a mut Canvas,
    pub font: &'a TextFont,
}

fn rgb(c: &BackendColor) -> (Rgb, f64) {
    (Rgb(c.rgb.0, c.rgb.1, c.rgb.2), c.alpha)
}

/// The centre of pixel `p`: plotters addresses pixels, strokes run
/// through their centres.
fn centre(p: BackendCoord) -> (f64, f64) {
    (f64::from(p.0) + 0.5, f64::from(p.1) + 0.5)
}

impl<'a> CanvasBackend<'a> {
    pub fn new(canvas: &'a mut Canvas, font: &'a TextFont) -> Self {
        CanvasBackend { canvas, font }
    }
}

impl DrawingBackend for CanvasBackend<'_> {
    type ErrorType = Infallible;

    fn get_size(&self) -> (u32, u32) {
        (self.canvas.width(), self.canvas.height())
    }

    fn ensure_prepared(&mut self) -> Result<()> {
        Ok(())
    }

    fn present(&mut self) -> Result<()> {
        Ok(())
    }

    fn draw_pixel(&mut self, p: BackendCoord, color: BackendColor) -> Result<()> {
        let (c, a) = rgb(&color);
        let r = Rect::new(
            p.0.into(),
            p.1.into(),
            f64::from(p.0) + 1.0,
            f64::from(p.1) + 1.0,
        );
        self.canvas.fill(r.path(), c, a, Transform::identity());
        Ok(())
    }

    fn draw_line<S: BackendStyle>(
        &mut self,
        from: BackendCoord,
        to: BackendCoord,
        style: &S,
    ) -> Result<()> {
        self.draw_path([from, to], style)
    }

    fn draw_path<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        points: I,
        style: &S,
    ) -> Result<()> {
        let (c, a) = rgb(&style.color());
        let mut pts: Vec<(f64, f64)> = points.into_iter().map(centre).collect();
        let w = f64::from(style.stroke_width().max(1));
        // A one-pixel line along a pixel row or column stays crisp (grid,
        // frame, ticks); everything else is a smooth stroke.
        let crisp = w <= 1.0 && pts.len() == 2 && (pts[0].0 == pts[1].0 || pts[0].1 == pts[1].1);
        if pts.len() == 1 {
            // A lone point: a dot the stroke's width across.
            let dot = PathBuilder::from_circle(pts[0].0 as f32, pts[0].1 as f32, w as f32 / 2.0);
            self.canvas.fill(dot, c, a, Transform::identity());
            pts.clear();
        }
        self.canvas.stroke(path(&pts, false), w, crisp, c, a);
        Ok(())
    }

    fn draw_circle<S: BackendStyle>(
        &mut self,
        c: BackendCoord,
        radius: u32,
        style: &S,
        fill: bool,
    ) -> Result<()> {
        let (color, a) = rgb(&style.color());
        let (x, y) = centre(c);
        let ring = PathBuilder::from_circle(x as f32, y as f32, radius as f32);
        match fill {
            true => self.canvas.fill(ring, color, a, Transform::identity()),
            false => {
                (self.canvas).stroke(ring, style.stroke_width().max(1).into(), false, color, a)
            }
        }
        Ok(())
    }

    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        vert: I,
        style: &S,
    ) -> Result<()> {
        let (c, a) = rgb(&style.color());
        let poly: Vec<(f64, f64)> = vert.into_iter().map(centre).collect();
        self.canvas
            .fill(path(&poly, true), c, a, Transform::identity());
        Ok(())
    }

    fn draw_text<TStyle: BackendTextStyle>(
        &mut self,
        text: &str,
        style: &TStyle,
        pos: BackendCoord,
    ) -> Result<()> {
        let (x, y) = (f64::from(pos.0), f64::from(pos.1));
        self.font.draw(self.canvas, text, x, y, style);
        Ok(())
    }

    fn estimate_text_size<TStyle: BackendTextStyle>(
        &self,
        text: &str,
        style: &TStyle,
    ) -> Result<(u32, u32)> {
        let em = self.font.em_of_scale(style.size());
        let w = self.font.width(text, em).ceil() as u32;
        let h = self.font.line_height(em).ceil() as u32;
        Ok(match style.transform() {
            FontTransform::Rotate90 | FontTransform::Rotate270 => (h, w),
            _ => (w, h),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use plotters::prelude::{BLACK, IntoDrawingArea, IntoFont, Text};
    use plotters::style::text_anchor::Pos;

    /// Text drawn by plotters' own `Text` element comes through our font
    /// path: the letters of a word stay evenly spaced (plotters 0.3.7's
    /// path drops the left side bearing), and the size plotters is told
    /// (for label areas and legends) is the size drawn.
    #[test]
    fn plotters_text_keeps_side_bearings_and_its_size() {
        let font = TextFont::embedded().unwrap();
        let mut canvas = Canvas::new(500, 80, Rgb(255, 255, 255)).unwrap();
        let style = ("sans-serif", 30.0).into_font().color(&BLACK);
        let (w, _) = {
            let backend = CanvasBackend {
                canvas: &mut canvas,
                font: &font,
            };
            let root = backend.into_drawing_area();
            root.draw(&Text::new("continuous", (10, 10), style.clone()))
                .unwrap();
            root.estimate_text_size("continuous", &style).unwrap()
        };
        let cols: Vec<bool> = (0..500)
            .map(|x| (0..80).any(|y| canvas.at(x, y)[0] < 128))
            .collect();
        let first = cols.iter().position(|c| *c).unwrap();
        let last = cols.iter().rposition(|c| *c).unwrap();
        let em = font.em_of_scale(30.0);
        let widest_blank = (cols[first..=last].split(|c| *c))
            .map(<[bool]>::len)
            .max()
            .unwrap_or(0);
        assert!(
            (widest_blank as f64) < 0.3 * em,
            "blank run of {widest_blank} px inside the word at {em:.1} px per em"
        );
        let ink = (last + 1 - first) as f64;
        assert!(
            (ink - f64::from(w)).abs() < 0.2 * em,
            "ink {ink} px wide, plotters told {w} px"
        );
    }

    /// Even spacing within a word is checked through plotters in
    /// `backend`'s test; here kerning and the anchored box.
    #[test]
    fn kerning_anchors_and_rotation() {
        let font = TextFont::embedded().unwrap();
        // "AV" kerns tighter than the sum of its advances in DejaVu Sans.
        let pair = font.width("AV", 40.0);
        let apart = font.width("A", 40.0) + font.width("V", 40.0);
        assert!(pair < apart - 0.5, "AV {pair} vs A+V {apart}");
        let style = |em: f64, h, v| {
            let size = em / font.em_of_scale(1.0);
            (("sans-serif", size).into_font().color(&BLACK)).pos(Pos::new(h, v))
        };
        let st = style(20.0, HPos::Right, VPos::Center);
        let r = font.bounds("10k", 100.0, 50.0, &st);
        assert!((r.x1 - 100.0).abs() <= 1.0);
        assert!(((r.y0 + r.y1) / 2.0 - 50.0).abs() <= 1.0);
        let rot = style(20.0, HPos::Center, VPos::Top).transform(FontTransform::Rotate270);
        let r = font.bounds("gain (dB)", 30.0, 200.0, &rot);
        assert!(r.height() > r.x1 - r.x0, "rotated text is tall: {r:?}");
        assert!((r.x0 - 30.0).abs() <= 1.0);
        assert!(((r.y0 + r.y1) / 2.0 - 200.0).abs() <= 1.0);
    }
}
