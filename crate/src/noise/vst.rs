//! Variance stabilisation for photon-limited data. Poisson counts z = x / gain, optionally with
//! Gaussian read noise of std `read` (grey levels): the generalised Anscombe transform
//! f(x) = 2 sqrt(x / gain + 3/8 + read^2 / gain^2) gives noise of unit variance. The inverse is the
//! closed-form approximation of the exact unbiased inverse of the Anscombe transform (M. Makitalo
//! and A. Foi, "A closed-form approximation of the exact unbiased inverse of the Anscombe
//! variance-stabilizing transformation", IEEE TIP 2011). With read noise, z + read^2 / gain^2 is
//! treated as Poisson with that mean (same mean and variance), so the same inverse applies and
//! the offset is subtracted afterwards: an approximation that holds for read noise that is not
//! large against the signal.

use serde::{Deserialize, Serialize};

/// sqrt(3/2); the forward transform of 0 counts is 2 sqrt(3/8) = sqrt(3/2).
const SQRT_3_2: f64 = 1.224_744_871_391_589;

/// Poisson-Gaussian noise of a camera: gain x Poisson(photons) + offset + N(0, read^2).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct PhotonNoise {
    /// Grey levels per photon.
    pub gain: f64,
    /// Gaussian read-noise std in grey levels.
    pub read: f64,
    /// Black level: the grey level of zero photons.
    pub offset: f64,
}

impl PhotonNoise {
    /// The read noise's variance in photons squared, added to the counts as if it were Poisson.
    fn read_counts(&self) -> f64 {
        (self.read / self.gain).powi(2)
    }

    /// The generalised Anscombe transform: noise of about unit variance.
    pub fn forward(&self, x: f64) -> f64 {
        2.0 * ((x - self.offset) / self.gain + 0.375 + self.read_counts()).max(0.0).sqrt()
    }

    /// Its unbiased inverse: the Makitalo-Foi closed form ([`anscombe_inverse`]) in photons, back to
    /// grey levels.
    pub fn inverse(&self, d: f64) -> f64 {
        self.gain * (anscombe_inverse(d) - self.read_counts()).max(0.0) + self.offset
    }
}

/// A variance-stabilising transform for any measured noise curve v(y):
/// f(y) = integral from 0 to y of dt / sqrt(v(t)), so that noise of variance v(y) becomes noise
/// of unit variance to first order (the delta method). Tabulated on a fine grid over the range and
/// inverted by interpolation; the inverse is the algebraic one, whose bias (about f'' var / 2) is
/// small where the curve changes slowly against the noise, as a camera's gamma does.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "CurveTable", into = "CurveTable")]
pub struct CurveVst {
    step: f64,
    table: Vec<f64>,
}

const CURVE_STEPS: usize = 4096;

/// A [`CurveVst`] as it crosses to the page and back: checked on the way in, so a table that
/// came from outside cannot make `forward` or `inverse` index past its end.
#[derive(Serialize, Deserialize)]
struct CurveTable {
    step: f64,
    table: Vec<f64>,
}

impl From<CurveVst> for CurveTable {
    fn from(c: CurveVst) -> Self {
        CurveTable { step: c.step, table: c.table }
    }
}

impl TryFrom<CurveTable> for CurveVst {
    type Error = String;
    fn try_from(t: CurveTable) -> Result<Self, String> {
        let increasing = t.table.windows(2).all(|w| w[1] >= w[0]);
        let finite = t.table.iter().all(|v| v.is_finite());
        if !(t.step.is_finite() && t.step > 0.0 && t.table.len() >= 2 && increasing && finite) {
            return Err("a brightness curve's table is not a finite increasing table".into());
        }
        Ok(CurveVst { step: t.step, table: t.table })
    }
}

impl CurveVst {
    /// The transform of the curve `variance` over [0, `top`].
    pub fn new(top: f64, variance: impl Fn(f64) -> f64) -> Self {
        let step = top.max(1e-9) / CURVE_STEPS as f64;
        let mut table = Vec::with_capacity(CURVE_STEPS + 1);
        let mut acc = 0.0;
        table.push(0.0);
        for i in 0..CURVE_STEPS {
            // Midpoint rule over each step.
            let y = (i as f64 + 0.5) * step;
            acc += step / variance(y).max(1e-12).sqrt();
            table.push(acc);
        }
        CurveVst { step, table }
    }

    /// f(y); beyond the table, continued with the slope of its last step (and its first, below 0).
    pub fn forward(&self, y: f64) -> f64 {
        let t = y / self.step;
        let n = self.table.len() - 1;
        let i = (t.floor().max(0.0) as usize).min(n - 1);
        let (a, b) = (self.table[i], self.table[i + 1]);
        a + (b - a) * (t - i as f64)
    }

    /// f^-1(d) by bisection on the monotone table, then linear within the step.
    pub fn inverse(&self, d: f64) -> f64 {
        let n = self.table.len() - 1;
        let i = match self.table.binary_search_by(|v| v.total_cmp(&d)) {
            Ok(i) => i.min(n - 1),
            Err(i) => i.clamp(1, n) - 1,
        };
        let (a, b) = (self.table[i], self.table[i + 1]);
        (i as f64 + (d - a) / (b - a).max(1e-300)) * self.step
    }
}

/// How one channel is stabilised: photon noise by the generalised Anscombe transform, any other
/// brightness-dependent noise by its measured curve.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum Stabiliser {
    /// Photon noise, by the generalised Anscombe transform.
    Photon(PhotonNoise),
    /// Any other brightness dependence, by its measured curve.
    Curve(CurveVst),
    /// Noise of one level per channel but different levels across colour channels: each channel
    /// multiplied by this factor so all carry the same level before the colour transform mixes them.
    Scale(f64),
}

impl Stabiliser {
    /// The forward transform of one sample.
    pub fn forward(&self, y: f64) -> f64 {
        match self {
            Stabiliser::Photon(p) => p.forward(y),
            Stabiliser::Curve(c) => c.forward(y),
            Stabiliser::Scale(k) => y * k,
        }
    }
    /// The inverse transform of one sample.
    pub fn inverse(&self, d: f64) -> f64 {
        match self {
            Stabiliser::Photon(p) => p.inverse(d),
            Stabiliser::Curve(c) => c.inverse(d),
            Stabiliser::Scale(k) => d / k,
        }
    }
}

/// Makitalo-Foi closed form for unit gain. Below D = sqrt(3/2) (the transform of zero counts) the
/// formula passes zero and turns back up, so the result is clamped to zero there.
pub fn anscombe_inverse(d: f64) -> f64 {
    if d <= SQRT_3_2 {
        return 0.0;
    }
    let z = d * d / 4.0 + 0.25 * SQRT_3_2 / d - 11.0 / 8.0 / (d * d) + 0.625 * SQRT_3_2 / (d * d * d) - 0.125;
    z.max(0.0)
}

/// The plain algebraic inverse (D/2)^2 - 3/8, biased at low counts; kept for comparison.
pub fn anscombe_inverse_algebraic(d: f64) -> f64 {
    ((d / 2.0).powi(2) - 0.375).max(0.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// E[f(z)] for z ~ Poisson(lambda), summed over the pmf (the limit of the sample mean).
    fn expected_forward(lambda: f64) -> f64 {
        let p = PhotonNoise { gain: 1.0, read: 0.0, offset: 0.0 };
        let (mut pmf, mut sum) = ((-lambda).exp(), 0.0);
        for z in 0..(lambda * 10.0 + 100.0) as usize {
            sum += pmf * p.forward(z as f64);
            pmf *= lambda / (z + 1) as f64;
        }
        sum
    }

    #[test]
    fn inverse_is_continuous_at_zero_counts() {
        // Closed form evaluated at D = sqrt(3/2): 3/8 + 1/4 - 11/12 + 5/12 - 1/8 = 0.
        assert!(anscombe_inverse(SQRT_3_2 + 1e-9).abs() < 1e-6);
    }

    #[test]
    fn exact_unbiased_inverse_recovers_the_poisson_mean() {
        // Invariant (Makitalo and Foi 2011): the inverse maps E[f(z)] back to lambda; within 1% for
        // peaks 1 to 100, where the algebraic inverse is visibly biased at low counts.
        for lambda in [1.0, 2.0, 5.0, 10.0, 30.0, 100.0] {
            let e = expected_forward(lambda);
            let got = anscombe_inverse(e);
            assert!((got / lambda - 1.0).abs() < 0.01, "lambda {lambda}: {got}");
        }
        let biased = anscombe_inverse_algebraic(expected_forward(2.0));
        assert!((biased / 2.0 - 1.0).abs() > 0.05);
    }

    #[test]
    fn forward_stabilises_the_variance_to_one() {
        // Invariant of the Anscombe transform: Var[f(z)] is close to 1 for moderate counts.
        let p = PhotonNoise { gain: 1.0, read: 0.0, offset: 0.0 };
        for lambda in [10.0f64, 50.0] {
            let (mut pmf, mut m1, mut m2) = ((-lambda).exp(), 0.0, 0.0);
            for z in 0..(lambda * 10.0 + 100.0) as usize {
                let f = p.forward(z as f64);
                m1 += pmf * f;
                m2 += pmf * f * f;
                pmf *= lambda / (z + 1) as f64;
            }
            assert!((m2 - m1 * m1 - 1.0).abs() < 0.02, "lambda {lambda}: {}", m2 - m1 * m1);
        }
    }

    #[test]
    fn curve_transform_inverts_and_stabilises() {
        // Closed form: for v(y) = (a + b y)^2 the transform is ln((a + b y) / a) / b; the table
        // matches it, inverts it, and noise of std a + b y comes out with unit std (delta method).
        let (a, b) = (12.0, -0.03);
        let t = CurveVst::new(255.0, |y| (a + b * y).powi(2));
        for y in [0.0, 10.0, 100.0, 200.0, 254.0] {
            let want = ((a + b * y) / a).ln() / b;
            assert!((t.forward(y) - want).abs() < 1e-3, "{y}: {} against {want}", t.forward(y));
            assert!((t.inverse(t.forward(y)) - y).abs() < 1e-6);
        }
        let slope = (t.forward(150.5) - t.forward(149.5)) * (a + b * 150.0);
        assert!((slope - 1.0).abs() < 1e-3);
    }

    #[test]
    fn poisson_gaussian_mean_is_recovered() {
        // Invariant: for x = gain * Poisson(lambda) + N(0, read^2), inverse(E[f(x)]) is close to
        // gain * lambda (within 1.5% here; the read noise is 0.75 photons). E is summed over the
        // Poisson pmf and a 241-point trapezoid rule over +-6 read-noise stds.
        let p = PhotonNoise { gain: 4.0, read: 3.0, offset: 0.0 };
        for lambda in [5.0f64, 20.0, 60.0] {
            let (mut pmf, mut e) = ((-lambda).exp(), 0.0);
            for z in 0..(lambda * 10.0 + 100.0) as usize {
                let (mut g, mut wsum) = (0.0, 0.0);
                for i in 0..=240 {
                    let n = -6.0 + 12.0 * f64::from(i) / 240.0;
                    let wt = (-0.5 * n * n).exp() * if i == 0 || i == 240 { 0.5 } else { 1.0 };
                    g += wt * p.forward(p.gain * z as f64 + p.read * n);
                    wsum += wt;
                }
                e += pmf * g / wsum;
                pmf *= lambda / (z + 1) as f64;
            }
            let got = p.inverse(e);
            assert!((got / (p.gain * lambda) - 1.0).abs() < 0.015, "lambda {lambda}: {got}");
        }
    }
}
