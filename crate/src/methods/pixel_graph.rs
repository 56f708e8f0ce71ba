//! The fast method: a pixel graph cut at intensity discontinuities, filtered in the vertex domain
//! by graph Laplacian (Tikhonov) regularisation or a Chebyshev heat kernel. All channels share the
//! graph built from the luminance guide; later passes rebuild it from the previous estimate.

use super::MethodOutput;
use crate::error::{Error, Result};
use crate::graph::{cg, chebyshev, grid::GridGraph, grid::GridParams, LinearOperator, Shifted};
use crate::planes::{gaussian_blur, gaussian_noise_gain, Plane};
use crate::progress::{check, Progress, SubProgress};
use crate::settings::{GraphFilter, PixelGraphKind, PixelGraphSettings};

/// The non-local graph: a 7 x 7 window, each pixel's 8 most similar neighbours kept (ties too, so
/// flat areas, where the noise cannot tell patches apart, keep the whole window); an edge stays
/// when either end keeps it. No intensity cut: the choice of neighbours does that work.
const NONLOCAL_RADIUS: usize = 3;
const NONLOCAL_NEIGHBOURS: usize = 8;

/// Smoothing amount for a given sigma, on the 8-bit scale so 16-bit data behaves the same.
/// The constants were fitted on the development set by the benchmark (see BENCHMARKS.md).
/// Exponent of the sigma dependence; the weights already scale with sigma, so it is small.
const P_TIKHONOV: f64 = -0.3;

/// The non-local graph's weights do not fall with the noise as the cut grid's do (its neighbours
/// are chosen as the most similar, whatever the level), so its amount stays flat in sigma: the
/// cut grid's at sigma 10, 1.3x at 25, 1.6x at 50, as the dev set chose (strengths 0.7 / 1 / 1.4
/// tried at each level).
const NONLOCAL_AMOUNT: f64 = 2.6;

/// The filter's amount (Tikhonov gamma or heat time t) for a noise std `sigma8` on the 8-bit
/// scale, times the user's `strength`.
pub fn smoothing_amount(filter: GraphFilter, graph: PixelGraphKind, sigma8: f64, strength: f64) -> f64 {
    let rel = (sigma8 / 25.0).max(0.0);
    let base = match graph {
        PixelGraphKind::CutGrid => 2.0 * rel.powf(P_TIKHONOV),
        PixelGraphKind::NonLocal => NONLOCAL_AMOUNT,
    };
    match filter {
        GraphFilter::Tikhonov => strength * base,
        GraphFilter::Heat => strength * 0.5 * base,
    }
}

/// A relative residual of 1e-3 leaves errors of about 0.1 grey level on 8-bit data, far below
/// the noise; tighter solves cost iterations without changing the rounded output measurably.
const CG: cg::CgOptions = cg::CgOptions { tolerance: 1e-3, max_iterations: 500 };

/// The pixel-graph method: builds the graph from a guide, filters each plane in the vertex
/// domain (Tikhonov by preconditioned CG, or the Chebyshev heat kernel), `passes` times.
pub fn denoise(
    planes: &[Plane],
    sigma: f64,
    max_value: f64,
    s: &PixelGraphSettings,
    progress: &dyn Progress,
) -> Result<MethodOutput> {
    let first = planes.first().ok_or_else(|| Error::Internal("no channels to denoise".into()))?;
    if sigma <= 0.0 {
        return Ok(MethodOutput { planes: planes.to_vec(), cut_map: None, work_units: 0 });
    }
    let sigma8 = sigma * 255.0 / max_value;
    let amount = smoothing_amount(s.filter, s.graph, sigma8, s.strength);
    let non_local = s.graph == PixelGraphKind::NonLocal;
    let mut params = GridParams {
        radius: if non_local { NONLOCAL_RADIUS } else { s.radius as usize },
        patch_radius: s.patch_radius as usize,
        h: s.weight_scale * sigma,
        tau: if non_local { f64::INFINITY } else { s.cut_threshold * sigma },
        guide_noise: sigma * gaussian_noise_gain(s.guide_blur),
        keep_nearest: if non_local { NONLOCAL_NEIGHBOURS } else { 0 },
    };
    let mut guide = gaussian_blur(first, s.guide_blur);
    let mut out = planes.to_vec();
    let mut cut_map = None;
    let mut work = 0;
    let passes = s.passes as usize;
    let steps = (passes * planes.len()) as f32;
    for pass in 0..passes {
        check(progress)?;
        progress.report(pass as f32 / passes as f32, "building the graph");
        let graph = GridGraph::build(&guide, &params);
        for (c, noisy) in planes.iter().enumerate() {
            let sub =
                SubProgress { parent: progress, start: (pass * planes.len() + c) as f32 / steps, span: 1.0 / steps };
            let y: Vec<f64> = noisy.data.iter().map(|v| f64::from(*v)).collect();
            let x = match s.filter {
                GraphFilter::Tikhonov => {
                    let a = Shifted { op: &graph, gamma: amount };
                    // Start from the previous pass's answer: the systems differ only in the graph.
                    let mut x: Vec<f64> = out[c].data.iter().map(|v| f64::from(*v)).collect();
                    let report = cg::solve(&a, &y, &mut x, CG, &sub)?;
                    work += report.iterations;
                    x
                }
                GraphFilter::Heat => {
                    let lmax = graph.lambda_max_bound().max(1e-9);
                    let order = chebyshev::heat_order(amount, lmax, 1e-5, 200);
                    let coeffs = chebyshev::coefficients(|l| (-amount * l).exp(), lmax, order);
                    work += order;
                    chebyshev::apply(&graph, &coeffs, lmax, &y, &sub)?
                }
            };
            out[c] =
                Plane { width: first.width, height: first.height, data: x.into_iter().map(|v| v as f32).collect() };
        }
        guide = out[0].clone();
        // The estimate is far cleaner than the input: compare it as (nearly) noise-free.
        params.guide_noise = 0.0;
        cut_map = Some(graph.cut_map());
    }
    progress.report(1.0, "done");
    Ok(MethodOutput { planes: out, cut_map, work_units: work })
}
