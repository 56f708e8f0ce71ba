//! The noise power spectrum as the patch-graph method sees it: the variance of each coefficient of
//! the k x k 2-D DCT, measured over the flattest blocks of the image (in the spirit of M. Colom,
//! M. Lebrun, A. Buades and J.-M. Morel, "Nonparametric multiscale blind estimation of intensity-
//! frequency-dependent noise", IEEE TIP 2015, and its ICIP 2014 precursor). White noise gives the
//! same variance everywhere; demosaicing and compression concentrate it at low frequencies.
//!
//! Flat blocks are chosen by the activity of a blurred copy over a window three blocks wide around
//! each block (the blur removes most white noise, and the block's own noise is a ninth of the
//! window, so activity there is signal, not the block's noise), taking every block within
//! sixteen times the calmest activity. Choosing by the block's own values would pick the blocks whose noise
//! happens to be small and bias the estimate low (measured: a third low at low frequencies for
//! correlated noise). Blocks are placed at a stride that is not a multiple of 8, so that
//! compression's 8 x 8 grid is seen at every phase, as patches see it.

use crate::patch::transform::{dct2, dct_matrix};
use crate::planes::{gaussian_blur, Plane};
use serde::{Deserialize, Serialize};

/// The noise's power per coefficient of a k x k DCT: white noise has them all equal.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct NoiseSpectrum {
    /// Block side: the spectrum has k x k entries, row-major (vertical frequency first).
    pub k: usize,
    /// Noise variance of each DCT coefficient, in squared grey levels of the plane.
    pub variances: Vec<f64>,
    /// Blocks the estimate rests on.
    pub blocks: usize,
    /// The low/high ring ratio of the per-coefficient medians: texture left in a minority of the
    /// flat blocks moves means but hardly medians, so both must show correlation.
    pub median_ratio: f64,
    /// The level was lowered to what the colour planes' noise or the plane's own fine grain allows
    /// (a spectrum far above either holds texture read as noise), so its shape is likely texture's
    /// too.
    #[serde(default)]
    pub texture_suspected: bool,
}

/// A spectrum whose low-frequency ring is this many times its high-frequency ring is treated as
/// coloured; below, as white. Measured (medians of the rings): white noise on the development
/// set's images up to 3.2 (the fine texture of a 2x-reduced photograph at sigma 10), camera
/// pipelines with demosaicing and JPEG 20 to 660; mild correlation below 6 is filtered as white.
pub const COLOURED_RATIO: f64 = 6.0;
/// Blocks whose blurred activity is within this factor of the calm tenth are counted as flat.
/// Generous, because correlated noise survives the blur and a tight limit keeps only its calm
/// blocks (measured on the camera JPEGs: 4 read levels 20% low, 16 within 8%); the per-frequency
/// medians and the ring-ratio threshold keep texture from passing for correlation.
const FLAT_FACTOR: f64 = 16.0;
/// A flat block whose energy relative to the spectrum is more than this many times the median
/// block's holds texture (see [`consistent_blocks`]). Far beyond noise's own spread (1 + 3 x 0.18
/// would do for stationary noise) because a JPEG's noise is not stationary: quantisation strips
/// it from the flattest blocks and leaves it in busier ones. Measured (blind, patch-graph), with
/// the spectrum of the test at first a mean: on white noise through a 3 x 3 binomial (std 8 and
/// 20; six images, colour and grey) the mean PSNR rose by 0.17 to 0.21 dB for limits from 1.5 to
/// 5.5, while on the camera JPEGs of the real-noise set a limit of 1.5 cost 0.26 dB in the mean,
/// 2.8 cost 0.05, 5.5 cost 0.01. With the median spectrum and 5.5: +0.20 and -0.01 (at most
/// -0.05 on one JPEG); camera at std 8 +1.3 dB, its level 8.1 instead of 13.2.
const TEXTURE_ENERGY: f64 = 5.5;
/// Flat blocks whose AC energy lies mostly (median share above this) in the two first-order
/// coefficients hold gradients, not noise: a plane a x + b y puts nearly all of a block's AC
/// energy there (closed form: 98.8% for a ramp along one axis, the rest in (0,3), (0,5), (0,7)).
/// Then no spectrum is measured (white). Measured medians: a 16-bit ramp of 100 grey levels per
/// pixel with white noise of std 20-60 0.96 (read as grainy noise of level 327 before); every camera
/// JPEG of the bench 0.09-0.51; white noise 0.02; noise upsampled 3x 0.27-0.29, 4x 0.44, through a
/// 5 x 5 binomial 0.22, Gaussian-blurred noise of std 2 / 3 / 4 0.52 / 0.72 / 0.82.
const GRADIENT_SHARE: f64 = 0.9;
/// At most this many blocks are transformed (a regular subset on large images).
const MAX_BLOCKS: usize = 40_000;

impl NoiseSpectrum {
    /// White noise of `variance` in every coefficient.
    pub fn white(k: usize, variance: f64) -> Self {
        NoiseSpectrum { k, variances: vec![variance; k * k], blocks: 0, median_ratio: 1.0, texture_suspected: false }
    }

    /// The pixel-domain variance (Parseval: the mean over an orthonormal transform's coefficients).
    pub fn pixel_variance(&self) -> f64 {
        self.variances.iter().sum::<f64>() / self.variances.len().max(1) as f64
    }

    /// Mean variance over the low ring (1 <= u + v <= 2) against the high ring (u + v >= k).
    pub fn colour_ratio(&self) -> f64 {
        ring_ratio(&self.variances, self.k)
    }

    /// Whether the noise is correlated enough to filter as such (both ring ratios above
    /// [`COLOURED_RATIO`]).
    pub fn is_coloured(&self) -> bool {
        self.colour_ratio() > COLOURED_RATIO && self.median_ratio > COLOURED_RATIO
    }

    /// The same spectrum scaled to a new pixel-domain variance.
    pub fn scaled_to(&self, variance: f64) -> Self {
        let f = variance / self.pixel_variance().max(1e-300);
        NoiseSpectrum { variances: self.variances.iter().map(|v| v * f).collect(), ..self.clone() }
    }
}

fn ring_ratio(values: &[f64], k: usize) -> f64 {
    let ring = |keep: &dyn Fn(usize) -> bool| {
        let v: Vec<f64> = (0..k * k).filter(|&i| keep(i / k + i % k)).map(|i| values[i]).collect();
        v.iter().sum::<f64>() / v.len().max(1) as f64
    };
    ring(&|d| (1..=2).contains(&d)) / ring(&|d| d >= k).max(1e-12)
}

/// Top-left corners of the blocks: a stride of k - 3 (5 for k = 8, never a multiple of 8 there),
/// thinned to at most [`MAX_BLOCKS`].
/// The smallest image whose noise spectrum is measured; smaller ones are taken as white.
pub const MIN_PIXELS: usize = 128 * 128;

fn corners(w: usize, h: usize, k: usize) -> Vec<(usize, usize)> {
    let stride = (k.saturating_sub(3)).max(1);
    let all: Vec<(usize, usize)> =
        (0..=h - k).step_by(stride).flat_map(|y| (0..=w - k).step_by(stride).map(move |x| (x, y))).collect();
    let thin = all.len().div_ceil(MAX_BLOCKS).max(1);
    all.into_iter().step_by(thin).collect()
}

fn block(p: &Plane, x: usize, y: usize, k: usize, out: &mut [f32]) {
    for r in 0..k {
        out[r * k..(r + 1) * k].copy_from_slice(&p.data[(y + r) * p.width + x..][..k]);
    }
}

/// Summed-area tables of values and squares (f64), kept only at the rows and columns that the
/// windows' edges fall on: the same sums as whole tables (the same additions in the same order,
/// row by row), at a sixth of their memory or less (a whole pair held 16 bytes per pixel, the
/// largest temporary of a noise fit).
struct WindowStats {
    /// Per table column 0..=w: its place among the kept columns (u32::MAX: not kept).
    col_at: Vec<u32>,
    /// Per table row 0..=h: its place among the kept rows.
    row_at: Vec<u32>,
    cols: usize,
    /// Kept rows, each the kept columns of (sum, square sum).
    kept: Vec<(f64, f64)>,
}

/// Per index 0..n, its place among the distinct `edges` in first-seen order (u32::MAX: not
/// among them), and how many there are.
fn places(edges: &[usize], n: usize) -> (Vec<u32>, usize) {
    let mut at = vec![u32::MAX; n];
    let mut count = 0;
    for &e in edges {
        if at[e] == u32::MAX {
            at[e] = count as u32;
            count += 1;
        }
    }
    (at, count)
}

impl WindowStats {
    /// Tables of `p` for rectangles whose edges are among `xs` (0..=width) and `ys` (0..=height).
    fn new(p: &Plane, xs: &[usize], ys: &[usize]) -> Self {
        let (w, h) = (p.width + 1, p.height + 1);
        let (col_at, cols) = places(xs, w);
        let (row_at, rows) = places(ys, h);
        let mut kept = vec![(0.0, 0.0); rows * cols];
        let (mut sum, mut sq) = (vec![0.0; w], vec![0.0; w]);
        // Table row 0 is zeros; row y + 1 adds image row y's running sums to row y.
        for y in 0..h {
            if y > 0 {
                let (mut rs, mut rq) = (0.0, 0.0);
                for x in 0..p.width {
                    let v = f64::from(p.data[(y - 1) * p.width + x]);
                    rs += v;
                    rq += v * v;
                    sum[x + 1] += rs;
                    sq[x + 1] += rq;
                }
            }
            if row_at[y] != u32::MAX {
                let row = &mut kept[row_at[y] as usize * cols..][..cols];
                for (x, &c) in col_at.iter().enumerate() {
                    if c != u32::MAX {
                        row[c as usize] = (sum[x], sq[x]);
                    }
                }
            }
        }
        WindowStats { col_at, row_at, cols, kept }
    }

    /// Variance of the values in [x0, x1) x [y0, y1) (edges among those the tables keep).
    fn variance(&self, x0: usize, y0: usize, x1: usize, y1: usize) -> f64 {
        let at = |x: usize, y: usize| self.kept[self.row_at[y] as usize * self.cols + self.col_at[x] as usize];
        let (a, b, c, d) = (at(x1, y1), at(x1, y0), at(x0, y1), at(x0, y0));
        let n = ((x1 - x0) * (y1 - y0)) as f64;
        let m = (a.0 - b.0 - c.0 + d.0) / n;
        ((a.1 - b.1 - c.1 + d.1) / n - m * m).max(0.0)
    }
}

/// The flat blocks whose noise the spectrum can explain. Each block's energy relative to a robust
/// spectrum (per coefficient the median square), E = the mean over the AC coefficients of
/// c^2 / v, is about the same for every block of noise alone (a chi-square of k^2 - 1 terms over
/// their count: relative std 0.18 at k = 8); texture raises it. Blocks above [`TEXTURE_ENERGY`]
/// times the median E are set aside and the test repeated on the rest, three times.
fn consistent_blocks(rows: &[f32], kk: usize) -> Vec<usize> {
    let blocks = rows.len() / kk.max(1);
    let mut kept: Vec<usize> = (0..blocks).collect();
    for _ in 0..3 {
        if kept.len() < 32 {
            break;
        }
        // Per coefficient the median square (a minority of textured blocks hardly moves it),
        // floored at a hundredth of the mean (compression leaves many exact zeros).
        let v: Vec<f64> = (0..kk)
            .map(|f| {
                let mut col: Vec<f64> = kept.iter().map(|&b| f64::from(rows[b * kk + f])).collect();
                let mean = col.iter().sum::<f64>() / col.len() as f64;
                median(&mut col).max(0.01 * mean).max(1e-300)
            })
            .collect();
        let energy =
            |b: usize| -> f64 { (1..kk).map(|f| f64::from(rows[b * kk + f]) / v[f]).sum::<f64>() / (kk as f64 - 1.0) };
        let e: Vec<f64> = kept.iter().map(|&b| energy(b)).collect();
        let limit = TEXTURE_ENERGY * median(&mut e.clone());
        let before = kept.len();
        kept = kept.iter().zip(&e).filter(|(_, x)| **x <= limit).map(|(b, _)| *b).collect();
        if kept.len() == before {
            break;
        }
    }
    kept
}

/// The upper median (the element at n / 2 in order), found in linear time; the slice is reordered.
fn median(v: &mut [f64]) -> f64 {
    let mid = v.len() / 2;
    *v.select_nth_unstable_by(mid, f64::total_cmp).1
}

/// The spectrum of a plane's noise at block side k; None when the image has fewer than 32 blocks.
pub fn estimate(p: &Plane, k: usize) -> Option<NoiseSpectrum> {
    // Below this area the smooth parts of a scene outweigh the noise in the low frequencies
    // (measured: a 64 x 64 blob scene with white noise read as 72x correlated; 128 x 128 as white).
    if k < 2 || p.width < k || p.height < k || p.width * p.height < MIN_PIXELS {
        return None;
    }
    let at = corners(p.width, p.height, k);
    if at.len() < 32 {
        return None;
    }
    // Each block's activity: the variance of the blurred plane over the block and a block around it.
    let window_of = |&(x, y): &(usize, usize)| {
        (x.saturating_sub(k), y.saturating_sub(k), (x + 2 * k).min(p.width), (y + 2 * k).min(p.height))
    };
    let windows: Vec<(usize, usize, usize, usize)> = at.iter().map(window_of).collect();
    let xs: Vec<usize> = windows.iter().flat_map(|w| [w.0, w.2]).collect();
    let ys: Vec<usize> = windows.iter().flat_map(|w| [w.1, w.3]).collect();
    let window = WindowStats::new(&gaussian_blur(p, 2.0), &xs, &ys);
    let activity: Vec<f64> = windows.iter().map(|&(x0, y0, x1, y1)| window.variance(x0, y0, x1, y1)).collect();
    let mut buf = vec![0.0f32; k * k];
    let mut sorted = activity.clone();
    sorted.sort_by(f64::total_cmp);
    let limit = FLAT_FACTOR * sorted[sorted.len() / 10];
    let c = dct_matrix(k);
    let kk = k * k;
    let (mut coeffs, mut tmp) = (vec![0.0f32; kk], vec![0.0f32; kk]);
    // Squared coefficients, one row of k^2 per flat block.
    let mut rows: Vec<f32> = Vec::new();
    for (&(x, y), &a) in at.iter().zip(&activity) {
        if a > limit {
            continue;
        }
        block(p, x, y, k, &mut buf);
        dct2(&c, k, &buf, &mut coeffs, &mut tmp);
        rows.extend(coeffs.iter().map(|v| v * v));
    }
    let kept = consistent_blocks(&rows, kk);
    let n = kept.len();
    if n < 32 {
        return None;
    }
    let mut variances = vec![0.0f64; kk];
    for &b in &kept {
        for (v, q) in variances.iter_mut().zip(&rows[b * kk..(b + 1) * kk]) {
            *v += f64::from(*q);
        }
    }
    variances.iter_mut().for_each(|v| *v /= n as f64);
    let medians: Vec<f64> =
        (0..kk).map(|f| median(&mut kept.iter().map(|&b| f64::from(rows[b * kk + f])).collect::<Vec<_>>())).collect();
    let median_ratio = ring_ratio(&medians, k);
    let mut first_order: Vec<f64> = kept
        .iter()
        .map(|&b| {
            let r = &rows[b * kk..(b + 1) * kk];
            let ac: f64 = r[1..].iter().map(|v| f64::from(*v)).sum();
            (f64::from(r[1]) + f64::from(r[k])) / ac.max(1e-300)
        })
        .collect();
    if median(&mut first_order) > GRADIENT_SHARE {
        return None;
    }
    // The DC coefficient holds the blocks' means, not noise: take the separable extension of its
    // neighbours, v(0,0) = v(0,1) v(1,0) / v(1,1), kept between them and twice the larger.
    let (v01, v10, v11) = (variances[1], variances[k], variances[k + 1]);
    let dc = v01 * v10 / v11.max(1e-300);
    variances[0] = dc.clamp(v01.min(v10), 2.0 * v01.max(v10));
    Some(NoiseSpectrum { k, variances, blocks: n, median_ratio, texture_suspected: false })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::synth::Rng;

    fn noise_field(w: usize, h: usize, seed: u64, kernel: &[f64], kr: usize) -> Plane {
        // White N(0, 1) filtered by a (2 kr + 1)^2 kernel, on a flat grey of 100.
        let mut r = Rng::new(seed);
        let (pw, ph) = (w + 2 * kr, h + 2 * kr);
        let white: Vec<f64> = (0..pw * ph).map(|_| r.normal()).collect();
        let d = 2 * kr + 1;
        Plane::from_fn(w, h, |x, y| {
            let mut s = 0.0;
            for j in 0..d {
                for i in 0..d {
                    s += kernel[j * d + i] * white[(y + j) * pw + x + i];
                }
            }
            (100.0 + s) as f32
        })
    }

    #[test]
    fn window_variances_are_those_of_the_values_under_them() {
        // Invariant: the kept tables give each rectangle's variance as computed directly.
        let mut r = Rng::new(4);
        let p = Plane::from_fn(37, 29, |x, y| (50.0 + x as f64 + 0.5 * y as f64 + 9.0 * r.normal()) as f32);
        let rects = [(0, 0, 37, 29), (3, 5, 20, 11), (16, 8, 37, 29), (0, 13, 7, 14)];
        let xs: Vec<usize> = rects.iter().flat_map(|q| [q.0, q.2]).collect();
        let ys: Vec<usize> = rects.iter().flat_map(|q| [q.1, q.3]).collect();
        let t = WindowStats::new(&p, &xs, &ys);
        for (x0, y0, x1, y1) in rects {
            let v: Vec<f64> =
                (y0..y1).flat_map(|y| (x0..x1).map(move |x| (x, y))).map(|(x, y)| f64::from(p.get(x, y))).collect();
            let m = v.iter().sum::<f64>() / v.len() as f64;
            let want = v.iter().map(|a| (a - m).powi(2)).sum::<f64>() / v.len() as f64;
            let got = t.variance(x0, y0, x1, y1);
            assert!((got - want).abs() < 1e-9 * want.max(1.0), "({x0}, {y0}, {x1}, {y1}): {got} for {want}");
        }
    }

    #[test]
    fn a_steep_ramp_is_not_read_as_grainy_noise() {
        // Closed form: a ramp along x puts 98.8% of an 8 x 8 block's AC energy in coefficient
        // (0,1); with white noise of std 40 on a ramp of 100 grey levels per pixel the flat blocks
        // are all gradient, so no spectrum is measured. White noise alone still is (invariant).
        let noise = noise_field(300, 300, 8, &[40.0], 0);
        let ramp = Plane::from_fn(300, 300, |x, y| noise.get(x, y) + 100.0 * x as f32);
        assert!(estimate(&ramp, 8).is_none());
        assert!(estimate(&noise, 8).is_some());
    }

    #[test]
    fn white_noise_has_a_flat_spectrum_at_its_variance() {
        // Invariant: every DCT coefficient of white noise of variance 100 has variance 100.
        let p = noise_field(400, 400, 5, &[10.0], 0);
        let s = estimate(&p, 8).unwrap();
        assert!(!s.is_coloured(), "{}", s.colour_ratio());
        for (i, v) in s.variances.iter().enumerate() {
            assert!((v / 100.0 - 1.0).abs() < 0.12, "coefficient {i}: {v}");
        }
        assert!((s.pixel_variance() / 100.0 - 1.0).abs() < 0.05);
    }

    #[test]
    fn fine_texture_among_the_flat_blocks_does_not_raise_the_level() {
        // Closed form: white N(0, 1) through 12 b b^T / 16 (b = 1 2 1) has variance
        // 144 (sum of b_i b_j)^2 / 256 = 20.25 per pixel. Two fifths of the image carry a fine
        // pattern (amplitude 6, periods 2.5 and 2.7 pixels, as grass or fabric): the blur of the
        // flatness test removes it, so those blocks count as flat, and its energy sits in high
        // frequencies where this noise has almost none. The level within 10% of 20.25 (the
        // estimate before blocks were tested against the spectrum: 23.6).
        let b = [1.0, 2.0, 1.0];
        let kernel: Vec<f64> = (0..9).map(|i| 12.0 * b[i / 3] * b[i % 3] / 16.0).collect();
        let noise = noise_field(512, 512, 21, &kernel, 1);
        let tau = 2.0 * std::f64::consts::PI;
        let p = Plane::from_fn(512, 512, |x, y| {
            let pattern =
                if x >= 307 { 6.0 * (tau * x as f64 / 2.5).sin() * (tau * y as f64 / 2.7).cos() } else { 0.0 };
            noise.data[y * 512 + x] + pattern as f32
        });
        let s = estimate(&p, 8).unwrap();
        assert!((s.pixel_variance() / 20.25 - 1.0).abs() < 0.1, "{}", s.pixel_variance());
    }

    #[test]
    fn filtered_noise_matches_the_closed_form() {
        // Closed form: noise n = K * w with white w of unit variance has autocovariance
        // R(d) = sum_t K(t) K(t + d), and DCT coefficient f has variance sum_{i,j} C_f(i) C_f(j) R(i - j).
        // K: a 3 x 3 binomial kernel scaled by 12 (the kind of low-pass demosaicing applies).
        let b = [1.0, 2.0, 1.0];
        let kernel: Vec<f64> = (0..9).map(|i| 12.0 * b[i / 3] * b[i % 3] / 16.0).collect();
        let p = noise_field(512, 512, 9, &kernel, 1);
        let k = 8;
        let s = estimate(&p, k).unwrap();
        assert!(s.is_coloured(), "{}", s.colour_ratio());
        let r = |dx: isize, dy: isize| -> f64 {
            let mut acc = 0.0;
            for ty in 0..3isize {
                for tx in 0..3isize {
                    let (ux, uy) = (tx + dx, ty + dy);
                    if (0..3).contains(&ux) && (0..3).contains(&uy) {
                        acc += kernel[(ty * 3 + tx) as usize] * kernel[(uy * 3 + ux) as usize];
                    }
                }
            }
            acc
        };
        let c = dct_matrix(k);
        for fy in 0..k {
            for fx in 0..k {
                if fx + fy == 0 {
                    continue; // the DC entry is extrapolated, not measured
                }
                let mut v = 0.0;
                for (ay, ax, by, bx) in (0..k).flat_map(|ay| {
                    (0..k).flat_map(move |ax| (0..k).flat_map(move |by| (0..k).map(move |bx| (ay, ax, by, bx))))
                }) {
                    let ca = f64::from(c[fy * k + ay] * c[fx * k + ax]);
                    let cb = f64::from(c[fy * k + by] * c[fx * k + bx]);
                    v += ca * cb * r(bx as isize - ax as isize, by as isize - ay as isize);
                }
                let got = s.variances[fy * k + fx];
                assert!((got - v).abs() < 0.15 * v + 0.02 * 9.0, "({fy}, {fx}): {got} against {v}");
            }
        }
    }
}
