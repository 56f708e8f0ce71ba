//! TIFF in and out through the `tiff` crate: every page, any of our sample types, grey, RGB,
//! alpha and extra channels, planar or contiguous, classic or BigTIFF, with resolution,
//! description and ICC profile kept. Colour models the crate leaves undecoded (palette, YCbCr,
//! CMYK, bilevel) fall back to the general decoder for single-page files.

use super::samples::{self, BlankRule, Layout, SampleType, Samples, WorkingPage};
use super::{Compression, DecodeLimits, Document, Format, Metadata, Provenance, Resolution, ResolutionUnit};
use crate::error::{Error, Result};
use std::io::{Cursor, Seek, Write};
use tiff::decoder::{Decoder, DecodingResult, Limits};
use tiff::encoder::colortype::ColorType;
use tiff::encoder::{Rational, TiffEncoder, TiffKind, TiffValue};
use tiff::tags::{PhotometricInterpretation, SampleFormat, Tag};

fn tiff_err(page: usize, e: tiff::TiffError) -> Error {
    let what = match e {
        tiff::TiffError::LimitsExceeded => {
            return Error::TooMuchMemory { limit_mib: DecodeLimits::default().max_alloc_mib }
        }
        tiff::TiffError::IoError(ref io) if io.kind() == std::io::ErrorKind::UnexpectedEof => {
            "the file ends before the page's data (truncated?)".to_string()
        }
        ref other => other.to_string(),
    };
    Error::decode_caused(format!("TIFF page {page}: {what}"), e)
}

struct PageHead {
    width: usize,
    height: usize,
    layout: Layout,
    sample: SampleType,
}

/// The page's layout and sample type, or None where only the general decoder reads it.
fn page_head(dec: &mut Decoder<Cursor<&[u8]>>, page: usize) -> Result<Option<PageHead>> {
    let e = |err| tiff_err(page, err);
    let (w, h) = dec.dimensions().map_err(e)?;
    let tag_u16 = |dec: &mut Decoder<Cursor<&[u8]>>, t: Tag| -> Result<Option<Vec<u16>>> {
        dec.find_tag(t).map_err(e)?.map(|v| v.into_u16_vec().map_err(e)).transpose()
    };
    let spp = tag_u16(dec, Tag::SamplesPerPixel)?.and_then(|v| v.first().copied()).unwrap_or(1) as usize;
    let bits = tag_u16(dec, Tag::BitsPerSample)?.unwrap_or_else(|| vec![1]);
    let formats = tag_u16(dec, Tag::SampleFormat)?.unwrap_or_else(|| vec![1]);
    let photometric = tag_u16(dec, Tag::PhotometricInterpretation)?.and_then(|v| v.first().copied());
    let extra = tag_u16(dec, Tag::ExtraSamples)?.unwrap_or_default();
    if bits.iter().any(|b| *b != bits[0]) || formats.iter().any(|f| *f != formats[0]) {
        return Err(Error::UnsupportedPixelType(format!(
            "TIFF page {page}: channels of different sample sizes or types"
        )));
    }
    let sample = match (bits[0], SampleFormat::from_u16(formats[0])) {
        (8, Some(SampleFormat::Uint)) => SampleType::U8,
        (16, Some(SampleFormat::Uint)) => SampleType::U16,
        (16, Some(SampleFormat::Int)) => SampleType::I16,
        (32, Some(SampleFormat::Uint)) => SampleType::U32,
        (32, Some(SampleFormat::Int)) => SampleType::I32,
        (32, Some(SampleFormat::IEEEFP)) => SampleType::F32,
        (64, Some(SampleFormat::IEEEFP)) => SampleType::F64,
        _ => return Ok(None),
    };
    let alpha_extra = matches!(extra.first(), Some(1) | Some(2));
    let layout = match (PhotometricInterpretation::from_u16(photometric.unwrap_or(1)), spp) {
        (Some(PhotometricInterpretation::BlackIsZero), 1) => Layout::Grey,
        (Some(PhotometricInterpretation::BlackIsZero), 2) if alpha_extra => Layout::GreyAlpha,
        (Some(PhotometricInterpretation::BlackIsZero), n) => Layout::Bands(n),
        (Some(PhotometricInterpretation::RGB), 3) => Layout::Rgb,
        (Some(PhotometricInterpretation::RGB), 4) => Layout::Rgba,
        (Some(PhotometricInterpretation::RGB), n) if n > 4 => Layout::Bands(n),
        _ => return Ok(None),
    };
    // Alpha passes through untouched only in 8 and 16 bits; elsewhere it is one more channel.
    let layout = match layout {
        Layout::GreyAlpha | Layout::Rgba if !matches!(sample, SampleType::U8 | SampleType::U16) => Layout::Bands(spp),
        l => l,
    };
    Ok(Some(PageHead { width: w as usize, height: h as usize, layout, sample }))
}

/// Strips or tiles that lie outside the file, or uncompressed ones shorter than their pixels:
/// refused, where a reader might otherwise fill the gap with zeros and say nothing.
fn check_chunks(dec: &mut Decoder<Cursor<&[u8]>>, file_len: usize, head: &PageHead, page: usize) -> Result<()> {
    let e = |err| tiff_err(page, err);
    let vec = |dec: &mut Decoder<Cursor<&[u8]>>, t: Tag| -> Result<Option<Vec<u64>>> {
        dec.find_tag(t).map_err(e)?.map(|v| v.into_u64_vec().map_err(e)).transpose()
    };
    let (offsets, counts) = match (vec(dec, Tag::StripOffsets)?, vec(dec, Tag::StripByteCounts)?) {
        (Some(o), Some(c)) => (o, c),
        _ => match (vec(dec, Tag::TileOffsets)?, vec(dec, Tag::TileByteCounts)?) {
            (Some(o), Some(c)) => (o, c),
            _ => return Err(Error::decode(format!("TIFF page {page}: the page says nowhere where its pixels are"))),
        },
    };
    let bad = |what: String| Err(Error::decode(format!("TIFF page {page}: {what} (damaged or truncated file?)")));
    if offsets.len() != counts.len() {
        return bad(format!("{} strip offsets but {} strip sizes", offsets.len(), counts.len()));
    }
    if let Some(i) = offsets.iter().zip(&counts).position(|(o, c)| o.saturating_add(*c) > file_len as u64) {
        return bad(format!("strip {} runs past the end of the file", i + 1));
    }
    let uncompressed = dec.find_tag(Tag::Compression).ok().flatten().and_then(|v| v.into_u16().ok()).unwrap_or(1) == 1;
    let strips = dec.find_tag(Tag::StripOffsets).ok().flatten().is_some();
    if uncompressed && strips {
        let bytes_per_sample = match head.sample {
            SampleType::U8 => 1,
            SampleType::U16 | SampleType::I16 => 2,
            SampleType::U32 | SampleType::I32 | SampleType::F32 => 4,
            SampleType::F64 => 8,
        };
        let planes = if offsets.len() > 1
            && dec.find_tag(Tag::PlanarConfiguration).ok().flatten().and_then(|v| v.into_u16().ok()) == Some(2)
        {
            head.layout.samples_per_pixel()
        } else {
            1
        };
        let row = (head.width * bytes_per_sample * head.layout.samples_per_pixel() / planes) as u64;
        let rows_per_strip = dec
            .find_tag(Tag::RowsPerStrip)
            .ok()
            .flatten()
            .and_then(|v| v.into_u64().ok())
            .unwrap_or(head.height as u64)
            .min(head.height as u64)
            .max(1);
        let per_plane = offsets.len() / planes;
        for (i, c) in counts.iter().enumerate() {
            let k = (i % per_plane.max(1)) as u64;
            let rows = rows_per_strip.min((head.height as u64).saturating_sub(k * rows_per_strip));
            if *c < rows * row {
                return bad(format!("strip {} holds {c} bytes where its {rows} rows need {}", i + 1, rows * row));
            }
        }
    }
    Ok(())
}

fn to_samples(r: DecodingResult, page: usize) -> Result<Samples> {
    Ok(match r {
        DecodingResult::U8(v) => Samples::U8(v),
        DecodingResult::U16(v) => Samples::U16(v),
        DecodingResult::I16(v) => Samples::I16(v),
        DecodingResult::U32(v) => Samples::U32(v),
        DecodingResult::I32(v) => Samples::I32(v),
        DecodingResult::F32(v) => Samples::F32(v),
        DecodingResult::F64(v) => Samples::F64(v),
        _ => return Err(Error::UnsupportedPixelType(format!("the sample type of TIFF page {page}"))),
    })
}

/// Planar data (all of channel 0, then channel 1, ...) to interleaved.
fn interleave(s: Samples, n: usize) -> Samples {
    let px = s.len() / n;
    Samples::from_values(s.sample_type(), s.len(), |i| s.get((i % n) * px + i / n))
}

fn read_metadata(dec: &mut Decoder<Cursor<&[u8]>>, bytes: &[u8]) -> Metadata {
    let mut m = Metadata {
        big_tiff: bytes.get(2..4) == Some(&[43, 0]) || bytes.get(2..4) == Some(&[0, 43]),
        ..Metadata::default()
    };
    let num = |dec: &mut Decoder<Cursor<&[u8]>>, t| match dec.find_tag(t).ok().flatten()? {
        tiff::decoder::ifd::Value::Rational(n, d) if d != 0 => Some(f64::from(n) / f64::from(d)),
        tiff::decoder::ifd::Value::Double(v) => Some(v),
        tiff::decoder::ifd::Value::Float(v) => Some(f64::from(v)),
        _ => None,
    };
    if let (Some(x), Some(y)) = (num(dec, Tag::XResolution), num(dec, Tag::YResolution)) {
        let unit = match dec.find_tag(Tag::ResolutionUnit).ok().flatten().and_then(|v| v.into_u16().ok()) {
            Some(1) => ResolutionUnit::None,
            Some(3) => ResolutionUnit::Centimetre,
            _ => ResolutionUnit::Inch, // the TIFF default
        };
        // 1 x 1 without a unit is what writers put when they know nothing.
        if !(unit == ResolutionUnit::None && x == 1.0 && y == 1.0) {
            m.resolution = Some(Resolution { x, y, unit });
        }
    }
    m.description = dec.get_tag_ascii_string(Tag::ImageDescription).ok();
    m.software = dec.get_tag_ascii_string(Tag::Software).ok();
    m.icc_profile = dec.find_tag(Tag::IccProfile).ok().flatten().and_then(|v| v.into_u8_vec().ok());
    m.compression = match dec.find_tag(Tag::Compression).ok().flatten().and_then(|v| v.into_u16().ok()) {
        Some(5) => Compression::Lzw,
        Some(8) | Some(32946) => Compression::Deflate,
        _ => Compression::None,
    };
    m
}

fn open<'a>(bytes: &'a [u8], limits: &DecodeLimits) -> Result<(Decoder<Cursor<&'a [u8]>>, Metadata)> {
    let mut tl = Limits::default();
    tl.decoding_buffer_size = (limits.max_alloc_mib as usize).saturating_mul(1024 * 1024);
    let mut dec = Decoder::new(Cursor::new(bytes)).map_err(|e| tiff_err(1, e))?.with_limits(tl);
    let meta = read_metadata(&mut dec, bytes);
    Ok((dec, meta))
}

/// The current page, checked and converted to working values at once (pages are never held as
/// stored samples all together). `pages` counts this one, for the memory cap.
fn read_page(
    dec: &mut Decoder<Cursor<&[u8]>>,
    file_len: usize,
    head: &PageHead,
    page: usize,
    limits: &DecodeLimits,
) -> Result<WorkingPage> {
    limits.check(head.width, head.height, page, head.layout.samples_per_pixel())?;
    check_chunks(dec, file_len, head, page)?;
    let mut result = DecodingResult::U8(Vec::new());
    let layout = dec.read_image_to_buffer(&mut result).map_err(|e| tiff_err(page, e))?;
    let n = head.layout.samples_per_pixel();
    let mut s = to_samples(result, page)?;
    if layout.planes > 1 {
        if s.len() != head.width * head.height * n {
            return Err(Error::TooMuchMemory { limit_mib: limits.max_alloc_mib });
        }
        s = interleave(s, n);
    }
    samples::to_working(&s, head.width, head.height, head.layout, BlankRule { marker: None })
}

fn unsupported_model(page: usize) -> Error {
    Error::UnsupportedPixelType(format!(
        "TIFF page {page}'s colour model (palette, YCbCr, CMYK or under 8 bits) in a multi-page file"
    ))
}

/// Reads every page of a TIFF (or BigTIFF) file, any sample type, with its tags.
pub fn decode(bytes: &[u8], limits: &DecodeLimits) -> Result<Document> {
    let (mut dec, meta) = open(bytes, limits)?;
    let mut pages: Vec<WorkingPage> = Vec::new();
    let mut first: Option<PageHead> = None;
    loop {
        let page = pages.len() + 1;
        let Some(head) = page_head(&mut dec, page)? else {
            if page == 1 && !dec.more_images() {
                let mut doc = super::raster::decode(bytes, Format::Tiff, limits)?;
                doc.meta = meta;
                return Ok(doc);
            }
            return Err(unsupported_model(page));
        };
        if let Some(f) = &first {
            if (f.width, f.height, f.layout, f.sample) != (head.width, head.height, head.layout, head.sample) {
                return Err(Error::decode(format!(
                    "TIFF page {page} is {} x {} {} where page 1 is {} x {} {}: pages must match",
                    head.width,
                    head.height,
                    head.sample.describe(),
                    f.width,
                    f.height,
                    f.sample.describe()
                )));
            }
        }
        pages.push(read_page(&mut dec, bytes.len(), &head, page, limits)?);
        first.get_or_insert(head);
        if !dec.more_images() {
            break;
        }
        dec.next_image().map_err(|e| tiff_err(page + 1, e))?;
    }
    let head = first.ok_or(Error::ZeroSize)?;
    Ok(Document { format: Format::Tiff, sample: head.sample, layout: head.layout, pages, meta })
}

/// One page alone (0-based), without decoding the others: what the page's workers get for the
/// image shown. The first page's metadata comes with it.
pub fn decode_page(bytes: &[u8], limits: &DecodeLimits, index: usize) -> Result<Document> {
    let (mut dec, meta) = open(bytes, limits)?;
    if index > 0 {
        dec.seek_to_image(index).map_err(|e| tiff_err(index + 1, e))?;
    }
    let Some(head) = page_head(&mut dec, index + 1)? else {
        if index == 0 {
            return decode(bytes, limits);
        }
        return Err(unsupported_model(index + 1));
    };
    let page = read_page(&mut dec, bytes.len(), &head, 1, limits)?;
    Ok(Document { format: Format::Tiff, sample: head.sample, layout: head.layout, pages: vec![page], meta })
}

/// Independent channels per page, read from the first page's header alone.
pub fn bands_per_page(bytes: &[u8], limits: &DecodeLimits) -> Result<usize> {
    let (mut dec, _) = open(bytes, limits)?;
    Ok(match page_head(&mut dec, 1)?.map(|h| h.layout) {
        Some(Layout::Bands(n)) => n,
        _ => 1,
    })
}

/// The per-sample facts of a stored type.
trait Kind: Copy {
    const BITS: u16;
    const FORMAT: SampleFormat;
}
macro_rules! kind {
    ($t:ty, $b:expr, $f:ident) => {
        impl Kind for $t {
            const BITS: u16 = $b;
            const FORMAT: SampleFormat = SampleFormat::$f;
        }
    };
}
kind!(u8, 8, Uint);
kind!(u16, 16, Uint);
kind!(i16, 16, Int);
kind!(u32, 32, Uint);
kind!(i32, 32, Int);
kind!(f32, 32, IEEEFP);
kind!(f64, 64, IEEEFP);

/// N samples per pixel of type T, photometric grey (`RGB` false) or RGB.
struct Pixel<T, const N: usize, const RGB: bool>(std::marker::PhantomData<T>);

impl<T: Kind + TiffValue, const N: usize, const RGB: bool> ColorType for Pixel<T, N, RGB> {
    type Inner = T;
    const TIFF_VALUE: PhotometricInterpretation =
        if RGB { PhotometricInterpretation::RGB } else { PhotometricInterpretation::BlackIsZero };
    const BITS_PER_SAMPLE: &'static [u16] = &[T::BITS; N];
    const SAMPLE_FORMAT: &'static [SampleFormat] = &[T::FORMAT; N];
    // Used only with a predictor, which is never set here.
    fn horizontal_predict(row: &[T], result: &mut Vec<T>) {
        result.extend_from_slice(row);
    }
}

fn rational(v: f64) -> Rational {
    if v.fract() == 0.0 && v > 0.0 && v < f64::from(u32::MAX) {
        Rational { n: v as u32, d: 1 }
    } else {
        Rational { n: (v * 10_000.0).round().clamp(0.0, f64::from(u32::MAX)) as u32, d: 10_000 }
    }
}

fn enc_err(e: tiff::TiffError) -> Error {
    Error::encode_caused(format!("TIFF: {e}"), e)
}

fn write_page<W: Write + Seek, K: TiffKind, C: ColorType>(
    enc: &mut TiffEncoder<W, K>,
    doc: &Document,
    data: &[C::Inner],
    provenance: Option<&Provenance>,
) -> Result<()>
where
    [C::Inner]: TiffValue,
{
    let mut im = enc.new_image::<C>(doc.width() as u32, doc.height() as u32).map_err(enc_err)?;
    let m = &doc.meta;
    if let Some(r) = m.resolution {
        // TIFF has no metre unit: PNG's pixels per metre become pixels per centimetre.
        let (unit, k) = match r.unit {
            ResolutionUnit::None => (tiff::tags::ResolutionUnit::None, 1.0),
            ResolutionUnit::Inch => (tiff::tags::ResolutionUnit::Inch, 1.0),
            ResolutionUnit::Centimetre => (tiff::tags::ResolutionUnit::Centimeter, 1.0),
            ResolutionUnit::Metre => (tiff::tags::ResolutionUnit::Centimeter, 0.01),
        };
        let d = im.encoder();
        d.write_tag(Tag::ResolutionUnit, unit.to_u16()).map_err(enc_err)?;
        d.write_tag(Tag::XResolution, rational(r.x * k)).map_err(enc_err)?;
        d.write_tag(Tag::YResolution, rational(r.y * k)).map_err(enc_err)?;
    }
    let n = doc.layout.samples_per_pixel();
    let extra: Vec<u16> = match doc.layout {
        Layout::GreyAlpha | Layout::Rgba => vec![2], // unassociated alpha
        Layout::Bands(_) => vec![0; n - 1],          // unspecified: independent channels
        _ => Vec::new(),
    };
    let d = im.encoder();
    if !extra.is_empty() {
        d.write_tag(Tag::ExtraSamples, &extra[..]).map_err(enc_err)?;
    }
    if let Some(desc) = &m.description {
        d.write_tag(Tag::ImageDescription, desc.as_str()).map_err(enc_err)?;
    }
    if let Some(p) = provenance {
        d.write_tag(Tag::Software, p.sentence().as_str()).map_err(enc_err)?;
    }
    if let Some(icc) = &m.icc_profile {
        d.write_tag(Tag::IccProfile, &icc[..]).map_err(enc_err)?;
    }
    im.write_data(data).map_err(enc_err)
}

fn write_typed<W: Write + Seek, K: TiffKind, T: Kind + TiffValue>(
    enc: &mut TiffEncoder<W, K>,
    doc: &Document,
    data: &[T],
    provenance: Option<&Provenance>,
) -> Result<()>
where
    [T]: TiffValue,
{
    let rgb = matches!(doc.layout, Layout::Rgb | Layout::Rgba);
    macro_rules! go {
        ($n:literal) => {
            if rgb {
                write_page::<W, K, Pixel<T, $n, true>>(enc, doc, data, provenance)
            } else {
                write_page::<W, K, Pixel<T, $n, false>>(enc, doc, data, provenance)
            }
        };
    }
    match doc.layout.samples_per_pixel() {
        1 => go!(1),
        2 => go!(2),
        3 => go!(3),
        4 => go!(4),
        5 => go!(5),
        6 => go!(6),
        7 => go!(7),
        8 => go!(8),
        n => Err(Error::UnsupportedOutput(format!(
            "TIFF output holds at most 8 channels per pixel here; the image has {n}"
        ))),
    }
}

fn write_all<W: Write + Seek, K: TiffKind>(
    mut enc: TiffEncoder<W, K>,
    doc: &Document,
    provenance: Option<&Provenance>,
) -> Result<()> {
    for page in &doc.pages {
        let blank = if doc.sample.is_float() { f64::NAN } else { 0.0 };
        let s = samples::from_working(page, doc.layout, doc.sample, blank);
        match &s {
            Samples::U8(v) => write_typed(&mut enc, doc, v, provenance)?,
            Samples::U16(v) => write_typed(&mut enc, doc, v, provenance)?,
            Samples::I16(v) => write_typed(&mut enc, doc, v, provenance)?,
            Samples::U32(v) => write_typed(&mut enc, doc, v, provenance)?,
            Samples::I32(v) => write_typed(&mut enc, doc, v, provenance)?,
            Samples::F32(v) => write_typed(&mut enc, doc, v, provenance)?,
            Samples::F64(v) => write_typed(&mut enc, doc, v, provenance)?,
        }
    }
    Ok(())
}

/// Classic TIFF addresses at most 4 GiB; larger files, and BigTIFF inputs, are written as BigTIFF.
const CLASSIC_LIMIT: u64 = (1 << 32) - (1 << 24);

/// Writes every page of the document as TIFF in its sample type and compression, with its tags
/// and the run recorded in Software.
pub fn encode(doc: &Document, provenance: Option<&Provenance>) -> Result<Vec<u8>> {
    let bytes_per_sample: u64 = match doc.sample {
        SampleType::U8 => 1,
        SampleType::U16 | SampleType::I16 => 2,
        SampleType::U32 | SampleType::I32 | SampleType::F32 => 4,
        SampleType::F64 => 8,
    };
    let size =
        (doc.width() * doc.height() * doc.layout.samples_per_pixel() * doc.pages.len()) as u64 * bytes_per_sample;
    let compression = match doc.meta.compression {
        Compression::None => tiff::encoder::Compression::Uncompressed,
        Compression::Lzw => tiff::encoder::Compression::Lzw,
        Compression::Deflate => tiff::encoder::Compression::Deflate(tiff::encoder::DeflateLevel::default()),
    };
    let mut out = Cursor::new(Vec::new());
    if doc.meta.big_tiff || size > CLASSIC_LIMIT {
        let enc = TiffEncoder::new_big(&mut out).map_err(enc_err)?.with_compression(compression);
        write_all(enc, doc, provenance)?;
    } else {
        let enc = TiffEncoder::new(&mut out).map_err(enc_err)?.with_compression(compression);
        write_all(enc, doc, provenance)?;
    }
    Ok(out.into_inner())
}
