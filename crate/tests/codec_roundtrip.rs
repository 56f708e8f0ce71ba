//! Decoding and encoding: every supported layout round-trips exactly; limits refuse huge headers.

use patchgraph::codec::{decode, encode, DecodeLimits, OutputFormat};
use patchgraph::planes::{Alpha, BitDepth, Image, Plane};
use patchgraph::Error;

mod common;

fn image(depth: BitDepth, color: usize, alpha: bool) -> Image {
    let max = depth.max_value();
    let (w, h) = (13usize, 9usize);
    let channels = (0..color).map(|c| Plane::from_fn(w, h, |x, y| ((x * 31 + y * 17 + c * 50) as f32 * 97.0) % (max + 1.0))).collect();
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
                let back = decode(&encode(&img, OutputFormat::Png).unwrap(), &DecodeLimits::default()).unwrap();
                assert_eq!(back, img, "{depth:?} {color} alpha={alpha}");
            }
        }
    }
}

#[test]
fn tiff_round_trips_sixteen_bit_rgb() {
    let img = image(BitDepth::Sixteen, 3, false);
    let back = decode(&encode(&img, OutputFormat::Tiff).unwrap(), &DecodeLimits::default()).unwrap();
    assert_eq!(back, img);
}

#[test]
fn formats_that_cannot_hold_the_data_are_refused_with_a_reason() {
    let e = encode(&image(BitDepth::Sixteen, 1, false), OutputFormat::Jpeg).unwrap_err();
    assert!(e.to_string().contains("8 bits"));
    let e = encode(&image(BitDepth::Eight, 3, true), OutputFormat::Jpeg).unwrap_err();
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
    let mut png = encode(&image(BitDepth::Eight, 1, false), OutputFormat::Png).unwrap();
    png.truncate(png.len() / 2);
    assert!(matches!(decode(&png, &DecodeLimits::default()).unwrap_err(), Error::Decode(_)));
}
