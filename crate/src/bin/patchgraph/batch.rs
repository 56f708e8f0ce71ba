//! `patchgraph batch`: one setting over many files, using all cores: a patch-graph file at a time
//! (each run already spreads over the cores), pixel-graph files (one core each) as many at once as
//! there are cores, results written in input order; an overall progress bar, a summary table and a CSV report. A failed file is reported and
//! the others go on; the exit code is 2 if any file failed. `--shard K/N` takes every N-th file
//! starting at the K-th of the sorted list, so N machines of a job array share one input list.

use crate::commands::{outln, read_settings, Failure};
use crate::terminal::{write_atomically, TerminalProgress};
use patchgraph::file::{self, DecodeLimits, Format, Provenance};
use patchgraph::{run_file, Error, Progress};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Parses "K/N" with 1 <= K <= N.
pub fn parse_shard(text: &str) -> Result<(usize, usize), Failure> {
    let bad = || Failure::user(format!("--shard must be K/N with 1 <= K <= N, got \"{text}\""));
    let (k, n) = text.split_once('/').ok_or_else(bad)?;
    let (k, n): (usize, usize) = (k.trim().parse().map_err(|_| bad())?, n.trim().parse().map_err(|_| bad())?);
    if k == 0 || n == 0 || k > n {
        return Err(bad());
    }
    Ok((k, n))
}

fn is_image(p: &Path) -> bool {
    p.extension().and_then(|e| e.to_str()).and_then(Format::from_extension).is_some()
}

/// Files given directly, plus the image files of given folders (not recursive), sorted and unique.
pub fn collect(inputs: &[PathBuf]) -> Result<Vec<PathBuf>, Failure> {
    let mut files = Vec::new();
    for p in inputs {
        if p.is_dir() {
            let entries = std::fs::read_dir(p)
                .map_err(|e| Failure::user(format!("{}: cannot list the folder ({e})", p.display())))?;
            files.extend(entries.filter_map(|e| e.ok()).map(|e| e.path()).filter(|f| f.is_file() && is_image(f)));
        } else {
            files.push(p.clone());
        }
    }
    files.sort();
    files.dedup();
    Ok(files)
}

struct Outcome {
    input: PathBuf,
    output: Option<PathBuf>,
    sigma: Option<f64>,
    seconds: f64,
    error: Option<String>,
}

/// Progress of one file mapped into the batch's overall bar.
struct Slice<'a> {
    bar: &'a TerminalProgress,
    index: usize,
    total: usize,
}

impl Progress for Slice<'_> {
    fn report(&self, fraction: f32, stage: &str) {
        self.bar.report(
            (self.index as f32 + fraction) / self.total as f32,
            &format!("file {} of {}: {stage}", self.index + 1, self.total),
        );
    }
    fn is_cancelled(&self) -> bool {
        self.bar.is_cancelled()
    }
}

/// Refuses an output that is an input of this batch, or that an earlier file already wrote.
fn check_target(out: &Path, input: &Path, written: &[PathBuf]) -> Result<(), Error> {
    if written.iter().any(|w| w == out) {
        return Err(Error::UnsupportedOutput(format!(
            "{} was already written from another input with the same name",
            out.display()
        )));
    }
    if let (Ok(a), Ok(b)) = (std::fs::canonicalize(out), std::fs::canonicalize(input)) {
        if a == b {
            return Err(Error::UnsupportedOutput(
                "the output would overwrite the input; choose another output folder".into(),
            ));
        }
    }
    Ok(())
}

/// A denoised file, encoded and not yet written.
struct Computed {
    format: Format,
    encoded: Vec<u8>,
    sigma: f64,
}

fn compute(input: &Path, settings: &patchgraph::Settings, progress: &dyn Progress) -> Result<Computed, Error> {
    let bytes = std::fs::read(input).map_err(|e| Error::decode_caused(format!("cannot read the file ({e})"), e))?;
    let doc = file::decode(&bytes, &DecodeLimits::default())?;
    // The input's format, or the first format that holds the whole file (a 16-bit JPEG, say).
    let format = std::iter::once(doc.format)
        .chain(file::FORMATS.iter().map(|f| f.format))
        .find(|f| doc.check_writable(*f).is_ok())
        .ok_or_else(|| Error::UnsupportedOutput("no output format here holds this file".into()))?;
    let run = run_file::denoise_file(&doc, settings, false, progress)?;
    let provenance = Provenance::of(settings);
    let encoded = file::encode(&run.document, format, Some(&provenance))?;
    let sigma = run.reports.first().map_or(0.0, |r| r.sigma_used * doc.unit_map(0).scale);
    Ok(Computed { format, encoded, sigma })
}

/// Writes a computed result beside its siblings in OUTDIR, never over an input or an earlier result.
fn store(input: &Path, outdir: &Path, done: Computed, written: &[PathBuf]) -> Result<PathBuf, Error> {
    let Computed { format, encoded, .. } = done;
    let stem = input.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "image".into());
    let out = outdir.join(format!("{stem}.{}", format.extension()));
    check_target(&out, input, written)?;
    write_atomically(&out, &encoded)
        .map_err(|e| Error::encode_caused(format!("cannot write {} ({e})", out.display()), e))?;
    Ok(out)
}

/// Files computed together: one for the patch-graph method, one per core for the pixel-graph one.
fn files_at_once(settings: &patchgraph::Settings) -> usize {
    #[cfg(feature = "parallel")]
    if settings.method == patchgraph::settings::Method::PixelGraph {
        return rayon::current_num_threads().max(1);
    }
    let _ = settings;
    1
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

pub fn batch(
    inputs: &[PathBuf],
    outdir: &Path,
    settings_path: Option<&Path>,
    shard: Option<&str>,
    json: bool,
) -> Result<(), Failure> {
    let settings = match settings_path {
        Some(p) => read_settings(p)?,
        None => patchgraph::Settings::default(),
    };
    let (k, n) = match shard {
        Some(s) => parse_shard(s)?,
        None => (1, 1),
    };
    let all = collect(inputs)?;
    if all.is_empty() {
        return Err(Failure::user(format!("no image files were given ({})", file::Format::all_extensions())));
    }
    let files: Vec<PathBuf> = all.into_iter().enumerate().filter(|(i, _)| i % n == k - 1).map(|(_, f)| f).collect();
    std::fs::create_dir_all(outdir)
        .map_err(|e| Failure::user(format!("{}: cannot create the folder ({e})", outdir.display())))?;
    let bar = TerminalProgress::new(!json && std::io::stderr().is_terminal());
    let mut outcomes = Vec::new();
    let at_once = files_at_once(&settings);
    'chunks: for (c, chunk) in files.chunks(at_once).enumerate() {
        if bar.is_cancelled() {
            break;
        }
        let run = |(i, input): (usize, &PathBuf)| {
            let start = Instant::now();
            let r = compute(input, &settings, &Slice { bar: &bar, index: c * at_once + i, total: files.len() });
            (r, start.elapsed().as_secs_f64())
        };
        #[cfg(feature = "parallel")]
        let results: Vec<_> = {
            use rayon::prelude::*;
            chunk.par_iter().enumerate().map(run).collect()
        };
        #[cfg(not(feature = "parallel"))]
        let results: Vec<_> = chunk.iter().enumerate().map(run).collect();
        for (input, (r, seconds)) in chunk.iter().zip(results) {
            let written: Vec<PathBuf> = outcomes.iter().filter_map(|o: &Outcome| o.output.clone()).collect();
            let r = r.and_then(|done| {
                let sigma = done.sigma;
                store(input, outdir, done, &written).map(|out| (out, sigma))
            });
            outcomes.push(match r {
                Ok((out, sigma)) => {
                    Outcome { input: input.clone(), output: Some(out), sigma: Some(sigma), seconds, error: None }
                }
                Err(Error::Cancelled) => break 'chunks,
                Err(e) => {
                    Outcome { input: input.clone(), output: None, sigma: None, seconds, error: Some(e.to_string()) }
                }
            });
        }
    }
    bar.finish();
    let cancelled = bar.is_cancelled();
    let failed = outcomes.iter().filter(|o| o.error.is_some()).count();
    let report_name = if n > 1 { format!("batch-report-{k}-of-{n}.csv") } else { "batch-report.csv".to_string() };
    let mut csv = String::from("input,output,sigma,seconds,error\n");
    for o in &outcomes {
        csv.push_str(&format!(
            "{},{},{},{:.3},{}\n",
            csv_field(&o.input.display().to_string()),
            o.output.as_ref().map(|p| csv_field(&p.display().to_string())).unwrap_or_default(),
            o.sigma.map(|s| format!("{s:.4}")).unwrap_or_default(),
            o.seconds,
            csv_field(o.error.as_deref().unwrap_or(""))
        ));
    }
    write_atomically(&outdir.join(&report_name), csv.as_bytes())
        .map_err(|e| Failure::user(format!("{}: cannot write the report ({e})", outdir.display())))?;
    if json {
        let rows: Vec<_> = outcomes
            .iter()
            .map(|o| serde_json::json!({"input": o.input, "output": o.output, "sigma": o.sigma, "seconds": o.seconds, "error": o.error}))
            .collect();
        outln!(
            "{}",
            serde_json::json!({"files": rows, "done": outcomes.len() - failed, "failed": failed, "shard": format!("{k}/{n}"), "cancelled": cancelled})
        );
    } else {
        for o in &outcomes {
            match (&o.output, &o.error) {
                (Some(out), _) => outln!(
                    "ok      {} -> {} (sigma {:.2}, {:.2} s)",
                    o.input.display(),
                    out.display(),
                    o.sigma.unwrap_or(0.0),
                    o.seconds
                ),
                (_, Some(e)) => outln!("failed  {}: {e}", o.input.display()),
                _ => {}
            }
        }
        outln!(
            "{} done, {} failed, report in {}",
            outcomes.len() - failed,
            failed,
            outdir.join(&report_name).display()
        );
    }
    if cancelled {
        return Err(Failure {
            code: 130,
            message: format!("cancelled after {} of {} files", outcomes.len(), files.len()),
        });
    }
    if failed > 0 {
        return Err(Failure::user(format!("{failed} of {} files failed; see the report", files.len())));
    }
    Ok(())
}
