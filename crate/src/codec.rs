//! Decoding and encoding through the `image` crate, with limits checked before any large
//! allocation. Gray, gray+alpha, RGB and RGBA at 8 or 16 bits; alpha samples are kept verbatim.

use crate::error::{Error, Result};
use crate::planes::{Alpha, BitDepth, Image, Plane};
use image::{DynamicImage, ImageDecoder, ImageFormat, ImageReader};
use std::io::Cursor;

/// Caps applied while decoding; a header that claims more is refused before pixels are read.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct DecodeLimits {
    pub max_megapixels: u64,
    pub max_alloc_mib: u64,
}

impl Default for DecodeLimits {
    fn default() -> Self {
        DecodeLimits { max_megapixels: 64, max_alloc_mib: 1024 }
    }
}

/// File formats we write. 16-bit data and alpha need PNG or TIFF.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum OutputFormat {
    Png,
    Tiff,
    Bmp,
    Jpeg,
}

impl OutputFormat {
    /// From a file name's extension, case-insensitive.
    pub fn from_extension(ext: &str) -> Option<Self> {
        match ext.to_ascii_lowercase().as_str() {
            "png" => Some(OutputFormat::Png),
            "tif" | "tiff" => Some(OutputFormat::Tiff),
            "bmp" => Some(OutputFormat::Bmp),
            "jpg" | "jpeg" => Some(OutputFormat::Jpeg),
            _ => None,
        }
    }
    fn image_format(self) -> ImageFormat {
        match self {
            OutputFormat::Png => ImageFormat::Png,
            OutputFormat::Tiff => ImageFormat::Tiff,
            OutputFormat::Bmp => ImageFormat::Bmp,
            OutputFormat::Jpeg => ImageFormat::Jpeg,
        }
    }
}

pub fn decode(bytes: &[u8], limits: &DecodeLimits) -> Result<Image> {
    if bytes.is_empty() {
        return Err(Error::EmptyInput);
    }
    let reader = ImageReader::new(Cursor::new(bytes))
        .with_guessed_format()
        .map_err(|e| Error::Decode(e.to_string()))?;
    if reader.format().is_none() {
        return Err(Error::UnknownFormat);
    }
    let mut decoder = reader.into_decoder().map_err(map_decode_error)?;
    let (w, h) = decoder.dimensions();
    if w == 0 || h == 0 {
        return Err(Error::ZeroSize);
    }
    if u64::from(w) * u64::from(h) > limits.max_megapixels * 1_000_000 {
        return Err(Error::TooManyPixels { width: w, height: h, limit: limits.max_megapixels });
    }
    let mut lim = image::Limits::default();
    lim.max_alloc = Some(limits.max_alloc_mib * 1024 * 1024);
    decoder.set_limits(lim).map_err(|_| Error::TooMuchMemory { limit_mib: limits.max_alloc_mib })?;
    let dynamic = DynamicImage::from_decoder(decoder).map_err(map_decode_error)?;
    from_dynamic(dynamic)
}

fn map_decode_error(e: image::ImageError) -> Error {
    match e {
        image::ImageError::Limits(_) => Error::TooMuchMemory { limit_mib: DecodeLimits::default().max_alloc_mib },
        image::ImageError::Unsupported(u) => Error::Decode(format!("unsupported content ({u})")),
        other => Error::Decode(other.to_string()),
    }
}

fn planes_from<T: Copy>(w: usize, h: usize, raw: &[T], n: usize, color: usize, to_f: impl Fn(T) -> f32) -> Vec<Plane> {
    (0..color)
        .map(|c| Plane { width: w, height: h, data: raw.iter().skip(c).step_by(n).map(|&v| to_f(v)).collect() })
        .collect()
}

fn alpha_from<T: Copy>(raw: &[T], n: usize) -> Vec<T> {
    raw.iter().skip(n - 1).step_by(n).copied().collect()
}

fn from_dynamic(img: DynamicImage) -> Result<Image> {
    let (w, h) = (img.width() as usize, img.height() as usize);
    let f8 = |v: u8| f32::from(v);
    let f16 = |v: u16| f32::from(v);
    let (depth, channels, alpha) = match img {
        DynamicImage::ImageLuma8(b) => (BitDepth::Eight, planes_from(w, h, b.as_raw(), 1, 1, f8), None),
        DynamicImage::ImageLumaA8(b) => {
            (BitDepth::Eight, planes_from(w, h, b.as_raw(), 2, 1, f8), Some(Alpha::Eight(alpha_from(b.as_raw(), 2))))
        }
        DynamicImage::ImageRgb8(b) => (BitDepth::Eight, planes_from(w, h, b.as_raw(), 3, 3, f8), None),
        DynamicImage::ImageRgba8(b) => {
            (BitDepth::Eight, planes_from(w, h, b.as_raw(), 4, 3, f8), Some(Alpha::Eight(alpha_from(b.as_raw(), 4))))
        }
        DynamicImage::ImageLuma16(b) => (BitDepth::Sixteen, planes_from(w, h, b.as_raw(), 1, 1, f16), None),
        DynamicImage::ImageLumaA16(b) => (
            BitDepth::Sixteen,
            planes_from(w, h, b.as_raw(), 2, 1, f16),
            Some(Alpha::Sixteen(alpha_from(b.as_raw(), 2))),
        ),
        DynamicImage::ImageRgb16(b) => (BitDepth::Sixteen, planes_from(w, h, b.as_raw(), 3, 3, f16), None),
        DynamicImage::ImageRgba16(b) => (
            BitDepth::Sixteen,
            planes_from(w, h, b.as_raw(), 4, 3, f16),
            Some(Alpha::Sixteen(alpha_from(b.as_raw(), 4))),
        ),
        DynamicImage::ImageRgb32F(_) | DynamicImage::ImageRgba32F(_) => {
            return Err(Error::UnsupportedPixelType("32-bit floating-point".into()))
        }
        _ => return Err(Error::UnsupportedPixelType("this pixel layout".into())),
    };
    Ok(Image { width: w, height: h, depth, channels, alpha })
}

/// Interleaves planes (rounded and clamped to the depth's range) with the original alpha.
fn interleave<T: Copy>(img: &Image, alpha: Option<&[T]>, quant: impl Fn(f32) -> T) -> Vec<T> {
    let n = img.channels.len() + usize::from(alpha.is_some());
    let px = img.width * img.height;
    let mut out = Vec::with_capacity(px * n);
    for i in 0..px {
        for p in &img.channels {
            out.push(quant(p.data[i]));
        }
        if let Some(a) = alpha {
            out.push(a[i]);
        }
    }
    out
}

fn quant8(v: f32) -> u8 {
    v.round().clamp(0.0, 255.0) as u8
}
fn quant16(v: f32) -> u16 {
    v.round().clamp(0.0, 65535.0) as u16
}

fn to_dynamic(img: &Image) -> Result<DynamicImage> {
    let (w, h) = (img.width as u32, img.height as u32);
    let bad = || Error::Internal("pixel buffer size does not match the image size".into());
    let color = img.channels.len();
    let dynamic = match (img.depth, &img.alpha) {
        (BitDepth::Eight, None) => {
            let raw = interleave::<u8>(img, None, quant8);
            match color {
                1 => DynamicImage::ImageLuma8(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
                _ => DynamicImage::ImageRgb8(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
            }
        }
        (BitDepth::Eight, Some(Alpha::Eight(a))) => {
            let raw = interleave::<u8>(img, Some(a), quant8);
            match color {
                1 => DynamicImage::ImageLumaA8(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
                _ => DynamicImage::ImageRgba8(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
            }
        }
        (BitDepth::Sixteen, None) => {
            let raw = interleave::<u16>(img, None, quant16);
            match color {
                1 => DynamicImage::ImageLuma16(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
                _ => DynamicImage::ImageRgb16(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
            }
        }
        (BitDepth::Sixteen, Some(Alpha::Sixteen(a))) => {
            let raw = interleave::<u16>(img, Some(a), quant16);
            match color {
                1 => DynamicImage::ImageLumaA16(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
                _ => DynamicImage::ImageRgba16(image::ImageBuffer::from_raw(w, h, raw).ok_or_else(bad)?),
            }
        }
        _ => return Err(Error::Internal("alpha depth differs from colour depth".into())),
    };
    Ok(dynamic)
}

/// Encodes with the input's bit depth and channel count, or explains why the format cannot hold it.
pub fn encode(img: &Image, format: OutputFormat) -> Result<Vec<u8>> {
    let lossless_only = |what: &str| {
        Error::UnsupportedOutput(format!("{what}; write PNG or TIFF instead to keep the image as it is"))
    };
    match format {
        OutputFormat::Bmp | OutputFormat::Jpeg if img.depth == BitDepth::Sixteen => {
            return Err(lossless_only("BMP and JPEG hold only 8 bits per channel"))
        }
        OutputFormat::Jpeg if img.alpha.is_some() => return Err(lossless_only("JPEG cannot hold an alpha channel")),
        OutputFormat::Tiff | OutputFormat::Bmp if img.alpha.is_some() && img.channels.len() == 1 => {
            return Err(Error::UnsupportedOutput(
                "grey images with alpha can only be written as PNG here; use a .png name".into(),
            ))
        }
        _ => {}
    }
    let dynamic = to_dynamic(img)?;
    let mut out = Cursor::new(Vec::new());
    dynamic.write_to(&mut out, format.image_format()).map_err(|e| Error::Encode(e.to_string()))?;
    Ok(out.into_inner())
}
