//! Where a result removed structure, not only noise: the local Pearson correlation, over 9 x 9
//! windows, between the residual (input - result) and the result's own detail (the result minus
//! its Gaussian blur of std 1.5). Removed detail is a weakened copy of the detail that stayed, so
//! the two correlate where detail went; a residual of pure noise correlates with nothing. (The
//! same idea as the global residual-edge check, made local; the window and the threshold are
//! ours: under independence a correlation over 81 samples has std about 1/9, and the detail's own
//! smoothness widens that, so 0.4 is several stds out.)

use crate::planes::{box_mean, gaussian_blur, Image, Plane};

const RADIUS: usize = 4;
/// Local correlations above this mark a pixel as "structure removed".
pub const FLAG: f32 = 0.4;

/// Channel mean of an image as one plane.
fn mean_plane(img: &Image) -> Plane {
    let n = img.channels.len() as f32;
    Plane::from_fn(img.width, img.height, |x, y| img.channels.iter().map(|c| c.get(x, y)).sum::<f32>() / n)
}

/// Local detail weaker than this many noise stds is not looked at: a result keeps a little of
/// each pixel's noise, and that leftover, its only "detail" in flat areas, correlates with the
/// residual because both come from the same noise (a leftover of 30% of the noise has a local
/// std near 0.25 sigma after the high-pass).
const MIN_DETAIL: f64 = 0.5;

/// The local correlation map, values in [-1, 1]; 0 where the result's detail is weaker than
/// [`MIN_DETAIL`] x `sigma` (the noise std in the image's grey levels) or the residual is flat.
pub fn map(noisy: &Image, result: &Image, sigma: f64) -> Plane {
    let (w, h) = (noisy.width, noisy.height);
    let y = mean_plane(noisy);
    let f = mean_plane(result);
    let blur = gaussian_blur(&f, 1.5);
    let r: Vec<f32> = y.data.iter().zip(&f.data).map(|(a, b)| a - b).collect();
    drop(y);
    let d: Vec<f32> = f.data.iter().zip(&blur.data).map(|(a, b)| a - b).collect();
    drop((f, blur));
    let prod = |a: &[f32], b: &[f32]| -> Vec<f32> { a.iter().zip(b).map(|(x, y)| x * y).collect() };
    let mean = |v: &[f32]| box_mean(v, w, h, RADIUS);
    let (mr, md) = (mean(&r), mean(&d));
    let (mrr, mdd, mrd) = (mean(&prod(&r, &r)), mean(&prod(&d, &d)), mean(&prod(&r, &d)));
    let min_var = (MIN_DETAIL * sigma).powi(2);
    let data = (0..w * h)
        .map(|i| {
            let (mr, md) = (f64::from(mr[i]), f64::from(md[i]));
            let cov = f64::from(mrd[i]) - mr * md;
            let vr = f64::from(mrr[i]) - mr * mr;
            let vd = f64::from(mdd[i]) - md * md;
            if vd <= min_var || vr <= 1e-6 || vd <= 1e-6 {
                0.0
            } else {
                (cov / (vr * vd).sqrt()).clamp(-1.0, 1.0) as f32
            }
        })
        .collect();
    Plane { width: w, height: h, data }
}

/// The share of pixels flagged (correlation above [`FLAG`]).
pub fn flagged_share(map: &Plane) -> f64 {
    map.data.iter().filter(|v| **v > FLAG).count() as f64 / map.len().max(1) as f64
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::planes::BitDepth;
    use crate::synth::Rng;

    fn grey(p: Plane) -> Image {
        Image { width: p.width, height: p.height, depth: BitDepth::Eight, channels: vec![p], alpha: None }
    }

    /// Stripes of period 6 with white noise of std 10 on a flat half: the clean image as the
    /// "result" leaves a residual of pure noise, and a result keeping 30% of the noise leaves a
    /// leftover (few pixels flagged either way); a blur that removes the stripes leaves them in the
    /// residual, correlated with what stayed (most pixels flagged). Invariants, not tuned values.
    #[test]
    fn noise_removal_is_not_flagged_and_removed_stripes_are() {
        let (w, h) = (96, 96);
        let clean = Plane::from_fn(w, h, |x, y| {
            if y >= h / 2 {
                120.0
            } else if (x / 3) % 2 == 0 {
                80.0
            } else {
                160.0
            }
        });
        let mut rng = Rng::new(9);
        let noisy =
            Plane { data: clean.data.iter().map(|v| v + (10.0 * rng.normal()) as f32).collect(), ..clean.clone() };
        let share = |result: Plane| flagged_share(&map(&grey(noisy.clone()), &grey(result), 10.0));
        let good = share(clean.clone());
        let blurred = share(gaussian_blur(&clean, 1.2));
        // A result that kept 30% of the noise: its leftover is not structure.
        let leftover = share(Plane {
            data: clean.data.iter().zip(&noisy.data).map(|(c, y)| c + 0.3 * (y - c)).collect(),
            ..clean.clone()
        });
        assert!(good < 0.02, "pure-noise residual flagged on {good}");
        assert!(leftover < 0.02, "leftover noise flagged on {leftover}");
        assert!(blurred > 0.4, "removed stripes flagged on only {blurred}");
        // The identity result leaves no residual: nothing flagged.
        assert_eq!(share(noisy.clone()), 0.0);
    }
}
