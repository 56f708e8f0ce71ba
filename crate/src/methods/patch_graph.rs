//! The collaborative method: groups of similar patches (SSIM block matching) filtered together in
//! a 3-D transform, the 2-D DCT within each patch and the graph Fourier basis of the group's
//! similarity graph across patches. Two stages, as in block-matching collaborative filtering
//! (K. Dabov, A. Foi, V. Katkovnik and K. Egiazarian, IEEE TIP 2007): hard thresholding for a basic
//! estimate, then matching again on it and empirical Wiener shrinkage.
//!
//! References are processed in tiles; each tile reads its crop of the image (the references plus
//! the search radius and a patch) and returns an accumulator that is summed into the result, so any
//! tiling gives the same output up to float rounding, and tiles can run in parallel. Tiles are
//! gathered in bands of rows (see [`super::bands`]), which bound memory and are the unit of work
//! the page hands to its workers.

use super::bands::{self, Assembler, Band};
use super::MethodOutput;
use crate::error::{Error, Result};
use crate::noise::spectrum::NoiseSpectrum;
use crate::patch::aggregate::{kaiser_window, Accumulator};
use crate::patch::guide::noise_lag_covariance;
use crate::patch::matching::{match_groups, match_groups_across, patch_ssim, MatchParams};
use crate::patch::overlap::{coefficient_correlation, mean_share};
use crate::patch::transform::{combine_rows, dct2, dct_matrix, graph_fourier_rows, idct2};
use crate::patch::Group;
use crate::planes::Plane;
use crate::progress::{check, Progress, SubProgress};
use crate::settings::{GroupGraph, PatchGraphSettings};
use crate::synth::exp_same_everywhere;

/// Parameters of one run after the noise-dependent profile is applied.
#[derive(Clone, Copy, Debug)]
pub struct Profile {
    /// Patch side in pixels.
    pub patch: usize,
    /// Distance between reference patches.
    pub step: usize,
    /// Half-size of the search window.
    pub search: usize,
    /// Group size of the first (hard-threshold) stage.
    pub group1: usize,
    /// Group size of the second (Wiener) stage.
    pub group2: usize,
    /// Hard threshold, in noise stds.
    pub lambda: f64,
    /// Least SSIM to the reference for a candidate to be grouped.
    pub min_similarity: f64,
    /// Kaiser window shape parameter of the aggregation.
    pub beta: f64,
    /// Side of a tile of references processed together.
    pub tile: usize,
    /// How the graph across a group is weighted.
    pub group_graph: GroupGraph,
}

/// Patch size 0 means "by noise level": 8, or 12 above sigma 40 on the 8-bit scale, where larger
/// patches match more reliably (the same switch as Dabov et al.'s high-noise profile).
pub fn profile(s: &PatchGraphSettings, sigma8: f64) -> Profile {
    let patch = if s.patch_size == 0 {
        if sigma8 > 40.0 {
            12
        } else {
            8
        }
    } else {
        s.patch_size as usize
    };
    Profile {
        patch,
        step: s.step as usize,
        search: s.search_radius as usize,
        group1: s.group_size_hard as usize,
        group2: s.group_size_wiener as usize,
        lambda: s.threshold,
        min_similarity: s.min_similarity,
        beta: 2.0,
        tile: s.tile_size as usize,
        group_graph: s.group_graph,
    }
}

/// Reference corners along one axis: every `step`, plus the last position so borders are covered.
pub(crate) fn ref_axis(n: usize, k: usize, step: usize) -> Vec<usize> {
    let last = n - k;
    let mut v: Vec<usize> = (0..=last).step_by(step.max(1)).collect();
    if v.last() != Some(&last) {
        v.push(last);
    }
    v
}

/// The planes of a tile's crop (per slice, own first, then per channel) with the 2-D DCT of each
/// patch made once, however many groups it joins (a patch joins several neighbouring references'
/// groups, and the flat-group test transforms candidates on its own).
struct TileSpectra<'a> {
    planes: &'a [Vec<Plane>],
    k: usize,
    /// Per (slice, channel, corner): 1 + the patch's index in `data`, 0 while not transformed.
    slot: std::cell::RefCell<Vec<u32>>,
    data: std::cell::RefCell<Vec<f32>>,
    /// The patch copied out and the transform's intermediate, reused by every transform.
    scratch: std::cell::RefCell<(Vec<f32>, Vec<f32>)>,
}

impl<'a> TileSpectra<'a> {
    fn new(planes: &'a [Vec<Plane>], k: usize) -> Self {
        let corners = planes.first().and_then(|s| s.first()).map_or(0, |p| p.width * p.height);
        let channels = planes.first().map_or(0, Vec::len);
        TileSpectra {
            planes,
            k,
            slot: std::cell::RefCell::new(vec![0; planes.len() * channels * corners]),
            data: std::cell::RefCell::new(Vec::new()),
            scratch: std::cell::RefCell::new((vec![0.0; k * k], vec![0.0; k * k])),
        }
    }

    /// Without the cache, for a look at one group of a whole image (whose corner table would be
    /// as large as the image).
    fn uncached(planes: &'a [Vec<Plane>], k: usize) -> Self {
        TileSpectra {
            planes,
            k,
            slot: std::cell::RefCell::new(Vec::new()),
            data: std::cell::RefCell::new(Vec::new()),
            scratch: std::cell::RefCell::new((vec![0.0; k * k], vec![0.0; k * k])),
        }
    }

    /// Writes the DCT of the patch at (x, y) of `slice`'s channel `ch` into `out`.
    fn coeffs(&self, dct: &[f32], slice: usize, ch: usize, (x, y): (usize, usize), out: &mut [f32]) {
        let (k, kk) = (self.k, self.k * self.k);
        let plane = &self.planes[slice][ch];
        let corners = plane.width * plane.height;
        let at = (slice * self.planes[0].len() + ch) * corners + y * plane.width + x;
        let transform = |out: &mut [f32]| {
            let mut scratch = self.scratch.borrow_mut();
            let (buf, tmp) = &mut *scratch;
            for r in 0..k {
                buf[r * k..(r + 1) * k].copy_from_slice(&plane.data[(y + r) * plane.width + x..][..k]);
            }
            dct2(dct, k, buf, out, tmp);
        };
        let mut slot = self.slot.borrow_mut();
        if slot.is_empty() {
            return transform(out);
        }
        let mut data = self.data.borrow_mut();
        if slot[at] == 0 {
            let start = data.len();
            data.resize(start + kk, 0.0);
            transform(&mut data[start..]);
            slot[at] = (start / kk + 1) as u32;
        }
        let start = (slot[at] as usize - 1) * kk;
        out.copy_from_slice(&data[start..start + kk]);
    }
}

/// Copies the rectangle [x0, x0 + w) x [y0, y0 + h) of a plane.
fn crop(p: &Plane, x0: usize, y0: usize, w: usize, h: usize) -> Plane {
    let mut data = Vec::with_capacity(w * h);
    for y in y0..y0 + h {
        data.extend_from_slice(&p.data[y * p.width + x0..y * p.width + x0 + w]);
    }
    Plane { width: w, height: h, data }
}

/// Low-frequency DCT coefficients (u + v <= 3) used for the group graph's weights: the coarse
/// structure of a patch, which noise disturbs least.
fn low_freq_indices(k: usize) -> Vec<usize> {
    (0..k * k).filter(|&i| i / k + i % k <= 3).collect()
}

/// Weights of the group graph from the patches' low-frequency DCT parts (the coarse structure,
/// which noise disturbs least). `noise` is the noise variance summed over those coefficients
/// (DC included), `noisy` whether the coefficients carry it (stage 1) or come from the cleaner
/// basic estimate (stage 2).
fn group_weights(
    flat: &[f32],
    k: usize,
    lf: &[usize],
    range: f64,
    noise: f64,
    noisy: bool,
    kind: GroupGraph,
) -> Vec<f64> {
    let coeffs: Vec<&[f32]> = flat.chunks(k * k).collect();
    let n = coeffs.len();
    let mut w = vec![0.0; n * n];
    let mut set = |i: usize, j: usize, v: f64| {
        w[i * n + j] = v;
        w[j * n + i] = v;
    };
    match kind {
        GroupGraph::Uniform => (0..n).for_each(|i| (i + 1..n).for_each(|j| set(i, j, 1.0))),
        GroupGraph::NoiseTested => {
            let (scale, expected) = tested_expectation(noise, lf.len(), noisy);
            // The low frequencies gathered once per patch, not once per pair.
            let m = lf.len();
            let low: Vec<f64> = coeffs.iter().flat_map(|c| lf.iter().map(|&f| f64::from(c[f]))).collect();
            for i in 0..n {
                for j in i + 1..n {
                    let d: f64 = low[i * m..(i + 1) * m]
                        .iter()
                        .zip(&low[j * m..(j + 1) * m])
                        .map(|(a, b)| (a - b).powi(2))
                        .sum();
                    // Not f64::exp: native and wasm builds must give the same bits (see synth).
                    set(i, j, exp_same_everywhere(-(d - expected).max(0.0) / (TESTED_SCALE * scale)));
                }
            }
        }
        GroupGraph::Similarity => {
            let kk = (k * k) as f64;
            let c1 = (0.01 * range).powi(2);
            let c2 = (0.03 * range).powi(2);
            // Mean from the DC coefficient (sum / k); variance and covariance from the other low
            // frequencies, with their noise taken out of the variances.
            let nv = if noisy { (noise - noise / lf.len() as f64) / kk } else { 0.0 };
            let mean: Vec<f64> = coeffs.iter().map(|c| f64::from(c[0]) / k as f64).collect();
            let var: Vec<f64> = coeffs
                .iter()
                .map(|c| (lf[1..].iter().map(|&i| f64::from(c[i]).powi(2)).sum::<f64>() / kk - nv).max(0.0))
                .collect();
            for i in 0..n {
                for j in i + 1..n {
                    let cov =
                        lf[1..].iter().map(|&f| f64::from(coeffs[i][f]) * f64::from(coeffs[j][f])).sum::<f64>() / kk;
                    set(i, j, patch_ssim(mean[i], mean[j], var[i], var[j], cov, c1, c2).max(0.0));
                }
            }
        }
    }
    w
}

/// Two noisy patches of the same structure differ by 2 x the noise on average; only the excess
/// over that is structure, measured in units of the same noise. Returns (that unit, the largest
/// difference the noise alone explains): the expected difference plus a margin of three of its
/// own stds (a chi-square of `terms` terms: relative std sqrt(2 / terms)), so that a flat group's
/// weights are all exactly 1 rather than 1 less a little noise, whose eigenvectors would follow it.
fn tested_expectation(noise: f64, terms: usize, noisy: bool) -> (f64, f64) {
    let scale = 2.0 * noise.max(1e-12);
    let margin = 4.5 * (2.0 / terms as f64).sqrt() * scale;
    (scale, if noisy { scale + margin } else { margin })
}

fn lf_distance(a: &[f32], b: &[f32], lf: &[usize]) -> f64 {
    lf.iter().map(|&f| (f64::from(a[f]) - f64::from(b[f])).powi(2)).sum()
}

/// Groups may grow to this multiple of the group size where the noise cannot tell the extra
/// candidates from the reference (the noise-tested and the fixed basis alike): averaging more of them can
/// only remove noise. On the development set (blind, sigma 10/25/50): +0.09/+0.13/+0.12 dB on
/// average, up to +0.6 dB on smooth images (where tuned peers led), -0.5 dB at worst on the star
/// field (still 5 dB ahead of them). Fixed groups of 32 did worse on both counts; growing in
/// stage 1 only, or testing the whole patch, kept less of the gain without sparing the stars.
const FLAT_GROWTH: usize = 2;

/// In stage 1, a group that grew ([`FLAT_GROWTH`]) and whose graph frequencies past the first
/// hold no more energy than the noise explains has its threshold there raised by up to this factor
/// (2.7 -> 3.3): such a group's signal is its mean patch, and with twice the coefficients twice
/// as many noise coefficients pass the usual threshold, which is the faint "worm" texture left
/// on flat areas. Measured blind on the development set: see DEVELOPERS.md.
const FLAT_THRESHOLD: f32 = 1.222;

/// The energy test of [`FLAT_THRESHOLD`]: noise alone gives m = (n - 1) k^2 unit-variance
/// coefficients past the first graph frequency, so their sum is m with std sqrt(2 m); the raise
/// is half at m + this many stds, whole two stds below, none two above (beyond, the group holds
/// structure: texture that passed the low-frequency test).
const FLAT_ENERGY_STDS: f64 = 3.0;

/// The stage-1 threshold factor of a group's graph frequencies past the first, from its
/// [`flatness`].
fn flat_threshold_factor(flat: f64, grown: bool) -> f32 {
    if grown {
        1.0 + (FLAT_THRESHOLD - 1.0) * flat as f32
    } else {
        1.0
    }
}

/// How flat a group is, 0 to 1, from its transformed coefficients `t` (n rows of k^2) and the
/// per-coefficient noise variances: 1 where its graph frequencies past the first hold no more
/// energy than the noise explains, 0 from [`FLAT_ENERGY_STDS`] stds above that.
fn flatness(t: &[f32], inv_var: &[f64], kk: usize) -> f64 {
    if t.len() <= kk {
        return 1.0;
    }
    let energy: f64 =
        t[kk..].chunks(kk).flat_map(|row| row.iter().zip(inv_var).map(|(v, i)| f64::from(v * v) * i)).sum();
    let (m, sd) = ((t.len() - kk) as f64, (2.0 * (t.len() - kk) as f64).sqrt());
    // A ramp, not a step: the result then moves continuously with the input, as the error
    // estimate's probe assumes (a step read coffee at sigma 50 0.43 dB high).
    ((m + (FLAT_ENERGY_STDS + 2.0) * sd - energy) / ((FLAT_ENERGY_STDS + 1.0) * sd)).clamp(0.0, 1.0)
}

/// How much of the shared noise of a group's mean patch ([`MeanNoise`]) each stage counts, times
/// the group's [`flatness`]: in full, textured groups lost detail (the fine texture a hard
/// threshold at the mean's true noise removes); counted only in flat groups, and in the Wiener
/// stage at half (its gains follow the basic estimate, and in full cost the fur and tissue
/// camera JPEGs 0.2 dB more). Measured on both development sets (DEVELOPERS.md).
const SHARED_NOISE_COUNTED: [f32; 2] = [1.0, 0.5];

/// How far (pixels) from a reference's position its neighbouring slices are searched. Slices of a
/// stack are in register, so a structure continues near where it is.
pub const SLICE_SEARCH: usize = 6;

/// How fast a noise-tested weight falls with the excess difference, in units of twice the noise.
const TESTED_SCALE: f64 = 4.0;

/// The noise of one plane per coefficient of the k x k patch transform: variance, the hard
/// threshold (lambda std) and the variance relative to sigma^2 (exactly 1 for white noise, so the
/// white case computes what a single sigma would).
struct CoeffNoise {
    var: Vec<f32>,
    /// 1 / max(var, 1e-12), for [`flatness`]: a product per coefficient of every group costs
    /// less than a quotient (5% of a grey run; the outputs kept their bytes on all 100 inputs of
    /// the development and real-noise sets).
    inv_var: Vec<f64>,
    thr: Vec<f32>,
    rel: Vec<f64>,
    /// Which of the stage's correlation tables ([`coefficient_correlation`]) this plane's noise has.
    table: usize,
}

/// The noise of a group's mean patch (its first graph frequency) per coefficient, as
/// [`CoeffNoise`] has it for one patch. Patches that overlap, or lie close under grainy noise,
/// share noise, so their mean keeps more of it than 1 / n: sum over pairs of u0_i u0_i'
/// rho_f(d_ii') times a patch's variance ([`mean_share`]). The group's other graph frequencies
/// then hold less than a patch's, which is left as it is (lowering their thresholds to match cost
/// the smooth micrograph 0.9 dB under grainy noise).
struct MeanNoise {
    var: Vec<f32>,
    thr: Vec<f32>,
    rel: Vec<f64>,
}

impl MeanNoise {
    /// `share` per coefficient ([`mean_share`]), `counted` how much of its excess over 1 to take.
    fn new(cn: &CoeffNoise, share: &[f32], counted: f32, n: usize) -> Self {
        // A table from a truncated covariance need not be positive definite: keep the share in
        // the range a variance ratio can have.
        let m: Vec<f32> = share.iter().map(|s| 1.0 + counted * (s.clamp(MIN_SHARE, n as f32) - 1.0)).collect();
        MeanNoise {
            var: cn.var.iter().zip(&m).map(|(v, m)| v * m).collect(),
            thr: cn.thr.iter().zip(&m).map(|(t, m)| t * m.sqrt()).collect(),
            rel: cn.rel.iter().zip(&m).map(|(r, m)| r * f64::from(*m)).collect(),
        }
    }
}

/// The least share of a patch's noise the mean patch is taken to keep.
const MIN_SHARE: f32 = 0.05;

impl CoeffNoise {
    fn new(k: usize, sigma: f64, lambda: f64, spectrum: Option<&NoiseSpectrum>, table: usize) -> Self {
        // A plane without noise (the chroma of a grey picture saved as colour) measures a
        // spectrum of zeros; the floor keeps the Wiener gain 0 / 0 from becoming NaN.
        let floor = 1e-6 * sigma * sigma;
        let std: Vec<f64> = match spectrum {
            Some(s) => s.variances.iter().map(|v| v.max(floor).sqrt()).collect(),
            None => vec![sigma; k * k],
        };
        let sigma2 = sigma * sigma;
        CoeffNoise {
            var: std.iter().map(|s| (s * s) as f32).collect(),
            inv_var: std.iter().map(|s| 1.0 / f64::from((s * s) as f32).max(1e-12)).collect(),
            thr: std.iter().map(|s| (lambda * s) as f32).collect(),
            rel: std.iter().map(|s| if sigma2 > 0.0 { s * s / sigma2 } else { 1.0 }).collect(),
            table,
        }
    }
}

/// Shared, read-only data of one stage. The planes are a window of full-width rows
/// [y0, y0 + height) of an image `full_height` rows tall: the whole image natively, one band's
/// rows in a page worker.
pub struct Stage<'a> {
    noisy: &'a [Plane],
    /// The basic estimate (stage 2) or None (stage 1).
    basic: Option<&'a [Plane]>,
    y0: usize,
    full_height: usize,
    sigma: f64,
    range: f64,
    prof: Profile,
    dct: Vec<f32>,
    window: Vec<f32>,
    lf: Vec<usize>,
    /// Per plane.
    noise: Vec<CoeffNoise>,
    /// The correlation tables the planes' noise has ([`CoeffNoise::table`]): one for white noise.
    correlation: Vec<Vec<f32>>,
    /// Noise variance of a luminance patch (matching), and summed over its low-frequency
    /// coefficients, DC included (group graph).
    match_var: f64,
    lf_var: f64,
    /// The matched plane's noise covariance by lag (see [`MatchParams::noise_cov`]); empty for
    /// white noise.
    noise_cov: Vec<f64>,
    /// Neighbouring slices of a stack (each with the planes of `noisy`, and of `basic` in stage
    /// 2), whose patches join the groups but are not written: see [`Stage::with_slices`].
    context: Vec<&'a [Plane]>,
    context_basic: Vec<&'a [Plane]>,
    /// Stage 1 under correlated noise: what matching compares instead of the noisy luminance
    /// (own slice first, then the neighbours; empty: the luminance itself). See [`matching_guide`].
    guides: Vec<&'a Plane>,
}

impl<'a> Stage<'a> {
    /// Stage 1 when `basic` is None, stage 2 otherwise. Checks the image is large enough.
    /// `spectra` (one per plane, at the profile's patch side) describe correlated noise; None
    /// means white noise of std `sigma`.
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        noisy: &'a [Plane],
        basic: Option<&'a [Plane]>,
        y0: usize,
        full_height: usize,
        sigma: f64,
        range: f64,
        s: &PatchGraphSettings,
        spectra: Option<&[NoiseSpectrum]>,
    ) -> Result<Self> {
        let first = noisy.first().ok_or_else(|| Error::Internal("no channels to denoise".into()))?;
        let prof = profile(s, sigma * 255.0 / range);
        if first.width < prof.patch || full_height < prof.patch {
            return Err(Error::TooSmall(format!(
                "the patch-graph method needs at least {0} x {0} pixels; use the pixel-graph method",
                prof.patch
            )));
        }
        let rows_ok = y0 + first.height <= full_height
            && noisy
                .iter()
                .chain(basic.into_iter().flatten())
                .all(|p| p.width == first.width && p.height == first.height);
        if !rows_ok || basic.is_some_and(|b| b.len() != noisy.len()) {
            return Err(Error::Internal("the planes of a stage do not line up".into()));
        }
        let k = prof.patch;
        if spectra
            .is_some_and(|sp| sp.len() != noisy.len() || sp.iter().any(|x| x.k != k || x.variances.len() != k * k))
        {
            return Err(Error::Internal("the noise spectra do not fit the planes and patch size".into()));
        }
        // One table per distinct spectrum (planes of a grey picture saved as colour share one).
        let mut correlation = Vec::new();
        let mut seen: Vec<Option<&NoiseSpectrum>> = Vec::new();
        let mut noise = Vec::with_capacity(noisy.len());
        for c in 0..noisy.len() {
            let sp = spectra.map(|sp| &sp[c]);
            let table = match seen.iter().position(|s| s.map(|x| &x.variances) == sp.map(|x| &x.variances)) {
                Some(t) => t,
                None => {
                    let lag_cov = sp.map(|x| noise_lag_covariance(x, false));
                    correlation.push(coefficient_correlation(k, lag_cov.as_deref()));
                    seen.push(sp);
                    seen.len() - 1
                }
            };
            noise.push(CoeffNoise::new(k, sigma, prof.lambda, sp, table));
        }
        let lf = low_freq_indices(k);
        let (match_var, lf_var) = match spectra {
            Some(sp) => (sp[0].pixel_variance(), lf.iter().map(|&i| sp[0].variances[i]).sum::<f64>()),
            None => (sigma * sigma, sigma * sigma * lf.len() as f64),
        };
        // Stage 2 matches on the basic estimate, whose remaining noise is not measured.
        let noise_cov = match (spectra, basic) {
            (Some(sp), None) => noise_lag_covariance(&sp[0], true),
            _ => Vec::new(),
        };
        Ok(Stage {
            noisy,
            basic,
            y0,
            full_height,
            sigma,
            range,
            prof,
            dct: dct_matrix(prof.patch),
            window: kaiser_window(prof.patch, prof.beta),
            lf,
            noise,
            correlation,
            match_var,
            lf_var,
            noise_cov,
            context: Vec::new(),
            context_basic: Vec::new(),
            guides: Vec::new(),
        })
    }

    /// Adds neighbouring slices of a stack (the same rows and planes as this stage's; in stage 2
    /// with their basic estimates too): their patches join the groups, matched within
    /// [`SLICE_SEARCH`] pixels of the reference's position, and only the stage's own slice is
    /// written. The result of a slice then depends on the slices around it, never the reverse.
    pub fn with_slices(mut self, noisy: Vec<&'a [Plane]>, basic: Vec<&'a [Plane]>) -> Result<Self> {
        let own = &self.noisy[0];
        let fits = |set: &[Plane]| {
            set.len() == self.noisy.len() && set.iter().all(|p| p.width == own.width && p.height == own.height)
        };
        let basic_ok = if self.basic.is_some() { basic.len() == noisy.len() } else { basic.is_empty() };
        if noisy.len() > usize::from(u8::MAX) || !basic_ok || !noisy.iter().chain(&basic).all(|s| fits(s)) {
            return Err(Error::Internal("the neighbouring slices do not line up with the stage's planes".into()));
        }
        self.context = noisy;
        self.context_basic = basic;
        Ok(self)
    }

    /// Stage 1: matching compares these planes (the same rows as the stage's, own slice first,
    /// then one per neighbouring slice) instead of the noisy luminance; see [`matching_guide`].
    pub fn with_guides(mut self, guides: Vec<&'a Plane>) -> Result<Self> {
        let own = &self.noisy[0];
        let fits = guides.iter().all(|g| g.width == own.width && g.height == own.height);
        if !guides.is_empty() && (self.basic.is_some() || guides.len() != 1 + self.context.len() || !fits) {
            return Err(Error::Internal("the matching guides do not line up with the stage's planes".into()));
        }
        self.guides = guides;
        Ok(self)
    }

    /// The profile this stage runs with.
    pub fn profile(&self) -> Profile {
        self.prof
    }

    fn group_size(&self) -> usize {
        if self.basic.is_some() {
            self.prof.group2
        } else {
            self.prof.group1
        }
    }

    /// The most candidates matching keeps: the group size, grown where the noise cannot tell
    /// candidates apart ([`FLAT_GROWTH`]), by half again in a stack, whose neighbouring slices
    /// offer more such candidates ([`Stage::with_slices`]).
    fn match_cap(&self) -> usize {
        let cap = self.group_size() * if self.prof.group_graph.grows_flat_groups() { FLAT_GROWTH } else { 1 };
        if self.context.is_empty() {
            cap
        } else {
            cap + cap / 2
        }
    }

    /// Processes the references of one tile (image coordinates); returns its accumulator, in image
    /// coordinates, over the tile's crop (crop coordinates inside).
    fn tile(&self, refs: &[(usize, usize)], progress: &dyn Progress) -> Result<Accumulator> {
        #[cfg(target_arch = "x86_64")]
        if crate::simd::wide() {
            // SAFETY: the processor has AVX2 and FMA (checked at run time by `wide`).
            return unsafe { self.tile_wide(refs, progress) };
        }
        self.tile_body(refs, progress)
    }

    /// [`Stage::tile`] compiled for AVX2 and FMA (see [`crate::simd`]).
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    fn tile_wide(&self, refs: &[(usize, usize)], progress: &dyn Progress) -> Result<Accumulator> {
        self.tile_body(refs, progress)
    }

    #[inline(always)]
    fn tile_body(&self, refs: &[(usize, usize)], progress: &dyn Progress) -> Result<Accumulator> {
        let w = self.noisy[0].width;
        let k = self.prof.patch;
        let s = self.prof.search;
        let (rx0, ry0) = refs.iter().fold((usize::MAX, usize::MAX), |a, r| (a.0.min(r.0), a.1.min(r.1)));
        let (rx1, ry1) = refs.iter().fold((0, 0), |a, r| (a.0.max(r.0), a.1.max(r.1)));
        let (x0, y0) = (rx0.saturating_sub(s), ry0.saturating_sub(s));
        let (x1, y1) = ((rx1 + s + k).min(w), (ry1 + s + k).min(self.full_height));
        let (cw, ch) = (x1 - x0, y1 - y0);
        if y0 < self.y0 || y1 > self.y0 + self.noisy[0].height {
            return Err(Error::Internal("a tile reaches outside its band's rows".into()));
        }
        let wy = y0 - self.y0;
        let cut = |set: &[Plane]| -> Vec<Plane> { set.iter().map(|p| crop(p, x0, wy, cw, ch)).collect() };
        // Per slice (the stage's own first, then its neighbours), the cropped planes.
        let noisy: Vec<Vec<Plane>> = std::iter::once(self.noisy).chain(self.context.iter().copied()).map(cut).collect();
        let basic: Option<Vec<Vec<Plane>>> =
            self.basic.map(|b| std::iter::once(b).chain(self.context_basic.iter().copied()).map(cut).collect());
        let guide_crops: Vec<Plane> = self.guides.iter().map(|g| crop(g, x0, wy, cw, ch)).collect();
        let guides: Vec<&Plane> = if guide_crops.is_empty() {
            basic.as_ref().unwrap_or(&noisy).iter().map(|set| &set[0]).collect()
        } else {
            guide_crops.iter().collect()
        };
        let local: Vec<(usize, usize)> = refs.iter().map(|&(x, y)| (x - x0, y - y0)).collect();
        let mp = MatchParams {
            patch: k,
            search: s,
            max_group: self.match_cap(),
            min_similarity: self.prof.min_similarity,
            range: self.range,
            noise_var: if basic.is_some() { 0.0 } else { self.match_var },
            step: self.prof.step,
            noise_cov: &self.noise_cov,
        };
        let sub = SubProgress { parent: progress, start: 0.0, span: 0.5 };
        let groups = match_groups_across(guides[0], &guides[1..], SLICE_SEARCH, &local, &mp, &sub)?;
        let mut acc = Accumulator::new(x0, y0, cw, ch, self.noisy.len());
        let noisy = TileSpectra::new(&noisy, k);
        let basic = basic.as_deref().map(|b| TileSpectra::new(b, k));
        for (g, group) in groups.iter().enumerate() {
            if g % 64 == 0 {
                check(progress)?;
                progress.report(0.5 + 0.5 * g as f32 / groups.len() as f32, "filtering groups");
            }
            self.filter_group(group, &noisy, basic.as_ref(), &mut acc);
        }
        Ok(acc)
    }

    /// 2-D DCT of patches `range` of a group in plane `ch` of their slices, patch i at
    /// [i k^2, (i+1) k^2).
    fn patch_coeffs_of(
        &self,
        spectra: &TileSpectra,
        ch: usize,
        group: &Group,
        range: std::ops::Range<usize>,
    ) -> Vec<f32> {
        let kk = self.prof.patch * self.prof.patch;
        let mut out = vec![0.0f32; range.len() * kk];
        for (i, g) in range.enumerate() {
            spectra.coeffs(&self.dct, group.slice(g), ch, group.positions[g], &mut out[i * kk..(i + 1) * kk]);
        }
        out
    }

    /// How many of the group's patches (best first) to keep: the group size, and beyond it only
    /// candidates the noise cannot tell from the reference ([`FLAT_GROWTH`]). `plane` is the one
    /// the group graph is built from; candidates are transformed one at a time, only while they pass.
    fn keep_count(&self, slices: &TileSpectra, group: &Group, noisy: bool) -> usize {
        let base = self.group_size();
        let n = group.len();
        if n <= base || !self.prof.group_graph.grows_flat_groups() {
            return n.min(base);
        }
        let (_, expected) = tested_expectation(self.lf_var, self.lf.len(), noisy);
        let reference = self.patch_coeffs_of(slices, 0, group, 0..1);
        (base..n)
            .find(|&i| lf_distance(&reference, &self.patch_coeffs_of(slices, 0, group, i..i + 1), &self.lf) > expected)
            .unwrap_or(n)
    }

    /// `noisy` and `basic`: per slice (own first), the planes of the tile's crop.
    #[inline(always)]
    fn filter_group(&self, group: &Group, noisy: &TileSpectra, basic: Option<&TileSpectra>, acc: &mut Accumulator) {
        let k = self.prof.patch;
        let kk = k * k;
        let sigma2 = self.sigma * self.sigma;
        let n = match basic {
            Some(b) => self.keep_count(b, group, false),
            None => self.keep_count(noisy, group, true),
        };
        let channels = self.noisy.len();
        let noisy_c: Vec<Vec<f32>> = (0..channels).map(|c| self.patch_coeffs_of(noisy, c, group, 0..n)).collect();
        let basic_c: Option<Vec<Vec<f32>>> =
            basic.map(|b| (0..channels).map(|c| self.patch_coeffs_of(b, c, group, 0..n)).collect());
        // The group graph comes from the cleanest luminance available.
        let graph_src = match &basic_c {
            Some(b) => &b[0],
            None => &noisy_c[0],
        };
        // u[i n + j]: entry i of the j-th graph Fourier vector.
        let u: Vec<f32> = if n > 1 {
            let weights = group_weights(
                graph_src,
                k,
                &self.lf,
                self.range,
                self.lf_var,
                basic_c.is_none(),
                self.prof.group_graph,
            );
            graph_fourier_rows(&weights, n)
        } else {
            vec![1.0]
        };
        // Forward across the group: T_j = sum_i u_ij C_i (rows of k^2 coefficients).
        let across = |c: &[f32]| -> Vec<f32> {
            let mut t = vec![0.0f32; n * kk];
            for (j, row) in t.chunks_mut(kk).enumerate() {
                combine_rows(row, &c[..n * kk], &u[j..], n);
            }
            t
        };
        let mut filtered: Vec<Vec<f32>> = Vec::with_capacity(channels);
        let mut weight_den = 0.0f64;
        let counted = SHARED_NOISE_COUNTED[usize::from(basic_c.is_some())];
        // Per correlation table, the group's mean-patch share, made when a plane first needs it.
        let mut shares: Vec<Option<Vec<f32>>> = vec![None; self.correlation.len()];
        for ch in 0..channels {
            let mut t = across(&noisy_c[ch]);
            let cn = &self.noise[ch];
            let flat = flatness(&t, &cn.inv_var, kk);
            // Where none of the shared noise is counted (a single patch, a group with structure),
            // the mean patch has a patch's noise: the same values without the pairs' sums.
            let weight = counted * flat as f32;
            let mean = (n > 1 && weight > 0.0).then(|| {
                let share = shares[cn.table].get_or_insert_with(|| {
                    let mut out = vec![0.0f32; kk];
                    let (rho, pos) = (&self.correlation[cn.table], &group.positions[..n]);
                    mean_share(rho, k, pos, |i| group.slice(i), |i| u[i * n], &mut out);
                    out
                });
                MeanNoise::new(cn, share, weight, n)
            });
            // Row 0 (the mean patch) with its own noise, the other graph frequencies a patch's.
            let row_noise = |j: usize| match (&mean, j) {
                (Some(m), 0) => (&m.var, &m.thr, &m.rel),
                _ => (&cn.var, &cn.thr, &cn.rel),
            };
            match &basic_c {
                None => {
                    let raise = flat_threshold_factor(flat, n > self.group_size());
                    let mut kept = 0.0f64;
                    // Row by row (graph frequency j), so no coefficient pays for an index division.
                    for (j, row) in t.chunks_mut(kk).enumerate() {
                        let (_, thr, rel) = row_noise(j);
                        let factor = if j == 0 { 1.0 } else { raise };
                        for (f, v) in row.iter_mut().enumerate() {
                            // The group's mean patch DC always stays.
                            if (j == 0 && f == 0) || v.abs() >= thr[f] * factor {
                                kept += rel[f];
                            } else {
                                *v = 0.0;
                            }
                        }
                    }
                    weight_den += kept;
                }
                Some(b) => {
                    let tb = across(&b[ch]);
                    let mut gsum = 0.0f32;
                    for (j, (row, row_b)) in t.chunks_mut(kk).zip(tb.chunks(kk)).enumerate() {
                        let (var, _, rel) = row_noise(j);
                        for (f, (v, vb)) in row.iter_mut().zip(row_b).enumerate() {
                            let g = vb * vb / (vb * vb + var[f]);
                            *v *= g;
                            gsum += g * g * rel[f] as f32;
                        }
                    }
                    weight_den += f64::from(gsum);
                }
            }
            filtered.push(t);
        }
        // Stage 1: 1 / (sum of the kept coefficients' noise variances); stage 2: 1 / sum g^2 var.
        let weight = (1.0 / (sigma2 * weight_den.max(1e-12))) as f32;
        // Inverse across the group (C_i = sum_j u_ij T_j), the inverse 2-D DCT, then aggregation.
        let (mut coeff, mut tmp) = (vec![0.0f32; kk], vec![0.0f32; kk]);
        let mut patch = vec![vec![0.0f32; kk]; channels];
        // After hard thresholding most of a group's coefficients are zero: the inverse then runs
        // over the kept ones alone, in the same order per coefficient (j ascending), so the sums
        // are the dense loop's bit for bit (a zero term adds nothing).
        let kept: Vec<Option<Vec<(usize, usize, f32)>>> = filtered
            .iter()
            .map(|t| {
                let nz: Vec<(usize, usize, f32)> = t
                    .chunks(kk)
                    .enumerate()
                    .flat_map(|(j, row)| {
                        row.iter().enumerate().filter(|(_, v)| **v != 0.0).map(move |(f, v)| (j, f, *v))
                    })
                    .collect();
                (nz.len() * 4 < t.len()).then_some(nz)
            })
            .collect();
        for (i, &(x, y)) in group.positions.iter().take(n).enumerate() {
            // Patches of neighbouring slices helped filter; only the own slice is written.
            if group.slice(i) != 0 {
                continue;
            }
            for (ch, t) in filtered.iter().enumerate() {
                coeff.iter_mut().for_each(|v| *v = 0.0);
                match &kept[ch] {
                    Some(nz) => nz.iter().for_each(|&(j, f, v)| coeff[f] += u[i * n + j] * v),
                    None => combine_rows(&mut coeff, t, &u[i * n..], 1),
                }
                idct2(&self.dct, k, &coeff, &mut patch[ch], &mut tmp);
            }
            let refs: Vec<&[f32]> = patch.iter().map(|p| p.as_slice()).collect();
            acc.add(x, y, k, &refs, &self.window, weight);
        }
    }

    /// Runs the tiles of one band (in parallel natively) and returns the band's accumulator over
    /// its rows [band.y0, band.y1), full width.
    pub fn run_band(&self, band: &Band, progress: &dyn Progress) -> Result<Accumulator> {
        let w = self.noisy[0].width;
        let k = self.prof.patch;
        let xs = ref_axis(w, k, self.prof.step);
        let ys: Vec<usize> = ref_axis(self.full_height, k, self.prof.step)
            .into_iter()
            .filter(|&y| y >= band.ref_y0 && y < band.ref_y1)
            .collect();
        let t = self.prof.tile.max(1);
        let mut tiles: Vec<Vec<(usize, usize)>> = Vec::new();
        for ty in (band.ref_y0..band.ref_y1).step_by(t) {
            for tx in (0..w).step_by(t) {
                let refs: Vec<(usize, usize)> = ys
                    .iter()
                    .filter(|&&y| y >= ty && y < ty + t)
                    .flat_map(|&y| xs.iter().filter(|&&x| x >= tx && x < tx + t).map(move |&x| (x, y)))
                    .collect();
                if !refs.is_empty() {
                    tiles.push(refs);
                }
            }
        }
        let done = std::sync::atomic::AtomicUsize::new(0);
        let total = tiles.len();
        let one = |refs: &Vec<(usize, usize)>| -> Result<Accumulator> {
            let acc = self.tile(refs, &crate::progress::NoProgress)?;
            let d = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
            check(progress)?;
            progress.report(d as f32 / total as f32, "filtering groups");
            Ok(acc)
        };
        #[cfg(feature = "parallel")]
        let parts: Vec<Result<Accumulator>> = {
            use rayon::prelude::*;
            tiles.par_iter().map(one).collect()
        };
        #[cfg(not(feature = "parallel"))]
        let parts: Vec<Result<Accumulator>> = tiles.iter().map(one).collect();
        let mut acc = Accumulator::new(0, band.y0, w, band.y1 - band.y0, self.noisy.len());
        for part in parts {
            acc.absorb(&part?);
        }
        Ok(acc)
    }
}

/// What stage-1 matching compares under correlated noise: the luminance (the first plane) with its
/// noise half whitened by its spectrum where the area is calm (see [`crate::patch::guide`]); None
/// for white noise (no spectrum) or an image smaller than a block. Computed on the whole image, so
/// every band and tile reads the same values.
pub fn matching_guide(planes: &[Plane], spectra: Option<&[NoiseSpectrum]>) -> Option<Plane> {
    crate::patch::guide::matching_guide(planes.first()?, spectra?.first()?)
}

/// Runs one stage over the whole image band by band, assembling rows as soon as no later band
/// can add to them, so only a few bands' accumulators exist at once.
pub fn run_stage(stage: &Stage, progress: &dyn Progress) -> Result<Vec<Plane>> {
    let plan = bands::plan(stage.noisy[0].width, stage.full_height, &stage.prof, bands::NATIVE_BAND_ROWS);
    let mut assembler = Assembler::new(&plan, stage.noisy);
    for (i, band) in plan.iter().enumerate() {
        let sub = SubProgress { parent: progress, start: i as f32 / plan.len() as f32, span: 1.0 / plan.len() as f32 };
        assembler.add(i, stage.run_band(band, &sub)?)?;
    }
    assembler.finish()
}

/// The patch-graph method on whole planes: both stages over bands of rows (natively in parallel),
/// `spectra` giving each plane's noise spectrum where the noise is correlated.
pub fn denoise(
    planes: &[Plane],
    sigma: f64,
    max_value: f64,
    s: &PatchGraphSettings,
    spectra: Option<&[NoiseSpectrum]>,
    progress: &dyn Progress,
) -> Result<MethodOutput> {
    let first = planes.first().ok_or_else(|| Error::Internal("no channels to denoise".into()))?;
    if sigma <= 0.0 {
        return Ok(MethodOutput { planes: planes.to_vec(), cut_map: None, work_units: 0 });
    }
    let guide = matching_guide(planes, spectra);
    let stage1 =
        Stage::new(planes, None, 0, first.height, sigma, max_value, s, spectra)?.with_guides(guide.iter().collect())?;
    let basic = run_stage(&stage1, &SubProgress { parent: progress, start: 0.0, span: 0.45 })?;
    let stage2 = Stage::new(planes, Some(&basic), 0, first.height, sigma, max_value, s, spectra)?;
    let out = run_stage(&stage2, &SubProgress { parent: progress, start: 0.45, span: 0.55 })?;
    progress.report(1.0, "done");
    Ok(MethodOutput { planes: out, cut_map: None, work_units: 0 })
}

/// Inspection: the stage-1 group of the reference patch nearest to pixel (x, y) whose square covers
/// it, matched on the luminance plane as a run would (`spectrum`: its noise spectrum, None for
/// white noise; with one, matching reads the whitened guide, [`matching_guide`]; `luma_sigma`: the
/// luminance noise level, which differs from the run's `sigma` for correlated noise). Positions
/// are in image coordinates.
#[allow(clippy::too_many_arguments)]
pub fn group_at(
    luma: &Plane,
    spectrum: Option<&NoiseSpectrum>,
    sigma: f64,
    luma_sigma: f64,
    max_value: f64,
    s: &PatchGraphSettings,
    x: usize,
    y: usize,
) -> Result<Group> {
    let prof = profile(s, sigma * 255.0 / max_value);
    let k = prof.patch;
    if luma.width < k || luma.height < k || x >= luma.width || y >= luma.height {
        return Err(Error::TooSmall(format!("no patch of {k} x {k} pixels covers ({x}, {y}) in this image")));
    }
    // The reference corner on the run's grid closest to placing (x, y) at the patch centre.
    let nearest = |axis: Vec<usize>, v: usize| {
        let want = v.saturating_sub(k / 2);
        axis.into_iter().filter(|&a| a <= v && v < a + k).min_by_key(|&a| a.abs_diff(want)).unwrap_or(0)
    };
    let rx = nearest(ref_axis(luma.width, k, prof.step), x);
    let ry = nearest(ref_axis(luma.height, k, prof.step), y);
    let growth = if prof.group_graph.grows_flat_groups() { FLAT_GROWTH } else { 1 };
    let cov = spectrum.map(|sp| noise_lag_covariance(sp, true)).unwrap_or_default();
    let mp = MatchParams {
        patch: k,
        search: prof.search,
        max_group: prof.group1 * growth,
        min_similarity: prof.min_similarity,
        range: max_value,
        noise_var: luma_sigma * luma_sigma,
        step: prof.step,
        noise_cov: &cov,
    };
    // Matched where a run matches: on the whitened guide under grainy noise.
    let guide = spectrum.and_then(|sp| crate::patch::guide::matching_guide(luma, sp));
    let groups = match_groups(guide.as_ref().unwrap_or(luma), &[(rx, ry)], &mp, &crate::progress::NoProgress)?;
    let mut g = groups.into_iter().next().ok_or_else(|| Error::Internal("matching returned no group".into()))?;
    // The patches stage 1 keeps, as a run decides.
    let stage = Stage::new(
        std::slice::from_ref(luma),
        None,
        0,
        luma.height,
        sigma,
        max_value,
        s,
        spectrum.map(std::slice::from_ref),
    )?;
    let planes = [vec![luma.clone()]];
    let n = stage.keep_count(&TileSpectra::uncached(&planes, k), &g, true);
    g.truncate(n);
    Ok(g)
}
