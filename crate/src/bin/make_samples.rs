//! Writes the demo images in sample-images/: invented scenes drawn by this program, each clean and
//! with synthetic noise from a fixed seed, so the files regenerate byte for byte.
//! Usage: make-samples [OUTDIR]   (default: sample-images)

// Random angles are drawn from [0, 3.14) and [0, 6.28): the samples are defined by these exact
// bounds (they regenerate byte for byte), not by pi.
#![allow(clippy::approx_constant)]
// The house rule made a check: nothing a user controls may panic, so the shipped code holds no
// unwrap or expect (tests may).
#![cfg_attr(not(test), deny(clippy::unwrap_used, clippy::expect_used))]

use patchgraph::file::{document_of, encode, Format};
use patchgraph::planes::{BitDepth, Image, Plane};
use patchgraph::synth::Rng;
use std::path::Path;

/// Fluorescence micrograph: dim background, glowing cells with brighter nuclei, thin filaments.
fn micrograph(rng: &mut Rng) -> Vec<Plane> {
    let (w, h) = (256usize, 256usize);
    let mut img = Plane::from_fn(w, h, |x, y| 12.0 + 4.0 * ((x as f32 / 60.0).sin() * (y as f32 / 80.0).cos()));
    for _ in 0..9 {
        let (cx, cy) = (rng.range(20.0, 236.0), rng.range(20.0, 236.0));
        let (a, b, th) = (rng.range(12.0, 24.0), rng.range(9.0, 16.0), rng.range(0.0, 3.14));
        let bright = rng.range(70.0, 120.0);
        let (c, s) = (th.cos(), th.sin());
        for y in 0..h {
            for x in 0..w {
                let (dx, dy) = (x as f64 - cx, y as f64 - cy);
                let u = (c * dx + s * dy) / a;
                let v = (-s * dx + c * dy) / b;
                let r = (u * u + v * v).sqrt();
                // Cell body with a soft rim, and a nucleus twice as bright.
                let body = 1.0 / (1.0 + ((r - 1.0) * 12.0).exp());
                let nucleus = 1.0 / (1.0 + ((r - 0.4) * 20.0).exp());
                img.data[y * w + x] += (bright * body + bright * nucleus) as f32;
            }
        }
    }
    for _ in 0..14 {
        // A filament: a smooth random walk drawn with a Gaussian cross-section of ~1 pixel.
        let (mut px, mut py) = (rng.range(0.0, 256.0), rng.range(0.0, 256.0));
        let mut dir = rng.range(0.0, 6.28);
        let bright = rng.range(40.0, 90.0) as f32;
        for _ in 0..400 {
            dir += rng.range(-0.08, 0.08);
            px += dir.cos() * 0.7;
            py += dir.sin() * 0.7;
            for oy in -3..=3 {
                for ox in -3..=3 {
                    let (x, y) = (px as isize + ox, py as isize + oy);
                    if x < 0 || y < 0 || x >= w as isize || y >= h as isize {
                        continue;
                    }
                    let d2 = (x as f64 - px).powi(2) + (y as f64 - py).powi(2);
                    let v = &mut img.data[y as usize * w + x as usize];
                    *v = v.max((f64::from(*v) + f64::from(bright) * (-d2 / 1.2).exp() * 0.25) as f32);
                }
            }
        }
    }
    vec![img]
}

/// Test chart: grey steps, a ramp, fine line pairs of shrinking pitch, and a radial star.
fn chart() -> Vec<Plane> {
    let (w, h) = (256usize, 256usize);
    let p = Plane::from_fn(w, h, |x, y| {
        let (xf, yf) = (x as f32, y as f32);
        if y < 48 {
            // Eight flat steps from dark to light.
            20.0 + (x / 32) as f32 * 30.0
        } else if y < 80 {
            // Smooth ramp.
            10.0 + xf / 255.0 * 235.0
        } else if y < 144 {
            // Line pairs: pitch 8, 6, 4, 3, 2 pixels in five columns.
            let pitch = [8usize, 6, 4, 3, 2][(x * 5 / w).min(4)];
            if (x / (pitch / 2).max(1)).is_multiple_of(2) {
                200.0
            } else {
                60.0
            }
        } else {
            // Radial star of 24 wedges centred in the lower half, and a disc edge around it.
            let (dx, dy) = (xf - 128.0, yf - 200.0);
            let r = (dx * dx + dy * dy).sqrt();
            if r > 54.0 {
                if xf < 128.0 {
                    90.0
                } else {
                    170.0
                }
            } else {
                let a = dy.atan2(dx);
                if ((a / std::f32::consts::PI * 12.0).floor() as i32).rem_euclid(2) == 0 {
                    230.0
                } else {
                    30.0
                }
            }
        }
    });
    vec![p]
}

/// Colour inspection scene: a circuit board with pads, traces and coloured parts.
fn board(rng: &mut Rng) -> Vec<Plane> {
    let (w, h) = (320usize, 240usize);
    let mut rgb =
        vec![Plane::from_fn(w, h, |_, _| 30.0), Plane::from_fn(w, h, |_, _| 90.0), Plane::from_fn(w, h, |_, _| 50.0)];
    let rect = |rgb: &mut Vec<Plane>, x0: usize, y0: usize, x1: usize, y1: usize, c: [f32; 3]| {
        for y in y0.min(h)..y1.min(h) {
            for x in x0.min(w)..x1.min(w) {
                for k in 0..3 {
                    rgb[k].data[y * w + x] = c[k];
                }
            }
        }
    };
    for i in 0..12 {
        // Copper traces, horizontal and vertical, 2 to 4 pixels wide.
        let t = 2 + (i % 3);
        let pos = rng.range(10.0, 230.0) as usize;
        if i % 2 == 0 {
            rect(&mut rgb, 0, pos, w, pos + t, [190.0, 140.0, 60.0]);
        } else {
            rect(&mut rgb, pos, 0, pos + t, h, [190.0, 140.0, 60.0]);
        }
    }
    for _ in 0..10 {
        let (x, y) = (rng.range(10.0, 290.0) as usize, rng.range(10.0, 210.0) as usize);
        let (bw, bh) = (rng.range(12.0, 40.0) as usize, rng.range(8.0, 24.0) as usize);
        let c = [rng.range(20.0, 240.0) as f32, rng.range(20.0, 240.0) as f32, rng.range(20.0, 240.0) as f32];
        rect(&mut rgb, x, y, x + bw, y + bh, [15.0, 15.0, 18.0]);
        rect(&mut rgb, x + 2, y + 2, x + bw - 2, y + bh - 2, c);
    }
    rgb
}

fn noisy(planes: &[Plane], sigma: f64, rng: &mut Rng) -> Vec<Plane> {
    planes
        .iter()
        .map(|p| Plane {
            data: p.data.iter().map(|v| (f64::from(*v) + sigma * rng.normal()) as f32).collect(),
            ..p.clone()
        })
        .collect()
}

fn save(dir: &Path, name: &str, planes: Vec<Plane>) -> Result<(), String> {
    let (width, height) = (planes[0].width, planes[0].height);
    let img = Image { width, height, depth: BitDepth::Eight, channels: planes, alpha: None };
    let bytes = encode(&document_of(img, Format::Png), Format::Png, None).map_err(|e| e.to_string())?;
    let path = dir.join(name);
    std::fs::write(&path, bytes).map_err(|e| format!("{}: {e}", path.display()))?;
    println!("wrote {}", path.display());
    Ok(())
}

fn main() -> std::process::ExitCode {
    let dir = std::env::args().nth(1).unwrap_or_else(|| "sample-images".into());
    let dir = Path::new(&dir);
    let run = || -> Result<(), String> {
        std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
        let mut rng = Rng::new(20261201);
        let cells = micrograph(&mut rng);
        save(dir, "cells-clean.png", cells.clone())?;
        save(dir, "cells-noisy.png", noisy(&cells, 15.0, &mut rng))?;
        let c = chart();
        save(dir, "chart-clean.png", c.clone())?;
        save(dir, "chart-noisy.png", noisy(&c, 20.0, &mut rng))?;
        let b = board(&mut rng);
        save(dir, "board-clean.png", b.clone())?;
        save(dir, "board-noisy.png", noisy(&b, 20.0, &mut rng))?;
        Ok(())
    };
    match run() {
        Ok(()) => std::process::ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e}");
            std::process::ExitCode::from(1)
        }
    }
}
