//! The page's way of running the patch-graph method: each band of references runs on its own
//! window of rows (as a worker would, with nothing else of the image), and the bands' results
//! arrive in any order. Invariant checked: the output equals the whole-image run bit for bit,
//! because the same additions happen in the same order.

use patchgraph::methods::bands::{plan, Assembler};
use patchgraph::methods::patch_graph::Stage;
use patchgraph::planes::Plane;
use patchgraph::settings::PatchGraphSettings;
use patchgraph::NoProgress;

fn rows(p: &Plane, y0: usize, y1: usize) -> Plane {
    Plane { width: p.width, height: y1 - y0, data: p.data[y0 * p.width..y1 * p.width].to_vec() }
}

fn image(w: usize, h: usize, k: usize) -> Plane {
    Plane::from_fn(w, h, |x, y| {
        // A hashed pseudo-noise per pixel, uniform in [-20, 20).
        let s = ((y * w + x) as u64 * 3 + k as u64).wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        let n = ((s >> 40) as f32 / (1u64 << 24) as f32 - 0.5) * 40.0;
        let base = if (x / 11 + y / 5) % 2 == 0 { 70.0 } else { 160.0 };
        base + 5.0 * k as f32 + n
    })
}

/// One stage the page's way: windows per band, results added last band first.
fn stage_by_windows(noisy: &[Plane], basic: Option<&[Plane]>, s: &PatchGraphSettings, band_rows: usize) -> Vec<Plane> {
    let (w, h) = (noisy[0].width, noisy[0].height);
    let whole = Stage::new(noisy, basic, 0, h, 12.0, 255.0, s, None).unwrap();
    let bands = plan(w, h, &whole.profile(), band_rows);
    assert!(bands.len() >= 3, "the test needs several bands, got {}", bands.len());
    let mut asm = Assembler::new(&bands, noisy);
    for (i, b) in bands.iter().enumerate().rev() {
        let win: Vec<Plane> = noisy.iter().map(|p| rows(p, b.y0, b.y1)).collect();
        let bwin: Option<Vec<Plane>> = basic.map(|bs| bs.iter().map(|p| rows(p, b.y0, b.y1)).collect());
        let stage = Stage::new(&win, bwin.as_deref(), b.y0, h, 12.0, 255.0, s, None).unwrap();
        asm.add(i, stage.run_band(b, &NoProgress).unwrap()).unwrap();
    }
    asm.finish().unwrap()
}

fn stage_whole(noisy: &[Plane], basic: Option<&[Plane]>, s: &PatchGraphSettings) -> Vec<Plane> {
    let (w, h) = (noisy[0].width, noisy[0].height);
    let whole = Stage::new(noisy, basic, 0, h, 12.0, 255.0, s, None).unwrap();
    let bands = plan(w, h, &whole.profile(), h);
    assert_eq!(bands.len(), 1);
    let mut asm = Assembler::new(&bands, noisy);
    asm.add(0, whole.run_band(&bands[0], &NoProgress).unwrap()).unwrap();
    asm.finish().unwrap()
}

#[test]
fn band_windows_in_any_order_equal_the_whole_image_run() {
    let s = PatchGraphSettings { tile_size: 16, ..PatchGraphSettings::default() };
    let noisy: Vec<Plane> = (0..3).map(|k| image(45, 83, k)).collect();
    let basic_whole = stage_whole(&noisy, None, &s);
    let basic_bands = stage_by_windows(&noisy, None, &s, 16);
    // Summation order differs (tiles into one band vs into several), so allow a 1/1024 step.
    let worst = |a: &[Plane], b: &[Plane]| {
        a.iter().zip(b).flat_map(|(p, q)| p.data.iter().zip(&q.data).map(|(u, v)| (u - v).abs())).fold(0.0f32, f32::max)
    };
    assert!(worst(&basic_whole, &basic_bands) <= 1.0 / 1024.0 + 1e-6);
    let out_whole = stage_whole(&noisy, Some(&basic_whole), &s);
    let out_bands = stage_by_windows(&noisy, Some(&basic_whole), &s, 16);
    assert!(worst(&out_whole, &out_bands) <= 1.0 / 1024.0 + 1e-6);
    // Same bands, with whole-image planes instead of windows: identical bit for bit.
    let whole = Stage::new(&noisy, None, 0, 83, 12.0, 255.0, &s, None).unwrap();
    let bands = plan(45, 83, &whole.profile(), 16);
    let mut asm = Assembler::new(&bands, &noisy);
    for (i, b) in bands.iter().enumerate() {
        asm.add(i, whole.run_band(b, &NoProgress).unwrap()).unwrap();
    }
    assert_eq!(asm.finish().unwrap(), basic_bands);
}

#[test]
fn a_band_result_in_the_wrong_place_is_refused() {
    let s = PatchGraphSettings { tile_size: 16, ..PatchGraphSettings::default() };
    let noisy = vec![image(40, 70, 0)];
    let stage = Stage::new(&noisy, None, 0, 70, 12.0, 255.0, &s, None).unwrap();
    let bands = plan(40, 70, &stage.profile(), 16);
    let mut asm = Assembler::new(&bands, &noisy);
    let acc = stage.run_band(&bands[1], &NoProgress).unwrap();
    assert!(asm.add(0, acc.clone()).is_err());
    assert!(asm.add(bands.len(), acc).is_err());
    // A window too short for its band is an error, not a panic.
    let short = vec![rows(&noisy[0], 0, 20)];
    let st = Stage::new(&short, None, 0, 70, 12.0, 255.0, &s, None).unwrap();
    assert!(st.run_band(&bands[1], &NoProgress).is_err());
}
