//! A whole file through runs: every page and independent channel denoised with the same
//! settings, one after another, into a copy of the document (the input is never altered).

use crate::error::{Error, Result};
use crate::error_estimate::ErrorEstimate;
use crate::file::samples::ValueMap;
use crate::file::Document;
use crate::file::{self, DecodeLimits};
use crate::pipeline::{self, RunOutput, RunReport};
use crate::planes::{Image, Plane};
use crate::progress::{Labelled, Progress};
use crate::settings::{AutoOr, Settings};
use crate::stack;

/// A whole file denoised: the document with every unit's result, and one report per unit.
pub struct FileRun {
    /// The input document with the results in place of its units.
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

/// Image `image` of a stack file of `pages` pages and `units` images (as the file's summary
/// gives them), worked on alone: a page worker's jobs, decoding only the pages they read.
#[derive(Clone, Copy)]
pub struct StackImage<'a> {
    /// The file's bytes.
    pub bytes: &'a [u8],
    /// The decoder's limits.
    pub limits: DecodeLimits,
    /// Which image of the stack.
    pub image: usize,
    /// Pages in the file.
    pub pages: usize,
    /// Images (units) in the file.
    pub units: usize,
}

/// Where a stack image lies: its channel's images through the pages, its slice, and the value
/// scale they are read in (the channel's first page's).
struct Place {
    series: Vec<usize>,
    z: usize,
    base: ValueMap,
}

impl StackImage<'_> {
    /// Images per page, checking the image is in the file.
    fn per_page(&self) -> Result<usize> {
        let (k, pages, units) = (self.image, self.pages, self.units);
        if pages == 0 || !units.is_multiple_of(pages) || k >= units {
            return Err(Error::BadSettings(format!("there is no image {} in a file of {units} images", k + 1)));
        }
        Ok(units / pages)
    }

    fn place(&self) -> Result<Place> {
        let per = self.per_page()?;
        let series: Vec<usize> = (0..self.pages).map(|p| p * per + self.image % per).collect();
        let base = file::decode_unit(self.bytes, &self.limits, series[0])?.unit_map(0);
        Ok(Place { series, z: self.image / per, base })
    }

    /// Slice `z` of its channel decoded alone, in the channel's value scale.
    fn load(&self, place: &Place, z: usize) -> Result<Image> {
        let k = *place.series.get(z).ok_or_else(|| Error::Internal("no such slice".into()))?;
        file::decode_unit(self.bytes, &self.limits, k)?.unit_in(0, place.base)
    }

    /// The images whose first stages this one's second stage takes (its own included), in order.
    pub fn around(&self, settings: &Settings) -> Result<Vec<usize>> {
        let per = self.per_page()?;
        Ok(stack::around(self.pages, self.image / per, settings).map(|z| z * per + self.image % per).collect())
    }

    /// The image's first stage: its method planes.
    pub fn first_stage(&self, settings: &Settings, progress: &dyn Progress) -> Result<Vec<Plane>> {
        let place = self.place()?;
        let load = |z: usize| self.load(&place, z);
        stack::first_stage_of(self.pages, place.z, &load, &in_working_units(settings, place.base), progress)
    }

    /// The image from the first stages of the images [`StackImage::around`] it: exactly what
    /// [`denoise_stack`] makes of it. Returns the image alone, as a one-image document, and its run.
    pub fn second_stage(
        &self,
        settings: &Settings,
        basics: Vec<Vec<Plane>>,
        estimate_error: bool,
        progress: &dyn Progress,
    ) -> Result<(Document, RunOutput)> {
        let place = self.place()?;
        let load = |z: usize| self.load(&place, z);
        let working = in_working_units(settings, place.base);
        let mut run = stack::second_stage_of(self.pages, place.z, &load, basics, &working, progress)?;
        let mut one = file::decode_unit(self.bytes, &self.limits, self.image)?;
        in_own_scale(&mut run, place.base, one.unit_map(0), estimate_error);
        one.set_unit(0, run.image.clone())?;
        Ok((one, run))
    }
}

fn channel_label(c: usize, n: usize) -> String {
    if n > 1 {
        format!("channel {} of {n}", c + 1)
    } else {
        String::new()
    }
}
