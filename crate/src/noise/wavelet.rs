//! Wavelet MAD estimate (D. Donoho and I. Johnstone, "Ideal spatial adaptation by wavelet
//! shrinkage", Biometrika 1994): sigma = median(|HH1|) / 0.6745 on the finest diagonal detail
//! band. The band is computed with the Daubechies-2 filters and half-sample symmetric borders,
//! the same choices as scikit-image's `estimate_sigma` (through PyWavelets `dwt2`), so the two can
//! be compared directly.

use crate::planes::{mirror, Plane};

/// Daubechies-2 decomposition high-pass filter (PyWavelets `Wavelet('db2').dec_hi`).
pub const DB2_DEC_HI: [f64; 4] =
    [-0.482_962_913_144_690_25, 0.836_516_303_737_469, -0.224_143_868_041_857_35, -0.129_409_522_550_921_45];

/// Median absolute deviation to sigma for Gaussian data: the 0.75 quantile of N(0,1).
pub const MAD_TO_SIGMA: f64 = 0.674_489_750_196_081_7;

/// One level of high-pass filtering and downsampling along one axis, PyWavelets sizing:
/// out length floor((n + L - 1) / 2), out[o] = sum_k f[k] x[2o + 1 - k].
fn highpass_down(get: impl Fn(isize) -> f64, n: usize) -> Vec<f64> {
    let l = DB2_DEC_HI.len();
    let m = (n + l - 1) / 2;
    (0..m).map(|o| DB2_DEC_HI.iter().enumerate().map(|(k, f)| f * get(2 * o as isize + 1 - k as isize)).sum()).collect()
}

/// The finest diagonal (high-high) detail band.
pub fn hh_band(p: &Plane) -> (usize, usize, Vec<f64>) {
    let (w, h) = (p.width, p.height);
    let rows: Vec<Vec<f64>> = (0..h).map(|y| highpass_down(|x| f64::from(p.data[y * w + mirror(x, w)]), w)).collect();
    let bw = rows.first().map_or(0, |r| r.len());
    let cols: Vec<Vec<f64>> = (0..bw).map(|x| highpass_down(|y| rows[mirror(y, h)][x], h)).collect();
    let bh = cols.first().map_or(0, |c| c.len());
    let mut band = vec![0.0; bw * bh];
    for (x, col) in cols.iter().enumerate() {
        for (y, v) in col.iter().enumerate() {
            band[y * bw + x] = *v;
        }
    }
    (bw, bh, band)
}

/// The median (mean of the middle two for an even count; 0 for none); reorders `values`.
pub fn median(values: &mut [f64]) -> f64 {
    if values.is_empty() {
        return 0.0;
    }
    let mid = values.len() / 2;
    let (_, m, _) = values.select_nth_unstable_by(mid, |a, b| a.total_cmp(b));
    let upper = *m;
    if values.len() % 2 == 1 {
        upper
    } else {
        let lower = values[..mid].iter().copied().fold(f64::NEG_INFINITY, f64::max);
        0.5 * (lower + upper)
    }
}

/// Donoho and Johnstone's noise std: median |finest diagonal Daubechies-2 band| / 0.6745
/// (0 under 2 x 2).
pub fn sigma_mad(p: &Plane) -> f64 {
    if p.width < 2 || p.height < 2 {
        return 0.0;
    }
    let (_, _, band) = hh_band(p);
    let mut abs: Vec<f64> = band.into_iter().map(f64::abs).collect();
    median(&mut abs) / MAD_TO_SIGMA
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn db2_high_pass_is_orthonormal_and_has_two_vanishing_moments() {
        // Closed forms for Daubechies-2: unit energy, zero mean, zero first moment.
        let e: f64 = DB2_DEC_HI.iter().map(|v| v * v).sum();
        let m0: f64 = DB2_DEC_HI.iter().sum();
        let m1: f64 = DB2_DEC_HI.iter().enumerate().map(|(k, v)| k as f64 * v).sum();
        assert!((e - 1.0).abs() < 1e-12 && m0.abs() < 1e-12 && m1.abs() < 1e-12);
    }

    #[test]
    fn median_of_even_and_odd_counts() {
        assert_eq!(median(&mut [3.0, 1.0, 2.0]), 2.0);
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), 2.5);
    }
}
