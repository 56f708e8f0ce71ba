//! The wide path (AVX2 and FMA, chosen at run time: `simd.rs`) against the baseline path
//! (`PATCHGRAPH_BASELINE` set): the same output bytes, for both methods' hot loops (matching,
//! the 2-D DCT and its inverse, the across-group transform, the group graph's eigenvectors) on a
//! grey white-noise image and a colour image with grainy noise. Invariant: both paths do the same
//! IEEE operations in the same order. On a processor without AVX2 both runs take the baseline
//! and the check holds trivially.

use patchgraph::planes::{BitDepth, Image, Plane};
use patchgraph::synth::Rng;
use std::path::Path;
use std::process::Command;

fn write(path: &Path, img: Image) {
    let doc = patchgraph::file::document_of(img, patchgraph::file::Format::Png);
    std::fs::write(path, patchgraph::file::encode(&doc, patchgraph::file::Format::Png, None).unwrap()).unwrap();
}

/// A scene of soft shapes and a ramp, with noise per channel: white, or white through a 3 x 3
/// box (grainy, as demosaicing leaves it).
fn scene(channels: usize, std: f64, grainy: bool, seed: u64) -> Image {
    let (w, h) = (160usize, 144usize);
    let mut rng = Rng::new(seed);
    let planes = (0..channels)
        .map(|c| {
            let white: Vec<f64> = (0..(w + 2) * (h + 2)).map(|_| rng.normal()).collect();
            Plane::from_fn(w, h, |x, y| {
                let n = if grainy {
                    (0..9).map(|i| white[(y + i / 3) * (w + 2) + x + i % 3]).sum::<f64>() / 3.0
                } else {
                    white[(y + 1) * (w + 2) + x + 1]
                };
                let disc = if (x as f64 - 70.0).hypot(y as f64 - 60.0) < 35.0 { 90.0 } else { 0.0 };
                let v = 40.0 + 0.5 * x as f64 + 10.0 * c as f64 + disc + std * n;
                v.round().clamp(0.0, 255.0) as f32
            })
        })
        .collect();
    Image { width: w, height: h, depth: BitDepth::Eight, channels: planes, alpha: None }
}

fn denoised(input: &Path, out: &Path, method: &str, baseline: bool) -> Vec<u8> {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_patchgraph"));
    cmd.args(["denoise", input.to_str().unwrap(), "-o", out.to_str().unwrap(), "--method", method]);
    if baseline {
        cmd.env("PATCHGRAPH_BASELINE", "1");
    } else {
        cmd.env_remove("PATCHGRAPH_BASELINE");
    }
    let o = cmd.output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    std::fs::read(out).unwrap()
}

#[test]
fn the_wide_and_the_baseline_paths_give_the_same_bytes() {
    let dir = tempfile::tempdir().unwrap();
    for (name, img) in [("grey.png", scene(1, 20.0, false, 3)), ("grainy.png", scene(3, 8.0, true, 4))] {
        let input = dir.path().join(name);
        write(&input, img);
        for method in ["patch-graph", "pixel-graph"] {
            let wide = denoised(&input, &dir.path().join("wide.png"), method, false);
            let base = denoised(&input, &dir.path().join("base.png"), method, true);
            assert!(wide == base, "{name}, {method}: the two paths differ");
        }
    }
}
