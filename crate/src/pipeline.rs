//! One run from start to end: noise model -> colour transform -> method -> inverse transforms.
//! Works on a decoded [`Image`] and never alters it.

use crate::color;
use std::borrow::Cow;
use crate::error::Result;
use crate::methods::{self, MethodOutput};
use crate::patch::Group;
use crate::metrics::{self, ResidualStats};
use crate::noise::{self, vst::PhotonNoise, NoiseEstimate};
use crate::planes::{Image, Plane};
use crate::progress::{Progress, SubProgress};
use crate::settings::{Method, NoiseModel, Settings, Sigma};
use serde::Serialize;

#[derive(Clone, Debug, Serialize)]
pub struct RunReport {
    pub method: &'static str,
    pub noise_model: NoiseModel,
    /// Sigma the method used, in the working domain (grey levels; the stabilised domain for Poisson).
    pub sigma_used: f64,
    pub sigma_was_estimated: bool,
    /// Per input colour channel.
    pub noise_estimates: Vec<NoiseEstimate>,
    /// Per input colour channel, in the working domain.
    pub residual: Vec<ResidualStats>,
    pub work_units: usize,
}

pub struct RunOutput {
    pub image: Image,
    pub report: RunReport,
    pub cut_map: Option<Plane>,
}

fn map_planes(planes: &[Plane], f: impl Fn(f64) -> f64) -> Vec<Plane> {
    planes
        .iter()
        .map(|p| Plane { width: p.width, height: p.height, data: p.data.iter().map(|v| f(f64::from(*v)) as f32).collect() })
        .collect()
}

/// Noise estimates per channel of the input image, in its grey levels.
pub fn estimate_noise(img: &Image) -> Vec<NoiseEstimate> {
    img.channels.iter().map(noise::estimate).collect()
}

/// The one rule for a blind sigma: the mean over channels of each channel's chosen estimate.
pub fn blind_sigma(estimates: &[NoiseEstimate]) -> f64 {
    estimates.iter().map(|e| e.chosen()).sum::<f64>() / estimates.len().max(1) as f64
}

/// An image made ready for a method: the noise model applied (`working`: the image's own planes,
/// borrowed, for Gaussian noise), with the sigma and range the method works with.
/// [`method_planes`] gives the planes a method takes.
pub struct Prepared<'a> {
    pub photon: PhotonNoise,
    pub working: Cow<'a, [Plane]>,
    pub range: f64,
    pub sigma: f64,
    pub estimated: bool,
    pub estimates: Vec<NoiseEstimate>,
}

pub fn prepare<'a>(img: &'a Image, settings: &Settings) -> Result<Prepared<'a>> {
    settings.validate()?;
    let photon = PhotonNoise { gain: settings.poisson_gain, read: settings.poisson_read_noise };
    let (working, range) = match settings.noise {
        NoiseModel::Gaussian => (Cow::Borrowed(img.channels.as_slice()), f64::from(img.max_value())),
        // The range of the stabilised domain, so sigma-relative parameters see the same scale.
        NoiseModel::Poisson => {
            (Cow::Owned(map_planes(&img.channels, |v| photon.forward(v))), photon.forward(f64::from(img.max_value())))
        }
    };
    let estimates: Vec<NoiseEstimate> = working.iter().map(noise::estimate).collect();
    let (sigma, estimated) = match settings.sigma {
        Sigma::Value(v) => (v, false),
        Sigma::Auto(_) => (blind_sigma(&estimates), true),
    };
    Ok(Prepared { photon, working, range, sigma, estimated, estimates })
}

/// The planes a method works on: the working planes, colour ones in the opponent space
/// (luminance first).
pub fn method_planes(p: &Prepared) -> Vec<Plane> {
    if p.working.len() == 3 { color::to_opponent(&p.working) } else { p.working.to_vec() }
}

pub fn denoise(img: &Image, settings: &Settings, progress: &dyn Progress) -> Result<RunOutput> {
    let prepared = prepare(img, settings)?;
    let planes_in = method_planes(&prepared);
    progress.report(0.02, "preparing");
    let sub = SubProgress { parent: progress, start: 0.05, span: 0.9 };
    let (sigma, range) = (prepared.sigma, prepared.range);
    let output = match settings.method {
        Method::PixelGraph => methods::pixel_graph::denoise(&planes_in, sigma, range, &settings.pixel_graph, &sub)?,
        Method::PatchGraph => methods::patch_graph::denoise(&planes_in, sigma, range, &settings.patch_graph, &sub)?,
    };
    drop(planes_in);
    let out = finish(img, settings, prepared, output);
    progress.report(1.0, "done");
    Ok(out)
}

/// The method's planes back to the image: inverse colour transform and noise model, residual checks.
pub fn finish(img: &Image, settings: &Settings, prepared: Prepared<'_>, output: MethodOutput) -> RunOutput {
    let Prepared { photon, working, sigma, estimated, estimates, .. } = prepared;
    let MethodOutput { planes, cut_map, work_units } = output;
    // The method's planes go as soon as they are converted: large images hold one copy at a time.
    let planes = if planes.len() == 3 {
        let rgb = color::from_opponent(&planes);
        drop(planes);
        rgb
    } else {
        planes
    };
    let residual = working.iter().zip(&planes).map(|(n, d)| metrics::residual_stats(n, d, sigma)).collect();
    drop(working);
    let out_planes = match settings.noise {
        NoiseModel::Gaussian => planes,
        NoiseModel::Poisson => map_planes(&planes, |d| photon.inverse(d)),
    };
    RunOutput {
        image: img.with_channels(out_planes),
        report: RunReport {
            method: settings.method.name(),
            noise_model: settings.noise,
            sigma_used: sigma,
            sigma_was_estimated: estimated,
            noise_estimates: estimates,
            residual,
            work_units,
        },
        cut_map,
    }
}

/// Sigma for drawing the residual (input minus result) in the input's grey levels: the sigma
/// used, or for photon noise, whose sigma lives in the stabilised domain, the input's own blind
/// estimate.
pub fn residual_view_sigma(img: &Image, settings: &Settings, report: &RunReport) -> f64 {
    match settings.noise {
        NoiseModel::Gaussian => report.sigma_used,
        NoiseModel::Poisson => blind_sigma(&estimate_noise(img)),
    }
}

/// Inspection: the patch group around pixel (x, y) exactly as a patch-graph run would match it
/// (same noise model, colour transform and sigma), with the patch side.
pub fn group_at(img: &Image, settings: &Settings, x: usize, y: usize) -> Result<(Group, usize)> {
    let p = prepare(img, settings)?;
    let luma = method_planes(&p).swap_remove(0);
    let s = &settings.patch_graph;
    let group = methods::patch_graph::group_at(&luma, p.sigma, p.range, s, x, y)?;
    Ok((group, methods::patch_graph::profile(s, p.sigma * 255.0 / p.range).patch))
}
