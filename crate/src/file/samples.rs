//! Stored samples of any type the trades' files hold, and the map between them and the working
//! grey levels the methods see (0 to 255 or 0 to 65535).

use crate::error::{Error, Result};
use crate::planes::{Alpha, BitDepth, Image, Plane};
use crate::synth::Rng;
use serde::Serialize;

/// The type of a file's stored samples.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum SampleType {
    /// 8-bit unsigned integers.
    U8,
    /// 16-bit unsigned integers.
    U16,
    /// 16-bit signed integers.
    I16,
    /// 32-bit unsigned integers.
    U32,
    /// 32-bit signed integers.
    I32,
    /// 32-bit floats.
    F32,
    /// 64-bit floats.
    F64,
}

impl SampleType {
    /// Plain words for messages.
    pub fn describe(self) -> &'static str {
        match self {
            SampleType::U8 => "8-bit unsigned",
            SampleType::U16 => "16-bit unsigned",
            SampleType::I16 => "16-bit signed",
            SampleType::U32 => "32-bit unsigned",
            SampleType::I32 => "32-bit signed",
            SampleType::F32 => "32-bit float",
            SampleType::F64 => "64-bit float",
        }
    }
    /// Whether the samples are floating point.
    pub fn is_float(self) -> bool {
        matches!(self, SampleType::F32 | SampleType::F64)
    }
    /// The representable range of an integer type.
    pub fn integer_range(self) -> Option<(f64, f64)> {
        match self {
            SampleType::U8 => Some((0.0, 255.0)),
            SampleType::U16 => Some((0.0, 65535.0)),
            SampleType::I16 => Some((-32768.0, 32767.0)),
            SampleType::U32 => Some((0.0, f64::from(u32::MAX))),
            SampleType::I32 => Some((f64::from(i32::MIN), f64::from(i32::MAX))),
            SampleType::F32 | SampleType::F64 => None,
        }
    }
    /// The working depth: 8-bit data stays in 0-255, everything else works in 0-65535.
    pub fn working_depth(self) -> BitDepth {
        if self == SampleType::U8 {
            BitDepth::Eight
        } else {
            BitDepth::Sixteen
        }
    }
}

/// stored = working * scale + offset. Exact (scale 1, or a power of two with offset 0) wherever
/// the data allow, so that untouched samples come back bit for bit.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct ValueMap {
    /// The stored value of working value 0.
    pub offset: f64,
    /// Stored units per working unit.
    pub scale: f64,
}

impl ValueMap {
    /// Stored equals working.
    pub const IDENTITY: ValueMap = ValueMap { offset: 0.0, scale: 1.0 };

    /// The map for data of `sample` type whose valid samples span [lo, hi].
    pub fn for_data(sample: SampleType, lo: f64, hi: f64) -> ValueMap {
        match sample {
            SampleType::U8 | SampleType::U16 => ValueMap::IDENTITY,
            // Shifting by 2^15 maps the type's range onto 0-65535 exactly.
            SampleType::I16 => ValueMap { offset: -32768.0, scale: 1.0 },
            _ => {
                let offset = if lo >= 0.0 {
                    0.0
                } else if sample.is_float() {
                    lo
                } else {
                    lo.floor()
                };
                let span = (hi - offset).max(0.0);
                let mut scale = if span > 0.0 { (span / 65535.0).log2().ceil().exp2() } else { 1.0 };
                // Integers whose span fits in 16 bits keep unit steps.
                if !sample.is_float() {
                    scale = scale.max(1.0);
                }
                ValueMap { offset, scale }
            }
        }
    }
    /// A stored sample to its working value.
    pub fn to_working(&self, stored: f64) -> f32 {
        ((stored - self.offset) / self.scale) as f32
    }
    /// A working value back to its stored sample (before rounding to the type).
    pub fn to_stored(&self, working: f32) -> f64 {
        f64::from(working) * self.scale + self.offset
    }
}

/// One page's samples as stored: interleaved, `channels` per pixel.
#[derive(Clone, Debug, PartialEq)]
pub enum Samples {
    /// 8-bit unsigned samples.
    U8(Vec<u8>),
    /// 16-bit unsigned samples.
    U16(Vec<u16>),
    /// 16-bit signed samples.
    I16(Vec<i16>),
    /// 32-bit unsigned samples.
    U32(Vec<u32>),
    /// 32-bit signed samples.
    I32(Vec<i32>),
    /// 32-bit float samples.
    F32(Vec<f32>),
    /// 64-bit float samples.
    F64(Vec<f64>),
}

macro_rules! each {
    ($s:expr, $v:ident => $e:expr) => {
        match $s {
            Samples::U8($v) => $e,
            Samples::U16($v) => $e,
            Samples::I16($v) => $e,
            Samples::U32($v) => $e,
            Samples::I32($v) => $e,
            Samples::F32($v) => $e,
            Samples::F64($v) => $e,
        }
    };
}

impl Samples {
    /// The type of the samples.
    pub fn sample_type(&self) -> SampleType {
        match self {
            Samples::U8(_) => SampleType::U8,
            Samples::U16(_) => SampleType::U16,
            Samples::I16(_) => SampleType::I16,
            Samples::U32(_) => SampleType::U32,
            Samples::I32(_) => SampleType::I32,
            Samples::F32(_) => SampleType::F32,
            Samples::F64(_) => SampleType::F64,
        }
    }
    /// The number of samples.
    pub fn len(&self) -> usize {
        each!(self, v => v.len())
    }
    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// Sample i as f64.
    #[inline]
    #[allow(clippy::unnecessary_cast)] // the macro casts every sample type, f64 among them
    pub fn get(&self, i: usize) -> f64 {
        each!(self, v => v[i] as f64)
    }
    /// Builds samples of type `t` from values, rounded and clamped for integer types.
    pub fn from_values(t: SampleType, n: usize, f: impl Fn(usize) -> f64) -> Samples {
        let q = |i: usize, lo: f64, hi: f64| f(i).round().clamp(lo, hi);
        match t {
            SampleType::U8 => Samples::U8((0..n).map(|i| q(i, 0.0, 255.0) as u8).collect()),
            SampleType::U16 => Samples::U16((0..n).map(|i| q(i, 0.0, 65535.0) as u16).collect()),
            SampleType::I16 => Samples::I16((0..n).map(|i| q(i, -32768.0, 32767.0) as i16).collect()),
            SampleType::U32 => Samples::U32((0..n).map(|i| q(i, 0.0, f64::from(u32::MAX)) as u32).collect()),
            SampleType::I32 => {
                Samples::I32((0..n).map(|i| q(i, f64::from(i32::MIN), f64::from(i32::MAX)) as i32).collect())
            }
            SampleType::F32 => Samples::F32((0..n).map(|i| f(i) as f32).collect()),
            SampleType::F64 => Samples::F64((0..n).map(f).collect()),
        }
    }
}

/// Which stored samples carry no data: non-finite floats, or an integer marker (FITS BLANK).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BlankRule {
    /// An integer value that marks a blank pixel (FITS BLANK), if any.
    pub marker: Option<f64>,
}

impl BlankRule {
    /// Whether stored value v carries no data.
    #[inline]
    pub fn is_blank(&self, v: f64) -> bool {
        !v.is_finite() || self.marker == Some(v)
    }
}

/// How a page's samples are laid out per pixel.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Layout {
    /// One grey sample per pixel.
    Grey,
    /// Grey and alpha.
    GreyAlpha,
    /// Red, green and blue.
    Rgb,
    /// Red, green, blue and alpha.
    Rgba,
    /// Independent channels (fluorescence channels, spectral bands), each denoised on its own.
    Bands(usize),
}

impl Layout {
    /// Samples stored per pixel.
    pub fn samples_per_pixel(self) -> usize {
        match self {
            Layout::Grey => 1,
            Layout::GreyAlpha => 2,
            Layout::Rgb => 3,
            Layout::Rgba => 4,
            Layout::Bands(n) => n,
        }
    }
    /// Whether the last sample of each pixel is alpha.
    pub fn has_alpha(self) -> bool {
        matches!(self, Layout::GreyAlpha | Layout::Rgba)
    }
    fn colour_channels(self) -> usize {
        self.samples_per_pixel() - usize::from(self.has_alpha())
    }
}

/// The valid-sample range of a page, for the value map; None when every sample is blank.
pub fn valid_range(s: &Samples, layout: Layout, blank: BlankRule) -> Option<(f64, f64)> {
    let n = layout.samples_per_pixel();
    let colour = layout.colour_channels();
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for i in 0..s.len() {
        if i % n >= colour {
            continue;
        }
        let v = s.get(i);
        if !blank.is_blank(v) {
            lo = lo.min(v);
            hi = hi.max(v);
        }
    }
    (lo <= hi).then_some((lo, hi))
}

/// A decoded page: the working image and, per colour channel, the indices of blank pixels and
/// the value map. Maps belong to units (a page, or one band of it), so that a unit written alone
/// reads back to the same working values.
#[derive(Clone, Debug)]
pub struct WorkingPage {
    /// The working image (8- or 16-bit-like planes; alpha aside).
    pub image: Image,
    /// Per colour channel, the indices of its blank pixels (filled in the working image).
    pub blanks: Vec<Vec<u32>>,
    /// Per colour channel, the map from working values to stored ones.
    pub maps: Vec<ValueMap>,
}

/// Stored samples to a working page. Blank pixels are filled with valid samples of the same
/// channel drawn at random: their neighbourhoods then look busy, never calm, so the noise fit's
/// calm blocks never come from them (a constant fill would look noise-free and pull the
/// estimate down). They are written back as they were.
pub fn to_working(s: &Samples, w: usize, h: usize, layout: Layout, blank: BlankRule) -> Result<WorkingPage> {
    let n = layout.samples_per_pixel();
    if s.len() != w * h * n {
        return Err(Error::decode(format!("a page holds {} samples where {w} x {h} x {n} were expected", s.len())));
    }
    let sample = s.sample_type();
    let colour = layout.colour_channels();
    let maps = unit_maps(s, layout, blank);
    let mut channels = Vec::with_capacity(colour);
    let mut blanks = Vec::with_capacity(colour);
    for (c, &map) in maps.iter().enumerate() {
        let mut data = Vec::with_capacity(w * h);
        let mut holes = Vec::new();
        for i in 0..w * h {
            let v = s.get(i * n + c);
            if blank.is_blank(v) {
                holes.push(i as u32);
                data.push(0.0);
            } else {
                data.push(map.to_working(v));
            }
        }
        fill_holes(&mut data, &holes, c as u64);
        channels.push(Plane { width: w, height: h, data });
        blanks.push(holes);
    }
    let alpha = if layout.has_alpha() {
        match s {
            Samples::U8(v) => Some(Alpha::Eight(v.iter().skip(n - 1).step_by(n).copied().collect())),
            Samples::U16(v) => Some(Alpha::Sixteen(v.iter().skip(n - 1).step_by(n).copied().collect())),
            _ => {
                return Err(Error::UnsupportedPixelType(format!("{} samples with an alpha channel", sample.describe())))
            }
        }
    } else {
        None
    };
    Ok(WorkingPage {
        image: Image { width: w, height: h, depth: sample.working_depth(), channels, alpha },
        blanks,
        maps,
    })
}

/// Per colour channel, the map of its unit: one over all colour channels, or one per band.
fn unit_maps(s: &Samples, layout: Layout, blank: BlankRule) -> Vec<ValueMap> {
    let t = s.sample_type();
    let of = |r: Option<(f64, f64)>| {
        let (lo, hi) = r.unwrap_or((0.0, 0.0));
        ValueMap::for_data(t, lo, hi)
    };
    match layout {
        Layout::Bands(n) => (0..n).map(|c| of(channel_range(s, n, c, blank))).collect(),
        _ => vec![of(valid_range(s, layout, blank)); layout.colour_channels()],
    }
}

fn channel_range(s: &Samples, n: usize, c: usize, blank: BlankRule) -> Option<(f64, f64)> {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for i in (c..s.len()).step_by(n) {
        let v = s.get(i);
        if !blank.is_blank(v) {
            lo = lo.min(v);
            hi = hi.max(v);
        }
    }
    (lo <= hi).then_some((lo, hi))
}

fn fill_holes(data: &mut [f32], holes: &[u32], seed: u64) {
    if holes.is_empty() {
        return;
    }
    let valid: Vec<usize> = {
        let mut is_hole = vec![false; data.len()];
        for &i in holes {
            is_hole[i as usize] = true;
        }
        (0..data.len()).filter(|&i| !is_hole[i]).collect()
    };
    if valid.is_empty() {
        return;
    }
    let mut rng = Rng::new(0x5eed ^ seed);
    for &i in holes {
        let pick = valid[(rng.next_u64() % valid.len() as u64) as usize];
        data[i as usize] = data[pick];
    }
}

/// A working page back to stored samples of type `sample`; blank pixels get `blank_value`.
pub fn from_working(page: &WorkingPage, layout: Layout, sample: SampleType, blank_value: f64) -> Samples {
    let img = &page.image;
    let n = layout.samples_per_pixel();
    let colour = layout.colour_channels();
    let px = img.width * img.height;
    let mut values = vec![0.0f64; px * n];
    for c in 0..colour {
        let (plane, map) = (&img.channels[c].data, page.maps[c]);
        for i in 0..px {
            values[i * n + c] = map.to_stored(plane[i]);
        }
        for &i in &page.blanks[c] {
            values[i as usize * n + c] = blank_value;
        }
    }
    match &img.alpha {
        Some(Alpha::Eight(a)) => a.iter().enumerate().for_each(|(i, v)| values[i * n + n - 1] = f64::from(*v)),
        Some(Alpha::Sixteen(a)) => a.iter().enumerate().for_each(|(i, v)| values[i * n + n - 1] = f64::from(*v)),
        None => {}
    }
    Samples::from_values(sample, px * n, |i| values[i])
}

#[cfg(test)]
mod tests {
    use super::*;

    fn round_trip(s: Samples, layout: Layout, blank: BlankRule, blank_value: f64) -> Samples {
        let n = layout.samples_per_pixel();
        let page = to_working(&s, s.len() / n / 2, 2, layout, blank).unwrap();
        from_working(&page, layout, s.sample_type(), blank_value)
    }

    #[test]
    fn every_type_comes_back_bit_for_bit() {
        // Invariant: decode then encode without denoising restores the stored samples.
        let none = BlankRule { marker: None };
        for s in [
            Samples::U8(vec![0, 7, 255, 128]),
            Samples::U16(vec![0, 65535, 1234, 9]),
            Samples::I16(vec![-32768, 32767, -5, 0]),
            Samples::U32(vec![0, 70000, 4_000_000_000, 3]),
            Samples::I32(vec![-100_000, 5, 0, 2_000_000]),
            Samples::F32(vec![0.25, 1.0e-3, 3.5, 0.0]),
            Samples::F64(vec![0.125, 2.0, 1.0e5, 7.0]),
        ] {
            let back = round_trip(s.clone(), Layout::Grey, none, 0.0);
            match (&s, &back) {
                // Wide integer ranges pass through f32 working values: within the map's step.
                (Samples::U32(_), _) | (Samples::I32(_), _) => {
                    for i in 0..s.len() {
                        assert!((s.get(i) - back.get(i)).abs() <= 1024.0, "{s:?} -> {back:?}");
                    }
                }
                _ => assert_eq!(s, back),
            }
        }
    }

    #[test]
    fn negative_floats_survive_within_float_precision() {
        let s = Samples::F32(vec![-1.5, 0.75, 2.0, -0.25]);
        let back = round_trip(s.clone(), Layout::Grey, BlankRule { marker: None }, 0.0);
        for i in 0..4 {
            assert!((s.get(i) - back.get(i)).abs() < 1e-6);
        }
    }

    #[test]
    fn blanks_come_back_as_they_were_and_stay_out_of_the_range() {
        let s = Samples::F32(vec![1.0, f32::NAN, 3.0, 4.0]);
        let rule = BlankRule { marker: None };
        assert_eq!(valid_range(&s, Layout::Grey, rule), Some((1.0, 4.0)));
        let back = round_trip(s, Layout::Grey, rule, f64::NAN);
        let Samples::F32(v) = back else { panic!() };
        assert!(v[1].is_nan() && v[0] == 1.0 && v[3] == 4.0);
        let ints = Samples::I16(vec![5, -32768, 7, 9]);
        let rule = BlankRule { marker: Some(-32768.0) };
        assert_eq!(round_trip(ints.clone(), Layout::Grey, rule, -32768.0), ints);
    }

    #[test]
    fn alpha_passes_through_and_bands_split_by_channel() {
        let s = Samples::U16(vec![1, 2, 3, 65535, 5, 6, 7, 0, 9, 10, 11, 42, 13, 14, 15, 1]);
        assert_eq!(round_trip(s.clone(), Layout::Rgba, BlankRule { marker: None }, 0.0), s);
        let two = Samples::U16(vec![10, 20, 11, 21, 12, 22, 13, 23]);
        let page = to_working(&two, 2, 2, Layout::Bands(2), BlankRule { marker: None }).unwrap();
        assert_eq!(page.image.channels[1].data, vec![20.0, 21.0, 22.0, 23.0]);
    }
}
