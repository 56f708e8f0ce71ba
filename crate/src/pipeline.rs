//! One run from start to end: noise model -> colour transform -> method -> inverse transforms.
//! Works on a decoded [`Image`] and never alters it.

use crate::color;
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

/// An image made ready for a method: the noise model applied (`working`), then the colour
/// transform (`planes`, luminance first), with the sigma and range the method works with.
struct Prepared {
    photon: PhotonNoise,
    working: Vec<Plane>,
    planes: Vec<Plane>,
    range: f64,
    sigma: f64,
    estimated: bool,
    estimates: Vec<NoiseEstimate>,
}

fn prepare(img: &Image, settings: &Settings) -> Result<Prepared> {
    settings.validate()?;
    let photon = PhotonNoise { gain: settings.poisson_gain, read: settings.poisson_read_noise };
    let (working, range) = match settings.noise {
        NoiseModel::Gaussian => (img.channels.clone(), f64::from(img.max_value())),
        // The range of the stabilised domain, so sigma-relative parameters see the same scale.
        NoiseModel::Poisson => {
            (map_planes(&img.channels, |v| photon.forward(v)), photon.forward(f64::from(img.max_value())))
        }
    };
    let estimates: Vec<NoiseEstimate> = working.iter().map(noise::estimate).collect();
    let (sigma, estimated) = match settings.sigma {
        Sigma::Value(v) => (v, false),
        Sigma::Auto(_) => (blind_sigma(&estimates), true),
    };
    let planes = if working.len() == 3 { color::to_opponent(&working) } else { working.clone() };
    Ok(Prepared { photon, working, planes, range, sigma, estimated, estimates })
}

pub fn denoise(img: &Image, settings: &Settings, progress: &dyn Progress) -> Result<RunOutput> {
    let Prepared { photon, working, planes: planes_in, range, sigma, estimated, estimates } = prepare(img, settings)?;
    progress.report(0.02, "preparing");
    let sub = SubProgress { parent: progress, start: 0.05, span: 0.9 };
    let MethodOutput { planes, cut_map, work_units } = match settings.method {
        Method::PixelGraph => methods::pixel_graph::denoise(&planes_in, sigma, range, &settings.pixel_graph, &sub)?,
        Method::PatchGraph => methods::patch_graph::denoise(&planes_in, sigma, range, &settings.patch_graph, &sub)?,
    };
    let planes = if planes.len() == 3 { color::from_opponent(&planes) } else { planes };
    let residual = working.iter().zip(&planes).map(|(n, d)| metrics::residual_stats(n, d, sigma)).collect();
    let out_planes = match settings.noise {
        NoiseModel::Gaussian => planes,
        NoiseModel::Poisson => map_planes(&planes, |d| photon.inverse(d)),
    };
    progress.report(1.0, "done");
    Ok(RunOutput {
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
    })
}

/// Inspection: the patch group around pixel (x, y) exactly as a patch-graph run would match it
/// (same noise model, colour transform and sigma), with the patch side.
pub fn group_at(img: &Image, settings: &Settings, x: usize, y: usize) -> Result<(Group, usize)> {
    let p = prepare(img, settings)?;
    let s = &settings.patch_graph;
    let group = methods::patch_graph::group_at(&p.planes[0], p.sigma, p.range, s, x, y)?;
    Ok((group, methods::patch_graph::profile(s, p.sigma * 255.0 / p.range).patch))
}
