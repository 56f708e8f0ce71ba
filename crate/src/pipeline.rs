//! One run from start to end: noise model -> colour transform -> method -> inverse transforms.
//! Works on a decoded [`Image`] and never alters it; `denoise_bytes` adds decode and encode.

use crate::codec::{self, DecodeLimits, OutputFormat};
use crate::color;
use crate::error::Result;
use crate::methods::{self, MethodOutput};
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

pub fn denoise(img: &Image, settings: &Settings, progress: &dyn Progress) -> Result<RunOutput> {
    settings.validate()?;
    let photon = PhotonNoise { gain: settings.poisson_gain, read: settings.poisson_read_noise };
    let working = match settings.noise {
        NoiseModel::Gaussian => img.channels.clone(),
        NoiseModel::Poisson => map_planes(&img.channels, |v| photon.forward(v)),
    };
    // The range of the working domain, so sigma-relative parameters see the same scale.
    let range = match settings.noise {
        NoiseModel::Gaussian => f64::from(img.max_value()),
        NoiseModel::Poisson => photon.forward(f64::from(img.max_value())),
    };
    let estimates: Vec<NoiseEstimate> = working.iter().map(noise::estimate).collect();
    let (sigma, estimated) = match settings.sigma {
        Sigma::Value(v) => (v, false),
        Sigma::Auto(_) => (estimates.iter().map(|e| e.chosen()).sum::<f64>() / estimates.len() as f64, true),
    };
    progress.report(0.02, "preparing");
    let planes_in = if working.len() == 3 { color::to_opponent(&working) } else { working.clone() };
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

/// Decode, denoise, encode: what both faces call with a file's bytes.
pub fn denoise_bytes(
    bytes: &[u8],
    limits: &DecodeLimits,
    settings: &Settings,
    format: OutputFormat,
    progress: &dyn Progress,
) -> Result<(Vec<u8>, RunReport)> {
    let img = codec::decode(bytes, limits)?;
    let run = denoise(&img, settings, progress)?;
    Ok((codec::encode(&run.image, format)?, run.report))
}
