//! A whole file through runs: every page and independent channel denoised with the same
//! settings, one after another, into a copy of the document (the input is never altered).

use crate::error::{Error, Result};
use crate::error_estimate::ErrorEstimate;
use crate::file::samples::ValueMap;
use crate::file::Document;
use crate::file::{self, DecodeLimits};
use crate::pipeline::{self, RunOutput, RunReport};
use crate::planes::Plane;
use crate::progress::{Labelled, Progress};
use crate::settings::{AutoOr, Settings};
use crate::stack;

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
/// in the file's own units. Stacks go through [`denoise_stack`] when the settings ask for it.
pub fn denoise_file(
    doc: &Document,
    settings: &Settings,
    estimate_error: bool,
    progress: &dyn Progress,
) -> Result<FileRun> {
    if stack::applies(settings, doc.pages.len()) {
        return denoise_stack(doc, settings, estimate_error, progress);
    }
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

/// Why a stack run carries no error estimate.
pub const NO_ESTIMATE_FOR_STACKS: &str = "the error estimate is made for images denoised alone; set \
     patch_graph.neighbour_slices to 0 to denoise each page alone and estimate its error";

/// A stack denoised as a volume ([`stack`]): each channel's images through the pages, every one
/// in the value scale of the channel's first page (float pages may each have their own), each
/// result put back in its own.
/// With `estimate_error`, the reports say why there is no estimate.
pub fn denoise_stack(
    doc: &Document,
    settings: &Settings,
    estimate_error: bool,
    progress: &dyn Progress,
) -> Result<FileRun> {
    let mut out = doc.clone();
    let mut reports: Vec<Option<RunReport>> = vec![None; doc.units()];
    let series = doc.slice_series();
    let mut cut_map = None;
    for (c, units) in series.iter().enumerate() {
        let span = 1.0 / series.len() as f32;
        let sub = Labelled { parent: progress, start: c as f32 * span, span, label: channel_label(c, series.len()) };
        let base = doc.unit_map(units[0]);
        let working = in_working_units(settings, base);
        let load = |z: usize| doc.unit_in(units[z], base);
        let mut emit = |z: usize, mut run: RunOutput| -> Result<()> {
            let k = units[z];
            in_own_scale(&mut run, base, doc.unit_map(k), estimate_error);
            out.set_unit(k, run.image)?;
            reports[k] = Some(run.report);
            cut_map = cut_map.take().or(run.cut_map);
            Ok(())
        };
        stack::denoise_slices(units.len(), 0..units.len(), &load, &working, &sub, &mut emit)?;
    }
    let reports = reports.into_iter().map(|r| r.ok_or_else(|| Error::Internal("a page was not denoised".into())));
    Ok(FileRun { document: out, reports: reports.collect::<Result<_>>()?, cut_map })
}

/// A stack run's result from the scale of its channel's first page to its own; with
/// `estimate_error`, the report says why there is no estimate.
fn in_own_scale(run: &mut RunOutput, base: ValueMap, own: ValueMap, estimate_error: bool) {
    if own != base {
        for p in &mut run.image.channels {
            p.data.iter_mut().for_each(|v| *v = own.to_working(base.to_stored(*v)));
        }
    }
    if estimate_error {
        let top = f64::from(run.image.max_value());
        run.report.error_estimate = Some(ErrorEstimate::none(NO_ESTIMATE_FOR_STACKS.into(), top));
    }
}

/// Image `k` of a stack file of `pages` pages and `units` images, exactly as [`denoise_stack`]
/// makes it, decoding only the pages it reads (its own and those around it): one image per page
/// worker, in bounded memory. Returns the image alone, as a one-image document, and its run.
pub fn denoise_stack_unit(
    bytes: &[u8],
    limits: &DecodeLimits,
    k: usize,
    pages: usize,
    units: usize,
    settings: &Settings,
    estimate_error: bool,
    progress: &dyn Progress,
) -> Result<(Document, RunOutput)> {
    if pages == 0 || units % pages != 0 || k >= units {
        return Err(Error::BadSettings(format!("there is no image {} in a file of {units} images", k + 1)));
    }
    let per = units / pages;
    let series: Vec<usize> = (0..pages).map(|p| p * per + k % per).collect();
    let base = file::decode_unit(bytes, limits, series[0])?.unit_map(0);
    let load = |z: usize| file::decode_unit(bytes, limits, series[z])?.unit_in(0, base);
    let mut made = None;
    let mut emit = |_: usize, run: RunOutput| -> Result<()> {
        made = Some(run);
        Ok(())
    };
    let z = k / per;
    stack::denoise_slices(pages, z..z + 1, &load, &in_working_units(settings, base), progress, &mut emit)?;
    let mut run = made.ok_or_else(|| Error::Internal("the slice was not denoised".into()))?;
    let mut one = file::decode_unit(bytes, limits, k)?;
    in_own_scale(&mut run, base, one.unit_map(0), estimate_error);
    one.set_unit(0, run.image.clone())?;
    Ok((one, run))
}

fn channel_label(c: usize, n: usize) -> String {
    if n > 1 {
        format!("channel {} of {n}", c + 1)
    } else {
        String::new()
    }
}
