//! Anscombe variance-stabilising transform for Poisson (photon-limited) data and the closed-form
//! approximation of its exact unbiased inverse (M. Makitalo and A. Foi, "A closed-form
//! approximation of the exact unbiased inverse of the Anscombe variance-stabilizing
//! transformation", IEEE TIP 2011). `gain` is grey levels per photon: z = x / gain is Poisson.

/// sqrt(3/2); the forward transform of 0 counts is 2 sqrt(3/8) = sqrt(3/2).
const SQRT_3_2: f64 = 1.224_744_871_391_589;

/// 2 sqrt(z + 3/8) with z = x / gain: unit variance for Poisson z.
pub fn forward(x: f64, gain: f64) -> f64 {
    2.0 * (x / gain + 0.375).max(0.0).sqrt()
}

/// Makitalo-Foi closed form, times gain. Below D = sqrt(3/2) (the transform of zero counts) the
/// formula passes zero and turns back up, so the result is clamped to zero there.
pub fn inverse(d: f64, gain: f64) -> f64 {
    if d <= SQRT_3_2 {
        return 0.0;
    }
    let z = d * d / 4.0 + 0.25 * SQRT_3_2 / d - 11.0 / 8.0 / (d * d) + 0.625 * SQRT_3_2 / (d * d * d) - 0.125;
    gain * z.max(0.0)
}

/// The plain algebraic inverse (D/2)^2 - 3/8, biased at low counts; kept for comparison.
pub fn inverse_algebraic(d: f64, gain: f64) -> f64 {
    gain * ((d / 2.0).powi(2) - 0.375).max(0.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inverse_is_continuous_at_zero_counts() {
        // Closed form evaluated at D = sqrt(3/2): 3/8 + 1/4 - 11/12 + 5/12 - 1/8 = 0.
        assert!(inverse(SQRT_3_2 + 1e-9, 1.0).abs() < 1e-6);
    }

    #[test]
    fn large_counts_approach_the_algebraic_inverse() {
        // For large D the correction terms vanish: I(D) -> D^2/4 - 1/8 (Makitalo and Foi 2011).
        let d = forward(10_000.0, 1.0);
        assert!((inverse(d, 1.0) - (d * d / 4.0 - 0.125)).abs() < 1e-2);
    }
}
