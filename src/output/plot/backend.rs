//! plotters' `DrawingBackend` over our anti-aliased canvas.
//!
//! plotters (chart builder, mesh, series, legends) decides what goes
//! where; this backend decides how it looks: strokes and fills go through
//! the canvas' outline rasterizer (smooth edges), and text is laid out by
//! `text` with each glyph's side bearing and pair kerning, which plotters
//! 0.3.7's own text path drops. Font sizes are plotters' (the pixel
//! height from ascent to descent); plotters sizes label areas through
//! `estimate_text_size` here. Circles are smooth outlines too;
//! rectangles keep plotters' default rasterizer, which draws them through
//! `draw_line` here (crisp rows and edges).

use std::convert::Infallible;

use plotters_backend::{
    BackendColor, BackendCoord, BackendStyle, BackendTextStyle, DrawingBackend, DrawingErrorKind,
    FontTransform,
};

use super::canvas::{Canvas, Rgb, capsule, circle};
use super::text::{TextFont, TextStyle};

type Result<T> = std::result::Result<T, DrawingErrorKind<Infallible>>;

/// The canvas plotters draws on, and the font it writes with.
pub(crate) struct CanvasBackend<'a> {
    pub canvas: &'a mut Canvas,
    pub font: &'a TextFont,
}

fn rgb(c: &BackendColor) -> (Rgb, f32) {
    (Rgb(c.rgb.0, c.rgb.1, c.rgb.2), c.alpha as f32)
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

    fn text_style(&self, style: &impl BackendTextStyle) -> TextStyle {
        let (color, _) = rgb(&style.color());
        let a = style.anchor();
        let st =
            TextStyle::new(self.font.em_of_scale(style.size()), color).anchor(a.h_pos, a.v_pos);
        match style.transform() {
            FontTransform::None | FontTransform::Rotate180 => st,
            // Axis descriptions read bottom to top.
            FontTransform::Rotate90 | FontTransform::Rotate270 => st.rotated(),
        }
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
        self.canvas.blend(i64::from(p.0), i64::from(p.1), c, a);
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
        path: I,
        style: &S,
    ) -> Result<()> {
        let (c, a) = rgb(&style.color());
        let pts: Vec<(f64, f64)> = path.into_iter().map(centre).collect();
        let w = f64::from(style.stroke_width().max(1));
        // A one-pixel line along a pixel row or column stays crisp (grid,
        // frame, ticks); everything else is a smooth stroke.
        if w <= 1.0 && pts.len() == 2 && (pts[0].0 == pts[1].0 || pts[0].1 == pts[1].1) {
            let (p, q) = (pts[0], pts[1]);
            let r = super::canvas::Rect::new(
                p.0.min(q.0) - 0.5,
                p.1.min(q.1) - 0.5,
                p.0.max(q.0) + 0.5,
                p.1.max(q.1) + 0.5,
            );
            self.canvas.fill_rect(r, c, a);
            return Ok(());
        }
        let mut polys = Vec::new();
        for seg in pts.windows(2) {
            capsule(seg[0], seg[1], w, &mut polys);
        }
        if pts.len() == 1 {
            polys.push(circle(pts[0].0, pts[0].1, w / 2.0));
        }
        let clip = self.canvas.bounds();
        self.canvas.fill_polys(&polys, c, a, clip);
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
        let ring = circle(x, y, f64::from(radius));
        let mut polys = Vec::new();
        let w = f64::from(style.stroke_width().max(1));
        for (i, p) in ring.iter().enumerate().filter(|_| !fill) {
            capsule(*p, ring[(i + 1) % ring.len()], w, &mut polys);
        }
        if fill {
            polys.push(ring);
        }
        let clip = self.canvas.bounds();
        self.canvas.fill_polys(&polys, color, a, clip);
        Ok(())
    }

    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        vert: I,
        style: &S,
    ) -> Result<()> {
        let (c, a) = rgb(&style.color());
        let poly: Vec<(f64, f64)> = vert.into_iter().map(centre).collect();
        let clip = self.canvas.bounds();
        self.canvas.fill_polys(&[poly], c, a, clip);
        Ok(())
    }

    fn draw_text<TStyle: BackendTextStyle>(
        &mut self,
        text: &str,
        style: &TStyle,
        pos: BackendCoord,
    ) -> Result<()> {
        let st = self.text_style(style);
        let (x, y) = (f64::from(pos.0), f64::from(pos.1));
        self.font.draw(self.canvas, text, x, y, &st);
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
    use plotters::prelude::*;

    /// Text drawn by plotters' own `Text` element comes through our font
    /// path: the letters of a word stay evenly spaced (plotters 0.3.7's
    /// path drops the left side bearing), and the size plotters is told
    /// (for label areas and legends) is the size drawn.
    #[test]
    fn plotters_text_keeps_side_bearings_and_its_size() {
        let font = TextFont::embedded().unwrap();
        let mut canvas = Canvas::new(500, 80, Rgb(255, 255, 255));
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
            .map(|x| (0..80).any(|y| canvas.pixels()[(y * 500 + x) * 3] < 128))
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
}
