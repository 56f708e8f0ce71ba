//! One run from start to end: noise model -> colour transform -> method -> inverse transforms.
//! Works on a decoded [`Image`] and never alters it.

use crate::color;
use crate::error::{Error, Result};
use crate::error_estimate::{self, ErrorEstimate, PixelVariance, Probe};
use crate::methods::{self, MethodOutput};
use crate::metrics::{self, ResidualStats};
use crate::noise::clip::ClipInverse;
use crate::noise::model::{self, ChannelNoise, Dependence, NoiseReport, PlaneNoise};
use crate::noise::nlf::NoiseLevelFunction;
use crate::noise::spectrum::{self, NoiseSpectrum};
use crate::noise::vst::{CurveVst, Stabiliser};
use crate::noise::{self, NoiseEstimate};
use crate::patch::Group;
use crate::planes::{Image, Plane};
use crate::progress::{Labelled, Progress, SubProgress};
use crate::settings::{Method, NoiseModel, Settings, Sigma};
use serde::{Deserialize, Serialize};
use std::borrow::Cow;

/// What a run did: method, noise model and level, residual checks, optional error estimate.
#[derive(Clone, Debug, Serialize)]
pub struct RunReport {
    /// The method's name.
    pub method: &'static str,
    /// The model the settings asked for ("auto" lets the fit choose; see `noise`).
    pub noise_model: NoiseModel,
    /// The model used, fitted or given, with its reasons.
    pub noise: NoiseReport,
    /// True when the method worked on stabilised photon noise.
    pub stabilised: bool,
    /// Sigma the method used, in the working domain (grey levels; the stabilised domain for Poisson).
    pub sigma_used: f64,
    /// True when sigma was estimated from the image, not given.
    pub sigma_was_estimated: bool,
    /// Per input colour channel.
    pub noise_estimates: Vec<NoiseEstimate>,
    /// Per input colour channel, in the working domain.
    pub residual: Vec<ResidualStats>,
    /// Solver iterations or polynomial order summed over channels and passes (pixel graph; 0
    /// otherwise).
    pub work_units: usize,
    /// The result's error estimated without a reference, when asked for ([`denoise_estimated`]).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error_estimate: Option<ErrorEstimate>,
    /// A slice of a stack denoised as a volume: how many neighbouring slices lent their patches.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub slices_joined: Option<usize>,
}

/// A run's result: the image, its report and, for the pixel graph, its cut map.
pub struct RunOutput {
    /// The denoised image, in the input's bit depth and channels.
    pub image: Image,
    /// What the run did.
    pub report: RunReport,
    /// The pixel graph's cut map (fraction of cut edges per pixel), when the method has one.
    pub cut_map: Option<Plane>,
}

fn map_plane(p: &Plane, f: impl Fn(f64) -> f64) -> Plane {
    Plane { width: p.width, height: p.height, data: p.data.iter().map(|v| f(f64::from(*v)) as f32).collect() }
}

/// Noise estimates per channel of the input image, in its grey levels.
pub fn estimate_noise(img: &Image) -> Vec<NoiseEstimate> {
    let top = f64::from(img.max_value());
    img.channels.iter().map(|c| noise::estimate(c, Some(top))).collect()
}

/// The one rule for a blind sigma: the mean over channels of each channel's chosen estimate.
pub fn blind_sigma(estimates: &[NoiseEstimate]) -> f64 {
    estimates.iter().map(|e| e.chosen()).sum::<f64>() / estimates.len().max(1) as f64
}

/// An image made ready for a method: the noise model applied (`working`: the image's own planes,
/// borrowed, unless photon noise is stabilised), with the range the method works with and the
/// fitted model (sigma, transforms, noise report). [`method_planes`] gives the planes a method takes.
#[derive(Clone)]
pub struct Prepared<'a> {
    /// The noise model, fitted or given.
    pub model: Fitted,
    /// The planes the methods work on (stabilised or clip-corrected where needed).
    pub working: Cow<'a, [Plane]>,
    /// The peak value of the working planes.
    pub range: f64,
}

impl Prepared<'_> {
    /// The same, holding its own copy of the working planes (to be kept beside other slices').
    pub fn into_owned(self) -> Prepared<'static> {
        Prepared { working: Cow::Owned(self.working.into_owned()), ..self }
    }

    /// Per method plane, the noise spectra when the noise is correlated.
    pub fn spectra(&self) -> Option<Vec<NoiseSpectrum>> {
        self.model.noise.planes.iter().map(|p| p.spectrum.clone()).collect()
    }

    /// The noise variance of the luminance (first) method plane, as matching sees it.
    pub fn luma_level(&self) -> f64 {
        self.model.noise.planes.first().filter(|p| p.spectrum.is_some()).map_or(self.model.sigma, |p| p.level)
    }
}

fn opponent_if_colour(planes: &[Plane]) -> Vec<Plane> {
    if planes.len() == 3 {
        color::to_opponent(planes)
    } else {
        planes.to_vec()
    }
}

/// A colour picture's luminance noise is read as at most this many times its colour noise (the
/// geometric mean of the two opponent colour planes' levels). A colour sensor's noise is
/// independent from photosite to photosite, so after demosaicing every opponent plane carries
/// it: the bench's camera protocol puts the luminance at 1.1 to 2.1 times the colour noise in the
/// file, and the fit reads 1.6 to 2.8 on the development JPEGs. Fine texture that fills a picture
/// is mostly luminance and raises only that plane's spectrum (stained tissue read 5.9, fur 5.2).
/// A camera's own colour noise reduction raises the honest ratio too, so the limit is not tight.
/// Measured (blind; mean dB against the tuned peer, or change against no limit), plain camera
/// JPEGs of the development set / of the four more images / the same with the colour planes
/// smoothed (Gaussian std 2, 14 JPEGs): no limit +0.50 / -0.52 / 0; 3 +0.50 / +0.10 / -0.06
/// (retina smoothed -1.19); 3.5 +0.50 / -0.06 / +0.12 (worst -0.24); 4 +0.50 / -0.21 / 0.
const LUMA_PER_CHROMA: f64 = 3.5;
/// Colour planes whose noise is below this share of the luminance's carry none of their own (a
/// grey picture saved as colour, whose colour planes are exactly 0): no limit is drawn from them.
/// A guard of ours, not tuned: the bench's colour JPEGs sit at 0.15 to 0.6.
const MIN_CHROMA_SHARE: f64 = 0.05;

/// The grainy luminance noise is read as at most this many times the fine-grain level of the
/// calmest blocks (Immerkaer's operator), colour or grey. Demosaicing and compression thin the fine
/// grain but leave some; texture that fills a picture raises the grainy level without it, and a
/// grey picture has no colour planes to show that. Measured, the ratio after the colour limit:
/// 3.3 to 9.6 on every camera JPEG of the bench whose level is read right (grey pictures made
/// from them up to 8.6) and on the grainy rows 5.1 to 8.3; the stained tissue made grey 21 and 13,
/// the cat made grey 18 (levels read 3 to 6 times the noise in the file). Blind, dB against no
/// limit over 60 JPEGs and grainy images: 10 changes only those three and a built grey astronaut
/// (+0.8 to +5.3; the tissue was 7 dB below its input); 9 the same and a grey coffee +0.25; 8
/// more (+0.32 mean) but the grey astronaut at 8.6 -0.06; 7 -0.26; 6 -0.60. 10 keeps a margin
/// for JPEGs compressed harder than the bench's quality 90, which thin the grain more.
const FINE_GRAIN_LIMIT: f64 = 10.0;

/// Why the luminance level was lowered.
#[derive(Clone, Copy, Debug, PartialEq)]
enum LimitBy {
    /// [`LUMA_PER_CHROMA`] times the colour noise.
    Colour,
    /// [`FINE_GRAIN_LIMIT`] times the fine grain.
    FineGrain,
}

/// The luminance level before and after a limit, and which one acted (the lower, when both).
#[derive(Clone, Copy, Debug, PartialEq)]
struct Limit {
    from: f64,
    to: f64,
    by: LimitBy,
}

/// Limits the luminance spectrum (the first plane: grey, or the first of three opponent planes)
/// to [`LUMA_PER_CHROMA`] times the colour planes' noise and to [`FINE_GRAIN_LIMIT`] times `fine`,
/// its fine-grain level; says which acted when one did.
fn limit_luma(spectra: &mut [NoiseSpectrum], fine: f64) -> Option<Limit> {
    let level = |s: &NoiseSpectrum| s.pixel_variance().sqrt();
    let from = level(spectra.first()?);
    let colour = match spectra {
        [_, c1, c2] => {
            let chroma = (level(c1) * level(c2)).sqrt();
            (chroma >= MIN_CHROMA_SHARE * from).then_some(LUMA_PER_CHROMA * chroma)
        }
        _ => None,
    };
    let grain = (fine > 0.0).then_some(FINE_GRAIN_LIMIT * fine);
    let (to, by) = match (colour, grain) {
        (Some(c), Some(g)) if g < c => (g, LimitBy::FineGrain),
        (Some(c), _) => (c, LimitBy::Colour),
        (None, Some(g)) => (g, LimitBy::FineGrain),
        (None, None) => return None,
    };
    if from <= to {
        return None;
    }
    spectra[0] = NoiseSpectrum { texture_suspected: true, ..spectra[0].scaled_to(to * to) };
    Some(Limit { from, to, by })
}

/// The correlated noise of the method planes: each plane's noise, the run's sigma, and the
/// luminance limit when one acted ([`limit_luma`]).
type Correlated = (Vec<PlaneNoise>, f64, Option<Limit>);

/// Spectra of the method planes at the patch side the run will use, when the noise is correlated
/// (one plane's low frequencies carry more than [`spectrum::COLOURED_RATIO`] times its high ones).
/// None when the image is too small to tell.
fn correlated_noise(working: &[Plane], range: f64, settings: &Settings) -> Option<Correlated> {
    let planes = opponent_if_colour(working);
    let at = |k: usize| -> Option<Vec<NoiseSpectrum>> {
        crate::planes::per_plane(&planes, |p| spectrum::estimate(p, k)).into_iter().collect()
    };
    let mut first = at(8)?;
    if !first.iter().any(NoiseSpectrum::is_coloured) {
        return None;
    }
    let fine = crate::noise::immerkaer::sigma_calm_blocks(&planes[0]);
    let mut limited = limit_luma(&mut first, fine);
    // The planes' root mean square level: the opponent transform is orthonormal, so this is the
    // noise of each input channel in its own grey levels (the mean of the levels was not: a grey
    // picture saved as colour, whose noise is all luminance, read a third of its own).
    let sigma_of =
        |sp: &[NoiseSpectrum]| (sp.iter().map(NoiseSpectrum::pixel_variance).sum::<f64>() / sp.len() as f64).sqrt();
    let k = methods::patch_graph::profile(&settings.patch_graph, sigma_of(&first) * 255.0 / range).patch;
    let spectra = if k == 8 {
        first
    } else {
        let mut sp = at(k)?;
        limited = limit_luma(&mut sp, fine);
        sp
    };
    let sigma = sigma_of(&spectra);
    let planes = spectra
        .into_iter()
        .map(|s| PlaneNoise { level: s.pixel_variance().sqrt(), colour_ratio: s.colour_ratio(), spectrum: Some(s) })
        .collect();
    Some((planes, sigma, limited))
}

/// Whether the luminance noise is grainy (correlated). Then a brightness curve is not used: it is
/// measured on the fine grain (a high-pass detail band), and in grainy noise that grain is what
/// compression left, which depends on brightness through the quantiser and the scene, not only
/// through the noise. Measured (blind, dB, curve used -> one level): camera JPEGs made grey, four
/// scenes at shots 0.002 / 0.008: astronaut 33.79 -> 36.14 and 30.41 -> 31.89 (the first was
/// 2.3 dB below its input), motorcycle +0.53 / +0.43, coffee 0 / -0.13, chelsea 0 / +0.08; the
/// colour JPEGs of the bench where a curve had been chosen: coffee +0.13, chelsea -0.04, tissue
/// +0.10, motorcycle -0.02 / -0.09, colour-smoothed motorcycle +0.02 / -0.07. Photon noise
/// (a straight line) keeps its model.
fn grainy(channels: &[Plane]) -> bool {
    let luma = match channels {
        [_, _, _] => Cow::Owned(color::luminance(channels)),
        [first, ..] => Cow::Borrowed(first),
        [] => return false,
    };
    spectrum::estimate(&luma, 8).is_some_and(|s| s.is_coloured())
}

/// Colour channels whose white levels differ by more than this factor are scaled to one level
/// (measured: white noise of one level gives at most 1.1 on the development set's colour images).
const CHANNEL_SPREAD: f64 = 1.3;

/// The root mean square noise std over the image in grey levels: the working domain's level
/// carried back through each channel's variance curve (sampled every 7th pixel).
fn mean_level(img: &Image, channels: &[ChannelNoise], dependence: Dependence, planes: &[PlaneNoise]) -> f64 {
    let working_var = planes.iter().map(|p| p.level * p.level).sum::<f64>() / planes.len().max(1) as f64;
    if dependence == Dependence::None {
        return working_var.sqrt();
    }
    let (mut s, mut n) = (0.0, 0usize);
    for (c, ch) in img.channels.iter().zip(channels) {
        for v in c.data.iter().step_by(7) {
            let y = f64::from(*v);
            // d/dy of the transform is 1 / sqrt(curve): a unit of working variance is curve(y) grey levels^2.
            s += match ch.photon {
                Some(p) => (p.gain * (y - p.offset) + p.read_noise * p.read_noise).max(0.0),
                None => ch.level_function.curve_variance(y),
            };
            n += 1;
        }
    }
    (working_var * s / n.max(1) as f64).sqrt()
}

/// The planes the methods work on, and their peak value: the image's own, or stabilised.
fn working_planes<'a>(img: &'a Image, stabilisers: Option<&[Stabiliser]>) -> (Cow<'a, [Plane]>, f64) {
    let top = f64::from(img.max_value());
    match stabilisers {
        None => (Cow::Borrowed(img.channels.as_slice()), top),
        // The range of the stabilised domain, so sigma-relative parameters see the same scale.
        Some(st) => (
            Cow::Owned(img.channels.iter().zip(st).map(|(c, p)| map_plane(c, |v| p.forward(v))).collect()),
            st.iter().map(|p| p.forward(top)).fold(0.0, f64::max),
        ),
    }
}

/// What [`prepare`] fitted, without the planes: a page worker that finishes or checks a split run
/// gets it from the one that prepared, instead of fitting the noise again (same values, same
/// bytes).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Fitted {
    /// Per input channel, when the working domain is stabilised (photon noise or a measured curve).
    pub stabilisers: Option<Vec<Stabiliser>>,
    /// Per input channel, when the image is clipped at black or white and not stabilised.
    pub clip: Option<Vec<ClipInverse>>,
    /// The noise std in the working domain.
    pub sigma: f64,
    /// True when sigma was estimated, not given.
    pub estimated: bool,
    /// The noise estimate per input channel.
    pub estimates: Vec<NoiseEstimate>,
    /// The noise model used, fitted or given, with its reasons.
    pub noise: NoiseReport,
}

/// [`prepare`]'s result for `img` from a model it fitted before on the same image.
pub fn prepared_from(img: &Image, fitted: Fitted) -> Result<Prepared<'_>> {
    let n = img.channels.len();
    let fits = fitted.stabilisers.as_ref().is_none_or(|s| s.len() == n)
        && fitted.clip.as_ref().is_none_or(|c| c.len() == n)
        && fitted.estimates.len() == n
        && fitted.noise.planes.len() == n
        && fitted.sigma.is_finite();
    if !fits {
        return Err(Error::Internal("the fitted noise model does not belong to this image".into()));
    }
    let (working, range) = working_planes(img, fitted.stabilisers.as_deref());
    Ok(Prepared { model: fitted, working, range })
}

/// Validates the settings and prepares a run: the noise model (fitted or given), the
/// stabilising or clip-correcting transform, the working planes and sigma.
pub fn prepare<'a>(img: &'a Image, settings: &Settings) -> Result<Prepared<'a>> {
    settings.validate()?;
    let top = f64::from(img.max_value());
    let fitting = settings.noise == NoiseModel::Auto && settings.sigma.value().is_none();
    let functions = model::fit_channels(&img.channels, top);
    // Most channels must agree: one channel's dependence alone is too often texture or a colour cast.
    let most = |f: fn(&NoiseLevelFunction) -> bool| 2 * functions.iter().filter(|x| f(x)).count() > functions.len();
    let signal_dependent = most(NoiseLevelFunction::signal_dependent);
    let brightness_dependent = most(NoiseLevelFunction::brightness_dependent);
    let curve_set_aside = fitting && !signal_dependent && brightness_dependent && grainy(&img.channels);
    let dependence = match settings.noise {
        NoiseModel::Gaussian => Dependence::None,
        NoiseModel::Poisson => Dependence::Photon,
        NoiseModel::Auto if !fitting => Dependence::None,
        NoiseModel::Auto if signal_dependent => Dependence::Photon,
        NoiseModel::Auto if brightness_dependent && !curve_set_aside => Dependence::Curve,
        NoiseModel::Auto => Dependence::None,
    };
    let channels: Vec<ChannelNoise> = functions
        .into_iter()
        .map(|f| {
            let photon = (dependence == Dependence::Photon).then(|| model::photon_fit(&f, settings));
            ChannelNoise { level_function: f, photon, curve_used: dependence == Dependence::Curve }
        })
        .collect();
    // Colour channels with clearly different levels are scaled to one (a colour cast or white
    // balance makes one channel's noise far stronger; the opponent transform would mix them).
    // Correlated noise hides from high-pass estimates (compression removes its fine grain), so
    // where a channel's spectrum is correlated its level is the spectrum's.
    let channel_level = |c: &Plane| match spectrum::estimate(c, 8) {
        Some(sp) if sp.is_coloured() => sp.pixel_variance().sqrt(),
        _ => noise::chosen(c, Some(top)),
    };
    // With `noise: auto`, a sigma given by hand sets the strength of the noise the fit finds:
    // the colour channels' scaling and grainy noise's shape are kept, at that sigma (else a
    // lower sigma, the way to ask for gentler cleaning, would also turn grainy noise into white).
    // Photon and brightness-curve models are fitted only without it.
    let given = match settings.sigma {
        Sigma::Value(v) if settings.noise == NoiseModel::Auto => Some(v),
        _ => None,
    };
    let shaped = fitting || given.is_some();
    let levels: Vec<f64> = if shaped && img.channels.len() == 3 {
        crate::planes::per_plane(&img.channels, channel_level)
    } else {
        vec![1.0; img.channels.len()]
    };
    let mean_channel = levels.iter().sum::<f64>() / levels.len().max(1) as f64;
    let spread =
        levels.iter().copied().fold(0.0, f64::max) / levels.iter().copied().fold(f64::INFINITY, f64::min).max(1e-12);
    let scaled = shaped && dependence == Dependence::None && levels.len() == 3 && spread > CHANNEL_SPREAD;
    let stabilisers: Option<Vec<Stabiliser>> = match dependence {
        Dependence::None if scaled => {
            Some(levels.iter().map(|l| Stabiliser::Scale(mean_channel / l.max(1e-12))).collect())
        }
        Dependence::None => None,
        Dependence::Photon => {
            Some(channels.iter().filter_map(|c| c.photon.map(|p| Stabiliser::Photon(p.noise()))).collect())
        }
        Dependence::Curve => Some(
            channels
                .iter()
                .map(|c| Stabiliser::Curve(CurveVst::new(top, |y| c.level_function.curve_variance(y))))
                .collect(),
        ),
    };
    let (working, range) = working_planes(img, stabilisers.as_deref());
    let clip_top = if stabilisers.is_some() { None } else { Some(top) };
    let estimates: Vec<NoiseEstimate> = crate::planes::per_plane(&working, |p| noise::estimate(p, clip_top));
    let (mut sigma, estimated) = match settings.sigma {
        Sigma::Value(v) => (v, false),
        Sigma::Auto(_) => (blind_sigma(&estimates), true),
    };
    let correlated = if shaped { correlated_noise(&working, range, settings) } else { None };
    let (planes, limited) = match (correlated, given) {
        (Some((planes, s, _)), Some(v)) => {
            let f = v / s.max(1e-300);
            let scale = |p: PlaneNoise| PlaneNoise {
                level: p.level * f,
                spectrum: p.spectrum.map(|sp| {
                    let var = sp.pixel_variance() * f * f;
                    sp.scaled_to(var)
                }),
                ..p
            };
            (planes.into_iter().map(scale).collect(), None)
        }
        (Some((planes, s, limited)), None) => {
            sigma = s;
            (planes, limited)
        }
        (None, _) => (vec![PlaneNoise { level: sigma, colour_ratio: 1.0, spectrum: None }; working.len()], None),
    };
    let is_correlated = planes.iter().any(|p| p.spectrum.is_some());
    // One white level because the fit could not see a dependence (too few brightness levels),
    // not because it saw none.
    let unfit = dependence == Dependence::None && channels.iter().any(|c| !c.level_function.reliable);
    let fallback = (fitting && unfit).then(|| "the fit fell back to one white level".to_string());
    let sentence = if fitting {
        model::explain(dependence, is_correlated, unfit, curve_set_aside, &channels, &planes)
    } else if is_correlated {
        format!(
            "Grainy noise (low frequencies carry {:.1} times the noise of high ones), at the sigma the settings give: \
             each frequency keeps its share of the fitted noise.",
            planes[0].colour_ratio
        )
    } else {
        format!("{} noise, as the settings ask.", model::model_name(dependence, false))
    };
    let mean_level = mean_level(img, &channels, dependence, &planes);
    // Clipped noise biases results near black and white; undone for unstabilised noise.
    let clip: Option<Vec<ClipInverse>> = (dependence == Dependence::None
        && channels.iter().any(|c| c.level_function.clipping.low() || c.level_function.clipping.high()))
    .then(|| {
        channels
            .iter()
            .zip(&levels)
            .map(|(c, l)| {
                let k = c.level_function.clipping;
                let sigma = if scaled { mean_level * l / mean_channel } else { mean_level };
                ClipInverse::new(sigma, top, k.low(), k.high())
            })
            .collect()
    });
    let sentence = if scaled {
        format!(
            "{sentence} The colour channels carry different noise (std {:.1}, {:.1} and {:.1}), so each is scaled to one level first.",
            levels[0], levels[1], levels[2]
        )
    } else {
        sentence
    };
    // The limit acted on the luminance plane; the sentence gives the run's sigma before and after,
    // in the input's grey levels as the sigma boxes and reports show it.
    let limited = limited.map(|l| {
        let others: f64 = planes.iter().skip(1).map(|p| p.level * p.level).sum();
        let n = planes.len().max(1) as f64;
        Limit { from: ((l.from * l.from + others) / n).sqrt(), to: ((l.to * l.to + others) / n).sqrt(), ..l }
    });
    let sentence = match limited {
        Some(Limit { from, to, by: LimitBy::Colour }) => format!(
            "{sentence} The noise measured {from:.1} but is taken as {to:.1}, its brightness part held to {LUMA_PER_CHROMA} \
             times its colour part: a colour sensor's noise shows in colour too, so the rest is likely fine texture."
        ),
        Some(Limit { from, to, by: LimitBy::FineGrain }) => format!(
            "{sentence} The grainy noise measured {from:.1} but is taken as {to:.1}, its brightness part held to \
             {FINE_GRAIN_LIMIT} times its fine grain on the calmest areas: compression thins a noise's fine grain but leaves \
             some, so the rest is likely fine texture."
        ),
        None => sentence,
    };
    let sentence = if clip.is_some() {
        format!("{sentence} Near black or white, where the image is cut off, the result is corrected for the noise the cut removed.")
    } else {
        sentence
    };
    let noise = NoiseReport {
        clip_corrected: clip.is_some(),
        mean_level,
        model: model::model_name(dependence, is_correlated),
        fitted: fitting,
        sentence,
        channels,
        planes,
        fallback,
    };
    Ok(Prepared { model: Fitted { stabilisers, clip, sigma, estimated, estimates, noise }, working, range })
}

/// What `noise: "auto"` makes of an image, with the 8 x 8 spectrum of every method plane (white
/// or not), for reports and the page.
pub struct NoiseFit {
    /// The fitted model, with its reasons.
    pub report: NoiseReport,
    /// The 8 x 8 noise spectrum of each method plane; None where the noise is white.
    pub spectra_8: Vec<Option<NoiseSpectrum>>,
    /// The sigma a run with these settings uses (its working domain: grey levels unless photon
    /// or brightness-curve noise is stabilised).
    pub sigma: f64,
}

/// The noise model of an image as `prepare` makes it: fitted where the settings say auto, the
/// parameters they give taken as given.
pub fn fit_noise(img: &Image, settings: &Settings) -> Result<NoiseFit> {
    let p = prepare(img, settings)?;
    let spectra_8 = method_planes(&p).iter().map(|q| spectrum::estimate(q, 8)).collect();
    Ok(NoiseFit { sigma: p.model.sigma, report: p.model.noise, spectra_8 })
}

/// The planes a method works on: the working planes, colour ones in the opponent space
/// (luminance first).
pub fn method_planes(p: &Prepared) -> Vec<Plane> {
    opponent_if_colour(&p.working)
}

/// The settings' method on method planes, with the prepared sigma, range and noise spectra.
pub fn run_method(
    planes_in: &[Plane],
    prepared: &Prepared,
    settings: &Settings,
    progress: &dyn Progress,
) -> Result<MethodOutput> {
    let (sigma, range) = (prepared.model.sigma, prepared.range);
    match settings.method {
        Method::PixelGraph => methods::pixel_graph::denoise(planes_in, sigma, range, &settings.pixel_graph, progress),
        Method::PatchGraph => {
            let spectra = prepared.spectra();
            methods::patch_graph::denoise(planes_in, sigma, range, &settings.patch_graph, spectra.as_deref(), progress)
        }
    }
}

/// Denoises an image with the settings: prepare, the method, finish (inverse transforms, residual
/// checks). Progress is reported and cancellation honoured through `progress`.
pub fn denoise(img: &Image, settings: &Settings, progress: &dyn Progress) -> Result<RunOutput> {
    let prepared = prepare(img, settings)?;
    let planes_in = method_planes(&prepared);
    progress.report(0.02, "preparing");
    let sub = SubProgress { parent: progress, start: 0.05, span: 0.9 };
    let output = run_method(&planes_in, &prepared, settings, &sub)?;
    drop(planes_in);
    let out = finish(img, settings, prepared, output)?;
    progress.report(1.0, "done");
    Ok(out)
}

/// A run followed by a second pass on the input plus a small probe, with the noise model of the
/// first kept, and the result's error estimated from the two ([`error_estimate`]). The first pass
/// takes the first half of the progress. Where the estimate does not hold (correlated noise), the
/// second pass is skipped and the report says why.
pub fn denoise_estimated(img: &Image, settings: &Settings, progress: &dyn Progress) -> Result<RunOutput> {
    let prepared = prepare(img, settings)?;
    let probe_input = probe_planes(img, &prepared);
    let span = if probe_input.is_none() { 0.9 } else { 0.45 };
    let planes_in = method_planes(&prepared);
    progress.report(0.02, "preparing");
    let output = run_method(&planes_in, &prepared, settings, &SubProgress { parent: progress, start: 0.05, span })?;
    drop(planes_in);
    let probed = match probe_input {
        Some(planes) => {
            let sub = SubProgress { parent: progress, start: 0.5, span };
            let named = Labelled { parent: &sub, start: 0.0, span: 1.0, label: "error estimate".into() };
            Some(run_method(&planes, &prepared, settings, &named)?.planes)
        }
        None => None,
    };
    let estimate = estimate_error(img, &prepared, output.planes.clone(), probed);
    let mut out = finish(img, settings, prepared, output)?;
    out.report.error_estimate = Some(estimate);
    progress.report(1.0, "done");
    Ok(out)
}

/// The method planes of the probe's input (the image plus a small +-1 pattern), under the model
/// fitted on the image; None where the estimate does not hold.
pub fn probe_planes(img: &Image, prepared: &Prepared) -> Option<Vec<Plane>> {
    if error_estimate::not_applicable(img, prepared).is_some() {
        return None;
    }
    Some(prepared.method_planes_of(&Probe::for_run(prepared).perturbed(img)))
}

/// The error estimate from a run's method planes and the probe pass's (None: not applicable).
pub fn estimate_error(
    img: &Image,
    prepared: &Prepared,
    result: Vec<Plane>,
    probed: Option<Vec<Plane>>,
) -> ErrorEstimate {
    let top = f64::from(img.max_value());
    // The same check as before the pass (one box filter per channel), so the page's split run and
    // the one-call run give the same answer.
    if let Some(why) = error_estimate::not_applicable(img, prepared) {
        return ErrorEstimate::none(why, top);
    }
    let Some(probed) = probed else {
        return ErrorEstimate::none("the second pass was not run".into(), top);
    };
    let result = img.with_channels(prepared.image_planes(result));
    let probed = img.with_channels(prepared.image_planes(probed));
    let var = PixelVariance::of(prepared, top);
    let e =
        error_estimate::estimate(img, &result, &probed, &Probe::for_run(prepared), &var, prepared.model.clip.is_some());
    if prepared.model.estimated {
        e.for_estimated_level()
    } else {
        e
    }
}

/// Colour planes from a method's planes (opponent back to RGB; grey planes as they are).
fn colour_back(planes: Vec<Plane>) -> Vec<Plane> {
    if planes.len() == 3 {
        color::from_opponent(&planes)
    } else {
        planes
    }
}

/// Working-domain channel planes back to the image's grey levels: the stabiliser's inverse, then
/// the correction for clipped noise.
fn model_back(planes: Vec<Plane>, stabilisers: Option<&[Stabiliser]>, clip: Option<&[ClipInverse]>) -> Vec<Plane> {
    match (stabilisers, clip) {
        (None, None) => planes,
        (None, Some(ci)) => planes.iter().zip(ci).map(|(p, c)| map_plane(p, |d| c.apply(d))).collect(),
        (Some(st), None) => planes.iter().zip(st).map(|(p, n)| map_plane(p, |d| n.inverse(d))).collect(),
        (Some(st), Some(ci)) => {
            planes.iter().zip(st).zip(ci).map(|((p, n), c)| map_plane(p, |d| c.apply(n.inverse(d)))).collect()
        }
    }
}

impl Prepared<'_> {
    /// The method planes of another image of the same size under this model, not refitted: what
    /// the error estimate's second pass denoises.
    pub fn method_planes_of(&self, img: &Image) -> Vec<Plane> {
        let working: Vec<Plane> = match &self.model.stabilisers {
            None => img.channels.clone(),
            Some(st) => img.channels.iter().zip(st).map(|(c, p)| map_plane(c, |v| p.forward(v))).collect(),
        };
        opponent_if_colour(&working)
    }

    /// A method's planes back to the image's channels in its grey levels, as [`finish`] does.
    pub fn image_planes(&self, planes: Vec<Plane>) -> Vec<Plane> {
        model_back(colour_back(planes), self.model.stabilisers.as_deref(), self.model.clip.as_deref())
    }
}

/// The method's planes back to the image: inverse colour transform and noise model, residual checks.
/// A result holding a value that is not a number is an error, never a file (such values would
/// be written as black).
pub fn finish(img: &Image, settings: &Settings, prepared: Prepared<'_>, output: MethodOutput) -> Result<RunOutput> {
    if output.planes.iter().any(|p| p.data.iter().any(|v| !v.is_finite())) {
        return Err(Error::Internal(
            "the method's result holds values that are not numbers; nothing was written".into(),
        ));
    }
    let Prepared { model: Fitted { stabilisers, clip, sigma, estimated, estimates, noise }, working, .. } = prepared;
    let MethodOutput { planes, cut_map, work_units } = output;
    // The method's planes go as soon as they are converted: large images hold one copy at a time.
    let planes = colour_back(planes);
    let residual = working.iter().zip(&planes).map(|(n, d)| metrics::residual_stats(n, d, sigma)).collect();
    drop(working);
    let stabilised = stabilisers.is_some();
    let out_planes = model_back(planes, stabilisers.as_deref(), clip.as_deref());
    Ok(RunOutput {
        image: img.with_channels(out_planes),
        report: RunReport {
            method: settings.method.name(),
            noise_model: settings.noise,
            noise,
            stabilised,
            sigma_used: sigma,
            sigma_was_estimated: estimated,
            noise_estimates: estimates,
            residual,
            work_units,
            error_estimate: None,
            slices_joined: None,
        },
        cut_map,
    })
}

/// Sigma for drawing the residual (input minus result) in the input's grey levels: the sigma
/// used, or for photon noise, whose sigma lives in the stabilised domain, the input's own blind
/// estimate.
pub fn residual_view_sigma(img: &Image, report: &RunReport) -> f64 {
    if report.stabilised {
        blind_sigma(&estimate_noise(img))
    } else {
        report.sigma_used
    }
}

/// Inspection: the patch group around pixel (x, y) exactly as a patch-graph run would match it
/// (same noise model, colour transform and sigma), with the patch side.
pub fn group_at(img: &Image, settings: &Settings, x: usize, y: usize) -> Result<(Group, usize)> {
    let p = prepare(img, settings)?;
    let luma = method_planes(&p).swap_remove(0);
    let spectra = p.spectra();
    let s = &settings.patch_graph;
    let spectrum = spectra.as_ref().and_then(|sp| sp.first());
    let group = methods::patch_graph::group_at(&luma, spectrum, p.model.sigma, p.luma_level(), p.range, s, x, y)?;
    Ok((group, methods::patch_graph::profile(s, p.model.sigma * 255.0 / p.range).patch))
}
