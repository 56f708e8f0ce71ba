//! One table of every numeric setting: its range, step, label and one line of help. Settings
//! validation ([`crate::Settings::validate`]), the page's form (through the wasm face's
//! `settingFields`) and the README's settings table (checked by a test) all read it, so a range
//! is written once.

use crate::error::{Error, Result};
use crate::settings::Method;
use serde::Serialize;

/// One numeric setting.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct Field {
    /// Its path in the settings JSON, e.g. `patch_graph.threshold`.
    pub key: &'static str,
    /// What the page calls it.
    pub label: &'static str,
    /// Smallest and largest value accepted.
    pub min: f64,
    /// Largest value accepted.
    pub max: f64,
    /// The page's step (1 for whole numbers).
    pub step: f64,
    /// Whether 0 is accepted outside the range, with this meaning.
    pub zero_means: Option<&'static str>,
    /// The method that uses it (None: every run).
    pub method: Option<Method>,
    /// One line of help.
    pub help: &'static str,
    /// Where the page's form shows it ([`OnPage`]).
    pub page: OnPage,
}

/// Where the page's form shows a setting: a method's own settings in that method's part of the
/// form, in the table's order; settings of every run (sigma, the noise model) in the form's
/// fixed head. Settings files, the CLI and the page's sweep take every setting either way.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct OnPage {
    /// Whether the form has a box or list for it.
    pub shown: bool,
    /// Shown only in some cases: the class the page's style hides otherwise (`only-stack`: a
    /// stack is open; `cut-grid-only`: the pixel graph is the cut grid).
    pub only: Option<&'static str>,
    /// Another setting the same box sets to the same value (one group size for both stages).
    pub also: Option<&'static str>,
    /// Offered by the page's "Sweep a parameter" (None: not offered).
    pub sweep: Option<Sweep>,
}

/// How the page's sweep spaces a setting's four values.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Sweep {
    /// The span offered at first; None: 0.7 to 1.3 times the setting's value.
    pub span: Option<(f64, f64)>,
    /// Each value the same multiple of the last, instead of evenly spaced.
    pub ratio: bool,
}

const SHOWN: OnPage = OnPage { shown: true, only: None, also: None, sweep: None };
const HIDDEN: OnPage = OnPage { shown: false, only: None, also: None, sweep: None };
/// Shown and offered by the sweep, around its value.
const SWEPT: OnPage = OnPage { sweep: Some(Sweep { span: None, ratio: false }), ..SHOWN };

const fn f(key: &'static str, label: &'static str, min: f64, max: f64, step: f64, help: &'static str) -> Field {
    Field { key, label, min, max, step, zero_means: None, method: None, help, page: HIDDEN }
}

/// The same field, shown in the page's form.
const fn shown(field: Field) -> Field {
    Field { page: SHOWN, ..field }
}

/// The same field, shown and offered by the page's sweep.
const fn swept(field: Field) -> Field {
    Field { page: SWEPT, ..field }
}

const fn pg(field: Field) -> Field {
    Field { method: Some(Method::PatchGraph), ..field }
}

const fn px(field: Field) -> Field {
    Field { method: Some(Method::PixelGraph), ..field }
}

/// Every numeric setting, in the order the page and the README list them.
pub const FIELDS: &[Field] = &[
    f("sigma", "Sigma", 0.0, 65535.0, 0.1, "Noise std in the input's grey levels (the file's own units for float data); for photon noise, in the stabilised domain."),
    f("gain", "Gain", 1e-6, 65535.0, 0.01, "Photon noise: grey levels per photon."),
    f("offset", "Offset", -65535.0, 65535.0, 1.0, "Photon noise: the black level, the grey level of no light."),
    f("read_noise", "Read noise", 0.0, 65535.0, 0.1, "Photon noise: the Gaussian read-noise std in grey levels."),
    pg(Field {
        zero_means: Some("by noise: 8, or 12 at high noise"),
        page: SHOWN,
        ..f("patch_graph.patch_size", "Patch size (0 = by noise)", 4.0, 16.0, 1.0, "Side of the square patches compared, in pixels; 0 picks 8, or 12 at high noise.")
    }),
    pg(f("patch_graph.step", "Step", 1.0, 8.0, 1.0, "Distance between reference patches; smaller is slower and slightly better.")),
    pg(swept(f("patch_graph.search_radius", "Search radius", 2.0, 24.0, 1.0, "How far (pixels) to look for similar patches. Larger finds more in smooth images and takes longer."))),
    pg(Field {
        page: OnPage { also: Some("patch_graph.group_size_wiener"), ..SWEPT },
        ..f("patch_graph.group_size_hard", "Group size", 1.0, 32.0, 1.0, "Most similar patches cleaned together. More: smoother flat areas, but unlike patches may be mixed.")
    }),
    pg(f("patch_graph.group_size_wiener", "Group size, second stage", 1.0, 32.0, 1.0, "Most similar patches cleaned together in the second stage.")),
    pg(swept(f("patch_graph.threshold", "Threshold (× sigma)", 0.0, 10.0, 0.1, "Coefficients below this many sigmas are taken for noise in the first pass (up to 1.22 times as many in flat areas that hold nothing but noise). Higher: smoother, more fine detail lost."))),
    pg(f("patch_graph.min_similarity", "Least similarity", -1.0, 1.0, 0.01, "Patches with a lower SSIM to the reference are not grouped.")),
    pg(f("patch_graph.tile_size", "Tile size", 16.0, 4096.0, 1.0, "Side of a block of reference patches processed together; results do not depend on it.")),
    pg(Field {
        page: OnPage { only: Some("only-stack"), ..SHOWN },
        ..f("patch_graph.neighbour_slices", "Neighbour slices", 0.0, 2.0, 1.0, "Stacks only: how many slices on each side of an image lend it their patches (0 = each image alone). Pages that do not continue each other are denoised alone anyway.")
    }),
    // Its best value reaches 16 on smooth images (BENCHMARKS.md, "Pixel graph: strength picked by
    // the error estimate"), so the sweep offers it from the default, 1, to 16 in ratio (1, 2.52,
    // 6.35, 16): the default stays on the board. Over the 48 grey development images the value
    // named among these gains 0.40 dB in the mean and never falls below the default; from 0.5
    // (without the default) the mean fell 0.27 dB, as a value was named too rarely to make up for it.
    px(Field {
        page: OnPage { sweep: Some(Sweep { span: Some((1.0, 16.0)), ratio: true }), ..SHOWN },
        ..f("pixel_graph.strength", "Strength", 0.0, 20.0, 0.1, "Multiplies the smoothing chosen from sigma; 1 is the tuned default.")
    }),
    px(f("pixel_graph.weight_scale", "Weight scale (× sigma)", 0.05, 20.0, 0.05, "Edge weight scale as a multiple of sigma.")),
    px(Field {
        page: OnPage { only: Some("cut-grid-only"), ..SWEPT },
        ..f("pixel_graph.cut_threshold", "Edge cut (× sigma)", 0.1, 1000.0, 0.1, "Neighbours that differ by more than this many sigmas are not smoothed together (an edge). Lower keeps more edges and more noise.")
    }),
    px(f("pixel_graph.radius", "Neighbour radius", 1.0, 3.0, 1.0, "Neighbour radius of the cut grid (1 = 8 neighbours).")),
    px(f("pixel_graph.patch_radius", "Patch radius", 0.0, 3.0, 1.0, "Radius of the patch compared to weigh an edge (0 = single pixels).")),
    px(shown(f("pixel_graph.passes", "Passes", 1.0, 5.0, 1.0, "Times the graph is rebuilt from the last result and filtered again."))),
    px(f("pixel_graph.guide_blur", "Guide blur", 0.0, 5.0, 0.1, "Gaussian pre-smoothing (pixels) of the first guide.")),
];

/// One setting that takes one of a few named values (an enum of the settings).
#[derive(Clone, Copy, Debug, Serialize)]
pub struct Choice {
    /// Its path in the settings JSON, e.g. `pixel_graph.graph`.
    pub key: &'static str,
    /// What the page calls it.
    pub label: &'static str,
    /// The method that uses it (None: every run).
    pub method: Option<Method>,
    /// Each value as settings files write it, with what the page calls it.
    pub options: &'static [(&'static str, &'static str)],
    /// One line of help.
    pub help: &'static str,
    /// Where the page's form shows it ([`OnPage`]).
    pub page: OnPage,
}

/// Every choice the page offers besides the method, in the order the page lists them (the
/// methods are `methods::METHODS`).
pub const CHOICES: &[Choice] = &[
    Choice {
        key: "noise",
        label: "Noise",
        method: None,
        options: &[
            ("auto", "Fitted from the image"),
            ("gaussian", "One level everywhere (white Gaussian)"),
            ("poisson", "Photon counts (Poisson with read noise)"),
        ],
        help: "What the noise is: fitted from the image (default), one level everywhere, or photon counts whose noise grows with brightness.",
        page: SHOWN,
    },
    Choice {
        key: "pixel_graph.graph",
        label: "Graph",
        method: Some(Method::PixelGraph),
        options: &[("cut-grid", "Neighbours, cut at edges (fast)"), ("non-local", "Most similar pixels nearby (about 4× slower)")],
        help: "Which pixels are smoothed together: each pixel's neighbours, cut where the intensity jumps; or, non-local, the 8 pixels of a 7 × 7 window whose surroundings look most like its own (all of them where the noise cannot tell them apart).",
        page: SHOWN,
    },
    Choice {
        key: "pixel_graph.filter",
        label: "Filter",
        method: Some(Method::PixelGraph),
        options: &[("tikhonov", "Tikhonov (solver)"), ("heat", "Heat kernel (polynomial)")],
        help: "Tikhonov solves for the smoothest image near the input; the heat kernel diffuses along the graph (a polynomial, no solver).",
        page: SHOWN,
    },
];

/// The table's entry for `key`.
pub fn field(key: &str) -> Option<&'static Field> {
    FIELDS.iter().find(|f| f.key == key)
}

/// Checks `value` against `key`'s range in the table.
pub fn check(key: &'static str, value: f64) -> Result<()> {
    let f = field(key).ok_or_else(|| Error::Internal(format!("no setting {key} in the table")))?;
    if f.zero_means.is_some() && value == 0.0 {
        return Ok(());
    }
    if !value.is_finite() || value < f.min || value > f.max {
        return Err(Error::OutOfRange { name: key, min: f.min, max: f.max, got: value });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Invariants of the page marks: a box that also sets another setting sets one of the same
    /// method and range (one group size for both stages); a setting shown only in some cases names
    /// a class the page's style hides; a shown setting of every run has its place in the pane's
    /// head (the style sheet and the page are read as they ship).
    #[test]
    fn the_page_marks_name_what_exists() {
        let style = include_str!("../../www/style.css");
        let marks =
            FIELDS.iter().map(|f| (f.key, f.method, f.page)).chain(CHOICES.iter().map(|c| (c.key, c.method, c.page)));
        for (key, method, page) in marks {
            if let Some(also) = page.also {
                let (a, b) = (field(key).unwrap(), field(also).unwrap_or_else(|| panic!("{key}: no setting {also}")));
                assert!(
                    a.method == b.method && a.min == b.min && a.max == b.max && a.step == b.step,
                    "{key} and {also}"
                );
            }
            if let Some(only) = page.only {
                assert!(page.shown, "{key}: shown only in some cases, but not shown");
                assert!(
                    style.contains(&format!(".{only} {{ display: none; }}")),
                    "{key}: the style never hides .{only}"
                );
            }
            // A setting of every run has a fixed place in the pane's head; a method's is built.
            let head = include_str!("../../www/index.html");
            let placed = method.is_some() || !page.shown || head.contains(&format!("name=\"{key}\""));
            assert!(placed, "{key}: shown, but the pane's head has no place for it");
            // The sweep copies Setting A and changes one of its method's shown settings, within range.
            if let Some(sweep) = page.sweep {
                assert!(page.shown && method.is_some(), "{key}: swept, but not a shown setting of a method");
                let f = field(key).unwrap();
                assert!(sweep.span.is_none_or(|(a, b)| f.min <= a && a < b && b <= f.max), "{key}: span out of range");
            }
        }
    }

    /// The README's settings table states each numeric setting's range: it must be the table's
    /// (rows like "| `patch_graph.step` | 1 to 8 | ...").
    #[test]
    fn the_readme_states_the_tables_ranges() {
        let readme = include_str!("../../README.md");
        for f in FIELDS {
            // A row may name two settings ("| `patch_graph.group_size_hard` / `group_size_wiener` |").
            let (prefix, last) = f.key.rsplit_once('.').unwrap_or(("", f.key));
            let row = readme
                .lines()
                .find(|l| {
                    let cell = l.split(" | ").next().unwrap_or_default();
                    cell.starts_with(&format!("| `{prefix}")) && cell.contains(&format!("{last}`"))
                })
                .unwrap_or_else(|| panic!("README has no row for {}", f.key));
            let range = row.split(" | ").nth(1).unwrap_or_default();
            // A tiny positive minimum stands for "more than 0".
            let want = if f.min > 0.0 && f.min < 1e-3 { "> 0".to_string() } else { format!("{} to {}", f.min, f.max) };
            assert!(range.contains(&want), "README row for {} says '{range}', the table {want}", f.key);
            if f.zero_means.is_some() {
                assert!(range.contains("0, or"), "README row for {} does not say 0 is accepted", f.key);
            }
        }
    }

    #[test]
    fn every_choice_is_a_value_settings_read_and_the_readme_lists() {
        // Invariants: each option, put in a settings file, reads back as that value (serde's
        // names); the default is one of the options; the README's row lists every option.
        let readme = include_str!("../../README.md");
        let default = serde_json::to_value(crate::Settings::default()).unwrap();
        for c in CHOICES {
            let pointer = format!("/{}", c.key.replace('.', "/"));
            let current = default.pointer(&pointer).and_then(|v| v.as_str()).unwrap();
            assert!(c.options.iter().any(|(v, _)| *v == current), "{}: default {current} not offered", c.key);
            let row = readme.lines().find(|l| l.starts_with(&format!("| `{}` |", c.key))).unwrap();
            for (value, _) in c.options {
                let mut v = default.clone();
                *v.pointer_mut(&pointer).unwrap() = serde_json::json!(value);
                let s = crate::Settings::from_value(v).unwrap();
                assert_eq!(serde_json::to_value(&s).unwrap().pointer(&pointer).unwrap(), &serde_json::json!(value));
                assert!(row.contains(&format!("`{value}`")), "README's {} row lacks {value}", c.key);
            }
        }
    }

    #[test]
    fn validation_checks_every_field_of_the_table() {
        // Invariant: each field set just above its maximum makes validation name that field, so
        // no field of the table goes unchecked.
        use serde_json::json;
        for f in FIELDS {
            let mut v = serde_json::to_value(crate::Settings::default()).unwrap();
            let slot = v.pointer_mut(&format!("/{}", f.key.replace('.', "/"))).unwrap();
            *slot = if slot.is_u64() { json!(f.max as u64 + 1) } else { json!(f.max + 1.0) };
            let s: crate::Settings = serde_json::from_value(v).unwrap();
            match s.validate() {
                Err(Error::OutOfRange { name, .. }) => assert_eq!(name, f.key),
                other => panic!("{} above its maximum: {other:?}", f.key),
            }
        }
    }

    #[test]
    fn every_default_lies_in_its_range() {
        // Invariant: the defaults pass their own checks.
        let d = serde_json::to_value(crate::Settings::default()).unwrap();
        for f in FIELDS {
            let v = f.key.split('.').try_fold(&d, |v, k| v.get(k)).and_then(|v| v.as_f64());
            if let Some(v) = v {
                assert!(check(f.key, v).is_ok(), "default {} = {v}", f.key);
            }
        }
    }
}
