//! Decoding and encoding: every supported layout, sample type and page count round-trips
//! exactly (an invariant of lossless formats); limits refuse huge headers.

use patchgraph::file::samples::{Layout, SampleType, Samples, WorkingPage};
use patchgraph::file::{self, document_of, DecodeLimits, Document, Format, Metadata};
use patchgraph::planes::{Alpha, BitDepth, Image, Plane};
use patchgraph::Error;

fn encode(img: &Image, format: Format) -> patchgraph::Result<Vec<u8>> {
    file::encode(&document_of(img.clone(), format), format, None)
}

fn decode(bytes: &[u8], limits: &DecodeLimits) -> patchgraph::Result<Image> {
    file::decode(bytes, limits)?.unit(0)
}

mod common;

fn image(depth: BitDepth, color: usize, alpha: bool) -> Image {
    let max = depth.max_value();
    let (w, h) = (13usize, 9usize);
    let channels = (0..color)
        .map(|c| Plane::from_fn(w, h, |x, y| ((x * 31 + y * 17 + c * 50) as f32 * 97.0) % (max + 1.0)))
        .collect();
    let alpha = alpha.then(|| match depth {
        BitDepth::Eight => Alpha::Eight((0..w * h).map(|i| (i * 7 % 256) as u8).collect()),
        BitDepth::Sixteen => Alpha::Sixteen((0..w * h).map(|i| (i * 4099 % 65536) as u16).collect()),
    });
    Image { width: w, height: h, depth, channels, alpha }
}

#[test]
fn png_round_trips_every_layout_exactly() {
    // Invariant: lossless PNG gives back the same samples, depth, channels and alpha.
    for depth in [BitDepth::Eight, BitDepth::Sixteen] {
        for color in [1, 3] {
            for alpha in [false, true] {
                let img = image(depth, color, alpha);
                let back = decode(&encode(&img, Format::Png).unwrap(), &DecodeLimits::default()).unwrap();
                assert_eq!(back, img, "{depth:?} {color} alpha={alpha}");
            }
        }
    }
}

#[test]
fn tiff_round_trips_sixteen_bit_rgb() {
    let img = image(BitDepth::Sixteen, 3, false);
    let back = decode(&encode(&img, Format::Tiff).unwrap(), &DecodeLimits::default()).unwrap();
    assert_eq!(back, img);
}

#[test]
fn formats_that_cannot_hold_the_data_are_refused_with_a_reason() {
    let e = encode(&image(BitDepth::Sixteen, 1, false), Format::Jpeg).unwrap_err();
    assert!(e.to_string().contains("JPEG cannot hold 16-bit unsigned samples"), "{e}");
    let e = encode(&image(BitDepth::Eight, 3, true), Format::Jpeg).unwrap_err();
    assert!(e.to_string().contains("alpha"));
}

#[test]
fn a_header_claiming_ten_gigapixels_is_refused_before_decoding() {
    let e = decode(&common::png_claiming(100_000, 100_000), &DecodeLimits::default()).unwrap_err();
    assert_eq!(e, Error::TooManyPixels { width: 100_000, height: 100_000, limit: 64 });
}

#[test]
fn empty_and_unknown_inputs_have_their_own_errors() {
    assert_eq!(decode(&[], &DecodeLimits::default()).unwrap_err(), Error::EmptyInput);
    assert_eq!(decode(b"hello, this is text", &DecodeLimits::default()).unwrap_err(), Error::UnknownFormat);
    let mut png = encode(&image(BitDepth::Eight, 1, false), Format::Png).unwrap();
    png.truncate(png.len() / 2);
    let e = decode(&png, &DecodeLimits::default()).unwrap_err();
    assert!(matches!(e, Error::Decode(..)));
    // The decoder's own error stays reachable as the cause (std::error::Error::source).
    assert!(std::error::Error::source(&e).is_some(), "a truncated PNG's error lost its cause: {e}");
}

#[test]
fn a_damaged_tiff_keeps_the_decoders_error_as_its_cause() {
    let mut tif = encode(&image(BitDepth::Sixteen, 1, false), Format::Tiff).unwrap();
    tif.truncate(tif.len() / 2);
    let e = decode(&tif, &DecodeLimits::default()).unwrap_err();
    assert!(matches!(e, Error::Decode(..)), "{e:?}");
    assert!(std::error::Error::source(&e).is_some(), "a truncated TIFF's error lost its cause: {e}");
}

/// A document of `pages` pages of stored samples of type `t`, decoded the way a file would be.
fn stack(t: SampleType, layout: Layout, pages: usize) -> Document {
    let (w, h) = (11usize, 7usize);
    let n = layout.samples_per_pixel();
    let raw: Vec<Samples> = (0..pages)
        .map(|p| {
            Samples::from_values(t, w * h * n, |i| {
                let v = ((i * 37 + p * 101) % 251) as f64;
                match t {
                    SampleType::I16 | SampleType::I32 => v * 50.0 - 6000.0,
                    SampleType::F32 | SampleType::F64 => v / 64.0 - 1.25,
                    SampleType::U32 => v * 70_000.0,
                    SampleType::U16 => v * 250.0,
                    SampleType::U8 => v,
                }
            })
        })
        .collect();
    let rule = patchgraph::file::samples::BlankRule { marker: None };
    let pages: Vec<WorkingPage> =
        raw.iter().map(|s| patchgraph::file::samples::to_working(s, w, h, layout, rule).unwrap()).collect();
    Document { format: Format::Tiff, sample: t, layout, pages, meta: Metadata::default() }
}

fn stored(doc: &Document) -> Vec<Samples> {
    doc.pages.iter().map(|p| patchgraph::file::samples::from_working(p, doc.layout, doc.sample, f64::NAN)).collect()
}

const ALL_TYPES: [SampleType; 7] = [
    SampleType::U8,
    SampleType::U16,
    SampleType::I16,
    SampleType::U32,
    SampleType::I32,
    SampleType::F32,
    SampleType::F64,
];

#[test]
fn tiff_stacks_of_every_type_and_layout_round_trip_exactly() {
    for t in ALL_TYPES {
        for layout in [Layout::Grey, Layout::Rgb, Layout::Bands(2), Layout::Bands(5)] {
            let doc = stack(t, layout, 3);
            let bytes = file::encode(&doc, Format::Tiff, None).unwrap();
            let back = file::decode(&bytes, &DecodeLimits::default()).unwrap();
            assert_eq!((back.sample, back.layout, back.pages.len()), (t, layout, 3), "{t:?} {layout:?}");
            assert_eq!(stored(&back), stored(&doc), "{t:?} {layout:?}");
        }
    }
}

#[test]
fn fits_cubes_of_every_type_round_trip_exactly() {
    for t in ALL_TYPES {
        let doc = stack(t, Layout::Grey, 4);
        let bytes = file::encode(&doc, Format::Fits, None).unwrap();
        let back = file::decode(&bytes, &DecodeLimits::default()).unwrap();
        assert_eq!((back.sample, back.pages.len(), back.format), (t, 4, Format::Fits), "{t:?}");
        assert_eq!(stored(&back), stored(&doc), "{t:?}");
    }
}

#[test]
fn a_format_that_cannot_hold_the_file_names_one_that_can() {
    let e = file::encode(&stack(SampleType::F32, Layout::Grey, 2), Format::Png, None).unwrap_err().to_string();
    assert!(e.contains("PNG cannot hold 32-bit float samples") && e.contains(".tif or .fits"), "{e}");
    let e = file::encode(&stack(SampleType::U16, Layout::Bands(2), 1), Format::Fits, None).unwrap_err().to_string();
    assert!(e.contains("2 independent channels") && e.contains(".tif"), "{e}");
}

#[test]
fn a_unit_written_alone_reads_back_to_the_same_working_image() {
    // What the page relies on: each slice or band is shipped to a worker as its own file.
    for (t, layout) in
        [(SampleType::F32, Layout::Bands(3)), (SampleType::I32, Layout::Grey), (SampleType::U16, Layout::Rgb)]
    {
        let doc = stack(t, layout, 2);
        for k in 0..doc.units() {
            let alone = file::encode(&doc.unit_document(k).unwrap(), Format::Tiff, None).unwrap();
            let back = file::decode(&alone, &DecodeLimits::default()).unwrap();
            assert_eq!(back.unit(0).unwrap(), doc.unit(k).unwrap(), "{t:?} {layout:?} unit {k}");
            assert_eq!(back.unit_map(0), doc.unit_map(k));
            // Read from the whole file's bytes without decoding the other pages: the same image.
            let whole = file::encode(&doc, Format::Tiff, None).unwrap();
            let one = file::decode_unit(&whole, &DecodeLimits::default(), k).unwrap();
            assert_eq!(one.unit(0).unwrap(), doc.unit(k).unwrap(), "{t:?} {layout:?} unit {k} from the whole file");
        }
    }
}

/// The README's table of formats, as the one list of formats gives it.
fn readme_rows() -> String {
    file::FORMATS
        .iter()
        .map(|f| {
            let samples: Vec<&str> = f.samples.iter().map(|s| s.describe()).collect();
            format!(
                "| {} (.{}) | {} | {} | {} |",
                f.name,
                f.extensions.join(", ."),
                samples.join(", "),
                if f.pages { "many" } else { "one" },
                f.keeps
            )
        })
        .collect::<Vec<_>>()
        .join("\n")
}

#[test]
fn the_readme_lists_the_formats_as_the_program_knows_them() {
    // Regenerate with: PATCHGRAPH_WRITE_README=1 cargo test --release readme
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/../README.md");
    let text = std::fs::read_to_string(path).unwrap();
    let rows = readme_rows();
    if std::env::var_os("PATCHGRAPH_WRITE_README").is_some() {
        let start = text.find("|---|---|---|---|\n").unwrap() + "|---|---|---|---|\n".len();
        let end = start + text[start..].find("\n\n").unwrap();
        std::fs::write(path, format!("{}{}{}", &text[..start], rows, &text[end..])).unwrap();
        return;
    }
    assert!(text.contains(&rows), "README's format table differs from file::FORMATS; regenerate it:\n{rows}");
}
