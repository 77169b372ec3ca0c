//! A binary mask over a voxel grid, one bit per voxel, packed by rows.
//!
//! Every operation of virtual preparation produces a [`BitMask`]: the voxels a threshold, a
//! region grow, a morphological operation or an interpolation selects. The label volume then
//! takes the mask in one call ([`super::LabelVolume::apply`]), which is what makes each operation
//! one undoable step. At one bit per voxel a 1024³ mask takes 128 MiB.
//!
//! Layout: rows along `i` (the fastest axis), `words_per_row = ceil(nx / 64)` words per row,
//! row `(j, k)` at `(j + ny·k)·words_per_row`; bit `i % 64` of word `i / 64`. Bits past `nx` in
//! a row's last word are always zero (every writer keeps this invariant).

use std::ops::Range;

/// One bit per voxel (see the module docs for the layout).
#[derive(Clone, PartialEq, Eq)]
pub struct BitMask {
    dims: [usize; 3],
    words_per_row: usize,
    bits: Vec<u64>,
}

impl std::fmt::Debug for BitMask {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("BitMask")
            .field("dims", &self.dims)
            .field("count", &self.count())
            .finish_non_exhaustive()
    }
}

impl BitMask {
    /// An empty mask.
    #[must_use]
    pub fn new(dims: [usize; 3]) -> Self {
        let words_per_row = dims[0].div_ceil(64);
        Self {
            dims,
            words_per_row,
            bits: vec![0; words_per_row * dims[1] * dims[2]],
        }
    }

    /// A mask of the voxels for which `f(i, j, k)` holds.
    #[must_use]
    pub fn from_fn(dims: [usize; 3], f: impl Fn(usize, usize, usize) -> bool + Sync) -> Self {
        use rayon::prelude::*;
        let mut m = Self::new(dims);
        let wpr = m.words_per_row;
        let plane = wpr * dims[1];
        if plane == 0 {
            return m;
        }
        m.bits
            .par_chunks_mut(plane)
            .enumerate()
            .for_each(|(k, words)| {
                for j in 0..dims[1] {
                    let row = &mut words[j * wpr..(j + 1) * wpr];
                    for i in 0..dims[0] {
                        if f(i, j, k) {
                            row[i / 64] |= 1 << (i % 64);
                        }
                    }
                }
            });
        m
    }

    /// A mask from one byte per voxel (non-zero set), in the volume's memory order.
    #[must_use]
    pub fn from_bytes(dims: [usize; 3], bytes: &[u8]) -> Self {
        assert_eq!(bytes.len(), dims[0] * dims[1] * dims[2]);
        Self::from_fn(dims, |i, j, k| bytes[i + dims[0] * (j + dims[1] * k)] != 0)
    }

    /// One byte per voxel (1 set, 0 clear), in the volume's memory order.
    #[must_use]
    pub fn to_bytes(&self) -> Vec<u8> {
        let [nx, ny, nz] = self.dims;
        let mut out = vec![0u8; nx * ny * nz];
        for k in 0..nz {
            for j in 0..ny {
                let row = self.row(j, k);
                let base = nx * (j + ny * k);
                for (i, slot) in out[base..base + nx].iter_mut().enumerate() {
                    *slot = u8::from(row[i / 64] >> (i % 64) & 1 == 1);
                }
            }
        }
        out
    }

    #[must_use]
    pub fn dims(&self) -> [usize; 3] {
        self.dims
    }

    #[must_use]
    pub fn words_per_row(&self) -> usize {
        self.words_per_row
    }

    /// Index of the first word of row `(j, k)`.
    #[inline]
    #[must_use]
    pub fn row_start(&self, j: usize, k: usize) -> usize {
        (j + self.dims[1] * k) * self.words_per_row
    }

    #[inline]
    #[must_use]
    pub fn row(&self, j: usize, k: usize) -> &[u64] {
        let s = self.row_start(j, k);
        &self.bits[s..s + self.words_per_row]
    }

    #[inline]
    pub fn row_mut(&mut self, j: usize, k: usize) -> &mut [u64] {
        let s = self.row_start(j, k);
        let w = self.words_per_row;
        &mut self.bits[s..s + w]
    }

    /// All words, rows in order.
    #[must_use]
    pub fn words(&self) -> &[u64] {
        &self.bits
    }

    pub fn words_mut(&mut self) -> &mut [u64] {
        &mut self.bits
    }

    /// The mask of the valid bits of a row's word `w` (all ones but in the last word).
    #[inline]
    #[must_use]
    pub fn word_mask(&self, w: usize) -> u64 {
        let rem = self.dims[0] % 64;
        if w + 1 == self.words_per_row && rem != 0 {
            (1u64 << rem) - 1
        } else {
            u64::MAX
        }
    }

    #[inline]
    #[must_use]
    pub fn get(&self, i: usize, j: usize, k: usize) -> bool {
        self.bits[self.row_start(j, k) + i / 64] >> (i % 64) & 1 == 1
    }

    #[inline]
    pub fn set(&mut self, i: usize, j: usize, k: usize, on: bool) {
        let w = self.row_start(j, k) + i / 64;
        if on {
            self.bits[w] |= 1 << (i % 64);
        } else {
            self.bits[w] &= !(1 << (i % 64));
        }
    }

    /// Sets bits `i0..i1` of row `(j, k)`.
    pub fn set_run(&mut self, j: usize, k: usize, run: Range<usize>) {
        let s = self.row_start(j, k);
        set_bits(&mut self.bits[s..s + self.words_per_row], run);
    }

    /// Number of set voxels.
    #[must_use]
    pub fn count(&self) -> u64 {
        self.bits.iter().map(|w| u64::from(w.count_ones())).sum()
    }

    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.bits.iter().all(|&w| w == 0)
    }

    /// The half-open voxel box holding every set voxel, or `None` when empty.
    #[must_use]
    pub fn bbox(&self) -> Option<[Range<usize>; 3]> {
        let [_, ny, nz] = self.dims;
        let wpr = self.words_per_row;
        let (mut lo, mut hi) = ([usize::MAX; 3], [0usize; 3]);
        for k in 0..nz {
            for j in 0..ny {
                let row = self.row(j, k);
                let Some(first) = row.iter().position(|&w| w != 0) else {
                    continue;
                };
                let last = (0..wpr).rev().find(|&w| row[w] != 0).unwrap_or(first);
                let i0 = first * 64 + row[first].trailing_zeros() as usize;
                let i1 = last * 64 + 63 - row[last].leading_zeros() as usize;
                lo = [lo[0].min(i0), lo[1].min(j), lo[2].min(k)];
                hi = [hi[0].max(i1 + 1), hi[1].max(j + 1), hi[2].max(k + 1)];
            }
        }
        (lo[0] != usize::MAX).then(|| [lo[0]..hi[0], lo[1]..hi[1], lo[2]..hi[2]])
    }

    /// `self ∪= other`.
    pub fn or_with(&mut self, other: &Self) {
        assert_eq!(self.dims, other.dims);
        self.bits
            .iter_mut()
            .zip(&other.bits)
            .for_each(|(a, b)| *a |= b);
    }

    /// `self ∩= other`.
    pub fn and_with(&mut self, other: &Self) {
        assert_eq!(self.dims, other.dims);
        self.bits
            .iter_mut()
            .zip(&other.bits)
            .for_each(|(a, b)| *a &= b);
    }

    /// `self −= other`.
    pub fn and_not_with(&mut self, other: &Self) {
        assert_eq!(self.dims, other.dims);
        self.bits
            .iter_mut()
            .zip(&other.bits)
            .for_each(|(a, b)| *a &= !b);
    }

    /// The complement within the grid.
    #[must_use]
    pub fn complement(&self) -> Self {
        let mut out = self.clone();
        let wpr = self.words_per_row;
        for (n, w) in out.bits.iter_mut().enumerate() {
            *w = !*w & self.word_mask(n % wpr);
        }
        out
    }

    /// Keeps only the voxels inside a half-open box.
    pub fn keep_box(&mut self, b: &[Range<usize>; 3]) {
        let [_, ny, nz] = self.dims;
        let wpr = self.words_per_row;
        let mut keep = vec![0u64; wpr];
        set_bits(&mut keep, b[0].start..b[0].end.min(self.dims[0]));
        for k in 0..nz {
            for j in 0..ny {
                let inside = b[1].contains(&j) && b[2].contains(&k);
                for (w, kw) in self.row_mut(j, k).iter_mut().zip(&keep) {
                    *w = if inside { *w & kw } else { 0 };
                }
            }
        }
    }
}

/// Sets bits `run` of a row of words.
pub fn set_bits(row: &mut [u64], run: Range<usize>) {
    if run.is_empty() {
        return;
    }
    let (a, b) = (run.start, run.end);
    let (wa, wb) = (a / 64, (b - 1) / 64);
    for (w, word) in row.iter_mut().enumerate().take(wb + 1).skip(wa) {
        let lo = if w == wa { a % 64 } else { 0 };
        let hi = if w == wb { (b - 1) % 64 + 1 } else { 64 };
        let bits = if hi - lo == 64 {
            u64::MAX
        } else {
            ((1u64 << (hi - lo)) - 1) << lo
        };
        *word |= bits;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn set_get_count_bbox() {
        let mut m = BitMask::new([70, 3, 2]);
        assert!(m.bbox().is_none());
        m.set(65, 1, 1, true);
        m.set(3, 2, 0, true);
        m.set_run(0, 1, 60..70);
        assert!(m.get(65, 1, 1) && m.get(3, 2, 0) && m.get(69, 0, 1));
        assert_eq!(m.count(), 12);
        assert_eq!(m.bbox(), Some([3..70, 0..3, 0..2]));
        let c = m.complement();
        assert_eq!(c.count(), 70 * 6 - 12);
        m.set(65, 1, 1, false);
        assert_eq!(m.count(), 11);
        let bytes = m.to_bytes();
        assert_eq!(BitMask::from_bytes(m.dims(), &bytes), m);
    }
}
