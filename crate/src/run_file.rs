//! A whole file through runs: every page and independent channel denoised with the same
//! settings, one after another, into a copy of the document (the input is never altered).

use crate::error::Result;
use crate::file::samples::ValueMap;
use crate::file::Document;
use crate::pipeline::{self, RunReport};
use crate::planes::Plane;
use crate::progress::{Labelled, Progress};
use crate::settings::{AutoOr, Settings};

pub struct FileRun {
    pub document: Document,
    /// One per unit ([`Document::unit`]).
    pub reports: Vec<RunReport>,
    /// The first unit's cut map (pixel-graph method).
    pub cut_map: Option<Plane>,
}

/// Settings given in the file's own units (sigma, gain, offset, read noise) in working grey levels.
pub fn in_working_units(s: &Settings, map: ValueMap) -> Settings {
    if map == ValueMap::IDENTITY {
        return s.clone();
    }
    let mut w = s.clone();
    let scaled = |v: AutoOr, f: &dyn Fn(f64) -> f64| match v {
        AutoOr::Value(x) => AutoOr::Value(f(x)),
        auto => auto,
    };
    w.sigma = scaled(s.sigma, &|x| x / map.scale);
    w.gain = scaled(s.gain, &|x| x / map.scale);
    w.read_noise = scaled(s.read_noise, &|x| x / map.scale);
    w.offset = scaled(s.offset, &|x| (x - map.offset) / map.scale);
    w
}

/// With `estimate_error`, each unit's report carries its error estimate (one more pass per unit),
/// in the file's own units.
pub fn denoise_file(
    doc: &Document,
    settings: &Settings,
    estimate_error: bool,
    progress: &dyn Progress,
) -> Result<FileRun> {
    let n = doc.units();
    let mut out = doc.clone();
    let mut reports = Vec::with_capacity(n);
    let mut cut_map = None;
    for k in 0..n {
        let sub =
            Labelled { parent: progress, start: k as f32 / n as f32, span: 1.0 / n as f32, label: doc.unit_label(k) };
        let img = doc.unit(k)?;
        let map = doc.unit_map(k);
        let working = in_working_units(settings, map);
        let mut run = if estimate_error {
            pipeline::denoise_estimated(&img, &working, &sub)?
        } else {
            pipeline::denoise(&img, &working, &sub)?
        };
        if let Some(e) = run.report.error_estimate.as_mut() {
            e.in_units(map.scale);
        }
        out.set_unit(k, run.image)?;
        reports.push(run.report);
        if k == 0 {
            cut_map = run.cut_map;
        }
    }
    Ok(FileRun { document: out, reports, cut_map })
}
