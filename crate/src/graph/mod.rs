//! Graphs and vertex-domain filters: sparse Laplacians, the image grid graph with discontinuity
//! cuts, preconditioned conjugate gradient and Chebyshev polynomial filters. Nothing here needs a
//! full eigendecomposition; the dense one is only used on tiny graphs (tests, patch groups).

pub mod cg;
pub mod chebyshev;
pub mod grid;
pub mod laplacian;

/// A symmetric linear operator on vectors of length `dim()`: a Laplacian, or I + gamma L.
pub trait LinearOperator {
    /// The length of the vectors it acts on.
    fn dim(&self) -> usize;
    /// y = A x (y is overwritten).
    fn apply(&self, x: &[f64], y: &mut [f64]);
    /// The diagonal of A, for Jacobi preconditioning.
    fn diagonal(&self) -> Vec<f64>;
    /// An upper bound on the largest eigenvalue (for Chebyshev filters).
    fn lambda_max_bound(&self) -> f64;
}

/// I + gamma A, the matrix of Tikhonov (graph Laplacian) regularisation.
pub struct Shifted<'a, A: LinearOperator + ?Sized> {
    /// The operator A.
    pub op: &'a A,
    /// The regularisation weight gamma.
    pub gamma: f64,
}

impl<A: LinearOperator + ?Sized> LinearOperator for Shifted<'_, A> {
    fn dim(&self) -> usize {
        self.op.dim()
    }
    fn apply(&self, x: &[f64], y: &mut [f64]) {
        self.op.apply(x, y);
        for (yi, xi) in y.iter_mut().zip(x) {
            *yi = xi + self.gamma * *yi;
        }
    }
    fn diagonal(&self) -> Vec<f64> {
        self.op.diagonal().into_iter().map(|d| 1.0 + self.gamma * d).collect()
    }
    fn lambda_max_bound(&self) -> f64 {
        1.0 + self.gamma * self.op.lambda_max_bound()
    }
}
