//! Block matching by structural similarity. Means and variances of every patch come from box
//! sums made once; the covariance of a reference with a candidate at offset o is a sum of
//! products over the reference's square, made per offset from g x g block sums that neighbouring
//! references share (g divides the patch side and the reference step: 4 by default), so a block's
//! products are formed once per offset for the four references that hold it. A candidate that
//! falls clearly short of the group's current last place skips the SSIM's division.
//!
//! The similarity is the SSIM of two patches (Wang et al. 2004, one window per patch) with the
//! noise variance taken out of the patch variances: noise inflates both variances but not their
//! covariance, and uncorrected SSIM would rank noisy flat patches as dissimilar. Correlated noise
//! does inflate the covariance of overlapping patches (they share its grain), which would rank a
//! flat area's nearest neighbours first and group copies of one noise pattern: given the noise's
//! covariance by lag, that share is taken out too.

use super::Group;
use crate::error::Result;
use crate::planes::Plane;
use crate::progress::{check, Progress};

/// How block matching forms groups.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MatchParams<'a> {
    /// Patch side in pixels.
    pub patch: usize,
    /// Half-size of the search window, in pixels.
    pub search: usize,
    /// Most patches per group, the reference included.
    pub max_group: usize,
    /// Candidates below this SSIM are not grouped.
    pub min_similarity: f64,
    /// Data range L for the SSIM constants C1 = (0.01 L)^2 and C2 = (0.03 L)^2.
    pub range: f64,
    /// Noise variance removed from each patch variance (0 when matching on a clean estimate).
    pub noise_var: f64,
    /// Distance between references: covariances are summed over blocks whose side divides both
    /// it and the patch side, in an order fixed by these two alone, so a reference's similarities
    /// do not depend on which other references share its call (tiles, bands, the page's view).
    pub step: usize,
    /// Covariance of the matched plane's noise between pixels d apart, |dx|, |dy| < patch
    /// ((2 patch - 1)^2 values, row-major, centre (patch - 1, patch - 1)); empty for white noise.
    /// Overlapping patches of the same slice share correlated noise, which the covariance of the
    /// two would count as likeness: it is taken out.
    pub noise_cov: &'a [f64],
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

/// The `cap` most similar candidates offered so far, most similar first, as (similarity, offer
/// index); among equal similarities the one offered first stays ahead. Entries are 8 bytes so an
/// insertion moves little.
struct Best {
    list: Vec<(f32, u32)>,
    cap: usize,
}

impl Best {
    #[inline]
    fn offer(&mut self, s: f32, n: u32) {
        if self.list.len() == self.cap {
            match self.list.last() {
                Some(&(worst, _)) if s > worst => {
                    self.list.pop();
                }
                _ => return,
            }
        }
        let at = self.list.partition_point(|&(v, _)| v >= s);
        self.list.insert(at, (s, n));
    }

    /// What a candidate must beat to be kept: the last one's similarity once the list is full.
    #[inline]
    fn floor(&self) -> f64 {
        match self.list.last() {
            Some(&(worst, _)) if self.list.len() == self.cap => f64::from(worst),
            _ => f64::NEG_INFINITY,
        }
    }
}

/// The patch squares of the references cut into g x g blocks, g dividing both the patch side and
/// the distance between references, so that neighbouring references share blocks: a cross sum
/// over a block, made once per offset, serves every reference whose square holds it (four with
/// the default patch of 8 and step of 4), where a per-pixel box sum served one reference in 16.
struct Blocks {
    g: usize,
    /// Block corners along each axis, ascending.
    xs: Vec<usize>,
    ys: Vec<usize>,
    /// Per reference, the indices into the block sums of its (k / g)^2 blocks, row by row.
    of_ref: Vec<u32>,
    per_ref: usize,
}

fn gcd(a: usize, b: usize) -> usize {
    if b == 0 {
        a
    } else {
        gcd(b, a % b)
    }
}

impl Blocks {
    fn new(refs: &[(usize, usize)], k: usize, step: usize) -> Self {
        let g = gcd(k, step.max(1));
        let corners = |pick: &dyn Fn(&(usize, usize)) -> usize| -> Vec<usize> {
            let mut v: Vec<usize> = refs.iter().flat_map(|r| (0..k / g).map(move |j| pick(r) + j * g)).collect();
            v.sort_unstable();
            v.dedup();
            v
        };
        let xs = corners(&|r| r.0);
        let ys = corners(&|r| r.1);
        let index = |v: &[usize], at: usize| v.partition_point(|&c| c < at);
        let of_ref = refs
            .iter()
            .flat_map(|r| {
                let (xs, ys) = (&xs, &ys);
                (0..k / g).flat_map(move |i| {
                    (0..k / g).map(move |j| (index(ys, r.1 + i * g) * xs.len() + index(xs, r.0 + j * g)) as u32)
                })
            })
            .collect();
        Blocks { g, of_ref, per_ref: (k / g) * (k / g), xs, ys }
    }

    /// sums[iy * xs.len() + ix] = sum over the block at (xs[ix], ys[iy]) of a(p) b(p + (dx, dy)):
    /// each column's g products top-down, then the columns left to right. Blocks whose partner
    /// falls outside are left as they were (no reference reads them: its candidate is outside).
    #[allow(clippy::too_many_arguments)]
    #[inline(always)]
    fn cross_sums(
        &self,
        a: &[f64],
        b: &[f64],
        w: usize,
        h: usize,
        dx: isize,
        dy: isize,
        strip: &mut [f64],
        sums: &mut [f64],
    ) {
        let g = self.g;
        let fits = |c: usize, d: isize, n: usize| c as isize + d >= 0 && c as isize + d + g as isize <= n as isize;
        let (Some(&x_first), Some(&x_last)) =
            (self.xs.iter().find(|&&x| fits(x, dx, w)), self.xs.iter().rev().find(|&&x| fits(x, dx, w)))
        else {
            return;
        };
        let (xa, xb) = (x_first, x_last + g);
        let nx = self.xs.len();
        for (iy, &y) in self.ys.iter().enumerate() {
            if !fits(y, dy, h) {
                continue;
            }
            let strip = &mut strip[xa..xb];
            for i in 0..g {
                let ra = &a[(y + i) * w + xa..(y + i) * w + xb];
                let start = ((y + i) as isize + dy) as usize * w + (xa as isize + dx) as usize;
                let rb = &b[start..start + (xb - xa)];
                if i == 0 {
                    for ((c, p), q) in strip.iter_mut().zip(ra).zip(rb) {
                        *c = p * q;
                    }
                } else {
                    for ((c, p), q) in strip.iter_mut().zip(ra).zip(rb) {
                        *c += p * q;
                    }
                }
            }
            for (ix, &x) in self.xs.iter().enumerate() {
                if x >= xa && x + g <= xb {
                    sums[iy * nx + ix] = strip[x - xa..x - xa + g].iter().sum();
                }
            }
        }
    }

    /// The cross sum over reference `i`'s whole square: its blocks row by row.
    #[inline]
    fn square(&self, i: usize, sums: &[f64]) -> f64 {
        let mut total = 0.0;
        for &b in &self.of_ref[i * self.per_ref..(i + 1) * self.per_ref] {
            total += sums[b as usize];
        }
        total
    }
}

/// A plane's values and its patches' (mean, variance) at every corner.
type PlaneStats = (Vec<f64>, Vec<(f64, f64)>);

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
    let (num, den) = ssim_parts(ma, mb, va, vb, cov, c1, c2);
    num / den
}

/// [`patch_ssim`]'s numerator and denominator (the denominator is positive when c1, c2 > 0).
#[inline]
fn ssim_parts(ma: f64, mb: f64, va: f64, vb: f64, cov: f64, c1: f64, c2: f64) -> (f64, f64) {
    ((2.0 * ma * mb + c1) * (2.0 * cov + c2), (ma * ma + mb * mb + c1) * (va + vb + c2))
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

crate::simd::dispatch! {
    /// As [`match_groups`], with candidates also taken from `context` (neighbouring slices of a
    /// stack, the same size as `img`), within `across` pixels of the reference's own position
    /// there: slices of a stack are in register, so a small window finds a structure's
    /// continuation.
    pub fn match_groups_across(
        img: &Plane,
        context: &[&Plane],
        across: usize,
        refs: &[(usize, usize)],
        p: &MatchParams,
        progress: &dyn Progress,
    ) -> Result<Vec<Group>> => match_body
}

#[inline(always)]
fn match_body(
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
    // Per neighbouring slice: its values and its patches' (mean, variance).
    let mut others: Vec<PlaneStats> = Vec::with_capacity(context.len());
    for plane in context {
        if plane.width != w || plane.height != h {
            return Err(crate::error::Error::Internal("a neighbouring slice differs in size".into()));
        }
        let other: Vec<f64> = plane.data.iter().map(|v| f64::from(*v)).collect();
        let stats = patch_stats(&other, &mut sums, w, h, p.noise_var);
        others.push((other, stats));
    }
    if context.len() > usize::from(u8::MAX) {
        return Err(crate::error::Error::Internal("too many slices".into()));
    }
    let c1 = (0.01 * p.range).powi(2);
    let c2 = (0.03 * p.range).powi(2);
    let s = p.search as isize;
    let offsets: Vec<(isize, isize)> =
        (0..=s).flat_map(|dy| (-s..=s).map(move |dx| (dx, dy))).filter(|&(dx, dy)| dy > 0 || dx > 0).collect();
    let a = across as isize;
    let offsets_across: Vec<(isize, isize)> = (-a..=a).flat_map(|dy| (-a..=a).map(move |dx| (dx, dy))).collect();
    let inside = |x: isize, y: isize| x >= 0 && y >= 0 && (x as usize) < pw && (y as usize) < ph;
    // Each offset of the half window, then its opposite: the order in which candidates were always
    // offered, so ties between equally similar candidates resolve as before.
    let offsets: Vec<(isize, isize)> = offsets.iter().flat_map(|&(dx, dy)| [(dx, dy), (-dx, -dy)]).collect();
    let blocks = Blocks::new(refs, k, p.step);
    let mut strip = vec![0.0f64; w];
    let mut sums = vec![0.0f64; blocks.xs.len() * blocks.ys.len()];
    // Every offset to try, with the slice it reads; a candidate's offer index is its place here.
    let all: Vec<(isize, isize, u8)> = offsets
        .iter()
        .map(|&(dx, dy)| (dx, dy, 0u8))
        .chain((0..others.len()).flat_map(|j| offsets_across.iter().map(move |&(dx, dy)| (dx, dy, (j + 1) as u8))))
        .collect();
    let side = 2 * k - 1;
    if !p.noise_cov.is_empty() && p.noise_cov.len() != side * side {
        return Err(crate::error::Error::Internal("the noise covariance does not fit the patch size".into()));
    }
    // Per offer: the noise covariance shared with the reference (0 beyond a patch, across slices
    // and for white noise).
    let shared: Vec<f64> = all
        .iter()
        .map(|&(dx, dy, slice)| {
            let near = dx.unsigned_abs() < k && dy.unsigned_abs() < k;
            if slice == 0 && near && !p.noise_cov.is_empty() {
                p.noise_cov[(dy + k as isize - 1) as usize * side + (dx + k as isize - 1) as usize]
            } else {
                0.0
            }
        })
        .collect();
    let keep = p.max_group.saturating_sub(1); // the reference takes the first place
    let mut best: Vec<Best> = refs.iter().map(|_| Best { list: Vec::with_capacity(keep + 1), cap: keep }).collect();
    for (n, &(dx, dy, slice)) in all.iter().enumerate() {
        if n % 16 == 0 {
            check(progress)?;
            progress.report(n as f32 / all.len() as f32, "matching patches");
        }
        let (other, stats) = if slice == 0 {
            (&values, &pos_stats)
        } else {
            (&others[slice as usize - 1].0, &others[slice as usize - 1].1)
        };
        blocks.cross_sums(&values, other, w, h, dx, dy, &mut strip, &mut sums);
        for (i, &(rx, ry)) in refs.iter().enumerate() {
            let (cx, cy) = (rx as isize + dx, ry as isize + dy);
            if !inside(cx, cy) {
                continue;
            }
            let (mr, vr) = pos_stats[ry * pw + rx];
            let (mc, vc) = stats[cy as usize * pw + cx as usize];
            let cov = blocks.square(i, &sums) / kk - mr * mc - shared[n];
            // patch_ssim's numerator and denominator: a candidate that
            // falls clearly short of what it must beat is passed over without the division (the
            // margin of 1e-6 is far above the rounding of the quotient and of its f32 copy).
            let (num, den) = ssim_parts(mr, mc, vr, vc, cov, c1, c2);
            let floor = best[i].floor().max(p.min_similarity) * den;
            if den > 0.0 && num < floor - 1e-6 * floor.abs() {
                continue;
            }
            let sim = num / den;
            if sim >= p.min_similarity {
                best[i].offer(sim as f32, n as u32);
            }
        }
    }
    Ok(refs
        .iter()
        .zip(&best)
        .map(|(&(rx, ry), b)| {
            let c = &b.list;
            let at = |n: u32| {
                let (dx, dy, slice) = all[n as usize];
                ((rx as isize + dx) as usize, (ry as isize + dy) as usize, slice)
            };
            // The reference always first; similarities reported capped at 1 (its own value),
            // which keeps the order.
            let positions = std::iter::once((rx, ry)).chain(c.iter().map(|q| (at(q.1).0, at(q.1).1))).collect();
            let similarity = std::iter::once(1.0).chain(c.iter().map(|q| q.0.min(1.0))).collect();
            let slices = if context.is_empty() {
                Vec::new()
            } else {
                std::iter::once(0).chain(c.iter().map(|q| at(q.1).2)).collect()
            };
            Group { positions, similarity, slices }
        })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::progress::NoProgress;
    use crate::synth::Rng;

    /// Non-integer values, so a change of summation order would show in the last bits.
    fn plane(side: usize) -> Plane {
        let mut rng = Rng::new(11);
        Plane::from_fn(side, side, |x, y| (40.0 + 3.1 * x as f32 + 1.7 * (y % 9) as f32) + 9.3 * rng.normal() as f32)
    }

    fn params() -> MatchParams<'static> {
        MatchParams {
            patch: 8,
            search: 5,
            max_group: 9,
            min_similarity: 0.0,
            range: 255.0,
            noise_var: 20.0,
            step: 4,
            noise_cov: &[],
        }
    }

    #[test]
    fn groups_are_the_most_similar_candidates_by_the_ssim_formula() {
        groups_follow_the_ssim_formula(&[]);
        // Correlated noise: the covariance its overlapping patches share comes off theirs (any
        // values serve the check; these fall with the lag as a grain's do).
        let side = 15;
        let cov: Vec<f64> = (0..side * side)
            .map(|i| {
                let (dx, dy) = ((i % side) as f64 - 7.0, (i / side) as f64 - 7.0);
                30.0 * (-(dx * dx + dy * dy) / 4.0).exp()
            })
            .collect();
        groups_follow_the_ssim_formula(&cov);
    }

    fn groups_follow_the_ssim_formula(noise_cov: &[f64]) {
        // Reference: SSIM of two patches (Wang et al. 2004, one window), computed directly here
        // in f64 over every candidate of the window, noise variance (and the covariance the
        // noise of overlapping patches shares) removed as documented.
        let img = plane(40);
        let p = MatchParams { noise_cov, ..params() };
        let refs: Vec<(usize, usize)> = (0..4).flat_map(|j| (0..4).map(move |i| (6 + 4 * i, 7 + 4 * j))).collect();
        let groups = match_groups(&img, &refs, &p, &NoProgress).expect("matching");
        let at = |x: usize, y: usize, i: usize, j: usize| f64::from(img.data[(y + i) * img.width + x + j]);
        let stats = |x: usize, y: usize| {
            let v: Vec<f64> = (0..64).map(|q| at(x, y, q / 8, q % 8)).collect();
            let m = v.iter().sum::<f64>() / 64.0;
            (m, (v.iter().map(|a| a * a).sum::<f64>() / 64.0 - m * m - p.noise_var).max(0.0))
        };
        let (c1, c2) = ((0.01f64 * 255.0).powi(2), (0.03f64 * 255.0).powi(2));
        for (g, &(rx, ry)) in groups.iter().zip(&refs) {
            let (mr, vr) = stats(rx, ry);
            let mut all = Vec::new();
            for cy in ry - 5..=ry + 5 {
                for cx in rx - 5..=rx + 5 {
                    if (cx, cy) == (rx, ry) || cx + 8 > 40 || cy + 8 > 40 {
                        continue;
                    }
                    let (mc, vc) = stats(cx, cy);
                    let shared = if noise_cov.is_empty() { 0.0 } else { noise_cov[(cy + 7 - ry) * 15 + cx + 7 - rx] };
                    let cov = (0..64).map(|q| at(rx, ry, q / 8, q % 8) * at(cx, cy, q / 8, q % 8)).sum::<f64>() / 64.0
                        - mr * mc
                        - shared;
                    all.push((patch_ssim(mr, mc, vr, vc, cov, c1, c2), (cx, cy)));
                }
            }
            all.sort_by(|a, b| b.0.total_cmp(&a.0));
            assert_eq!(g.positions[0], (rx, ry));
            for (i, (s, pos)) in all.iter().take(p.max_group - 1).enumerate() {
                assert_eq!(g.positions[i + 1], *pos, "reference ({rx}, {ry}), place {}", i + 1);
                assert!((f64::from(g.similarity[i + 1]) - s.min(1.0)).abs() < 1e-5);
            }
        }
    }

    #[test]
    fn a_reference_matches_alike_alone_and_among_others() {
        // Invariant: the summation order depends on the patch side and step only, so a reference's
        // group is the same bit for bit whatever other references share the call.
        let img = plane(48);
        let p = params();
        let refs: Vec<(usize, usize)> = (0..5).flat_map(|j| (0..5).map(move |i| (5 + 4 * i, 5 + 4 * j))).collect();
        let mut with_last = refs.clone();
        with_last.push((38, 39)); // off the grid, as the last reference of an axis can be
        let together = match_groups(&img, &with_last, &p, &NoProgress).expect("matching");
        for (i, &r) in with_last.iter().enumerate() {
            let alone = match_groups(&img, &[r], &p, &NoProgress).expect("matching");
            assert_eq!(alone[0], together[i], "reference {r:?}");
        }
    }
}
