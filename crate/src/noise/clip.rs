//! Undoing the bias of clipped noise. Where an image sits at 0 (or at its top value) the noise
//! below (above) it was cut off, so a flat area of true value mu reads on average
//! m(mu) = mu Phi(mu / s) + s phi(mu / s) > mu, and a denoiser, which estimates that average,
//! returns a background that is too bright. Inverting m maps the estimate back to mu (A. Foi,
//! "Clipped noisy images: heteroskedastic modeling and practical denoising", Signal Processing
//! 2009). The two ends are treated separately, which holds while the range is many sigmas wide.
//! Built on [`exp_same_everywhere`] so that the page's table is the command line's, bit for bit.

use crate::synth::exp_same_everywhere;
use serde::{Deserialize, Serialize};

/// phi(t), the standard normal density.
fn density(t: f64) -> f64 {
    exp_same_everywhere(-0.5 * t * t) / (2.0 * std::f64::consts::PI).sqrt()
}

/// Phi(t) through erfc, by the Chebyshev fit of W. H. Press et al., Numerical Recipes (2nd ed.,
/// section 6.2), fractional error below 1.2e-7 everywhere.
pub fn normal_cdf(t: f64) -> f64 {
    let x = -t / std::f64::consts::SQRT_2;
    let z = x.abs();
    let u = 1.0 / (1.0 + 0.5 * z);
    let erfc = u * exp_same_everywhere(
        -z * z - 1.265_512_23
            + u * (1.000_023_68
                + u * (0.374_091_96
                    + u * (0.096_784_18
                        + u * (-0.186_288_06
                            + u * (0.278_868_07
                                + u * (-1.135_203_98
                                    + u * (1.488_515_87 + u * (-0.822_152_23 + u * 0.170_872_77)))))))),
    );
    let erfc = if x >= 0.0 { erfc } else { 2.0 - erfc };
    0.5 * erfc
}

/// The mean of max(0, t + Z), Z standard normal: t Phi(t) + phi(t).
pub fn clipped_mean(t: f64) -> f64 {
    t * normal_cdf(t) + density(t)
}

const T_MIN: f64 = -6.0;
const T_MAX: f64 = 8.0;
const STEPS: usize = 2800;

/// The inverse of the clipped mean at one or both ends of [0, top], for noise std `sigma`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "ClipSpec", into = "ClipSpec")]
pub struct ClipInverse {
    sigma: f64,
    top: f64,
    low: bool,
    high: bool,
    /// m(t) on a regular grid of t over [T_MIN, T_MAX]: increasing, so invertible.
    table: Vec<f64>,
}

/// A [`ClipInverse`] as it crosses to the page and back: what made it; the table is made again
/// (the same bits: [`ClipInverse::new`] depends on nothing else).
#[derive(Serialize, Deserialize)]
struct ClipSpec {
    sigma: f64,
    top: f64,
    low: bool,
    high: bool,
}

impl From<ClipInverse> for ClipSpec {
    fn from(c: ClipInverse) -> Self {
        ClipSpec { sigma: c.sigma, top: c.top, low: c.low, high: c.high }
    }
}

impl TryFrom<ClipSpec> for ClipInverse {
    type Error = String;
    fn try_from(s: ClipSpec) -> Result<Self, String> {
        if !(s.sigma.is_finite() && s.top.is_finite() && s.sigma >= 0.0 && s.top > 0.0) {
            return Err("a clipping correction's level or range is not a finite positive number".into());
        }
        Ok(ClipInverse::new(s.sigma, s.top, s.low, s.high))
    }
}

impl ClipInverse {
    /// The inverse for noise of std `sigma` on data clipped at 0 (`low`) and/or at `top` (`high`).
    pub fn new(sigma: f64, top: f64, low: bool, high: bool) -> Self {
        let table = (0..=STEPS).map(|i| clipped_mean(T_MIN + (T_MAX - T_MIN) * i as f64 / STEPS as f64)).collect();
        ClipInverse { sigma, top, low, high, table }
    }

    /// t with m(t) = v (v in units of sigma), by bisection on the table, linear within a step.
    fn invert(&self, v: f64) -> f64 {
        if v >= self.table[STEPS] {
            return v; // m(t) = t beyond the table (Phi = 1, phi = 0 to double precision)
        }
        let i = self.table.partition_point(|m| *m < v).clamp(1, STEPS);
        let (a, b) = (self.table[i - 1], self.table[i]);
        let step = (T_MAX - T_MIN) / STEPS as f64;
        T_MIN + step * ((i - 1) as f64 + (v - a) / (b - a).max(1e-300))
    }

    /// The true value whose clipped mean is `y`.
    pub fn apply(&self, y: f64) -> f64 {
        if self.sigma <= 0.0 {
            return y;
        }
        if self.low && (y < 0.5 * self.top || !self.high) && y < T_MAX * self.sigma {
            return self.sigma * self.invert(y.max(1e-9 * self.sigma) / self.sigma);
        }
        if self.high && self.top - y < T_MAX * self.sigma && (y >= 0.5 * self.top || !self.low) {
            return self.top - self.sigma * self.invert((self.top - y).max(1e-9 * self.sigma) / self.sigma);
        }
        y
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::synth::Rng;

    #[test]
    fn normal_cdf_matches_tabulated_values() {
        // Published table values of the standard normal CDF (any statistics handbook).
        for (t, want) in [(0.0, 0.5), (1.0, 0.841_344_746), (-1.96, 0.024_997_895), (3.0, 0.998_650_102)] {
            assert!((normal_cdf(t) - want).abs() < 1e-7, "{t}: {}", normal_cdf(t));
        }
    }

    #[test]
    fn the_inverse_recovers_the_mean_of_clipped_samples() {
        // Invariant by simulation: the sample mean of max(0, mu + s Z) maps back to mu.
        let mut r = Rng::new(17);
        let s = 20.0;
        let inv = ClipInverse::new(s, 255.0, true, true);
        for mu in [0.0, 5.0, 20.0, 60.0] {
            let n = 400_000;
            let m = (0..n).map(|_| (mu + s * r.normal()).clamp(0.0, 255.0)).sum::<f64>() / f64::from(n);
            assert!((inv.apply(m) - mu).abs() < 0.25, "mu {mu}: {}", inv.apply(m));
            let top = (0..n).map(|_| (255.0 - mu + s * r.normal()).clamp(0.0, 255.0)).sum::<f64>() / f64::from(n);
            assert!((inv.apply(top) - (255.0 - mu)).abs() < 0.25, "top - {mu}: {}", inv.apply(top));
        }
        // Far from both ends nothing changes (m(t) - t is below 1e-9 there).
        assert!((inv.apply(128.0) - 128.0).abs() < 1e-6);
    }
}
