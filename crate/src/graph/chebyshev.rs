//! Chebyshev polynomial approximation of a spectral graph filter h(L) applied in the vertex
//! domain, with only products L x (D. Hammond, P. Vandergheynst and R. Gribonval, "Wavelets on
//! graphs via spectral graph theory", ACHA 2011, section 6).

use super::LinearOperator;
use crate::error::Result;
use crate::progress::{check, Progress};

/// Coefficients c_0..c_K of h on [0, lambda_max] by Chebyshev-Gauss quadrature with M points:
/// c_k = 2/M sum_m cos(pi k (m - 1/2) / M) h(a (cos(pi (m - 1/2) / M) + 1)), a = lambda_max / 2.
pub fn coefficients(h: impl Fn(f64) -> f64, lambda_max: f64, order: usize) -> Vec<f64> {
    let m = (order + 1).max(64);
    let a = lambda_max / 2.0;
    let samples: Vec<f64> =
        (1..=m).map(|j| h(a * ((std::f64::consts::PI * (j as f64 - 0.5) / m as f64).cos() + 1.0))).collect();
    (0..=order)
        .map(|k| {
            let s: f64 = samples
                .iter()
                .enumerate()
                .map(|(j, v)| v * (std::f64::consts::PI * k as f64 * (j as f64 + 0.5) / m as f64).cos())
                .sum();
            2.0 * s / m as f64
        })
        .collect()
}

/// The order at which the heat kernel's coefficients fall below `tol` of c_0 (they decay like
/// modified Bessel functions I_k(t a)), capped.
pub fn heat_order(t: f64, lambda_max: f64, tol: f64, cap: usize) -> usize {
    let c = coefficients(|l| (-t * l).exp(), lambda_max, cap);
    let c0 = c[0].abs().max(1e-300);
    let mut k = cap;
    while k > 2 && c[k].abs() < tol * c0 {
        k -= 1;
    }
    (k + 1).min(cap)
}

/// y = h(L) x via the three-term recurrence T_k = 2 (L - a)/a T_{k-1} - T_{k-2}.
pub fn apply(
    op: &dyn LinearOperator,
    coeffs: &[f64],
    lambda_max: f64,
    x: &[f64],
    progress: &dyn Progress,
) -> Result<Vec<f64>> {
    let n = op.dim();
    let a = lambda_max / 2.0;
    let mut out: Vec<f64> = x.iter().map(|v| 0.5 * coeffs[0] * v).collect();
    if coeffs.len() == 1 {
        return Ok(out);
    }
    let mut prev = x.to_vec();
    let mut cur = vec![0.0; n];
    op.apply(x, &mut cur);
    for (c, p) in cur.iter_mut().zip(&prev) {
        *c = (*c - a * p) / a;
    }
    for (o, c) in out.iter_mut().zip(&cur) {
        *o += coeffs[1] * c;
    }
    let mut next = vec![0.0; n];
    for (k, ck) in coeffs.iter().enumerate().skip(2) {
        check(progress)?;
        progress.report(k as f32 / coeffs.len() as f32, "filtering");
        op.apply(&cur, &mut next);
        for i in 0..n {
            next[i] = 2.0 * (next[i] - a * cur[i]) / a - prev[i];
            out[i] += ck * next[i];
        }
        std::mem::swap(&mut prev, &mut cur);
        std::mem::swap(&mut cur, &mut next);
    }
    Ok(out)
}
