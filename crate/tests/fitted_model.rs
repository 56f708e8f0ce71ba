//! The fitted noise model as it crosses to another page worker: a worker that finishes a split run
//! (or computes its error estimate) takes the preparing worker's model instead of fitting again.
//! Invariant checked: the model, written out and read back, rebuilds what `prepare` built (the
//! same transforms, working planes, sigma and report), for photon noise, clipped noise and
//! grainy colour noise; a model that does not fit the image, or a broken table, is refused. And a
//! sigma given with the noise fitted scales the fitted model instead of replacing it.

use patchgraph::pipeline::{self, Fitted};
use patchgraph::planes::{BitDepth, Image, Plane};
use patchgraph::settings::{NoiseModel, Settings};
use patchgraph::synth::Rng;

fn image(depth: BitDepth, channels: Vec<Plane>) -> Image {
    Image { width: channels[0].width, height: channels[0].height, depth, channels, alpha: None }
}

/// A 16-bit frame: offset 100 + 8 x Poisson(300 x ramp) + N(0, 12^2).
fn photon_frame() -> Image {
    let mut r = Rng::new(5);
    let p = Plane::from_fn(96, 96, |x, y| {
        let s = 0.05 + 0.9 * (x + y) as f64 / 190.0;
        (100.0 + 8.0 * r.poisson(300.0 * s) + 12.0 * r.normal()).round().clamp(0.0, 65535.0) as f32
    });
    image(BitDepth::Sixteen, vec![p])
}

/// An 8-bit picture whose left half is black: its noise (std 10) is cut off at 0 there.
fn clipped() -> Image {
    let mut r = Rng::new(6);
    let p = Plane::from_fn(96, 96, |x, _| {
        let base = if x < 48 { 0.0 } else { 120.0 };
        (base + 10.0 * r.normal()).round().clamp(0.0, 255.0) as f32
    });
    image(BitDepth::Eight, vec![p])
}

/// A colour picture with grainy noise (white noise summed over 3 x 3 pixels), stronger in blue.
fn grainy_colour() -> Image {
    let mut r = Rng::new(7);
    let n = 128;
    let channels = [4.0, 5.0, 9.0]
        .iter()
        .map(|std| {
            let w: Vec<f64> = (0..(n + 2) * (n + 2)).map(|_| r.normal()).collect();
            Plane::from_fn(n, n, |x, y| {
                let g: f64 = (0..9).map(|k| w[(y + k / 3) * (n + 2) + x + k % 3]).sum();
                (110.0 + 20.0 * ((x / 32) % 2) as f64 + std * g / 3.0).round().clamp(0.0, 255.0) as f32
            })
        })
        .collect();
    image(BitDepth::Eight, channels)
}

fn round_trip(f: &Fitted) -> Fitted {
    serde_json::from_str(&serde_json::to_string(f).expect("written")).expect("read back")
}

#[test]
fn a_model_read_back_rebuilds_what_prepare_built() {
    let poisson = Settings { noise: NoiseModel::Poisson, ..Settings::default() };
    let cases = [(photon_frame(), poisson), (clipped(), Settings::default()), (grainy_colour(), Settings::default())];
    let (mut stabilised, mut clip, mut spectra) = (false, false, false);
    for (img, settings) in &cases {
        let fresh = pipeline::prepare(img, settings).expect("prepared");
        let again = pipeline::prepared_from(img, round_trip(&fresh.model)).expect("rebuilt");
        assert_eq!(again.model.stabilisers, fresh.model.stabilisers);
        assert_eq!(again.model.clip, fresh.model.clip);
        assert_eq!(again.working, fresh.working, "working planes");
        assert_eq!(again.range.to_bits(), fresh.range.to_bits());
        assert_eq!(again.model.sigma.to_bits(), fresh.model.sigma.to_bits());
        assert_eq!(again.model.estimates, fresh.model.estimates);
        assert_eq!(again.model.noise, fresh.model.noise);
        stabilised |= fresh.model.stabilisers.is_some();
        clip |= fresh.model.clip.is_some();
        spectra |= fresh.spectra().is_some();
    }
    // The cases reach every part that crosses (else the check above proves less than it says).
    assert!(stabilised && clip && spectra, "stabilised {stabilised}, clip {clip}, spectra {spectra}");
}

#[test]
fn a_model_that_does_not_fit_is_refused() {
    let grey = clipped();
    let colour_model = pipeline::prepare(&grainy_colour(), &Settings::default()).expect("prepared").model;
    assert!(pipeline::prepared_from(&grey, colour_model).is_err(), "three channels' model for a grey image");
    // A photon frame's model with its table broken (a brightness curve must increase): refused
    // when read, before any table is indexed.
    let frame = photon_frame();
    let fitted = pipeline::prepare(&frame, &Settings::default()).expect("prepared").model;
    let mut v = serde_json::to_value(&fitted).expect("written");
    v["stabilisers"] = serde_json::json!([{ "Curve": { "step": 1.0, "table": [1.0, 3.0] } }]);
    assert!(serde_json::from_value::<Fitted>(v.clone()).is_ok(), "an increasing table is read");
    v["stabilisers"] = serde_json::json!([{ "Curve": { "step": 1.0, "table": [3.0, 1.0] } }]);
    assert!(serde_json::from_value::<Fitted>(v).is_err(), "a decreasing one is not");
}

#[test]
fn a_sigma_given_with_auto_noise_scales_the_fitted_grain() {
    // Invariant: with `noise: auto`, a sigma given by hand keeps the fitted grain's shape (and the
    // colour channels' scaling: this picture's blue is noisier) and sets its strength: every
    // plane's spectrum is the fitted one times (given / fitted)^2, coefficient by coefficient, and
    // the run's sigma is the given one (not white noise of that sigma).
    use patchgraph::settings::Sigma;
    let img = grainy_colour();
    let fitted = pipeline::prepare(&img, &Settings::default()).expect("fitted");
    let s = fitted.model.sigma;
    let half = Settings { sigma: Sigma::Value(s / 2.0), ..Settings::default() };
    let given = pipeline::prepare(&img, &half).expect("given");
    assert_eq!(given.model.sigma, s / 2.0);
    let (a, b) = (fitted.spectra().expect("grainy when fitted"), given.spectra().expect("still grainy"));
    for (fa, fb) in a.iter().zip(&b) {
        for (va, vb) in fa.variances.iter().zip(&fb.variances) {
            assert!((vb - va / 4.0).abs() <= 1e-9 * va.max(1e-12), "{vb} for {va}");
        }
    }
    // The other explicit models are left as they ask: white noise of the given sigma.
    let white = Settings { noise: NoiseModel::Gaussian, ..half };
    assert!(pipeline::prepare(&img, &white).expect("white").spectra().is_none());
}
