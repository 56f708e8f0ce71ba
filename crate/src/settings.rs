//! The serialisable, versioned settings of one run, with ranges and defaults. The same JSON is
//! read by the CLI (`--settings`), and will cross the wasm boundary and be exported by the page.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};

/// Bumped when a field changes meaning; older files are refused with a clear message.
pub const SETTINGS_VERSION: u32 = 1;

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    PixelGraph,
    PatchGraph,
}

impl Method {
    pub fn name(self) -> &'static str {
        match self {
            Method::PixelGraph => "pixel-graph",
            Method::PatchGraph => "patch-graph",
        }
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum NoiseModel {
    Gaussian,
    Poisson,
}

/// "auto" (estimate from the image) or a number in the input's grey levels.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum Sigma {
    Value(f64),
    Auto(AutoWord),
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum AutoWord {
    Auto,
}

impl Sigma {
    pub const AUTO: Sigma = Sigma::Auto(AutoWord::Auto);
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum GraphFilter {
    /// (I + gamma L) x = y by conjugate gradient.
    Tikhonov,
    /// x = exp(-t L) y by a Chebyshev polynomial.
    Heat,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct PixelGraphSettings {
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
        }
    }
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Settings {
    pub version: u32,
    pub method: Method,
    pub sigma: Sigma,
    pub noise: NoiseModel,
    /// Grey levels per photon for the Poisson model.
    pub poisson_gain: f64,
    /// Gaussian read-noise std (grey levels) added to the photon noise.
    pub poisson_read_noise: f64,
    pub pixel_graph: PixelGraphSettings,
    pub patch_graph: PatchGraphSettings,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            version: SETTINGS_VERSION,
            method: Method::PatchGraph,
            sigma: Sigma::AUTO,
            noise: NoiseModel::Gaussian,
            poisson_gain: 1.0,
            poisson_read_noise: 0.0,
            pixel_graph: PixelGraphSettings::default(),
            patch_graph: PatchGraphSettings::default(),
        }
    }
}

fn range(name: &'static str, v: f64, min: f64, max: f64) -> Result<()> {
    if v.is_finite() && v >= min && v <= max {
        Ok(())
    } else {
        Err(Error::OutOfRange { name, min, max, got: v })
    }
}

impl Settings {
    /// Parses JSON; unknown fields and wrong types are refused with serde's own location message.
    pub fn from_json(text: &str) -> Result<Settings> {
        let s: Settings =
            serde_json::from_str(text).map_err(|e| Error::BadSettings(format!("the settings file is not valid: {e}")))?;
        s.validate()?;
        Ok(s)
    }

    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_default()
    }

    pub fn validate(&self) -> Result<()> {
        if self.version != SETTINGS_VERSION {
            return Err(Error::BadSettings(format!(
                "settings version {} is not understood by this program (it reads version {SETTINGS_VERSION})",
                self.version
            )));
        }
        if let Sigma::Value(v) = self.sigma {
            range("sigma", v, 0.0, 65535.0)?;
        }
        range("poisson_gain", self.poisson_gain, 1e-6, 65535.0)?;
        range("poisson_read_noise", self.poisson_read_noise, 0.0, 65535.0)?;
        let p = &self.pixel_graph;
        range("pixel_graph.strength", p.strength, 0.0, 20.0)?;
        range("pixel_graph.weight_scale", p.weight_scale, 0.05, 20.0)?;
        range("pixel_graph.cut_threshold", p.cut_threshold, 0.1, 1000.0)?;
        range("pixel_graph.radius", f64::from(p.radius), 1.0, 3.0)?;
        range("pixel_graph.patch_radius", f64::from(p.patch_radius), 0.0, 3.0)?;
        range("pixel_graph.passes", f64::from(p.passes), 1.0, 5.0)?;
        range("pixel_graph.guide_blur", p.guide_blur, 0.0, 5.0)?;
        let q = &self.patch_graph;
        if q.patch_size != 0 {
            range("patch_graph.patch_size", f64::from(q.patch_size), 4.0, 16.0)?;
        }
        range("patch_graph.step", f64::from(q.step), 1.0, 8.0)?;
        range("patch_graph.search_radius", f64::from(q.search_radius), 2.0, 24.0)?;
        range("patch_graph.group_size_hard", f64::from(q.group_size_hard), 1.0, 32.0)?;
        range("patch_graph.group_size_wiener", f64::from(q.group_size_wiener), 1.0, 32.0)?;
        range("patch_graph.threshold", q.threshold, 0.0, 10.0)?;
        range("patch_graph.min_similarity", q.min_similarity, -1.0, 1.0)?;
        range("patch_graph.tile_size", f64::from(q.tile_size), 16.0, 4096.0)?;
        Ok(())
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
    fn unknown_fields_and_versions_are_refused() {
        assert!(Settings::from_json(r#"{"sigmaa": 3}"#).is_err());
        assert!(Settings::from_json(r#"{"version": 7}"#).unwrap_err().to_string().contains("version 7"));
    }
}
