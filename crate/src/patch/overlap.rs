//! How much noise two patches of a group share: overlapping patches hold the same pixels, and
//! under correlated noise even nearby ones share its grain. A group's mean patch then carries
//! more noise than sigma_f^2 / n per coefficient, and the group's other graph frequencies less.

use crate::patch::transform::dct_matrix;

/// Per lag d between two patches' corners (|dx|, |dy| < k, row-major, centre (k - 1, k - 1)) and
/// per coefficient f of the k x k DCT: the correlation of coefficient f of the two patches,
/// rho_f(d) = R_f(d) / R_f(0), with R_f(d) = sum over e of C(d + e) A_f(e), C the noise's
/// covariance by pixel lag (`lag_cov`, the same layout; None: white noise) and A_f the
/// autocorrelation of basis image f. Lags of k or more share no noise (C is taken as 0 there).
/// Layout: [d k^2 + f].
pub fn coefficient_correlation(k: usize, lag_cov: Option<&[f64]>) -> Vec<f32> {
    let kk = k * k;
    let side = 2 * k - 1;
    let c = dct_matrix(k);
    let phi = |f: usize, y: usize, x: usize| f64::from(c[(f / k) * k + y]) * f64::from(c[(f % k) * k + x]);
    // A_f(e) for every lag e.
    let mut auto = vec![0.0f64; side * side * kk];
    for f in 0..kk {
        for ey in 0..side {
            for ex in 0..side {
                let (oy, ox) = (ey as isize - (k as isize - 1), ex as isize - (k as isize - 1));
                let mut s = 0.0;
                for py in 0..k as isize {
                    for px in 0..k as isize {
                        let (qy, qx) = (py + oy, px + ox);
                        if (0..k as isize).contains(&qy) && (0..k as isize).contains(&qx) {
                            s += phi(f, py as usize, px as usize) * phi(f, qy as usize, qx as usize);
                        }
                    }
                }
                auto[(ey * side + ex) * kk + f] = s;
            }
        }
    }
    let cov = |y: isize, x: isize| -> f64 {
        let r = k as isize - 1;
        if y.abs() > r || x.abs() > r {
            return 0.0;
        }
        let at = (y + r) as usize * side + (x + r) as usize;
        match lag_cov {
            Some(cv) => cv[at],
            None => f64::from(u8::from(y == 0 && x == 0)),
        }
    };
    let r = k as isize - 1;
    let mut raw = vec![0.0f64; side * side * kk];
    for dy in -r..=r {
        for dx in -r..=r {
            let d = (dy + r) as usize * side + (dx + r) as usize;
            for ey in -r..=r {
                for ex in -r..=r {
                    let cv = cov(dy + ey, dx + ex);
                    if cv != 0.0 {
                        let e = (ey + r) as usize * side + (ex + r) as usize;
                        for f in 0..kk {
                            raw[d * kk + f] += cv * auto[e * kk + f];
                        }
                    }
                }
            }
        }
    }
    let centre = (r as usize * side + r as usize) * kk;
    let own: Vec<f64> = raw[centre..centre + kk].to_vec();
    raw.chunks(kk)
        .flat_map(|row| row.iter().zip(&own).map(|(v, z)| if *z > 0.0 { (v / z).clamp(-1.0, 1.0) as f32 } else { 0.0 }))
        .collect()
}

/// The noise variance of the group-mean coefficient (graph frequency 0, entries `u0`) relative to
/// one patch's, per DCT coefficient: sum over pairs i, i' of u0_i u0_i' rho_f(d_ii'), pairs in
/// different slices sharing nothing. `positions` and `slices` as in [`crate::patch::Group`].
pub fn mean_share(
    rho: &[f32],
    k: usize,
    positions: &[(usize, usize)],
    slice: impl Fn(usize) -> usize,
    u0: impl Fn(usize) -> f32,
    out: &mut [f32],
) {
    let kk = k * k;
    let side = 2 * k - 1;
    let r = k as isize - 1;
    out.iter_mut().for_each(|v| *v = 0.0);
    let n = positions.len();
    // Sum the pair weights per lag first: far fewer lags than pairs.
    let mut per_lag = vec![0.0f32; side * side];
    for i in 0..n {
        per_lag[(r as usize) * side + r as usize] += u0(i) * u0(i);
        for j in i + 1..n {
            if slice(i) != slice(j) {
                continue;
            }
            let dy = positions[j].1 as isize - positions[i].1 as isize;
            let dx = positions[j].0 as isize - positions[i].0 as isize;
            if dy.abs() > r || dx.abs() > r {
                continue;
            }
            // rho is symmetric in d (both directions give the same correlation).
            per_lag[(dy + r) as usize * side + (dx + r) as usize] += 2.0 * u0(i) * u0(j);
        }
    }
    for (d, &w) in per_lag.iter().enumerate() {
        if w != 0.0 {
            crate::patch::transform::axpy(out, w, &rho[d * kk..(d + 1) * kk]);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::patch::transform::dct2;

    fn at(k: usize, dx: isize, dy: isize) -> usize {
        let side = 2 * k - 1;
        (dy + k as isize - 1) as usize * side + (dx + k as isize - 1) as usize
    }

    #[test]
    fn white_noise_dc_correlation_is_the_shared_area() {
        // Closed form: the DC basis image is constant, so under white noise the DC coefficients of
        // two patches d apart correlate as the share of pixels they have in common,
        // (k - |dx|)(k - |dy|) / k^2; and every coefficient is fully correlated with itself.
        let k = 8;
        let rho = coefficient_correlation(k, None);
        for dy in -7isize..=7 {
            for dx in -7isize..=7 {
                let want = ((k as isize - dx.abs()) * (k as isize - dy.abs())) as f32 / 64.0;
                assert!((rho[at(k, dx, dy) * 64] - want).abs() < 1e-5, "({dx}, {dy})");
            }
        }
        assert!(rho[at(k, 0, 0) * 64..][..64].iter().all(|&r| (r - 1.0).abs() < 1e-5));
    }

    #[test]
    fn correlated_noise_table_matches_simulation() {
        // Simulation as the outside reference: white noise filtered by [1 2 1] / 4 each way, whose
        // covariance by lag has the closed form c(dx) c(dy) with c = (6, 4, 1) / 16 at lags 0, 1, 2.
        // The correlation of DCT coefficients of patch pairs d apart, measured over many pairs,
        // must match the table (within 0.03: about four standard errors of 20 000 pairs).
        let k = 8;
        let side = 2 * k - 1;
        let c1 = |d: isize| match d.abs() {
            0 => 6.0 / 16.0,
            1 => 4.0 / 16.0,
            2 => 1.0 / 16.0,
            _ => 0.0,
        };
        let mut cov = vec![0.0; side * side];
        for dy in -7isize..=7 {
            for dx in -7isize..=7 {
                cov[at(k, dx, dy)] = c1(dx) * c1(dy);
            }
        }
        let rho = coefficient_correlation(k, Some(&cov));
        let (w, h) = (400usize, 400usize);
        let mut r = crate::synth::Rng::new(11);
        let white: Vec<f64> = (0..(w + 2) * (h + 2)).map(|_| r.normal()).collect();
        let tap = [0.25, 0.5, 0.25];
        let mut img = vec![0.0f32; w * h];
        for y in 0..h {
            for x in 0..w {
                let mut s = 0.0;
                for (i, a) in tap.iter().enumerate() {
                    for (j, b) in tap.iter().enumerate() {
                        s += a * b * white[(y + i) * (w + 2) + x + j];
                    }
                }
                img[y * w + x] = s as f32;
            }
        }
        let dct = dct_matrix(k);
        let coeffs = |x: usize, y: usize| -> Vec<f32> {
            let patch: Vec<f32> = (0..k * k).map(|i| img[(y + i / k) * w + x + i % k]).collect();
            let (mut out, mut tmp) = (vec![0.0; k * k], vec![0.0; k * k]);
            dct2(&dct, k, &patch, &mut out, &mut tmp);
            out
        };
        for (dx, dy) in [(1isize, 0isize), (2, 1), (0, 3), (5, 5)] {
            let mut sums = vec![(0.0f64, 0.0f64, 0.0f64); k * k];
            for y in (0..h - 2 * k).step_by(3) {
                for x in (0..w - 2 * k).step_by(3) {
                    let a = coeffs(x, y);
                    let b = coeffs((x as isize + dx) as usize, (y as isize + dy) as usize);
                    for f in 0..k * k {
                        let (aa, bb) = (f64::from(a[f]), f64::from(b[f]));
                        sums[f].0 += aa * bb;
                        sums[f].1 += aa * aa;
                        sums[f].2 += bb * bb;
                    }
                }
            }
            for f in [0usize, 1, 8, 9, 18, 63] {
                let (ab, aa, bb) = sums[f];
                let measured = ab / (aa * bb).sqrt();
                let table = f64::from(rho[at(k, dx, dy) * 64 + f]);
                assert!((measured - table).abs() < 0.03, "d ({dx}, {dy}) f {f}: {measured:.3} vs {table:.3}");
            }
        }
    }

    #[test]
    fn mean_share_of_copies_is_n_and_of_strangers_is_one() {
        // Invariants: n copies of one patch share all their noise, so their mean keeps n times
        // 1 / n of it, i.e. the share is n; patches further apart than a patch side share none,
        // and the mean keeps 1 / n (share 1); patches in different slices share none either.
        let k = 8;
        let rho = coefficient_correlation(k, None);
        let n = 5;
        let u0 = |_: usize| 1.0 / (n as f32).sqrt();
        let mut out = vec![0.0; 64];
        mean_share(&rho, k, &vec![(20, 20); n], |_| 0, u0, &mut out);
        assert!(out.iter().all(|&s| (s - n as f32).abs() < 1e-4));
        let apart: Vec<(usize, usize)> = (0..n).map(|i| (i * 9, 3 * i)).collect();
        mean_share(&rho, k, &apart, |_| 0, u0, &mut out);
        assert!(out.iter().all(|&s| (s - 1.0).abs() < 1e-5));
        mean_share(&rho, k, &vec![(20, 20); n], |i| i, u0, &mut out);
        assert!(out.iter().all(|&s| (s - 1.0).abs() < 1e-5));
    }
}
