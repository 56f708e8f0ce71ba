//! The in-memory image: f32 planes in the input's own grey levels (0-255 or 0-65535), plus the
//! untouched alpha samples and the facts the encoder needs to write the same kind of file back.

/// One channel of an image as f32 samples, row by row.
#[derive(Clone, Debug, PartialEq)]
pub struct Plane {
    /// Width in pixels.
    pub width: usize,
    /// Height in pixels.
    pub height: usize,
    /// width x height samples, row by row.
    pub data: Vec<f32>,
}

impl Plane {
    /// A plane of zeros.
    pub fn new(width: usize, height: usize) -> Self {
        Plane { width, height, data: vec![0.0; width * height] }
    }

    /// A plane whose sample at (x, y) is f(x, y).
    pub fn from_fn(width: usize, height: usize, mut f: impl FnMut(usize, usize) -> f32) -> Self {
        let mut data = Vec::with_capacity(width * height);
        for y in 0..height {
            for x in 0..width {
                data.push(f(x, y));
            }
        }
        Plane { width, height, data }
    }

    /// The sample at (x, y).
    #[inline]
    pub fn get(&self, x: usize, y: usize) -> f32 {
        self.data[y * self.width + x]
    }

    /// The number of samples.
    pub fn len(&self) -> usize {
        self.data.len()
    }

    /// Whether the plane holds no samples.
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }
}

/// Half-sample symmetric index: ... 1 0 | 0 1 2 ... n-1 | n-1 n-2 ...
#[inline]
pub fn mirror(i: isize, n: usize) -> usize {
    let n = n as isize;
    if n == 1 {
        return 0;
    }
    let period = 2 * n;
    let mut m = i.rem_euclid(period);
    if m >= n {
        m = period - 1 - m;
    }
    m as usize
}

/// Bits per sample of a working image.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum BitDepth {
    /// 8 bits (0 to 255).
    Eight,
    /// 16 bits (0 to 65535).
    Sixteen,
}

impl BitDepth {
    /// The largest grey level, which is also the data range for PSNR and SSIM.
    pub fn max_value(self) -> f32 {
        match self {
            BitDepth::Eight => 255.0,
            BitDepth::Sixteen => 65535.0,
        }
    }
    /// 8 or 16.
    pub fn bits(self) -> u32 {
        match self {
            BitDepth::Eight => 8,
            BitDepth::Sixteen => 16,
        }
    }
}

/// Alpha samples exactly as decoded; they pass through every run untouched.
#[derive(Clone, Debug, PartialEq)]
pub enum Alpha {
    /// 8-bit alpha samples.
    Eight(Vec<u8>),
    /// 16-bit alpha samples.
    Sixteen(Vec<u16>),
}

/// A working image: grey or RGB planes in their integer scale, and any alpha kept aside.
#[derive(Clone, Debug, PartialEq)]
pub struct Image {
    /// Width in pixels.
    pub width: usize,
    /// Height in pixels.
    pub height: usize,
    /// The integer scale of the planes.
    pub depth: BitDepth,
    /// One plane for grey, three for RGB; values in grey levels of `depth`.
    pub channels: Vec<Plane>,
    /// The alpha channel, carried through untouched.
    pub alpha: Option<Alpha>,
}

impl Image {
    /// The largest sample value of the bit depth (255 or 65535).
    pub fn max_value(&self) -> f32 {
        self.depth.max_value()
    }
    /// Whether the image has three colour planes.
    pub fn is_color(&self) -> bool {
        self.channels.len() == 3
    }
    /// Total channel count as stored in a file (colour channels plus alpha).
    pub fn stored_channels(&self) -> usize {
        self.channels.len() + usize::from(self.alpha.is_some())
    }
    /// Same image with new colour planes (same size), keeping depth and alpha.
    pub fn with_channels(&self, channels: Vec<Plane>) -> Image {
        Image { width: self.width, height: self.height, depth: self.depth, channels, alpha: self.alpha.clone() }
    }
}

/// Mean of `src` over a (2pr+1)^2 window, borders clamped; separable running sums, O(1) per pixel.
pub fn box_mean(src: &[f32], w: usize, h: usize, pr: usize) -> Vec<f32> {
    if pr == 0 {
        return src.to_vec();
    }
    let r = pr as isize;
    let area = ((2 * pr + 1) * (2 * pr + 1)) as f32;
    let clamp = |i: isize, n: usize| i.clamp(0, n as isize - 1) as usize;
    let mut rows = vec![0.0f32; w * h];
    for y in 0..h {
        let line = &src[y * w..(y + 1) * w];
        let mut acc: f32 = (-r..=r).map(|d| line[clamp(d, w)]).sum();
        rows[y * w] = acc;
        for x in 1..w {
            acc += line[clamp(x as isize + r, w)] - line[clamp(x as isize - 1 - r, w)];
            rows[y * w + x] = acc;
        }
    }
    let mut out = vec![0.0f32; w * h];
    let mut acc: Vec<f32> = vec![0.0; w];
    for d in -r..=r {
        let row = clamp(d, h) * w;
        acc.iter_mut().zip(&rows[row..row + w]).for_each(|(a, v)| *a += v);
    }
    for y in 0..h {
        if y > 0 {
            let (add, sub) = (clamp(y as isize + r, h) * w, clamp(y as isize - 1 - r, h) * w);
            for x in 0..w {
                acc[x] += rows[add + x] - rows[sub + x];
            }
        }
        for x in 0..w {
            out[y * w + x] = acc[x] / area;
        }
    }
    out
}

/// Normalised Gaussian taps of radius ceil(3 s).
pub fn gaussian_taps(s: f64) -> Vec<f32> {
    let r = (3.0 * s).ceil() as isize;
    let mut taps: Vec<f32> = (-r..=r).map(|k| (-(k * k) as f64 / (2.0 * s * s)).exp() as f32).collect();
    let total: f32 = taps.iter().sum();
    taps.iter_mut().for_each(|t| *t /= total);
    taps
}

/// Factor by which the blur shrinks the std of white noise: sum of the 2-D taps squared, rooted.
pub fn gaussian_noise_gain(s: f64) -> f64 {
    if s <= 0.0 {
        return 1.0;
    }
    gaussian_taps(s).iter().map(|t| f64::from(*t).powi(2)).sum::<f64>()
}

/// `f` of every plane, in order: in parallel natively (channels are measured apart, so the
/// results are the same either way).
pub fn per_plane<T: Send>(planes: &[Plane], f: impl Fn(&Plane) -> T + Sync + Send) -> Vec<T> {
    #[cfg(feature = "parallel")]
    {
        use rayon::prelude::*;
        planes.par_iter().map(f).collect()
    }
    #[cfg(not(feature = "parallel"))]
    planes.iter().map(f).collect()
}

/// Separable Gaussian blur with mirrored borders; radius ceil(3 s). s = 0 returns a copy.
pub fn gaussian_blur(p: &Plane, s: f64) -> Plane {
    if s <= 0.0 {
        return p.clone();
    }
    let taps = gaussian_taps(s);
    let r = (taps.len() / 2) as isize;
    let (w, h) = (p.width, p.height);
    // Rows: copy each row into a mirrored, padded line, then slide the taps over it.
    let mut tmp = Plane::new(w, h);
    let mut line = vec![0.0f32; w + 2 * r as usize];
    for y in 0..h {
        for (i, v) in line.iter_mut().enumerate() {
            *v = p.data[y * w + mirror(i as isize - r, w)];
        }
        for x in 0..w {
            tmp.data[y * w + x] = taps.iter().zip(&line[x..]).map(|(t, v)| t * v).sum();
        }
    }
    // Columns: accumulate whole mirrored rows, so the inner loop runs along memory.
    let mut out = Plane::new(w, h);
    for y in 0..h {
        let dst = &mut out.data[y * w..(y + 1) * w];
        for (k, t) in taps.iter().enumerate() {
            let sy = mirror(y as isize + k as isize - r, h);
            for (o, v) in dst.iter_mut().zip(&tmp.data[sy * w..(sy + 1) * w]) {
                *o += t * v;
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mirror_matches_half_sample_symmetric_convention() {
        // Convention of scipy.ndimage mode='reflect' (d c b a | a b c d | d c b a).
        let got: Vec<usize> = (-3..7).map(|i| mirror(i, 4)).collect();
        assert_eq!(got, vec![2, 1, 0, 0, 1, 2, 3, 3, 2, 1]);
    }
}
