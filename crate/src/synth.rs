//! Deterministic random numbers for synthetic scenes and noise: the sample generator, the tests
//! and the benchmarks' own scenes. SplitMix64 (G. Steele, D. Lea and C. Flood, OOPSLA 2014):
//! tiny, seedable, and good enough for noise fields.

/// A SplitMix64 generator.
pub struct Rng(u64);

impl Rng {
    /// A generator started from `seed`.
    pub fn new(seed: u64) -> Self {
        Rng(seed)
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1) with 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Box-Muller standard normal.
    pub fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }

    /// Uniform in [lo, hi).
    pub fn range(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.uniform()
    }

    /// Poisson(lambda): Knuth's product of uniforms below 100 (exact); above, the normal
    /// approximation rounded to an integer (mean lambda, variance lambda + 1/12).
    pub fn poisson(&mut self, lambda: f64) -> f64 {
        if lambda <= 0.0 {
            return 0.0;
        }
        if lambda >= 100.0 {
            return (lambda + lambda.sqrt() * self.normal()).round().max(0.0);
        }
        let limit = (-lambda).exp();
        let (mut k, mut p) = (0.0, self.uniform());
        while p > limit {
            k += 1.0;
            p *= self.uniform();
        }
        k
    }
}

/// e^x from basic IEEE operations only (range reduction to r in [-ln2/2, ln2/2], a degree-13
/// Taylor polynomial, then a power of two set in the exponent bits), so that native and wasm
/// builds compute the same bits: the platform's `exp` differs between them in the last place,
/// and results the page must reproduce byte for byte depend on it. Relative error below 1e-15.
pub fn exp_same_everywhere(x: f64) -> f64 {
    if x.is_nan() {
        return x;
    }
    if x > 709.0 {
        return f64::INFINITY;
    }
    if x < -745.0 {
        return 0.0;
    }
    if x == 0.0 {
        // What the steps below give exactly (r = 0, k = 0); the group graphs ask it of most pairs
        // of a flat group, whose distances the noise explains.
        return 1.0;
    }
    // ln 2 split in two (fdlibm's constants; the high part has trailing zero bits, so k * HI is
    // exact) to keep the reduction accurate for large |k|.
    #[allow(clippy::excessive_precision)] // the published digits, kept as published
    const LN2_HI: f64 = 6.931_471_803_691_238_164_90e-1;
    #[allow(clippy::excessive_precision)]
    const LN2_LO: f64 = 1.908_214_929_270_587_700_02e-10;
    let k = (x / std::f64::consts::LN_2).round();
    let r = (x - k * LN2_HI) - k * LN2_LO;
    let mut term = 1.0;
    let mut sum = 1.0;
    for n in 1..=13 {
        term = term * r / f64::from(n);
        sum += term;
    }
    // 2^k in two steps so that k down to -1074 stays representable.
    let half = (k / 2.0).trunc();
    let pow2 = |e: f64| f64::from_bits(((e as i64 + 1023) as u64) << 52);
    sum * pow2(half) * pow2(k - half)
}

#[cfg(test)]
mod tests {
    use super::exp_same_everywhere;

    #[test]
    fn exp_matches_the_platform_to_rounding() {
        // Reference: the platform's own exp, within a few units in the last place.
        for i in -700..=700 {
            let x = f64::from(i) * 0.37;
            if x.abs() > 700.0 {
                continue;
            }
            let (a, b) = (exp_same_everywhere(x), x.exp());
            assert!(((a - b) / b).abs() < 1e-14, "{x}: {a} against {b}");
        }
        assert_eq!(exp_same_everywhere(0.0), 1.0);
    }
}
