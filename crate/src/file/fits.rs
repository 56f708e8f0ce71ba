//! FITS primary-HDU images through `fitsio-pure` (pure Rust, reads and writes, builds for wasm):
//! 2-D images and 3-D cubes (planes as pages), BITPIX 8/16/32/-32/-64 with BZERO/BSCALE and the
//! unsigned conventions, BLANK and NaN pixels left as they were, every header card kept, HISTORY
//! cards recording the run, and any extensions after the primary HDU copied byte for byte.

use super::samples::{self, BlankRule, Layout, SampleType, Samples};
use super::{DecodeLimits, Document, Format, Metadata, Provenance};
use crate::error::{Error, Result};
use fitsio_pure::block::padded_byte_len;
use fitsio_pure::hdu::HduInfo;
use fitsio_pure::header::Card;
use fitsio_pure::image::ImageData;
use fitsio_pure::value::Value;

fn fits_err(e: fitsio_pure::Error) -> Error {
    Error::decode_caused(format!("FITS: {e}"), e)
}

/// Cards the writer makes itself from the data's shape.
fn structural(keyword: &str) -> bool {
    matches!(keyword, "SIMPLE" | "BITPIX" | "NAXIS" | "END")
        || (keyword.starts_with("NAXIS") && keyword[5..].parse::<u32>().is_ok())
}

const U16_ZERO: f64 = 32768.0;
const U32_ZERO: f64 = 2147483648.0;

/// Reads a FITS file's primary image (2-D, or 3-D as pages), BZERO/BSCALE and BLANK applied.
pub fn decode(bytes: &[u8], limits: &DecodeLimits) -> Result<Document> {
    let fd = fitsio_pure::hdu::parse_fits(bytes).map_err(fits_err)?;
    let hdu = fd.primary();
    let HduInfo::Primary { naxes, .. } = &hdu.info else {
        return Err(Error::decode("FITS: the primary HDU is not an image"));
    };
    if naxes.len() < 2 || naxes.iter().product::<usize>() == 0 {
        return Err(Error::decode(format!(
            "FITS: the primary HDU holds no 2-D image (NAXIS = {}); images in extensions are not read here",
            naxes.len()
        )));
    }
    if naxes.len() > 3 && naxes[3..].iter().any(|&n| n != 1) {
        return Err(Error::UnsupportedPixelType(format!("{}-dimensional FITS", naxes.len())));
    }
    let (w, h) = (naxes[0], naxes[1]);
    let pages = naxes.get(2).copied().unwrap_or(1);
    limits.check(w, h, pages, 1)?;
    if hdu.data_start + hdu.data_len > bytes.len() {
        return Err(Error::decode("FITS: the file ends before the image data (truncated?)"));
    }
    let data = fitsio_pure::image::read_image_data(bytes, hdu).map_err(fits_err)?;
    let (bscale, bzero) = fitsio_pure::image::extract_bscale_bzero(&hdu.cards);
    let blank = fitsio_pure::image::extract_blank(&hdu.cards);
    let unsigned = |zero: f64| bscale == 1.0 && bzero == zero;
    // Stored samples as the physical integers where a convention says so, else the raw values.
    let (s, marker) = match data {
        ImageData::U8(v) => (Samples::U8(v), blank.map(|b| b as f64)),
        ImageData::I16(v) if unsigned(U16_ZERO) => (
            Samples::U16(v.iter().map(|&x| (i32::from(x) + 32768) as u16).collect()),
            blank.map(|b| b as f64 + U16_ZERO),
        ),
        ImageData::I16(v) => (Samples::I16(v), blank.map(|b| b as f64)),
        ImageData::I32(v) if unsigned(U32_ZERO) => (
            Samples::U32(v.iter().map(|&x| (i64::from(x) + 2147483648) as u32).collect()),
            blank.map(|b| b as f64 + U32_ZERO),
        ),
        ImageData::I32(v) => (Samples::I32(v), blank.map(|b| b as f64)),
        ImageData::F32(v) => (Samples::F32(v), None),
        ImageData::F64(v) => (Samples::F64(v), None),
        ImageData::I64(_) => return Err(Error::UnsupportedPixelType("64-bit integer FITS".into())),
    };
    let sample = s.sample_type();
    let rule = BlankRule { marker };
    let plane = w * h;
    let pages = (0..pages)
        .map(|p| {
            let page = Samples::from_values(sample, plane, |i| s.get(p * plane + i));
            samples::to_working(&page, w, h, Layout::Grey, rule)
        })
        .collect::<Result<Vec<_>>>()?;
    let primary_end = (hdu.data_start + padded_byte_len(hdu.data_len)).min(bytes.len());
    let meta = Metadata {
        fits_cards: hdu.cards.iter().filter(|c| !structural(c.keyword_str())).cloned().collect(),
        fits_blank: blank,
        fits_axes: naxes.clone(),
        fits_extensions: bytes[primary_end..].to_vec(),
        ..Metadata::default()
    };
    Ok(Document { format: Format::Fits, sample, layout: Layout::Grey, pages, meta })
}

fn card(keyword: &str, value: Value, comment: Option<&str>) -> Result<Card> {
    let mut c = Card::new(keyword, value).map_err(|e| Error::encode_caused(format!("FITS: {e}"), e))?;
    c.comment = comment.map(str::to_string);
    Ok(c)
}

fn history(text: &str) -> Vec<Card> {
    let chars: Vec<char> = text.chars().filter(|c| c.is_ascii() && !c.is_ascii_control()).collect();
    chars
        .chunks(70)
        .map(|piece| Card { keyword: *b"HISTORY ", value: None, comment: Some(piece.iter().collect()) })
        .collect()
}

/// Writes a FITS file of the document's pages with their header cards and the run recorded
/// in HISTORY.
pub fn encode(doc: &Document, provenance: Option<&Provenance>) -> Result<Vec<u8>> {
    let (w, h, n) = (doc.width(), doc.height(), doc.pages.len());
    let m = &doc.meta;
    let axes = if m.fits_axes.len() >= 2 && m.fits_axes.iter().product::<usize>() == w * h * n {
        m.fits_axes.clone()
    } else if n > 1 {
        vec![w, h, n]
    } else {
        vec![w, h]
    };
    let bitpix = match doc.sample {
        SampleType::U8 => 8,
        SampleType::U16 | SampleType::I16 => 16,
        SampleType::U32 | SampleType::I32 => 32,
        SampleType::F32 => -32,
        SampleType::F64 => -64,
    };
    let mut cards = fitsio_pure::primary::build_primary_header(bitpix, &axes)
        .map_err(|e| Error::encode_caused(format!("FITS: {e}"), e))?;
    let from_fits = doc.format == Format::Fits;
    if from_fits {
        cards.extend(m.fits_cards.iter().cloned());
    } else {
        match doc.sample {
            SampleType::U16 => {
                cards.push(card("BZERO", Value::Float(U16_ZERO), Some("unsigned 16-bit data"))?);
                cards.push(card("BSCALE", Value::Float(1.0), None)?);
            }
            SampleType::U32 => {
                cards.push(card("BZERO", Value::Float(U32_ZERO), Some("unsigned 32-bit data"))?);
                cards.push(card("BSCALE", Value::Float(1.0), None)?);
            }
            _ => {}
        }
        if let Some(d) = &m.description {
            cards.extend(history(&format!("Description: {d}")));
        }
    }
    if let Some(p) = provenance {
        cards.extend(history(&p.sentence()));
    }
    let header =
        fitsio_pure::header::serialize_header(&cards).map_err(|e| Error::encode_caused(format!("FITS: {e}"), e))?;
    let blank = m.fits_blank.map(|b| match doc.sample {
        SampleType::U16 => b as f64 + U16_ZERO,
        SampleType::U32 => b as f64 + U32_ZERO,
        _ => b as f64,
    });
    let blank_value = if doc.sample.is_float() { f64::NAN } else { blank.unwrap_or(0.0) };
    let mut values: Vec<f64> = Vec::with_capacity(w * h * n);
    for page in &doc.pages {
        let s = samples::from_working(page, Layout::Grey, doc.sample, blank_value);
        values.extend((0..s.len()).map(|i| s.get(i)));
    }
    let data = match doc.sample {
        SampleType::U8 => ImageData::U8(values.iter().map(|&v| v as u8).collect()),
        SampleType::U16 => ImageData::I16(values.iter().map(|&v| (v - U16_ZERO) as i16).collect()),
        SampleType::I16 => ImageData::I16(values.iter().map(|&v| v as i16).collect()),
        SampleType::U32 => ImageData::I32(values.iter().map(|&v| (v - U32_ZERO) as i32).collect()),
        SampleType::I32 => ImageData::I32(values.iter().map(|&v| v as i32).collect()),
        SampleType::F32 => ImageData::F32(values.iter().map(|&v| v as f32).collect()),
        SampleType::F64 => ImageData::F64(values),
    };
    let mut out = header;
    out.extend_from_slice(&fitsio_pure::image::serialize_image(&data));
    out.extend_from_slice(&m.fits_extensions);
    Ok(out)
}
