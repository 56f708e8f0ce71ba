//! Denoisers over planes. Each takes the working planes (grey or opponent colour, luminance first),
//! the noise sigma in the planes' grey levels and the full range, and reports progress.

pub mod bands;
pub mod patch_graph;
pub mod pixel_graph;

use crate::planes::Plane;

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
