//! Combinatorial Laplacian L = D - W of a weighted undirected graph as a sparse CSR matrix (sprs).

use super::LinearOperator;
use sprs::{CsMat, TriMat};

/// Builds L from an edge list (i, j, w) with i != j; repeated edges add up.
pub fn from_edges(n: usize, edges: &[(usize, usize, f64)]) -> CsMat<f64> {
    let mut deg = vec![0.0; n];
    let mut tri = TriMat::new((n, n));
    for &(i, j, w) in edges {
        tri.add_triplet(i, j, -w);
        tri.add_triplet(j, i, -w);
        deg[i] += w;
        deg[j] += w;
    }
    for (i, d) in deg.iter().enumerate() {
        tri.add_triplet(i, i, *d);
    }
    tri.to_csr()
}

/// Path graph 0 - 1 - ... - (n-1) with unit weights.
pub fn path(n: usize) -> CsMat<f64> {
    let edges: Vec<_> = (0..n.saturating_sub(1)).map(|i| (i, i + 1, 1.0)).collect();
    from_edges(n, &edges)
}

/// Cycle graph: the path plus the edge (n-1) - 0.
pub fn cycle(n: usize) -> CsMat<f64> {
    let edges: Vec<_> = (0..n).map(|i| (i, (i + 1) % n, 1.0)).collect();
    from_edges(n, &edges)
}

impl LinearOperator for CsMat<f64> {
    fn dim(&self) -> usize {
        self.rows()
    }
    fn apply(&self, x: &[f64], y: &mut [f64]) {
        for (row, vec) in self.outer_iterator().enumerate() {
            y[row] = vec.iter().map(|(col, v)| v * x[col]).sum();
        }
    }
    fn diagonal(&self) -> Vec<f64> {
        (0..self.rows()).map(|i| self.get(i, i).copied().unwrap_or(0.0)).collect()
    }
    /// Gershgorin: every eigenvalue lies within max_i sum_j |a_ij| (2 d_max for a Laplacian).
    fn lambda_max_bound(&self) -> f64 {
        self.outer_iterator().map(|r| r.iter().map(|(_, v)| v.abs()).sum::<f64>()).fold(0.0, f64::max)
    }
}
