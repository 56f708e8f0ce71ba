//! How the noise fit reads grainy noise: every opponent plane of a colour picture carries a colour
//! sensor's noise, so texture that raises the luminance alone is not taken for noise; a
//! brightness curve measured on the fine grain is not used for grainy noise.

use patchgraph::pipeline;
use patchgraph::planes::{BitDepth, Image, Plane};
use patchgraph::settings::Settings;
use patchgraph::synth::Rng;

/// Grainy noise: white N(0, 1) summed over 3 x 3 pixels (std 3), times `std` / 3.
fn grainy(w: usize, h: usize, std: f64, rng: &mut Rng) -> Vec<f64> {
    let white: Vec<f64> = (0..(w + 2) * (h + 2)).map(|_| rng.normal()).collect();
    (0..w * h)
        .map(|i| {
            let (x, y) = (i % w, i / w);
            let s: f64 = (0..9).map(|k| white[(y + k / 3) * (w + 2) + x + k % 3]).sum();
            s * std / 3.0
        })
        .collect()
}

/// A colour picture: `base` (per pixel, the same in R, G and B) plus grainy noise of `std` drawn
/// independently in each channel, as a colour sensor's is.
fn picture(w: usize, h: usize, base: &dyn Fn(usize, usize) -> f64, std: f64, seed: u64) -> Image {
    let mut rng = Rng::new(seed);
    let channels = [0.9, 1.0, 1.1]
        .iter()
        .map(|tint| {
            let n = grainy(w, h, std, &mut rng);
            Plane::from_fn(w, h, |x, y| (tint * base(x, y) + n[y * w + x]).round().clamp(0.0, 255.0) as f32)
        })
        .collect();
    Image { width: w, height: h, depth: BitDepth::Eight, channels, alpha: None }
}

/// Fine texture everywhere (no flat area): 40 plane waves of random frequency, direction and
/// phase, amplitude 4 each, about mid-grey.
fn texture() -> impl Fn(usize, usize) -> f64 {
    let mut rng = Rng::new(11);
    let waves: Vec<(f64, f64, f64)> =
        (0..40).map(|_| (rng.range(0.3, 1.2), rng.range(0.0, 6.3), rng.range(0.0, 6.3))).collect();
    move |x: usize, y: usize| {
        let s: f64 = waves.iter().map(|(f, a, p)| (f * (x as f64 * a.cos() + y as f64 * a.sin()) + p).sin()).sum();
        128.0 + 4.0 * s
    }
}

fn levels(img: &Image) -> (Vec<f64>, String) {
    let fit = pipeline::fit_noise(img, &Settings::default()).unwrap();
    (fit.report.planes.iter().map(|p| p.level).collect(), fit.report.sentence)
}

#[test]
fn independent_channel_noise_reads_about_equal_in_every_opponent_plane() {
    // Closed form: the opponent transform is orthonormal, so noise of one spectrum drawn
    // independently in R, G and B has the same spectrum in each opponent plane. On a smooth
    // scene the three levels agree (within 20%) and the luminance is not limited.
    let img = picture(256, 256, &|x, y| 80.0 + 0.3 * x as f64 + 0.2 * y as f64, 6.0, 3);
    let (l, sentence) = levels(&img);
    assert!(l[0] / l[1] < 1.2 && l[1] / l[0] < 1.2 && l[0] / l[2] < 1.2 && l[2] / l[0] < 1.2, "{l:?}");
    assert!(!sentence.contains("fine texture"), "{sentence}");
}

#[test]
fn grey_texture_filling_the_picture_is_not_read_as_luminance_noise() {
    // Fine grey texture everywhere (no flat area), low grainy noise of std 3 per channel: the
    // luminance plane's spectrum holds the texture, the colour planes only the noise, so the
    // luminance level is held to 3.5 times the colour noise (the rule), and the sentence says what
    // was measured. Invariant: the result is closer to the clean picture than the input is
    // (reading the texture as noise, at 10 times the true level, made it worse than the input).
    let base = texture();
    let img = picture(256, 256, &base, 3.0, 5);
    let (l, sentence) = levels(&img);
    let chroma = (l[1] * l[2]).sqrt();
    assert!(l[0] <= 3.5 * chroma * 1.001, "{l:?}");
    assert!(sentence.contains("fine texture"), "{sentence}");
    let clean = picture(256, 256, &base, 0.0, 5);
    let out = pipeline::denoise(&img, &Settings::default(), &patchgraph::NoProgress).unwrap().image;
    let mse = |a: &Image| {
        let pairs = a.channels.iter().zip(&clean.channels).flat_map(|(p, q)| p.data.iter().zip(&q.data));
        pairs.map(|(u, v)| f64::from(u - v).powi(2)).sum::<f64>() / (3 * 256 * 256) as f64
    };
    println!("{l:?} result {} input {}", mse(&out), mse(&img));
    assert!(mse(&out) < mse(&img), "result {} input {}", mse(&out), mse(&img));
}

#[test]
fn grainy_noise_that_changes_with_brightness_is_filtered_at_one_level() {
    // A grey ramp with grainy noise whose std falls from 10 to 2 with brightness (as a tone curve makes it): the fine-grain
    // curve sees the growth, but for grainy noise one level is used (the rule, DEVELOPERS.md
    // "Noise spectrum"; the bench's grey camera JPEGs chose it) and the sentence says why.
    // Invariant: the result is closer to the clean ramp than the input.
    let (w, h) = (256usize, 256usize);
    let mut rng = Rng::new(17);
    let n = grainy(w, h, 1.0, &mut rng);
    let clean = |x: usize, _y: usize| 30.0 + 0.8 * x as f64;
    let std = |x: usize| 10.0 - 8.0 * x as f64 / w as f64;
    let noisy = Plane::from_fn(w, h, |x, y| (clean(x, y) + std(x) * n[y * w + x]).round().clamp(0.0, 255.0) as f32);
    let img = Image { width: w, height: h, depth: BitDepth::Eight, channels: vec![noisy.clone()], alpha: None };
    let fit = pipeline::fit_noise(&img, &Settings::default()).unwrap();
    assert_eq!(fit.report.model, "correlated Gaussian", "{}", fit.report.sentence);
    assert!(fit.report.sentence.contains("what compression left"), "{}", fit.report.sentence);
    let out = pipeline::denoise(&img, &Settings::default(), &patchgraph::NoProgress).unwrap().image;
    let mse = |p: &Plane| {
        (0..w * h).map(|i| (f64::from(p.data[i]) - clean(i % w, i / w)).powi(2)).sum::<f64>() / (w * h) as f64
    };
    assert!(mse(&out.channels[0]) < 0.5 * mse(&noisy), "result {} input {}", mse(&out.channels[0]), mse(&noisy));
}

#[test]
fn grey_texture_filling_a_grey_picture_is_held_to_its_fine_grain() {
    // The same texture in a grey picture, which has no colour planes to check against: the
    // grainy level is held to 10 times the fine grain of the calmest blocks (the rule,
    // FINE_GRAIN_LIMIT in pipeline.rs), the level used is the limited one, and the sentence says
    // what was measured. Known gap: this 3 x 3 box-summed noise keeps little fine grain, so the
    // limit (7.7 for a true 3) still over-reads it and the result is worse than the input; the
    // bench's camera JPEGs made grey keep more (there the limit brings the tissue from 7 dB
    // below its input to 1.6 below).
    let base = texture();
    let n = grainy(256, 256, 3.0, &mut Rng::new(5));
    let grey = |noise: f64| Image {
        width: 256,
        height: 256,
        depth: BitDepth::Eight,
        channels: vec![Plane::from_fn(256, 256, |x, y| {
            (base(x, y) + noise * n[y * 256 + x]).round().clamp(0.0, 255.0) as f32
        })],
        alpha: None,
    };
    let (l, sentence) = levels(&grey(1.0));
    let taken = |word: &str| -> f64 {
        let at = sentence.find(word).map(|i| i + word.len()).unwrap_or(sentence.len());
        sentence[at..].split([' ', ',']).find_map(|t| t.parse().ok()).unwrap_or(f64::NAN)
    };
    let (measured, used) = (taken("measured "), taken("taken as "));
    assert!(sentence.contains("times its fine grain"), "{sentence}");
    assert!(used < measured && (used - l[0]).abs() <= 0.05 + 0.01 * l[0], "{l:?} {sentence}");
}

#[test]
fn a_grey_picture_saved_as_colour_gets_the_sigma_of_its_grey_original() {
    // Invariant: the opponent transform is orthonormal, so the same grainy grey picture stored
    // as one channel or as three equal channels has the same noise per channel, and a run's sigma
    // (the root mean square over the method planes) is the same for both, within rounding of the
    // fits. Its noise is all luminance (sqrt 3 times a channel's, the colour planes empty): the
    // mean of the planes' levels read a third of the luminance, about 0.58 of the true level.
    let (w, h) = (256usize, 256usize);
    let n = grainy(w, h, 6.0, &mut Rng::new(23));
    let grey = Plane::from_fn(w, h, |x, y| (90.0 + 0.25 * x as f64 + 0.15 * y as f64 + n[y * w + x]).round() as f32);
    let one = Image { width: w, height: h, depth: BitDepth::Eight, channels: vec![grey.clone()], alpha: None };
    let three = Image { channels: vec![grey.clone(), grey.clone(), grey], ..one.clone() };
    let (a, b) = (
        pipeline::fit_noise(&one, &Settings::default()).unwrap(),
        pipeline::fit_noise(&three, &Settings::default()).unwrap(),
    );
    assert_eq!(b.report.model, "correlated Gaussian", "{}", b.report.sentence);
    assert!((b.sigma / a.sigma - 1.0).abs() < 0.02, "one channel {} three {}", a.sigma, b.sigma);
    // The run's sigma is the report's level (one level, no brightness dependence).
    assert!((b.sigma / b.report.mean_level - 1.0).abs() < 1e-9, "{} {}", b.sigma, b.report.mean_level);
    // And near the noise drawn: std 6 (a measured figure of the fit's accuracy, 15%).
    assert!((b.sigma / 6.0 - 1.0).abs() < 0.15, "{}", b.sigma);
}
