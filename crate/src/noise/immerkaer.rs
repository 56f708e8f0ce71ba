//! Immerkaer's fast noise estimate (J. Immerkaer, "Fast noise variance estimation", CVIU 1996):
//! sigma = sqrt(pi/2) / (6 (W-2)(H-2)) * sum |I * M| over the valid interior,
//! M = [1 -2 1; -2 4 -2; 1 -2 1] (the difference of two Laplacian masks, blind to planes).
//!
//! Edges and texture also pass M, so on detailed images the global sum overestimates. The
//! calm-block variant averages |I * M| in 16 x 16 blocks and reads the lower quartile of the block
//! values, where detail is least (in the spirit of block-based estimators that pick homogeneous
//! regions); a constant, measured on pure Gaussian noise, removes the quartile's own bias.

use crate::planes::Plane;

const BLOCK: usize = 16;
const QUANTILE: f64 = 0.25;
/// Lower quartile of 16 x 16 block means of |I * M| over their overall mean, for pure Gaussian
/// noise (measured by simulation on 512 x 512 fields; checked by the unit test below).
const QUARTILE_BIAS: f64 = 0.94;
const SCALE: f64 = 1.253_314_137_315_500_3 / 6.0; // sqrt(pi/2) / 6

/// |I * M| on the interior, as a (w-2) x (h-2) row-major array.
fn responses(p: &Plane) -> Vec<f64> {
    let (w, h) = (p.width, p.height);
    let d = &p.data;
    let mut out = Vec::with_capacity((w - 2) * (h - 2));
    for y in 1..h - 1 {
        let (r0, r1, r2) = ((y - 1) * w, y * w, (y + 1) * w);
        for x in 1..w - 1 {
            let at = |i: usize| f64::from(d[i]);
            let v = at(r0 + x - 1) - 2.0 * at(r0 + x) + at(r0 + x + 1) - 2.0 * at(r1 + x - 1) + 4.0 * at(r1 + x)
                - 2.0 * at(r1 + x + 1)
                + at(r2 + x - 1)
                - 2.0 * at(r2 + x)
                + at(r2 + x + 1);
            out.push(v.abs());
        }
    }
    out
}

/// Immerkaer's fast noise std over the whole plane (Laplacian-difference mask; 0 under 3 x 3).
pub fn sigma(p: &Plane) -> f64 {
    if p.width < 3 || p.height < 3 {
        return 0.0;
    }
    let r = responses(p);
    SCALE * r.iter().sum::<f64>() / r.len() as f64
}

/// Per 16 x 16 block of the interior: the mean grey level of its pixels and the mean |I * M|.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BlockStat {
    /// Mean grey level of the block's pixels.
    pub mean: f64,
    /// Mean |I * M| over the block.
    pub response: f64,
}

impl BlockStat {
    /// The block's own Immerkaer sigma (before the calm-quantile correction).
    pub fn sigma(&self) -> f64 {
        SCALE * self.response
    }
}

/// Which ends of the range the data reach often enough to have clipped the noise there.
#[derive(Clone, Copy, Debug, Default, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Clipping {
    /// Share of pixels at or below 0.
    pub low_share: f64,
    /// Share of pixels at or above the top of the range.
    pub high_share: f64,
}

/// Share of pixels at a limit above which that limit is taken to have clipped the noise
/// (common practice; a flat image sitting exactly at 0 by chance is rare above this).
const CLIP_SHARE: f64 = 0.002;

impl Clipping {
    /// Whether the noise was clipped at 0.
    pub fn low(&self) -> bool {
        self.low_share > CLIP_SHARE
    }
    /// Whether the noise was clipped at the top of the range.
    pub fn high(&self) -> bool {
        self.high_share > CLIP_SHARE
    }
}

/// Block statistics in one pass over the rows (no image-sized buffer), and the clipping shares
/// for the range [0, top].
pub fn block_stats(p: &Plane, top: f64) -> (Vec<BlockStat>, Clipping) {
    let (w, h) = (p.width, p.height);
    let (mut lo, mut hi) = (0usize, 0usize);
    for v in &p.data {
        let v = f64::from(*v);
        lo += usize::from(v <= 0.0);
        hi += usize::from(v >= top);
    }
    let n = p.data.len().max(1) as f64;
    let clip = Clipping { low_share: lo as f64 / n, high_share: hi as f64 / n };
    if w < 3 || h < 3 {
        return (Vec::new(), clip);
    }
    let (bw, bh) = ((w - 2) / BLOCK, (h - 2) / BLOCK);
    let mut resp = vec![0.0f64; bw * bh];
    let mut sum = vec![0.0f64; bw * bh];
    let d = &p.data;
    let at = |i: usize| f64::from(d[i]);
    for by in 0..bh {
        for y in 1 + by * BLOCK..1 + (by + 1) * BLOCK {
            let (r0, r1, r2) = ((y - 1) * w, y * w, (y + 1) * w);
            for x in 1..1 + bw * BLOCK {
                let v = at(r0 + x - 1) - 2.0 * at(r0 + x) + at(r0 + x + 1) - 2.0 * at(r1 + x - 1) + 4.0 * at(r1 + x)
                    - 2.0 * at(r1 + x + 1)
                    + at(r2 + x - 1)
                    - 2.0 * at(r2 + x)
                    + at(r2 + x + 1);
                let b = by * bw + (x - 1) / BLOCK;
                resp[b] += v.abs();
                sum[b] += at(r1 + x);
            }
        }
    }
    let per = (BLOCK * BLOCK) as f64;
    let stats = resp.iter().zip(&sum).map(|(r, s)| BlockStat { mean: s / per, response: r / per }).collect();
    (stats, clip)
}

/// The calm-quantile sigma of a set of blocks (None for fewer than 8).
pub fn calm_sigma(blocks: &[BlockStat]) -> Option<f64> {
    calm_sigma_at(blocks, QUANTILE, QUARTILE_BIAS)
}

/// Lowest tenth of the block values over their mean for pure Gaussian noise (measured by
/// simulation like [`QUARTILE_BIAS`]; checked by the unit test below). Deeper in the calm tail,
/// for bins that hold many blocks where texture lifts even the quartile.
pub const TENTH_BIAS: f64 = 0.88;

/// The sigma read at quantile `q` of the block values, corrected by its bias on pure noise.
pub fn calm_sigma_at(blocks: &[BlockStat], q: f64, bias: f64) -> Option<f64> {
    if blocks.len() < 8 {
        return None;
    }
    let mut r: Vec<f64> = blocks.iter().map(|b| b.response).collect();
    r.sort_by(f64::total_cmp);
    // The k-th smallest of n sits on average at the k / (n + 1) quantile (the uniform order
    // statistic's mean), so the q quantile is read at k = q (n + 1), between neighbours. Rounding
    // (n - 1) q instead reads too high in small sets: the 7th of 58 for a tenth, 5% high in variance.
    let at = (q * (r.len() + 1) as f64 - 1.0).clamp(0.0, (r.len() - 1) as f64);
    let (i, frac) = (at.floor() as usize, at.fract());
    let v = r[i] + frac * (r[(i + 1).min(r.len() - 1)] - r[i]);
    Some(SCALE * v / bias)
}

/// Blocks whose mean lies within `CLIP_MARGIN` sigmas of a limit that the data reach have had
/// their noise cut there.
const CLIP_MARGIN: f64 = 2.5;

/// The noise std of a flat block read from the side of its median that clipping did not reach:
/// for true values at or above 0 at most half the samples clip, so the median and everything
/// beyond it are intact, and the root mean square distance beyond the median is sigma (the
/// half-normal's second moment). `low`: clipped at the bottom (read above the median).
fn one_sided_sigma(p: &Plane, bx: usize, by: usize, low: bool) -> f64 {
    let mut v: Vec<f64> = (0..BLOCK)
        .flat_map(|r| (0..BLOCK).map(move |c| (r, c)))
        .map(|(r, c)| f64::from(p.data[(1 + by * BLOCK + r) * p.width + 1 + bx * BLOCK + c]))
        .collect();
    v.sort_by(f64::total_cmp);
    let med = 0.5 * (v[v.len() / 2 - 1] + v[v.len() / 2]);
    let side: Vec<f64> =
        v.iter().filter(|x| if low { **x > med } else { **x < med }).map(|x| (x - med).powi(2)).collect();
    // Samples equal to the median (rounded data) count on the far side with zero distance.
    let n = v.len() / 2;
    (side.iter().sum::<f64>() / n.max(1) as f64).sqrt()
}

/// The blocks with those near a clipped limit measured from their unclipped side instead (their
/// response replaced by the equivalent value), found by iterating, since the first sigma (from
/// clipped blocks too) is low. Texture left in such a block only raises it, and the calm quantile
/// passes over it.
pub fn unclipped(p: &Plane, blocks: &[BlockStat], clip: Clipping, top: f64) -> Vec<BlockStat> {
    if !clip.low() && !clip.high() {
        return blocks.to_vec();
    }
    let bw = (p.width - 2) / BLOCK;
    let mut sigma = calm_sigma(blocks).unwrap_or(0.0);
    let mut out = blocks.to_vec();
    for _ in 0..4 {
        let m = CLIP_MARGIN * sigma;
        out = blocks
            .iter()
            .enumerate()
            .map(|(i, b)| {
                let (bx, by) = (i % bw, i / bw);
                let near_low = clip.low() && b.mean <= m;
                let near_high = clip.high() && b.mean >= top - m;
                if near_low || near_high {
                    // (Its calm-quartile spread is a little narrower than the responses', so a
                    // wholly clipped image reads about 2% high: common practice accepts that.)
                    BlockStat { mean: b.mean, response: one_sided_sigma(p, bx, by, near_low) / SCALE }
                } else {
                    *b
                }
            })
            .collect();
        match calm_sigma(&out) {
            Some(s) if (s - sigma).abs() > 1e-3 * sigma => sigma = s,
            _ => break,
        }
    }
    out
}

/// The calm-block variant; falls back to the global estimate on images with fewer than 8 blocks.
/// Blocks whose noise was clipped at 0 or at `top` are left out when enough others remain.
pub fn sigma_calm_blocks_clipped(p: &Plane, top: f64) -> f64 {
    if p.width < 3 || p.height < 3 {
        return 0.0;
    }
    let (blocks, clip) = block_stats(p, top);
    calm_sigma(&unclipped(p, &blocks, clip, top)).unwrap_or_else(|| sigma(p))
}

/// The calm-block variant with no range limits (no clipping considered).
pub fn sigma_calm_blocks(p: &Plane) -> f64 {
    if p.width < 3 || p.height < 3 {
        return 0.0;
    }
    calm_sigma(&block_stats(p, f64::INFINITY).0).unwrap_or_else(|| sigma(p))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn planes_and_ramps_give_zero() {
        // Closed form: M annihilates any affine function a + bx + cy.
        let p = Plane::from_fn(20, 15, |x, y| 3.0 + 2.0 * x as f32 - 1.5 * y as f32);
        assert!(sigma(&p) < 1e-9);
    }

    #[test]
    fn both_forms_are_unbiased_on_pure_gaussian_noise() {
        // Invariant: on white Gaussian noise of std 10 both estimate 10 (within 2%); the noise is a
        // Box-Muller field from a fixed SplitMix64 seed, independent of the calibration run.
        let mut s = 0x1234_5678u64;
        let mut next = || {
            s = s.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = s;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
        };
        let p = Plane::from_fn(400, 400, |_, _| {
            let (u1, u2) = (next().max(1e-300), next());
            (100.0 + 10.0 * (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()) as f32
        });
        assert!((sigma(&p) / 10.0 - 1.0).abs() < 0.02, "{}", sigma(&p));
        assert!((sigma_calm_blocks(&p) / 10.0 - 1.0).abs() < 0.02, "{}", sigma_calm_blocks(&p));
        let (blocks, _) = block_stats(&p, f64::INFINITY);
        let tenth = calm_sigma_at(&blocks, 0.1, TENTH_BIAS).unwrap();
        assert!((tenth / 10.0 - 1.0).abs() < 0.02, "{tenth}");
    }
}
