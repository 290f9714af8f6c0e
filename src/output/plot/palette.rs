//! PNG encoding with a palette of at most 256 colours.
//!
//! A chart is a few flat colours (background, ink, the series' colours,
//! light fills) plus the anti-aliased blends along lines and glyphs, so
//! an 8-bit palette holds it with no visible change at about a fifth of
//! the size of 24-bit RGB. The palette is the most frequent colours
//! (popularity), so every flat colour is kept exactly; a rarer blend
//! takes its nearest palette colour. An image with at most 256 colours is
//! stored losslessly.

use std::collections::HashMap;

/// Most colours a PNG palette holds.
const PALETTE_MAX: usize = 256;

/// Encode `rgb` (rows top to bottom, three bytes per pixel) as an
/// indexed-colour PNG.
pub(crate) fn encode_indexed(width: u32, height: u32, rgb: &[u8]) -> Result<Vec<u8>, String> {
    let expected = width as usize * height as usize * 3;
    if rgb.len() != expected {
        return Err(format!(
            "pixel buffer holds {} bytes, a {width}x{height} RGB image needs {expected}",
            rgb.len()
        ));
    }
    let (palette, index) = quantize(rgb);
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, width, height);
        enc.set_color(png::ColorType::Indexed);
        enc.set_depth(png::BitDepth::Eight);
        enc.set_palette(palette.iter().flatten().copied().collect::<Vec<u8>>());
        enc.set_compression(png::Compression::Default);
        // Palette indices do not predict well from their neighbours;
        // unfiltered rows compress best here.
        enc.set_filter(png::FilterType::NoFilter);
        enc.set_adaptive_filter(png::AdaptiveFilterType::NonAdaptive);
        let mut w = enc.write_header().map_err(|e| e.to_string())?;
        w.write_image_data(&index).map_err(|e| e.to_string())?;
        w.finish().map_err(|e| e.to_string())?;
    }
    Ok(out)
}

/// The palette (most frequent colours first) and each pixel's index.
fn quantize(rgb: &[u8]) -> (Vec<[u8; 3]>, Vec<u8>) {
    // Charts are mostly runs of one colour: count each run with one
    // lookup rather than one per pixel.
    let mut counts: HashMap<[u8; 3], u64> = HashMap::new();
    let mut run: Option<([u8; 3], u64)> = None;
    for p in rgb.chunks_exact(3) {
        let c = [p[0], p[1], p[2]];
        match &mut run {
            Some((rc, n)) if *rc == c => *n += 1,
            _ => {
                if let Some((rc, n)) = run {
                    *counts.entry(rc).or_insert(0) += n;
                }
                run = Some((c, 1));
            }
        }
    }
    if let Some((rc, n)) = run {
        *counts.entry(rc).or_insert(0) += n;
    }
    let mut by_count: Vec<([u8; 3], u64)> = counts.into_iter().collect();
    // Ties broken by the colour itself, so the output is deterministic.
    by_count.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
    let palette: Vec<[u8; 3]> = by_count.iter().take(PALETTE_MAX).map(|c| c.0).collect();
    let mut lookup: HashMap<[u8; 3], u8> = palette
        .iter()
        .enumerate()
        .map(|(i, c)| (*c, i as u8))
        .collect();
    let mut last: Option<([u8; 3], u8)> = None;
    let index = rgb
        .chunks_exact(3)
        .map(|p| {
            let c = [p[0], p[1], p[2]];
            match last {
                Some((lc, i)) if lc == c => i,
                _ => {
                    let i = *lookup.entry(c).or_insert_with(|| nearest(&palette, c));
                    last = Some((c, i));
                    i
                }
            }
        })
        .collect();
    (palette, index)
}

/// Index of the palette colour nearest to `c` (squared RGB distance).
fn nearest(palette: &[[u8; 3]], c: [u8; 3]) -> u8 {
    let d = |p: &[u8; 3]| -> i32 {
        (0..3)
            .map(|k| {
                let e = i32::from(p[k]) - i32::from(c[k]);
                e * e
            })
            .sum()
    };
    palette
        .iter()
        .enumerate()
        .min_by_key(|(_, p)| d(p))
        .map_or(0, |(i, _)| i as u8)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn few_colours_are_stored_exactly() {
        // Three colours in a 4x2 image: the palette holds them all.
        let px: Vec<u8> = [[255, 255, 255], [0, 0, 0], [200, 30, 30], [0, 0, 0]]
            .iter()
            .cycle()
            .take(8)
            .flatten()
            .copied()
            .collect();
        let (palette, index) = quantize(&px);
        assert_eq!(palette.len(), 3);
        let back: Vec<u8> = index
            .iter()
            .flat_map(|&i| palette[usize::from(i)])
            .collect();
        assert_eq!(back, px);
    }

    #[test]
    fn a_rare_colour_takes_its_nearest() {
        // 256 frequent greys fill the palette; a rare near-white pixel maps
        // to white, not to some other grey.
        let mut px = Vec::new();
        for g in 0..=255u8 {
            for _ in 0..4 {
                px.extend([g, g, g]);
            }
        }
        px.extend([254, 255, 253]);
        let (palette, index) = quantize(&px);
        assert_eq!(palette.len(), 256);
        let last = palette[usize::from(*index.last().unwrap())];
        assert!(
            last == [255, 255, 255] || last == [254, 254, 254],
            "{last:?}"
        );
    }
}
