//! Selections from intensities and connectivity: threshold range, region growing, connected
//! pieces, fill holes.
//!
//! Intensity ranges are closed (`lo ≤ value ≤ hi`) in rescaled units (what `info` and the
//! views show). Connectivity is that of voxel faces (6) or of faces, edges and corners (26).
//!
//! Region growing is a scan-line flood fill: it takes whole runs along `i` at a time and looks
//! for new runs in the neighbouring rows, so each accepted voxel is visited a small constant
//! number of times. Pieces are found on runs too (a union–find over the runs of a mask, rows
//! joined to the rows before them), numbered in the order of their first voxel in memory order
//! (`i` fastest), the order `scipy.ndimage.label` gives a `(z, y, x)` array.

use std::ops::Range;

use super::{BitMask, LabelsError};
use crate::volume::{Volume, Voxel};

/// Which voxels touch.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum Connectivity {
    /// Shared faces.
    #[default]
    Faces6,
    /// Shared faces, edges or corners.
    All26,
}

impl Connectivity {
    /// 6 or 26.
    pub fn from_count(n: u32) -> Result<Self, LabelsError> {
        match n {
            6 => Ok(Self::Faces6),
            26 => Ok(Self::All26),
            _ => Err(LabelsError::Invalid(format!(
                "connectivity {n}: give 6 (faces) or 26 (faces, edges, corners)"
            ))),
        }
    }
}

/// A closed intensity range in rescaled units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct IntensityRange {
    pub lo: f64,
    pub hi: f64,
}

impl IntensityRange {
    pub fn new(lo: f64, hi: f64) -> Result<Self, LabelsError> {
        if lo.is_nan() || hi.is_nan() || lo > hi {
            return Err(LabelsError::Invalid(format!(
                "intensity range {lo}..{hi} is empty"
            )));
        }
        Ok(Self { lo, hi })
    }

    /// The same range on the stored values of `volume` (undoing its rescale).
    fn raw(self, volume: &Volume) -> (f64, f64) {
        match volume.rescale() {
            None => (self.lo, self.hi),
            Some(r) => {
                let a = (self.lo - r.intercept) / r.slope;
                let b = (self.hi - r.intercept) / r.slope;
                (a.min(b), a.max(b))
            }
        }
    }
}

/// The voxels whose value lies in `range`, within `within` (all voxels when `None`) and within
/// the voxel box `bounds` (the whole grid when `None`).
#[must_use]
pub fn threshold(
    volume: &Volume,
    range: IntensityRange,
    within: Option<&BitMask>,
    bounds: Option<&[Range<usize>; 3]>,
) -> BitMask {
    let (lo, hi) = range.raw(volume);
    let mut m = crate::with_voxels!(volume.voxels(), |s| in_range_bits(s, volume.dims(), lo, hi));
    if let Some(w) = within {
        m.and_with(w);
    }
    if let Some(b) = bounds {
        m.keep_box(b);
    }
    m
}

/// [`threshold`] on a scan of any size: a store is read at full resolution 16 planes at a time
/// through the volume interface (only the planes `bounds` spans), so its voxels are never held
/// whole; the selection itself is one bit per voxel of the grid.
pub fn threshold_source(
    source: &dyn crate::volume::VolumeSource,
    range: IntensityRange,
    within: Option<&BitMask>,
    bounds: Option<&[Range<usize>; 3]>,
) -> Result<BitMask, LabelsError> {
    if let Some(v) = source.whole() {
        return Ok(threshold(v, range, within, bounds));
    }
    let dims = source.dims();
    let [nx, ny, nz] = dims;
    let mut m = BitMask::new(dims);
    let planes = bounds.map_or(0..nz, |b| b[2].start.min(nz)..b[2].end.min(nz));
    let mut z0 = planes.start;
    while z0 < planes.end {
        let z1 = (z0 + 16).min(planes.end);
        let block = source
            .read_block(0, &[0..nx, 0..ny, z0..z1])
            .map_err(|e| LabelsError::Invalid(e.to_string()))?;
        // the block's own planes, placed at z0 in the grid
        let part = threshold(&block, range, None, None);
        for k in 0..z1 - z0 {
            for j in 0..ny {
                m.row_mut(j, z0 + k).copy_from_slice(part.row(j, k));
            }
        }
        z0 = z1;
    }
    if let Some(w) = within {
        m.and_with(w);
    }
    if let Some(b) = bounds {
        m.keep_box(b);
    }
    Ok(m)
}

/// The voxels with `lo ≤ value ≤ hi`, 64 at a time, planes in parallel.
fn in_range_bits<T: Voxel>(s: &[T], dims: [usize; 3], lo: f64, hi: f64) -> BitMask {
    use rayon::prelude::*;
    let [nx, ny, _] = dims;
    let mut m = BitMask::new(dims);
    let wpr = m.words_per_row();
    if wpr == 0 || ny == 0 {
        return m;
    }
    m.words_mut()
        .par_chunks_mut(wpr * ny)
        .zip(s.par_chunks(nx * ny))
        .for_each(|(plane, voxels)| {
            for (row, vox) in plane.chunks_mut(wpr).zip(voxels.chunks(nx)) {
                for (word, chunk) in row.iter_mut().zip(vox.chunks(64)) {
                    let mut w = 0u64;
                    for (b, v) in chunk.iter().enumerate() {
                        let v = v.to_f64();
                        w |= u64::from(lo <= v && v <= hi) << b;
                    }
                    *word = w;
                }
            }
        });
    m
}

/// What a region grows through.
#[derive(Clone, Debug)]
pub struct GrowOptions {
    pub range: IntensityRange,
    pub connectivity: Connectivity,
    /// Largest straight-line distance from the seed, in mm.
    pub max_distance_mm: Option<f64>,
}

/// The connected region of voxels in range that holds `seed`, growing only through voxels of
/// `within` when given (e.g. voxels no other label holds). Fails when the seed itself is not
/// in range or not in `within`.
///
/// The voxels it may enter are found first, 64 at a time ([`threshold`] with `within`, rows
/// cut to the distance limit); the flood then works on whole words of that mask.
pub fn grow(
    volume: &dyn crate::volume::VolumeSource,
    seed: [usize; 3],
    options: &GrowOptions,
    within: Option<&BitMask>,
) -> Result<BitMask, LabelsError> {
    let dims = volume.dims();
    if (0..3).any(|a| seed[a] >= dims[a]) {
        return Err(LabelsError::Outside(format!("seed voxel {seed:?}"), dims));
    }
    // a scan of any size: the voxels in range are found a slab at a time, the flood runs on
    // their bits (one per voxel)
    let mut allowed = threshold_source(volume, options.range, within, None)?;
    if let Some(d) = options.max_distance_mm {
        let limit = Limit {
            seed,
            spacing: volume.level(0).spacing_mm(),
            r2: d * d,
        };
        let [nx, ny, nz] = dims;
        for k in 0..nz {
            for j in 0..ny {
                let r = limit.row(j, k, nx);
                let mut keep = vec![0u64; allowed.words_per_row()];
                super::mask::set_bits(&mut keep, r);
                for (w, m) in allowed.row_mut(j, k).iter_mut().zip(&keep) {
                    *w &= m;
                }
            }
        }
    }
    if !allowed.get(seed[0], seed[1], seed[2]) {
        let at = crate::geometry::VoxelIndex::new(seed[0], seed[1], seed[2]);
        let v = match volume.whole() {
            Some(whole) => whole.value(at),
            None => volume
                .read_block(
                    0,
                    &[
                        seed[0]..seed[0] + 1,
                        seed[1]..seed[1] + 1,
                        seed[2]..seed[2] + 1,
                    ],
                )
                .ok()
                .and_then(|b| b.value(crate::geometry::VoxelIndex::new(0, 0, 0))),
        };
        return Err(LabelsError::Invalid(format!(
            "the seed voxel {seed:?} (value {}) is not in the range {}..{}{}",
            v.unwrap_or(f64::NAN),
            options.range.lo,
            options.range.hi,
            if within.is_some() {
                " or is held by another label"
            } else {
                ""
            }
        )));
    }
    Ok(flood(&allowed, seed, options.connectivity))
}

/// A distance limit around the seed.
#[derive(Clone, Copy)]
struct Limit {
    seed: [usize; 3],
    spacing: [f64; 3],
    r2: f64,
}

impl Limit {
    /// The voxels of row `(j, k)` within the limit.
    fn row(&self, j: usize, k: usize, nx: usize) -> Range<usize> {
        let dy = (j as f64 - self.seed[1] as f64) * self.spacing[1];
        let dz = (k as f64 - self.seed[2] as f64) * self.spacing[2];
        let rest = self.r2 * (1.0 + 1e-9) - dy * dy - dz * dz;
        if rest < 0.0 {
            return 0..0;
        }
        let half = (rest.sqrt() / self.spacing[0]).floor() as usize;
        let lo = self.seed[0].saturating_sub(half);
        let hi = (self.seed[0] + half + 1).min(nx);
        lo..hi
    }
}

/// The connected piece of `allowed` holding `seed` (which must be set): a scan-line flood on
/// whole words.
#[must_use]
pub fn flood(allowed: &BitMask, seed: [usize; 3], connectivity: Connectivity) -> BitMask {
    let dims = allowed.dims();
    let [nx, ny, nz] = dims;
    let mut visited = BitMask::new(dims);
    let wpr = allowed.words_per_row();
    let offsets: &[(isize, isize)] = match connectivity {
        Connectivity::Faces6 => &[(-1, 0), (1, 0), (0, -1), (0, 1)],
        Connectivity::All26 => &[
            (-1, -1),
            (0, -1),
            (1, -1),
            (-1, 0),
            (1, 0),
            (-1, 1),
            (0, 1),
            (1, 1),
        ],
    };
    let widen = usize::from(connectivity == Connectivity::All26);
    let bit = |row: &[u64], x: usize| row[x / 64] >> (x % 64) & 1 == 1;
    let mut stack: Vec<(u32, u32, u32)> = vec![(seed[0] as u32, seed[1] as u32, seed[2] as u32)];
    while let Some((i, j, k)) = stack.pop() {
        let (i, j, k) = (i as usize, j as usize, k as usize);
        let rs = allowed.row_start(j, k);
        let free_word = |w: usize, vis: &[u64]| allowed.words()[rs + w] & !vis[rs + w];
        if !bit(&allowed.words()[rs..rs + wpr], i) || bit(&visited.words()[rs..rs + wpr], i) {
            continue;
        }
        // the run of free voxels through i: to the right, then to the left
        let vis = visited.words();
        let mut i1 = i;
        loop {
            let w = i1 / 64;
            let f = free_word(w, vis) >> (i1 % 64);
            let ones = (!f).trailing_zeros() as usize; // free bits from i1 on in this word
            let ones = ones.min(64 - i1 % 64);
            i1 += ones;
            if ones == 0 || i1 % 64 != 0 || i1 >= nx {
                break;
            }
        }
        let i1 = i1.min(nx); // exclusive end
        let mut i0 = i + 1; // exclusive start going down: run is i0..i1 once done
        loop {
            // free bits below i0 in its word
            let w = (i0 - 1) / 64;
            let top = (i0 - 1) % 64; // highest bit index to look at
            let f = free_word(w, vis) << (63 - top);
            let ones = (!f).leading_zeros() as usize;
            let ones = ones.min(top + 1);
            i0 -= ones;
            if i0 % 64 != 0 || i0 == 0 || ones == 0 {
                break;
            }
        }
        visited.set_run(j, k, i0..i1);
        for &(dj, dk) in offsets {
            let (Some(nj), Some(nk)) = (j.checked_add_signed(dj), k.checked_add_signed(dk)) else {
                continue;
            };
            if nj >= ny || nk >= nz {
                continue;
            }
            let a = i0.saturating_sub(widen);
            let b = (i1 + widen).min(nx);
            let nrs = allowed.row_start(nj, nk);
            let vis = visited.words();
            // free bits of the neighbour row within a..b; push the start of each run
            let mut prev = false;
            for w in a / 64..=(b - 1) / 64 {
                let mut span = u64::MAX;
                if w == a / 64 {
                    span &= u64::MAX << (a % 64);
                }
                if w == (b - 1) / 64 && b % 64 != 0 {
                    span &= (1u64 << (b % 64)) - 1;
                }
                let f = allowed.words()[nrs + w] & !vis[nrs + w] & span;
                let starts = f & !(f << 1 | u64::from(prev));
                let mut st = starts;
                while st != 0 {
                    let t = st.trailing_zeros() as usize;
                    stack.push(((w * 64 + t) as u32, nj as u32, nk as u32));
                    st &= st - 1;
                }
                prev = f >> 63 & 1 == 1;
            }
        }
    }
    visited
}

/// The connected pieces of a mask, found on its runs.
#[derive(Debug)]
pub struct Pieces {
    dims: [usize; 3],
    /// Runs of set voxels, row by row.
    runs: Vec<(u32, u32)>,
    /// `row_first[r]..row_first[r + 1]`: the runs of row `r = j + ny·k`.
    row_first: Vec<u32>,
    /// Piece of each run (0-based, in order of first voxel).
    piece_of_run: Vec<u32>,
    sizes: Vec<u64>,
}

impl Pieces {
    /// Number of pieces.
    #[must_use]
    pub fn count(&self) -> usize {
        self.sizes.len()
    }

    /// Voxels in each piece, in piece order.
    #[must_use]
    pub fn sizes(&self) -> &[u64] {
        &self.sizes
    }

    /// The piece holding voxel `(i, j, k)`, if any.
    #[must_use]
    pub fn piece_at(&self, v: [usize; 3]) -> Option<usize> {
        let [nx, ny, nz] = self.dims;
        if v[0] >= nx || v[1] >= ny || v[2] >= nz {
            return None;
        }
        let r = v[1] + ny * v[2];
        let runs = self.row_first[r] as usize..self.row_first[r + 1] as usize;
        let i = v[0] as u32;
        runs.into_iter()
            .find(|&n| self.runs[n].0 <= i && i < self.runs[n].1)
            .map(|n| self.piece_of_run[n] as usize)
    }

    /// The voxels of the pieces for which `keep(piece)` holds.
    #[must_use]
    pub fn select(&self, keep: impl Fn(usize) -> bool) -> BitMask {
        let [_, ny, nz] = self.dims;
        let mut out = BitMask::new(self.dims);
        for k in 0..nz {
            for j in 0..ny {
                let r = j + ny * k;
                for n in self.row_first[r] as usize..self.row_first[r + 1] as usize {
                    if keep(self.piece_of_run[n] as usize) {
                        let (a, b) = self.runs[n];
                        out.set_run(j, k, a as usize..b as usize);
                    }
                }
            }
        }
        out
    }

    /// Whether a piece touches the faces of the grid.
    fn touches_border(&self) -> Vec<bool> {
        let [nx, ny, nz] = self.dims;
        let mut out = vec![false; self.sizes.len()];
        for k in 0..nz {
            for j in 0..ny {
                let r = j + ny * k;
                let edge_row = j == 0 || k == 0 || j + 1 == ny || k + 1 == nz;
                for n in self.row_first[r] as usize..self.row_first[r + 1] as usize {
                    let (a, b) = self.runs[n];
                    if edge_row || a == 0 || b as usize == nx {
                        out[self.piece_of_run[n] as usize] = true;
                    }
                }
            }
        }
        out
    }
}

/// Runs of set bits of one row.
fn row_runs(row: &[u64], out: &mut Vec<(u32, u32)>) {
    let mut start: Option<u32> = None;
    for (w, &word) in row.iter().enumerate() {
        let base = (w * 64) as u32;
        let mut x = word;
        let mut pos = 0u32;
        loop {
            if start.is_none() {
                if x == 0 {
                    break;
                }
                let tz = x.trailing_zeros();
                pos += tz;
                x >>= tz;
                start = Some(base + pos);
            }
            // in a run: count its ones from `pos` (64 when the word is all ones)
            let ones = (!x).trailing_zeros();
            if pos + ones >= 64 {
                break; // the run goes on into the next word
            }
            pos += ones;
            x >>= ones;
            if let Some(s) = start.take() {
                out.push((s, base + pos));
            }
        }
    }
    if let Some(s) = start {
        out.push((s, (row.len() * 64) as u32));
    }
}

fn find(parent: &mut [u32], mut x: u32) -> u32 {
    while parent[x as usize] != x {
        let p = parent[x as usize];
        parent[x as usize] = parent[p as usize];
        x = p;
    }
    x
}

/// The connected pieces of `mask`.
#[must_use]
pub fn pieces(mask: &BitMask, connectivity: Connectivity) -> Pieces {
    let [_, ny, nz] = mask.dims();
    let mut runs = Vec::new();
    let mut row_first = Vec::with_capacity(ny * nz + 1);
    for k in 0..nz {
        for j in 0..ny {
            row_first.push(runs.len() as u32);
            row_runs(mask.row(j, k), &mut runs);
        }
    }
    row_first.push(runs.len() as u32);
    let mut parent: Vec<u32> = (0..runs.len() as u32).collect();
    let slack = u32::from(connectivity == Connectivity::All26);
    let earlier: &[(isize, isize)] = match connectivity {
        Connectivity::Faces6 => &[(-1, 0), (0, -1)],
        Connectivity::All26 => &[(-1, 0), (-1, -1), (0, -1), (1, -1)],
    };
    for k in 0..nz {
        for j in 0..ny {
            let r = j + ny * k;
            let mine = row_first[r] as usize..row_first[r + 1] as usize;
            if mine.is_empty() {
                continue;
            }
            for &(dj, dk) in earlier {
                let (Some(oj), Some(ok)) = (j.checked_add_signed(dj), k.checked_add_signed(dk))
                else {
                    continue;
                };
                if oj >= ny {
                    continue;
                }
                let o = oj + ny * ok;
                let theirs = row_first[o] as usize..row_first[o + 1] as usize;
                let (mut a, mut b) = (mine.start, theirs.start);
                while a < mine.end && b < theirs.end {
                    let (s1, e1) = runs[a];
                    let (s2, e2) = runs[b];
                    if s1 < e2 + slack && s2 < e1 + slack {
                        let (ra, rb) = (find(&mut parent, a as u32), find(&mut parent, b as u32));
                        if ra != rb {
                            let (lo, hi) = (ra.min(rb), ra.max(rb));
                            parent[hi as usize] = lo;
                        }
                    }
                    if e1 < e2 {
                        a += 1;
                    } else {
                        b += 1;
                    }
                }
            }
        }
    }
    // number pieces by first run (runs are in memory order)
    let mut id_of_root = vec![u32::MAX; runs.len()];
    let mut piece_of_run = Vec::with_capacity(runs.len());
    let mut sizes: Vec<u64> = Vec::new();
    for (n, run) in runs.iter().enumerate() {
        let root = find(&mut parent, n as u32) as usize;
        if id_of_root[root] == u32::MAX {
            id_of_root[root] = sizes.len() as u32;
            sizes.push(0);
        }
        let id = id_of_root[root];
        piece_of_run.push(id);
        sizes[id as usize] += u64::from(run.1 - run.0);
    }
    Pieces {
        dims: mask.dims(),
        runs,
        row_first,
        piece_of_run,
        sizes,
    }
}

/// The piece of `mask` holding voxel `v`; an error when `v` is not in the mask.
pub fn keep_piece_at(
    mask: &BitMask,
    v: [usize; 3],
    connectivity: Connectivity,
) -> Result<BitMask, LabelsError> {
    let p = pieces(mask, connectivity);
    let id = p
        .piece_at(v)
        .ok_or_else(|| LabelsError::Invalid(format!("voxel {v:?} is not in the label")))?;
    Ok(p.select(|n| n == id))
}

/// The mask without its pieces of fewer than `min_voxels` voxels.
#[must_use]
pub fn remove_small(mask: &BitMask, min_voxels: u64, connectivity: Connectivity) -> BitMask {
    let p = pieces(mask, connectivity);
    p.select(|n| p.sizes[n] >= min_voxels)
}

/// The mask with its holes filled: every unset voxel not connected through unset voxels
/// (face connectivity) to the faces of the grid becomes set.
#[must_use]
pub fn fill_holes(mask: &BitMask) -> BitMask {
    let background = mask.complement();
    let p = pieces(&background, Connectivity::Faces6);
    let border = p.touches_border();
    let mut holes = p.select(|n| !border[n]);
    holes.or_with(mask);
    holes
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;

    fn volume(dims: [usize; 3], f: impl Fn(usize, usize, usize) -> u16) -> Volume {
        let mut data = Vec::new();
        for k in 0..dims[2] {
            for j in 0..dims[1] {
                for i in 0..dims[0] {
                    data.push(f(i, j, k));
                }
            }
        }
        Volume::from_vec(dims, Affine3::from_spacing([0.5, 1.0, 2.0]), data).unwrap()
    }

    #[test]
    fn runs_of_rows() {
        let mut out = Vec::new();
        let mut row = vec![0u64; 3];
        super::super::mask::set_bits(&mut row, 3..5);
        super::super::mask::set_bits(&mut row, 60..130);
        super::super::mask::set_bits(&mut row, 131..132);
        row_runs(&row, &mut out);
        assert_eq!(out, vec![(3, 5), (60, 130), (131, 132)]);
        out.clear();
        row_runs(&[u64::MAX, u64::MAX], &mut out);
        assert_eq!(out, vec![(0, 128)]);
    }

    #[test]
    fn grow_follows_connectivity_and_distance() {
        // two bright bars touching only at a corner (diagonal in i-j)
        let v = volume([10, 10, 3], |i, j, k| {
            u16::from(k == 1 && ((j == 2 && i <= 4) || (j == 3 && i >= 5)))
        });
        let opt = |c| GrowOptions {
            range: IntensityRange::new(1.0, 1.0).unwrap(),
            connectivity: c,
            max_distance_mm: None,
        };
        let six = grow(&v, [0, 2, 1], &opt(Connectivity::Faces6), None).unwrap();
        assert_eq!(six.count(), 5);
        let all = grow(&v, [0, 2, 1], &opt(Connectivity::All26), None).unwrap();
        assert_eq!(all.count(), 10);
        // 1 mm from voxel 0 along i (0.5 mm voxels): i = 0, 1, 2
        let near = grow(
            &v,
            [0, 2, 1],
            &GrowOptions {
                max_distance_mm: Some(1.0),
                ..opt(Connectivity::Faces6)
            },
            None,
        )
        .unwrap();
        assert_eq!(near.count(), 3);
        assert!(grow(&v, [0, 0, 0], &opt(Connectivity::Faces6), None).is_err());
    }

    #[test]
    fn flood_crosses_words_and_stops_at_their_edges() {
        // a run ending exactly at a word boundary (i = 63) and rows of 150 voxels
        let dims = [150, 4, 3];
        let allowed = BitMask::from_fn(dims, |i, j, k| {
            (i < 64 && j == 1) || (j == 2 && k == 1) || (i == 140 && k == 1)
        });
        let f = flood(&allowed, [10, 1, 1], Connectivity::Faces6);
        // row j = 1 (i < 64) in every plane joins row j = 2 of plane 1 (all 150), which
        // reaches i = 140 of rows 0, 1, 3 in plane 1
        assert_eq!(f.count(), 3 * 64 + 150 + 3);
        let brute = BitMask::from_fn(dims, |i, j, k| allowed.get(i, j, k));
        assert_eq!(pieces(&brute, Connectivity::Faces6).count(), 1);
    }

    #[test]
    fn pieces_holes_and_small() {
        let dims = [12, 12, 12];
        // a hollow cube shell (one hole inside) and a lone voxel
        let m = BitMask::from_fn(dims, |i, j, k| {
            let inside = (2..9).contains(&i) && (2..9).contains(&j) && (2..9).contains(&k);
            let core = (4..7).contains(&i) && (4..7).contains(&j) && (4..7).contains(&k);
            (inside && !core) || (i, j, k) == (10, 10, 10)
        });
        let p = pieces(&m, Connectivity::Faces6);
        assert_eq!(p.count(), 2);
        assert_eq!(p.sizes(), &[343 - 27, 1]);
        assert_eq!(p.piece_at([10, 10, 10]), Some(1));
        assert_eq!(remove_small(&m, 2, Connectivity::Faces6).count(), 343 - 27);
        let filled = fill_holes(&m);
        assert_eq!(filled.count(), 343 + 1);
        let one = keep_piece_at(&m, [2, 2, 2], Connectivity::Faces6).unwrap();
        assert_eq!(one.count(), 343 - 27);
        assert!(keep_piece_at(&m, [0, 0, 0], Connectivity::Faces6).is_err());
    }
}
