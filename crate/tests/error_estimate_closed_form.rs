//! The error estimate's divergence against a closed form: for a linear run y -> A y the
//! divergence is the trace of A. A is the pixel-graph method's Tikhonov filter (I + gamma L)^-1
//! with its graph held fixed, formed densely with nalgebra on a small image.

use nalgebra::{DMatrix, DVector};
use patchgraph::error_estimate::{estimate, PixelVariance, Probe};
use patchgraph::graph::grid::{GridGraph, GridParams};
use patchgraph::graph::LinearOperator;
use patchgraph::planes::{BitDepth, Image, Plane};
use patchgraph::synth::Rng;

const W: usize = 16;
const H: usize = 12;

fn image(data: Vec<f32>) -> Image {
    Image {
        width: W,
        height: H,
        depth: BitDepth::Eight,
        channels: vec![Plane { width: W, height: H, data }],
        alpha: None,
    }
}

/// The filter's matrix: (I + gamma L)^-1 for the grid graph of a two-level guide.
fn tikhonov_matrix() -> DMatrix<f64> {
    let guide = Plane::from_fn(W, H, |x, _| if x < W / 2 { 60.0 } else { 170.0 });
    let g = GridGraph::build(
        &guide,
        &GridParams { radius: 1, patch_radius: 0, h: 20.0, tau: 60.0, guide_noise: 0.0, keep_nearest: 0 },
    );
    let n = W * H;
    let mut l = DMatrix::zeros(n, n);
    let mut col = vec![0.0; n];
    for j in 0..n {
        let mut e = vec![0.0; n];
        e[j] = 1.0;
        g.apply(&e, &mut col);
        for i in 0..n {
            l[(i, j)] = col[i];
        }
    }
    (DMatrix::identity(n, n) + l * 2.0).try_inverse().expect("I + gamma L is positive definite")
}

fn apply(a: &DMatrix<f64>, img: &Image) -> Image {
    let y = DVector::from_iterator(W * H, img.channels[0].data.iter().map(|v| f64::from(*v)));
    image((a * y).iter().map(|v| *v as f32).collect())
}

#[test]
fn monte_carlo_divergence_of_a_linear_filter_is_its_trace() {
    let a = tikhonov_matrix();
    let n = (W * H) as f64;
    let sigma = 10.0;
    let trace = a.trace();
    // Hutchinson's estimator with +-1 probes: variance 2 sum_{i != j} A_ij^2 (closed form for a
    // symmetric A), per probe.
    let off: f64 = (0..W * H)
        .flat_map(|i| (0..W * H).map(move |j| (i, j)))
        .filter(|(i, j)| i != j)
        .map(|(i, j)| a[(i, j)].powi(2))
        .sum();
    let probe_std = (2.0 * off).sqrt();
    let mut rng = Rng::new(4);
    let noisy =
        image((0..W * H).map(|i| (if i % W < W / 2 { 60.0 } else { 170.0 }) + (sigma * rng.normal()) as f32).collect());
    let result = apply(&a, &noisy);
    let var = PixelVariance::white(sigma, 255.0);
    let runs = 64;
    let mut sum = 0.0;
    for seed in 0..runs {
        let probe = Probe { step: 0.5, seed };
        let e = estimate(&noisy, &result, &apply(&a, &probe.perturbed(&noisy)), &probe, &var, false);
        let divergence = e.kept_noise.unwrap() * n;
        // SURE for a linear run in closed form: ||Ay - y||^2 - N sigma^2 + 2 sigma^2 tr(A); one
        // probe's estimate lies within 4 of its standard deviations of it.
        let residual: f64 =
            result.channels[0].data.iter().zip(&noisy.channels[0].data).map(|(f, y)| f64::from(f - y).powi(2)).sum();
        let exact = (residual - n * sigma * sigma + 2.0 * sigma * sigma * trace) / n;
        let tolerance = 4.0 * 2.0 * sigma * sigma * probe_std / n + 1e-3;
        assert!((e.mse.unwrap() - exact).abs() < tolerance, "seed {seed}: {} vs {exact}", e.mse.unwrap());
        sum += divergence;
    }
    let mean = sum / runs as f64;
    assert!(
        (mean - trace).abs() < 4.0 * probe_std / (runs as f64).sqrt(),
        "mean divergence {mean}, trace {trace}, probe std {probe_std}"
    );
}
