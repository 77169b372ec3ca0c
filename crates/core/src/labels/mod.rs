//! Label volumes: virtual preparation of a specimen out of its matrix.
//!
//! A [`LabelVolume`] gives every voxel of a scan one label value: 0 is unlabelled, 1–255 are
//! named labels ([`LabelInfo`]: specimen, matrix, inclusion…) with a colour from Sutura's own
//! palette ([`palette_colour`]). It is tied to its scan by the scan's
//! [`Fingerprint`](crate::landmarks::fingerprint::Fingerprint) and voxel grid.
//!
//! Storage: bricks of [`BRICK`]³ voxels, one byte per voxel; a brick with no labelled voxel is
//! not allocated, so a specimen filling a tenth of a scan costs about a tenth of a byte per
//! voxel. Bricks are the unit of saving ([`zarr`]: one Zarr chunk per brick) and of undo.
//!
//! Operations come in two halves. The *selection* is a [`BitMask`] computed from the scan and
//! the labels ([`region`]: threshold, region growing, pieces, fill holes; [`morph`]: erosion,
//! dilation, opening, closing; [`brush`]: strokes; [`interp`]: interpolation between slices).
//! The *change* is one call, [`LabelVolume::apply`], which writes a selection into a label in a
//! [`Combine`] mode and returns an [`Edit`]: the previous content of each brick it touched.
//! [`LabelVolume::undo`] puts an edit back and returns its inverse (redo). A front end keeps the
//! edits in its undo stack; an edit's memory is that of the bricks it changed.
//!
//! Must not import `render`.

pub mod brush;
pub mod interp;
pub mod mask;
pub mod morph;
pub mod ops;
pub mod region;
pub mod zarr;

pub use mask::BitMask;

use serde::{Deserialize, Serialize};
use std::ops::Range;

use crate::landmarks::fingerprint::Fingerprint;

/// Side of a brick in voxels.
pub const BRICK: usize = 64;
/// Voxels in a brick.
pub const BRICK_VOXELS: usize = BRICK * BRICK * BRICK;

/// The highest label value.
pub const MAX_LABEL: u8 = 255;

/// Why a label operation failed.
#[derive(Debug, thiserror::Error)]
pub enum LabelsError {
    #[error("no label named {0:?} (labels: {1})")]
    UnknownLabel(String, String),
    #[error("label {0:?} already exists")]
    DuplicateLabel(String),
    #[error("a label name must be 1 to 64 printable characters without '/': {0:?}")]
    BadName(String),
    #[error("all {MAX_LABEL} label values are in use")]
    Full,
    #[error("the labels are for a {0:?} grid, the scan is {1:?}")]
    GridMismatch([usize; 3], [usize; 3]),
    #[error("{0} lies outside the {1:?} voxel grid")]
    Outside(String, [usize; 3]),
    #[error("{0}")]
    Invalid(String),
    #[error("{}: {what}", path.display())]
    File {
        path: std::path::PathBuf,
        what: String,
    },
}

/// One named label.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct LabelInfo {
    /// 1–255.
    pub value: u8,
    pub name: String,
    /// Red, green, blue, alpha.
    pub rgba: [u8; 4],
}

/// Sutura's label colours: twelve hues spaced around the wheel, alternating warm and cool so
/// that neighbouring label values differ, at a lightness that reads over a grey scan.
const PALETTE: [[u8; 3]; 12] = [
    [236, 176, 64],  // ochre: the specimen
    [86, 140, 214],  // slate blue: the matrix
    [212, 88, 112],  // rose
    [78, 178, 150],  // teal
    [176, 118, 214], // lilac
    [150, 190, 72],  // moss
    [230, 128, 70],  // clay
    [70, 176, 204],  // glacier
    [200, 160, 120], // sand
    [120, 120, 220], // iris
    [220, 110, 180], // orchid
    [110, 200, 110], // fern
];

/// The palette colour of label value `value` (cycling after twelve, each cycle a little darker).
#[must_use]
pub fn palette_colour(value: u8) -> [u8; 4] {
    let n = usize::from(value.max(1) - 1);
    let base = PALETTE[n % PALETTE.len()];
    let cycle = (n / PALETTE.len()) as u32;
    let shade = |c: u8| (u32::from(c) * 10 / (10 + 2 * cycle.min(10))) as u8;
    [shade(base[0]), shade(base[1]), shade(base[2]), 255]
}

/// How a selection changes a label.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Combine {
    /// The selected voxels join the label. Voxels of other labels are kept unless
    /// `overwrite` is set on [`LabelVolume::apply`].
    Add,
    /// The label's selected voxels become unlabelled.
    Subtract,
    /// The label's voxels outside the selection become unlabelled.
    Intersect,
}

impl Combine {
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Add => "add",
            Self::Subtract => "subtract",
            Self::Intersect => "intersect",
        }
    }
}

/// The previous content of the bricks one change touched (`None`: not allocated).
#[derive(Debug, Default)]
pub struct Edit {
    bricks: Vec<(usize, Option<Box<[u8]>>)>,
    /// What the change was, for an undo menu ("grow skull").
    pub description: String,
}

impl Edit {
    /// Number of bricks the change touched.
    #[must_use]
    pub fn bricks(&self) -> usize {
        self.bricks.len()
    }

    /// Bytes held by the edit.
    #[must_use]
    pub fn bytes(&self) -> usize {
        self.bricks
            .iter()
            .map(|(_, b)| b.as_ref().map_or(0, |b| b.len()))
            .sum()
    }

    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.bricks.is_empty()
    }

    /// One edit for two changes made one after the other (undoing it undoes both).
    #[must_use]
    pub fn then(mut self, later: Self) -> Self {
        self.bricks.extend(later.bricks);
        self
    }
}

/// A label volume over a scan's voxel grid (see the module docs).
#[derive(Clone, Debug)]
pub struct LabelVolume {
    dims: [usize; 3],
    /// Bricks per axis.
    grid: [usize; 3],
    bricks: Vec<Option<Box<[u8]>>>,
    labels: Vec<LabelInfo>,
    /// The scan the labels were made on.
    pub fingerprint: Option<Fingerprint>,
    /// The scan's voxel size (mm) when the labels were made.
    pub spacing_mm: [f64; 3],
}

impl LabelVolume {
    /// An empty label volume over a `dims` grid with voxel size `spacing_mm`.
    #[must_use]
    pub fn new(dims: [usize; 3], spacing_mm: [f64; 3]) -> Self {
        let grid = dims.map(|d| d.div_ceil(BRICK));
        Self {
            dims,
            grid,
            bricks: vec![None; grid[0] * grid[1] * grid[2]],
            labels: Vec::new(),
            fingerprint: None,
            spacing_mm,
        }
    }

    #[must_use]
    pub fn dims(&self) -> [usize; 3] {
        self.dims
    }

    /// Bricks per axis.
    #[must_use]
    pub fn brick_grid(&self) -> [usize; 3] {
        self.grid
    }

    #[must_use]
    pub fn labels(&self) -> &[LabelInfo] {
        &self.labels
    }

    /// Bytes held by allocated bricks.
    #[must_use]
    pub fn bytes(&self) -> usize {
        self.bricks.iter().flatten().map(|b| b.len()).sum()
    }

    /// Allocated bricks.
    #[must_use]
    pub fn allocated_bricks(&self) -> usize {
        self.bricks.iter().flatten().count()
    }

    /// The brick at brick coordinates `b` (`None`: all unlabelled). Layout `ii + 64·(jj + 64·kk)`.
    #[must_use]
    pub fn brick(&self, b: [usize; 3]) -> Option<&[u8]> {
        self.bricks[self.brick_index(b)].as_deref()
    }

    /// Replaces a brick wholesale (used by the loader). A brick of zeros is dropped.
    pub(crate) fn put_brick(&mut self, b: [usize; 3], data: Option<Box<[u8]>>) {
        let n = self.brick_index(b);
        self.bricks[n] = data.filter(|d| d.iter().any(|&v| v != 0));
    }

    #[inline]
    fn brick_index(&self, b: [usize; 3]) -> usize {
        b[0] + self.grid[0] * (b[1] + self.grid[1] * b[2])
    }

    /// Adds a label with the next free value and its palette colour.
    pub fn add_label(&mut self, name: &str) -> Result<u8, LabelsError> {
        check_name(name)?;
        if self.labels.iter().any(|l| l.name == name) {
            return Err(LabelsError::DuplicateLabel(name.to_owned()));
        }
        let value = (1..=MAX_LABEL)
            .find(|v| self.labels.iter().all(|l| l.value != *v))
            .ok_or(LabelsError::Full)?;
        self.labels.push(LabelInfo {
            value,
            name: name.to_owned(),
            rgba: palette_colour(value),
        });
        self.labels.sort_by_key(|l| l.value);
        Ok(value)
    }

    /// Adds a label with a given value and colour (the loader).
    pub(crate) fn insert_label(&mut self, info: LabelInfo) -> Result<(), LabelsError> {
        check_name(&info.name)?;
        if info.value == 0 {
            return Err(LabelsError::Invalid("label value 0 is unlabelled".into()));
        }
        if self
            .labels
            .iter()
            .any(|l| l.name == info.name || l.value == info.value)
        {
            return Err(LabelsError::DuplicateLabel(info.name));
        }
        self.labels.push(info);
        self.labels.sort_by_key(|l| l.value);
        Ok(())
    }

    /// The value of a label by name.
    pub fn value_of(&self, name: &str) -> Result<u8, LabelsError> {
        self.labels
            .iter()
            .find(|l| l.name == name)
            .map(|l| l.value)
            .ok_or_else(|| {
                LabelsError::UnknownLabel(
                    name.to_owned(),
                    if self.labels.is_empty() {
                        "none".to_owned()
                    } else {
                        self.labels
                            .iter()
                            .map(|l| l.name.as_str())
                            .collect::<Vec<_>>()
                            .join(", ")
                    },
                )
            })
    }

    /// The value of a label by name, adding the label if it does not exist.
    pub fn value_or_add(&mut self, name: &str) -> Result<u8, LabelsError> {
        match self.value_of(name) {
            Ok(v) => Ok(v),
            Err(LabelsError::UnknownLabel(..)) => self.add_label(name),
            Err(e) => Err(e),
        }
    }

    /// The label value of a voxel.
    #[inline]
    #[must_use]
    pub fn get(&self, i: usize, j: usize, k: usize) -> u8 {
        let b = self.brick_index([i / BRICK, j / BRICK, k / BRICK]);
        self.bricks[b].as_ref().map_or(0, |d| {
            d[i % BRICK + BRICK * (j % BRICK + BRICK * (k % BRICK))]
        })
    }

    /// The voxels holding `value`.
    #[must_use]
    pub fn mask_of(&self, value: u8) -> BitMask {
        self.mask_where(|v| v == value)
    }

    /// The voxels holding any label.
    #[must_use]
    pub fn labelled(&self) -> BitMask {
        self.mask_where(|v| v != 0)
    }

    /// The voxels whose value satisfies `pred`.
    #[must_use]
    pub fn mask_where(&self, pred: impl Fn(u8) -> bool + Sync) -> BitMask {
        use rayon::prelude::*;
        let mut m = BitMask::new(self.dims);
        let [nx, ny, nz] = self.dims;
        let wpr = m.words_per_row();
        let zero_in = pred(0);
        m.words_mut()
            .par_chunks_mut(wpr * ny)
            .enumerate()
            .for_each(|(k, plane)| {
                for bj in 0..self.grid[1] {
                    for bi in 0..self.grid[0] {
                        let brick = self.bricks[self.brick_index([bi, bj, k / BRICK])].as_deref();
                        if brick.is_none() && !zero_in {
                            continue;
                        }
                        for j in bj * BRICK..((bj + 1) * BRICK).min(ny) {
                            let row = &mut plane[j * wpr..(j + 1) * wpr];
                            for i in bi * BRICK..((bi + 1) * BRICK).min(nx) {
                                let v = brick.map_or(0, |d| {
                                    d[i % BRICK + BRICK * (j % BRICK + BRICK * (k % BRICK))]
                                });
                                if pred(v) {
                                    row[i / 64] |= 1 << (i % 64);
                                }
                            }
                        }
                    }
                }
            });
        debug_assert_eq!(m.dims()[2], nz);
        m
    }

    /// Number of voxels holding each value (index = value).
    #[must_use]
    pub fn counts(&self) -> [u64; 256] {
        let mut out = [0u64; 256];
        let [nx, ny, nz] = self.dims;
        let mut allocated_voxels = 0u64;
        for (n, b) in self.bricks.iter().enumerate() {
            let Some(d) = b else { continue };
            let bi = n % self.grid[0];
            let bj = (n / self.grid[0]) % self.grid[1];
            let bk = n / (self.grid[0] * self.grid[1]);
            let ext = [
                (nx - bi * BRICK).min(BRICK),
                (ny - bj * BRICK).min(BRICK),
                (nz - bk * BRICK).min(BRICK),
            ];
            for kk in 0..ext[2] {
                for jj in 0..ext[1] {
                    let s = BRICK * (jj + BRICK * kk);
                    for &v in &d[s..s + ext[0]] {
                        out[usize::from(v)] += 1;
                    }
                }
            }
            allocated_voxels += (ext[0] * ext[1] * ext[2]) as u64;
        }
        out[0] += (nx * ny * nz) as u64 - allocated_voxels;
        out
    }

    /// Writes `selection` into label `value` (see [`Combine`]); returns the undo edit.
    /// With `overwrite`, [`Combine::Add`] also takes voxels of other labels.
    pub fn apply(
        &mut self,
        selection: &BitMask,
        value: u8,
        mode: Combine,
        overwrite: bool,
    ) -> Result<Edit, LabelsError> {
        if selection.dims() != self.dims {
            return Err(LabelsError::GridMismatch(self.dims, selection.dims()));
        }
        if value == 0 {
            return Err(LabelsError::Invalid("label value 0 is unlabelled".into()));
        }
        let mut edit = Edit::default();
        let [nx, ny, nz] = self.dims;
        let sel_box = selection.bbox();
        for bk in 0..self.grid[2] {
            for bj in 0..self.grid[1] {
                for bi in 0..self.grid[0] {
                    let n = self.brick_index([bi, bj, bk]);
                    let range = [
                        bi * BRICK..((bi + 1) * BRICK).min(nx),
                        bj * BRICK..((bj + 1) * BRICK).min(ny),
                        bk * BRICK..((bk + 1) * BRICK).min(nz),
                    ];
                    let touches_selection = sel_box
                        .as_ref()
                        .is_some_and(|b| (0..3).all(|a| overlaps(&b[a], &range[a])));
                    // bricks the change cannot alter
                    match mode {
                        Combine::Add | Combine::Subtract if !touches_selection => continue,
                        Combine::Subtract | Combine::Intersect if self.bricks[n].is_none() => {
                            continue;
                        }
                        _ => {}
                    }
                    let old = self.bricks[n].clone();
                    let mut data = old
                        .clone()
                        .unwrap_or_else(|| vec![0u8; BRICK_VOXELS].into_boxed_slice());
                    let mut changed = false;
                    for k in range[2].clone() {
                        for j in range[1].clone() {
                            let row = selection.row(j, k);
                            let base = BRICK * (j % BRICK + BRICK * (k % BRICK));
                            for i in range[0].clone() {
                                let sel = row[i / 64] >> (i % 64) & 1 == 1;
                                let slot = &mut data[base + i % BRICK];
                                let new = match mode {
                                    Combine::Add if sel && (overwrite || *slot == 0) => value,
                                    Combine::Subtract if sel && *slot == value => 0,
                                    Combine::Intersect if !sel && *slot == value => 0,
                                    _ => *slot,
                                };
                                if new != *slot {
                                    *slot = new;
                                    changed = true;
                                }
                            }
                        }
                    }
                    if changed {
                        edit.bricks.push((n, old));
                        self.bricks[n] = Some(data).filter(|d| d.iter().any(|&v| v != 0));
                    }
                }
            }
        }
        Ok(edit)
    }

    /// Sets every voxel of a box for which `f(i, j, k)` holds, in label `value` by `mode`,
    /// touching only the bricks the box covers: the fast path of brush strokes.
    pub fn apply_in_box(
        &mut self,
        bounds: &[Range<usize>; 3],
        value: u8,
        mode: Combine,
        overwrite: bool,
        f: impl Fn(usize, usize, usize) -> bool,
    ) -> Result<Edit, LabelsError> {
        if value == 0 {
            return Err(LabelsError::Invalid("label value 0 is unlabelled".into()));
        }
        if mode == Combine::Intersect {
            return Err(LabelsError::Invalid(
                "intersect needs the whole selection; use apply".into(),
            ));
        }
        let b = [0, 1, 2].map(|a| bounds[a].start..bounds[a].end.min(self.dims[a]));
        let mut edit = Edit::default();
        if b.iter().any(Range::is_empty) {
            return Ok(edit);
        }
        for bk in b[2].start / BRICK..=(b[2].end - 1) / BRICK {
            for bj in b[1].start / BRICK..=(b[1].end - 1) / BRICK {
                for bi in b[0].start / BRICK..=(b[0].end - 1) / BRICK {
                    let n = self.brick_index([bi, bj, bk]);
                    if mode == Combine::Subtract && self.bricks[n].is_none() {
                        continue;
                    }
                    let mut data = self.bricks[n]
                        .clone()
                        .unwrap_or_else(|| vec![0u8; BRICK_VOXELS].into_boxed_slice());
                    let mut changed = false;
                    for k in (bk * BRICK).max(b[2].start)..((bk + 1) * BRICK).min(b[2].end) {
                        for j in (bj * BRICK).max(b[1].start)..((bj + 1) * BRICK).min(b[1].end) {
                            let base = BRICK * (j % BRICK + BRICK * (k % BRICK));
                            for i in (bi * BRICK).max(b[0].start)..((bi + 1) * BRICK).min(b[0].end)
                            {
                                if !f(i, j, k) {
                                    continue;
                                }
                                let slot = &mut data[base + i % BRICK];
                                let new = match mode {
                                    Combine::Add if overwrite || *slot == 0 => value,
                                    Combine::Subtract if *slot == value => 0,
                                    _ => *slot,
                                };
                                if new != *slot {
                                    *slot = new;
                                    changed = true;
                                }
                            }
                        }
                    }
                    if changed {
                        let old = std::mem::replace(
                            &mut self.bricks[n],
                            Some(data).filter(|d| d.iter().any(|&v| v != 0)),
                        );
                        edit.bricks.push((n, old));
                    }
                }
            }
        }
        Ok(edit)
    }

    /// The label values of one voxel plane normal to `axis` (0 = i, 1 = j, 2 = k), row by row
    /// in the plane's own axes (`i` then `j` for a `k` plane; `i`, `k` for `j`; `j`, `k` for
    /// `i`): what a plane view's overlay draws. Unallocated bricks are skipped.
    #[must_use]
    pub fn plane(&self, axis: usize, index: usize) -> Vec<u8> {
        let (ua, va) = interp::plane_axes(axis);
        let (w, h) = (self.dims[ua], self.dims[va]);
        let mut out = vec![0u8; w * h];
        if index >= self.dims[axis.min(2)] {
            return out;
        }
        let gu = self.grid[ua];
        let gv = self.grid[va];
        for bv in 0..gv {
            for bu in 0..gu {
                let mut b = [0; 3];
                b[axis] = index / BRICK;
                b[ua] = bu;
                b[va] = bv;
                let Some(d) = self.bricks[self.brick_index(b)].as_deref() else {
                    continue;
                };
                for v in bv * BRICK..((bv + 1) * BRICK).min(h) {
                    for u in bu * BRICK..((bu + 1) * BRICK).min(w) {
                        let mut p = [0; 3];
                        p[axis] = index % BRICK;
                        p[ua] = u % BRICK;
                        p[va] = v % BRICK;
                        out[u + w * v] = d[p[0] + BRICK * (p[1] + BRICK * p[2])];
                    }
                }
            }
        }
        out
    }

    /// Puts back the bricks an edit saved; returns the edit that redoes the change.
    pub fn undo(&mut self, edit: Edit) -> Edit {
        let mut redo = Edit {
            bricks: Vec::with_capacity(edit.bricks.len()),
            description: edit.description,
        };
        for (n, old) in edit.bricks.into_iter().rev() {
            let now = std::mem::replace(&mut self.bricks[n], old);
            redo.bricks.push((n, now));
        }
        redo
    }
}

fn overlaps(a: &Range<usize>, b: &Range<usize>) -> bool {
    a.start < b.end && b.start < a.end
}

fn check_name(name: &str) -> Result<(), LabelsError> {
    let ok = !name.is_empty()
        && name.chars().count() <= 64
        && name.chars().all(|c| !c.is_control() && c != '/');
    if ok {
        Ok(())
    } else {
        Err(LabelsError::BadName(name.to_owned()))
    }
}

/// The half-open voxel box of label `value` grown by `margin` voxels (clipped to the grid), or
/// `None` when the label holds no voxel: what `convert` crops a scan to.
#[must_use]
pub fn label_box(labels: &LabelVolume, value: u8, margin: usize) -> Option<[Range<usize>; 3]> {
    let b = labels.mask_of(value).bbox()?;
    let d = labels.dims();
    Some([0, 1, 2].map(|a| b[a].start.saturating_sub(margin)..(b[a].end + margin).min(d[a])))
}

/// Dice overlap `2|A∩B| / (|A| + |B|)` of two masks (1 when both are empty).
#[must_use]
pub fn dice(a: &BitMask, b: &BitMask) -> f64 {
    assert_eq!(a.dims(), b.dims());
    let (mut both, mut na, mut nb) = (0u64, 0u64, 0u64);
    for (x, y) in a.words().iter().zip(b.words()) {
        both += u64::from((x & y).count_ones());
        na += u64::from(x.count_ones());
        nb += u64::from(y.count_ones());
    }
    if na + nb == 0 {
        1.0
    } else {
        2.0 * both as f64 / (na + nb) as f64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn apply_and_undo_restore_the_bricks() {
        let dims = [70, 65, 10];
        let mut lv = LabelVolume::new(dims, [0.01; 3]);
        let skull = lv.add_label("skull").unwrap();
        let matrix = lv.add_label("matrix").unwrap();
        assert_eq!((skull, matrix), (1, 2));
        assert_eq!(lv.labels()[0].rgba, palette_colour(1));
        let a = BitMask::from_fn(dims, |i, j, _| i < 66 && j < 3);
        let e1 = lv.apply(&a, skull, Combine::Add, false).unwrap();
        assert_eq!(e1.bricks(), 2); // bricks (0,0,0) and (1,0,0)
        assert_eq!(lv.allocated_bricks(), 2);
        let b = BitMask::from_fn(dims, |i, _, _| i >= 60);
        let e2 = lv.apply(&b, matrix, Combine::Add, false).unwrap();
        // other labels are kept without overwrite
        assert_eq!(lv.get(62, 1, 0), skull);
        assert_eq!(lv.get(62, 10, 0), matrix);
        let c = lv.counts();
        assert_eq!(c[1], 66 * 3 * 10);
        assert_eq!(c[2], 10 * 65 * 10 - 6 * 3 * 10);
        assert_eq!(c[0] + c[1] + c[2], (70 * 65 * 10) as u64);
        let redo = lv.undo(e2);
        assert_eq!(lv.counts()[2], 0);
        assert_eq!(lv.mask_of(skull), a);
        let e2 = lv.undo(redo);
        assert_eq!(lv.counts()[2], 10 * 65 * 10 - 6 * 3 * 10);
        lv.undo(e2);
        lv.undo(e1);
        assert_eq!(lv.allocated_bricks(), 0);
        assert_eq!(lv.counts()[0], (70 * 65 * 10) as u64);
    }

    #[test]
    fn subtract_and_intersect() {
        let dims = [20, 20, 20];
        let mut lv = LabelVolume::new(dims, [1.0; 3]);
        let v = lv.add_label("a").unwrap();
        lv.apply(
            &BitMask::from_fn(dims, |i, _, _| i < 10),
            v,
            Combine::Add,
            false,
        )
        .unwrap();
        lv.apply(
            &BitMask::from_fn(dims, |_, j, _| j < 5),
            v,
            Combine::Subtract,
            false,
        )
        .unwrap();
        assert_eq!(lv.counts()[1], 10 * 15 * 20);
        lv.apply(
            &BitMask::from_fn(dims, |_, _, k| k < 4),
            v,
            Combine::Intersect,
            false,
        )
        .unwrap();
        assert_eq!(lv.counts()[1], 10 * 15 * 4);
        assert_eq!(
            lv.mask_of(v),
            BitMask::from_fn(dims, |i, j, k| i < 10 && j >= 5 && k < 4)
        );
    }

    #[test]
    fn names_are_checked() {
        let mut lv = LabelVolume::new([4, 4, 4], [1.0; 3]);
        lv.add_label("skull").unwrap();
        assert!(matches!(
            lv.add_label("skull"),
            Err(LabelsError::DuplicateLabel(_))
        ));
        assert!(matches!(lv.add_label("a/b"), Err(LabelsError::BadName(_))));
        assert_eq!(
            lv.value_of("bone").unwrap_err().to_string(),
            "no label named \"bone\" (labels: skull)"
        );
    }

    #[test]
    fn palette_colours_differ() {
        let c: Vec<[u8; 4]> = (1..=24).map(palette_colour).collect();
        for a in 0..c.len() {
            for b in a + 1..c.len() {
                assert_ne!(c[a], c[b], "{a} {b}");
            }
        }
    }
}
