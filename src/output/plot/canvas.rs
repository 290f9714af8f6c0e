//! The drawing surface: a `tiny_skia` pixmap with an opaque background,
//! so its premultiplied RGBA is plain RGBA and the PNG drops the alpha.
//!
//! tiny-skia fills and strokes paths with anti-aliased edges (round caps
//! and joins for data lines, exact pixel edges for rectangles); what is
//! ours is only the rectangle arithmetic that label placement needs and
//! the ink count it scores spots by.

use tiny_skia::{FillRule, LineCap, LineJoin, Paint, Path, PathBuilder, Pixmap, Stroke, Transform};

/// An sRGB colour.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rgb(pub u8, pub u8, pub u8);

/// An axis-aligned rectangle in pixel coordinates (y grows downwards).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Rect {
    pub x0: f64,
    pub y0: f64,
    pub x1: f64,
    pub y1: f64,
}

impl Rect {
    pub fn new(x0: f64, y0: f64, x1: f64, y1: f64) -> Self {
        let (x0, x1, y0, y1) = (x0.min(x1), x0.max(x1), y0.min(y1), y0.max(y1));
        Rect { x0, y0, x1, y1 }
    }

    pub fn height(&self) -> f64 {
        self.y1 - self.y0
    }

    /// The rectangle grown by `d` on every side.
    pub fn expand(&self, d: f64) -> Rect {
        Rect::new(self.x0 - d, self.y0 - d, self.x1 + d, self.y1 + d)
    }

    /// Whether the two rectangles share any area.
    pub fn overlaps(&self, o: &Rect) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }

    /// Whether `o` lies wholly inside this rectangle.
    pub fn contains_rect(&self, o: &Rect) -> bool {
        o.x0 >= self.x0 && o.x1 <= self.x1 && o.y0 >= self.y0 && o.y1 <= self.y1
    }

    /// The rectangle as a closed path.
    pub fn path(&self) -> Option<Path> {
        let r = tiny_skia::Rect::from_ltrb(
            self.x0 as f32,
            self.y0 as f32,
            self.x1 as f32,
            self.y1 as f32,
        )?;
        Some(PathBuilder::from_rect(r))
    }
}

/// A polyline or polygon through `pts` (pixel coordinates); `None` when
/// a vertex is not finite or there is no segment.
pub(crate) fn path(pts: &[(f64, f64)], closed: bool) -> Option<Path> {
    let mut pb = PathBuilder::new();
    for (i, p) in pts.iter().enumerate() {
        if !(p.0.is_finite() && p.1.is_finite()) {
            return None;
        }
        match i {
            0 => pb.move_to(p.0 as f32, p.1 as f32),
            _ => pb.line_to(p.0 as f32, p.1 as f32),
        }
    }
    if closed {
        pb.close();
    }
    pb.finish()
}

/// The drawing surface.
pub(crate) struct Canvas {
    pub pixmap: Pixmap,
}

impl Canvas {
    /// A canvas filled with `bg`; `None` for a zero side (callers check
    /// sizes first).
    pub fn new(width: u32, height: u32, bg: Rgb) -> Option<Self> {
        let mut pixmap = Pixmap::new(width, height)?;
        pixmap.fill(tiny_skia::Color::from_rgba8(bg.0, bg.1, bg.2, 255));
        Some(Canvas { pixmap })
    }

    pub fn width(&self) -> u32 {
        self.pixmap.width()
    }

    pub fn height(&self) -> u32 {
        self.pixmap.height()
    }

    /// The whole canvas as a rectangle.
    pub fn bounds(&self) -> Rect {
        Rect::new(0.0, 0.0, f64::from(self.width()), f64::from(self.height()))
    }

    /// The pixels as RGB bytes, row after row (the background is opaque,
    /// so premultiplied colour is plain colour).
    pub fn rgb(&self) -> Vec<u8> {
        let px = self.pixmap.data().chunks_exact(4);
        px.flat_map(|p| [p[0], p[1], p[2]]).collect()
    }

    /// The RGB of pixel `(x, y)` (inside the canvas).
    pub fn at(&self, x: u32, y: u32) -> [u8; 3] {
        let i = (y as usize * self.width() as usize + x as usize) * 4;
        let p = &self.pixmap.data()[i..i + 3];
        [p[0], p[1], p[2]]
    }

    /// How many pixels inside `r` are darker than `luma` (0..255): a
    /// measure of how much is already drawn there.
    pub fn ink_in(&self, r: Rect, luma: u8) -> usize {
        let b = self.bounds();
        let (x0, x1) = (r.x0.max(b.x0).round(), r.x1.min(b.x1).round());
        let (y0, y1) = (r.y0.max(b.y0).round(), r.y1.min(b.y1).round());
        let mut n = 0;
        for y in (y0 as u32)..(y1.max(y0) as u32) {
            for x in (x0 as u32)..(x1.max(x0) as u32) {
                let [r, g, b] = self.at(x, y).map(u32::from);
                n += usize::from((r * 3 + g * 6 + b) / 10 < u32::from(luma));
            }
        }
        n
    }

    /// Fill `path` (mapped by `tf`) in `c` at opacity `alpha` (0..1).
    pub fn fill(&mut self, path: Option<Path>, c: Rgb, alpha: f64, tf: Transform) {
        if let Some(p) = path {
            let paint = paint(c, alpha);
            self.pixmap
                .fill_path(&p, &paint, FillRule::Winding, tf, None);
        }
    }

    /// Stroke `path` `width` pixels wide with round caps and joins, or
    /// square caps (a one-pixel line through pixel centres along a row or
    /// column then covers exactly its pixels).
    pub fn stroke(&mut self, path: Option<Path>, width: f64, square: bool, c: Rgb, alpha: f64) {
        let Some(p) = path else { return };
        let stroke = Stroke {
            width: width as f32,
            line_cap: if square {
                LineCap::Square
            } else {
                LineCap::Round
            },
            line_join: LineJoin::Round,
            ..Stroke::default()
        };
        let paint = paint(c, alpha);
        self.pixmap
            .stroke_path(&p, &paint, &stroke, Transform::identity(), None);
    }
}

fn paint(c: Rgb, alpha: f64) -> Paint<'static> {
    let a = (alpha.clamp(0.0, 1.0) * 255.0).round() as u8;
    let mut paint = Paint::default();
    paint.set_color_rgba8(c.0, c.1, c.2, a);
    paint
}

/// The part of segment `a`-`b` inside `r`, as parameters `(t0, t1)` along
/// it (Liang-Barsky), or `None` when it misses.
pub(crate) fn clip_segment(a: (f64, f64), b: (f64, f64), r: &Rect) -> Option<(f64, f64)> {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let mut t0: f64 = 0.0;
    let mut t1: f64 = 1.0;
    for (p, q) in [
        (-dx, a.0 - r.x0),
        (dx, r.x1 - a.0),
        (-dy, a.1 - r.y0),
        (dy, r.y1 - a.1),
    ] {
        if p == 0.0 {
            if q < 0.0 {
                return None;
            }
        } else {
            let t = q / p;
            if p < 0.0 {
                t0 = t0.max(t);
            } else {
                t1 = t1.min(t);
            }
        }
    }
    (t0 <= t1 && t0.is_finite() && t1.is_finite()).then_some((t0, t1))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn clip_keeps_inside_and_cuts_outside() {
        let r = Rect::new(0.0, 0.0, 10.0, 10.0);
        assert_eq!(clip_segment((1.0, 1.0), (2.0, 2.0), &r), Some((0.0, 1.0)));
        let (t0, t1) = clip_segment((-10.0, 5.0), (20.0, 5.0), &r).unwrap();
        assert!((t0 - 1.0 / 3.0).abs() < 1e-12 && (t1 - 2.0 / 3.0).abs() < 1e-12);
        assert_eq!(clip_segment((-5.0, -5.0), (-1.0, 20.0), &r), None);
    }

    /// A one-pixel line through pixel centres covers exactly its row.
    #[test]
    fn square_capped_hairline_is_crisp() {
        let mut c = Canvas::new(20, 20, Rgb(255, 255, 255)).unwrap();
        let line = path(&[(2.5, 5.5), (12.5, 5.5)], false);
        c.stroke(line, 1.0, true, Rgb(0, 0, 0), 1.0);
        assert_eq!(c.at(5, 5), [0, 0, 0]);
        assert_eq!(c.at(2, 5), [0, 0, 0]);
        assert_eq!(c.at(5, 4), [255, 255, 255]);
        assert_eq!(c.at(13, 5), [255, 255, 255]);
    }
}
