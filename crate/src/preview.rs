//! 8-bit RGBA views for display: the image itself, the residual, and a cut map. The page paints
//! these; export always uses the full-depth encoder instead. Large images get views shrunk by a
//! whole factor so that a pane never holds more than about four megapixels per view.

use crate::planes::{Alpha, Image, Plane};

/// Views hold at most this many pixels (2048 x 2048).
pub const MAX_VIEW_PIXELS: usize = 2048 * 2048;

/// The whole factor by which views of a `width` x `height` image are shrunk (1 = full size).
pub fn factor(width: usize, height: usize) -> usize {
    let mut f = 1;
    while width.div_ceil(f) * height.div_ceil(f) > MAX_VIEW_PIXELS {
        f += 1;
    }
    f
}

/// Size of a view shrunk by `f`.
pub fn view_size(width: usize, height: usize, f: usize) -> (usize, usize) {
    (width.div_ceil(f), height.div_ceil(f))
}

/// RGBA of an image whose pixel i has the value `px(i)` (0..255 per component). With f > 1 each
/// view pixel is the mean of its f x f block (`mean`) or the block's centre pixel (not `mean`:
/// keeps the grain of a residual visible instead of averaging it away).
fn shrink(width: usize, height: usize, f: usize, mean: bool, px: impl Fn(usize) -> [f32; 4]) -> Vec<u8> {
    let (vw, vh) = view_size(width, height, f);
    let mut out = Vec::with_capacity(vw * vh * 4);
    let to8 = |v: f32| v.round().clamp(0.0, 255.0) as u8;
    for vy in 0..vh {
        for vx in 0..vw {
            let (x0, y0) = (vx * f, vy * f);
            let (x1, y1) = ((x0 + f).min(width), (y0 + f).min(height));
            let v = if f == 1 || !mean {
                px(((y0 + y1) / 2) * width + (x0 + x1) / 2)
            } else {
                let mut acc = [0.0f32; 4];
                for y in y0..y1 {
                    for x in x0..x1 {
                        let p = px(y * width + x);
                        for c in 0..4 {
                            acc[c] += p[c];
                        }
                    }
                }
                let n = ((x1 - x0) * (y1 - y0)) as f32;
                acc.map(|a| a / n)
            };
            out.extend(v.map(to8));
        }
    }
    out
}

/// RGBA bytes of an image scaled to 8 bits (grey repeated in R, G, B; alpha kept, or opaque).
pub fn rgba8(img: &Image, f: usize) -> Vec<u8> {
    let scale = 255.0 / img.max_value();
    shrink(img.width, img.height, f, true, |i| {
        let v = |c: usize| img.channels[c].data[i] * scale;
        let (r, g, b) = if img.channels.len() == 3 { (v(0), v(1), v(2)) } else { (v(0), v(0), v(0)) };
        let a = match &img.alpha {
            None => 255.0,
            Some(Alpha::Eight(a)) => f32::from(a[i]),
            Some(Alpha::Sixteen(a)) => f32::from(a[i]) / 257.0,
        };
        [r, g, b, a]
    })
}

/// The residual noisy - result, averaged over channels, drawn as grey around 128 with +-3 sigma
/// spanning the full range: noise looks like even grain, removed structure shows as outlines.
pub fn residual_rgba8(noisy: &Image, result: &Image, sigma: f64, f: usize) -> Vec<u8> {
    let n = noisy.channels.len() as f32;
    let span = if sigma > 0.0 { (3.0 * sigma) as f32 } else { noisy.max_value() / 32.0 };
    shrink(noisy.width, noisy.height, f, false, |i| {
        let r: f32 = noisy.channels.iter().zip(&result.channels).map(|(a, b)| a.data[i] - b.data[i]).sum::<f32>() / n;
        let v = 128.0 + 127.0 * r / span;
        [v, v, v, 255.0]
    })
}

/// The result in dimmed grey with red where `map` (local correlations) is above `flag`, the
/// stronger the redder.
pub fn flagged_rgba8(result: &Image, map: &Plane, flag: f32, f: usize) -> Vec<u8> {
    let scale = 255.0 / result.max_value() / result.channels.len() as f32;
    shrink(result.width, result.height, f, true, |i| {
        let g = 0.6 * scale * result.channels.iter().map(|c| c.data[i]).sum::<f32>();
        let m = map.data[i];
        if m > flag {
            let t = ((m - flag) / (1.0 - flag)).clamp(0.0, 1.0);
            [g + (255.0 - g) * (0.6 + 0.4 * t), g * (0.4 - 0.4 * t), g * (0.4 - 0.4 * t), 255.0]
        } else {
            [g, g, g, 255.0]
        }
    })
}

/// A plane of values in [0, 1] (the cut fraction) drawn dark-to-light.
pub fn unit_plane_rgba8(p: &Plane, f: usize) -> Vec<u8> {
    shrink(p.width, p.height, f, true, |i| {
        let g = p.data[i] * 255.0;
        [g, g, g, 255.0]
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::planes::BitDepth;

    #[test]
    fn views_stay_under_the_cap_and_blocks_are_averaged() {
        // Closed forms: 24 MP (6000 x 4000) needs factor 3 (2000 x 1334 = 2.67 MP; factor 2 gives
        // 6 MP), 8000 x 8000 needs 4 (2000 x 2000); small images stay whole.
        assert_eq!(factor(6000, 4000), 3);
        assert_eq!(factor(8000, 8000), 4);
        assert_eq!(factor(2048, 2048), 1);
        // A 2 x 2 block of 0, 255, 255, 255 averages to 191.25 -> 191.
        let p = Plane { width: 2, height: 2, data: vec![0.0, 1.0, 1.0, 1.0] };
        assert_eq!(unit_plane_rgba8(&p, 2), vec![191, 191, 191, 255]);
        let img = Image { width: 2, height: 2, depth: BitDepth::Eight, channels: vec![p.clone()], alpha: None };
        assert_eq!(rgba8(&img, 1).len(), 16);
    }
}
