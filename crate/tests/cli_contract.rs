//! The CLI contract of DESIGN.md section 4: exit codes, one-line errors, JSON fields, no partial
//! output files, and the output keeping the input's depth and channels.

mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_patchgraph"))
}

fn run(args: &[&str]) -> Output {
    bin().args(args).output().expect("the binary runs")
}

fn write_png(dir: &Path, name: &str, depth: u32, color: bool) -> PathBuf {
    use patchgraph::planes::{BitDepth, Image, Plane};
    let depth = if depth == 16 { BitDepth::Sixteen } else { BitDepth::Eight };
    let max = depth.max_value();
    let plane = |k: usize| {
        Plane::from_fn(64, 48, |x, y| {
            let v = ((x * 13 + y * 29 + k * 7) % 17) as f32 * 3.0 + if x < 32 { 0.2 } else { 0.6 } * max;
            v.min(max)
        })
    };
    let channels = if color { vec![plane(0), plane(1), plane(2)] } else { vec![plane(0)] };
    let img = Image { width: 64, height: 48, depth, channels, alpha: None };
    let path = dir.join(name);
    std::fs::write(
        &path,
        patchgraph::file::encode(
            &patchgraph::file::document_of(img, patchgraph::file::Format::Png),
            patchgraph::file::Format::Png,
            None,
        )
        .unwrap(),
    )
    .unwrap();
    path
}

fn files_in(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> =
        std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    v.sort();
    v
}

#[test]
fn every_bad_input_exits_2_with_one_line_and_no_output() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let good = write_png(d, "good.png", 8, false);
    let mut truncated = std::fs::read(&good).unwrap();
    truncated.truncate(truncated.len() * 2 / 3);
    let mut corrupt = std::fs::read(&good).unwrap();
    let mid = corrupt.len() / 2;
    corrupt[mid..mid + 16].iter_mut().for_each(|b| *b ^= 0x5A);
    let random: Vec<u8> = (0..4096u32).map(|i| (i.wrapping_mul(2654435761) >> 13) as u8).collect();
    let cases: Vec<(&str, Vec<u8>)> = vec![
        ("empty.png", vec![]),
        ("truncated.png", truncated),
        ("text.png", b"this is a text file, not an image\n".to_vec()),
        ("corrupt.png", corrupt),
        ("huge.png", common::png_claiming(100_000, 100_000)),
        ("zero-width.png", common::png_claiming(0, 10)),
        ("random.jpg", random),
    ];
    let before = files_in(d).len();
    for (name, bytes) in &cases {
        let p = d.join(name);
        std::fs::write(&p, bytes).unwrap();
        let out = d.join(format!("out-{name}.png"));
        let o = run(&["denoise", p.to_str().unwrap(), "-o", out.to_str().unwrap()]);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{name}: {err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{name}: {err}");
        assert!(err.contains(name), "{name}: the message names the file: {err}");
        assert!(!err.contains("panicked"), "{name}: {err}");
        assert!(!out.exists(), "{name}: an output file was left behind");
    }
    let flag_cases: [&[&str]; 4] =
        [&["--sigma", "-3"], &["--method", "unknown-method"], &["--sigma", "lots"], &["--noise", "speckle"]];
    for args in flag_cases {
        let out = d.join("flag-out.png");
        let mut all = vec!["denoise", good.to_str().unwrap(), "-o", out.to_str().unwrap()];
        all.extend_from_slice(args);
        let o = run(&all);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{args:?}: {err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{args:?}: {err}");
        assert!(!out.exists());
    }
    let o = run(&["denoise", good.to_str().unwrap(), "-o", d.join("x.png").to_str().unwrap(), "--sigma", "-3"]);
    assert_eq!(String::from_utf8_lossy(&o.stderr).trim(), "error: sigma must be between 0 and 65535, got -3");
    // Only the inputs we wrote are there: no partial or temporary files.
    assert_eq!(files_in(d).len(), before + cases.len());
}

#[test]
fn the_output_never_overwrites_the_input() {
    let dir = tempfile::tempdir().unwrap();
    let good = write_png(dir.path(), "good.png", 8, false);
    let before = std::fs::read(&good).unwrap();
    let o = run(&["denoise", good.to_str().unwrap(), "-o", good.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(std::fs::read(&good).unwrap(), before);
}

#[test]
fn denoise_keeps_depth_and_channels_and_prints_json() {
    let dir = tempfile::tempdir().unwrap();
    for (depth, color) in [(8, false), (16, false), (8, true), (16, true)] {
        let input = write_png(dir.path(), &format!("in{depth}{color}.png"), depth, color);
        let out = dir.path().join(format!("out{depth}{color}.png"));
        let o = run(&["denoise", input.to_str().unwrap(), "-o", out.to_str().unwrap(), "--json"]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        assert_eq!(v["bit_depth"], depth);
        assert_eq!(v["channels"], if color { 3 } else { 1 });
        assert!(v["sigma"].as_f64().unwrap() >= 0.0);
        let back =
            patchgraph::file::decode(&std::fs::read(&out).unwrap(), &Default::default()).unwrap().unit(0).unwrap();
        assert_eq!(back.depth.bits(), depth);
        assert_eq!(back.channels.len(), if color { 3 } else { 1 });
    }
}

#[test]
fn noise_and_metrics_print_their_json_fields() {
    let dir = tempfile::tempdir().unwrap();
    let a = write_png(dir.path(), "a.png", 8, false);
    let o = run(&["noise", a.to_str().unwrap(), "--json"]);
    assert!(o.status.success());
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(v["sigma"].is_number());
    // The level a run uses, in the input's grey levels and in its working domain (the same here:
    // nothing is stabilised, so both are the one fitted level).
    assert!(v["level"].as_f64().is_some_and(|l| l >= 0.0), "{v}");
    assert_eq!(v["level"].as_f64(), v["run_sigma"].as_f64());
    let o = run(&["metrics", a.to_str().unwrap(), a.to_str().unwrap(), "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    // Identical images: SSIM is exactly 1 and PSNR is infinite (JSON null).
    assert_eq!(v["ssim"].as_f64(), Some(1.0));
    assert!(v["psnr"].is_null());
    let b = write_png(dir.path(), "b.png", 8, true);
    let o = run(&["metrics", a.to_str().unwrap(), b.to_str().unwrap(), "--json"]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn a_settings_file_is_read_and_flags_override_it() {
    let dir = tempfile::tempdir().unwrap();
    let a = write_png(dir.path(), "a.png", 8, false);
    let s = dir.path().join("s.json");
    std::fs::write(&s, r#"{"sigma": 7.5, "pixel_graph": {"filter": "heat"}}"#).unwrap();
    let out = dir.path().join("o.png");
    let (a, out, s) = (a.to_str().unwrap(), out.to_str().unwrap(), s.to_str().unwrap());
    let report = |extra: &[&str]| -> serde_json::Value {
        let args = [&["denoise", a, "-o", out, "--settings", s, "--json"][..], extra].concat();
        serde_json::from_slice(&run(&args).stdout).unwrap()
    };
    let v = report(&[]);
    assert_eq!(v["sigma"].as_f64(), Some(7.5));
    assert_eq!(v["settings"]["pixel_graph"]["filter"], "heat");
    let v = report(&["--sigma", "3"]);
    assert_eq!(v["sigma"].as_f64(), Some(3.0));
    std::fs::write(s, r#"{"pixel_graph": {"radius": 9}}"#).unwrap();
    let o = run(&["denoise", a, "-o", out, "--settings", s]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("pixel_graph.radius must be between 1 and 3, got 9"));
}

#[test]
fn batch_keeps_going_past_a_bad_file_and_reports_it() {
    // Five inputs, one of them not an image: four results, a report naming the fifth, exit code 2,
    // and no partial or temporary file in the output folder.
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("in");
    std::fs::create_dir(&input).unwrap();
    for i in 0..4 {
        write_png(&input, &format!("good{i}.png"), if i % 2 == 0 { 8 } else { 16 }, i == 3);
    }
    std::fs::write(input.join("bad.png"), b"not an image").unwrap();
    let s = dir.path().join("s.json");
    std::fs::write(&s, r#"{"method": "pixel-graph"}"#).unwrap();
    let out = dir.path().join("out");
    let o = run(&[
        "batch",
        input.to_str().unwrap(),
        "-o",
        out.to_str().unwrap(),
        "--settings",
        s.to_str().unwrap(),
        "--json",
    ]);
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["done"], 4);
    assert_eq!(v["failed"], 1);
    let mut names = files_in(&out);
    names.retain(|n| n != "batch-report.csv");
    assert_eq!(names, vec!["good0.png", "good1.png", "good2.png", "good3.png"]);
    // Pixel-graph files are computed several at once: each result is what a run of it alone gives.
    for i in 0..4 {
        let alone = dir.path().join(format!("alone{i}.png"));
        let src = input.join(format!("good{i}.png"));
        let o =
            run(&["denoise", src.to_str().unwrap(), "-o", alone.to_str().unwrap(), "--settings", s.to_str().unwrap()]);
        assert!(o.status.success());
        assert_eq!(std::fs::read(&alone).unwrap(), std::fs::read(out.join(format!("good{i}.png"))).unwrap(), "good{i}");
    }
    let report = std::fs::read_to_string(out.join("batch-report.csv")).unwrap();
    assert!(report.lines().any(|l| l.contains("bad.png") && l.contains("not an image")), "{report}");
    // Writing into the input folder would replace the inputs: refused per file, inputs intact.
    let before = std::fs::read(input.join("good0.png")).unwrap();
    let o = run(&["batch", input.to_str().unwrap(), "-o", input.to_str().unwrap(), "--settings", s.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert_eq!(std::fs::read(input.join("good0.png")).unwrap(), before);
}

#[test]
fn shards_split_the_file_list_without_overlap() {
    let dir = tempfile::tempdir().unwrap();
    for i in 0..5 {
        write_png(dir.path(), &format!("f{i}.png"), 8, false);
    }
    let s = dir.path().join("s.json");
    std::fs::write(&s, r#"{"method": "pixel-graph"}"#).unwrap();
    let mut seen = Vec::new();
    for k in 1..=2 {
        let out = dir.path().join(format!("out{k}"));
        let shard = format!("{k}/2");
        let o = run(&[
            "batch",
            dir.path().to_str().unwrap(),
            "-o",
            out.to_str().unwrap(),
            "--settings",
            s.to_str().unwrap(),
            "--shard",
            &shard,
        ]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        seen.extend(files_in(&out).into_iter().filter(|n| n.ends_with(".png")));
    }
    seen.sort();
    assert_eq!(seen, vec!["f0.png", "f1.png", "f2.png", "f3.png", "f4.png"]);
    let o =
        run(&["batch", dir.path().to_str().unwrap(), "-o", "x", "--settings", s.to_str().unwrap(), "--shard", "3/2"]);
    assert_eq!(o.status.code(), Some(2));
}
