//! Bands of reference rows for the patch-graph method. A band's references only read and write
//! the image rows within the search radius and a patch of them, so a band needs just those rows
//! (its window), and its accumulator covers just those rows. Bands partition the references, so
//! summing their accumulators gives exactly the one-pass sums; rows are final as soon as every
//! band that touches them is in. Natively this bounds memory; in the page each band is one job
//! for a worker, and the page feeds the bands' sums to this same [`Assembler`] (through the wasm
//! face's `BandAssembler`), so page and command line add the same numbers in the same order.

use super::patch_graph::{ref_axis, Profile};
use crate::error::{Error, Result};
use crate::patch::aggregate::Accumulator;
use crate::planes::Plane;
use serde::{Deserialize, Serialize};
use std::borrow::Cow;

/// Reference rows per band, natively and in the page (whose bands the core plans too), so both add
/// the same numbers in the same order and give identical results. One default tile row: a band's few
/// open accumulators stay a small fraction of the image, and the page gets many jobs to share.
pub const NATIVE_BAND_ROWS: usize = 64;

/// References with corner rows in [ref_y0, ref_y1); image rows [y0, y1) are what they read and
/// where their patches land.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Band {
    /// First reference row (corner) of the band.
    pub ref_y0: usize,
    /// One past its last reference row.
    pub ref_y1: usize,
    /// First image row its references read or write.
    pub y0: usize,
    /// One past the last such row.
    pub y1: usize,
}

/// Bands of about `rows` reference rows (rounded up to whole tiles) covering an image `height`
/// rows tall; empty bands are left out. Windows only grow downwards, which [`Assembler`] uses.
pub fn plan(width: usize, height: usize, prof: &Profile, rows: usize) -> Vec<Band> {
    let (k, s) = (prof.patch, prof.search);
    if width < k || height < k {
        return Vec::new();
    }
    let t = prof.tile.max(1);
    let rows = rows.max(1).div_ceil(t) * t;
    let ys = ref_axis(height, k, prof.step);
    (0..height)
        .step_by(rows)
        .filter_map(|a| {
            let b = (a + rows).min(height);
            let first = *ys.iter().find(|&&y| y >= a && y < b)?;
            let last = *ys.iter().rev().find(|&&y| y >= a && y < b)?;
            Some(Band { ref_y0: a, ref_y1: b, y0: first.saturating_sub(s), y1: (last + s + k).min(height) })
        })
        .collect()
}

/// Gathers band accumulators in any order and writes each image row once all bands touching it
/// are in: value = sum over bands (in band order) of numerators / the same of denominators,
/// rounded to 1/1024 grey level; rows no patch covers keep the input's value.
/// Natively it borrows the plan and the stage's input; the page's assembler owns them.
pub struct Assembler<'a> {
    bands: Cow<'a, [Band]>,
    parts: Vec<Option<Accumulator>>,
    received: Vec<bool>,
    fallback: Cow<'a, [Plane]>,
    out: Vec<Plane>,
    next_row: usize,
}

impl<'a> Assembler<'a> {
    /// `fallback`: the stage's input planes (full image).
    pub fn new(bands: impl Into<Cow<'a, [Band]>>, fallback: impl Into<Cow<'a, [Plane]>>) -> Self {
        let (bands, fallback) = (bands.into(), fallback.into());
        let out = fallback
            .iter()
            .map(|p| Plane { width: p.width, height: p.height, data: vec![0.0; p.data.len()] })
            .collect();
        Assembler {
            parts: vec![None; bands.len()],
            received: vec![false; bands.len()],
            bands,
            fallback,
            out,
            next_row: 0,
        }
    }

    /// The band `index` of the plan, if there is one.
    pub fn band(&self, index: usize) -> Option<Band> {
        self.bands.get(index).copied()
    }

    /// The number of planes (channels) assembled.
    pub fn channels(&self) -> usize {
        self.fallback.len()
    }

    /// Takes band `index`'s sums (each band once, in any order) and writes every row that is
    /// now final.
    pub fn add(&mut self, index: usize, acc: Accumulator) -> Result<()> {
        let band = self.bands.get(index).ok_or_else(|| Error::Internal("no such band".into()))?;
        let width = self.fallback.first().map_or(0, |p| p.width);
        if self.received[index] || acc.y0 != band.y0 || acc.height != band.y1 - band.y0 || acc.width != width {
            return Err(Error::Internal("a band's result does not fit its place".into()));
        }
        self.parts[index] = Some(acc);
        self.received[index] = true;
        let height = self.fallback.first().map_or(0, |p| p.height);
        let limit = self.received.iter().position(|r| !r).map_or(height, |i| self.bands[i].y0);
        while self.next_row < limit {
            self.write_row(self.next_row);
            self.next_row += 1;
        }
        let next = self.next_row;
        for (part, band) in self.parts.iter_mut().zip(self.bands.iter()) {
            if band.y1 <= next {
                *part = None;
            }
        }
        Ok(())
    }

    fn write_row(&mut self, y: usize) {
        let width = self.fallback[0].width;
        let covering: Vec<&Accumulator> =
            self.parts.iter().flatten().filter(|a| y >= a.y0 && y < a.y0 + a.height).collect();
        for x in 0..width {
            let mut den = 0.0f64;
            for a in &covering {
                den += a.den[(y - a.y0) * width + x];
            }
            for (ch, plane) in self.out.iter_mut().enumerate() {
                let i = y * width + x;
                plane.data[i] = if den > 0.0 {
                    let mut num = 0.0f64;
                    for a in &covering {
                        num += a.num[ch][(y - a.y0) * width + x];
                    }
                    // Rounded to 1/1024 grey level: other tilings differ only in the order of
                    // f64 additions, far below this step, so stage 2 matches on the same basic
                    // estimate whatever the tiling.
                    ((num / den) * 1024.0).round() as f32 / 1024.0
                } else {
                    self.fallback[ch].data[i]
                };
            }
        }
    }

    /// The assembled planes, once every band is in.
    pub fn finish(self) -> Result<Vec<Plane>> {
        if self.received.iter().any(|r| !r) {
            return Err(Error::Internal("a band's result is missing".into()));
        }
        // Once every band is in, every row has been written.
        Ok(self.out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::methods::patch_graph::profile;
    use crate::settings::PatchGraphSettings;

    #[test]
    fn bands_cover_every_reference_row_once_and_windows_hold_their_patches() {
        // Invariant: the bands partition the reference rows, and each window reaches the search
        // radius plus a patch beyond its references (clamped to the image).
        let prof = profile(&PatchGraphSettings::default(), 20.0);
        for h in [8usize, 9, 63, 64, 65, 200, 513] {
            let plan = plan(40, h, &prof, 64);
            let ys = ref_axis(h, prof.patch, prof.step);
            for y in &ys {
                assert_eq!(plan.iter().filter(|b| *y >= b.ref_y0 && *y < b.ref_y1).count(), 1, "h {h} y {y}");
                let b = plan.iter().find(|b| *y >= b.ref_y0 && *y < b.ref_y1).unwrap();
                assert!(b.y0 <= y.saturating_sub(prof.search) && b.y1 >= (y + prof.search + prof.patch).min(h));
            }
            assert!(plan.windows(2).all(|p| p[0].y0 <= p[1].y0 && p[0].y1 <= p[1].y1));
        }
    }
}
