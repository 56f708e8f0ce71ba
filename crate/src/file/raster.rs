//! PNG, JPEG and BMP (and the TIFF colour models the `tiff` crate leaves undecoded) through the
//! `image` crate, with PNG's pHYs, iCCP and text chunks read and written through `png`, and
//! JPEG's ICC profile and EXIF (orientation included) copied.

use super::samples::{Layout, SampleType, WorkingPage};
use super::{DecodeLimits, Document, Format, Metadata, Provenance, Resolution, ResolutionUnit};
use crate::error::{Error, Result};
use crate::planes::{Alpha, BitDepth, Image, Plane};
use image::{DynamicImage, ImageDecoder, ImageEncoder, ImageReader};
use std::io::Cursor;

fn map_decode_error(e: image::ImageError) -> Error {
    match e {
        image::ImageError::Limits(_) => Error::TooMuchMemory { limit_mib: DecodeLimits::default().max_alloc_mib },
        image::ImageError::Unsupported(u) => Error::decode(format!("unsupported content ({u})")),
        other => Error::decode_caused(other.to_string(), other),
    }
}

/// Reads a PNG, JPEG or BMP file (through the image crate) as a one-page document.
pub fn decode(bytes: &[u8], format: Format, limits: &DecodeLimits) -> Result<Document> {
    let reader = ImageReader::new(Cursor::new(bytes))
        .with_guessed_format()
        .map_err(|e| Error::decode_caused(e.to_string(), e))?;
    if reader.format().is_none() {
        return Err(Error::UnknownFormat);
    }
    let mut decoder = reader.into_decoder().map_err(map_decode_error)?;
    let (w, h) = decoder.dimensions();
    limits.check(w as usize, h as usize, 1, decoder.color_type().channel_count().into())?;
    let mut lim = image::Limits::default();
    lim.max_alloc = Some(limits.max_alloc_mib * 1024 * 1024);
    decoder.set_limits(lim).map_err(|_| Error::TooMuchMemory { limit_mib: limits.max_alloc_mib })?;
    let mut meta = Metadata {
        icc_profile: decoder.icc_profile().ok().flatten(),
        exif: decoder.exif_metadata().ok().flatten(),
        ..Metadata::default()
    };
    if format == Format::Png {
        png_metadata(bytes, &mut meta);
    }
    if format == Format::Jpeg {
        meta.text.extend(jpeg_comments(bytes).into_iter().map(|c| ("Comment".to_string(), c)));
    }
    let img = from_dynamic(DynamicImage::from_decoder(decoder).map_err(map_decode_error)?)?;
    let mut doc = super::document_of(img, format);
    doc.meta = meta;
    Ok(doc)
}

/// pHYs and text chunks (those before the image data, where writers put them).
fn png_metadata(bytes: &[u8], meta: &mut Metadata) {
    let Ok(reader) = png::Decoder::new(Cursor::new(bytes)).read_info() else { return };
    let info = reader.info();
    if let Some(d) = info.pixel_dims {
        let unit = if d.unit == png::Unit::Meter { ResolutionUnit::Metre } else { ResolutionUnit::None };
        meta.resolution = Some(Resolution { x: f64::from(d.xppu), y: f64::from(d.yppu), unit });
    }
    for t in &info.uncompressed_latin1_text {
        meta.text.push((t.keyword.clone(), t.text.clone()));
    }
    for t in &info.compressed_latin1_text {
        if let Ok(text) = t.get_text() {
            meta.text.push((t.keyword.clone(), text));
        }
    }
    for t in &info.utf8_text {
        if let Ok(text) = t.get_text() {
            meta.text.push((t.keyword.clone(), text));
        }
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
        _ => return Err(Error::UnsupportedPixelType("this pixel layout".into())),
    };
    Ok(Image { width: w, height: h, depth, channels, alpha })
}

/// Interleaved 8-bit samples of a page (PNG at 16 bits uses [`be16`]).
fn samples8(doc: &Document, page: &WorkingPage) -> Vec<u8> {
    match super::samples::from_working(page, doc.layout, SampleType::U8, 0.0) {
        super::samples::Samples::U8(v) => v,
        _ => Vec::new(),
    }
}

/// Interleaved 16-bit samples, big-endian as PNG stores them.
fn be16(doc: &Document, page: &WorkingPage) -> Vec<u8> {
    match super::samples::from_working(page, doc.layout, SampleType::U16, 0.0) {
        super::samples::Samples::U16(v) => v.iter().flat_map(|x| x.to_be_bytes()).collect(),
        _ => Vec::new(),
    }
}

fn enc_err(e: impl std::error::Error + Send + Sync + 'static) -> Error {
    Error::encode_caused(e.to_string(), e)
}

fn encode_png(doc: &Document, page: &WorkingPage, provenance: Option<&Provenance>) -> Result<Vec<u8>> {
    let mut out = Vec::new();
    {
        let mut info = png::Info::with_size(doc.width() as u32, doc.height() as u32);
        info.color_type = match doc.layout {
            Layout::Grey => png::ColorType::Grayscale,
            Layout::GreyAlpha => png::ColorType::GrayscaleAlpha,
            Layout::Rgb => png::ColorType::Rgb,
            _ => png::ColorType::Rgba,
        };
        info.bit_depth = if doc.sample == SampleType::U8 { png::BitDepth::Eight } else { png::BitDepth::Sixteen };
        info.icc_profile = doc.meta.icc_profile.clone().map(Into::into);
        let mut enc = png::Encoder::with_info(&mut out, info).map_err(enc_err)?;
        if let Some(r) = doc.meta.resolution {
            enc.set_pixel_dims(Some(match r.per_metre() {
                Some((x, y)) => {
                    png::PixelDimensions { xppu: x.round() as u32, yppu: y.round() as u32, unit: png::Unit::Meter }
                }
                None => png::PixelDimensions {
                    xppu: r.x.round() as u32,
                    yppu: r.y.round() as u32,
                    unit: png::Unit::Unspecified,
                },
            }));
        }
        for (k, t) in &doc.meta.text {
            enc.add_itxt_chunk(k.clone(), t.clone()).map_err(enc_err)?;
        }
        if let Some(p) = provenance {
            enc.add_text_chunk("Software".into(), p.software.clone()).map_err(enc_err)?;
            enc.add_itxt_chunk("Patchgraph settings".into(), p.settings_json.clone()).map_err(enc_err)?;
        }
        let mut w = enc.write_header().map_err(enc_err)?;
        let data = if doc.sample == SampleType::U8 { samples8(doc, page) } else { be16(doc, page) };
        w.write_image_data(&data).map_err(enc_err)?;
        w.finish().map_err(enc_err)?;
    }
    Ok(out)
}

/// Writes the document's first page as PNG (8 or 16 bits, the run recorded in a text chunk),
/// JPEG (quality 95, ICC, Exif and comments kept) or BMP.
pub fn encode(doc: &Document, format: Format, provenance: Option<&Provenance>) -> Result<Vec<u8>> {
    let page = doc.pages.first().ok_or(Error::ZeroSize)?;
    if format == Format::Png {
        return encode_png(doc, page, provenance);
    }
    let (w, h) = (doc.width() as u32, doc.height() as u32);
    let data = samples8(doc, page);
    let colour = match doc.layout {
        Layout::Grey => image::ExtendedColorType::L8,
        Layout::GreyAlpha => image::ExtendedColorType::La8,
        Layout::Rgb => image::ExtendedColorType::Rgb8,
        _ => image::ExtendedColorType::Rgba8,
    };
    let mut out = Vec::new();
    match format {
        Format::Jpeg => {
            let mut enc = image::codecs::jpeg::JpegEncoder::new_with_quality(&mut out, 95);
            if let Some(icc) = &doc.meta.icc_profile {
                let _ = enc.set_icc_profile(icc.clone());
            }
            if let Some(exif) = &doc.meta.exif {
                let _ = enc.set_exif_metadata(exif.clone());
            }
            enc.write_image(&data, w, h, colour).map_err(enc_err)?;
            // The input's own comments kept, then the record of this run.
            let kept = doc.meta.text.iter().filter(|(k, _)| k == "Comment").map(|(_, t)| t.clone());
            for text in kept.chain(provenance.map(Provenance::sentence)).collect::<Vec<_>>().iter().rev() {
                out = with_jpeg_comment(out, text);
            }
        }
        _ => {
            image::codecs::bmp::BmpEncoder::new(&mut out).write_image(&data, w, h, colour).map_err(enc_err)?;
        }
    }
    Ok(out)
}

/// The segments before the image data of a JPEG: (marker, payload), from after SOI up to SOS.
/// Stops quietly at anything malformed (the image decoder reports real damage).
fn jpeg_segments(bytes: &[u8]) -> Vec<(u8, std::ops::Range<usize>)> {
    let mut out = Vec::new();
    let mut pos = 2;
    while pos + 4 <= bytes.len() && bytes[pos] == 0xFF && bytes[pos + 1] != 0xDA {
        let len = usize::from(u16::from_be_bytes([bytes[pos + 2], bytes[pos + 3]]));
        if len < 2 || pos + 2 + len > bytes.len() {
            break;
        }
        out.push((bytes[pos + 1], pos + 4..pos + 2 + len));
        pos += 2 + len;
    }
    out
}

/// Comment (COM) segments of a JPEG, as text.
fn jpeg_comments(bytes: &[u8]) -> Vec<String> {
    jpeg_segments(bytes)
        .into_iter()
        .filter(|(m, _)| *m == 0xFE)
        .map(|(_, r)| String::from_utf8_lossy(&bytes[r]).into_owned())
        .collect()
}

/// The JPEG with a comment segment holding `text` after its application segments (JFIF and EXIF
/// stay first, as readers expect). Text too long for one segment is not written.
fn with_jpeg_comment(jpeg: Vec<u8>, text: &str) -> Vec<u8> {
    let payload = text.as_bytes();
    if payload.len() > usize::from(u16::MAX) - 2 || jpeg.len() < 2 {
        return jpeg;
    }
    let at =
        jpeg_segments(&jpeg).iter().take_while(|(m, _)| (0xE0..=0xEF).contains(m)).last().map_or(2, |(_, r)| r.end);
    let mut out = Vec::with_capacity(jpeg.len() + payload.len() + 4);
    out.extend_from_slice(&jpeg[..at]);
    out.extend_from_slice(&[0xFF, 0xFE]);
    out.extend_from_slice(&((payload.len() + 2) as u16).to_be_bytes());
    out.extend_from_slice(payload);
    out.extend_from_slice(&jpeg[at..]);
    out
}
