//! The pixel graph: vertices are pixels, edges join each pixel to its neighbours within a small
//! radius (radius 1 = the 8-neighbourhood). Weights come from a guide image g:
//! w_ij = exp(-d_ij^2 / (2 h^2)), with d_ij the guide difference (of single pixels, or the RMS
//! difference of small patches around i and j); edges with d_ij > tau are cut, so smoothing never
//! crosses an intensity discontinuity.
//!
//! Stored as one weight plane per neighbour offset (a matrix-free stencil) rather than as CSR:
//! 4 bytes per edge instead of 12 or more, and the product L x streams through memory.
//! `to_csr` gives the same Laplacian as a sprs matrix for checks.

use super::LinearOperator;
use crate::planes::{box_mean, Plane};
use sprs::CsMat;

/// How the pixel graph is built from its guide image.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GridParams {
    /// Neighbour radius (1 = 8 neighbours, 2 = 24 neighbours).
    pub radius: usize,
    /// Patch radius for the guide distance (0 = single pixels).
    pub patch_radius: usize,
    /// Weight scale h, in grey levels.
    pub h: f64,
    /// Cut threshold tau, in grey levels.
    pub tau: f64,
    /// Noise std left in the guide: 2 guide_noise^2 is what two equal patches differ by on
    /// average, so it is subtracted from the distance (as non-local means does).
    pub guide_noise: f64,
    /// 0: every neighbour in the radius not cut by `tau` (the cut grid). k > 0: the non-local
    /// graph: each pixel keeps its k most similar neighbours in the window (by patch distance),
    /// and an edge stays if either end keeps it, so the graph is symmetric.
    pub keep_nearest: usize,
}

/// A pixel graph on the image grid: each edge's weight per neighbour offset.
pub struct GridGraph {
    /// Width in pixels.
    pub width: usize,
    /// Height in pixels.
    pub height: usize,
    /// Half of the neighbourhood: each undirected edge is stored once, at its first pixel.
    pub offsets: Vec<(isize, isize)>,
    /// weights[k][i]: weight of the edge from pixel i to pixel i + offsets[k] (0 if absent or cut).
    pub weights: Vec<Vec<f32>>,
    /// Sum of the weights of each pixel's edges.
    pub degree: Vec<f64>,
    /// Per pixel, how many of its edges were cut (for the cut map).
    pub cuts: Vec<u8>,
}

/// Offsets (dx, dy) with dy > 0, or dy == 0 and dx > 0, within the square of the given radius.
pub fn half_offsets(radius: usize) -> Vec<(isize, isize)> {
    let r = radius as isize;
    let mut v = Vec::new();
    for dy in 0..=r {
        for dx in -r..=r {
            if dy > 0 || dx > 0 {
                v.push((dx, dy));
            }
        }
    }
    v
}

impl GridGraph {
    /// Builds the graph from the guide image (the noisy image, or the last pass's result).
    pub fn build(guide: &Plane, p: &GridParams) -> GridGraph {
        let (w, h) = (guide.width, guide.height);
        let offsets = half_offsets(p.radius);
        let inv2h2 = if p.h > 0.0 { (1.0 / (2.0 * p.h * p.h)) as f32 } else { f32::INFINITY };
        let tau2 = (p.tau * p.tau) as f32;
        let offset = (2.0 * p.guide_noise * p.guide_noise) as f32;
        let mut degree = vec![0.0f64; w * h];
        let mut cuts = vec![0u8; w * h];
        let mut weights = Vec::with_capacity(offsets.len());
        for &(dx, dy) in &offsets {
            // Squared guide difference to the neighbour at this offset (clamped outside the image);
            // the columns whose neighbour is inside run as one straight, vectorisable loop.
            let mut diff2 = vec![0.0f32; w * h];
            let (x0, x1) = ((-dx).max(0) as usize, (w as isize - dx.max(0)).max(0) as usize);
            for y in 0..h {
                let ny = (y as isize + dy).clamp(0, h as isize - 1) as usize;
                let (row, nrow) = (&guide.data[y * w..(y + 1) * w], &guide.data[ny * w..(ny + 1) * w]);
                let out = &mut diff2[y * w..(y + 1) * w];
                for x in (0..x0.min(w)).chain(x1.max(x0).min(w)..w) {
                    let nx = (x as isize + dx).clamp(0, w as isize - 1) as usize;
                    out[x] = (row[x] - nrow[nx]).powi(2);
                }
                if x1 > x0 {
                    let shifted = &nrow[(x0 as isize + dx) as usize..(x1 as isize + dx) as usize];
                    for ((o, a), b) in out[x0..x1].iter_mut().zip(&row[x0..x1]).zip(shifted) {
                        *o = (a - b) * (a - b);
                    }
                }
            }
            let mut dist2 = box_mean(&diff2, w, h, p.patch_radius);
            dist2.iter_mut().for_each(|d| *d = (*d - offset).max(0.0));
            let mut wk = vec![0.0f32; w * h];
            for y in 0..h {
                let ny = y as isize + dy;
                if ny >= h as isize {
                    continue;
                }
                for x in 0..w {
                    let nx = x as isize + dx;
                    if nx < 0 || nx >= w as isize {
                        continue;
                    }
                    let i = y * w + x;
                    let j = ny as usize * w + nx as usize;
                    if dist2[i] > tau2 {
                        cuts[i] = cuts[i].saturating_add(1);
                        cuts[j] = cuts[j].saturating_add(1);
                        continue;
                    }
                    wk[i] = (-dist2[i] * inv2h2).exp();
                    degree[i] += f64::from(wk[i]);
                    degree[j] += f64::from(wk[i]);
                }
            }
            weights.push(wk);
        }
        let mut g = GridGraph { width: w, height: h, offsets, weights, degree, cuts };
        if p.keep_nearest > 0 {
            g.keep_nearest(p.keep_nearest);
        }
        g
    }

    /// Drops every edge that is not among the `k` heaviest of either end (weights fall with the
    /// patch distance, so heaviest = most similar); dropped edges count as cut.
    fn keep_nearest(&mut self, k: usize) {
        let n = self.width * self.height;
        let deltas: Vec<usize> =
            self.offsets.iter().map(|&(dx, dy)| (dy * self.width as isize + dx).max(0) as usize).collect();
        // The k-th heaviest edge weight at each pixel, over the edges stored at it and at the
        // pixels before it that point to it.
        let mut buf = Vec::with_capacity(2 * deltas.len());
        let kth: Vec<f32> = (0..n)
            .map(|i| {
                buf.clear();
                for (m, &d) in deltas.iter().enumerate() {
                    buf.push(self.weights[m][i]);
                    if d > 0 && i >= d {
                        buf.push(self.weights[m][i - d]);
                    }
                }
                if buf.len() <= k {
                    return 0.0;
                }
                *buf.select_nth_unstable_by(k - 1, |a, b| b.total_cmp(a)).1
            })
            .collect();
        self.degree.iter_mut().for_each(|d| *d = 0.0);
        for (m, &d) in deltas.iter().enumerate() {
            for i in 0..n.saturating_sub(d) {
                let wt = self.weights[m][i];
                if wt <= 0.0 || d == 0 {
                    continue;
                }
                let j = i + d;
                if wt < kth[i] && wt < kth[j] {
                    self.weights[m][i] = 0.0;
                    self.cuts[i] = self.cuts[i].saturating_add(1);
                    self.cuts[j] = self.cuts[j].saturating_add(1);
                } else {
                    self.degree[i] += f64::from(wt);
                    self.degree[j] += f64::from(wt);
                }
            }
        }
    }

    /// Visits every stored edge (i, j, w) with w > 0.
    fn for_each_edge(&self, mut f: impl FnMut(usize, usize, f64)) {
        let w = self.width;
        for (k, &(dx, dy)) in self.offsets.iter().enumerate() {
            let delta = dy * w as isize + dx;
            for (i, &wt) in self.weights[k].iter().enumerate() {
                if wt > 0.0 {
                    f(i, (i as isize + delta) as usize, f64::from(wt));
                }
            }
        }
    }

    /// The graph's weight matrix as a symmetric sparse CSR matrix (sprs).
    pub fn to_csr(&self) -> CsMat<f64> {
        let mut edges = Vec::new();
        self.for_each_edge(|i, j, w| edges.push((i, j, w)));
        super::laplacian::from_edges(self.width * self.height, &edges)
    }

    /// Cut map as a plane: the fraction of each pixel's edges that were cut.
    pub fn cut_map(&self) -> Plane {
        let full = (2 * self.offsets.len()) as f32;
        Plane { width: self.width, height: self.height, data: self.cuts.iter().map(|&c| f32::from(c) / full).collect() }
    }
}

/// Output values per block of [`GridGraph::apply`] (a few rows of a large image).
#[cfg(feature = "parallel")]
const APPLY_BLOCK: usize = 1 << 14;

impl GridGraph {
    /// y = (A x)[start .. start + y.len()]: the degree term, then per offset the edges to later
    /// pixels (y_i -= w_ij x_j) and from earlier ones (y_j -= w_ij x_i), as the whole product
    /// adds them.
    fn apply_part(&self, x: &[f64], y: &mut [f64], start: usize) {
        let end = start + y.len();
        for ((yi, xi), d) in y.iter_mut().zip(&x[start..end]).zip(&self.degree[start..end]) {
            *yi = d * xi;
        }
        let n = x.len();
        let w = self.width as isize;
        for (k, &(dx, dy)) in self.offsets.iter().enumerate() {
            // Every present edge runs from i to a later pixel j = i + delta; an offset whose delta
            // is not positive (images narrower than the radius) has no edges at all.
            let delta = dy * w + dx;
            if delta <= 0 || delta as usize >= n {
                continue;
            }
            let d = delta as usize;
            let wk = &self.weights[k];
            // Gather form over contiguous slices, so the loops vectorise: y_i -= w_ij x_j ...
            let (a0, a1) = (start, end.min(n - d));
            if a1 > a0 {
                for ((yi, wi), xj) in y[..a1 - start].iter_mut().zip(&wk[a0..a1]).zip(&x[a0 + d..a1 + d]) {
                    *yi -= f64::from(*wi) * xj;
                }
            }
            // ... and y_j -= w_ij x_i.
            let (b0, b1) = (start.max(d), end);
            if b1 > b0 {
                for ((yj, wi), xi) in y[b0 - start..].iter_mut().zip(&wk[b0 - d..b1 - d]).zip(&x[b0 - d..b1 - d]) {
                    *yj -= f64::from(*wi) * xi;
                }
            }
        }
    }
}

impl LinearOperator for GridGraph {
    fn dim(&self) -> usize {
        self.width * self.height
    }

    fn apply(&self, x: &[f64], y: &mut [f64]) {
        // In blocks of rows of the output, in parallel natively: each output value gets its
        // terms in the same order whatever the blocks, so the bits do not depend on them.
        #[cfg(feature = "parallel")]
        {
            use rayon::prelude::*;
            y.par_chunks_mut(APPLY_BLOCK).enumerate().for_each(|(b, part)| self.apply_part(x, part, b * APPLY_BLOCK));
        }
        #[cfg(not(feature = "parallel"))]
        self.apply_part(x, y, 0);
    }

    fn diagonal(&self) -> Vec<f64> {
        self.degree.clone()
    }

    fn lambda_max_bound(&self) -> f64 {
        2.0 * self.degree.iter().copied().fold(0.0, f64::max)
    }
}
