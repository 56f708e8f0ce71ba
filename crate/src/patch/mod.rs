//! Patch machinery for the collaborative method: SSIM block matching, group transforms (2-D DCT
//! within a patch, graph Fourier basis across the group) and weighted aggregation.

pub mod aggregate;
pub mod guide;
pub mod matching;
pub mod overlap;
pub mod transform;

/// A group of similar patches: top-left corners (in the coordinates of the plane they were matched
/// in) and their SSIM to the reference, which is always first. `slices` says which plane each
/// patch lies in: 0 the reference's own, i the i-th neighbouring slice of a stack (empty when
/// matching looked at one plane only, i.e. all 0).
#[derive(Clone, Debug, PartialEq)]
pub struct Group {
    /// Top-left corners, the reference first.
    pub positions: Vec<(usize, usize)>,
    /// SSIM of each patch to the reference.
    pub similarity: Vec<f32>,
    /// Which plane each patch lies in (empty: all the reference's).
    pub slices: Vec<u8>,
}

impl Group {
    /// Patches in the group.
    pub fn len(&self) -> usize {
        self.positions.len()
    }
    /// Whether the group holds no patch.
    pub fn is_empty(&self) -> bool {
        self.positions.is_empty()
    }
    /// The plane patch `i` lies in (0: the reference's own).
    pub fn slice(&self, i: usize) -> usize {
        self.slices.get(i).map_or(0, |&s| usize::from(s))
    }
    /// Keeps the first `n` patches.
    pub fn truncate(&mut self, n: usize) {
        self.positions.truncate(n);
        self.similarity.truncate(n);
        self.slices.truncate(n);
    }
}
