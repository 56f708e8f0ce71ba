//! Orthonormal opponent colour transform. Because the matrix is orthonormal, white Gaussian noise
//! of std sigma in R, G, B stays white with the same sigma in each opponent channel.

use crate::planes::Plane;

const S3: f32 = 0.577_350_26; // 1/sqrt(3)
const S2: f32 = 0.707_106_77; // 1/sqrt(2)
const S6: f32 = 0.408_248_28; // 1/sqrt(6)

/// Rows (1,1,1)/sqrt3, (1,0,-1)/sqrt2, (1,-2,1)/sqrt6: luminance first.
pub const OPPONENT: [[f32; 3]; 3] = [[S3, S3, S3], [S2, 0.0, -S2], [S6, -2.0 * S6, S6]];

fn apply(m: &[[f32; 3]; 3], planes: &[Plane]) -> Vec<Plane> {
    let (w, h) = (planes[0].width, planes[0].height);
    let mut out = vec![Plane::new(w, h), Plane::new(w, h), Plane::new(w, h)];
    for i in 0..w * h {
        let v = [planes[0].data[i], planes[1].data[i], planes[2].data[i]];
        for (r, row) in m.iter().enumerate() {
            out[r].data[i] = row[0] * v[0] + row[1] * v[1] + row[2] * v[2];
        }
    }
    out
}

/// RGB planes to opponent planes (luminance first), the transform of [`OPPONENT`].
pub fn to_opponent(rgb: &[Plane]) -> Vec<Plane> {
    apply(&OPPONENT, rgb)
}

/// The luminance opponent plane alone (the first row of [`OPPONENT`], the same arithmetic as
/// [`to_opponent`]), for a look at the brightness noise without the colour planes.
pub fn luminance(rgb: &[Plane]) -> Plane {
    let row = OPPONENT[0];
    let (r, g, b) = (&rgb[0].data, &rgb[1].data, &rgb[2].data);
    let data = (0..r.len()).map(|i| row[0] * r[i] + row[1] * g[i] + row[2] * b[i]).collect();
    Plane { width: rgb[0].width, height: rgb[0].height, data }
}

/// The inverse of an orthonormal matrix is its transpose.
pub fn from_opponent(opp: &[Plane]) -> Vec<Plane> {
    let mut t = [[0.0f32; 3]; 3];
    for (r, row) in OPPONENT.iter().enumerate() {
        for (c, v) in row.iter().enumerate() {
            t[c][r] = *v;
        }
    }
    apply(&t, opp)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn opponent_matrix_is_orthonormal() {
        // Invariant: M M^T = I.
        for (a, ra) in OPPONENT.iter().enumerate() {
            for (b, rb) in OPPONENT.iter().enumerate() {
                let dot: f32 = ra.iter().zip(rb).map(|(x, y)| x * y).sum();
                let want = if a == b { 1.0 } else { 0.0 };
                assert!((dot - want).abs() < 1e-6, "row {a} . row {b} = {dot}");
            }
        }
    }

    #[test]
    fn luminance_is_the_first_opponent_plane_bit_for_bit() {
        // Invariant: the same row and the same order of operations as the full transform.
        let p = |k: f32| Plane::from_fn(9, 4, |x, y| (x as f32 * 17.3 + y as f32 * 5.1 + k) % 256.0);
        let rgb = vec![p(0.0), p(70.0), p(140.0)];
        assert_eq!(luminance(&rgb).data, to_opponent(&rgb)[0].data);
    }

    #[test]
    fn round_trip_restores_rgb() {
        let p = |k: f32| Plane::from_fn(7, 5, |x, y| (x as f32 * 13.0 + y as f32 * 7.0 + k) % 256.0);
        let rgb = vec![p(0.0), p(50.0), p(100.0)];
        let back = from_opponent(&to_opponent(&rgb));
        for c in 0..3 {
            for i in 0..rgb[c].len() {
                assert!((back[c].data[i] - rgb[c].data[i]).abs() < 1e-3);
            }
        }
    }
}
