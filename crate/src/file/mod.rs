//! Files as the trades write them: any number of pages (z or time), channels and sample types,
//! with their metadata, read into working pages the methods take and written back the same.
//! One table ([`FORMATS`]) says what each format reads, writes and keeps.

pub mod fits;
pub mod raster;
pub mod samples;
pub mod tiff;

use crate::error::{Error, Result};
use crate::planes::Image;
use samples::{Layout, SampleType, ValueMap, WorkingPage};
use serde::Serialize;

/// Caps applied while decoding; a header that claims more is refused before pixels are read.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct DecodeLimits {
    /// Per page.
    pub max_megapixels: u64,
    /// For the whole file's working copy.
    pub max_alloc_mib: u64,
}

/// The pages' size limit unless told otherwise, in megapixels: the CLI's `--max-megapixels`
/// default and the page's limit (a 24-megapixel colour photo and a 16-bit 8000 x 8000 frame fit).
pub const DEFAULT_MAX_MEGAPIXELS: u64 = 64;

impl Default for DecodeLimits {
    fn default() -> Self {
        DecodeLimits { max_megapixels: DEFAULT_MAX_MEGAPIXELS, max_alloc_mib: 2048 }
    }
}

impl DecodeLimits {
    /// Refuses a page, or a file of `pages` pages with `samples` per pixel, that exceeds the caps.
    pub fn check(&self, width: usize, height: usize, pages: usize, samples: usize) -> Result<()> {
        if width == 0 || height == 0 {
            return Err(Error::ZeroSize);
        }
        let px = width as u64 * height as u64;
        if px > self.max_megapixels * 1_000_000 {
            return Err(Error::TooManyPixels {
                width: width as u32,
                height: height as u32,
                limit: self.max_megapixels,
            });
        }
        // Working copy: 4 bytes per sample.
        if px * pages as u64 * samples as u64 * 4 > self.max_alloc_mib * 1024 * 1024 {
            return Err(Error::TooMuchMemory { limit_mib: self.max_alloc_mib });
        }
        Ok(())
    }
}

/// An image file format.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// PNG (8 or 16 bits).
    Png,
    /// TIFF and BigTIFF (any sample type, many pages).
    Tiff,
    /// FITS (integer and float images, cubes as pages).
    Fits,
    /// JPEG (read; results are written as PNG).
    Jpeg,
    /// BMP (read; results are written as PNG).
    Bmp,
}

/// What one format reads, writes and keeps: the one place the faces and the README ask.
pub struct FormatInfo {
    /// The format described.
    pub format: Format,
    /// Its name in messages.
    pub name: &'static str,
    /// File name extensions, lower case, without the dot.
    pub extensions: &'static [&'static str],
    /// Sample types written (every one listed is also read).
    pub samples: &'static [SampleType],
    /// Whether it holds several pages (a stack).
    pub pages: bool,
    /// Whether it holds an alpha channel.
    pub alpha: bool,
    /// Independent channels other than grey and RGB.
    pub bands: bool,
    /// What of the input it carries to the output, in words (for the README and help).
    pub keeps: &'static str,
}

use SampleType::*;

/// The table of formats: what each reads, writes and keeps.
pub const FORMATS: &[FormatInfo] = &[
    FormatInfo {
        format: Format::Tiff,
        name: "TIFF",
        extensions: &["tif", "tiff"],
        samples: &[U8, U16, I16, U32, I32, F32, F64],
        pages: true,
        alpha: true,
        bands: true,
        keeps: "every page; grey, RGB, alpha and extra channels; BigTIFF; the input's compression (none, LZW, Deflate); resolution, resolution unit, ImageDescription, ICC profile; Software records the run",
    },
    FormatInfo {
        format: Format::Fits,
        name: "FITS",
        extensions: &["fits", "fit", "fts"],
        samples: &[U8, U16, I16, U32, I32, F32, F64],
        pages: true,
        alpha: false,
        bands: false,
        keeps: "primary-HDU images, 2-D or 3-D (cubes as pages); BITPIX 8, 16, 32, -32, -64 with BZERO/BSCALE (unsigned 16 and 32 bits by their BZERO); blank and NaN pixels left as they were; every header card; HISTORY cards record the run",
    },
    FormatInfo {
        format: Format::Png,
        name: "PNG",
        extensions: &["png"],
        samples: &[U8, U16],
        pages: false,
        alpha: true,
        bands: false,
        keeps: "grey, RGB and alpha at 8 or 16 bits; pixel density (pHYs), ICC profile (iCCP), text chunks; text chunks record the run",
    },
    FormatInfo {
        format: Format::Jpeg,
        name: "JPEG",
        extensions: &["jpg", "jpeg"],
        samples: &[U8],
        pages: false,
        alpha: false,
        bands: false,
        keeps: "grey and RGB at 8 bits (lossy); ICC profile, EXIF (with its orientation) and comments copied",
    },
    FormatInfo {
        format: Format::Bmp,
        name: "BMP",
        extensions: &["bmp"],
        samples: &[U8],
        pages: false,
        alpha: true,
        bands: false,
        keeps: "grey and RGB at 8 bits; nothing else",
    },
];

impl Format {
    /// The format's entry in [`FORMATS`].
    pub fn info(self) -> &'static FormatInfo {
        FORMATS.iter().find(|f| f.format == self).unwrap_or(&FORMATS[0])
    }
    /// From a file name's extension, case-insensitive.
    pub fn from_extension(ext: &str) -> Option<Format> {
        let ext = ext.to_ascii_lowercase();
        FORMATS.iter().find(|f| f.extensions.contains(&ext.as_str())).map(|f| f.format)
    }
    /// From the file's first bytes.
    pub fn sniff(bytes: &[u8]) -> Option<Format> {
        let starts = |p: &[u8]| bytes.starts_with(p);
        if starts(b"\x89PNG\r\n\x1a\n") {
            Some(Format::Png)
        } else if starts(b"II*\0") || starts(b"MM\0*") || starts(b"II+\0") || starts(b"MM\0+") {
            Some(Format::Tiff)
        } else if starts(b"SIMPLE  =") {
            Some(Format::Fits)
        } else if starts(&[0xFF, 0xD8, 0xFF]) {
            Some(Format::Jpeg)
        } else if starts(b"BM") {
            Some(Format::Bmp)
        } else {
            None
        }
    }
    /// The extension written for this format.
    pub fn extension(self) -> &'static str {
        self.info().extensions[0]
    }
    /// "the output name must end in .png, .tif, ..." for messages.
    pub fn all_extensions() -> String {
        FORMATS.iter().flat_map(|f| f.extensions.iter()).map(|e| format!(".{e}")).collect::<Vec<_>>().join(", ")
    }
}

/// The unit of a stated resolution.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum ResolutionUnit {
    /// No unit (an aspect ratio only).
    None,
    /// Pixels per inch.
    Inch,
    /// Pixels per centimetre.
    Centimetre,
    /// PNG's pHYs unit.
    Metre,
}

impl Resolution {
    /// Pixels per metre, where the unit is a length.
    pub fn per_metre(&self) -> Option<(f64, f64)> {
        let k = match self.unit {
            ResolutionUnit::None => return None,
            ResolutionUnit::Inch => 1.0 / 0.0254,
            ResolutionUnit::Centimetre => 100.0,
            ResolutionUnit::Metre => 1.0,
        };
        Some((self.x * k, self.y * k))
    }
}

/// Pixel density as the file states it.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Resolution {
    /// Horizontal density.
    pub x: f64,
    /// Vertical density.
    pub y: f64,
    /// Its unit.
    pub unit: ResolutionUnit,
}

/// TIFF compression of the input, kept on output.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Compression {
    /// Uncompressed.
    #[default]
    None,
    /// LZW.
    Lzw,
    /// Deflate (zlib).
    Deflate,
}

/// What a file says besides its pixels. Every field is carried to outputs that can hold it.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Metadata {
    /// Pixel density, if stated.
    pub resolution: Option<Resolution>,
    /// TIFF ImageDescription, if any.
    pub description: Option<String>,
    /// The ICC colour profile, if any.
    pub icc_profile: Option<Vec<u8>>,
    /// Exif data, if any.
    pub exif: Option<Vec<u8>>,
    /// PNG text chunks (keyword, text).
    pub text: Vec<(String, String)>,
    /// FITS header cards other than the structural ones, in their order.
    pub fits_cards: Vec<fitsio_pure::header::Card>,
    /// FITS BLANK of integer data (raw value).
    pub fits_blank: Option<i64>,
    /// FITS NAXISn as read (a cube of one plane stays a cube).
    pub fits_axes: Vec<usize>,
    /// FITS extensions after the primary HDU, copied byte for byte.
    pub fits_extensions: Vec<u8>,
    /// The TIFF input's compression, used again on output.
    pub compression: Compression,
    /// Whether the TIFF input was BigTIFF (kept on output).
    pub big_tiff: bool,
    /// TIFF Software as read (ours records the run there).
    pub software: Option<String>,
}

/// A whole file: pages of one sample type and layout, each a working image.
#[derive(Clone)]
pub struct Document {
    /// The file's format.
    pub format: Format,
    /// The stored sample type.
    pub sample: SampleType,
    /// How samples are laid out per pixel.
    pub layout: Layout,
    /// The pages as working images.
    pub pages: Vec<WorkingPage>,
    /// Everything else the file says.
    pub meta: Metadata,
}

/// What a file holds, in a form the faces print or send.
#[derive(Clone, Debug, Serialize)]
pub struct Summary {
    /// The file's format.
    pub format: Format,
    /// The stored sample type.
    pub sample: SampleType,
    /// How samples are laid out per pixel.
    pub layout: Layout,
    /// Width in pixels.
    pub width: usize,
    /// Height in pixels.
    pub height: usize,
    /// Pages in the file.
    pub pages: usize,
    /// Images denoised one by one: pages times independent channels.
    pub units: usize,
    /// Pixels that carry no data (NaN, infinities, FITS BLANK), over all pages.
    pub blank_pixels: usize,
    /// The first image's map from working grey levels to stored values.
    pub map: ValueMap,
}

impl Document {
    /// Width of the pages in pixels.
    pub fn width(&self) -> usize {
        self.pages.first().map_or(0, |p| p.image.width)
    }
    /// Height of the pages in pixels.
    pub fn height(&self) -> usize {
        self.pages.first().map_or(0, |p| p.image.height)
    }
    fn per_page(&self) -> usize {
        match self.layout {
            Layout::Bands(n) => n,
            _ => 1,
        }
    }
    /// Images denoised one at a time: each page, and each independent channel of a page.
    pub fn units(&self) -> usize {
        self.pages.len() * self.per_page()
    }
    /// The images of each independent channel through the pages (z or time), in page order:
    /// one list per channel (one list for pages whose channels are denoised together).
    pub fn slice_series(&self) -> Vec<Vec<usize>> {
        let per = self.per_page();
        (0..per).map(|c| (0..self.pages.len()).map(|p| p * per + c).collect()).collect()
    }
    /// Unit `k` as an image a method takes (a band alone, as grey).
    pub fn unit(&self, k: usize) -> Result<Image> {
        let (p, c) = (k / self.per_page(), k % self.per_page());
        let page = self.pages.get(p).ok_or_else(|| Error::BadSettings(format!("there is no image {}", k + 1)))?;
        Ok(match self.layout {
            Layout::Bands(_) => page.image.with_channels(vec![page.image.channels[c].clone()]),
            _ => page.image.clone(),
        })
    }
    /// Unit `k` in the working grey levels of another map (of the unit it is compared with), so
    /// that two files of float data, each scaled by its own range, compare value for value.
    pub fn unit_in(&self, k: usize, map: ValueMap) -> Result<Image> {
        let own = self.unit_map(k);
        let mut img = self.unit(k)?;
        if own != map {
            for p in &mut img.channels {
                p.data.iter_mut().for_each(|v| *v = map.to_working(own.to_stored(*v)));
            }
        }
        Ok(img)
    }
    /// Replaces unit `k`'s colour planes with a result of the same size.
    pub fn set_unit(&mut self, k: usize, img: Image) -> Result<()> {
        let per = self.per_page();
        let (p, c) = (k / per, k % per);
        let page = self.pages.get_mut(p).ok_or_else(|| Error::Internal(format!("no image {k}")))?;
        let same = img.width == page.image.width && img.height == page.image.height;
        match self.layout {
            Layout::Bands(_) if same && img.channels.len() == 1 => {
                page.image.channels[c] =
                    img.channels.into_iter().next().ok_or_else(|| Error::Internal("no plane".into()))?;
            }
            _ if same && img.channels.len() == page.image.channels.len() => page.image.channels = img.channels,
            _ => return Err(Error::Internal("a result differs in size from its page".into())),
        }
        Ok(())
    }
    /// Takes unit `k`'s values from `result`, a one-image document of the same size (a unit
    /// result written alone and read back), with its value map; blank pixels stay the input's.
    pub fn replace_unit(&mut self, k: usize, result: &Document) -> Result<()> {
        let per = self.per_page();
        let src = result.pages.first().ok_or(Error::ZeroSize)?;
        let page =
            self.pages.get_mut(k / per).ok_or_else(|| Error::BadSettings(format!("there is no image {}", k + 1)))?;
        let (w, h) = (page.image.width, page.image.height);
        let fits = src.image.width == w && src.image.height == h && result.sample == self.sample;
        match self.layout {
            Layout::Bands(_) if fits && src.image.channels.len() == 1 => {
                page.image.channels[k % per] = src.image.channels[0].clone();
                page.maps[k % per] = src.maps[0];
            }
            _ if fits && src.image.channels.len() == page.image.channels.len() => {
                page.image.channels = src.image.channels.clone();
                page.maps = src.maps.clone();
            }
            _ => {
                return Err(Error::Mismatch(format!(
                    "the result for image {} is {} x {} {}, the file's images are {w} x {h} {}",
                    k + 1,
                    src.image.width,
                    src.image.height,
                    result.sample.describe(),
                    self.sample.describe()
                )))
            }
        }
        Ok(())
    }
    /// The format a result is saved in: the input's, except lossy or bare ones (JPEG, BMP) give PNG.
    pub fn result_format(&self) -> Format {
        match self.format {
            Format::Jpeg | Format::Bmp => Format::Png,
            f => f,
        }
    }
    /// "page 3 of 5, channel 2 of 2" for progress and reports; empty for a single image.
    pub fn unit_label(&self, k: usize) -> String {
        let per = self.per_page();
        let mut parts = Vec::new();
        if self.pages.len() > 1 {
            parts.push(format!("page {} of {}", k / per + 1, self.pages.len()));
        }
        if per > 1 {
            parts.push(format!("channel {} of {per}", k % per + 1));
        }
        parts.join(", ")
    }
    /// What the file holds, for the faces.
    pub fn summary(&self) -> Summary {
        Summary {
            format: self.format,
            sample: self.sample,
            layout: self.layout,
            width: self.width(),
            height: self.height(),
            pages: self.pages.len(),
            units: self.units(),
            blank_pixels: self.pages.iter().flat_map(|p| p.blanks.iter()).map(Vec::len).sum(),
            map: self.unit_map(0),
        }
    }
    /// Unit `k`'s map from working grey levels to stored values (sigma in file units = working x scale).
    pub fn unit_map(&self, k: usize) -> ValueMap {
        let per = self.per_page();
        self.pages.get(k / per).and_then(|p| p.maps.get(k % per)).copied().unwrap_or(ValueMap::IDENTITY)
    }
    /// Unit `k` alone, as a one-page document of the same sample type and metadata: written and
    /// read back, it gives the same working image ([`Document::unit`]).
    pub fn unit_document(&self, k: usize) -> Result<Document> {
        let per = self.per_page();
        let page = self.pages.get(k / per).ok_or_else(|| Error::BadSettings(format!("there is no image {}", k + 1)))?;
        let page = match self.layout {
            Layout::Bands(_) => {
                let c = k % per;
                WorkingPage {
                    image: page.image.with_channels(vec![page.image.channels[c].clone()]),
                    blanks: vec![page.blanks[c].clone()],
                    maps: vec![page.maps[c]],
                }
            }
            _ => page.clone(),
        };
        let layout = if matches!(self.layout, Layout::Bands(_)) { Layout::Grey } else { self.layout };
        Ok(Document { format: self.format, sample: self.sample, layout, pages: vec![page], meta: self.meta.clone() })
    }
    /// Says, before any work, why `format` cannot hold this document as it is, naming one that can.
    pub fn check_writable(&self, format: Format) -> Result<()> {
        let Some(what) = self.refusal(format) else { return Ok(()) };
        let better: Vec<String> = FORMATS
            .iter()
            .filter(|f| self.refusal(f.format).is_none())
            .map(|f| format!(".{}", f.extensions[0]))
            .collect();
        let hint = if better.is_empty() { String::new() } else { format!("; write {} instead", better.join(" or ")) };
        Err(Error::UnsupportedOutput(format!("{} cannot hold {what}{hint}", format.info().name)))
    }
    /// What of this document `format` cannot hold, if anything.
    fn refusal(&self, format: Format) -> Option<String> {
        let info = format.info();
        if !info.samples.contains(&self.sample) {
            Some(format!("{} samples", self.sample.describe()))
        } else if self.pages.len() > 1 && !info.pages {
            Some(format!("{} pages (only one)", self.pages.len()))
        } else if self.layout.has_alpha() && !info.alpha {
            Some("an alpha channel".into())
        } else if matches!(self.layout, Layout::Bands(_)) && !info.bands {
            Some(format!("{} independent channels", self.layout.samples_per_pixel()))
        } else if format == Format::Fits && self.layout != Layout::Grey {
            Some("colour pixels (FITS images here are grey pages)".into())
        } else if format == Format::Bmp && self.layout == Layout::GreyAlpha {
            Some("grey with alpha".into())
        } else {
            None
        }
    }
}

/// Reads a whole file: every page and channel, with its metadata.
pub fn decode(bytes: &[u8], limits: &DecodeLimits) -> Result<Document> {
    if bytes.is_empty() {
        return Err(Error::EmptyInput);
    }
    match Format::sniff(bytes) {
        Some(Format::Tiff) => tiff::decode(bytes, limits),
        Some(Format::Fits) => fits::decode(bytes, limits),
        Some(f) => raster::decode(bytes, f, limits),
        None => Err(Error::UnknownFormat),
    }
}

/// Image `k` of a file alone (a page, or one band of it) as a one-image document: for TIFF only
/// its page is decoded, so memory stays that of one page whatever the stack's length.
pub fn decode_unit(bytes: &[u8], limits: &DecodeLimits, k: usize) -> Result<Document> {
    if Format::sniff(bytes) == Some(Format::Tiff) {
        let per = tiff::bands_per_page(bytes, limits)?;
        return tiff::decode_page(bytes, limits, k / per)?.unit_document(k % per);
    }
    decode(bytes, limits)?.unit_document(k)
}

/// What a written file records about its making: the program, its version, and the settings.
#[derive(Clone, Debug)]
pub struct Provenance {
    /// The program and its version.
    pub software: String,
    /// The settings of the run, as JSON.
    pub settings_json: String,
}

impl Provenance {
    /// The record of a run with `settings`, the settings as one line of JSON.
    pub fn of(settings: &crate::settings::Settings) -> Provenance {
        let settings_json = serde_json::to_string(settings).unwrap_or_default();
        Provenance { software: format!("Patchgraph {}", env!("CARGO_PKG_VERSION")), settings_json }
    }
    /// One line: "Patchgraph 0.1.0, denoised with settings {...}".
    pub fn sentence(&self) -> String {
        format!("{}, denoised with settings {}", self.software, self.settings_json)
    }
}

/// Writes a whole document in `format`, refusing (before any bytes) what the format cannot hold.
pub fn encode(doc: &Document, format: Format, provenance: Option<&Provenance>) -> Result<Vec<u8>> {
    doc.check_writable(format)?;
    match format {
        Format::Tiff => tiff::encode(doc, provenance),
        Format::Fits => fits::encode(doc, provenance),
        f => raster::encode(doc, f, provenance),
    }
}

/// The single-page convenience the tests and sample generator use: an 8/16-bit image as a document.
pub fn document_of(img: Image, format: Format) -> Document {
    let sample = if img.depth == crate::planes::BitDepth::Eight { SampleType::U8 } else { SampleType::U16 };
    let layout = match (img.channels.len(), img.alpha.is_some()) {
        (1, false) => Layout::Grey,
        (1, true) => Layout::GreyAlpha,
        (_, false) => Layout::Rgb,
        (_, true) => Layout::Rgba,
    };
    let blanks = vec![Vec::new(); img.channels.len()];
    let maps = vec![ValueMap::IDENTITY; img.channels.len()];
    Document {
        format,
        sample,
        layout,
        pages: vec![WorkingPage { image: img, blanks, maps }],
        meta: Metadata::default(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_readme_states_the_cores_size_limit() {
        // Invariant: the README's sentences on the page's and the CLI's size limit name the
        // value both take from the core (the page through the wasm face's maxMegapixels).
        let readme = include_str!("../../../README.md");
        let n = DEFAULT_MAX_MEGAPIXELS;
        assert!(readme.contains(&format!("The page takes images up to {n} megapixels")));
        assert!(readme.contains(&format!("Images larger than {n} megapixels are refused")));
    }
}
