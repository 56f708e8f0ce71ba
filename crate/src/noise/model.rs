//! The noise model of one image, chosen from the data or from the settings, with its reasons:
//! white or correlated, Gaussian or Poisson-Gaussian, per channel. This is what `noise: "auto"`
//! decides and what the report, the CLI's `noise` command and the page show.

use super::nlf::{self, NoiseLevelFunction};
use super::spectrum::NoiseSpectrum;
use super::vst::PhotonNoise;
use crate::planes::Plane;
use crate::settings::Settings;
use serde::{Deserialize, Serialize};

/// The photon model's parameters of one channel, in its grey levels, and whether each was fitted.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct PhotonFit {
    /// Grey levels per photon.
    pub gain: f64,
    /// Black level: the grey level of no light.
    pub offset: f64,
    /// Gaussian read-noise std, in grey levels.
    pub read_noise: f64,
    /// True when the gain was fitted, false when given.
    pub gain_fitted: bool,
    /// True when the offset was fitted, false when given.
    pub offset_fitted: bool,
    /// True when the read noise was fitted, false when given.
    pub read_noise_fitted: bool,
}

impl PhotonFit {
    /// The parameters as the transform takes them.
    pub fn noise(&self) -> PhotonNoise {
        PhotonNoise { gain: self.gain, read: self.read_noise, offset: self.offset }
    }
}

/// How the noise's dependence on brightness is handled before filtering.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Dependence {
    /// One level everywhere.
    None,
    /// Photon noise: the generalised Anscombe transform with gain, offset and read noise.
    Photon,
    /// Any other smooth dependence: the transform of the measured curve.
    Curve,
}

/// One input channel: the fitted noise-level function and, when photon noise is used, its
/// parameters.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ChannelNoise {
    /// The measured variance against brightness, with its fitted line and curve.
    pub level_function: NoiseLevelFunction,
    /// The photon model's parameters, when photon noise is used.
    pub photon: Option<PhotonFit>,
    /// True when this channel was stabilised with its measured curve.
    pub curve_used: bool,
}

/// One plane the method works on (grey, or opponent colour, after any stabilisation): its level
/// and, for correlated noise, its spectrum.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PlaneNoise {
    /// Effective (pixel-domain) noise std in the working domain.
    pub level: f64,
    /// The spectrum's low/high ring ratio (1 for white noise).
    pub colour_ratio: f64,
    /// Per-coefficient variances when the noise is correlated; None for white noise.
    pub spectrum: Option<NoiseSpectrum>,
}

/// Everything said about the noise of one run.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct NoiseReport {
    /// The model's name ([`model_name`]): "white Gaussian", "Poisson-Gaussian",
    /// "brightness-dependent Gaussian", or "correlated ..." of the last two or "Gaussian".
    pub model: String,
    /// True when the model was fitted (`noise: "auto"`), false when the settings named it.
    pub fitted: bool,
    /// One plain sentence: what was chosen and why.
    pub sentence: String,
    /// One entry per input channel.
    pub channels: Vec<ChannelNoise>,
    /// One entry per plane the method works on.
    pub planes: Vec<PlaneNoise>,
    /// Set when the fit could not be trusted and the white estimate was used instead.
    pub fallback: Option<String>,
    /// True when results near black or white were corrected for noise the clipping had cut off.
    pub clip_corrected: bool,
    /// The noise std in the input's grey levels, as a root mean square over the image's pixels:
    /// one number to compare with other estimates, whatever the model.
    pub mean_level: f64,
}

/// Photon parameters for a channel: each from the settings where given, else from the fit. The
/// offset defaults to the darkest smooth level seen; the read noise is then the fitted std there.
pub fn photon_fit(f: &NoiseLevelFunction, settings: &Settings) -> PhotonFit {
    let gain_given = settings.gain.value();
    // A flat fit gives no gain: one grey level per photon then, as counts stored plainly are.
    let gain = gain_given.unwrap_or(if f.slope > 0.0 { f.slope } else { 1.0 }).max(1e-6);
    let offset_given = settings.offset.value();
    let read_given = settings.read_noise.value();
    // var(y) = gain (y - offset) + read^2, so read^2 - gain offset = the line's intercept.
    let intercept = if gain_given.is_some() { f.constant_intercept(gain) } else { f.intercept };
    let (offset, read) = match (offset_given, read_given) {
        (Some(o), Some(r)) => (o, r),
        (Some(o), None) => (o, (intercept + gain * o).max(0.0).sqrt()),
        (None, Some(r)) => ((r * r - intercept) / gain, r),
        (None, None) => {
            let o = f.black_level.max(0.0);
            let v = intercept + gain * o;
            if v >= 0.0 {
                (o, v.sqrt())
            } else {
                (-intercept / gain, 0.0)
            }
        }
    };
    PhotonFit {
        gain,
        offset,
        read_noise: read,
        gain_fitted: gain_given.is_none(),
        offset_fitted: offset_given.is_none(),
        read_noise_fitted: read_given.is_none(),
    }
}

/// Fits each channel's noise-level function (values in [0, top]).
pub fn fit_channels(channels: &[Plane], top: f64) -> Vec<NoiseLevelFunction> {
    crate::planes::per_plane(channels, |c| nlf::fit(c, top))
}

/// The model's name from its two choices.
pub fn model_name(dependence: Dependence, correlated: bool) -> String {
    let base = match dependence {
        Dependence::None => "white Gaussian",
        Dependence::Photon => "Poisson-Gaussian",
        Dependence::Curve => "brightness-dependent Gaussian",
    };
    if correlated {
        format!("correlated {}", base.trim_start_matches("white "))
    } else {
        base.to_string()
    }
}

/// The plain sentence for a fitted model; `unfit` when too few smooth areas were found to see a
/// dependence on brightness; `curve_set_aside` when one was seen but the noise is grainy.
pub fn explain(
    dependence: Dependence,
    correlated: bool,
    unfit: bool,
    curve_set_aside: bool,
    channels: &[ChannelNoise],
    planes: &[PlaneNoise],
) -> String {
    let mut s = String::new();
    match dependence {
        Dependence::None if curve_set_aside => {
            let r = channels.iter().map(|c| c.level_function.curve_ratio()).fold(0.0, f64::max);
            s.push_str(&format!(
                "The noise's fine grain changes with brightness (its variance by up to {r:.1} times), but in \
                 grainy noise that fine grain is what compression left, not the noise, so one level is used"
            ));
        }
        Dependence::None if unfit => {
            s.push_str("Smooth areas were found at too few brightness levels to see whether the noise changes with brightness, so one level is used")
        }
        Dependence::Photon => {
            let g = channels.iter().filter_map(|c| c.photon).map(|p| p.gain).sum::<f64>() / channels.len().max(1) as f64;
            s.push_str(&format!(
                "The noise grows with brightness in a straight line (about {g:.3} grey levels per photon), so it \
                 is treated as photon noise with read noise and evened out before filtering"
            ));
        }
        Dependence::Curve => {
            let r = channels.iter().map(|c| c.level_function.curve_ratio()).fold(0.0, f64::max);
            s.push_str(&format!(
                "The noise changes with brightness (its variance by up to {r:.1} times between dark and bright \
                 areas, as a camera's tone curve makes it), so it is evened out with the measured curve before filtering"
            ));
        }
        Dependence::None => s.push_str("The noise is about as strong in dark and bright areas, so one level is used"),
    }
    if correlated {
        let r = planes.iter().map(|p| p.colour_ratio).fold(0.0, f64::max);
        s.push_str(&format!(
            "; it is grainy rather than fine (low frequencies carry {r:.1} times the noise of high ones, as after \
             demosaicing or compression), so each frequency gets its own threshold."
        ));
    } else {
        s.push_str("; it is fine-grained (white), so all frequencies share one threshold.");
    }
    s
}

impl NoiseLevelFunction {
    /// The intercept of a line of given slope through the used points (weighted as in the fit).
    pub fn constant_intercept(&self, slope: f64) -> f64 {
        let (mut s, mut n) = (0.0, 0.0);
        for p in self.points.iter().filter(|p| p.used) {
            let w = p.blocks as f64 / p.variance.max(1e-12).powi(2);
            s += w * (p.variance - slope * p.mean);
            n += w;
        }
        if n > 0.0 {
            s / n
        } else {
            self.intercept
        }
    }
}
