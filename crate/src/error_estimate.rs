//! A result's mean squared error estimated without a clean reference: Stein's unbiased risk
//! estimate (SURE), with the divergence of the whole run taken by Monte Carlo (S. Ramani, T. Blu
//! and M. Unser, "Monte-Carlo SURE: a black-box optimization of regularization parameters for
//! general denoising algorithms", IEEE TIP 2008).
//!
//! For y = x + n, with independent Gaussian noise of variance v_i at pixel i, and a run f,
//!   E ||f(y) - x||^2 = E [ ||f(y) - y||^2 - sum v_i + 2 sum v_i df_i/dy_i ]   (Stein's lemma),
//! and sum v_i df_i/dy_i is E_b [ sum v_i b_i (f_i(y + eps b) - f_i(y)) ] / eps for a probe b of
//! independent +-1 entries (Hutchinson's trace estimator) and a small step eps: one more pass of
//! the run on y + eps b, with the noise model fitted on y kept as it was.
//!
//! Photon and other brightness-dependent noise is taken as Gaussian with the fitted variance at
//! each pixel, read at the result (the heteroscedastic form of the same identity: an
//! approximation, which the estimate says). Spatially correlated noise breaks the independence
//! the identity needs, so no estimate is made for it.

use crate::noise::vst::Stabiliser;
use crate::pipeline::Prepared;
use crate::planes::{box_mean, Image, Plane};
use serde::{Deserialize, Serialize};

/// Pixels whose result lies within this many noise stds of 0 or the top are left out where the
/// image is clipped: beyond 2 stds, at most Phi(-2) = 2.3% of the noise is cut off (common practice: a margin of a few stds).
const CLIP_MARGIN: f64 = 2.0;

/// See [`near_clipped`]: a 5 x 5 window.
const CUT_REACH: usize = 2;

/// Below this share of pixels away from the clipped ends the estimate is not given: on the
/// development photographs at sigma 50 (12-26% covered) it was 0.5-4.2 dB high; at sigma 25
/// (49-53% covered) within 0.26 dB.
const MIN_COVERED: f64 = 0.3;

/// 10 / ln 10: decibels per unit of relative change, to first order.
const DB_PER_RELATIVE: f64 = 4.342_944_819_032_518;

/// The second pass's input: the image plus `step` times a fixed +-1 pattern drawn from `seed`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Probe {
    /// In the image's grey levels.
    pub step: f64,
    /// Seed of the probe's random signs, fixed so that a run's estimate repeats.
    pub seed: u64,
}

/// Step over the image's mean noise std. The patch-graph method thresholds, so it is not smooth
/// at fine scales: measured on brick at sigma 25, its divergence per sample is 0.046 at a step of
/// 0.001, 0.063 at 0.01, then flat (0.0698 at 0.03, 0.0702 at 0.1), and the estimate is within
/// 0.2 dB of the truth from 0.03 on; the pixel-graph method's is the same from 0.001 to 0.1.
const STEP_PER_NOISE: f64 = 0.05;

impl Probe {
    /// The probe for a prepared run: a step of 0.05 of the mean noise std.
    pub fn for_run(p: &Prepared) -> Probe {
        Probe { step: STEP_PER_NOISE * p.model.noise.mean_level.max(1e-6), seed: 0x0005_3055_e57e }
    }

    /// The +-1 pattern: one sign per sample, channel after channel (a SplitMix64 bit each).
    fn signs(&self, n: usize) -> Vec<f32> {
        let mut rng = crate::synth::Rng::new(self.seed);
        let mut out = Vec::with_capacity(n);
        while out.len() < n {
            let bits = rng.next_u64();
            out.extend((0..64.min(n - out.len())).map(|k| if (bits >> k) & 1 == 1 { 1.0f32 } else { -1.0 }));
        }
        out
    }

    /// The probe's input. The caller's image is not touched.
    pub fn perturbed(&self, img: &Image) -> Image {
        let n = img.width * img.height;
        let signs = self.signs(n * img.channels.len());
        let step = self.step as f32;
        let channels = img
            .channels
            .iter()
            .zip(signs.chunks(n))
            .map(|(c, s)| Plane {
                width: c.width,
                height: c.height,
                data: c.data.iter().zip(s).map(|(v, b)| v + step * b).collect(),
            })
            .collect();
        img.with_channels(channels)
    }
}

fn too_clipped(share: f64) -> String {
    format!(
        "too much of the image is cut off at black or white for the estimate: only {:.0}% of the pixels are far enough from it",
        100.0 * share
    )
}

/// Why the model rules the estimate out (correlated noise, no noise), without looking at the
/// pixels; None when it does not.
fn model_rules_out(p: &Prepared) -> Option<String> {
    if p.model.noise.planes.iter().any(|q| q.spectrum.is_some()) {
        return Some(
            "the noise is spatially correlated, and the estimate holds only for noise that is independent from pixel to pixel"
                .into(),
        );
    }
    (p.model.sigma <= 0.0).then(|| "there is no noise to remove at sigma 0".into())
}

/// Why no estimate can be made for a prepared run of `img`, in a sentence; None when it can.
/// (Checked before the second pass, so a pass that cannot give an estimate is not run.)
pub fn not_applicable(img: &Image, p: &Prepared) -> Option<String> {
    if let Some(why) = model_rules_out(p) {
        return Some(why);
    }
    if p.model.clip.is_some() {
        let top = f64::from(img.max_value());
        let total = (img.width * img.height * img.channels.len()).max(1);
        let away: usize = img.channels.iter().map(|c| near_clipped(c, top).iter().filter(|x| !**x).count()).sum();
        let share = away as f64 / total as f64;
        if share < MIN_COVERED {
            return Some(too_clipped(share));
        }
    }
    None
}

/// The noise variance at each pixel in the image's grey levels, from the prepared model: sigma^2
/// for white noise, sigma^2 / f'(y)^2 through a stabiliser f (the delta method), with sigma = 1
/// for photon noise (its transform gives unit variance by construction).
#[derive(Clone, Debug)]
pub struct PixelVariance {
    sigma: f64,
    stabilisers: Option<Vec<Stabiliser>>,
    top: f64,
}

impl PixelVariance {
    /// The per-pixel noise variance of a prepared run; `top` is the image's largest sample value.
    pub fn of(p: &Prepared, top: f64) -> Self {
        PixelVariance { sigma: p.model.sigma, stabilisers: p.model.stabilisers.clone(), top }
    }

    /// White noise of std `sigma` everywhere.
    pub fn white(sigma: f64, top: f64) -> Self {
        PixelVariance { sigma, stabilisers: None, top }
    }

    fn at(&self, channel: usize, y: f64) -> f64 {
        // Photon noise: the model's own variance, gain (y - offset) + read^2 (unit variance after
        // its transform), not the blind level measured after the transform. Measured on 16-bit
        // frames with gain, offset and read noise given: within 0.25 dB at a peak of 300
        // photons, against 0.9-2.3 dB high with the blind level.
        let s2 = if matches!(self.stabilisers.as_deref(), Some([Stabiliser::Photon(_), ..])) {
            1.0
        } else {
            self.sigma * self.sigma
        };
        match self.stabilisers.as_ref().and_then(|s| s.get(channel)) {
            None => s2,
            Some(st) => {
                let h = self.top * 1e-3;
                let y = y.clamp(h, self.top - h);
                let slope = (st.forward(y + h) - st.forward(y - h)) / (2.0 * h);
                s2 / (slope * slope).max(1e-300)
            }
        }
    }

    fn heteroscedastic(&self) -> bool {
        matches!(self.stabilisers.as_deref(), Some([Stabiliser::Photon(_) | Stabiliser::Curve(_), ..]))
    }
}

/// The estimate for one result, in the image's grey levels.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct ErrorEstimate {
    /// False when the estimate does not hold for this image; `note` says why.
    pub applies: bool,
    /// Why it does not apply, or what it assumes.
    pub note: Option<String>,
    /// Estimated mean squared error against the unknown clean image, over all colour channels.
    pub mse: Option<f64>,
    /// Estimated PSNR over the image's range; None when the estimated error is not above zero.
    pub psnr: Option<f64>,
    /// One standard deviation of the estimate in dB (noise of the estimate itself, approximate).
    pub psnr_spread: Option<f64>,
    /// Expected PSNR of the noisy input (its mean noise variance).
    pub input_psnr: Option<f64>,
    /// Estimated PSNR gain of the result over the input.
    pub gain_db: Option<f64>,
    /// How far the estimate moves, in dB, for each 1% that the noise level used is too high.
    pub per_sigma_percent_db: Option<f64>,
    /// The run's divergence per sample over the noise variance: how much of a pixel's own noise
    /// stays in its result on average (1 for no denoising, 0 for a constant).
    pub kept_noise: Option<f64>,
    /// The share of the samples the estimate covers (all, unless the image is clipped).
    pub covered: f64,
    /// True when the noise level was estimated, not given: the PSNR then depends on it.
    pub level_estimated: bool,
    /// The peak value the PSNR is taken against.
    pub range: f64,
}

impl ErrorEstimate {
    /// No estimate, with the reason why (`note`).
    pub fn none(note: String, range: f64) -> Self {
        ErrorEstimate {
            applies: false,
            note: Some(note),
            mse: None,
            psnr: None,
            psnr_spread: None,
            input_psnr: None,
            gain_db: None,
            per_sigma_percent_db: None,
            kept_noise: None,
            covered: 0.0,
            level_estimated: false,
            range,
        }
    }

    /// The same estimate for data whose working grey level is `scale` units of the file (PSNR
    /// and gains do not change).
    pub fn in_units(&mut self, scale: f64) {
        self.mse = self.mse.map(|m| m * scale * scale);
        self.range *= scale;
    }
}

/// Samples with a clipped input sample (at 0 or the top) within [`CUT_REACH`] pixels, their own
/// sample not counted: their value is likely near the end too, whatever the result says (a strong
/// smoothing can carry a result far from its pixel's value). Choosing pixels by their own noise
/// would bias them (Stein's lemma holds given the other pixels' noise, not given one's own).
fn near_clipped(y: &Plane, top: f64) -> Vec<bool> {
    let cut: Vec<f32> =
        y.data.iter().map(|v| if f64::from(*v) <= 0.0 || f64::from(*v) >= top { 1.0 } else { 0.0 }).collect();
    let area = ((2 * CUT_REACH + 1) * (2 * CUT_REACH + 1)) as f32;
    // Window counts (borders repeat their edge samples); 0.5 absorbs the float sums' rounding.
    box_mean(&cut, y.width, y.height, CUT_REACH).iter().zip(&cut).map(|(m, own)| m * area - own > 0.5).collect()
}

/// With an estimated noise level the estimate moves by `per_sigma_percent_db` for each 1% the
/// level is off (measured: the blind level of the development photographs is 0.2-6% high, and
/// the estimated PSNR 0.3-2 dB high with it, while the differences between two settings' errors
/// stay within about 20% of the true ones). Past this many dB per 1% no PSNR is given.
const MAX_DB_PER_SIGMA_PERCENT: f64 = 2.0;

impl ErrorEstimate {
    /// For runs whose noise level was estimated: marked so, and no PSNR where a 1% error in the
    /// level would move it by more than [`MAX_DB_PER_SIGMA_PERCENT`]; the error itself stays,
    /// for comparing settings.
    pub fn for_estimated_level(mut self) -> Self {
        self.level_estimated = true;
        if self.applies && self.per_sigma_percent_db.is_none_or(|d| d.abs() > MAX_DB_PER_SIGMA_PERCENT) {
            let said = "he result is so close to the noise level that its PSNR cannot be told without knowing the noise level to better than 1%: give sigma for a PSNR; the error still ranks settings";
            // A second sentence after an earlier note (which ends with a full stop) starts with a capital.
            self.note = Some(match self.note.as_deref() {
                Some(n) => format!("{n} T{said}."),
                None => format!("t{said}"),
            });
            self.psnr = None;
            self.gain_db = None;
            self.psnr_spread = None;
        }
        self
    }
}

fn psnr(mse: f64, range: f64) -> Option<f64> {
    (mse > 0.0).then(|| 10.0 * (range * range / mse).log10())
}

/// SURE from the input `noisy`, its result `result` = f(y) and the probe's result `probed` =
/// f(y + step b), all in the image's grey levels; `clipped` when the model corrects clipped noise.
pub fn estimate(
    noisy: &Image,
    result: &Image,
    probed: &Image,
    probe: &Probe,
    var: &PixelVariance,
    clipped: bool,
) -> ErrorEstimate {
    let range = f64::from(noisy.max_value());
    let n = noisy.width * noisy.height;
    let signs = probe.signs(n * noisy.channels.len());
    // Per pixel: residual^2 - v, and v b (f(y + eps b) - f(y)) / eps, summed in f64.
    let (mut residual, mut variance, mut divergence, mut variance_sq, mut div_sq) = (0.0, 0.0, 0.0, 0.0, 0.0);
    let mut covered = 0usize;
    for (c, ((y, f), g)) in noisy.channels.iter().zip(&result.channels).zip(&probed.channels).enumerate() {
        let b = &signs[c * n..(c + 1) * n];
        let near_cut = if clipped { near_clipped(y, range) } else { Vec::new() };
        for i in 0..n {
            let (yi, fi, gi) = (f64::from(y.data[i]), f64::from(f.data[i]), f64::from(g.data[i]));
            let v = var.at(c, fi);
            // Stein's lemma holds pixel by pixel for each pixel whose own noise is Gaussian, so
            // pixels near a clipped end are left out and the estimate covers the rest.
            if clipped && (near_cut[i] || fi < CLIP_MARGIN * v.sqrt() || fi > range - CLIP_MARGIN * v.sqrt()) {
                continue;
            }
            covered += 1;
            let t = v * f64::from(b[i]) * (gi - fi) / probe.step;
            residual += (fi - yi) * (fi - yi);
            variance += v;
            variance_sq += v * v;
            divergence += t;
            div_sq += t * t;
        }
    }
    let count = covered.max(1) as f64;
    let total = residual - variance + 2.0 * divergence;
    let mse = total / count;
    // The estimate's own noise: n'n - sum v about its mean (the part of SURE no probe removes),
    // and the probe's, each term taken as independent (approximate).
    let spread = (2.0 * variance_sq + 4.0 * (div_sq - divergence * divergence / count).max(0.0)).sqrt();
    // A noise std 1% high scales every variance by 1.01^2.
    let sensitivity_total = (-variance + 2.0 * divergence) * (1.01f64.powi(2) - 1.0);
    let mut notes: Vec<&str> = Vec::new();
    if var.heteroscedastic() {
        notes.push("the noise is taken as Gaussian with the noise model's brightness-dependent variance at each pixel (an approximation)");
    }
    let share = covered as f64 / (n * noisy.channels.len()).max(1) as f64;
    let clipped_note = format!(
        "it covers the {:.0}% of the pixels away from black and white, where the noise is not cut off",
        100.0 * share
    );
    if clipped {
        notes.push(&clipped_note);
    }
    if share < MIN_COVERED {
        return ErrorEstimate::none(too_clipped(share), range);
    }
    let input_psnr = psnr(variance / count, range);
    let out_psnr = psnr(mse, range);
    ErrorEstimate {
        applies: true,
        note: (!notes.is_empty()).then(|| format!("{}.", notes.join("; "))),
        mse: Some(mse),
        psnr: out_psnr,
        psnr_spread: (total > 0.0).then(|| DB_PER_RELATIVE * spread / total),
        input_psnr,
        gain_db: out_psnr.zip(input_psnr).map(|(a, b)| a - b),
        per_sigma_percent_db: (total > 0.0 && total + sensitivity_total > 0.0)
            .then(|| -10.0 * ((total + sensitivity_total) / total).log10()),
        kept_noise: Some(divergence / variance.max(1e-300)),
        covered: share,
        level_estimated: false,
        range,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::planes::BitDepth;

    fn flat(v: f32, w: usize, h: usize) -> Image {
        Image {
            width: w,
            height: h,
            depth: BitDepth::Eight,
            channels: vec![Plane { width: w, height: h, data: vec![v; w * h] }],
            alpha: None,
        }
    }

    /// Closed form: the identity run f(y) = y has divergence N and error exactly the noise, so
    /// SURE gives sum v / N = sigma^2 (residual 0, -N sigma^2 + 2 N sigma^2).
    #[test]
    fn identity_run_is_estimated_at_the_noise_level() {
        let noisy = flat(100.0, 64, 64);
        let probe = Probe { step: 0.1, seed: 7 };
        let probed = probe.perturbed(&noisy);
        let var = PixelVariance { sigma: 5.0, stabilisers: None, top: 255.0 };
        let e = estimate(&noisy, &noisy, &probed, &probe, &var, false);
        assert!((e.mse.unwrap() - 25.0).abs() < 1e-3, "{e:?}");
        assert!(e.gain_db.unwrap().abs() < 1e-3, "{e:?}");
    }

    /// Closed form: a constant run (f = 0 gain) has divergence 0; SURE is ||c - y||^2 / N - sigma^2.
    #[test]
    fn constant_run_has_no_divergence() {
        let noisy = flat(100.0, 32, 32);
        let result = flat(90.0, 32, 32);
        let probe = Probe { step: 0.1, seed: 3 };
        let var = PixelVariance { sigma: 4.0, stabilisers: None, top: 255.0 };
        let e = estimate(&noisy, &result, &result, &probe, &var, false);
        assert!((e.mse.unwrap() - (100.0 - 16.0)).abs() < 1e-6, "{e:?}");
    }

    #[test]
    fn the_probe_leaves_the_input_alone_and_is_balanced() {
        let img = flat(10.0, 100, 100);
        let p = Probe { step: 0.5, seed: 11 };
        let q = p.perturbed(&img);
        assert!(img.channels[0].data.iter().all(|v| *v == 10.0));
        let sum: f64 = q.channels[0].data.iter().map(|v| f64::from(*v) - 10.0).sum();
        // +-0.5 each: the sum of 10^4 fair signs has std 0.5 * 100 = 50 (binomial).
        assert!(sum.abs() < 4.0 * 50.0, "{sum}");
        assert!(q.channels[0].data.iter().all(|v| (*v - 10.0).abs() == 0.5));
    }
}
