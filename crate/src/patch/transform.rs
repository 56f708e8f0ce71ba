//! Transforms of a group: the orthonormal 2-D DCT-II within each patch (the eigenbasis of the
//! path graph's Laplacian, see the tests) and, across the group, the graph Fourier basis: the
//! eigenvectors of the Laplacian of a small graph whose vertices are the patches.

use nalgebra::{DMatrix, SymmetricEigen};

/// Orthonormal DCT-II matrix: C[f][n] = a_f cos(pi f (n + 1/2) / k), a_0 = sqrt(1/k), else sqrt(2/k).
pub fn dct_matrix(k: usize) -> Vec<f32> {
    let mut c = vec![0.0f32; k * k];
    for f in 0..k {
        let a = if f == 0 { (1.0 / k as f64).sqrt() } else { (2.0 / k as f64).sqrt() };
        for n in 0..k {
            c[f * k + n] = (a * (std::f64::consts::PI * f as f64 * (n as f64 + 0.5) / k as f64).cos()) as f32;
        }
    }
    c
}

crate::simd::dispatch! {
    /// out = sum over s of w[s * stride] rows[s], rows of `out.len()` values each: the across-group
    /// transform and its inverse (a small matrix product). Each output value is summed in s order
    /// from 0, exactly as n [`axpy`] calls into zeros would, so results keep their bits; but a
    /// chunk of the output stays in registers over all rows instead of being stored once per row.
    pub fn combine_rows(out: &mut [f32], rows: &[f32], w: &[f32], stride: usize) => combine_body
}

#[inline(always)]
fn combine_body(out: &mut [f32], rows: &[f32], w: &[f32], stride: usize) {
    const CHUNK: usize = 16;
    let len = out.len();
    let n = rows.len() / len.max(1);
    let full = len - len % CHUNK;
    for c0 in (0..full).step_by(CHUNK) {
        let mut acc = [0.0f32; CHUNK];
        for s in 0..n {
            let a = w[s * stride];
            let row = &rows[s * len + c0..s * len + c0 + CHUNK];
            for (o, x) in acc.iter_mut().zip(row) {
                *o += a * x;
            }
        }
        out[c0..c0 + CHUNK].copy_from_slice(&acc);
    }
    if full < len {
        let tail = &mut out[full..];
        tail.iter_mut().for_each(|v| *v = 0.0);
        for s in 0..n {
            axpy(tail, w[s * stride], &rows[s * len + full..(s + 1) * len]);
        }
    }
}

/// y += a * x over equal-length slices (the loop the compiler vectorises).
#[inline]
pub fn axpy(y: &mut [f32], a: f32, x: &[f32]) {
    for (yi, xi) in y.iter_mut().zip(x) {
        *yi += a * xi;
    }
}

crate::simd::dispatch! {
    /// Y = C X C^T for a k x k patch (row-major); `tmp` is scratch of k * k. The usual sizes get
    /// their own copy of the loops with k known, which the compiler unrolls.
    pub fn dct2(c: &[f32], k: usize, x: &[f32], y: &mut [f32], tmp: &mut [f32]) => dct2_sizes
}

#[inline(always)]
fn dct2_sizes(c: &[f32], k: usize, x: &[f32], y: &mut [f32], tmp: &mut [f32]) {
    match k {
        8 => dct2_body(c, 8, x, y, tmp),
        12 => dct2_body(c, 12, x, y, tmp),
        _ => dct2_body(c, k, x, y, tmp),
    }
}

crate::simd::dispatch! {
    /// X = C^T Y C, the inverse of `dct2`.
    pub fn idct2(c: &[f32], k: usize, y: &[f32], x: &mut [f32], tmp: &mut [f32]) => idct2_sizes
}

#[inline(always)]
fn idct2_sizes(c: &[f32], k: usize, y: &[f32], x: &mut [f32], tmp: &mut [f32]) {
    match k {
        8 => idct2_body(c, 8, y, x, tmp),
        12 => idct2_body(c, 12, y, x, tmp),
        _ => idct2_body(c, k, y, x, tmp),
    }
}

#[inline(always)]
fn dct2_body(c: &[f32], k: usize, x: &[f32], y: &mut [f32], tmp: &mut [f32]) {
    // tmp = C X (columns), then y = tmp C^T (rows), both as row operations on contiguous memory.
    tmp.iter_mut().for_each(|v| *v = 0.0);
    for f in 0..k {
        for n in 0..k {
            axpy(&mut tmp[f * k..(f + 1) * k], c[f * k + n], &x[n * k..(n + 1) * k]);
        }
    }
    for r in 0..k {
        let row = &tmp[r * k..(r + 1) * k];
        for f in 0..k {
            y[r * k + f] = row.iter().zip(&c[f * k..(f + 1) * k]).map(|(a, b)| a * b).sum();
        }
    }
}

#[inline(always)]
fn idct2_body(c: &[f32], k: usize, y: &[f32], x: &mut [f32], tmp: &mut [f32]) {
    // tmp = C^T Y (columns), then x = tmp C (rows).
    tmp.iter_mut().for_each(|v| *v = 0.0);
    for f in 0..k {
        for n in 0..k {
            axpy(&mut tmp[n * k..(n + 1) * k], c[f * k + n], &y[f * k..(f + 1) * k]);
        }
    }
    x.iter_mut().for_each(|v| *v = 0.0);
    for r in 0..k {
        for f in 0..k {
            let a = tmp[r * k + f];
            axpy(&mut x[r * k..(r + 1) * k], a, &c[f * k..(f + 1) * k]);
        }
    }
}

/// A small multiple of the path graph (patches in their order of similarity) added to every group
/// graph: it leaves a structured graph's basis as it is but settles the free choice within a
/// repeated eigenvalue. A complete uniform graph's Laplacian has one eigenvalue n for every
/// vector orthogonal to the constant, and with the path added that choice is the DCT across the
/// group, the same every time, instead of whatever the eigensolver returns.
const PATH_TIE_BREAK: f64 = 1e-3;

thread_local! {
    /// The complete graph's basis per group size, made once per thread: flat groups ask for it
    /// thousands of times per image and each costs n^2 cosines.
    static COMPLETE_BASES: std::cell::RefCell<Vec<Option<DMatrix<f64>>>> = const { std::cell::RefCell::new(Vec::new()) };
    /// The same as f32 rows ([`graph_fourier_rows`]).
    static COMPLETE_ROWS: std::cell::RefCell<Vec<Option<Vec<f32>>>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// The DCT-II basis across n patches in frequency order, each vector's largest-magnitude entry
/// positive (the sign rule of the eigensolver's path below).
fn complete_graph_basis(n: usize) -> DMatrix<f64> {
    COMPLETE_BASES.with(|cache| {
        let mut cache = cache.borrow_mut();
        if cache.len() <= n {
            cache.resize(n + 1, None);
        }
        cache[n]
            .get_or_insert_with(|| {
                let c = dct_matrix(n);
                let mut u = DMatrix::<f64>::zeros(n, n);
                for f in 0..n {
                    let col: Vec<f64> = (0..n).map(|i| f64::from(c[f * n + i])).collect();
                    let imax = (0..n).fold(0, |m, i| if col[i].abs() > col[m].abs() { i } else { m });
                    let sign = if col[imax] < 0.0 { -1.0 } else { 1.0 };
                    for i in 0..n {
                        u[(i, f)] = sign * col[i];
                    }
                }
                u
            })
            .clone()
    })
}

/// [`graph_fourier_basis`] as f32, row-major: entry i of the j-th vector at [i n + j], the layout
/// the group transforms read. The complete graph's is made once per size and thread.
pub fn graph_fourier_rows(weights: &[f64], n: usize) -> Vec<f32> {
    let rows = |m: &DMatrix<f64>| -> Vec<f32> { (0..n).flat_map(|i| (0..n).map(move |j| m[(i, j)] as f32)).collect() };
    if is_complete_uniform(weights, n) {
        return COMPLETE_ROWS.with(|cache| {
            let mut cache = cache.borrow_mut();
            if cache.len() <= n {
                cache.resize(n + 1, None);
            }
            cache[n].get_or_insert_with(|| rows(&complete_graph_basis(n))).clone()
        });
    }
    rows(&graph_fourier_basis(weights, n))
}

/// Whether every off-diagonal weight is the same positive value (a flat group's graph).
fn is_complete_uniform(weights: &[f64], n: usize) -> bool {
    let w0 = if n > 1 { weights[1] } else { 0.0 };
    n > 1 && w0 > 0.0 && (0..n).all(|i| (0..n).all(|j| i == j || weights[i * n + j] == w0))
}

crate::simd::dispatch! {
    /// Eigenvectors of L = D - W (columns, eigenvalues ascending) for symmetric non-negative weights
    /// W (n x n, diagonal ignored). Column 0 is the constant vector when the graph is connected.
    pub fn graph_fourier_basis(weights: &[f64], n: usize) -> DMatrix<f64> => basis_body
}

#[inline(always)]
fn basis_body(weights: &[f64], n: usize) -> DMatrix<f64> {
    // A complete graph of equal weights (every flat group under the noise-tested graph): with the
    // path tie-break its eigenvectors are the DCT-II basis in frequency order, in closed form
    // (the eigensolver would give the same up to rounding, at O(n^3)).
    if is_complete_uniform(weights, n) {
        return complete_graph_basis(n);
    }
    let mean_w = weights.iter().sum::<f64>() / (n * n.saturating_sub(1)).max(1) as f64;
    let mut l = DMatrix::<f64>::zeros(n, n);
    for i in 1..n {
        let e = PATH_TIE_BREAK * mean_w.max(1e-12);
        l[(i - 1, i)] -= e;
        l[(i, i - 1)] -= e;
        l[(i - 1, i - 1)] += e;
        l[(i, i)] += e;
    }
    for i in 0..n {
        for j in 0..n {
            if i != j {
                let w = weights[i * n + j];
                l[(i, j)] -= w;
                l[(i, i)] += w;
            }
        }
    }
    let eig = SymmetricEigen::new(l);
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| eig.eigenvalues[a].total_cmp(&eig.eigenvalues[b]));
    let mut u = DMatrix::<f64>::zeros(n, n);
    for (dst, &src) in order.iter().enumerate() {
        let mut col = eig.eigenvectors.column(src).into_owned();
        // Sign convention: the largest-magnitude entry positive, so results do not depend on
        // the eigensolver's arbitrary signs.
        let imax = col.iamax();
        if col[imax] < 0.0 {
            col.neg_mut();
        }
        u.set_column(dst, &col);
    }
    u
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::graph::laplacian;

    #[test]
    fn combine_rows_gives_the_bits_of_the_axpy_loop() {
        // Invariant: the blocked product adds each output's terms in the same order as n axpy
        // calls into zeros (chunked and tail lengths, both strides), so outputs keep their bits.
        let mut r = crate::synth::Rng::new(7);
        for (n, len) in [(5usize, 64usize), (7, 25), (3, 144), (1, 9)] {
            let rows: Vec<f32> = (0..n * len).map(|_| r.normal() as f32).collect();
            let u: Vec<f32> = (0..n * n).map(|_| r.normal() as f32).collect();
            for (start, stride) in [(n - 1, n), (0, 1)] {
                let mut want = vec![0.0f32; len];
                (0..n).for_each(|s| axpy(&mut want, u[start + s * stride], &rows[s * len..(s + 1) * len]));
                let mut got = vec![1.0f32; len];
                combine_rows(&mut got, &rows, &u[start..], stride);
                assert_eq!(
                    got.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                    want.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
                );
            }
        }
    }

    #[test]
    fn dct_ii_rows_are_the_path_graph_laplacian_eigenvectors() {
        // Closed form (Strang 1999): the path graph's Laplacian has eigenvectors cos(pi f (n+1/2)/k)
        // with eigenvalues 2 - 2 cos(pi f / k); so the patch transform is a graph Fourier transform.
        let k = 8;
        let c = dct_matrix(k);
        let l = laplacian::path(k);
        for f in 0..k {
            let v: Vec<f64> = (0..k).map(|n| f64::from(c[f * k + n])).collect();
            let lambda = 2.0 - 2.0 * (std::f64::consts::PI * f as f64 / k as f64).cos();
            for (row, vec) in l.outer_iterator().enumerate() {
                let lv: f64 = vec.iter().map(|(col, a)| a * v[col]).sum();
                assert!((lv - lambda * v[row]).abs() < 1e-6);
            }
        }
    }

    #[test]
    fn dct2_is_orthonormal_and_inverts() {
        // Invariant: Parseval (energy kept) and idct2(dct2(x)) = x.
        let k = 8;
        let c = dct_matrix(k);
        let x: Vec<f32> = (0..64).map(|i| ((i * 37) % 23) as f32 - 11.0).collect();
        let (mut y, mut back, mut tmp) = (vec![0.0; 64], vec![0.0; 64], vec![0.0; 64]);
        dct2(&c, k, &x, &mut y, &mut tmp);
        idct2(&c, k, &y, &mut back, &mut tmp);
        let ex: f32 = x.iter().map(|v| v * v).sum();
        let ey: f32 = y.iter().map(|v| v * v).sum();
        assert!((ex - ey).abs() < 1e-3 * ex);
        assert!(x.iter().zip(&back).all(|(a, b)| (a - b).abs() < 1e-4));
    }

    #[test]
    fn a_uniform_group_graph_gives_the_dct_across_the_group() {
        // Closed form: every orthonormal basis with a constant first vector diagonalises the
        // complete graph's Laplacian; the tie-break picks the path graph's, the DCT-II (as above).
        let n = 8;
        let w: Vec<f64> = (0..n * n).map(|i| if i / n == i % n { 0.0 } else { 1.0 }).collect();
        let u = graph_fourier_basis(&w, n);
        let c = dct_matrix(n);
        for f in 0..n {
            let dot: f64 = (0..n).map(|i| u[(i, f)] * f64::from(c[f * n + i])).sum();
            assert!((dot.abs() - 1.0).abs() < 1e-5, "vector {f}: {dot}");
        }
    }

    #[test]
    fn group_basis_is_orthonormal_with_a_constant_first_vector() {
        // Invariants: U^T U = I; a connected graph's Laplacian has the constant vector for eigenvalue 0.
        let n = 6;
        let w: Vec<f64> =
            (0..n * n).map(|i| if i / n == i % n { 0.0 } else { 0.2 + ((i / n + i % n) % 5) as f64 * 0.1 }).collect();
        let u = graph_fourier_basis(&w, n);
        let gram = u.transpose() * &u;
        assert!((gram - DMatrix::identity(n, n)).abs().max() < 1e-10);
        let c = 1.0 / (n as f64).sqrt();
        assert!(u.column(0).iter().all(|v| (v - c).abs() < 1e-10));
    }

    #[test]
    fn the_closed_form_for_equal_weights_is_what_the_eigensolver_gives() {
        // Invariant: the shortcut for a complete graph of equal weights must not change results.
        // Nearly-equal weights (1 - 1e-15 on one edge) take the eigensolver path. Columns are
        // compared up to sign: symmetric DCT vectors have two largest entries, so the sign rule
        // can fall either way, and the filter (thresholds, Wiener gains) does not see signs.
        for n in [2usize, 5, 16, 23, 32] {
            let w = vec![1.0; n * n];
            let fast = graph_fourier_basis(&w, n);
            let mut w2 = w.clone();
            w2[1] = 1.0 - 1e-15;
            w2[n] = 1.0 - 1e-15;
            let slow = graph_fourier_basis(&w2, n);
            let diff = (0..n)
                .map(|j| {
                    let (a, b) = (fast.column(j), slow.column(j));
                    (a - b).abs().max().min((a + b).abs().max())
                })
                .fold(0.0, f64::max);
            assert!(diff < 1e-5, "n {n}: bases differ by {diff}");
        }
    }
}
