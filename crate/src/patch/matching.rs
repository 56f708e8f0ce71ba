//! Block matching by structural similarity. For every offset in the search window one product
//! image and its integral image give the patch covariances at all reference positions at once, so
//! matching costs O(pixels x offsets x patch side); means and variances come from box sums computed once. Offsets o and -o share one product image.
//!
//! The similarity is the SSIM of two patches (Wang et al. 2004, one window per patch) with the
//! noise variance taken out of the patch variances: noise inflates both variances but not their
//! covariance, and uncorrected SSIM would rank noisy flat patches as dissimilar.

use super::Group;
use crate::error::Result;
use crate::planes::Plane;
use crate::progress::{check, Progress};

#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MatchParams {
    pub patch: usize,
    /// Half-size of the search window, in pixels.
    pub search: usize,
    pub max_group: usize,
    /// Candidates below this SSIM are not grouped.
    pub min_similarity: f64,
    /// Data range L for the SSIM constants C1 = (0.01 L)^2 and C2 = (0.03 L)^2.
    pub range: f64,
    /// Noise variance removed from each patch variance (0 when matching on a clean estimate).
    pub noise_var: f64,
}

/// k x k box sums of a w x h array at every top-left corner, each a direct sum of k column sums
/// of k terms. No running totals: a box sum depends only on the values under it, never on where
/// the array starts, so a tile's crop matches exactly as the whole image does.
struct BoxSums {
    w: usize,
    k: usize,
    /// colsum[y w + x] = sum_{i < k} src[(y + i) w + x], for y in 0..=h-k.
    colsum: Vec<f64>,
}

impl BoxSums {
    fn new(w: usize, h: usize, k: usize) -> Self {
        BoxSums { w, k, colsum: vec![0.0; w * (h + 1 - k)] }
    }

    fn fill(&mut self, src: &[f64]) {
        let (w, k) = (self.w, self.k);
        for (y, out) in self.colsum.chunks_mut(w).enumerate() {
            out.copy_from_slice(&src[y * w..(y + 1) * w]);
            for i in 1..k {
                for (o, v) in out.iter_mut().zip(&src[(y + i) * w..(y + i + 1) * w]) {
                    *o += v;
                }
            }
        }
    }

    #[inline]
    fn square(&self, x: usize, y: usize) -> f64 {
        self.colsum[y * self.w + x..][..self.k].iter().sum()
    }
}

/// The best candidates so far for one reference, most similar first: (x, y, slice).
struct Best {
    sims: Vec<f32>,
    pos: Vec<(usize, usize, u8)>,
    cap: usize,
}

impl Best {
    fn offer(&mut self, s: f32, p: (usize, usize, u8)) {
        if self.sims.len() == self.cap && s <= self.sims[self.cap - 1] {
            return;
        }
        let at = self.sims.partition_point(|&v| v >= s);
        self.sims.insert(at, s);
        self.pos.insert(at, p);
        if self.sims.len() > self.cap {
            self.sims.pop();
            self.pos.pop();
        }
    }
}

/// out(x, y) = a(x, y) b(x + dx, y + dy), zero where (x + dx, y + dy) is outside.
fn product(a: &[f64], b: &[f64], w: usize, h: usize, dx: isize, dy: isize, out: &mut [f64]) {
    let (x0, x1) = ((-dx).max(0) as usize, (w as isize - dx.max(0)).max(0) as usize);
    for y in 0..h {
        let row = &mut out[y * w..(y + 1) * w];
        row.iter_mut().for_each(|r| *r = 0.0);
        let ny = y as isize + dy;
        if ny < 0 || ny >= h as isize || x1 <= x0 {
            continue;
        }
        let a = &a[y * w + x0..y * w + x1];
        let start = (ny as usize * w) as isize + x0 as isize + dx;
        let b = &b[start as usize..start as usize + (x1 - x0)];
        for ((r, p), q) in row[x0..x1].iter_mut().zip(a).zip(b) {
            *r = p * q;
        }
    }
}

/// Mean and variance (noise removed) of the patch at every corner, row by row over the corners.
fn patch_stats(values: &[f64], sums: &mut BoxSums, w: usize, h: usize, noise_var: f64) -> Vec<(f64, f64)> {
    let k = sums.k;
    let (pw, ph) = (w + 1 - k, h + 1 - k);
    let kk = (k * k) as f64;
    sums.fill(values);
    let means: Vec<f64> =
        (0..ph).flat_map(|y| (0..pw).map(move |x| (x, y))).map(|(x, y)| sums.square(x, y) / kk).collect();
    let squares: Vec<f64> = values.iter().map(|v| v * v).collect();
    sums.fill(&squares);
    (0..ph)
        .flat_map(|y| (0..pw).map(move |x| (x, y)))
        .zip(&means)
        .map(|((x, y), &m)| (m, (sums.square(x, y) / kk - m * m - noise_var).max(0.0)))
        .collect()
}

/// SSIM of two patches from their means, variances (noise removed) and covariance. With the noise
/// taken out the ratio can pass 1 by chance; ranking uses it as it is.
#[inline]
pub fn patch_ssim(ma: f64, mb: f64, va: f64, vb: f64, cov: f64, c1: f64, c2: f64) -> f64 {
    ((2.0 * ma * mb + c1) * (2.0 * cov + c2)) / ((ma * ma + mb * mb + c1) * (va + vb + c2))
}

/// Groups for the given reference corners (all with x + patch <= width, y + patch <= height).
pub fn match_groups(
    img: &Plane,
    refs: &[(usize, usize)],
    p: &MatchParams,
    progress: &dyn Progress,
) -> Result<Vec<Group>> {
    match_groups_across(img, &[], 0, refs, p, progress)
}

/// As [`match_groups`], with candidates also taken from `context` (neighbouring slices of a
/// stack, the same size as `img`), within `across` pixels of the reference's own position there:
/// slices of a stack are in register, so a small window finds a structure's continuation.
pub fn match_groups_across(
    img: &Plane,
    context: &[&Plane],
    across: usize,
    refs: &[(usize, usize)],
    p: &MatchParams,
    progress: &dyn Progress,
) -> Result<Vec<Group>> {
    let (w, h, k) = (img.width, img.height, p.patch);
    let (pw, ph) = (w + 1 - k, h + 1 - k);
    let kk = (k * k) as f64;
    let values: Vec<f64> = img.data.iter().map(|v| f64::from(*v)).collect();
    let mut sums = BoxSums::new(w, h, k);
    let pos_stats = patch_stats(&values, &mut sums, w, h, p.noise_var);
    let c1 = (0.01 * p.range).powi(2);
    let c2 = (0.03 * p.range).powi(2);
    let ref_stats: Vec<(f64, f64)> = refs.iter().map(|&(x, y)| pos_stats[y * pw + x]).collect();
    let mut best: Vec<Best> = refs
        .iter()
        .map(|&(x, y)| {
            let mut b = Best {
                sims: Vec::with_capacity(p.max_group + 1),
                pos: Vec::with_capacity(p.max_group + 1),
                cap: p.max_group,
            };
            b.offer(f32::INFINITY, (x, y, 0)); // the reference is always in its group, first
            b
        })
        .collect();
    let s = p.search as isize;
    let offsets: Vec<(isize, isize)> =
        (0..=s).flat_map(|dy| (-s..=s).map(move |dx| (dx, dy))).filter(|&(dx, dy)| dy > 0 || dx > 0).collect();
    let a = across as isize;
    let offsets_across: Vec<(isize, isize)> = (-a..=a).flat_map(|dy| (-a..=a).map(move |dx| (dx, dy))).collect();
    let total = offsets.len() + context.len() * offsets_across.len();
    let mut prod = vec![0.0f64; w * h];
    for (n, &(dx, dy)) in offsets.iter().enumerate() {
        if n % 16 == 0 {
            check(progress)?;
            progress.report(n as f32 / total as f32, "matching patches");
        }
        // P(x, y) = I(x, y) I(x + dx, y + dy), zero where the partner falls outside.
        product(&values, &values, w, h, dx, dy, &mut prod);
        sums.fill(&prod);
        for (i, &(rx, ry)) in refs.iter().enumerate() {
            let (mr, vr) = ref_stats[i];
            // Candidate r + o uses P summed over the reference's square; candidate r - o uses P
            // summed over the candidate's own square (its partner at +o is the reference).
            for sign in [1isize, -1] {
                let (cx, cy) = (rx as isize + sign * dx, ry as isize + sign * dy);
                if cx < 0 || cy < 0 || cx as usize >= pw || cy as usize >= ph {
                    continue;
                }
                let (cx, cy) = (cx as usize, cy as usize);
                let (mc, vc) = pos_stats[cy * pw + cx];
                let at = if sign > 0 { (rx, ry) } else { (cx, cy) };
                let cov = sums.square(at.0, at.1) / kk - mr * mc;
                let sim = patch_ssim(mr, mc, vr, vc, cov, c1, c2);
                if sim >= p.min_similarity {
                    best[i].offer(sim as f32, (cx, cy, 0));
                }
            }
        }
    }
    for (j, plane) in context.iter().enumerate() {
        if plane.width != w || plane.height != h {
            return Err(crate::error::Error::Internal("a neighbouring slice differs in size".into()));
        }
        let slice = u8::try_from(j + 1).map_err(|_| crate::error::Error::Internal("too many slices".into()))?;
        let other: Vec<f64> = plane.data.iter().map(|v| f64::from(*v)).collect();
        let other_stats = patch_stats(&other, &mut sums, w, h, p.noise_var);
        for (n, &(dx, dy)) in offsets_across.iter().enumerate() {
            if n % 16 == 0 {
                check(progress)?;
                progress
                    .report((offsets.len() + j * offsets_across.len() + n) as f32 / total as f32, "matching patches");
            }
            // P(x, y) = I(x, y) J(x + dx, y + dy): candidate r + o of the other slice.
            product(&values, &other, w, h, dx, dy, &mut prod);
            sums.fill(&prod);
            for (i, &(rx, ry)) in refs.iter().enumerate() {
                let (cx, cy) = (rx as isize + dx, ry as isize + dy);
                if cx < 0 || cy < 0 || cx as usize >= pw || cy as usize >= ph {
                    continue;
                }
                let (cx, cy) = (cx as usize, cy as usize);
                let (mr, vr) = ref_stats[i];
                let (mc, vc) = other_stats[cy * pw + cx];
                let cov = sums.square(rx, ry) / kk - mr * mc;
                let sim = patch_ssim(mr, mc, vr, vc, cov, c1, c2);
                if sim >= p.min_similarity {
                    best[i].offer(sim as f32, (cx, cy, slice));
                }
            }
        }
    }
    Ok(best
        .into_iter()
        .map(|b| {
            // Reported capped at 1 (the reference's own value), which keeps the order.
            let similarity = b.sims.iter().map(|s| s.min(1.0)).collect();
            let slices = if context.is_empty() { Vec::new() } else { b.pos.iter().map(|q| q.2).collect() };
            Group { positions: b.pos.iter().map(|q| (q.0, q.1)).collect(), similarity, slices }
        })
        .collect())
}
