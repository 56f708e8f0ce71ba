//! Quality measures. PSNR; SSIM with the settings of Wang, Bovik, Sheikh and Simoncelli (IEEE TIP
//! 2004): 11x11 Gaussian window of sigma 1.5, K1 = 0.01, K2 = 0.03, population covariance, the mean
//! taken over pixels whose window lies inside the image (what scikit-image's
//! `structural_similarity(gaussian_weights=True, sigma=1.5, use_sample_covariance=False)` does).
//! And no-reference checks on the residual (noisy - denoised).

use crate::error::{Error, Result};
use crate::planes::{Image, Plane};
use serde::Serialize;

/// PSNR and SSIM of one channel.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct ChannelQuality {
    /// Peak signal-to-noise ratio, dB.
    pub psnr: f64,
    /// Mean structural similarity (Wang et al. 2004 settings).
    pub ssim: f64,
}

/// PSNR and SSIM per channel of a result against a reference.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Quality {
    /// Over all colour channels (MSE pooled before the logarithm).
    pub psnr: f64,
    /// Mean of the per-channel SSIM values.
    pub ssim: f64,
    /// The peak value the PSNR and SSIM are taken against.
    pub data_range: f64,
    /// One entry per channel.
    pub channels: Vec<ChannelQuality>,
}

fn mse(a: &Plane, b: &Plane) -> f64 {
    let s: f64 = a.data.iter().zip(&b.data).map(|(x, y)| (f64::from(*x) - f64::from(*y)).powi(2)).sum();
    s / a.len() as f64
}

fn psnr_from_mse(mse: f64, range: f64) -> f64 {
    if mse == 0.0 {
        f64::INFINITY
    } else {
        10.0 * (range * range / mse).log10()
    }
}

/// PSNR (dB) of `b` against `a` for peak value `range`; infinite when they are equal.
pub fn psnr(a: &Plane, b: &Plane, range: f64) -> f64 {
    psnr_from_mse(mse(a, b), range)
}

/// Normalised 1-D Gaussian taps, radius 5 (scipy's truncate = 3.5 at sigma 1.5 gives 11 taps).
fn gaussian_taps() -> [f64; 11] {
    let mut t = [0.0; 11];
    for (i, v) in t.iter_mut().enumerate() {
        let x = i as f64 - 5.0;
        *v = (-0.5 * x * x / (1.5 * 1.5)).exp();
    }
    let s: f64 = t.iter().sum();
    t.iter_mut().for_each(|v| *v /= s);
    t
}

/// Separable Gaussian filter on the valid region only: output is (w-10) x (h-10).
fn filter_valid(src: &[f64], w: usize, h: usize, taps: &[f64; 11]) -> Vec<f64> {
    let (ow, oh) = (w - 10, h - 10);
    let mut rows = vec![0.0; ow * h];
    for y in 0..h {
        let line = &src[y * w..(y + 1) * w];
        for x in 0..ow {
            rows[y * ow + x] = taps.iter().zip(&line[x..x + 11]).map(|(t, v)| t * v).sum();
        }
    }
    let mut out = vec![0.0; ow * oh];
    for y in 0..oh {
        for x in 0..ow {
            out[y * ow + x] = (0..11).map(|k| taps[k] * rows[(y + k) * ow + x]).sum();
        }
    }
    out
}

/// Mean SSIM of `b` against `a` for peak value `range`: Gaussian window of sigma 1.5 (11 taps),
/// K1 0.01, K2 0.03, the valid interior only (Wang et al. 2004; scikit-image's gaussian_weights).
/// Images under 11 x 11 pixels are refused.
pub fn ssim(a: &Plane, b: &Plane, range: f64) -> Result<f64> {
    let (w, h) = (a.width, a.height);
    if w < 11 || h < 11 {
        return Err(Error::TooSmall("SSIM needs at least 11 x 11 pixels".into()));
    }
    let x: Vec<f64> = a.data.iter().map(|v| f64::from(*v)).collect();
    let y: Vec<f64> = b.data.iter().map(|v| f64::from(*v)).collect();
    let prod = |p: &[f64], q: &[f64]| p.iter().zip(q).map(|(u, v)| u * v).collect::<Vec<f64>>();
    let taps = gaussian_taps();
    let ux = filter_valid(&x, w, h, &taps);
    let uy = filter_valid(&y, w, h, &taps);
    let uxx = filter_valid(&prod(&x, &x), w, h, &taps);
    let uyy = filter_valid(&prod(&y, &y), w, h, &taps);
    let uxy = filter_valid(&prod(&x, &y), w, h, &taps);
    let c1 = (0.01 * range).powi(2);
    let c2 = (0.03 * range).powi(2);
    let mut total = 0.0;
    for i in 0..ux.len() {
        let (mx, my) = (ux[i], uy[i]);
        let vx = uxx[i] - mx * mx;
        let vy = uyy[i] - my * my;
        let vxy = uxy[i] - mx * my;
        total += ((2.0 * mx * my + c1) * (2.0 * vxy + c2)) / ((mx * mx + my * my + c1) * (vx + vy + c2));
    }
    Ok(total / ux.len() as f64)
}

fn check_same(a: &Image, b: &Image) -> Result<()> {
    if a.width != b.width || a.height != b.height || a.channels.len() != b.channels.len() {
        return Err(Error::Mismatch(format!(
            "{} x {} with {} channel(s) against {} x {} with {} channel(s)",
            a.width,
            a.height,
            a.channels.len(),
            b.width,
            b.height,
            b.channels.len()
        )));
    }
    if a.depth != b.depth {
        return Err(Error::Mismatch(format!("{}-bit against {}-bit", a.depth.bits(), b.depth.bits())));
    }
    Ok(())
}

/// PSNR and SSIM of `test` against the clean `reference`, data range from the bit depth.
pub fn compare(reference: &Image, test: &Image) -> Result<Quality> {
    check_same(reference, test)?;
    let range = f64::from(reference.max_value());
    let mut channels = Vec::new();
    let mut mse_sum = 0.0;
    for (a, b) in reference.channels.iter().zip(&test.channels) {
        let m = mse(a, b);
        mse_sum += m;
        channels.push(ChannelQuality { psnr: psnr_from_mse(m, range), ssim: ssim(a, b, range)? });
    }
    let n = channels.len() as f64;
    Ok(Quality {
        psnr: psnr_from_mse(mse_sum / n, range),
        ssim: channels.iter().map(|c| c.ssim).sum::<f64>() / n,
        data_range: range,
        channels,
    })
}

/// No-reference checks of what a denoiser removed. A residual of pure noise has std near sigma,
/// no correlation between neighbours and no relation to the image's edges.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct ResidualStats {
    /// Standard deviation of the residual, in grey levels.
    pub std: f64,
    /// std / sigma: well below 1 means noise left in, above 1 means signal taken out.
    pub std_over_sigma: f64,
    /// Mean of horizontal and vertical lag-1 autocorrelation of the residual.
    pub lag1_autocorrelation: f64,
    /// Pearson correlation of |residual| with the gradient magnitude of the result. The absolute
    /// value is used because removed detail leaves residuals of both signs along edges.
    pub edge_correlation: f64,
}

/// Pearson correlation of pairs fed one at a time, with Welford's co-moment updates (stable in one
/// pass, no arrays: the residual checks of a 64-megapixel image would otherwise hold gigabytes).
#[derive(Default)]
struct Correlation {
    n: f64,
    ma: f64,
    mb: f64,
    saa: f64,
    sbb: f64,
    sab: f64,
}

impl Correlation {
    fn push(&mut self, a: f64, b: f64) {
        self.n += 1.0;
        let da = a - self.ma;
        self.ma += da / self.n;
        let db = b - self.mb;
        self.mb += db / self.n;
        self.saa += da * (a - self.ma);
        self.sbb += db * (b - self.mb);
        self.sab += da * (b - self.mb);
    }

    /// 0 when either side is constant (or empty).
    fn value(&self) -> f64 {
        if self.saa <= 0.0 || self.sbb <= 0.0 {
            0.0
        } else {
            self.sab / (self.saa * self.sbb).sqrt()
        }
    }
}

/// No-reference checks of a result: the residual (noisy - denoised) should look like the noise
/// (std near sigma, no correlation between neighbours, none with the result's edges).
pub fn residual_stats(noisy: &Plane, denoised: &Plane, sigma: f64) -> ResidualStats {
    let (w, h) = (noisy.width, noisy.height);
    let r = |i: usize| f64::from(noisy.data[i]) - f64::from(denoised.data[i]);
    let n = (w * h) as f64;
    let mean = (0..w * h).map(r).sum::<f64>() / n;
    let std = ((0..w * h).map(|i| (r(i) - mean).powi(2)).sum::<f64>() / n).sqrt();
    let (mut across, mut down) = (Correlation::default(), Correlation::default());
    // Central-difference gradient magnitude of the result on the interior, against |residual|.
    let mut edge = Correlation::default();
    for y in 0..h {
        for x in 0..w {
            let i = y * w + x;
            if x + 1 < w {
                across.push(r(i), r(i + 1));
            }
            if y + 1 < h {
                down.push(r(i), r(i + w));
            }
            if x >= 1 && y >= 1 && x + 1 < w && y + 1 < h {
                let gx = f64::from(denoised.get(x + 1, y)) - f64::from(denoised.get(x - 1, y));
                let gy = f64::from(denoised.get(x, y + 1)) - f64::from(denoised.get(x, y - 1));
                edge.push(r(i).abs(), (gx * gx + gy * gy).sqrt());
            }
        }
    }
    ResidualStats {
        std,
        std_over_sigma: if sigma > 0.0 { std / sigma } else { f64::NAN },
        lag1_autocorrelation: 0.5 * (across.value() + down.value()),
        edge_correlation: edge.value(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn psnr_closed_form() {
        // Every pixel off by 1 on an 8-bit range: PSNR = 10 log10(255^2) = 48.1308 dB.
        let a = Plane::from_fn(16, 16, |_, _| 100.0);
        let b = Plane::from_fn(16, 16, |_, _| 101.0);
        assert!((psnr(&a, &b, 255.0) - 48.130_803_608).abs() < 1e-6);
    }

    #[test]
    fn ssim_of_identical_images_is_one() {
        // Invariant: SSIM(x, x) = 1 for any x.
        let a = Plane::from_fn(20, 17, |x, y| ((x * 31 + y * 17) % 256) as f32);
        assert!((ssim(&a, &a, 255.0).unwrap() - 1.0).abs() < 1e-12);
    }

    #[test]
    fn ssim_of_a_constant_shift_matches_the_luminance_term() {
        // Closed form: for y = x + d on a constant image, only the luminance term differs:
        // SSIM = (2 m (m+d) + C1) / (m^2 + (m+d)^2 + C1).
        let a = Plane::from_fn(16, 16, |_, _| 100.0);
        let b = Plane::from_fn(16, 16, |_, _| 120.0);
        let c1 = (0.01f64 * 255.0).powi(2);
        let want = (2.0 * 100.0 * 120.0 + c1) / (100.0f64.powi(2) + 120.0f64.powi(2) + c1);
        assert!((ssim(&a, &b, 255.0).unwrap() - want).abs() < 1e-9);
    }
}
