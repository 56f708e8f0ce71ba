//! The serialisable, versioned settings of one run, with ranges and defaults. The same JSON is
//! read by the CLI (`--settings`), and will cross the wasm boundary and be exported by the page.

use crate::error::{Error, Result};
use crate::setting_fields::check;
use serde::{Deserialize, Serialize};

/// Bumped when a field changes meaning. Version 1 files (Gaussian noise by default, the photon
/// model's `poisson_gain` and `poisson_read_noise`) are read and carried over; others are refused.
pub const SETTINGS_VERSION: u32 = 2;

/// The denoising method. Under the `cli` feature it is also the CLI's `--method` value list.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "cli", derive(clap::ValueEnum))]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    /// Fast: a pixel graph cut at intensity edges, filtered in the vertex domain.
    PixelGraph,
    /// Best quality: groups of similar patches filtered together in a graph transform.
    PatchGraph,
}

impl Method {
    /// The method's name in settings files and on the command line.
    pub fn name(self) -> &'static str {
        self.info().name
    }
}

/// What the noise is taken to be. Under the `cli` feature it is also the CLI's `--noise` value list.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "cli", derive(clap::ValueEnum))]
#[serde(rename_all = "kebab-case")]
pub enum NoiseModel {
    /// Fit the noise from the image: white or correlated, Gaussian or photon noise.
    Auto,
    /// White Gaussian noise of one level (--sigma).
    Gaussian,
    /// Photon noise with read noise (--gain, --offset, --read-noise; each fitted when not given).
    Poisson,
}

/// "auto" (fitted from the image) or a number in the input's grey levels.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum AutoOr {
    /// A number in the input's grey levels.
    Value(f64),
    /// The word "auto".
    Auto(AutoWord),
}

/// The noise level: "auto" or a number.
pub type Sigma = AutoOr;

/// The one word that stands for "fitted from the image".
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum AutoWord {
    /// "auto".
    Auto,
}

impl AutoOr {
    /// The value "auto".
    pub const AUTO: AutoOr = AutoOr::Auto(AutoWord::Auto);

    /// The number given, if any.
    pub fn value(self) -> Option<f64> {
        match self {
            AutoOr::Value(v) => Some(v),
            AutoOr::Auto(_) => None,
        }
    }
}

/// The low-pass filter of the pixel-graph method.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum GraphFilter {
    /// (I + gamma L) x = y by conjugate gradient.
    Tikhonov,
    /// x = exp(-t L) y by a Chebyshev polynomial.
    Heat,
}

/// Which pixels the pixel graph joins.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PixelGraphKind {
    /// Every neighbour within `radius`, with edges cut across intensity discontinuities.
    CutGrid,
    /// Each pixel joined to its most similar pixels (by patch distance) in a 7 x 7 window.
    NonLocal,
}

/// Settings of the pixel-graph method (ranges in `setting_fields::FIELDS`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct PixelGraphSettings {
    /// Which pixels the graph joins.
    pub graph: PixelGraphKind,
    /// Tikhonov (solver) or heat kernel (polynomial).
    pub filter: GraphFilter,
    /// Multiplies the smoothing amount chosen from sigma (gamma or t): 1 is the tuned default.
    pub strength: f64,
    /// Weight scale h as a multiple of sigma.
    pub weight_scale: f64,
    /// Cut threshold tau as a multiple of sigma.
    pub cut_threshold: f64,
    /// Neighbour radius in pixels (1 = 8 neighbours).
    pub radius: u32,
    /// Radius of the patches compared to weigh an edge (0 = single pixels).
    pub patch_radius: u32,
    /// Graph passes: each later pass rebuilds the graph from the previous result.
    pub passes: u32,
    /// Gaussian pre-smoothing (pixels) of the first guide.
    pub guide_blur: f64,
}

impl Default for PixelGraphSettings {
    fn default() -> Self {
        PixelGraphSettings {
            graph: PixelGraphKind::CutGrid,
            filter: GraphFilter::Tikhonov,
            strength: 1.0,
            weight_scale: 0.4,
            cut_threshold: 2.0,
            radius: 1,
            patch_radius: 1,
            passes: 2,
            guide_blur: 0.6,
        }
    }
}

/// How the graph across a group of patches is weighted.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum GroupGraph {
    /// Weight 1 between two patches whose coarse structure differs by no more than the noise
    /// explains, falling off beyond: flat groups get a uniform graph, structured ones a graph.
    NoiseTested,
    /// The SSIM of the patches' coarse structure (version 1's only choice).
    Similarity,
    /// All weights 1: a fixed basis (the DCT across the group), for comparison. Its groups are
    /// the noise-tested graph's, grown where flat, so the two differ only in the basis.
    Uniform,
}

impl GroupGraph {
    /// Whether groups may grow where the noise cannot tell candidates apart: a matter of
    /// grouping, not of the basis, so the fixed basis shares it; version 1's similarity graph
    /// keeps its fixed group sizes (its files give version 1's results).
    pub fn grows_flat_groups(self) -> bool {
        self != GroupGraph::Similarity
    }
}

/// Settings of the patch-graph method (ranges in `setting_fields::FIELDS`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct PatchGraphSettings {
    /// Patch side in pixels; 0 chooses by noise level (8, or 12 above sigma 40 on the 8-bit scale).
    pub patch_size: u32,
    /// Distance between reference patches.
    pub step: u32,
    /// Half-size of the search window for similar patches.
    pub search_radius: u32,
    /// Most patches per group in the hard-thresholding stage.
    pub group_size_hard: u32,
    /// Most patches per group in the Wiener stage.
    pub group_size_wiener: u32,
    /// Hard threshold as a multiple of sigma.
    pub threshold: f64,
    /// Patches less similar than this SSIM to the reference are not grouped.
    pub min_similarity: f64,
    /// Side of a tile of reference positions, in pixels (memory per tile; results do not depend on it).
    pub tile_size: u32,
    /// How the graph across a group is weighted.
    pub group_graph: GroupGraph,
    /// Stacks (pages of one size: z or time): slices on each side of a page whose patches join
    /// its groups; 0 denoises every page alone. Single images are not affected.
    pub neighbour_slices: u32,
}

impl Default for PatchGraphSettings {
    fn default() -> Self {
        PatchGraphSettings {
            patch_size: 0,
            step: 4,
            search_radius: 12,
            group_size_hard: 16,
            group_size_wiener: 16,
            threshold: 2.7,
            min_similarity: 0.0,
            tile_size: 64,
            group_graph: GroupGraph::NoiseTested,
            neighbour_slices: 1,
        }
    }
}

/// Everything a run needs besides the image; JSON in settings files (version 2).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Settings {
    /// The settings format's version (2; version 1 files are carried over).
    pub version: u32,
    /// The denoising method.
    pub method: Method,
    /// The noise std, or "auto".
    pub sigma: Sigma,
    /// What the noise is taken to be.
    pub noise: NoiseModel,
    /// Grey levels per photon (photon noise); "auto" fits it from the image.
    pub gain: AutoOr,
    /// Black level: the grey level of no light; "auto" takes the darkest smooth area.
    pub offset: AutoOr,
    /// Gaussian read-noise std (grey levels) on top of the photon noise; "auto" fits it.
    pub read_noise: AutoOr,
    /// The pixel-graph method's settings.
    pub pixel_graph: PixelGraphSettings,
    /// The patch-graph method's settings.
    pub patch_graph: PatchGraphSettings,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            version: SETTINGS_VERSION,
            method: Method::PatchGraph,
            sigma: Sigma::AUTO,
            noise: NoiseModel::Auto,
            gain: AutoOr::AUTO,
            offset: AutoOr::AUTO,
            read_noise: AutoOr::AUTO,
            pixel_graph: PixelGraphSettings::default(),
            patch_graph: PatchGraphSettings::default(),
        }
    }
}

impl Settings {
    /// Parses JSON; unknown fields and wrong types are refused with serde's own location message.
    /// Version 1 files are carried over to version 2 first (see [`upgrade_v1`]).
    pub fn from_json(text: &str) -> Result<Settings> {
        let value: serde_json::Value = serde_json::from_str(text)
            .map_err(|e| Error::BadSettings(format!("the settings file is not valid: {e}")))?;
        Settings::from_value(value)
    }

    /// As [`Settings::from_json`], from settings already parsed (the page hands them over as an
    /// object): version 1 upgraded, every range checked.
    pub fn from_value(mut value: serde_json::Value) -> Result<Settings> {
        let bad = |e: serde_json::Error| Error::BadSettings(format!("the settings are not valid: {e}"));
        // Version 1 by its number, or a file without one that uses version 1's own fields.
        let v1_fields = ["poisson_gain", "poisson_read_noise"].iter().any(|f| value.get(f).is_some());
        let version = value.get("version").and_then(serde_json::Value::as_u64);
        if version == Some(1) || (version.is_none() && v1_fields) {
            upgrade_v1(&mut value);
        }
        let s: Settings = serde_json::from_value(value).map_err(bad)?;
        s.validate()?;
        Ok(s)
    }

    /// The settings as pretty JSON, as settings files are written.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_default()
    }

    /// Checks every range (`setting_fields`) and the version.
    pub fn validate(&self) -> Result<()> {
        if self.version != SETTINGS_VERSION {
            return Err(Error::BadSettings(format!(
                "settings version {} is not understood by this program (it reads version {SETTINGS_VERSION})",
                self.version
            )));
        }
        if let Sigma::Value(v) = self.sigma {
            check("sigma", v)?;
        }
        if let Some(v) = self.gain.value() {
            check("gain", v)?;
        }
        if let Some(v) = self.offset.value() {
            check("offset", v)?;
        }
        if let Some(v) = self.read_noise.value() {
            check("read_noise", v)?;
        }
        let p = &self.pixel_graph;
        check("pixel_graph.strength", p.strength)?;
        check("pixel_graph.weight_scale", p.weight_scale)?;
        check("pixel_graph.cut_threshold", p.cut_threshold)?;
        check("pixel_graph.radius", f64::from(p.radius))?;
        check("pixel_graph.patch_radius", f64::from(p.patch_radius))?;
        check("pixel_graph.passes", f64::from(p.passes))?;
        check("pixel_graph.guide_blur", p.guide_blur)?;
        let q = &self.patch_graph;
        check("patch_graph.patch_size", f64::from(q.patch_size))?;
        check("patch_graph.step", f64::from(q.step))?;
        check("patch_graph.search_radius", f64::from(q.search_radius))?;
        check("patch_graph.group_size_hard", f64::from(q.group_size_hard))?;
        check("patch_graph.group_size_wiener", f64::from(q.group_size_wiener))?;
        check("patch_graph.threshold", q.threshold)?;
        check("patch_graph.min_similarity", q.min_similarity)?;
        check("patch_graph.tile_size", f64::from(q.tile_size))?;
        check("patch_graph.neighbour_slices", f64::from(q.neighbour_slices))?;
        Ok(())
    }
}

/// Version 1 to 2: the noise model defaulted to Gaussian, the photon model had a gain of 1 and
/// no read noise unless given, and no offset; every page of a stack was denoised alone.
fn upgrade_v1(v: &mut serde_json::Value) {
    use serde_json::{json, Value};
    let Value::Object(map) = v else { return };
    map.insert("version".into(), json!(2));
    map.entry("noise").or_insert(json!("gaussian"));
    let gain = map.remove("poisson_gain").unwrap_or(json!(1.0));
    let read = map.remove("poisson_read_noise").unwrap_or(json!(0.0));
    map.insert("gain".into(), gain);
    map.insert("read_noise".into(), read);
    map.insert("offset".into(), json!(0.0));
    if let Some(Value::Object(pg)) = map.get_mut("patch_graph") {
        pg.entry("group_graph").or_insert(json!("similarity"));
        pg.entry("neighbour_slices").or_insert(json!(0));
    } else {
        map.insert("patch_graph".into(), json!({"group_graph": "similarity", "neighbour_slices": 0}));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_round_trip_through_json() {
        let s = Settings::default();
        assert_eq!(Settings::from_json(&s.to_json()).unwrap(), s);
    }

    #[test]
    fn sigma_accepts_auto_or_a_number() {
        let s = Settings::from_json(r#"{"sigma": "auto"}"#).unwrap();
        assert_eq!(s.sigma, Sigma::AUTO);
        let s = Settings::from_json(r#"{"sigma": 12.5}"#).unwrap();
        assert_eq!(s.sigma, Sigma::Value(12.5));
    }

    #[test]
    fn out_of_range_values_name_the_field_and_range() {
        let e = Settings::from_json(r#"{"sigma": -3}"#).unwrap_err();
        assert_eq!(e.to_string(), "sigma must be between 0 and 65535, got -3");
        let e = Settings::from_json(r#"{"pixel_graph": {"passes": 9}}"#).unwrap_err();
        assert_eq!(e.to_string(), "pixel_graph.passes must be between 1 and 5, got 9");
    }

    #[test]
    fn version_1_files_keep_their_meaning() {
        // Invariant: a version-1 file means what it meant: no noise field = Gaussian; the photon
        // model's gain and read noise carry over, with no offset.
        let s = Settings::from_json(r#"{"version": 1, "sigma": 7}"#).unwrap();
        assert_eq!((s.version, s.noise, s.sigma), (2, NoiseModel::Gaussian, Sigma::Value(7.0)));
        let s = Settings::from_json(r#"{"version": 1, "noise": "poisson", "poisson_gain": 256}"#).unwrap();
        assert_eq!(
            (s.noise, s.gain, s.read_noise, s.offset),
            (NoiseModel::Poisson, AutoOr::Value(256.0), AutoOr::Value(0.0), AutoOr::Value(0.0))
        );
        assert_eq!(Settings::default().noise, NoiseModel::Auto);
        let s = Settings::from_json(r#"{"noise": "poisson", "poisson_gain": 4}"#).unwrap();
        assert_eq!((s.gain, s.offset), (AutoOr::Value(4.0), AutoOr::Value(0.0)));
    }

    #[test]
    fn unknown_fields_and_versions_are_refused() {
        assert!(Settings::from_json(r#"{"sigmaa": 3}"#).is_err());
        assert!(Settings::from_json(r#"{"version": 7}"#).unwrap_err().to_string().contains("version 7"));
    }
}
