//! Per-kernel timings of the patch-graph method, so a regression shows in the kernel it is in:
//! block matching over one tile's crop, the 2-D DCT of a patch and its inverse, the graph basis of
//! a group (the eigensolver, and the closed form a flat group takes), the transform across a group,
//! and aggregation of a group.
//! Run: `cargo bench -p patchgraph --bench kernels`. The inputs are noisy synthetic planes drawn
//! with the project's own generator, the same on every run.
use patchgraph::patch::aggregate::{kaiser_window, Accumulator};
use patchgraph::patch::matching::{match_groups, MatchParams};
use patchgraph::patch::transform::{axpy, combine_rows, dct2, dct_matrix, graph_fourier_basis, idct2};
use patchgraph::planes::Plane;
use patchgraph::progress::NoProgress;
use patchgraph::synth::Rng;

fn main() {
    divan::main();
}

/// A smooth scene with edges plus white noise of std 25, `side` x `side`.
fn noisy_plane(side: usize) -> Plane {
    let mut rng = Rng::new(7);
    let mut p = Plane::from_fn(side, side, |x, y| {
        let base = if (x / 16 + y / 24) % 2 == 0 { 90.0 } else { 160.0 };
        base + 20.0 * ((x as f32) / 9.0).sin()
    });
    for v in &mut p.data {
        *v += 25.0 * rng.normal() as f32;
    }
    p
}

/// One tile of the default profile at sigma 25: 64 x 64 references every 4 pixels, search
/// radius 12, patches of 8, groups of up to 32 (16 x the flat growth), on its 96 x 96 crop.
#[divan::bench(args = [12, 16, 20])]
fn matching_one_tile(bencher: divan::Bencher, search: usize) {
    let crop = 64 + 2 * search + 8;
    let plane = noisy_plane(crop);
    let refs: Vec<(usize, usize)> =
        (0..16).flat_map(|j| (0..16).map(move |i| (search + 4 * i, search + 4 * j))).collect();
    let p = MatchParams {
        patch: 8,
        search,
        max_group: 32,
        min_similarity: 0.0,
        range: 255.0,
        noise_var: 625.0,
        step: 4,
        noise_cov: &[],
    };
    bencher.bench_local(|| match_groups(divan::black_box(&plane), &refs, &p, &NoProgress));
}

#[divan::bench(args = [8, 12])]
fn dct2_and_inverse(bencher: divan::Bencher, k: usize) {
    let c = dct_matrix(k);
    let plane = noisy_plane(k);
    let (mut y, mut x, mut tmp) = (vec![0.0f32; k * k], vec![0.0f32; k * k], vec![0.0f32; k * k]);
    bencher.bench_local(|| {
        dct2(&c, k, divan::black_box(&plane.data), &mut y, &mut tmp);
        idct2(&c, k, &y, &mut x, &mut tmp);
        x[0]
    });
}

/// Weights of a group of `n` patches whose similarity falls with the distance in the list (a
/// structured group: the eigensolver's path), and all equal (a flat group: the closed form).
fn weights(n: usize, flat: bool) -> Vec<f64> {
    (0..n * n)
        .map(|ij| {
            let (i, j) = (ij / n, ij % n);
            if i == j {
                0.0
            } else if flat {
                1.0
            } else {
                (-(i.abs_diff(j) as f64) / 6.0).exp()
            }
        })
        .collect()
}

#[divan::bench(args = [16, 32])]
fn group_basis_structured(bencher: divan::Bencher, n: usize) {
    let w = weights(n, false);
    bencher.bench_local(|| graph_fourier_basis(divan::black_box(&w), n));
}

#[divan::bench(args = [16, 32])]
fn group_basis_flat(bencher: divan::Bencher, n: usize) {
    let w = weights(n, true);
    bencher.bench_local(|| graph_fourier_basis(divan::black_box(&w), n));
}

/// Aggregation of one group of 16 filtered 8 x 8 patches into a tile's accumulator.
#[divan::bench]
fn aggregate_one_group(bencher: divan::Bencher) {
    let k = 8;
    let window = kaiser_window(k, 2.0);
    let plane = noisy_plane(k * 16);
    let patches: Vec<&[f32]> = plane.data.chunks(k * k).take(16).collect();
    let mut acc = Accumulator::new(0, 0, 96, 96, 1);
    bencher.bench_local(|| {
        for (i, p) in patches.iter().enumerate() {
            acc.add(4 * (i % 4), 4 * (i / 4), k, std::slice::from_ref(p), &window, 0.5);
        }
    });
}

/// The transform across a group of n patches of 8 x 8 coefficients (T_j = sum_i u_ij C_i, an
/// n x n by n x 64 product), as the method runs it (combine_rows, blocked)...
#[divan::bench(args = [16, 32])]
fn across_group_blocked(bencher: divan::Bencher, n: usize) {
    let (c, u) = group_rows(n);
    let mut t = vec![0.0f32; n * 64];
    bencher.bench_local(|| {
        for (j, row) in t.chunks_mut(64).enumerate() {
            combine_rows(row, divan::black_box(&c), &u[j..], n);
        }
    });
}

/// ...and as n^2 axpy calls (the loop it replaced, same result bit for bit), for the ratio.
#[divan::bench(args = [16, 32])]
fn across_group_axpy_loop(bencher: divan::Bencher, n: usize) {
    let (c, u) = group_rows(n);
    let mut t = vec![0.0f32; n * 64];
    bencher.bench_local(|| {
        t.iter_mut().for_each(|v| *v = 0.0);
        for i in 0..n {
            for j in 0..n {
                axpy(&mut t[j * 64..(j + 1) * 64], u[i * n + j], &divan::black_box(&c)[i * 64..(i + 1) * 64]);
            }
        }
    });
}

fn group_rows(n: usize) -> (Vec<f32>, Vec<f32>) {
    let mut rng = Rng::new(11);
    let c = (0..n * 64).map(|_| 25.0 * rng.normal() as f32).collect();
    let u = (0..n * n).map(|_| rng.normal() as f32).collect();
    (c, u)
}
