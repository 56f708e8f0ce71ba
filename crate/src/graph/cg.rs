//! Preconditioned conjugate gradient (Hestenes and Stiefel 1952) with a Jacobi preconditioner,
//! for symmetric positive definite systems such as (I + gamma L) x = y.

use super::LinearOperator;
use crate::error::Result;
use crate::progress::{check, Progress};

/// Stopping rules of the conjugate-gradient solver.
#[derive(Clone, Copy, Debug)]
pub struct CgOptions {
    /// Stop when ||r|| <= tolerance * ||b||.
    pub tolerance: f64,
    /// Stop after this many iterations whatever the residual.
    pub max_iterations: usize,
}

impl Default for CgOptions {
    fn default() -> Self {
        CgOptions { tolerance: 1e-5, max_iterations: 1000 }
    }
}

/// How a solve ended.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CgReport {
    /// Iterations taken.
    pub iterations: usize,
    /// ||r|| / ||b|| at the end.
    pub relative_residual: f64,
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// Solves A x = b starting from the given x; progress follows the residual's log reduction.
pub fn solve(
    a: &dyn LinearOperator,
    b: &[f64],
    x: &mut [f64],
    opts: CgOptions,
    progress: &dyn Progress,
) -> Result<CgReport> {
    let n = a.dim();
    let inv_diag: Vec<f64> = a.diagonal().into_iter().map(|d| if d > 0.0 { 1.0 / d } else { 1.0 }).collect();
    let mut r = vec![0.0; n];
    a.apply(x, &mut r);
    for (ri, bi) in r.iter_mut().zip(b) {
        *ri = bi - *ri;
    }
    let bnorm = dot(b, b).sqrt();
    if bnorm == 0.0 {
        x.iter_mut().for_each(|v| *v = 0.0);
        return Ok(CgReport { iterations: 0, relative_residual: 0.0 });
    }
    let target = opts.tolerance * bnorm;
    let mut z: Vec<f64> = r.iter().zip(&inv_diag).map(|(r, m)| r * m).collect();
    let mut p = z.clone();
    let mut ap = vec![0.0; n];
    let mut rz = dot(&r, &z);
    let r0 = dot(&r, &r).sqrt().max(target);
    let span = (r0 / target).ln().max(1e-12);
    for it in 0..opts.max_iterations {
        let rnorm = dot(&r, &r).sqrt();
        if rnorm <= target {
            return Ok(CgReport { iterations: it, relative_residual: rnorm / bnorm });
        }
        check(progress)?;
        progress.report(((r0 / rnorm).ln() / span) as f32, "solving");
        a.apply(&p, &mut ap);
        let alpha = rz / dot(&p, &ap);
        for i in 0..n {
            x[i] += alpha * p[i];
            r[i] -= alpha * ap[i];
            z[i] = r[i] * inv_diag[i];
        }
        let rz_new = dot(&r, &z);
        let beta = rz_new / rz;
        rz = rz_new;
        for i in 0..n {
            p[i] = z[i] + beta * p[i];
        }
    }
    let rnorm = dot(&r, &r).sqrt();
    Ok(CgReport { iterations: opts.max_iterations, relative_residual: rnorm / bnorm })
}
