//! Deterministic random numbers for synthetic scenes and noise: the sample generator, the tests
//! and the benchmarks' own scenes. SplitMix64 (G. Steele, D. Lea and C. Flood, OOPSLA 2014):
//! tiny, seedable, and good enough for noise fields.

pub struct Rng(u64);

impl Rng {
    pub fn new(seed: u64) -> Self {
        Rng(seed)
    }

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
