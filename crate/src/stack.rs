//! Stacks denoised as volumes (patch-graph method): the groups of a slice also take patches from
//! the slices around it (`patch_graph.neighbour_slices` on each side), matched near the same
//! position, so a structure that continues through z is averaged over more samples of it. Only
//! the slice's own patches are written, so a slice's result depends on the slices around it and
//! on nothing else: computed for the whole stack at once (the command line, [`denoise_slices`])
//! or as separate jobs (the page's workers, [`first_stage_of`] and [`second_stage_of`]), it is
//! the same.
//!
//! Each slice keeps its own noise model (its own fit, stabiliser and sigma). The second stage of
//! a slice needs the first-stage results of its neighbours, so a run over a stack keeps a sliding
//! window of slices: memory is a few slices, whatever the stack's depth.

use crate::error::{Error, Result};
use crate::methods::patch_graph::{matching_guide, run_stage, Stage};
use crate::methods::MethodOutput;
use crate::pipeline::{self, Prepared, RunOutput};
use crate::planes::{Image, Plane};
use crate::progress::{Labelled, Progress, SubProgress};
use crate::settings::{Method, Settings};
use std::collections::BTreeMap;

/// Whether a stack of `slices` pages is denoised as a volume under these settings.
pub fn applies(settings: &Settings, slices: usize) -> bool {
    settings.method == Method::PatchGraph && settings.patch_graph.neighbour_slices > 0 && slices > 1
}

/// One slice made ready: its image, noise model, method planes and, once made, its first stage.
struct Slice {
    img: Image,
    prepared: Prepared<'static>,
    planes: Vec<Plane>,
    basic: Option<Vec<Plane>>,
    /// Block means of the luminance and the noise variance of one, for [`in_register`].
    coarse: (Vec<f64>, f64),
}

/// Denoises slices `wanted` of a stack of `count`, giving each result to `emit` in order. `load`
/// gives slice z (all of one size, in one value scale); it may be called again for a slice.
pub fn denoise_slices(
    count: usize,
    wanted: std::ops::Range<usize>,
    load: &dyn Fn(usize) -> Result<Image>,
    settings: &Settings,
    progress: &dyn Progress,
    emit: &mut dyn FnMut(usize, RunOutput) -> Result<()>,
) -> Result<()> {
    if wanted.end > count {
        return Err(Error::Internal("slices asked for beyond the stack".into()));
    }
    let r = settings.patch_graph.neighbour_slices as usize;
    let around = |z: usize| around(count, z, settings);
    let mut held: BTreeMap<usize, Slice> = BTreeMap::new();
    let total = wanted.len().max(1) as f32;
    for (done, z) in wanted.clone().enumerate() {
        let label = format!("slice {} of {count}", z + 1);
        let part = Labelled { parent: progress, start: done as f32 / total, span: 1.0 / total, label };
        let need: Vec<usize> = around(z).filter(|j| held.get(j).is_none_or(|s| s.basic.is_none())).collect();
        for (i, &j) in need.iter().enumerate() {
            for m in around(j) {
                if let std::collections::btree_map::Entry::Vacant(e) = held.entry(m) {
                    e.insert(prepare(load(m)?, settings)?);
                }
            }
            let span = 0.5 / need.len() as f32;
            let sub = SubProgress { parent: &part, start: i as f32 * span, span };
            let basic = run_slice_stage(&held, j, around(j), false, settings, &sub)?;
            if let Some(s) = held.get_mut(&j) {
                s.basic = Some(basic);
            }
        }
        let second = SubProgress { parent: &part, start: 0.5, span: 0.5 };
        let planes = run_slice_stage(&held, z, around(z), true, settings, &second)?;
        emit(z, finish(&held, z, around(z), planes, settings)?)?;
        // The next slice needs nothing before its own neighbours.
        held.retain(|&j, _| j + r > z);
    }
    progress.report(1.0, "done");
    Ok(())
}

/// The slices whose patches slice `z` may take (itself included): z - r to z + r within the stack.
pub fn around(count: usize, z: usize, settings: &Settings) -> std::ops::Range<usize> {
    let r = settings.patch_graph.neighbour_slices as usize;
    z.saturating_sub(r)..(z + r + 1).min(count)
}

fn finish(
    held: &BTreeMap<usize, Slice>,
    z: usize,
    range: std::ops::Range<usize>,
    planes: Vec<Plane>,
    settings: &Settings,
) -> Result<RunOutput> {
    let slice = held.get(&z).ok_or_else(|| Error::Internal("a slice went missing".into()))?;
    let output = MethodOutput { planes, cut_map: None, work_units: 0 };
    let mut run = pipeline::finish(&slice.img, settings, slice.prepared.clone(), output)?;
    run.report.slices_joined = Some(neighbours(held, z, range)?.len());
    Ok(run)
}

/// Slice `z`'s first stage alone, reading the slices [`around`] it through `load`: one job of a
/// run split across workers, whose planes [`second_stage_of`] takes. The same numbers as
/// [`denoise_slices`] makes for it.
pub fn first_stage_of(
    count: usize,
    z: usize,
    load: &dyn Fn(usize) -> Result<Image>,
    settings: &Settings,
    progress: &dyn Progress,
) -> Result<Vec<Plane>> {
    let range = around(count, z, settings);
    let held = range.clone().map(|m| Ok((m, prepare(load(m)?, settings)?))).collect::<Result<BTreeMap<_, _>>>()?;
    run_slice_stage(&held, z, range, false, settings, progress)
}

/// Slice `z`'s result from the first stages of the slices [`around`] it (`basics`, in slice
/// order, as [`first_stage_of`] made them).
pub fn second_stage_of(
    count: usize,
    z: usize,
    load: &dyn Fn(usize) -> Result<Image>,
    basics: Vec<Vec<Plane>>,
    settings: &Settings,
    progress: &dyn Progress,
) -> Result<RunOutput> {
    let range = around(count, z, settings);
    if basics.len() != range.len() {
        return Err(Error::Internal(format!("{} first stages for {} slices", basics.len(), range.len())));
    }
    let mut held = BTreeMap::new();
    for (m, basic) in range.clone().zip(basics) {
        let mut slice = prepare(load(m)?, settings)?;
        if basic.len() != slice.planes.len()
            || basic.iter().zip(&slice.planes).any(|(b, p)| b.data.len() != p.data.len())
        {
            return Err(Error::Internal("a first stage does not fit its slice".into()));
        }
        slice.basic = Some(basic);
        held.insert(m, slice);
    }
    let planes = run_slice_stage(&held, z, range.clone(), true, settings, progress)?;
    finish(&held, z, range, planes, settings)
}

fn prepare(img: Image, settings: &Settings) -> Result<Slice> {
    let prepared = pipeline::prepare(&img, settings)?.into_owned();
    let planes = pipeline::method_planes(&prepared);
    let noise = prepared.luma_level().powi(2) / (COARSE_BLOCK * COARSE_BLOCK) as f64;
    let coarse = (planes.first().map(coarse).unwrap_or_default(), noise);
    Ok(Slice { img, prepared, planes, basic: None, coarse })
}

/// The slices of `range` other than `z` that continue it, nearest first (z-1, z+1, z-2, ...): the
/// planes each stage reads besides its own. A slice continues z when it and every slice between
/// them are [`in_register`] with the next: the pages of a document that are not a stack (unrelated
/// images) are denoised alone.
fn neighbours(held: &BTreeMap<usize, Slice>, z: usize, range: std::ops::Range<usize>) -> Result<Vec<&Slice>> {
    let get = |j: usize| held.get(&j).ok_or_else(|| Error::Internal("a neighbouring slice is not ready".into()));
    let mut order: Vec<usize> = range.filter(|&j| j != z).collect();
    order.sort_by_key(|&j| (j.abs_diff(z), j));
    let mut out = Vec::new();
    for j in order {
        let (lo, hi) = (j.min(z), j.max(z));
        let mut joined = true;
        for a in lo..hi {
            joined &= in_register(&get(a)?.coarse, &get(a + 1)?.coarse);
        }
        if joined {
            out.push(get(j)?);
        }
    }
    Ok(out)
}

/// Side of the blocks whose means [`in_register`] compares: large enough that the noise in a
/// block mean is an eighth of the pixels'.
const COARSE_BLOCK: usize = 8;

/// Two slices continue each other when their block means correlate (noise taken out) by at least
/// this much. Measured: neighbouring slices of our synthetic z-stack 0.88 or more (sigma 15 to 50);
/// pairs of unrelated 256 x 256 images of the development set 0.39 at most. A rule of thumb of
/// ours between the two.
const IN_REGISTER: f64 = 0.6;

/// Block means of the luminance plane.
fn coarse(p: &Plane) -> Vec<f64> {
    let (bw, bh) = (p.width / COARSE_BLOCK, p.height / COARSE_BLOCK);
    let mut out = vec![0.0; bw * bh];
    for y in 0..bh * COARSE_BLOCK {
        for x in 0..bw * COARSE_BLOCK {
            out[(y / COARSE_BLOCK) * bw + x / COARSE_BLOCK] += f64::from(p.data[y * p.width + x]);
        }
    }
    out.iter_mut().for_each(|v| *v /= (COARSE_BLOCK * COARSE_BLOCK) as f64);
    out
}

/// Whether two slices show the same scene in register: the correlation of their block means, with
/// the noise's share taken out of each variance (noise does not correlate across slices).
fn in_register((a, na): &(Vec<f64>, f64), (b, nb): &(Vec<f64>, f64)) -> bool {
    let n = a.len().min(b.len()) as f64;
    if n < 4.0 {
        return true;
    }
    let (ma, mb) = (a.iter().sum::<f64>() / n, b.iter().sum::<f64>() / n);
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (x, y) in a.iter().zip(b) {
        sab += (x - ma) * (y - mb);
        saa += (x - ma) * (x - ma);
        sbb += (y - mb) * (y - mb);
    }
    let (saa, sbb) = ((saa - n * na).max(0.0), (sbb - n * nb).max(0.0));
    // Two flat slices have nothing to disagree on.
    saa * sbb <= 0.0 || sab / (saa * sbb).sqrt() >= IN_REGISTER
}

/// Stage 1 of slice `z` (`second` false) or stage 2 (its first stage and its neighbours' made),
/// with the slices of `range` that continue it.
fn run_slice_stage(
    held: &BTreeMap<usize, Slice>,
    z: usize,
    range: std::ops::Range<usize>,
    second: bool,
    settings: &Settings,
    progress: &dyn Progress,
) -> Result<Vec<Plane>> {
    let own = held.get(&z).ok_or_else(|| Error::Internal("a slice is not ready".into()))?;
    let p = &own.prepared;
    if p.model.sigma <= 0.0 {
        return Ok(own.planes.clone());
    }
    fn first(s: &Slice) -> Result<&[Plane]> {
        s.basic.as_deref().ok_or_else(|| Error::Internal("a first stage is missing".into()))
    }
    let basic = if second { Some(first(own)?) } else { None };
    let near = neighbours(held, z, range)?;
    let context = near.iter().map(|s| s.planes.as_slice()).collect();
    let bases = if second { near.iter().map(|s| first(s)).collect::<Result<Vec<_>>>()? } else { Vec::new() };
    let spectra = p.spectra();
    // Stage 1 under correlated noise matches on whitened planes, the neighbours' whitened by the
    // own slice's spectrum so that all compare alike.
    let guides: Vec<Plane> = match (second, matching_guide(&own.planes, spectra.as_deref())) {
        (false, Some(g)) => std::iter::once(Ok(g))
            .chain(near.iter().map(|s| {
                matching_guide(&s.planes, spectra.as_deref())
                    .ok_or_else(|| Error::Internal("a neighbouring slice has no matching guide".into()))
            }))
            .collect::<Result<_>>()?,
        _ => Vec::new(),
    };
    let stage = Stage::new(
        &own.planes,
        basic,
        0,
        own.img.height,
        p.model.sigma,
        p.range,
        &settings.patch_graph,
        spectra.as_deref(),
    )?;
    run_stage(&stage.with_slices(context, bases)?.with_guides(guides.iter().collect())?, progress)
}
