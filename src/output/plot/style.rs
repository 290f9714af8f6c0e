//! Colours, dash patterns and marker shapes.
//!
//! Each palette entry differs from its neighbours in hue, lightness, dash
//! and marker shape, so series stay apart printed in greyscale or seen
//! with a colour-vision deficiency. The hues are muted so that hatching,
//! bands and labels stay readable on top.

use super::canvas::Rgb;

/// A marker shape drawn at data points.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Marker {
    Circle,
    Square,
    TriangleUp,
    Diamond,
    Cross,
    TriangleDown,
    Plus,
    Hexagon,
}

/// One palette entry.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Pen {
    pub color: Rgb,
    /// Visible and gap lengths of the dash, in line widths, as they should
    /// look (round caps included); `None` = solid.
    pub dash: Option<(f64, f64)>,
    pub marker: Marker,
}

/// Number of distinct series styles before the palette repeats.
pub const PALETTE_LEN: usize = 8;

const fn pen(color: Rgb, dash: Option<(f64, f64)>, marker: Marker) -> Pen {
    Pen {
        color,
        dash,
        marker,
    }
}

// Our own order: teal first, then raspberry and olive, so that no
// neighbouring pair shares lightness, dash and marker.
const PENS: [Pen; PALETTE_LEN] = [
    pen(Rgb(0x17, 0x85, 0x7b), None, Marker::Circle), // teal
    pen(Rgb(0xb2, 0x3a, 0x6d), Some((5.0, 2.5)), Marker::Square), // raspberry
    pen(Rgb(0x80, 0x84, 0x1c), Some((9.0, 3.5)), Marker::TriangleUp), // olive
    pen(Rgb(0x1d, 0x4f, 0x91), Some((1.0, 2.0)), Marker::Diamond), // deep blue
    pen(Rgb(0x4a, 0x4a, 0x4a), Some((14.0, 4.0)), Marker::Cross), // charcoal
    pen(
        Rgb(0xd4, 0x6f, 0x12),
        Some((2.5, 2.5)),
        Marker::TriangleDown,
    ), // burnt orange
    pen(Rgb(0x7b, 0x4d, 0xa6), Some((1.0, 4.0)), Marker::Plus), // violet
    pen(Rgb(0x3f, 0x97, 0xd0), Some((20.0, 3.0)), Marker::Hexagon), // sky blue
];

/// The pen for palette index `i` (wrapping).
pub(crate) fn pen_of(i: usize) -> Pen {
    PENS[i % PALETTE_LEN]
}

/// Page and text colours.
pub(crate) const BACKGROUND: Rgb = Rgb(255, 255, 255);
pub(crate) const TEXT: Rgb = Rgb(0x22, 0x25, 0x2a);
pub(crate) const TEXT_SOFT: Rgb = Rgb(0x55, 0x5a, 0x62);
pub(crate) const FRAME: Rgb = Rgb(0x7c, 0x82, 0x8a);
pub(crate) const GRID: Rgb = Rgb(0xdf, 0xe3, 0xe8);
pub(crate) const GRID_MINOR: Rgb = Rgb(0xef, 0xf1, 0xf4);
/// Spec limits and their infeasible side.
pub(crate) const LIMIT: Rgb = Rgb(0xb0, 0x2e, 0x36);
/// Vertical markers and annotation pointers.
pub(crate) const MARK: Rgb = Rgb(0x2b, 0x2f, 0x36);
/// Shaded x interval (e.g. a feasible window).
pub(crate) const XBAND: Rgb = Rgb(0x3c, 0xa0, 0x6a);
/// Shaded y interval (e.g. a settling band).
pub(crate) const YBAND: Rgb = Rgb(0x5a, 0x7d, 0xb0);
