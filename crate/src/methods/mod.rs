//! Denoisers over planes. Each takes the working planes (grey or opponent colour, luminance first),
//! the noise sigma in the planes' grey levels and the full range, and reports progress.

pub mod bands;
pub mod patch_graph;
pub mod pixel_graph;

use crate::planes::Plane;
use crate::settings::Method;
use serde::Serialize;

/// What the faces say about a method: its name, label and help, whether the page splits it into
/// bands across workers, and the most pixels one page worker can take with it.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct MethodInfo {
    /// The method.
    pub method: Method,
    /// Its name in settings files and on the command line.
    pub name: &'static str,
    /// What the page's method list calls it.
    pub label: &'static str,
    /// One line of help.
    pub help: &'static str,
    /// Whether the page runs it as bands of rows across its workers (else one worker per image).
    pub splits_into_bands: bool,
    /// The most pixels it takes in one page worker (its whole-image data must fit a wasm32
    /// instance's 4 GiB); None when bands bound the memory.
    pub page_max_pixels: Option<usize>,
}

/// Every method, the default first: the page's list, the README's and the wasm face's limits
/// read it.
pub const METHODS: &[MethodInfo] = &[
    MethodInfo {
        method: Method::PatchGraph,
        name: "patch-graph",
        label: "Patch graph (best quality)",
        help: "Groups similar patches and cleans them together in a graph transform (best quality).",
        splits_into_bands: true,
        page_max_pixels: None,
    },
    MethodInfo {
        method: Method::PixelGraph,
        name: "pixel-graph",
        label: "Pixel graph (fast)",
        help: "Smooths along a graph of neighbouring pixels that is cut at edges (fast).",
        splits_into_bands: false,
        // Measured: about 140 bytes per pixel for colour, so 16 MP is about 2.2 GiB; 40 MP grey
        // ran out.
        page_max_pixels: Some(16_000_000),
    },
];

impl Method {
    /// The method's entry in [`METHODS`].
    pub fn info(self) -> &'static MethodInfo {
        // Every variant has its entry (a test checks); the first is the fallback the compiler needs.
        METHODS.iter().find(|m| m.method == self).unwrap_or(&METHODS[0])
    }
}

/// What a method returns besides the planes: data the faces can show.
#[derive(Clone, Debug, Default)]
pub struct MethodOutput {
    /// The method's output planes, in the working domain.
    pub planes: Vec<Plane>,
    /// Fraction of cut edges per pixel, from the last graph built (pixel-graph method).
    pub cut_map: Option<Plane>,
    /// Solver iterations or polynomial order, summed over channels and passes.
    pub work_units: usize,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_method_has_one_entry_named_as_in_settings_and_the_readme() {
        // Invariants: the table names each method as serde does, once; the README's settings
        // table lists every name in its `method` row.
        let readme = include_str!("../../../README.md");
        let row = readme.lines().find(|l| l.starts_with("| `method` |")).expect("README has a method row");
        for m in [Method::PatchGraph, Method::PixelGraph] {
            assert_eq!(METHODS.iter().filter(|i| i.method == m).count(), 1);
            assert_eq!(m.info().method, m);
            // The name the table gives is the one settings files use (serde's kebab-case).
            assert_eq!(serde_json::to_value(m).unwrap(), serde_json::json!(m.info().name));
            assert!(row.contains(&format!("`{}`", m.name())), "README's method row lacks {}", m.name());
        }
    }
}
