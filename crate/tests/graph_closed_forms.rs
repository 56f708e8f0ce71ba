//! Graph pieces against closed forms and dense linear algebra (nalgebra).

use nalgebra::{DMatrix, DVector, SymmetricEigen};
use patchgraph::graph::grid::{GridGraph, GridParams};
use patchgraph::graph::{cg, chebyshev, laplacian, LinearOperator, Shifted};
use patchgraph::planes::Plane;
use patchgraph::NoProgress;
use std::f64::consts::PI;

fn dense(m: &sprs::CsMat<f64>) -> DMatrix<f64> {
    let mut d = DMatrix::zeros(m.rows(), m.cols());
    for (v, (i, j)) in m.iter() {
        d[(i, j)] += *v;
    }
    d
}

fn sorted_eigenvalues(m: &DMatrix<f64>) -> Vec<f64> {
    let mut v: Vec<f64> = SymmetricEigen::new(m.clone()).eigenvalues.iter().copied().collect();
    v.sort_by(f64::total_cmp);
    v
}

#[test]
fn path_graph_eigenvalues_are_2_minus_2cos_pi_k_over_n() {
    // Closed form (Strang, "The discrete cosine transform", SIAM Review 1999): 2 - 2 cos(pi k / n).
    for n in [2usize, 5, 16] {
        let got = sorted_eigenvalues(&dense(&laplacian::path(n)));
        for (k, g) in got.iter().enumerate() {
            let want = 2.0 - 2.0 * (PI * k as f64 / n as f64).cos();
            assert!((g - want).abs() < 1e-10, "n={n} k={k}: {g} vs {want}");
        }
    }
}

#[test]
fn cycle_graph_eigenvalues_are_2_minus_2cos_2pi_k_over_n() {
    // Closed form: the cycle's Laplacian is circulant, eigenvalues 2 - 2 cos(2 pi k / n).
    let n = 12;
    let got = sorted_eigenvalues(&dense(&laplacian::cycle(n)));
    let mut want: Vec<f64> = (0..n).map(|k| 2.0 - 2.0 * (2.0 * PI * k as f64 / n as f64).cos()).collect();
    want.sort_by(f64::total_cmp);
    for (g, w) in got.iter().zip(&want) {
        assert!((g - w).abs() < 1e-10);
    }
}

#[test]
fn path_graph_eigenvectors_are_the_dct_ii_basis() {
    // Closed form: L v_k = lambda_k v_k with v_k(j) = cos(pi k (j + 1/2) / n), the DCT-II vectors.
    let n = 8;
    let l = dense(&laplacian::path(n));
    for k in 0..n {
        let v = DVector::from_fn(n, |j, _| (PI * k as f64 * (j as f64 + 0.5) / n as f64).cos());
        let lambda = 2.0 - 2.0 * (PI * k as f64 / n as f64).cos();
        let residual = (&l * &v - &v * lambda).norm();
        assert!(residual < 1e-10, "k={k}: residual {residual}");
    }
}

fn random_grid(w: usize, h: usize, seed: u64) -> Plane {
    let mut s = seed;
    Plane::from_fn(w, h, |x, y| {
        s = s.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        let noise = (s >> 40) as f32 / (1u64 << 24) as f32 * 40.0;
        if x < w / 2 {
            50.0 + noise
        } else {
            180.0 + noise + y as f32
        }
    })
}

fn grid_params() -> GridParams {
    GridParams { radius: 2, patch_radius: 1, h: 20.0, tau: 60.0, guide_noise: 5.0, keep_nearest: 0 }
}

#[test]
fn grid_stencil_equals_its_sparse_laplacian() {
    // Invariant: the matrix-free stencil and the sprs CSR built from the same edges agree, and the
    // Laplacian annihilates constants (rows sum to zero).
    let g = GridGraph::build(&random_grid(9, 7, 3), &grid_params());
    let csr = g.to_csr();
    let x: Vec<f64> = (0..63).map(|i| ((i * 37) % 11) as f64 - 5.0).collect();
    let (mut a, mut b) = (vec![0.0; 63], vec![0.0; 63]);
    g.apply(&x, &mut a);
    csr.apply(&x, &mut b);
    for (p, q) in a.iter().zip(&b) {
        assert!((p - q).abs() < 1e-9);
    }
    let mut c = vec![0.0; 63];
    g.apply(&vec![1.0; 63], &mut c);
    assert!(c.iter().all(|v| v.abs() < 1e-9));
    // The edge between the two halves jumps by ~130 > tau, so every such edge is cut.
    assert!(g.cuts[4] > 0);
}

#[test]
fn grid_stencil_over_many_blocks_equals_its_sparse_laplacian() {
    // Invariant: an image large enough that the product is made in several blocks of rows (in
    // parallel natively) still agrees with the sprs CSR of the same edges, at every pixel.
    let (w, h) = (181, 157);
    let g = GridGraph::build(&random_grid(w, h, 9), &grid_params());
    let csr = g.to_csr();
    let x: Vec<f64> = (0..w * h).map(|i| ((i * 37) % 11) as f64 - 5.0).collect();
    let (mut a, mut b) = (vec![0.0; w * h], vec![0.0; w * h]);
    g.apply(&x, &mut a);
    csr.apply(&x, &mut b);
    for (i, (p, q)) in a.iter().zip(&b).enumerate() {
        assert!((p - q).abs() < 1e-9, "pixel {i}: {p} against {q}");
    }
}

#[test]
fn pcg_matches_a_dense_solve() {
    // Reference: nalgebra's Cholesky solve of the same (I + gamma L) system.
    let g = GridGraph::build(&random_grid(10, 8, 7), &grid_params());
    let a = Shifted { op: &g, gamma: 3.0 };
    let dense_a = DMatrix::identity(80, 80) + dense(&g.to_csr()) * 3.0;
    let b: Vec<f64> = (0..80).map(|i| (i as f64 * 0.37).sin() * 100.0).collect();
    let want = dense_a.cholesky().expect("SPD").solve(&DVector::from_vec(b.clone()));
    let mut x = vec![0.0; 80];
    let opts = cg::CgOptions { tolerance: 1e-12, max_iterations: 500 };
    cg::solve(&a, &b, &mut x, opts, &NoProgress).unwrap();
    for (p, q) in x.iter().zip(want.iter()) {
        assert!((p - q).abs() < 1e-7, "{p} vs {q}");
    }
}

#[test]
fn chebyshev_heat_kernel_matches_the_dense_exponential() {
    // Reference: exp(-tL) = U exp(-t Lambda) U^T from nalgebra's symmetric eigendecomposition.
    let g = GridGraph::build(&random_grid(8, 6, 11), &grid_params());
    let l = dense(&g.to_csr());
    let eig = SymmetricEigen::new(l.clone());
    let x: Vec<f64> = (0..48).map(|i| ((i * 13) % 7) as f64).collect();
    for t in [0.3, 1.0, 2.5] {
        let expm = &eig.eigenvectors
            * DMatrix::from_diagonal(&eig.eigenvalues.map(|lam| (-t * lam).exp()))
            * eig.eigenvectors.transpose();
        let want = &expm * DVector::from_vec(x.clone());
        let lmax = g.lambda_max_bound();
        let order = chebyshev::heat_order(t, lmax, 1e-12, 200);
        let coeffs = chebyshev::coefficients(|lam| (-t * lam).exp(), lmax, order);
        let got = chebyshev::apply(&g, &coeffs, lmax, &x, &NoProgress).unwrap();
        for (p, q) in got.iter().zip(want.iter()) {
            assert!((p - q).abs() < 1e-6, "t={t}: {p} vs {q}");
        }
    }
}

#[test]
fn gershgorin_bound_covers_the_spectrum() {
    // Invariant used by the Chebyshev filter: the bound is at or above the true lambda_max.
    let g = GridGraph::build(&random_grid(8, 6, 5), &grid_params());
    let top = *sorted_eigenvalues(&dense(&g.to_csr())).last().unwrap();
    assert!(g.lambda_max_bound() >= top - 1e-9);
}

fn non_local_params() -> GridParams {
    GridParams { radius: 3, patch_radius: 1, h: 20.0, tau: f64::INFINITY, guide_noise: 5.0, keep_nearest: 8 }
}

#[test]
fn non_local_graph_is_a_symmetric_laplacian_with_k_neighbours_each() {
    // Invariants: the stencil equals its CSR Laplacian (which sprs builds symmetric from the edge
    // list), constants are in its null space, and every pixel keeps at least its 8 most similar
    // neighbours (an edge stays when either end keeps it, so some pixels have more).
    let (w, h) = (12, 10);
    let g = GridGraph::build(&random_grid(w, h, 5), &non_local_params());
    let csr = g.to_csr();
    let d = dense(&csr);
    assert!((d.clone() - d.transpose()).amax() < 1e-12);
    let mut c = vec![0.0; w * h];
    g.apply(&vec![1.0; w * h], &mut c);
    assert!(c.iter().all(|v| v.abs() < 1e-9));
    for i in 0..w * h {
        let joined = (0..w * h).filter(|&j| j != i && d[(i, j)] < 0.0).count();
        assert!(joined >= 8, "pixel {i} joined to {joined}");
    }
    let x: Vec<f64> = (0..w * h).map(|i| ((i * 37) % 11) as f64 - 5.0).collect();
    let (mut a, mut b) = (vec![0.0; w * h], vec![0.0; w * h]);
    g.apply(&x, &mut a);
    csr.apply(&x, &mut b);
    assert!(a.iter().zip(&b).all(|(p, q)| (p - q).abs() < 1e-9));
}

#[test]
fn non_local_neighbours_stay_on_their_side_of_an_edge() {
    // Invariant: across a step of 120 grey levels with noise of std 5, a pixel's 8 most similar
    // pixels in its 7 x 7 window are on its own side (each side holds at least 21 of them), so no
    // edge crosses the step although nothing is cut by a threshold. With 3 x 3 patches, only the
    // two columns whose patches straddle the step look alike across it (the patch distance cannot
    // tell them apart), so crossing edges may join those two columns and no others.
    let (w, h) = (16, 16);
    let mut rng = patchgraph::synth::Rng::new(9);
    let p = Plane::from_fn(w, h, |x, _| if x < 8 { 60.0 } else { 180.0 });
    let p = Plane { data: p.data.iter().map(|v| v + 5.0 * rng.normal() as f32).collect(), ..p };
    for patch_radius in [0, 1] {
        let g = GridGraph::build(&p, &GridParams { patch_radius, ..non_local_params() });
        let d = dense(&g.to_csr());
        for i in 0..w * h {
            for j in 0..w * h {
                if i != j && d[(i, j)] < 0.0 && (i % w < 8) != (j % w < 8) {
                    let straddle = |k: usize| k % w == 7 || k % w == 8;
                    assert!(patch_radius == 1 && straddle(i) && straddle(j), "edge {i} - {j} crosses the step");
                }
            }
        }
    }
}
