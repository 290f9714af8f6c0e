//! Chart text, laid out with the embedded font's own metrics.
//!
//! plotters 0.3.7's pure-Rust text path drops each glyph's left side
//! bearing, which makes words fall apart ("con tinuous"). Every string on
//! our charts is therefore laid out here instead: the caret advances by
//! each glyph's advance width plus pair kerning, and each glyph outline is
//! rasterized at its true position (the outline carries the side bearing)
//! and blended into the canvas, level or turned a quarter turn (y-axis
//! descriptions).

use ab_glyph::{Font, FontRef, Glyph, PxScale, ScaleFont, point};

use super::canvas::{Canvas, Rect, Rgb};
use crate::error::PlotError;

/// DejaVu Sans, cut down to the characters charts need
/// (see `assets/fonts/make-subset.sh`).
pub(crate) static FONT_BYTES: &[u8] = include_bytes!("../../../assets/fonts/DejaVuSans-subset.ttf");

/// Anchors: which point of the text's line box (advance width by
/// ascent to descent) sits on the given position; plotters' own.
pub(crate) use plotters_backend::text_anchor::{HPos, VPos};

/// How a string is drawn: size is the em size in pixels.
#[derive(Clone, Copy)]
pub(crate) struct TextStyle {
    pub size: f64,
    pub color: Rgb,
    pub h: HPos,
    pub v: VPos,
    /// Turned a quarter turn anticlockwise, reading bottom to top.
    pub rotated: bool,
}

impl TextStyle {
    pub fn new(size: f64, color: Rgb) -> Self {
        TextStyle {
            size,
            color,
            h: HPos::Left,
            v: VPos::Top,
            rotated: false,
        }
    }

    pub fn anchor(mut self, h: HPos, v: VPos) -> Self {
        self.h = h;
        self.v = v;
        self
    }

    pub fn rotated(mut self) -> Self {
        self.rotated = true;
        self
    }
}

/// A string laid out on a baseline starting at x = 0, y = 0 (y down).
pub(crate) struct Layout {
    pub glyphs: Vec<Glyph>,
    /// Sum of advances and kerning: the logical width.
    pub width: f64,
    /// Distance from baseline up to the top of the line box (positive).
    pub ascent: f64,
    /// Distance from baseline down to the bottom of the line box (positive).
    pub descent: f64,
}

/// The chart font and text operations on it.
pub(crate) struct TextFont {
    font: FontRef<'static>,
    /// Converts an em size in pixels to ab_glyph's scale, which is the
    /// pixel height of ascent minus descent.
    em_to_scale: f32,
}

impl TextFont {
    /// The embedded font. Fails only if the bundled file is damaged.
    pub fn embedded() -> Result<Self, PlotError> {
        let font =
            FontRef::try_from_slice(FONT_BYTES).map_err(|e| PlotError::Font(e.to_string()))?;
        let upem = font
            .units_per_em()
            .ok_or_else(|| PlotError::Font("font has no units per em".into()))?;
        let em_to_scale = font.height_unscaled() / upem;
        Ok(TextFont { font, em_to_scale })
    }

    /// The em size whose ab_glyph scale (plotters' font size) is `scale`.
    pub fn em_of_scale(&self, scale: f64) -> f64 {
        scale / f64::from(self.em_to_scale)
    }

    fn scale(&self, size: f64) -> PxScale {
        PxScale::from((size.max(1.0) as f32) * self.em_to_scale)
    }

    /// Lay out one line: advances, side bearings (through the outlines)
    /// and pair kerning from the font's `kern` table. Control characters
    /// are skipped; characters missing from the font show the font's
    /// missing-glyph box.
    pub fn layout(&self, text: &str, size: f64) -> Layout {
        let scale = self.scale(size);
        let sf = self.font.as_scaled(scale);
        let mut caret = 0.0_f32;
        let mut prev = None;
        let mut glyphs = Vec::new();
        for ch in text.chars().filter(|c| !c.is_control()) {
            let id = sf.glyph_id(ch);
            if let Some(p) = prev {
                caret += sf.kern(p, id);
            }
            glyphs.push(id.with_scale_and_position(scale, point(caret, 0.0)));
            caret += sf.h_advance(id);
            prev = Some(id);
        }
        Layout {
            glyphs,
            width: f64::from(caret),
            ascent: f64::from(sf.ascent()),
            descent: f64::from(-sf.descent()),
        }
    }

    /// Logical width of `text` at `size`.
    pub fn width(&self, text: &str, size: f64) -> f64 {
        self.layout(text, size).width
    }

    /// Height of the line box at `size`.
    pub fn line_height(&self, size: f64) -> f64 {
        let sf = self.font.as_scaled(self.scale(size));
        f64::from(sf.ascent() - sf.descent())
    }

    /// Where the layout origin (caret start on the baseline) goes so that
    /// the anchor lands on `(x, y)`, rounded to whole pixels for crisp
    /// text; also the canvas rectangle of the line box.
    fn place(&self, layout: &Layout, x: f64, y: f64, st: &TextStyle) -> ((i64, i64), Rect) {
        let ax = match st.h {
            HPos::Left => 0.0,
            HPos::Center => layout.width / 2.0,
            HPos::Right => layout.width,
        };
        // Offset from the baseline, y down.
        let ay = match st.v {
            VPos::Top => -layout.ascent,
            VPos::Center => (layout.descent - layout.ascent) / 2.0,
            VPos::Bottom => layout.descent,
        };
        if st.rotated {
            // Text frame (tx, ty) maps to canvas (ox + ty, oy - tx).
            let ox = (x - ay).round();
            let oy = (y + ax).round();
            let r = Rect::new(
                ox - layout.ascent,
                oy - layout.width,
                ox + layout.descent,
                oy,
            );
            ((ox as i64, oy as i64), r)
        } else {
            let ox = (x - ax).round();
            let oy = (y - ay).round();
            let r = Rect::new(
                ox,
                oy - layout.ascent,
                ox + layout.width,
                oy + layout.descent,
            );
            ((ox as i64, oy as i64), r)
        }
    }

    /// The canvas rectangle `text` would occupy if drawn with `st` at
    /// `(x, y)`, without drawing it.
    pub fn bounds(&self, text: &str, x: f64, y: f64, st: &TextStyle) -> Rect {
        let layout = self.layout(text, st.size);
        self.place(&layout, x, y, st).1
    }

    /// Draw `text` anchored at `(x, y)`; returns its line-box rectangle.
    pub fn draw(&self, canvas: &mut Canvas, text: &str, x: f64, y: f64, st: &TextStyle) -> Rect {
        let layout = self.layout(text, st.size);
        let ((ox, oy), rect) = self.place(&layout, x, y, st);
        for og in (layout.glyphs.iter()).filter_map(|g| self.font.outline_glyph(g.clone())) {
            let b = og.px_bounds();
            og.draw(|gx, gy, c| {
                // Pixel in the text frame, from the caret start on the baseline.
                let tx = b.min.x as i64 + i64::from(gx);
                let ty = b.min.y as i64 + i64::from(gy);
                let (px, py) = match st.rotated {
                    true => (ox + ty, oy - tx - 1),
                    false => (ox + tx, oy + ty),
                };
                canvas.blend(px, py, st.color, c);
            });
        }
        rect
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn letters_in_a_word_are_evenly_spaced() {
        let font = TextFont::embedded().unwrap();
        for size in [14.0, 20.0, 22.0, 32.0] {
            let layout = font.layout("continuous", size);
            // Glyph ink boxes from the outlines, in layout order.
            let boxes: Vec<(f32, f32)> = layout
                .glyphs
                .iter()
                .map(|g| {
                    let og = font.font.outline_glyph(g.clone()).unwrap();
                    let b = og.px_bounds();
                    (b.min.x, b.max.x)
                })
                .collect();
            let gaps: Vec<f64> = boxes
                .windows(2)
                .map(|w| f64::from(w[1].0 - w[0].1))
                .collect();
            let max_gap = gaps.iter().cloned().fold(f64::MIN, f64::max);
            assert!(
                max_gap < 0.35 * size,
                "size {size}: gap {max_gap} px between letters of one word, gaps {gaps:?}"
            );
            // Overlap of the conservative pixel boxes by more than a
            // pixel would mean letters are drawn on top of each other.
            assert!(gaps.iter().all(|g| *g > -2.0), "size {size}: {gaps:?}");

            // The rendered pixels agree: no run of empty columns inside
            // the word is wider than 0.35 em.
            let w = (12.0 * size) as usize;
            let mut c = Canvas::new(w as u32, (3.0 * size) as u32, Rgb(255, 255, 255));
            font.draw(
                &mut c,
                "continuous",
                4.0,
                4.0,
                &TextStyle::new(size, Rgb(0, 0, 0)),
            );
            // Columns with ink darker than a quarter coverage.
            let cols: Vec<bool> = (0..w)
                .map(|x| (0..c.height() as usize).any(|y| c.pixels()[(y * w + x) * 3] < 191))
                .collect();
            let first = cols.iter().position(|c| *c).unwrap();
            let last = cols.iter().rposition(|c| *c).unwrap();
            let mut run = 0usize;
            let mut widest = 0usize;
            for c in &cols[first..=last] {
                run = if *c { 0 } else { run + 1 };
                widest = widest.max(run);
            }
            assert!(
                (widest as f64) < 0.35 * size,
                "size {size}: blank run of {widest} px inside the word"
            );
        }
    }

    #[test]
    fn kerning_is_applied() {
        let font = TextFont::embedded().unwrap();
        // "AV" kerns tighter than the sum of its advances in DejaVu Sans.
        let pair = font.width("AV", 40.0);
        let apart = font.width("A", 40.0) + font.width("V", 40.0);
        assert!(pair < apart - 0.5, "AV {pair} vs A+V {apart}");
    }

    #[test]
    fn anchors_and_rotation_place_the_box() {
        let font = TextFont::embedded().unwrap();
        let st = TextStyle::new(20.0, Rgb(0, 0, 0)).anchor(HPos::Right, VPos::Center);
        let r = font.bounds("10k", 100.0, 50.0, &st);
        assert!((r.x1 - 100.0).abs() <= 1.0);
        assert!(((r.y0 + r.y1) / 2.0 - 50.0).abs() <= 1.0);
        let rot = st.anchor(HPos::Center, VPos::Top).rotated();
        let r = font.bounds("gain (dB)", 30.0, 200.0, &rot);
        assert!(r.height() > r.x1 - r.x0, "rotated text is tall: {r:?}");
        assert!((r.x0 - 30.0).abs() <= 1.0);
        assert!(((r.y0 + r.y1) / 2.0 - 200.0).abs() <= 1.0);
    }

    #[test]
    fn drawing_marks_the_canvas_where_the_box_is() {
        let font = TextFont::embedded().unwrap();
        for rotated in [false, true] {
            let mut c = Canvas::new(200, 200, Rgb(255, 255, 255));
            let mut st = TextStyle::new(20.0, Rgb(0, 0, 0)).anchor(HPos::Center, VPos::Center);
            if rotated {
                st = st.rotated();
            }
            let r = font.draw(&mut c, "Hello", 100.0, 100.0, &st);
            let mut ink = (f64::MAX, f64::MAX, f64::MIN, f64::MIN);
            for y in 0..200usize {
                for x in 0..200usize {
                    if c.pixels()[(y * 200 + x) * 3] < 128 {
                        ink = (
                            ink.0.min(x as f64),
                            ink.1.min(y as f64),
                            ink.2.max(x as f64),
                            ink.3.max(y as f64),
                        );
                    }
                }
            }
            let grown = r.expand(2.0);
            assert!(
                ink.0 >= grown.x0 && ink.2 <= grown.x1 && ink.1 >= grown.y0 && ink.3 <= grown.y1,
                "rotated={rotated}: ink {ink:?} outside box {r:?}"
            );
        }
    }
}
