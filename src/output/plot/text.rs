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
    pub fn embedded() -> Result<Self, PlotError> {
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
    fn place(&self, text: &str, x: f64, y: f64, st: &TextStyle) -> (Vec<Glyph>, (i64, i64), Rect) {
        let (glyphs, width, ascent, descent) = self.layout(text, st.size);
        let ax = match st.h {
            HPos::Left => 0.0,
            HPos::Center => width / 2.0,
            HPos::Right => width,
        };
        // Offset from the baseline, y down.
        let ay = match st.v {
            VPos::Top => -ascent,
            VPos::Center => (descent - ascent) / 2.0,
            VPos::Bottom => descent,
        };
        // Turned text: text frame (tx, ty) maps to canvas (ox + ty, oy - tx).
        let (ox, oy) = match st.rotated {
            true => ((x - ay).round(), (y + ax).round()),
            false => ((x - ax).round(), (y - ay).round()),
        };
        let r = match st.rotated {
            true => Rect::new(ox - ascent, oy - width, ox + descent, oy),
            false => Rect::new(ox, oy - ascent, ox + width, oy + descent),
        };
        (glyphs, (ox as i64, oy as i64), r)
    }

    /// The canvas rectangle `text` would occupy if drawn with `st` at
    /// `(x, y)`, without drawing it.
    pub fn bounds(&self, text: &str, x: f64, y: f64, st: &TextStyle) -> Rect {
        self.place(text, x, y, st).2
    }

    /// Draw `text` anchored at `(x, y)`: each glyph outline rasterized at
    /// its true position and blended in.
    pub fn draw(&self, canvas: &mut Canvas, text: &str, x: f64, y: f64, st: &TextStyle) {
        let (glyphs, (ox, oy), _) = self.place(text, x, y, st);
        for og in glyphs
            .into_iter()
            .filter_map(|g| self.font.outline_glyph(g))
        {
            let b = og.px_bounds();
            og.draw(|gx, gy, c| {
                // Pixel in the text frame, from the caret start on the baseline.
                let (tx, ty) = (
                    b.min.x as i64 + i64::from(gx),
                    b.min.y as i64 + i64::from(gy),
                );
                let (px, py) = match st.rotated {
                    true => (ox + ty, oy - tx - 1),
                    false => (ox + tx, oy + ty),
                };
                canvas.blend(px, py, st.color, c);
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Even spacing within a word is checked through plotters in
    /// `backend`'s test; here kerning and the anchored box.
    #[test]
    fn kerning_anchors_and_rotation() {
        let font = TextFont::embedded().unwrap();
        // "AV" kerns tighter than the sum of its advances in DejaVu Sans.
        let pair = font.width("AV", 40.0);
        let apart = font.width("A", 40.0) + font.width("V", 40.0);
        assert!(pair < apart - 0.5, "AV {pair} vs A+V {apart}");
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
}
