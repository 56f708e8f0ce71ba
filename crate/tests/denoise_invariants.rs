//! Invariants any denoiser must keep, checked on the pixel-graph method through the pipeline.

use patchgraph::planes::{BitDepth, Image, Plane};
use patchgraph::settings::{GraphFilter, Method, Settings, Sigma};
use patchgraph::{pipeline, NoProgress};

fn grey(p: Plane) -> Image {
    Image { width: p.width, height: p.height, depth: BitDepth::Eight, channels: vec![p], alpha: None }
}

fn with_sigma(sigma: f64, filter: GraphFilter) -> Settings {
    let mut s = Settings { sigma: Sigma::Value(sigma), method: Method::PixelGraph, ..Settings::default() };
    s.pixel_graph.filter = filter;
    s
}

/// Deterministic pseudo-noise with std about `sigma` (sum of 12 uniforms, minus 6).
fn noise(n: usize, sigma: f32, seed: u64) -> Vec<f32> {
    let mut s = seed;
    (0..n)
        .map(|_| {
            let mut acc = 0.0f32;
            for _ in 0..12 {
                s = s.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
                acc += (s >> 40) as f32 / (1u64 << 24) as f32;
            }
            sigma * (acc - 6.0)
        })
        .collect()
}

#[test]
fn a_constant_image_comes_back_constant() {
    // Invariant: constants are in the Laplacian's null space, so every graph filter keeps them.
    for filter in [GraphFilter::Tikhonov, GraphFilter::Heat] {
        let img = grey(Plane::from_fn(40, 30, |_, _| 117.0));
        let out = pipeline::denoise(&img, &with_sigma(20.0, filter), &NoProgress).unwrap();
        assert!(out.image.channels[0].data.iter().all(|v| (v - 117.0).abs() < 1e-3));
    }
}

#[test]
fn sigma_zero_returns_the_image_unchanged() {
    // Invariant: no noise, nothing to remove.
    let img = grey(Plane::from_fn(33, 21, |x, y| ((x * 7 + y * 13) % 256) as f32));
    let out = pipeline::denoise(&img, &with_sigma(0.0, GraphFilter::Tikhonov), &NoProgress).unwrap();
    assert_eq!(out.image, img);
}

#[test]
fn an_edge_between_flat_regions_is_not_blurred_across() {
    // Invariant of the cut graph: no edge joins the two sides of a 100-level step (tau = 2 sigma =
    // 20), so each side is smoothed on its own and the step keeps its full height.
    let (w, h) = (48usize, 32usize);
    let n = noise(w * h, 5.0, 9);
    let noisy = Plane::from_fn(w, h, |x, y| if x < w / 2 { 60.0 } else { 160.0 } + n[y * w + x]);
    for filter in [GraphFilter::Tikhonov, GraphFilter::Heat] {
        let out = pipeline::denoise(&grey(noisy.clone()), &with_sigma(10.0, filter), &NoProgress).unwrap();
        let d = &out.image.channels[0];
        let col_mean = |x: usize| (0..h).map(|y| f64::from(d.get(x, y))).sum::<f64>() / h as f64;
        let step = col_mean(w / 2) - col_mean(w / 2 - 1);
        assert!(step > 95.0, "{filter:?}: step across the edge shrank to {step}");
        // And the flat sides really were smoothed (the noise std of 5 went down).
        let side: Vec<f64> =
            (0..h).flat_map(|y| (4..w / 2 - 4).map(move |x| (x, y))).map(|(x, y)| f64::from(d.get(x, y))).collect();
        let m = side.iter().sum::<f64>() / side.len() as f64;
        let sd = (side.iter().map(|v| (v - m).powi(2)).sum::<f64>() / side.len() as f64).sqrt();
        assert!(sd < 3.0, "{filter:?}: flat side std {sd}");
    }
}

#[test]
fn the_input_image_is_not_altered_and_alpha_passes_through() {
    // Invariant: the run reads the image; alpha samples come back byte for byte.
    let (w, h) = (20usize, 16usize);
    let n = noise(w * h * 3, 8.0, 4);
    let ch = |k: usize| Plane::from_fn(w, h, |x, y| 100.0 + 20.0 * k as f32 + n[k * w * h + y * w + x]);
    let alpha: Vec<u16> = (0..w * h).map(|i| (i * 211 % 65536) as u16).collect();
    let img = Image {
        width: w,
        height: h,
        depth: BitDepth::Sixteen,
        channels: vec![ch(0), ch(1), ch(2)],
        alpha: Some(patchgraph::planes::Alpha::Sixteen(alpha)),
    };
    let copy = img.clone();
    let out = pipeline::denoise(&img, &Settings::default(), &NoProgress).unwrap();
    assert_eq!(img, copy);
    assert_eq!(out.image.alpha, img.alpha);
    assert_eq!(out.image.channels.len(), 3);
}

fn patch(sigma: f64, tile: u32) -> Settings {
    let mut s = Settings { sigma: Sigma::Value(sigma), method: Method::PatchGraph, ..Settings::default() };
    s.patch_graph.tile_size = tile;
    s
}

#[test]
fn patch_graph_keeps_constants_and_sigma_zero() {
    // Invariants: a constant image has all its energy in the kept DC coefficient and comes back
    // constant; sigma 0 returns the input as it is.
    let img = grey(Plane::from_fn(40, 36, |_, _| 88.0));
    let out = pipeline::denoise(&img, &patch(15.0, 64), &NoProgress).unwrap();
    // (Tolerance 0.01: the Wiener gain of the DC coefficient, b^2 / (b^2 + sigma^2), is 1 - 3e-5 here.)
    assert!(out.image.channels[0].data.iter().all(|v| (v - 88.0).abs() < 1e-2));
    let img = grey(Plane::from_fn(33, 21, |x, y| ((x * 7 + y * 13) % 256) as f32));
    assert_eq!(pipeline::denoise(&img, &patch(0.0, 64), &NoProgress).unwrap().image, img);
}

#[test]
fn patch_graph_tiles_give_the_one_pass_result() {
    // Invariant of the tiled design: accumulators of any tiling sum to the same output, up to
    // float rounding (well under 0.01 grey level).
    let (w, h) = (70usize, 53usize);
    let n = noise(w * h * 3, 12.0, 21);
    let ch = |k: usize| {
        Plane::from_fn(
            w,
            h,
            |x, y| if (x / 9 + y / 7) % 2 == 0 { 80.0 } else { 150.0 } + 10.0 * k as f32 + n[k * w * h + y * w + x],
        )
    };
    let img = Image { width: w, height: h, depth: BitDepth::Eight, channels: vec![ch(0), ch(1), ch(2)], alpha: None };
    let one = pipeline::denoise(&img, &patch(12.0, 4096), &NoProgress).unwrap();
    let tiled = pipeline::denoise(&img, &patch(12.0, 16), &NoProgress).unwrap();
    for (a, b) in one.image.channels.iter().zip(&tiled.image.channels) {
        let worst = a.data.iter().zip(&b.data).map(|(p, q)| (p - q).abs()).fold(0.0f32, f32::max);
        assert!(worst < 1e-2, "tiles changed the result by {worst}");
    }
}

#[test]
fn patch_graph_removes_noise_and_keeps_the_step() {
    // The step edge of the pixel-graph test: 100 levels must survive, the flat sides get smoother.
    let (w, h) = (48usize, 40usize);
    let n = noise(w * h, 10.0, 5);
    let noisy = Plane::from_fn(w, h, |x, y| if x < w / 2 { 60.0 } else { 160.0 } + n[y * w + x]);
    let out = pipeline::denoise(&grey(noisy), &patch(10.0, 64), &NoProgress).unwrap();
    let d = &out.image.channels[0];
    let col_mean = |x: usize| (0..h).map(|y| f64::from(d.get(x, y))).sum::<f64>() / h as f64;
    assert!(col_mean(w / 2) - col_mean(w / 2 - 1) > 95.0);
    let side: Vec<f64> =
        (0..h).flat_map(|y| (2..w / 2 - 2).map(move |x| (x, y))).map(|(x, y)| f64::from(d.get(x, y))).collect();
    let m = side.iter().sum::<f64>() / side.len() as f64;
    let sd = (side.iter().map(|v| (v - m).powi(2)).sum::<f64>() / side.len() as f64).sqrt();
    assert!(sd < 4.0, "flat side std {sd} (noise was 10)");
}

#[test]
fn images_smaller_than_a_patch_get_a_clear_error() {
    let img = grey(Plane::from_fn(5, 5, |_, _| 1.0));
    let e = pipeline::denoise(&img, &patch(10.0, 64), &NoProgress).err().unwrap();
    assert!(e.to_string().contains("pixel-graph"), "{e}");
}

#[test]
fn the_group_of_a_clicked_pixel_covers_it_and_is_ranked() {
    // Invariants of the inspection data: the reference comes first with similarity 1, covers the
    // pixel, similarities never increase down the list, and every member lies in the search window.
    let (w, h) = (64usize, 48usize);
    let n = noise(w * h, 8.0, 3);
    let p = Plane::from_fn(w, h, |x, y| if (x / 6) % 2 == 0 { 70.0 } else { 170.0 } + n[y * w + x]);
    let s = patchgraph::settings::PatchGraphSettings::default();
    let g = patchgraph::methods::patch_graph::group_at(&p, None, 8.0, 8.0, 255.0, &s, 30, 20).unwrap();
    let (rx, ry) = g.positions[0];
    assert!(rx <= 30 && 30 < rx + 8 && ry <= 20 && 20 < ry + 8);
    assert_eq!(g.similarity[0], 1.0);
    assert!(g.similarity.windows(2).all(|v| v[0] >= v[1]));
    let r = patchgraph::methods::patch_graph::profile(&s, 8.0).search;
    assert!(g.positions.iter().all(|&(x, y)| x.abs_diff(rx) <= r && y.abs_diff(ry) <= r));
    // Stripes of period 12: the best matches sit at horizontal shifts that are multiples of 12.
    assert!(g.positions[1..4].iter().all(|&(x, _)| x.abs_diff(rx) % 12 == 0), "{:?}", &g.positions[..4]);
}

/// Lag-1 (horizontal) autocorrelation and std of a field.
fn lag1_and_std(v: &[f64], w: usize) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / n;
    let (mut c, mut k) = (0.0, 0.0);
    for (i, x) in v.iter().enumerate() {
        if (i + 1) % w != 0 {
            c += (x - m) * (v[i + 1] - m);
            k += 1.0;
        }
    }
    (c / k / var, var.sqrt())
}

#[test]
fn flat_noise_leaves_a_white_residual_and_averages_down_with_group_size() {
    // Closed form: averaging N independent noisy copies of a patch leaves sigma / sqrt(N) of the
    // noise, and overlapping aggregation can only lower it; so the result's deviation from the flat
    // value stays below sigma / sqrt(N) and falls as groups grow. The residual (input - result) is
    // the noise less a smooth part of variance at most sigma^2 / N, so its lag-1 correlation is
    // at most about 2 / N in size, plus sampling error 3 / sqrt(pixels) (white noise has 0).
    let (w, h, sigma) = (160usize, 160usize, 20.0f64);
    let mut r = patchgraph::synth::Rng::new(99);
    let noisy = Plane::from_fn(w, h, |_, _| (128.0 + sigma * r.normal()) as f32);
    let img = grey(noisy.clone());
    let mut last = f64::INFINITY;
    for n in [8u32, 16, 32] {
        let mut s = patch(sigma, 64);
        s.patch_graph.group_size_hard = n;
        s.patch_graph.group_size_wiener = n;
        let out = pipeline::denoise(&img, &s, &NoProgress).unwrap();
        let d: Vec<f64> = out.image.channels[0].data.iter().map(|v| f64::from(*v) - 128.0).collect();
        let (_, dev) = lag1_and_std(&d, w);
        assert!(dev < sigma / f64::from(n).sqrt(), "group {n}: deviation {dev}");
        assert!(dev < last, "group {n}: deviation {dev} did not fall below {last}");
        last = dev;
        let res: Vec<f64> = noisy.data.iter().zip(&out.image.channels[0].data).map(|(a, b)| f64::from(a - b)).collect();
        let (lag1, _) = lag1_and_std(&res, w);
        let bound = 2.0 / f64::from(n) + 3.0 / ((w * h) as f64).sqrt();
        assert!(lag1.abs() < bound, "group {n}: residual lag-1 correlation {lag1} beyond {bound}");
    }
}

#[test]
fn clipped_colour_with_a_given_sigma_keeps_every_channel() {
    // Invariant: the output has the input's channels, also when the clipped-noise correction runs
    // without a fit (sigma given) on a colour image whose dark half clips at 0.
    let mut r = patchgraph::synth::Rng::new(4);
    let mut ch = || {
        Plane::from_fn(64, 48, |x, _| {
            (if x < 32 { 0.0 } else { 150.0 } + 20.0 * r.normal()).clamp(0.0, 255.0).round() as f32
        })
    };
    let img = Image { width: 64, height: 48, depth: BitDepth::Eight, channels: vec![ch(), ch(), ch()], alpha: None };
    let out = pipeline::denoise(&img, &patch(20.0, 64), &NoProgress).unwrap();
    assert_eq!(out.image.channels.len(), 3);
    assert!(out.report.noise.clip_corrected);
    // The dark half's mean comes back near its true 0 (the clipped noise alone averages 8).
    let dark: f64 = out
        .image
        .channels
        .iter()
        .map(|c| (0..48).flat_map(|y| (0..28).map(move |x| (x, y))).map(|(x, y)| f64::from(c.get(x, y))).sum::<f64>())
        .sum::<f64>()
        / (3.0 * 48.0 * 28.0);
    assert!(dark < 4.0, "{dark}");
}

#[test]
fn a_grey_picture_saved_as_colour_with_grainy_noise_comes_back_grey_and_whole() {
    // Regression (2026-12-05): the chroma planes of R = G = B carry no noise, so their measured
    // spectrum is all zeros, and the Wiener gain 0 / 0 made every pixel NaN, written as black.
    // Invariants: the result is finite, still grey (R = G = B), and closer to the clean scene
    // than the input (grainy noise: white noise summed over 3 x 3 pixels, std 3 x 4 = 12).
    let (w, h) = (192usize, 192usize);
    let white = noise((w + 2) * (h + 2), 4.0, 21);
    let clean =
        Plane::from_fn(w, h, |x, y| 60.0 + 0.5 * x as f32 + if (x / 48 + y / 48) % 2 == 0 { 60.0 } else { 0.0 });
    let grainy = Plane::from_fn(w, h, |x, y| {
        let s: f32 =
            (0..3).flat_map(|j| (0..3).map(move |i| (i, j))).map(|(i, j)| white[(y + j) * (w + 2) + x + i]).sum();
        (clean.get(x, y) + s).round().clamp(0.0, 255.0)
    });
    let img = Image { channels: vec![grainy.clone(), grainy.clone(), grainy.clone()], ..grey(grainy.clone()) };
    let out = pipeline::denoise(&img, &Settings::default(), &NoProgress).unwrap();
    let ch = &out.image.channels;
    assert!(ch.iter().all(|c| c.data.iter().all(|v| v.is_finite())));
    assert!(ch[1]
        .data
        .iter()
        .zip(&ch[0].data)
        .chain(ch[2].data.iter().zip(&ch[0].data))
        .all(|(a, b)| (a - b).abs() <= 1.0));
    let mse =
        |p: &Plane| p.data.iter().zip(&clean.data).map(|(a, b)| f64::from(a - b).powi(2)).sum::<f64>() / p.len() as f64;
    assert!(mse(&ch[0]) < 0.5 * mse(&grainy), "result {} input {}", mse(&ch[0]), mse(&grainy));
}
