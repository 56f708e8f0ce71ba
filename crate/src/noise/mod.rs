//! Noise level estimation and variance-stabilising transforms.

pub mod clip;
pub mod immerkaer;
pub mod model;
pub mod nlf;
pub mod spectrum;
pub mod vst;
pub mod wavelet;

use crate::planes::Plane;
use serde::{Deserialize, Serialize};

/// Both estimates for one channel, in the channel's grey levels.
#[derive(Clone, Copy, Debug, Serialize, Deserialize, PartialEq)]
pub struct NoiseEstimate {
    /// Immerkaer over the whole image.
    pub immerkaer: f64,
    /// Immerkaer on the calmest 16 x 16 blocks (lower quartile), blocks whose noise was clipped
    /// at a limit of the range left out: the one the denoisers use.
    pub immerkaer_calm_blocks: f64,
    /// The wavelet estimate: median |finest diagonal detail| / 0.6745, as scikit-image's estimate_sigma.
    pub wavelet_mad: f64,
}

impl NoiseEstimate {
    /// The estimate the denoisers use. Edges and texture inflate the global estimators (they add
    /// energy to the high-pass responses measured); the calm-block form looks where detail is least.
    pub fn chosen(&self) -> f64 {
        self.immerkaer_calm_blocks
    }
}

/// The estimates of a plane; `top` is the top of its range when its values can clip at 0 and
/// there (an image's own grey levels), None when they cannot (a stabilised domain).
pub fn estimate(p: &Plane, top: Option<f64>) -> NoiseEstimate {
    NoiseEstimate {
        immerkaer: immerkaer::sigma(p),
        immerkaer_calm_blocks: chosen(p, top),
        wavelet_mad: wavelet::sigma_mad(p),
    }
}

/// [`NoiseEstimate::chosen`] of [`estimate`] alone, without the two estimates only reported.
pub fn chosen(p: &Plane, top: Option<f64>) -> f64 {
    match top {
        Some(t) => immerkaer::sigma_calm_blocks_clipped(p, t),
        None => immerkaer::sigma_calm_blocks(p),
    }
}
