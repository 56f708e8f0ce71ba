//! Weighted aggregation of patch estimates: out = sum(window * weight * estimate) / sum(window *
//! weight). Accumulators over a region add up exactly, so tiles of references can be processed
//! apart (or in parallel) and summed.

/// Modified Bessel function of the first kind, order 0, by its power series.
fn bessel_i0(x: f64) -> f64 {
    let (mut sum, mut term) = (1.0, 1.0);
    for m in 1..50 {
        term *= (x / 2.0) * (x / 2.0) / (m as f64 * m as f64);
        sum += term;
        if term < 1e-16 * sum {
            break;
        }
    }
    sum
}

/// k x k Kaiser window (outer product of two 1-D windows with shape parameter beta).
pub fn kaiser_window(k: usize, beta: f64) -> Vec<f32> {
    let one: Vec<f64> = (0..k)
        .map(|n| {
            if k == 1 {
                return 1.0;
            }
            let r = 2.0 * n as f64 / (k - 1) as f64 - 1.0;
            bessel_i0(beta * (1.0 - r * r).max(0.0).sqrt()) / bessel_i0(beta)
        })
        .collect();
    (0..k * k).map(|i| (one[i / k] * one[i % k]) as f32).collect()
}

/// Numerators (one per channel) and the shared denominator over a rectangle of the image, in f64
/// so that summing tiles in any grouping agrees to far below a grey level's thousandth.
#[derive(Clone, Debug)]
pub struct Accumulator {
    /// Left column of the rectangle in the image.
    pub x0: usize,
    /// Top row of the rectangle in the image.
    pub y0: usize,
    /// Width of the rectangle.
    pub width: usize,
    /// Height of the rectangle.
    pub height: usize,
    /// Weighted sums of patch values, one plane per channel, row by row.
    pub num: Vec<Vec<f64>>,
    /// Sums of the weights, row by row.
    pub den: Vec<f64>,
}

impl Accumulator {
    /// Zero sums over a rectangle, for `channels` channels.
    pub fn new(x0: usize, y0: usize, width: usize, height: usize, channels: usize) -> Self {
        Accumulator {
            x0,
            y0,
            width,
            height,
            num: vec![vec![0.0; width * height]; channels],
            den: vec![0.0; width * height],
        }
    }

    /// Adds one k x k patch estimate per channel at (x, y) in this accumulator's coordinates.
    pub fn add(&mut self, x: usize, y: usize, k: usize, patches: &[&[f32]], window: &[f32], weight: f32) {
        // Row slices, a channel at a time: the same sums as pixel by pixel (each sum is its own),
        // in loops the compiler can vectorise.
        for r in 0..k {
            let row = (y + r) * self.width + x;
            let win = &window[r * k..(r + 1) * k];
            for (d, w) in self.den[row..row + k].iter_mut().zip(win) {
                *d += f64::from(w * weight);
            }
            for (num, p) in self.num.iter_mut().zip(patches) {
                for ((o, w), v) in num[row..row + k].iter_mut().zip(win).zip(&p[r * k..(r + 1) * k]) {
                    *o += f64::from(w * weight) * f64::from(*v);
                }
            }
        }
    }

    /// Adds another accumulator whose rectangle lies inside this one.
    pub fn absorb(&mut self, other: &Accumulator) {
        let (ox, oy) = (other.x0 - self.x0, other.y0 - self.y0);
        for y in 0..other.height {
            let dst = (oy + y) * self.width + ox;
            let src = y * other.width;
            for x in 0..other.width {
                self.den[dst + x] += other.den[src + x];
                for ch in 0..self.num.len() {
                    self.num[ch][dst + x] += other.num[ch][src + x];
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kaiser_window_matches_numpy() {
        // Reference: numpy.kaiser(8, 2.0) from numpy 2.4 (the diagonal of the 2-D window is its square).
        let want = [
            0.438_676_28,
            0.681_324_26,
            0.876_839_91,
            0.985_822_51,
            0.985_822_51,
            0.876_839_91,
            0.681_324_26,
            0.438_676_28,
        ];
        let w = kaiser_window(8, 2.0);
        for (i, v) in want.iter().enumerate() {
            assert!((f64::from(w[i * 8 + i]).sqrt() - v).abs() < 1e-6, "{i}");
        }
    }
}
