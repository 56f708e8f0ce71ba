//! Golden outputs: the demo samples denoised with default settings by both methods, compared with
//! results kept in `crate/tests/golden/`. Other tests compare the page with the command line and
//! both with reference libraries; this one catches a change that moves every result at once.
//! When a change is meant to move them, regenerate with `REGENERATE=1 cargo test --release --test
//! golden` and say in the commit why and by how much (the failure message prints it).
use patchgraph::file::{self, DecodeLimits, Format};
use patchgraph::progress::NoProgress;
use patchgraph::run_file::denoise_file;
use patchgraph::settings::{Method, Settings};
use std::path::{Path, PathBuf};

const SAMPLES: [&str; 3] = ["cells", "chart", "board"];

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// Every sample of every unit, on the file's own scale.
fn samples_of(bytes: &[u8]) -> Vec<f64> {
    let doc = file::decode(bytes, &DecodeLimits::default()).expect("a golden or sample file decodes");
    (0..doc.units())
        .flat_map(|k| {
            let img = doc.unit(k).expect("unit");
            img.channels.into_iter().flat_map(|p| p.data.into_iter().map(f64::from)).collect::<Vec<_>>()
        })
        .collect()
}

#[test]
fn default_results_on_the_samples_are_unchanged() {
    let regenerate = std::env::var_os("REGENERATE").is_some();
    let mut changed = Vec::new();
    for name in SAMPLES {
        let noisy = std::fs::read(root().join(format!("sample-images/{name}-noisy.png"))).expect("sample image");
        let doc = file::decode(&noisy, &DecodeLimits::default()).expect("sample decodes");
        for method in [Method::PatchGraph, Method::PixelGraph] {
            let settings = Settings { method, ..Settings::default() };
            let run = denoise_file(&doc, &settings, false, &NoProgress).expect("sample denoises");
            // No provenance: the kept file must not change with the version number.
            let bytes = file::encode(&run.document, Format::Png, None).expect("result encodes");
            let path = root().join(format!("crate/tests/golden/{name}-{}.png", method.name()));
            if regenerate {
                std::fs::write(&path, &bytes).expect("golden file written");
                continue;
            }
            let kept =
                std::fs::read(&path).unwrap_or_else(|_| panic!("{} missing: run with REGENERATE=1", path.display()));
            let (new, old) = (samples_of(&bytes), samples_of(&kept));
            assert_eq!(new.len(), old.len(), "{name} {}: the result's size changed", method.name());
            // Allowed: rounding that lands one grey level apart on a few samples (float order on
            // another CPU); anything more is a changed result.
            let diffs: Vec<f64> = new.iter().zip(&old).map(|(a, b)| (a - b).abs()).filter(|&d| d > 0.0).collect();
            let worst = diffs.iter().cloned().fold(0.0, f64::max);
            if worst > 1.0 || diffs.len() * 1000 > new.len() {
                let peak = old.iter().cloned().fold(0.0, f64::max);
                let mse = new.iter().zip(&old).map(|(a, b)| (a - b).powi(2)).sum::<f64>() / new.len() as f64;
                changed.push(format!(
                    "{name} {}: {} of {} samples differ, by up to {worst}; PSNR of new against kept {:.2} dB (peak: the kept result's maximum)",
                    method.name(),
                    diffs.len(),
                    new.len(),
                    10.0 * (peak * peak / mse).log10()
                ));
            }
        }
    }
    assert!(changed.is_empty(), "results moved (regenerate only if meant):\n{}", changed.join("\n"));
}
