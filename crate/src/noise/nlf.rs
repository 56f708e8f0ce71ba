//! The noise-level function of one channel: the noise variance as a function of intensity,
//! var(y) = a y + b, which is the Poisson-Gaussian model of a camera (a = grey levels per photon,
//! b = read^2 - a * offset), fitted from the image alone in the manner of A. Foi, M. Trimeche,
//! V. Katkovnik and K. Egiazarian, "Practical Poissonian-Gaussian noise modeling and fitting for
//! single-image raw-data", IEEE TIP 2008: local (mean, variance) pairs from smooth blocks, binned
//! by intensity, and a robust weighted line through them.
//!
//! Here the local variance of a 16 x 16 block is Immerkaer's (the block's mean |I * M|, blind to
//! affine shading), each intensity bin keeps the calm lower quartile of its blocks (texture only
//! adds), and blocks whose noise was cut by clipping at 0 or the top of the range are left out
//! (see [`immerkaer::unclipped`]) instead of being modelled as censored, which needs no
//! distributional inversion and loses only the blocks within 2.5 sigma of a limit.

use super::immerkaer::{self, BlockStat, Clipping};
use crate::planes::Plane;
use serde::{Deserialize, Serialize};

/// One intensity bin: the median block mean, the calm noise variance, and the blocks in it.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct LevelPoint {
    /// Median block mean of the bin (grey level).
    pub mean: f64,
    /// Calm noise variance of the bin.
    pub variance: f64,
    /// Blocks in the bin.
    pub blocks: usize,
    /// False where the robust fit set the point aside (texture left in the calm quartile).
    pub used: bool,
}

/// var(y) = slope * y + intercept over [low, high], with the points it was fitted to.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct NoiseLevelFunction {
    /// Slope of the line (gain, for photon noise).
    pub slope: f64,
    /// Intercept of the line at grey level 0.
    pub intercept: f64,
    /// Intensity span of the points used.
    pub low: f64,
    /// Upper end of the intensity span.
    pub high: f64,
    /// The binned points, used or set aside.
    pub points: Vec<LevelPoint>,
    /// Root mean square relative deviation of the used points from the line.
    pub spread: f64,
    /// Which ends of the range clipped the noise.
    pub clipping: Clipping,
    /// Enough points over enough of the range to trust the slope.
    pub reliable: bool,
    /// The black level as the data show it: the median mean of the darkest blocks (those within
    /// six block-mean noise stds of the darkest). It is the offset only where the scene has an
    /// area with no light; otherwise it is the darkest smooth level.
    pub black_level: f64,
    /// var(y) = c0 + c1 y + c2 y^2 through the same points: brightness dependence that is not
    /// photon noise's straight line (a camera's gamma makes dark areas noisier than bright ones).
    pub curve: [f64; 3],
}

const BINS: usize = 12;
/// Points this far below the model are set aside (a bin of flat clipped-looking blocks).
const BELOW: f64 = 0.4;
/// The variance must change by this factor over the used span to call the noise signal-dependent.
/// Between 1 and this, a constant level fits within the spread of the points (measured on white
/// noise over the development set: at most 1.25; see the unit tests and BENCHMARKS.md).
pub const DEPENDENCE_RATIO: f64 = 1.6;
/// The same for a curve of any shape, which texture can imitate better than a line: measured, white
/// noise of sigma 5 on a photograph's textured mid-tones reaches 2; camera tone curves 4 and more.
pub const CURVE_RATIO: f64 = 2.5;

impl NoiseLevelFunction {
    /// The line's variance at grey level y (never below 0).
    pub fn variance(&self, y: f64) -> f64 {
        (self.slope * y + self.intercept).max(0.0)
    }

    /// The variance grows with intensity by more than [`DEPENDENCE_RATIO`] over the data.
    pub fn signal_dependent(&self) -> bool {
        self.reliable
            && self.slope > 0.0
            && self.variance(self.high) > DEPENDENCE_RATIO * self.variance(self.low).max(1e-12)
    }

    /// The quadratic curve's variance at y, held at its ends outside [low, high] and above a tenth
    /// of its largest value there (a curve is trusted only where it was measured).
    pub fn curve_variance(&self, y: f64) -> f64 {
        let at = |y: f64| self.curve[0] + self.curve[1] * y + self.curve[2] * y * y;
        let y = y.clamp(self.low, self.high);
        let peak = (0..=16).map(|i| at(self.low + (self.high - self.low) * f64::from(i) / 16.0)).fold(0.0, f64::max);
        at(y).max(0.1 * peak).max(1e-12)
    }

    /// Largest over smallest variance of the curve over [low, high].
    pub fn curve_ratio(&self) -> f64 {
        let v: Vec<f64> =
            (0..=16).map(|i| self.curve_variance(self.low + (self.high - self.low) * f64::from(i) / 16.0)).collect();
        v.iter().copied().fold(0.0, f64::max) / v.iter().copied().fold(f64::INFINITY, f64::min).max(1e-12)
    }

    /// The noise changes with brightness by more than [`CURVE_RATIO`], whatever the shape.
    pub fn brightness_dependent(&self) -> bool {
        self.reliable && self.curve_ratio() > CURVE_RATIO
    }

    /// The level of a constant fit: the weighted mean variance of the used points.
    pub fn constant_variance(&self) -> f64 {
        block_weighted_variance(&self.points)
    }
}

/// The mean variance of the used points, each weighted by its blocks.
fn block_weighted_variance(points: &[LevelPoint]) -> f64 {
    let (mut s, mut n) = (0.0, 0.0);
    for p in points.iter().filter(|p| p.used) {
        s += p.variance * p.blocks as f64;
        n += p.blocks as f64;
    }
    if n > 0.0 {
        s / n
    } else {
        0.0
    }
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// The calm points: blocks binned by mean over their span, the calm quartile variance per bin.
/// With a `trend` (a first fit's variance curve), each block's response is first carried to its
/// bin's median level along the trend: where the noise grows steeply, a wide bin's calmest blocks
/// are otherwise its darkest, and the point falls below the truth (measured: 0.45x at the first
/// bin of a 16-bit frame, gain 8, peak 300).
fn level_points(blocks: &[BlockStat], trend: Option<&dyn Fn(f64) -> f64>) -> Vec<LevelPoint> {
    let lo = blocks.iter().map(|b| b.mean).fold(f64::INFINITY, f64::min);
    let hi = blocks.iter().map(|b| b.mean).fold(f64::NEG_INFINITY, f64::max);
    let width = ((hi - lo) / BINS as f64).max(1e-9);
    let mut bins: Vec<Vec<BlockStat>> = vec![Vec::new(); BINS];
    for b in blocks {
        bins[(((b.mean - lo) / width) as usize).min(BINS - 1)].push(*b);
    }
    bins.iter()
        .filter_map(|bin| {
            let mut means: Vec<f64> = bin.iter().map(|b| b.mean).collect();
            let mid = if means.is_empty() { 0.0 } else { median(&mut means) };
            let carried: Vec<BlockStat> = match trend {
                // Only blocks the trend puts within a third of the median's variance are carried:
                // a bin can hold a cluster at black and a few blocks far brighter, and an error in
                // the trend between them would be carried into the quantile.
                Some(t) => {
                    let at_mid = t(mid).max(1e-12);
                    bin.iter()
                        .filter_map(|b| {
                            let r = t(b.mean).max(1e-12) / at_mid;
                            (0.75..=1.0 / 0.75)
                                .contains(&r)
                                .then(|| BlockStat { mean: b.mean, response: b.response / r.sqrt() })
                        })
                        .collect()
                }
                None => bin.clone(),
            };
            // Bins with many blocks read deeper in the calm tail, where texture reaches less.
            let s = if carried.len() >= 40 {
                immerkaer::calm_sigma_at(&carried, 0.1, immerkaer::TENTH_BIAS)?
            } else {
                immerkaer::calm_sigma(&carried)?
            };
            Some(LevelPoint { mean: mid, variance: s * s, blocks: carried.len(), used: true })
        })
        .collect()
}

/// How far above its model a point may sit before it is taken to hold texture: a floor for the
/// model's own error plus a number of standard errors of a calm-quantile variance from n blocks
/// (about 0.33 / sqrt(n), measured on pure noise: 16 x 16 blocks, 10th to 25th percentile).
/// Tighter for the line (1.5 standard errors), whose shape photon noise fixes, than for the
/// quadratic (2.4), which stands for any tone curve and misses humped ones by more.
fn tolerance(blocks: usize, shape: Shape) -> f64 {
    let n = (blocks.max(1) as f64).sqrt();
    match shape {
        Shape::Line => 0.03 + 0.5 / n,
        Shape::Quadratic => 0.05 + 0.8 / n,
    }
}

/// Which model a point is judged against while trimming.
#[derive(Clone, Copy)]
enum Shape {
    Line,
    Quadratic,
}

/// Sets aside, one at a time, the point furthest outside its tolerance of the model refitted to
/// the rest: above by more than [`tolerance`] (texture only adds variance) or below by more than
/// [`BELOW`]. One at a time because a textured bin with many blocks pulls the whole fit towards
/// itself, and the points it pushes out are the calm ones.
fn trim(points: &mut [LevelPoint], shape: Shape) {
    points.iter_mut().for_each(|p| p.used = true);
    while points.iter().filter(|p| p.used).count() > 3 {
        let line = weighted_line(points);
        let curve = weighted_quadratic(points, line);
        let mut worst: Option<(usize, f64)> = None;
        for (i, p) in points.iter().enumerate().filter(|(_, p)| p.used) {
            let f = match shape {
                Shape::Line => line.0 * p.mean + line.1,
                Shape::Quadratic => curve[0] + curve[1] * p.mean + curve[2] * p.mean * p.mean,
            }
            .max(1e-12);
            let rel = p.variance / f - 1.0;
            let excess = if rel > 0.0 { rel / tolerance(p.blocks, shape) } else { -rel / BELOW };
            if excess > 1.0 && worst.is_none_or(|(_, e)| excess > e) {
                worst = Some((i, excess));
            }
        }
        match worst {
            Some((i, _)) => points[i].used = false,
            None => break,
        }
    }
}

/// Weighted least-squares line through the used points; weights n / v^2, since the variance of
/// a variance estimate from n blocks grows as v^2 / n.
fn weighted_line(points: &[LevelPoint]) -> (f64, f64) {
    let (mut sw, mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for p in points.iter().filter(|p| p.used) {
        let w = p.blocks as f64 / p.variance.max(1e-12).powi(2);
        sw += w;
        sx += w * p.mean;
        sy += w * p.variance;
        sxx += w * p.mean * p.mean;
        sxy += w * p.mean * p.variance;
    }
    let det = sw * sxx - sx * sx;
    if sw <= 0.0 {
        return (0.0, 0.0);
    }
    if det.abs() <= 1e-12 * sw * sxx.max(1e-12) {
        return (0.0, sy / sw);
    }
    let slope = (sw * sxy - sx * sy) / det;
    let slope = slope.max(0.0);
    (slope, (sy - slope * sx) / sw)
}

/// Weighted least-squares quadratic through the used points (weights as for the line), solved
/// by the 3 x 3 normal equations; falls back to the line when they are singular.
fn weighted_quadratic(points: &[LevelPoint], line: (f64, f64)) -> [f64; 3] {
    let mut a = [[0.0f64; 3]; 3];
    let mut b = [0.0f64; 3];
    // Centre and scale y for conditioning: t = (y - m) / s.
    let used: Vec<&LevelPoint> = points.iter().filter(|p| p.used).collect();
    let fallback = [line.1, line.0, 0.0];
    if used.len() < 4 {
        return fallback;
    }
    let m = used.iter().map(|p| p.mean).sum::<f64>() / used.len() as f64;
    let sc = used.iter().map(|p| (p.mean - m).abs()).fold(0.0, f64::max).max(1e-9);
    for p in &used {
        let w = p.blocks as f64 / p.variance.max(1e-12).powi(2);
        let t = (p.mean - m) / sc;
        let basis = [1.0, t, t * t];
        for i in 0..3 {
            b[i] += w * basis[i] * p.variance;
            for j in 0..3 {
                a[i][j] += w * basis[i] * basis[j];
            }
        }
    }
    let Some(q) = nalgebra::Matrix3::from_fn(|i, j| a[i][j]).try_inverse() else { return fallback };
    let c = q * nalgebra::Vector3::new(b[0], b[1], b[2]);
    // Back to powers of y: c0 + c1 t + c2 t^2 with t = (y - m) / sc.
    let (c0, c1, c2) = (c[0], c[1] / sc, c[2] / (sc * sc));
    [c0 - c1 * m + c2 * m * m, c1 - 2.0 * c2 * m, c2]
}

/// The median mean of the darkest blocks: those within six stds of a block mean of the darkest.
fn darkest_level(blocks: &[BlockStat]) -> f64 {
    let Some(dark) = blocks.iter().min_by(|a, b| a.mean.total_cmp(&b.mean)) else { return 0.0 };
    // Immerkaer's sigma of the darkest block, over 16 for a mean of 256 pixels.
    let spread = 6.0 * dark.sigma() / 16.0;
    let mut near: Vec<f64> = blocks.iter().map(|b| b.mean).filter(|m| *m <= dark.mean + spread).collect();
    median(&mut near)
}

/// Fits the noise-level function of a plane whose values lie in [0, top].
pub fn fit(p: &Plane, top: f64) -> NoiseLevelFunction {
    let (blocks, clipping) = immerkaer::block_stats(p, top);
    let corrected = immerkaer::unclipped(p, &blocks, clipping, top);
    if !clipping.low() && !clipping.high() {
        return fit_blocks(&corrected, clipping, top);
    }
    // Near a limit the data reach, the noise may have been cut (or, for photon counts, be
    // genuinely small: many exact zeros are both). A first fit over every block gives the local
    // noise level, and blocks within 2.5 local stds of a reached limit are left out of the second.
    let first = fit_blocks(&corrected, clipping, top);
    if first.signal_dependent() && first.variance(first.low) < 0.25 * first.variance(first.high) {
        // Photon counts: the noise grows fourfold or more from the darkest to the brightest
        // level, so the many exact zeros are data (no photon), not noise cut off below 0.
        return first;
    }
    let local = |m: f64| 2.5 * first.curve_variance(m).sqrt();
    let kept: Vec<BlockStat> = corrected
        .iter()
        .filter(|b| (!clipping.low() || b.mean > local(b.mean)) && (!clipping.high() || b.mean < top - local(b.mean)))
        .copied()
        .collect();
    let second = fit_blocks(&kept, clipping, top);
    if second.points.iter().filter(|p| p.used).count() < 2 && first.points.iter().filter(|p| p.used).count() >= 2 {
        // Nearly every smooth area lies near a limit (a dark micrograph): too little is left to
        // see a dependence, but the first fit's points, measured on the unclipped side, still show
        // the level; kept for the report, never trusted for a slope.
        return NoiseLevelFunction { reliable: false, ..first };
    }
    second
}

fn fit_blocks(blocks: &[BlockStat], clipping: Clipping, top: f64) -> NoiseLevelFunction {
    let black_level = darkest_level(blocks);
    let mut points = if blocks.len() >= 8 { level_points(blocks, None) } else { Vec::new() };
    // Points far above the quadratic (free in shape, so it follows any smooth dependence) hold
    // texture and are set aside; twice more, the points are re-read along the curve so far.
    trim(&mut points, Shape::Quadratic);
    for _ in 0..2 {
        if points.iter().filter(|p| p.used).count() < 4 {
            break;
        }
        let curve = weighted_quadratic(&points, weighted_line(&points));
        // Floored at half the smallest point: near black a quadratic can dip to 0 or below, and
        // a ratio of two values near 0 would scatter the blocks it should only carry.
        let floor = 0.5 * points.iter().filter(|p| p.used).map(|p| p.variance).fold(f64::INFINITY, f64::min);
        let trend = |y: f64| (curve[0] + curve[1] * y + curve[2] * y * y).max(floor);
        let redone = level_points(blocks, Some(&trend));
        if redone.len() < 2 {
            break;
        }
        points = redone;
        trim(&mut points, Shape::Quadratic);
    }
    // Photon noise is a straight line, so the line is judged against itself too: a quadratic bends
    // towards a run of textured mid-tone bins (measured: gain 8.9 for a true 8 on a 16-bit frame
    // of a photograph with grass, 8.3 judged against the line). The line's trimming is kept when
    // it finds the noise signal-dependent through most points; otherwise the quadratic's.
    let mut by_line = points.clone();
    trim(&mut by_line, Shape::Line);
    let kept = by_line.iter().filter(|p| p.used).count();
    let line_fit = assemble(by_line, clipping, top, black_level);
    // It must keep at least half the points: a line through a few of them is not photon noise
    // (measured: a camera JPEG's humped curve, 3 of 12 points kept, read as photon noise).
    if 2 * kept >= line_fit.points.len() && line_fit.signal_dependent() {
        return line_fit;
    }
    assemble(points, clipping, top, black_level)
}

/// The line and the quadratic through the used points, with the span and spread they cover.
fn assemble(mut points: Vec<LevelPoint>, clipping: Clipping, top: f64, black_level: f64) -> NoiseLevelFunction {
    let (mut slope, mut intercept) = weighted_line(&points);
    let mut curve = weighted_quadratic(&points, (slope, intercept));
    if points.iter().filter(|p| p.used).count() < 2 {
        // Too little left to fit: every point back, a constant level.
        points.iter_mut().for_each(|p| p.used = true);
        let c = block_weighted_variance(&points);
        (slope, intercept) = (0.0, c);
        curve = [c, 0.0, 0.0];
    }
    let used: Vec<&LevelPoint> = points.iter().filter(|p| p.used).collect();
    let low = used.iter().map(|p| p.mean).fold(f64::INFINITY, f64::min);
    let high = used.iter().map(|p| p.mean).fold(f64::NEG_INFINITY, f64::max);
    let (mut e2, mut n) = (0.0, 0.0);
    for p in &used {
        let f = (slope * p.mean + intercept).max(1e-12);
        e2 += p.blocks as f64 * (p.variance / f - 1.0).powi(2);
        n += p.blocks as f64;
    }
    let spread = if n > 0.0 { (e2 / n).sqrt() } else { 0.0 };
    // A slope needs at least 3 points spanning a tenth of the range or more.
    let reliable = used.len() >= 3 && high - low >= 0.1 * top.min(high.max(1.0));
    NoiseLevelFunction {
        slope,
        intercept,
        low: if low.is_finite() { low } else { 0.0 },
        high: if high.is_finite() { high } else { 0.0 },
        points,
        spread,
        clipping,
        reliable,
        black_level,
        curve,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::synth::Rng;

    #[test]
    fn white_noise_on_a_ramp_is_constant() {
        // Invariant: white Gaussian noise of std 8 on an intensity ramp has var = 64 at every level,
        // so the fit is (nearly) flat and not signal-dependent.
        let mut r = Rng::new(7);
        let p = Plane::from_fn(512, 512, |x, _| (20.0 + 0.4 * x as f64 + 8.0 * r.normal()) as f32);
        let f = fit(&p, 255.0);
        assert!(!f.signal_dependent(), "{f:?}");
        assert!((f.variance(120.0) / 64.0 - 1.0).abs() < 0.1, "{}", f.variance(120.0));
    }

    #[test]
    fn poisson_gaussian_gain_and_intercept_are_recovered() {
        // Known truth by construction: y = offset + gain * Poisson(x) + N(0, read^2) on a smooth
        // scene, so var(y) = gain (y - offset) + read^2. Gain within 10%; the line at the offset
        // within 3% of the variance's span (an extrapolation: read noise is a small part of it at high gain).
        for (gain, offset, read) in [(4.0, 100.0, 6.0), (2.0, 0.0, 3.0), (12.0, 500.0, 20.0)] {
            let mut r = Rng::new(11);
            let p = Plane::from_fn(600, 600, |x, y| {
                let photons = 2.0 + 300.0 * (x as f64 / 600.0) * (0.5 + 0.5 * (y as f64 / 600.0));
                (offset + gain * r.poisson(photons) + read * r.normal()) as f32
            });
            let f = fit(&p, 65535.0);
            assert!(f.signal_dependent());
            assert!((f.slope / gain - 1.0).abs() < 0.1, "gain {gain}: {}", f.slope);
            let at_offset = f.slope * offset + f.intercept;
            let span = gain * gain * 300.0;
            assert!((at_offset - read * read).abs() < 0.03 * span, "gain {gain}: {at_offset} against {}", read * read);
            // Each used point within 12% of the true variance at its mean, the darkest bin too
            // (where the variance doubles across the bin, its calmest blocks are its darkest).
            for pt in f.points.iter().filter(|p| p.used) {
                let truth = gain * (pt.mean - offset) + read * read;
                assert!((pt.variance / truth - 1.0).abs() < 0.12, "gain {gain}: {pt:?} against {truth}");
            }
        }
    }

    #[test]
    fn textured_mid_tones_do_not_bend_the_gain() {
        // Known truth by construction: y = 100 + 8 Poisson(x) + N(0, 12^2) on a ramp, with a fine
        // pattern near the highest frequencies over the whole middle third of the columns, so every
        // block at those levels holds texture as well as noise (in the estimator's high-pass
        // response about 38% above the noise: the pattern's variance is 6% of the photon noise's,
        // and the filter passes it 6.3 times as strongly, a closed form), as grass does in a
        // photograph. The gain within 5% of 8
        // (the issue asks 10%; the fit before the line's own trimming and the re-read bins gave
        // 8.59, 7% high, on this field).
        let mut r = Rng::new(17);
        let p = Plane::from_fn(600, 600, |x, y| {
            let photons = 5.0 + 295.0 * x as f64 / 600.0;
            let texture = if (200..400).contains(&x) {
                0.35 * (8.0 * photons).sqrt() * (2.9 * x as f64).sin() * (2.7 * y as f64).cos() * 1.41
            } else {
                0.0
            };
            (100.0 + 8.0 * r.poisson(photons) + 12.0 * r.normal() + texture) as f32
        });
        let f = fit(&p, 65535.0);
        assert!(f.signal_dependent(), "{f:?}");
        assert!((f.slope / 8.0 - 1.0).abs() < 0.05, "{}", f.slope);
    }

    #[test]
    fn noise_that_falls_with_brightness_is_found_by_the_curve() {
        // Known truth by construction: std 12 at black falling linearly to 4 at white (var from
        // 144 to 16, as gamma makes a camera's noise); the line cannot follow it, the curve does.
        let mut r = Rng::new(5);
        let p = Plane::from_fn(512, 512, |x, _| {
            let y = 10.0 + 0.45 * x as f64;
            let std = 12.0 - 8.0 * y / 240.0;
            (y + std * r.normal()) as f32
        });
        let f = fit(&p, 255.0);
        assert!(!f.signal_dependent() && f.brightness_dependent(), "{f:?}");
        for y in [40.0, 120.0, 200.0] {
            let want = (12.0 - 8.0 * y / 240.0f64).powi(2);
            assert!((f.curve_variance(y) / want - 1.0).abs() < 0.15, "at {y}: {} against {want}", f.curve_variance(y));
        }
    }

    #[test]
    fn clipped_black_background_does_not_pull_the_level_down() {
        // Invariant: half the image is black (true value 0, noise cut at 0), half at grey 120;
        // the level comes from the unclipped half: sigma 25 within 10%.
        let mut r = Rng::new(3);
        let p = Plane::from_fn(512, 512, |x, _| {
            let v = if x < 256 { 0.0 } else { 120.0 };
            (v + 25.0 * r.normal()).round().clamp(0.0, 255.0) as f32
        });
        assert!(f64::from(p.data.iter().filter(|v| **v == 0.0).count() as u32) > 0.2 * 512.0 * 512.0);
        let f = fit(&p, 255.0);
        let s = f.constant_variance().sqrt();
        assert!((s / 25.0 - 1.0).abs() < 0.1, "{s}");
        let s2 = immerkaer::sigma_calm_blocks_clipped(&p, 255.0);
        assert!((s2 / 25.0 - 1.0).abs() < 0.1, "{s2}");
    }
}
