//! Patch machinery for the collaborative method: SSIM block matching, group transforms (2-D DCT
//! within a patch, graph Fourier basis across the group) and weighted aggregation.

pub mod aggregate;
pub mod matching;
pub mod transform;

/// A group of similar patches: top-left corners (in the coordinates of the plane they were matched
/// in) and their SSIM to the reference, which is always first.
#[derive(Clone, Debug, PartialEq)]
pub struct Group {
    pub positions: Vec<(usize, usize)>,
    pub similarity: Vec<f32>,
}

impl Group {
    pub fn len(&self) -> usize {
        self.positions.len()
    }
    pub fn is_empty(&self) -> bool {
        self.positions.is_empty()
    }
}
