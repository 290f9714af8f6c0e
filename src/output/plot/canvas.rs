//! An RGB pixel buffer with anti-aliased shape filling.
//!
//! Shapes are filled through `ab_glyph`'s outline rasterizer: a set of
//! polygons is handed over as if it were one glyph outline, and the
//! coverage it reports per pixel is blended into the buffer. This gives
//! smooth data lines and markers without any extra dependency, and the
//! same coverage model as the text, so everything on a chart looks alike.

use ab_glyph::{GlyphId, Outline, OutlineCurve, OutlinedGlyph, PxScale, PxScaleFactor, point};

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

    /// The corners, as a polygon.
    pub fn poly(&self) -> Poly {
        vec![
            (self.x0, self.y0),
            (self.x1, self.y0),
            (self.x1, self.y1),
            (self.x0, self.y1),
        ]
    }

    /// The common part, if any.
    pub fn intersect(&self, o: &Rect) -> Option<Rect> {
        let r = Rect::new(
            self.x0.max(o.x0),
            self.y0.max(o.y0),
            self.x1.min(o.x1),
            self.y1.min(o.y1),
        );
        self.overlaps(o).then_some(r)
    }
}

/// A closed polygon in pixel coordinates.
pub(crate) type Poly = Vec<(f64, f64)>;

/// The drawing surface: 8-bit RGB, row-major, no alpha channel.
pub(crate) struct Canvas {
    pub width: u32,
    pub height: u32,
    /// The RGB bytes, row after row.
    pub px: Vec<u8>,
}

impl Canvas {
    /// A canvas filled with `bg`.
    pub fn new(width: u32, height: u32, bg: Rgb) -> Self {
        let px = [bg.0, bg.1, bg.2].repeat(width as usize * height as usize);
        Canvas { width, height, px }
    }

    /// The whole canvas as a rectangle.
    pub fn bounds(&self) -> Rect {
        Rect::new(0.0, 0.0, f64::from(self.width), f64::from(self.height))
    }

    /// Mix `c` into pixel `(x, y)` with opacity `a` (0..1); outside pixels
    /// are ignored.
    pub fn blend(&mut self, x: i64, y: i64, c: Rgb, a: f32) {
        if x < 0 || y < 0 || x >= i64::from(self.width) || y >= i64::from(self.height) {
            return;
        }
        let (a, i) = (
            a.clamp(0.0, 1.0),
            (y as usize * self.width as usize + x as usize) * 3,
        );
        for (d, s) in self.px[i..i + 3].iter_mut().zip([c.0, c.1, c.2]) {
            let v = f32::from(*d) + (f32::from(s) - f32::from(*d)) * a;
            *d = v.round().clamp(0.0, 255.0) as u8;
        }
    }

    /// How many pixels inside `r` are darker than `luma` (0..255): a
    /// measure of how much is already drawn there.
    pub fn ink_in(&self, r: Rect, luma: u8) -> usize {
        let Some(r) = r.intersect(&self.bounds()) else {
            return 0;
        };
        let mut n = 0;
        for y in r.y0.round() as usize..r.y1.round() as usize {
            for x in r.x0.round() as usize..r.x1.round() as usize {
                let p = &self.px[(y * self.width as usize + x) * 3..][..3];
                let l = (u32::from(p[0]) * 3 + u32::from(p[1]) * 6 + u32::from(p[2])) / 10;
                n += usize::from(l < u32::from(luma));
            }
        }
        n
    }

    /// Fill the union of `polys` with anti-aliased edges, touching only
    /// pixels inside `clip`. Polygons with non-finite vertices are skipped.
    /// Callers keep geometry near `clip` (see [`clip_segment`]) so the
    /// rasterizer's scratch buffer stays small.
    pub fn fill_polys(&mut self, polys: &[Poly], c: Rgb, alpha: f32, clip: Rect) {
        let Some(clip) = clip.intersect(&self.bounds()) else {
            return;
        };
        let (mut curves, mut lo, mut hi) = (
            Vec::new(),
            point(f32::MAX, f32::MAX),
            point(f32::MIN, f32::MIN),
        );
        for poly in polys {
            if poly.len() < 3 || poly.iter().any(|p| !p.0.is_finite() || !p.1.is_finite()) {
                continue;
            }
            // Every polygon gets the same winding so that overlaps add
            // up (and are clamped) instead of cancelling into holes.
            let turn: f64 = (poly.iter().zip(poly.iter().cycle().skip(1)))
                .map(|(a, b)| a.0 * b.1 - b.0 * a.1)
                .sum();
            let pts: Vec<_> = poly
                .iter()
                .map(|p| point(p.0 as f32, -p.1 as f32))
                .collect();
            for (i, p) in pts.iter().enumerate() {
                let q = pts[(i + 1) % pts.len()];
                curves.push(match turn < 0.0 {
                    true => OutlineCurve::Line(q, *p),
                    false => OutlineCurve::Line(*p, q),
                });
                (lo, hi) = (
                    point(lo.x.min(p.x), lo.y.min(p.y)),
                    point(hi.x.max(p.x), hi.y.max(p.y)),
                );
            }
        }
        // Refuse absurd scratch sizes rather than allocate gigabytes.
        let area = f64::from(hi.x - lo.x + 2.0) * f64::from(hi.y - lo.y + 2.0);
        if curves.is_empty() || area > 4.0 * f64::from(self.width) * f64::from(self.height) + 1e6 {
            return;
        }
        // Outline y runs up: the box is from (min x, max y) to (max x, min y).
        let bounds = ab_glyph::Rect {
            min: point(lo.x, hi.y),
            max: point(hi.x, lo.y),
        };
        let glyph = GlyphId(0).with_scale_and_position(PxScale::from(1.0), point(0.0, 0.0));
        let one = PxScaleFactor {
            horizontal: 1.0,
            vertical: 1.0,
        };
        let og = OutlinedGlyph::new(glyph, Outline { bounds, curves }, one);
        let b = og.px_bounds();
        let (ox, oy) = (b.min.x as i64, b.min.y as i64);
        let (cx0, cy0) = (clip.x0.round() as i64, clip.y0.round() as i64);
        let (cx1, cy1) = (clip.x1.round() as i64, clip.y1.round() as i64);
        og.draw(|x, y, cov| {
            let (px, py) = (ox + i64::from(x), oy + i64::from(y));
            if px >= cx0 && px < cx1 && py >= cy0 && py < cy1 && cov > 0.002 {
                self.blend(px, py, c, cov.min(1.0) * alpha);
            }
        });
    }
}

/// A regular polygon approximating a circle of radius `r` about `(cx, cy)`.
pub(crate) fn circle(cx: f64, cy: f64, r: f64) -> Poly {
    let n = ((r * 4.0).ceil() as usize).clamp(8, 48);
    (0..n)
        .map(|i| {
            let t = std::f64::consts::TAU * i as f64 / n as f64;
            (cx + r * t.cos(), cy + r * t.sin())
        })
        .collect()
}

/// The outline of a straight stroke of width `w` from `a` to `b` with
/// round caps, as a rectangle plus two end discs.
pub(crate) fn capsule(a: (f64, f64), b: (f64, f64), w: f64, out: &mut Vec<Poly>) {
    let r = w / 2.0;
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let len = dx.hypot(dy);
    if len > 1e-9 {
        let (nx, ny) = (-dy / len * r, dx / len * r);
        out.push(vec![
            (a.0 + nx, a.1 + ny),
            (b.0 + nx, b.1 + ny),
            (b.0 - nx, b.1 - ny),
            (a.0 - nx, a.1 - ny),
        ]);
    }
    out.push(circle(a.0, a.1, r));
    if len > 1e-9 {
        out.push(circle(b.0, b.1, r));
    }
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

    #[test]
    fn filled_square_is_covered_and_clipped() {
        let mut c = Canvas::new(20, 20, Rgb(255, 255, 255));
        let sq = vec![(2.0, 2.0), (12.0, 2.0), (12.0, 12.0), (2.0, 12.0)];
        c.fill_polys(&[sq], Rgb(0, 0, 0), 1.0, Rect::new(0.0, 0.0, 8.0, 20.0));
        let at = |x: usize, y: usize| c.px[(y * 20 + x) * 3];
        assert_eq!(at(5, 5), 0);
        assert_eq!(at(10, 5), 255, "outside the clip");
        assert_eq!(at(15, 15), 255);
    }
}
