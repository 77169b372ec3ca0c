//! The volume interface: what every consumer of voxels reads through, whatever the scan's size.
//!
//! A [`VolumeSource`] is a scan at one or more levels of detail. Level 0 is full resolution;
//! each further level is coarser by a power of two along some axes ([`Level::factor`]), placed
//! in the same world: a level voxel sits at the centre of the block of level-0 voxels it
//! stands for. Consumers never index voxels of a source directly; they ask for a
//! [`Block`] — a box of voxels at one level, as an in-memory [`Volume`] placed in the world —
//! and run the fast in-memory code (slices, projections, picking) on it.
//!
//! Two implementations:
//! - [`Volume`] itself: a scan wholly in memory, one level; a block of it is the volume itself
//!   (a superset of any box asked for, so nothing is copied);
//! - the chunked multiscale store (`crate::store`): every block is read through a chunk cache
//!   with a byte budget, so memory stays bounded whatever the scan's size.
//!
//! Rules a block obeys: it holds at least the voxels asked for (clamped to the level's grid),
//! with the source's stored type and rescale; its `world_from_voxel` places each of its voxels
//! where the level places it. Sampling a block inside the box asked for therefore gives the
//! same values as sampling the whole level, provided the box includes the neighbours the
//! sampling reads (one voxel beyond a point for trilinear interpolation): see
//! [`region_around`].
//!
//! Level of detail: a view of `pixel_mm` per screen pixel reads
//! [`VolumeSource::level_for_pixel`], the coarsest level that still has at least one voxel per
//! pixel along its finest axis.

use super::{DType, Histogram, Rescale, SpacingOrigin, Stats, Volume};
use crate::geometry::{Affine3, VoxelIndex, VoxelPoint, WorldPoint};
use nalgebra::{Matrix3, Vector3};
use std::ops::{Deref, Range};
use std::path::PathBuf;

/// Percentiles every source reports (see [`Intensity`]): the ISO-50 histogram's range
/// (0.01 and 99.99), an automatic window's (0.5 and 99.5) and the median.
pub const INTENSITY_PERCENTILES: [f64; 5] = [0.01, 0.5, 50.0, 99.5, 99.99];

/// Bins of the histogram an [`Intensity`] carries, between the 0.01th and 99.99th percentiles
/// (the histogram the ISO-50 threshold is found in).
pub const INTENSITY_HISTOGRAM_BINS: usize = 512;

/// A box of voxel indices, half-open on each axis (`i`, `j`, `k`).
pub type Region = [Range<usize>; 3];

/// One level of detail of a source.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Level {
    /// Voxels along `i`, `j`, `k`.
    pub dims: [usize; 3],
    /// Level-0 voxels per voxel of this level along each axis (1 at level 0).
    pub factor: [usize; 3],
    /// Where this level's voxel coordinates lie in the world (mm).
    pub world_from_voxel: Affine3,
}

impl Level {
    /// The level of a volume of `dims` placed by `world_from_voxel` coarsened by `factor`:
    /// voxel `v` of the level sits at level-0 coordinate `factor·v + (factor − 1)/2`, the centre
    /// of its block.
    #[must_use]
    pub fn coarsened(dims: [usize; 3], world_from_voxel: &Affine3, factor: [usize; 3]) -> Self {
        let f = factor.map(|x| x as f64);
        let scale = Affine3::from_linear_translation(
            &Matrix3::from_diagonal(&Vector3::new(f[0], f[1], f[2])),
            &Vector3::new((f[0] - 1.0) / 2.0, (f[1] - 1.0) / 2.0, (f[2] - 1.0) / 2.0),
        );
        Self {
            dims: [0, 1, 2].map(|a| dims[a].div_ceil(factor[a])),
            factor,
            world_from_voxel: world_from_voxel.compose(&scale),
        }
    }

    /// Voxel size in millimetres along each axis of this level.
    #[must_use]
    pub fn spacing_mm(&self) -> [f64; 3] {
        self.world_from_voxel.column_lengths()
    }

    /// The whole grid as a region.
    #[must_use]
    pub fn full_region(&self) -> Region {
        [0..self.dims[0], 0..self.dims[1], 0..self.dims[2]]
    }

    /// Voxels of the level.
    #[must_use]
    pub fn voxel_count(&self) -> u64 {
        self.dims.iter().map(|&n| n as u64).product()
    }
}

/// Voxels read from a source: a volume placed in the world holding at least the region asked
/// for. Dereferences to the [`Volume`].
#[derive(Debug)]
#[allow(
    clippy::large_enum_variant,
    reason = "one block is moved once per read; boxing would add an allocation to each"
)]
pub enum Block<'a> {
    /// The source is in memory: the whole of it.
    Whole(&'a Volume),
    /// Voxels read for this request.
    Read(Volume),
}

impl Deref for Block<'_> {
    type Target = Volume;
    fn deref(&self) -> &Volume {
        match self {
            Self::Whole(v) => v,
            Self::Read(v) => v,
        }
    }
}

/// Why voxels could not be read from a source.
#[derive(Debug, thiserror::Error)]
pub enum ReadError {
    /// The caller asked for a level the source does not have.
    #[error("level {level} does not exist (the scan has {count})")]
    NoLevel { level: usize, count: usize },
    /// The caller asked for an empty region or one outside the level.
    #[error("region {region:?} is empty or outside the level's grid {dims:?}")]
    BadRegion { region: Region, dims: [usize; 3] },
    /// The block asked for is larger than what may be held in memory at once.
    #[error("a block of {bytes} bytes exceeds the memory budget of {budget} bytes")]
    TooLarge { bytes: u64, budget: u64 },
    /// The stored data could not be read or decoded (the store names the file and the fault).
    #[error("{}: {what}", path.display())]
    Storage { path: PathBuf, what: String },
}

/// Intensity facts of a scan: statistics, the standard percentiles and the ISO-50 histogram,
/// all of rescaled values.
#[derive(Clone, Debug, PartialEq)]
pub struct Intensity {
    pub stats: Stats,
    /// `(percentile, value)` for each of [`INTENSITY_PERCENTILES`].
    pub percentiles: Vec<(f64, f64)>,
    /// [`INTENSITY_HISTOGRAM_BINS`] bins between the 0.01th and 99.99th percentiles; `None`
    /// when the scan holds no number or a single value.
    pub histogram: Option<Histogram>,
    /// Whether every figure is exact (computed over every voxel); when not, `note` says how
    /// it was obtained and how far off it can be.
    pub exact: bool,
    pub note: Option<String>,
}

impl Intensity {
    /// The value of percentile `p` if it is one of [`INTENSITY_PERCENTILES`].
    #[must_use]
    pub fn percentile(&self, p: f64) -> Option<f64> {
        self.percentiles
            .iter()
            .find(|(q, _)| (q - p).abs() < 1e-12)
            .map(|&(_, v)| v)
    }

    /// The facts of an in-memory volume, exact.
    #[must_use]
    pub fn of_volume(volume: &Volume) -> Self {
        let stats = volume.stats();
        let values = volume.percentiles(&INTENSITY_PERCENTILES);
        let (lo, hi) = (values[0], values[4]);
        let histogram = (lo.is_finite() && hi.is_finite() && hi > lo)
            .then(|| volume.histogram(INTENSITY_HISTOGRAM_BINS, lo, hi));
        Self {
            stats,
            percentiles: INTENSITY_PERCENTILES.iter().copied().zip(values).collect(),
            histogram,
            exact: true,
            note: None,
        }
    }
}

/// A scan at one or more levels of detail (see the module docs).
pub trait VolumeSource: Send + Sync {
    /// The stored voxel type (the same at every level).
    fn dtype(&self) -> DType;

    /// `value = slope · stored + intercept`, applied on every read.
    fn rescale(&self) -> Option<Rescale>;

    /// Levels of detail, at least one; level 0 is full resolution.
    fn level_count(&self) -> usize;

    /// Level `level`; panics if it does not exist (see [`Self::level_count`]).
    fn level(&self, level: usize) -> Level;

    /// A block holding at least `region` of `level` (clamped to the grid).
    fn read_block(&self, level: usize, region: &Region) -> Result<Block<'_>, ReadError>;

    /// Things the loader or the converter did that the user should know.
    fn notes(&self) -> &[String];

    /// Where the voxel size came from.
    fn spacing_origin(&self) -> SpacingOrigin;

    /// Intensity statistics, percentiles and the ISO-50 histogram (exact, or with the error
    /// stated).
    fn intensity(&self) -> Result<Intensity, ReadError>;

    /// The scan as one in-memory volume, when it is one (no block needs reading).
    fn whole(&self) -> Option<&Volume> {
        None
    }

    /// Reads, in the background, blocks that are likely to be asked for next (a no-op where
    /// everything is in memory).
    fn prefetch(&self, _level: usize, _region: &Region) {}

    /// Full-resolution grid.
    fn dims(&self) -> [usize; 3] {
        self.level(0).dims
    }

    /// Full-resolution placement.
    fn world_from_voxel(&self) -> Affine3 {
        self.level(0).world_from_voxel
    }

    /// Full-resolution voxel size in millimetres.
    fn spacing_mm(&self) -> [f64; 3] {
        self.level(0).spacing_mm()
    }

    /// Bytes of the full-resolution voxels.
    fn voxel_bytes(&self) -> u64 {
        self.level(0).voxel_count() * self.dtype().size_bytes() as u64
    }

    /// A full-resolution voxel coordinate's world position.
    fn voxel_to_world(&self, p: VoxelPoint) -> WorldPoint {
        self.world_from_voxel().voxel_to_world(p)
    }

    /// A world point's full-resolution voxel coordinate.
    fn world_to_voxel(&self, p: WorldPoint) -> VoxelPoint {
        self.world_from_voxel().inverse().world_to_voxel(p)
    }

    /// The rescaled value of one full-resolution voxel (`None` outside the grid), read through
    /// the source: a cursor read-out on a scan of any size.
    fn voxel_value(&self, v: VoxelIndex) -> Result<Option<f64>, ReadError> {
        if let Some(w) = self.whole() {
            return Ok(w.value(v));
        }
        let d = self.dims();
        if v.i >= d[0] || v.j >= d[1] || v.k >= d[2] {
            return Ok(None);
        }
        let block = self.read_block(0, &[v.i..v.i + 1, v.j..v.j + 1, v.k..v.k + 1])?;
        // the block is placed in the world: find the voxel in it by its position
        let at = block
            .world_to_voxel(self.voxel_to_world(v.centre()))
            .nearest_index(block.dims());
        Ok(at.and_then(|i| block.value(i)))
    }

    /// The world position of the centre of the grid.
    fn centre_world(&self) -> WorldPoint {
        let d = self.dims();
        self.world_from_voxel().voxel_to_world(VoxelPoint::new(
            (d[0] as f64 - 1.0) / 2.0,
            (d[1] as f64 - 1.0) / 2.0,
            (d[2] as f64 - 1.0) / 2.0,
        ))
    }

    /// The coarsest level whose finest voxel side is at most `pixel_mm` (at least one voxel
    /// per screen pixel); level 0 when even that is coarser than a pixel.
    fn level_for_pixel(&self, pixel_mm: f64) -> usize {
        let mut best = 0;
        for l in 1..self.level_count() {
            let s = self.level(l).spacing_mm();
            if s[0].min(s[1]).min(s[2]) <= pixel_mm * (1.0 + 1e-9) {
                best = l;
            }
        }
        best
    }

    /// The finest level whose whole grid holds at most `budget_bytes` of voxels (the coarsest
    /// level when none does).
    fn level_within(&self, budget_bytes: u64) -> usize {
        let size = self.dtype().size_bytes() as u64;
        (0..self.level_count())
            .find(|&l| self.level(l).voxel_count() * size <= budget_bytes)
            .unwrap_or(self.level_count() - 1)
    }
}

impl VolumeSource for Volume {
    fn dtype(&self) -> DType {
        Volume::dtype(self)
    }

    fn rescale(&self) -> Option<Rescale> {
        Volume::rescale(self)
    }

    fn level_count(&self) -> usize {
        1
    }

    fn level(&self, level: usize) -> Level {
        assert_eq!(level, 0, "an in-memory volume has one level");
        Level {
            dims: Volume::dims(self),
            factor: [1; 3],
            world_from_voxel: *Volume::world_from_voxel(self),
        }
    }

    fn read_block(&self, level: usize, region: &Region) -> Result<Block<'_>, ReadError> {
        if level != 0 {
            return Err(ReadError::NoLevel { level, count: 1 });
        }
        clamp_region(region, Volume::dims(self))?;
        Ok(Block::Whole(self))
    }

    fn notes(&self) -> &[String] {
        &self.notes
    }

    fn spacing_origin(&self) -> SpacingOrigin {
        self.spacing_origin
    }

    fn intensity(&self) -> Result<Intensity, ReadError> {
        Ok(Intensity::of_volume(self))
    }

    fn whole(&self) -> Option<&Volume> {
        Some(self)
    }
}

/// `region` clamped to a grid of `dims`; an error when nothing of it is inside.
pub fn clamp_region(region: &Region, dims: [usize; 3]) -> Result<Region, ReadError> {
    let r = [0, 1, 2].map(|a| region[a].start.min(dims[a])..region[a].end.min(dims[a]));
    if r.iter().any(|x| x.start >= x.end) {
        return Err(ReadError::BadRegion {
            region: region.clone(),
            dims,
        });
    }
    Ok(r)
}

/// The voxels of a level whose values trilinear sampling at any point of `points` (continuous
/// voxel coordinates of that level) reads, widened by `margin` voxels on every side and
/// clamped to the grid; `None` when no point lies within the level's cells.
#[must_use]
pub fn region_around(points: &[Vector3<f64>], dims: [usize; 3], margin: usize) -> Option<Region> {
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for p in points {
        for a in 0..3 {
            if p[a].is_finite() {
                lo[a] = lo[a].min(p[a]);
                hi[a] = hi[a].max(p[a]);
            }
        }
    }
    let mut r = [0..0, 0..0, 0..0];
    for a in 0..3 {
        if !(lo[a].is_finite() && hi[a].is_finite()) {
            return None;
        }
        let n = dims[a] as f64;
        let start = (lo[a].floor() - margin as f64).clamp(0.0, n);
        let end = (hi[a].floor() + 2.0 + margin as f64).clamp(0.0, n);
        if start >= end {
            return None;
        }
        r[a] = start as usize..end as usize;
    }
    Some(r)
}

/// A region's voxel count.
#[must_use]
pub fn region_voxels(region: &Region) -> u64 {
    region.iter().map(|r| r.len() as u64).product()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::VoxelIndex;
    use approx::assert_relative_eq;

    #[test]
    fn coarsened_levels_keep_block_centres_in_place() {
        let w = Affine3::from_rows([
            [0.02, 0.0, 0.0, 1.0],
            [0.0, 0.03, 0.0, 2.0],
            [0.0, 0.0, 0.05, 3.0],
            [0.0, 0.0, 0.0, 1.0],
        ])
        .unwrap();
        let l = Level::coarsened([9, 8, 7], &w, [2, 2, 1]);
        assert_eq!(l.dims, [5, 4, 7]);
        // level voxel (1, 1, 3) is the centre of level-0 voxels 2..4, 2..4, 3
        let got = l
            .world_from_voxel
            .voxel_to_world(VoxelPoint::new(1.0, 1.0, 3.0));
        let want = w.voxel_to_world(VoxelPoint::new(2.5, 2.5, 3.0));
        assert_relative_eq!(got.0, want.0, epsilon = 1e-12);
        assert_relative_eq!(l.spacing_mm()[0], 0.04, epsilon = 1e-12);
    }

    #[test]
    fn an_in_memory_volume_is_a_one_level_source() {
        let data: Vec<u16> = (0..60).collect();
        let v = Volume::from_vec([5, 4, 3], Affine3::from_spacing([0.1, 0.1, 0.2]), data).unwrap();
        let s: &dyn VolumeSource = &v;
        assert_eq!(s.level_count(), 1);
        assert_eq!(s.dims(), [5, 4, 3]);
        assert!(s.whole().is_some());
        let b = s.read_block(0, &[1..2, 0..4, 2..3]).unwrap();
        assert_eq!(b.value(VoxelIndex::new(1, 0, 2)), Some(41.0));
        assert!(matches!(
            s.read_block(1, &[0..1, 0..1, 0..1]),
            Err(ReadError::NoLevel { .. })
        ));
        assert!(matches!(
            s.read_block(0, &[5..6, 0..1, 0..1]),
            Err(ReadError::BadRegion { .. })
        ));
        assert_eq!(s.level_for_pixel(10.0), 0);
        let i = s.intensity().unwrap();
        assert!(i.exact);
        assert_eq!(i.percentile(50.0), Some(29.5));
        assert_eq!(i.histogram.unwrap().counts.len(), INTENSITY_HISTOGRAM_BINS);
    }

    #[test]
    fn regions_cover_the_trilinear_neighbours() {
        let r = region_around(
            &[Vector3::new(2.5, 0.2, 3.0), Vector3::new(4.9, 1.0, 3.0)],
            [10, 10, 10],
            0,
        )
        .unwrap();
        assert_eq!(r, [2..6, 0..3, 3..5]);
        let r = region_around(&[Vector3::new(-0.4, 9.4, 0.0)], [10, 10, 10], 2).unwrap();
        assert_eq!(r, [0..3, 7..10, 0..4]);
        assert!(region_around(&[Vector3::new(f64::NAN, 0.0, 0.0)], [4, 4, 4], 0).is_none());
    }
}
