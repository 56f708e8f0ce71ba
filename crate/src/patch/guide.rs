//! What first-stage matching compares when the noise is correlated: the luminance with its noise
//! made white, in its calm areas.
//!
//! Grainy noise (demosaicing, compression) has few degrees of freedom per patch: most of its
//! power sits in a handful of low frequencies. Two patches of a smooth area then look alike when
//! their *noise* does, matching gathers exactly those, and the group's common part, which the
//! filter keeps as signal, is a noise pattern: the faint "worms" left on smooth areas of camera
//! JPEGs. Whitening the noise (each DCT coefficient scaled by the inverse of its noise std, the
//! Mahalanobis view of patch differences) spreads it over every frequency again, where it matches
//! no better than white noise does. Where the image has clear structure, the plain luminance is
//! kept: whitening turns down the low frequencies that hold it.

use crate::noise::spectrum::NoiseSpectrum;
use crate::patch::transform::dct_matrix;
use crate::planes::{mirror, Plane};

/// How far to whiten: the gains are (mean v / v_f)^(strength / 2), 1 being full whitening. Half:
/// where fine texture fills a picture, its spectrum holds texture read as noise, and whitening
/// that turns down the frequencies the texture lives in. Measured on 44 camera JPEGs (the bench's
/// real-noise set and eight grey pictures saved as colour built the same way; DEVELOPERS.md): in
/// full, +1.8 dB at best (smooth retina) but -1.05 at worst (a cat's fur made grey), mean +0.01;
/// at 0.75 +1.3 / -0.6, mean +0.03; at half +0.7 / -0.29, mean +0.03.
const STRENGTH: f64 = 0.5;

/// The strength is halved again when the luminance level had to be lowered to what the colour
/// noise or its own fine grain allows ([`NoiseSpectrum::texture_suspected`]): the spectrum then
/// surely holds texture (stained tissue, limited by its colour noise: -0.16 / -0.15 dB at a
/// quarter, -0.2 / -0.3 at half, -0.4 / -1.2 in full).
const SUSPECT_SHARE: f64 = 0.5;

/// Local variance (over a square of side 2 [`CALM_RADIUS`] + 1) in units of the noise's pixel
/// variance: up to the first value the area is calm and matches on the whitened plane, from the
/// second it holds structure and matches on the plain one, linear between. The deep-sky field (scikit-image's hubble_deep_field)
/// lost 0.4-0.6 dB near its galaxies when matched on the whitened plane there, 0.1-0.2 with this.
const CALM_UP_TO: f64 = 1.5;
const STRUCTURE_FROM: f64 = 3.0;
const CALM_RADIUS: usize = 4;

/// How strongly to whiten for this spectrum, 0 to 1 (the exponent of the gains).
fn whitening_strength(spectrum: &NoiseSpectrum) -> f64 {
    if spectrum.texture_suspected {
        STRENGTH * SUSPECT_SHARE
    } else {
        STRENGTH
    }
}

/// The matching plane for `luma` under noise of this spectrum (same plane, same scale), or None
/// when the plane is smaller than a block. Its noise has the same pixel variance as `luma`'s, so
/// matching removes the same noise variance from either.
pub fn matching_guide(luma: &Plane, spectrum: &NoiseSpectrum) -> Option<Plane> {
    let strength = whitening_strength(spectrum);
    let k = spectrum.k;
    if luma.width < k || luma.height < k || spectrum.variances.len() != k * k {
        return None;
    }
    let kernel = whitening_kernel(spectrum, strength);
    let white = convolve_mirrored(luma, &kernel, k - 1);
    Some(keep_structure(luma, white, spectrum.pixel_variance()))
}

/// Gains per DCT coefficient, (mean v / v_f)^(strength / 2), scaled so that the filtered noise
/// keeps its pixel variance (sum of v_f g_f^2 = sum of v_f).
fn gains(spectrum: &NoiseSpectrum, strength: f64) -> Vec<f64> {
    let v = &spectrum.variances;
    let mean = spectrum.pixel_variance().max(1e-300);
    let raw: Vec<f64> = v.iter().map(|&x| (mean / x.max(1e-6 * mean)).powf(strength / 2.0)).collect();
    let kept: f64 = v.iter().zip(&raw).map(|(x, g)| x * g * g).sum();
    let scale = (v.iter().sum::<f64>() / kept.max(1e-300)).sqrt();
    raw.iter().map(|g| g * scale).collect()
}

/// The (2k - 1)^2 convolution kernel (row-major, centre at (k - 1, k - 1)) equal to scaling the
/// k x k DCT of every block position by the gains and averaging the k^2 estimates of each pixel:
/// h(d) = (1 / k^2) sum over pixels j of a block with j + d in it of M[j + d, j], where
/// M = sum_f g_f phi_f phi_f^T over the 2-D DCT basis images phi_f.
fn whitening_kernel(spectrum: &NoiseSpectrum, strength: f64) -> Vec<f32> {
    let kk = (spectrum.k * spectrum.k) as f64;
    lag_sums(spectrum.k, &gains(spectrum, strength)).iter().map(|&(sum, _)| (sum / kk) as f32).collect()
}

/// The covariance of the matching plane's noise between two pixels d apart, for every lag with
/// |dx|, |dy| < k ((2k - 1)^2 values, row-major, centre (k - 1, k - 1)): the mean of M[j + d, j]
/// over the pairs of a block, M = sum_f v_f phi_f phi_f^T the block covariance whose DCT
/// variances are v (exact when the DCT diagonalises it; white noise gives sigma^2 at d = 0 and 0
/// elsewhere). `whitened`: of the first-stage guide's noise in calm areas (v_f g_f^2, what
/// [`matching_guide`] leaves there), else of the plane's own.
pub fn noise_lag_covariance(spectrum: &NoiseSpectrum, whitened: bool) -> Vec<f64> {
    let v = &spectrum.variances;
    let weights: Vec<f64> = if whitened {
        v.iter().zip(gains(spectrum, whitening_strength(spectrum))).map(|(x, g)| x * g * g).collect()
    } else {
        v.clone()
    };
    lag_sums(spectrum.k, &weights).iter().map(|&(sum, pairs)| sum / pairs.max(1) as f64).collect()
}

/// Per lag d (|dx|, |dy| < k, row-major, centre (k - 1, k - 1)): the sum of M[j + d, j] over the
/// pixels j of a k x k block with j + d in it, and how many there are; M = sum_f w_f phi_f phi_f^T
/// over the 2-D DCT basis images phi_f.
fn lag_sums(k: usize, w: &[f64]) -> Vec<(f64, usize)> {
    let kk = k * k;
    let c = dct_matrix(k);
    let phi = |f: usize, j: usize| f64::from(c[(f / k) * k + j / k]) * f64::from(c[(f % k) * k + j % k]);
    let mut m = vec![0.0f64; kk * kk];
    for (f, wf) in w.iter().enumerate() {
        let basis: Vec<f64> = (0..kk).map(|j| phi(f, j)).collect();
        for (i, bi) in basis.iter().enumerate() {
            for (j, bj) in basis.iter().enumerate() {
                m[i * kk + j] += wf * bi * bj;
            }
        }
    }
    let side = 2 * k - 1;
    let mut out = vec![(0.0, 0); side * side];
    for dy in 0..side {
        for dx in 0..side {
            let (oy, ox) = (dy as isize - (k as isize - 1), dx as isize - (k as isize - 1));
            let (mut sum, mut pairs) = (0.0, 0);
            for jy in 0..k as isize {
                for jx in 0..k as isize {
                    let (iy, ix) = (jy + oy, jx + ox);
                    if (0..k as isize).contains(&iy) && (0..k as isize).contains(&ix) {
                        sum += m[(iy as usize * k + ix as usize) * kk + jy as usize * k + jx as usize];
                        pairs += 1;
                    }
                }
            }
            out[dy * side + dx] = (sum, pairs);
        }
    }
    out
}

/// out(y, x) = sum over d of h(d) in(y + dy, x + dx), the image mirrored past its edges; each
/// output summed in a fixed order, so every build and any split of rows gives the same bits.
fn convolve_mirrored(p: &Plane, h: &[f32], reach: usize) -> Plane {
    let (w, ht) = (p.width, p.height);
    let side = 2 * reach + 1;
    let cols: Vec<usize> = (0..w + 2 * reach).map(|x| mirror(x as isize - reach as isize, w)).collect();
    let row = |y: usize, out: &mut [f32]| {
        for (x, o) in out.iter_mut().enumerate() {
            let mut sum = 0.0f32;
            for dy in 0..side {
                let src = &p.data[mirror(y as isize + dy as isize - reach as isize, ht) * w..][..w];
                let taps = &h[dy * side..(dy + 1) * side];
                for (t, &cx) in taps.iter().zip(&cols[x..x + side]) {
                    sum += t * src[cx];
                }
            }
            *o = sum;
        }
    };
    let mut data = vec![0.0f32; w * ht];
    #[cfg(feature = "parallel")]
    {
        use rayon::prelude::*;
        data.par_chunks_mut(w).enumerate().for_each(|(y, out)| row(y, out));
    }
    #[cfg(not(feature = "parallel"))]
    data.chunks_mut(w).enumerate().for_each(|(y, out)| row(y, out));
    Plane { width: w, height: ht, data }
}

/// The whitened plane where the area is calm, the plain one where it holds structure (see
/// [`CALM_UP_TO`]), by the local variance of the plain plane (the window clipped at the edges).
fn keep_structure(plain: &Plane, mut white: Plane, noise_var: f64) -> Plane {
    let (w, h) = (plain.width, plain.height);
    // Integral images of values and squares, one row and column of zeros first.
    let mut s1 = vec![0.0f64; (w + 1) * (h + 1)];
    let mut s2 = vec![0.0f64; (w + 1) * (h + 1)];
    for y in 0..h {
        let (mut r1, mut r2) = (0.0, 0.0);
        for x in 0..w {
            let v = f64::from(plain.data[y * w + x]);
            r1 += v;
            r2 += v * v;
            s1[(y + 1) * (w + 1) + x + 1] = s1[y * (w + 1) + x + 1] + r1;
            s2[(y + 1) * (w + 1) + x + 1] = s2[y * (w + 1) + x + 1] + r2;
        }
    }
    let r = CALM_RADIUS;
    let box_sum = |s: &[f64], x0: usize, y0: usize, x1: usize, y1: usize| {
        s[y1 * (w + 1) + x1] - s[y0 * (w + 1) + x1] - s[y1 * (w + 1) + x0] + s[y0 * (w + 1) + x0]
    };
    for y in 0..h {
        let (y0, y1) = (y.saturating_sub(r), (y + r + 1).min(h));
        for x in 0..w {
            let (x0, x1) = (x.saturating_sub(r), (x + r + 1).min(w));
            let n = ((x1 - x0) * (y1 - y0)) as f64;
            let mean = box_sum(&s1, x0, y0, x1, y1) / n;
            let var = (box_sum(&s2, x0, y0, x1, y1) / n - mean * mean).max(0.0);
            let ratio = var / noise_var.max(1e-300);
            let calm = ((STRUCTURE_FROM - ratio) / (STRUCTURE_FROM - CALM_UP_TO)).clamp(0.0, 1.0) as f32;
            let i = y * w + x;
            white.data[i] = calm * white.data[i] + (1.0 - calm) * plain.data[i];
        }
    }
    white
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spectrum(k: usize, variances: Vec<f64>) -> NoiseSpectrum {
        NoiseSpectrum { k, variances, blocks: 1, median_ratio: 1.0, texture_suspected: false }
    }

    /// Autocovariance at lag d of unit white noise filtered by `a` (closed form: sum a_t a_(t+d)).
    fn auto1(a: &[f64], d: isize) -> f64 {
        (0..a.len() as isize)
            .filter(|t| (0..a.len() as isize).contains(&(t + d)))
            .map(|t| a[t as usize] * a[(t + d) as usize])
            .sum()
    }

    /// The k x k DCT coefficient variances of unit white noise filtered by `a` along each axis,
    /// in closed form from its separable autocovariance: v_f = phi_f^T C phi_f.
    fn filtered_spectrum(k: usize, a: &[f64]) -> Vec<f64> {
        let c = dct_matrix(k);
        let phi = |f: usize, j: usize| f64::from(c[(f / k) * k + j / k]) * f64::from(c[(f % k) * k + j % k]);
        (0..k * k)
            .map(|f| {
                let mut v = 0.0;
                for i in 0..k * k {
                    for j in 0..k * k {
                        let (dy, dx) = ((i / k) as isize - (j / k) as isize, (i % k) as isize - (j % k) as isize);
                        v += phi(f, i) * phi(f, j) * auto1(a, dy) * auto1(a, dx);
                    }
                }
                v
            })
            .collect()
    }

    #[test]
    fn the_lag_covariance_of_filtered_noise_follows_its_closed_form() {
        // White noise: sigma^2 at lag 0 and 0 elsewhere, up to the rounding of the f32 DCT matrix (M = sigma^2 I).
        let k = 8;
        let side = 2 * k - 1;
        let centre = (k - 1) * side + k - 1;
        for (i, v) in noise_lag_covariance(&spectrum(k, vec![9.0; k * k]), false).iter().enumerate() {
            let want = if i == centre { 9.0 } else { 0.0 };
            assert!((v - want).abs() < 1e-6, "lag {i}: {v}");
        }
        // Noise filtered by [1 2 1] / 4 each way (the grainy noise of the bench): closed form
        // C(dx, dy) = c(dx) c(dy), c = (6, 4, 1) / 16 at lags 0, 1, 2. The DCT does not quite
        // diagonalise the block covariance, so what the 8 x 8 variances give back is off by up to
        // 0.074 C(0) (measured: lag (1, 1) 0.052 for 0.0625, (1, 0) 0.086 for 0.094, (3, 0)
        // 0.004 for 0; low where the closed form is large, so matching takes out less than is
        // shared, never more).
        let a = [0.25, 0.5, 0.25];
        let cov = noise_lag_covariance(&spectrum(k, filtered_spectrum(k, &a)), false);
        let c0 = auto1(&a, 0).powi(2);
        for (dx, dy) in [(0isize, 0isize), (1, 0), (0, 1), (1, 1), (2, 0), (2, 1), (3, 0), (5, 2)] {
            let got = cov[(dy + k as isize - 1) as usize * side + (dx + k as isize - 1) as usize];
            let want = auto1(&a, dx) * auto1(&a, dy);
            assert!((got - want).abs() < 0.08 * c0, "lag ({dx}, {dy}): {got} for {want}");
        }
    }

    #[test]
    fn white_noise_gets_the_identity_kernel() {
        // Closed form: with every gain 1, M is the identity (the DCT basis is orthonormal), so
        // h(0) = k^2 / k^2 = 1 and every other tap is 0.
        let k = 8;
        let h = whitening_kernel(&spectrum(k, vec![4.0; k * k]), 1.0);
        let side = 2 * k - 1;
        for (i, v) in h.iter().enumerate() {
            let want = if i == (k - 1) * side + k - 1 { 1.0 } else { 0.0 };
            assert!((v - want).abs() < 1e-6, "tap {i}: {v}");
        }
    }

    #[test]
    fn whitening_removes_the_correlation_of_filtered_noise() {
        // White noise filtered by [0.15 0.7 0.15] each way has lag-1 correlation 0.21 / 0.535
        // along each axis (closed form: sum a_t a_(t+1) / sum a_t^2). Its 8 x 8 DCT coefficient
        // variances follow in closed form from that autocovariance; whitened with them, the noise
        // must come out nearly uncorrelated with its pixel variance kept. (The block operator
        // tapers the ideal inverse filter to 15 x 15: for the harsher [1 2 1] / 4, whose power
        // vanishes at the highest frequency, it leaves 0.25 of 0.67.)
        let (k, n) = (8usize, 256usize);
        let a = [0.15f64, 0.7, 0.15];
        let sp = spectrum(k, filtered_spectrum(k, &a));
        let mut rng = crate::synth::Rng::new(7);
        let white: Vec<f64> = (0..(n + 2) * (n + 2)).map(|_| 10.0 * rng.normal()).collect();
        let mut data = vec![0.0f32; n * n];
        for y in 0..n {
            for x in 0..n {
                let mut s = 0.0;
                for (i, ai) in a.iter().enumerate() {
                    for (j, aj) in a.iter().enumerate() {
                        s += ai * aj * white[(y + i) * (n + 2) + x + j];
                    }
                }
                data[y * n + x] = s as f32;
            }
        }
        let noisy = Plane { width: n, height: n, data };
        let lag1 = |p: &Plane| {
            let (mut sxy, mut sxx) = (0.0f64, 0.0f64);
            for y in 0..n {
                for x in 0..n - 1 {
                    let (u, v) = (f64::from(p.data[y * n + x]), f64::from(p.data[y * n + x + 1]));
                    sxy += u * v;
                    sxx += u * u;
                }
            }
            sxy / sxx
        };
        let var = |p: &Plane| p.data.iter().map(|v| f64::from(*v).powi(2)).sum::<f64>() / (n * n) as f64;
        assert!((lag1(&noisy) - 0.21 / 0.535).abs() < 0.03, "input lag-1 {}", lag1(&noisy));
        let out = convolve_mirrored(&noisy, &whitening_kernel(&sp, 1.0), k - 1);
        assert!(lag1(&out).abs() < 0.1, "whitened lag-1 {}", lag1(&out));
        let ratio = var(&out) / var(&noisy);
        assert!((ratio - 1.0).abs() < 0.15, "variance ratio {ratio}");
    }

    #[test]
    fn the_kernel_is_the_averaged_block_operator() {
        // Its definition: scale the DCT of every k x k block position by the gains, invert, and
        // average each pixel's k^2 estimates; the kernel must give the same away from the edges.
        use crate::patch::transform::{dct2, idct2};
        let (k, n) = (8usize, 40usize);
        let mut rng = crate::synth::Rng::new(3);
        let sp = spectrum(k, (0..k * k).map(|f| 1.0 + 50.0 / (1.0 + (f / k + f % k) as f64)).collect());
        let p = Plane { width: n, height: n, data: (0..n * n).map(|_| rng.normal() as f32).collect() };
        let g = gains(&sp, 1.0);
        let c = dct_matrix(k);
        let (mut acc, mut cnt) = (vec![0.0f64; n * n], vec![0.0f64; n * n]);
        let (mut buf, mut co, mut tmp, mut back) =
            (vec![0.0f32; k * k], vec![0.0f32; k * k], vec![0.0f32; k * k], vec![0.0f32; k * k]);
        for y in 0..=n - k {
            for x in 0..=n - k {
                for r in 0..k {
                    buf[r * k..(r + 1) * k].copy_from_slice(&p.data[(y + r) * n + x..][..k]);
                }
                dct2(&c, k, &buf, &mut co, &mut tmp);
                co.iter_mut().zip(&g).for_each(|(a, g)| *a *= *g as f32);
                idct2(&c, k, &co, &mut back, &mut tmp);
                for r in 0..k {
                    for q in 0..k {
                        acc[(y + r) * n + x + q] += f64::from(back[r * k + q]);
                        cnt[(y + r) * n + x + q] += 1.0;
                    }
                }
            }
        }
        let out = convolve_mirrored(&p, &whitening_kernel(&sp, 1.0), k - 1);
        for y in k..n - k {
            for x in k..n - k {
                let i = y * n + x;
                assert!((acc[i] / cnt[i] - f64::from(out.data[i])).abs() < 1e-4, "({x}, {y})");
            }
        }
    }
}
