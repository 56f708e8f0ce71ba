//! 8-bit RGBA views for display: the image itself, the residual, and a cut map. The page paints
//! these; export always uses the full-depth encoder instead.

use crate::planes::{Alpha, Image, Plane};

/// RGBA bytes of an image scaled to 8 bits (grey repeated in R, G, B; alpha kept, or opaque).
pub fn rgba8(img: &Image) -> Vec<u8> {
    let scale = 255.0 / img.max_value();
    let px = img.width * img.height;
    let mut out = Vec::with_capacity(px * 4);
    for i in 0..px {
        let v = |c: usize| (img.channels[c].data[i] * scale).round().clamp(0.0, 255.0) as u8;
        let (r, g, b) = if img.channels.len() == 3 { (v(0), v(1), v(2)) } else { (v(0), v(0), v(0)) };
        let a = match &img.alpha {
            None => 255,
            Some(Alpha::Eight(a)) => a[i],
            Some(Alpha::Sixteen(a)) => (a[i] >> 8) as u8,
        };
        out.extend_from_slice(&[r, g, b, a]);
    }
    out
}

/// The residual noisy - result, averaged over channels, drawn as grey around 128 with +-3 sigma
/// spanning the full range: noise looks like even grain, removed structure shows as outlines.
pub fn residual_rgba8(noisy: &Image, result: &Image, sigma: f64) -> Vec<u8> {
    let px = noisy.width * noisy.height;
    let n = noisy.channels.len() as f32;
    let span = if sigma > 0.0 { (3.0 * sigma) as f32 } else { noisy.max_value() / 32.0 };
    let mut out = Vec::with_capacity(px * 4);
    for i in 0..px {
        let r: f32 = noisy.channels.iter().zip(&result.channels).map(|(a, b)| a.data[i] - b.data[i]).sum::<f32>() / n;
        let v = (128.0 + 127.0 * r / span).round().clamp(0.0, 255.0) as u8;
        out.extend_from_slice(&[v, v, v, 255]);
    }
    out
}

/// A plane of values in [0, 1] (the cut fraction) drawn dark-to-light.
pub fn unit_plane_rgba8(p: &Plane) -> Vec<u8> {
    let mut out = Vec::with_capacity(p.len() * 4);
    for v in &p.data {
        let g = (v * 255.0).round().clamp(0.0, 255.0) as u8;
        out.extend_from_slice(&[g, g, g, 255]);
    }
    out
}
