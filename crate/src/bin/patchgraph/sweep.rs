//! `sweep`: one parameter over several values on one image, each result's error estimated
//! without a reference, written as a CSV.

use crate::commands::{auto_or_number, outln, read_document, read_settings, write_file, CmdResult, Failure};
use crate::terminal::TerminalProgress;
use clap::ValueEnum;
use patchgraph::file::DecodeLimits;
use patchgraph::settings::{Method, Settings};
use patchgraph::{pipeline, run_file};
use serde_json::json;
use std::io::IsTerminal;
use std::path::PathBuf;
use std::time::Instant;

#[derive(Clone, Copy, ValueEnum)]
pub enum Parameter {
    /// Patch graph: hard threshold in units of sigma.
    Threshold,
    /// Patch graph: patches per group (both stages).
    GroupSize,
    /// Patch graph: search radius in pixels.
    SearchRadius,
    /// Pixel graph: smoothing strength.
    Strength,
    /// Pixel graph: edge cut threshold in units of sigma.
    EdgeCut,
    /// Either method: the noise sigma in the file's units (the estimate then uses each value).
    Sigma,
}

impl Parameter {
    fn name(self) -> &'static str {
        match self {
            Parameter::Threshold => "threshold",
            Parameter::GroupSize => "group_size",
            Parameter::SearchRadius => "search_radius",
            Parameter::Strength => "strength",
            Parameter::EdgeCut => "edge_cut",
            Parameter::Sigma => "sigma",
        }
    }

    fn method(self) -> Option<Method> {
        match self {
            Parameter::Threshold | Parameter::GroupSize | Parameter::SearchRadius => Some(Method::PatchGraph),
            Parameter::Strength | Parameter::EdgeCut => Some(Method::PixelGraph),
            Parameter::Sigma => None,
        }
    }

    fn set(self, s: &mut Settings, v: f64) {
        match self {
            Parameter::Threshold => s.patch_graph.threshold = v,
            Parameter::GroupSize => {
                s.patch_graph.group_size_hard = v.round() as u32;
                s.patch_graph.group_size_wiener = v.round() as u32;
            }
            Parameter::SearchRadius => s.patch_graph.search_radius = v.round() as u32,
            Parameter::Strength => s.pixel_graph.strength = v,
            Parameter::EdgeCut => s.pixel_graph.cut_threshold = v,
            Parameter::Sigma => s.sigma = patchgraph::settings::AutoOr::Value(v),
        }
    }
}

#[derive(clap::Args)]
pub struct SweepArgs {
    /// The noisy image (the first image of a stack); it is never changed.
    pub input: PathBuf,
    /// The parameter to vary (its method is used; other settings from --settings or the defaults).
    #[arg(long, value_enum)]
    pub parameter: Parameter,
    /// The values, separated by commas (e.g. 2,2.5,3,3.5,4).
    #[arg(long, value_delimiter = ',', required = true, allow_hyphen_values = true)]
    pub values: Vec<f64>,
    /// The CSV to write: one row per value, with the estimated PSNR, its spread and the gain.
    #[arg(short, long)]
    pub output: PathBuf,
    /// Settings JSON for everything but the parameter.
    #[arg(long)]
    pub settings: Option<PathBuf>,
    /// Noise sigma in the input's grey levels, or "auto" (the default): with a given sigma the
    /// estimated PSNR is absolute; with an estimated one, the ranking holds better than the values.
    #[arg(long, allow_hyphen_values = true)]
    pub sigma: Option<String>,
    /// Print one JSON object on stdout instead of a text summary.
    #[arg(long)]
    pub json: bool,
}

fn cell(v: Option<f64>) -> String {
    v.map(|x| format!("{x:.4}")).unwrap_or_default()
}

pub fn sweep(a: SweepArgs) -> CmdResult {
    let mut base = match &a.settings {
        Some(p) => read_settings(p)?,
        None => Settings::default(),
    };
    if let Some(m) = a.parameter.method() {
        base.method = m;
    }
    if let Some(text) = &a.sigma {
        base.sigma = auto_or_number("sigma", text)?;
    }
    let mut runs = Vec::with_capacity(a.values.len());
    for v in &a.values {
        let mut s = base.clone();
        a.parameter.set(&mut s, *v);
        s.validate().map_err(|e| Failure::user(format!("{} {v}: {e}", a.parameter.name())))?;
        runs.push((*v, s));
    }
    let doc = read_document(&a.input, &DecodeLimits::default())?;
    let one = doc.unit_document(0).map_err(|e| Failure::about(&a.input, e))?;
    let mut rows = Vec::new();
    for (k, (v, s)) in runs.iter().enumerate() {
        let progress = TerminalProgress::new(!a.json && std::io::stderr().is_terminal());
        let start = Instant::now();
        let run = run_file::denoise_file(&one, s, true, &progress).map_err(|e| Failure::about(&a.input, e));
        progress.finish();
        let run = run?;
        let report: &pipeline::RunReport = &run.reports[0];
        let e = report.error_estimate.clone().ok_or_else(|| Failure::user("the run gave no error estimate".into()))?;
        if !a.json {
            outln!("{} {} = {v}: {}", k + 1, a.parameter.name(), crate::commands::estimate_line(&e));
        }
        rows.push((*v, e, start.elapsed().as_secs_f64()));
    }
    let errors: Vec<Option<f64>> = rows.iter().map(|r| r.1.mse.filter(|_| r.1.applies)).collect();
    let best_value = lowest_error(&errors).map(|i| rows[i].0);
    let estimated = errors.iter().flatten().count();
    let mut csv = format!(
        "{},estimated_psnr,psnr_spread,estimated_gain_db,estimated_mse,covered,lowest_error,note,seconds\n",
        a.parameter.name()
    );
    for (v, e, secs) in &rows {
        let note = e.note.clone().unwrap_or_default().replace(['"', ','], " ");
        csv.push_str(&format!(
            "{v},{},{},{},{},{:.4},{},{note},{secs:.3}\n",
            cell(e.psnr),
            cell(e.psnr_spread),
            cell(e.gain_db),
            cell(e.mse),
            e.covered,
            Some(*v) == best_value
        ));
    }
    write_file(&a.output, csv.as_bytes())?;
    if a.json {
        let v = json!({"input": a.input.display().to_string(), "parameter": a.parameter.name(), "output": a.output.display().to_string(),
                       "best": best_value, "runs": rows.iter().map(|(v, e, s)| json!({"value": v, "error_estimate": e, "seconds": s})).collect::<Vec<_>>()});
        outln!("{v}");
    } else {
        match best_value {
            Some(b) => outln!("lowest estimated error: {} = {b}; table in {}", a.parameter.name(), a.output.display()),
            None if estimated == 0 => outln!("no estimate applies to this image; table in {}", a.output.display()),
            None => outln!(
                "no value named: the estimate applies to {estimated} of {} values, and the others' errors are unknown; table in {}",
                rows.len(),
                a.output.display()
            ),
        }
    }
    Ok(())
}

/// The place of the lowest estimated error (not PSNR: differences hold even where the level is
/// estimated), named only when every value has an estimate: a value without one may have the
/// lowest error of all (measured: brick at sigma 50, pixel-graph strengths 0.5 to 16, only 16 had
/// an estimate and was named; its result was 4.4 dB worse than the default's).
fn lowest_error(errors: &[Option<f64>]) -> Option<usize> {
    let all: Option<Vec<f64>> = errors.iter().copied().collect();
    let all = all.filter(|a| !a.is_empty())?;
    (0..all.len()).min_by(|&x, &y| all[x].total_cmp(&all[y]))
}

#[cfg(test)]
mod tests {
    use super::lowest_error;

    #[test]
    fn the_lowest_error_is_named_only_when_every_value_has_one() {
        // Invariant: the minimum of the estimates, first of equals; nothing when any is missing.
        assert_eq!(lowest_error(&[Some(3.0), Some(1.0), Some(2.0), Some(1.0)]), Some(1));
        assert_eq!(lowest_error(&[Some(3.0), None, Some(2.0)]), None);
        assert_eq!(lowest_error(&[None, None]), None);
        assert_eq!(lowest_error(&[]), None);
    }
}
