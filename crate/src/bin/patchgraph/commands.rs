//! The subcommands: each reads its files, calls the library, and prints text or one JSON object.

use crate::terminal::{write_atomically, TerminalProgress};
use patchgraph::error_estimate::ErrorEstimate;
use patchgraph::file::{self, DecodeLimits, Document, Format, Provenance};
use patchgraph::planes::{BitDepth, Image};
use patchgraph::settings::{AutoOr, Method, NoiseModel, Settings};
use patchgraph::{metrics, pipeline, run_file, Error};
use serde_json::json;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Like println!, but a closed stdout (a pipe into `head`) ends the output quietly, not in a panic.
macro_rules! outln {
    ($($t:tt)*) => {{
        use std::io::Write;
        let _ = writeln!(std::io::stdout(), $($t)*);
    }};
}
pub(crate) use outln;

pub struct Failure {
    pub code: u8,
    pub message: String,
}

impl Failure {
    pub fn user(message: String) -> Self {
        Failure { code: 2, message }
    }
    /// A library error about one file, prefixed with the file's name.
    pub fn about(path: &Path, e: Error) -> Self {
        let code = match e {
            Error::Cancelled => 130,
            ref e if e.is_user_error() => 2,
            _ => 1,
        };
        Failure { code, message: format!("{}: {e}", path.display()) }
    }
}

pub type CmdResult = Result<(), Failure>;

pub fn read_document(path: &Path, limits: &DecodeLimits) -> Result<Document, Failure> {
    let bytes =
        std::fs::read(path).map_err(|e| Failure::user(format!("{}: cannot read the file ({e})", path.display())))?;
    file::decode(&bytes, limits).map_err(|e| Failure::about(path, e))
}

/// The first image of a file, for the commands that look at one image (`noise`, `metrics`).
/// Image `number` (1-based) of the file, with the file.
fn read_image(path: &Path, number: usize, limits: &DecodeLimits) -> Result<(Image, Document), Failure> {
    let doc = read_document(path, limits)?;
    if number == 0 || number > doc.units() {
        return Err(Failure::user(format!(
            "{}: there is no image {number}; the file holds {} (numbered from 1)",
            path.display(),
            doc.units()
        )));
    }
    let img = doc.unit(number - 1).map_err(|e| Failure::about(path, e))?;
    Ok((img, doc))
}

fn output_format(path: &Path) -> Result<Format, Failure> {
    path.extension().and_then(|e| e.to_str()).and_then(Format::from_extension).ok_or_else(|| {
        Failure::user(format!("{}: the output name must end in {}", path.display(), Format::all_extensions()))
    })
}

/// Refuses to write over the input: the user's original is never altered.
fn refuse_same_file(input: &Path, output: &Path) -> CmdResult {
    if let (Ok(a), Ok(b)) = (std::fs::canonicalize(input), std::fs::canonicalize(output)) {
        if a == b {
            return Err(Failure::user(format!(
                "{}: the output would overwrite the input; choose another output name",
                output.display()
            )));
        }
    }
    Ok(())
}

pub fn write_file(path: &Path, bytes: &[u8]) -> CmdResult {
    write_atomically(path, bytes).map_err(|e| Failure::user(format!("{}: cannot write the file ({e})", path.display())))
}

/// What the noise is and any of its photon parameters, given instead of fitted.
#[derive(clap::Args)]
pub struct ModelArgs {
    /// What the noise is (default: auto, fitted from the image).
    #[arg(long, value_enum)]
    pub noise: Option<NoiseModel>,
    /// Photon noise: grey levels per photon, or "auto".
    #[arg(long)]
    pub gain: Option<String>,
    /// Photon noise: the black level (grey level of no light), or "auto".
    #[arg(long, allow_hyphen_values = true)]
    pub offset: Option<String>,
    /// Photon noise: the read-noise std in grey levels, or "auto".
    #[arg(long)]
    pub read_noise: Option<String>,
}

impl ModelArgs {
    /// Writes the options given into the settings.
    fn apply(&self, s: &mut Settings) -> Result<(), Failure> {
        if let Some(n) = self.noise {
            s.noise = n;
        }
        for (name, text, field) in [
            ("gain", &self.gain, &mut s.gain),
            ("offset", &self.offset, &mut s.offset),
            ("read-noise", &self.read_noise, &mut s.read_noise),
        ] {
            if let Some(text) = text {
                *field = auto_or_number(name, text)?;
            }
        }
        Ok(())
    }
}

#[derive(clap::Args)]
pub struct DenoiseArgs {
    /// The noisy image (TIFF, FITS, PNG, JPEG or BMP; every page and channel); it is never changed.
    pub input: PathBuf,
    /// Output file (.tif, .fits, .png, .jpg, .bmp); written whole or not at all.
    #[arg(short, long)]
    pub output: PathBuf,
    /// patch-graph (default, best quality) or pixel-graph (fast).
    #[arg(long, value_enum)]
    pub method: Option<Method>,
    /// Noise sigma in the input's grey levels, or "auto" to estimate it. With --noise auto (the
    /// default) a given sigma sets the strength of the fitted noise (grainy noise keeps its shape).
    #[arg(long, allow_hyphen_values = true)]
    pub sigma: Option<String>,
    #[command(flatten)]
    pub model: ModelArgs,
    /// Stacks (patch-graph): slices on each side of a page whose patches join its groups
    /// (0 to 2; default 1); 0 denoises every page alone.
    #[arg(long)]
    pub neighbour_slices: Option<u32>,
    /// Settings JSON; flags given on the command line override it.
    #[arg(long)]
    pub settings: Option<PathBuf>,
    /// Also write the pixel graph's cut map (white = all edges cut) as an 8-bit PNG (of the first page).
    #[arg(long)]
    pub cut_map: Option<PathBuf>,
    /// Refuse pages larger than this many megapixels.
    #[arg(long, default_value_t = patchgraph::file::DEFAULT_MAX_MEGAPIXELS)]
    pub max_megapixels: u64,
    /// Also estimate the result's error without a clean image (Stein's unbiased risk estimate,
    /// one more pass): an estimated PSNR and its gain over the input, per image.
    #[arg(long)]
    pub estimate_error: bool,
    /// Print one JSON object on stdout instead of a text summary.
    #[arg(long)]
    pub json: bool,
}

/// One line on a result's estimated error, as the text summary prints it.
pub fn estimate_line(e: &ErrorEstimate) -> String {
    match (e.applies, e.psnr, e.gain_db) {
        (false, ..) => format!("no error estimate: {}", e.note.as_deref().unwrap_or("it does not apply here")),
        (true, Some(p), Some(g)) => format!(
            "estimated PSNR {p:.2} dB (+/- {:.2}), {g:+.2} dB over the input{}",
            e.psnr_spread.unwrap_or(0.0),
            e.note.as_deref().map(|n| format!("; {n}")).unwrap_or_default()
        ),
        (true, ..) => "estimated error at or below zero: too small to tell from the noise".into(),
    }
}

/// Reads and validates a settings file.
pub fn read_settings(p: &Path) -> Result<Settings, Failure> {
    let text = std::fs::read_to_string(p)
        .map_err(|e| Failure::user(format!("{}: cannot read the settings file ({e})", p.display())))?;
    Settings::from_json(&text).map_err(|e| Failure::about(p, e))
}

pub fn auto_or_number(name: &str, text: &str) -> Result<AutoOr, Failure> {
    if text.eq_ignore_ascii_case("auto") {
        return Ok(AutoOr::AUTO);
    }
    text.parse()
        .map(AutoOr::Value)
        .map_err(|_| Failure::user(format!("{name} must be a number or \"auto\", got \"{text}\"")))
}

/// Defaults, then the settings file, then flags given on the command line.
fn resolve_settings(a: &DenoiseArgs) -> Result<Settings, Failure> {
    let mut s = match &a.settings {
        Some(p) => read_settings(p)?,
        None => Settings::default(),
    };
    if let Some(m) = a.method {
        s.method = m;
    }
    a.model.apply(&mut s)?;
    if let Some(text) = &a.sigma {
        s.sigma = auto_or_number("sigma", text)?;
    }
    if let Some(n) = a.neighbour_slices {
        s.patch_graph.neighbour_slices = n;
    }
    s.validate().map_err(|e| Failure::user(e.to_string()))?;
    Ok(s)
}

pub fn denoise(a: DenoiseArgs) -> CmdResult {
    let settings = resolve_settings(&a)?;
    let format = output_format(&a.output)?;
    if let Some(c) = &a.cut_map {
        output_format(c)?;
    }
    refuse_same_file(&a.input, &a.output)?;
    let limits = DecodeLimits { max_megapixels: a.max_megapixels, ..DecodeLimits::default() };
    let doc = read_document(&a.input, &limits)?;
    // Before any work: a format that cannot hold the file is refused with one that can.
    doc.check_writable(format).map_err(|e| Failure::about(&a.output, e))?;
    let progress = TerminalProgress::new(!a.json && std::io::stderr().is_terminal());
    let start = Instant::now();
    let run =
        run_file::denoise_file(&doc, &settings, a.estimate_error, &progress).map_err(|e| Failure::about(&a.input, e));
    progress.finish();
    let run = run?;
    let seconds = start.elapsed().as_secs_f64();
    let provenance = Provenance::of(&settings);
    let bytes = file::encode(&run.document, format, Some(&provenance)).map_err(|e| Failure::about(&a.output, e))?;
    write_file(&a.output, &bytes)?;
    if let (Some(path), Some(map)) = (&a.cut_map, &run.cut_map) {
        let scaled = patchgraph::Plane { data: map.data.iter().map(|v| v * 255.0).collect(), ..map.clone() };
        let img =
            Image { width: map.width, height: map.height, depth: BitDepth::Eight, channels: vec![scaled], alpha: None };
        let bytes = file::encode(&file::document_of(img, Format::Png), Format::Png, None)
            .map_err(|e| Failure::about(path, e))?;
        write_file(path, &bytes)?;
    }
    let r = &run.reports[0];
    // Sigma in the file's own units (float and wide-integer data work on a scaled copy).
    let data_sigma = |k: usize, r: &pipeline::RunReport| {
        if r.stabilised {
            r.sigma_used
        } else {
            r.sigma_used * doc.unit_map(k).scale
        }
    };
    let summary = doc.summary();
    if a.json {
        let units: Vec<_> = run
            .reports
            .iter()
            .enumerate()
            .map(|(k, r)| {
                json!({"unit": doc.unit_label(k), "noise_model": r.noise.model, "sigma": data_sigma(k, r),
                                  "stabilised": r.stabilised, "residual": r.residual,
                                  "error_estimate": r.error_estimate, "slices_joined": r.slices_joined})
            })
            .collect();
        let first = doc.unit(0).map_err(|e| Failure::about(&a.input, e))?;
        let v = json!({
            "input": a.input.display().to_string(),
            "output": a.output.display().to_string(),
            "method": r.method,
            "noise": r.noise_model,
            "noise_model": r.noise,
            "stabilised": r.stabilised,
            "sigma": data_sigma(0, r),
            "sigma_working": r.sigma_used,
            "sigma_estimated": r.sigma_was_estimated,
            "seconds": seconds,
            "width": summary.width,
            "height": summary.height,
            "channels": first.stored_channels(),
            "bit_depth": first.depth.bits(),
            "file": summary,
            "units": units,
            "noise_estimates": r.noise_estimates,
            "residual": r.residual,
            "error_estimate": r.error_estimate,
            "work_units": r.work_units,
            "settings": settings,
        });
        outln!("{v}");
    } else {
        let how = if r.sigma_was_estimated { "estimated" } else { "given" };
        let domain = if r.stabilised { " in the stabilised domain" } else { "" };
        outln!(
            "{} -> {}: {} with sigma {:.4}{domain} ({how}), {:.2} s",
            a.input.display(),
            a.output.display(),
            r.method,
            data_sigma(0, r),
            seconds
        );
        if doc.units() > 1 {
            outln!(
                "  {} pages, {} image(s) each, {} samples: every one denoised",
                summary.pages,
                summary.units / summary.pages,
                summary.sample.describe()
            );
        }
        let joined = run.reports.iter().filter(|r| r.slices_joined.is_some_and(|n| n > 0)).count();
        if run.reports.iter().any(|r| r.slices_joined.is_some()) {
            outln!(
                "  as a volume: {joined} of {} images took patches from the slices around them too (patch_graph.neighbour_slices {}; pages that do not continue each other are denoised alone)",
                run.reports.len(),
                settings.patch_graph.neighbour_slices
            );
        }
        outln!("  noise: {} ({})", r.noise.model, r.noise.sentence);
        if let Some(f) = &r.noise.fallback {
            outln!("  note: {f}");
        }
        for (k, r) in run.reports.iter().enumerate() {
            let label = doc.unit_label(k);
            if !label.is_empty() {
                let joined = r.slices_joined.map_or(String::new(), |n| format!(", {n} neighbouring slice(s) joined"));
                outln!("  {label}: sigma {:.4}{joined}", data_sigma(k, r));
            }
            for (c, s) in r.residual.iter().enumerate() {
                outln!(
                    "    channel {c}: residual std {:.2} ({:.2} x sigma), lag-1 correlation {:+.3}, edge correlation {:+.3}",
                    s.std, s.std_over_sigma, s.lag1_autocorrelation, s.edge_correlation
                );
            }
            if let Some(e) = &r.error_estimate {
                outln!("    {}", estimate_line(e));
            }
        }
        if summary.blank_pixels > 0 {
            outln!("  {} blank pixels left as they were", summary.blank_pixels);
        }
    }
    Ok(())
}

pub fn noise(input: &Path, number: usize, model: &ModelArgs, json_out: bool) -> CmdResult {
    let mut settings = Settings::default();
    model.apply(&mut settings)?;
    settings.validate().map_err(|e| Failure::user(e.to_string()))?;
    let (img, doc) = read_image(input, number, &DecodeLimits::default())?;
    if doc.units() > 1 && !json_out {
        let label = doc.unit_label(number - 1);
        outln!("{}: image {number} of {} ({label}); --image N fits another", input.display(), doc.units());
    }
    let fit = pipeline::fit_noise(&img, &settings).map_err(|e| Failure::about(input, e))?;
    // The white estimates in the input's own grey levels, whatever domain the model works in.
    let est = &pipeline::estimate_noise(&img);
    let sigma = pipeline::blind_sigma(est);
    if json_out {
        let channels: Vec<_> = est
            .iter()
            .zip(&fit.report.channels)
            .map(|(e, c)| {
                let f = &c.level_function;
                // The curve as the core evaluates it, on and a little beyond the measured span.
                let span = f.high - f.low;
                let curve_at: Vec<[f64; 2]> = (0..=16)
                    .map(|i| f.low - 0.1 * span + 1.2 * span * f64::from(i) / 16.0)
                    .map(|y| [y, f.curve_variance(y)])
                    .collect();
                json!({"immerkaer": e.immerkaer, "immerkaer_calm_blocks": e.immerkaer_calm_blocks,
                       "wavelet_mad": e.wavelet_mad, "sigma": e.chosen(),
                       "slope": f.slope, "intercept": f.intercept, "signal_dependent": f.signal_dependent(),
                       "reliable": f.reliable, "spread": f.spread, "clipping": f.clipping, "points": f.points,
                       "curve": f.curve, "low": f.low, "high": f.high, "curve_used": c.curve_used, "curve_at": curve_at,
                       "photon": c.photon})
            })
            .collect();
        let v = json!({"image": number, "images": doc.units(), "sigma": sigma, "level": fit.report.mean_level,
                       "run_sigma": fit.sigma, "channels": channels, "bit_depth": img.depth.bits(),
                       "model": fit.report.model, "explanation": fit.report.sentence, "fallback": fit.report.fallback,
                       "planes": fit.report.planes, "spectra_8x8": fit.spectra_8,
                       "rule": "per channel, Immerkaer on the calmest 16 x 16 blocks away from clipped levels; the mean over channels"});
        outln!("{v}");
    } else {
        // The level a run uses leads; the white estimate alone is shown where it differs (grainy
        // noise hides from it, so it reads far low there).
        let level = fit.report.mean_level;
        let white = if (sigma - level).abs() > 0.05 * level {
            format!("; a white-noise estimate alone reads {sigma:.3}")
        } else {
            String::new()
        };
        outln!(
            "{}: {} noise, std {:.3} over the image (grey levels of {} bits{white})",
            input.display(),
            fit.report.model,
            level,
            img.depth.bits()
        );
        outln!("  {}", fit.report.sentence);
        if let Some(f) = &fit.report.fallback {
            outln!("  note: {f}");
        }
        for (c, (e, ch)) in est.iter().zip(&fit.report.channels).enumerate() {
            let f = &ch.level_function;
            outln!(
                "  channel {c}: Immerkaer {:.3}, on calm blocks {:.3} (used), wavelet MAD {:.3}; variance {:.4} x level {:+.3}{}",
                e.immerkaer, e.immerkaer_calm_blocks, e.wavelet_mad, f.slope, f.intercept,
                if f.reliable { "" } else { " (too little range to trust the slope)" }
            );
            if let Some(p) = ch.photon {
                outln!(
                    "    gain {:.4} grey levels per photon, offset {:.2}, read noise {:.3}{}",
                    p.gain,
                    p.offset,
                    p.read_noise,
                    if p.offset_fitted && p.read_noise_fitted {
                        " (offset: the darkest smooth level; --offset from a dark frame gives the sensor's read noise)"
                    } else {
                        ""
                    }
                );
            }
        }
        for (i, p) in fit.spectra_8.iter().enumerate() {
            if let Some(s) = p {
                outln!(
                    "  plane {i}: 8 x 8 spectrum, low/high frequency ratio {:.2}{}",
                    s.colour_ratio(),
                    if s.is_coloured() { " (correlated)" } else { " (white)" }
                );
            }
        }
    }
    Ok(())
}

pub fn metrics(clean: &Path, test: &Path, json_out: bool) -> CmdResult {
    let a = read_document(clean, &DecodeLimits::default())?;
    let b = read_document(test, &DecodeLimits::default())?;
    if a.units() != b.units() {
        return Err(Failure::user(format!(
            "{}: {} images, the clean file has {}",
            test.display(),
            b.units(),
            a.units()
        )));
    }
    // Every image of a stack, each in the clean image's value map.
    let mut all = Vec::with_capacity(a.units());
    for k in 0..a.units() {
        let (x, y) = (a.unit(k), b.unit_in(k, a.unit_map(k)));
        let (x, y) = (x.map_err(|e| Failure::about(clean, e))?, y.map_err(|e| Failure::about(test, e))?);
        all.push(metrics::compare(&x, &y).map_err(|e| Failure::about(test, e))?);
    }
    let q = all[0].clone();
    if a.units() > 1 {
        let mean = |f: &dyn Fn(&metrics::Quality) -> f64| all.iter().map(f).sum::<f64>() / all.len() as f64;
        let units: Vec<_> = all
            .iter()
            .enumerate()
            .map(|(k, q)| json!({"image": a.unit_label(k), "psnr": q.psnr, "ssim": q.ssim}))
            .collect();
        if json_out {
            outln!(
                "{}",
                json!({"psnr": mean(&|q| q.psnr), "ssim": mean(&|q| q.ssim), "data_range": q.data_range, "units": units})
            );
        } else {
            outln!("mean over {} images: PSNR {:.3} dB, SSIM {:.4}", all.len(), mean(&|q| q.psnr), mean(&|q| q.ssim));
            for (k, q) in all.iter().enumerate() {
                outln!("  {}: PSNR {:.3} dB, SSIM {:.4}", a.unit_label(k), q.psnr, q.ssim);
            }
        }
        return Ok(());
    }
    if json_out {
        outln!("{}", serde_json::to_string(&q).map_err(|e| Failure { code: 1, message: e.to_string() })?);
    } else {
        outln!("PSNR {:.3} dB, SSIM {:.4} (data range {})", q.psnr, q.ssim, q.data_range);
        for (c, ch) in q.channels.iter().enumerate() {
            outln!("  channel {c}: PSNR {:.3} dB, SSIM {:.4}", ch.psnr, ch.ssim);
        }
    }
    Ok(())
}

pub fn inspect(input: &Path, json_out: bool) -> CmdResult {
    let doc = read_document(input, &DecodeLimits::default())?;
    let s = doc.summary();
    let m = &doc.meta;
    // What records the making: TIFF Software, PNG text, JPEG comment, FITS HISTORY.
    let made_by: Vec<String> = m
        .text
        .iter()
        .filter(|(k, t)| k == "Software" || (k == "Comment" && t.starts_with("Patchgraph ")))
        .map(|(_, t)| t.clone())
        .chain(m.software.clone())
        .chain(m.fits_cards.iter().filter(|c| c.keyword_str() == "HISTORY").filter_map(|c| c.comment.clone()).take(1))
        .collect();
    if json_out {
        let v = json!({"file": s, "resolution": m.resolution, "description": m.description,
                       "icc_profile_bytes": m.icc_profile.as_ref().map(Vec::len), "exif_bytes": m.exif.as_ref().map(Vec::len),
                       "text": m.text, "fits_cards": m.fits_cards.len(), "compression": m.compression,
                       "big_tiff": m.big_tiff, "made_by": made_by});
        outln!("{v}");
    } else {
        outln!(
            "{}: {} {} x {}, {} samples, {} page(s), {} image(s) to denoise",
            input.display(),
            doc.format.info().name,
            s.width,
            s.height,
            s.sample.describe(),
            s.pages,
            s.units
        );
        if let Some(r) = m.resolution {
            outln!("  resolution {} x {} per {:?}", r.x, r.y, r.unit);
        }
        if let Some(d) = &m.description {
            outln!("  description: {d}");
        }
        for line in &made_by {
            outln!("  made by: {line}");
        }
    }
    Ok(())
}
