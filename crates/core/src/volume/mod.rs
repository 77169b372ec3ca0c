//! The volume model: a 3D grid of voxels in the file's own type, placed in the world.
//!
//! A [`Volume`] owns its dimensions, its `world_from_voxel` map (millimetres), the voxels in one
//! contiguous buffer of their stored type ([`Voxels`]) and an optional linear [`Rescale`]
//! applied on every read, never baked into a wider copy: a 2 GiB 16-bit scan takes 2 GiB.
//!
//! Memory order: `i` fastest, then `j`, then `k` (`index = i + nx·(j + ny·k)`), the order of
//! `NIfTI` and of a TIFF stack of `k` slices of `ny` rows of `nx` pixels.
//!
//! Submodules: [`buffer`] (the storage), [`stats`] (min/max/mean/sum, percentiles, histogram),
//! [`sample`] (nearest and trilinear sampling at world points), [`source`] (the volume
//! interface every consumer reads through: levels of detail and block reads, of which a
//! `Volume` is the in-memory implementation).
//!
//! Must not import `io`, `render` or `gui`.

pub mod buffer;
pub mod resize;
pub mod sample;
pub mod source;
pub mod stats;

pub use buffer::VoxelBuffer;
pub use source::{Block, Intensity, Level, ReadError, Region, VolumeSource};
pub use stats::{Histogram, Stats};

use crate::geometry::{Affine3, VoxelIndex, VoxelPoint, WorldPoint};
use serde::{Deserialize, Serialize};

/// The stored voxel type. Loaders keep `u8`, `i16`, `u16` and `f32` as they are; other types
/// are converted on load (see [`Volume::notes`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DType {
    U8,
    I16,
    U16,
    F32,
}

impl DType {
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::U8 => "u8",
            Self::I16 => "i16",
            Self::U16 => "u16",
            Self::F32 => "f32",
        }
    }

    #[must_use]
    pub const fn size_bytes(self) -> usize {
        match self {
            Self::U8 => 1,
            Self::I16 | Self::U16 => 2,
            Self::F32 => 4,
        }
    }
}

impl std::fmt::Display for DType {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// A voxel type Sutura can store.
pub trait Voxel: Copy + Send + Sync + PartialOrd + Default + bytemuck::Pod + 'static {
    const DTYPE: DType;
    fn to_f64(self) -> f64;
    fn to_f32(self) -> f32;
    /// The value as a whole number (a float truncated toward zero): the index into the count
    /// tables of integer types, without a round trip through `f64`.
    fn to_i64(self) -> i64;
}

macro_rules! impl_voxel {
    ($t:ty, $d:expr) => {
        impl Voxel for $t {
            const DTYPE: DType = $d;
            #[inline]
            fn to_f64(self) -> f64 {
                f64::from(self)
            }
            #[inline]
            fn to_f32(self) -> f32 {
                #[allow(clippy::cast_lossless, reason = "u8/i16/u16 to f32 is exact")]
                {
                    self as f32
                }
            }
            #[inline]
            fn to_i64(self) -> i64 {
                #[allow(clippy::cast_lossless, reason = "one form for every voxel type")]
                #[allow(
                    clippy::cast_possible_truncation,
                    reason = "floats truncate, as documented"
                )]
                {
                    self as i64
                }
            }
        }
    };
}
impl_voxel!(u8, DType::U8);
impl_voxel!(i16, DType::I16);
impl_voxel!(u16, DType::U16);
impl_voxel!(f32, DType::F32);

/// The voxels of a volume, in their stored type.
#[derive(Debug)]
pub enum Voxels {
    U8(VoxelBuffer<u8>),
    I16(VoxelBuffer<i16>),
    U16(VoxelBuffer<u16>),
    F32(VoxelBuffer<f32>),
}

/// Runs `$body` with `$s` bound to the voxel slice of whatever type `$voxels` holds.
#[macro_export]
macro_rules! with_voxels {
    ($voxels:expr, |$s:ident| $body:expr) => {
        match $voxels {
            $crate::volume::Voxels::U8(b) => {
                let $s = b.as_slice();
                $body
            }
            $crate::volume::Voxels::I16(b) => {
                let $s = b.as_slice();
                $body
            }
            $crate::volume::Voxels::U16(b) => {
                let $s = b.as_slice();
                $body
            }
            $crate::volume::Voxels::F32(b) => {
                let $s = b.as_slice();
                $body
            }
        }
    };
}

impl Voxels {
    #[must_use]
    pub fn dtype(&self) -> DType {
        match self {
            Self::U8(_) => DType::U8,
            Self::I16(_) => DType::I16,
            Self::U16(_) => DType::U16,
            Self::F32(_) => DType::F32,
        }
    }

    #[must_use]
    pub fn len(&self) -> usize {
        with_voxels!(self, |s| s.len())
    }

    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The stored value at a linear index, as f64 (no rescale).
    #[inline]
    #[must_use]
    pub fn raw_f64(&self, idx: usize) -> f64 {
        with_voxels!(self, |s| s[idx].to_f64())
    }
}

/// `value = slope · stored + intercept`, applied on read.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Rescale {
    pub slope: f64,
    pub intercept: f64,
}

impl Rescale {
    /// `None` for the identity, or when the slope is 0 or not finite (`NIfTI`'s "no scaling").
    #[must_use]
    pub fn new(slope: f64, intercept: f64) -> Option<Self> {
        #[allow(
            clippy::float_cmp,
            reason = "NIfTI's sentinels: slope exactly 0 means no scaling, exactly 1 and 0 is the identity"
        )]
        let none = slope == 0.0
            || !slope.is_finite()
            || !intercept.is_finite()
            || (slope == 1.0 && intercept == 0.0);
        if none {
            return None;
        }
        Some(Self { slope, intercept })
    }

    #[inline]
    #[must_use]
    pub fn apply(self, raw: f64) -> f64 {
        self.slope * raw + self.intercept
    }
}

/// Why a volume cannot be built from its parts.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum VolumeError {
    #[error("dimensions {}x{}x{} hold {} voxels but {} were given", .0[0], .0[1], .0[2], .1, .2)]
    LengthMismatch([usize; 3], usize, usize),
    #[error("dimensions {}x{}x{} have a zero or overflow", .0[0], .0[1], .0[2])]
    BadDims([usize; 3]),
}

/// Where a volume's voxel size came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SpacingOrigin {
    /// The file records it in full (a `NIfTI` header, our TIFF description), or the volume was
    /// made in code.
    #[default]
    File,
    /// The caller gave it (the command line, a project's record).
    Caller,
    /// Not recorded in full: guessed from partial information (TIFF resolution tags hold no
    /// slice spacing) or assumed (1 mm). A measurement needs the real size from the user.
    Guessed,
}

/// A scan in memory.
#[derive(Debug)]
pub struct Volume {
    dims: [usize; 3],
    world_from_voxel: Affine3,
    voxel_from_world: Affine3,
    voxels: Voxels,
    rescale: Option<Rescale>,
    /// Things the loader did that the user should know (a type converted, a header field
    /// ignored, an assumed voxel size).
    pub notes: Vec<String>,
    /// Where the voxel size came from.
    pub spacing_origin: SpacingOrigin,
}

impl Volume {
    pub fn new(
        dims: [usize; 3],
        world_from_voxel: Affine3,
        voxels: Voxels,
        rescale: Option<Rescale>,
    ) -> Result<Self, VolumeError> {
        let n = voxel_count(dims).ok_or(VolumeError::BadDims(dims))?;
        if n == 0 {
            return Err(VolumeError::BadDims(dims));
        }
        if voxels.len() != n {
            return Err(VolumeError::LengthMismatch(dims, n, voxels.len()));
        }
        Ok(Self {
            dims,
            voxel_from_world: world_from_voxel.inverse(),
            world_from_voxel,
            voxels,
            rescale,
            notes: Vec::new(),
            spacing_origin: SpacingOrigin::File,
        })
    }

    /// A volume from a `Vec` of voxels (tests, the sample generator, derived volumes).
    pub fn from_vec<T: Voxel>(
        dims: [usize; 3],
        world_from_voxel: Affine3,
        data: Vec<T>,
    ) -> Result<Self, VolumeError>
    where
        VoxelBuffer<T>: IntoVoxels,
    {
        Self::new(
            dims,
            world_from_voxel,
            VoxelBuffer::from_vec(data).into_voxels(),
            None,
        )
    }

    #[must_use]
    pub fn dims(&self) -> [usize; 3] {
        self.dims
    }

    #[must_use]
    pub fn len(&self) -> usize {
        self.voxels.len()
    }

    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.voxels.is_empty()
    }

    #[must_use]
    pub fn dtype(&self) -> DType {
        self.voxels.dtype()
    }

    #[must_use]
    pub fn voxels(&self) -> &Voxels {
        &self.voxels
    }

    #[must_use]
    pub fn into_voxels(self) -> Voxels {
        self.voxels
    }

    #[must_use]
    pub fn rescale(&self) -> Option<Rescale> {
        self.rescale
    }

    pub fn set_rescale(&mut self, rescale: Option<Rescale>) {
        self.rescale = rescale;
    }

    #[must_use]
    pub fn world_from_voxel(&self) -> &Affine3 {
        &self.world_from_voxel
    }

    #[must_use]
    pub fn voxel_from_world(&self) -> &Affine3 {
        &self.voxel_from_world
    }

    /// Replaces the placement in the world (e.g. a voxel size given on the command line).
    pub fn set_world_from_voxel(&mut self, world_from_voxel: Affine3) {
        self.voxel_from_world = world_from_voxel.inverse();
        self.world_from_voxel = world_from_voxel;
    }

    /// Voxel size in millimetres along each voxel axis (column norms of `world_from_voxel`).
    #[must_use]
    pub fn spacing_mm(&self) -> [f64; 3] {
        self.world_from_voxel.column_lengths()
    }

    /// Bytes held by the voxels.
    #[must_use]
    pub fn voxel_bytes(&self) -> usize {
        self.len() * self.dtype().size_bytes()
    }

    /// The linear index of a voxel. Panics (debug) if out of range.
    #[inline]
    #[must_use]
    pub fn linear_index(&self, v: VoxelIndex) -> usize {
        debug_assert!(v.i < self.dims[0] && v.j < self.dims[1] && v.k < self.dims[2]);
        v.i + self.dims[0] * (v.j + self.dims[1] * v.k)
    }

    /// The rescaled value of a voxel, or `None` outside the grid.
    #[must_use]
    pub fn value(&self, v: VoxelIndex) -> Option<f64> {
        if v.i >= self.dims[0] || v.j >= self.dims[1] || v.k >= self.dims[2] {
            return None;
        }
        Some(self.apply_rescale(self.voxels.raw_f64(self.linear_index(v))))
    }

    /// Applies the rescale (if any) to a stored value.
    #[inline]
    #[must_use]
    pub fn apply_rescale(&self, raw: f64) -> f64 {
        match self.rescale {
            Some(r) => r.apply(raw),
            None => raw,
        }
    }

    #[must_use]
    pub fn voxel_to_world(&self, p: VoxelPoint) -> WorldPoint {
        self.world_from_voxel.voxel_to_world(p)
    }

    #[must_use]
    pub fn world_to_voxel(&self, p: WorldPoint) -> VoxelPoint {
        self.voxel_from_world.world_to_voxel(p)
    }

    /// The world position of the centre of the grid.
    #[must_use]
    pub fn centre_world(&self) -> WorldPoint {
        let d = self.dims;
        self.voxel_to_world(VoxelPoint::new(
            (d[0] as f64 - 1.0) / 2.0,
            (d[1] as f64 - 1.0) / 2.0,
            (d[2] as f64 - 1.0) / 2.0,
        ))
    }
}

/// Wraps a typed buffer in the [`Voxels`] enum.
pub trait IntoVoxels {
    fn into_voxels(self) -> Voxels;
}

macro_rules! impl_into_voxels {
    ($t:ty, $v:ident) => {
        impl IntoVoxels for VoxelBuffer<$t> {
            fn into_voxels(self) -> Voxels {
                Voxels::$v(self)
            }
        }
    };
}
impl_into_voxels!(u8, U8);
impl_into_voxels!(i16, I16);
impl_into_voxels!(u16, U16);
impl_into_voxels!(f32, F32);

/// `nx·ny·nz`, or `None` on overflow.
#[must_use]
pub fn voxel_count(dims: [usize; 3]) -> Option<usize> {
    dims[0].checked_mul(dims[1])?.checked_mul(dims[2])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builds_and_indexes() {
        let data: Vec<u16> = (0..24).collect();
        let v =
            Volume::from_vec([4, 3, 2], Affine3::from_spacing([0.01, 0.01, 0.02]), data).unwrap();
        assert_eq!(v.dtype(), DType::U16);
        assert_eq!(
            v.value(VoxelIndex::new(1, 2, 1)),
            Some(f64::from(1 + 4 * (2 + 3)))
        );
        assert_eq!(v.value(VoxelIndex::new(4, 0, 0)), None);
        assert_eq!(v.voxel_bytes(), 48);
    }

    #[test]
    fn refuses_wrong_length() {
        let r = Volume::from_vec([4, 3, 2], Affine3::identity(), vec![0u8; 23]);
        assert_eq!(
            r.unwrap_err(),
            VolumeError::LengthMismatch([4, 3, 2], 24, 23)
        );
        let r = Volume::from_vec([0, 3, 2], Affine3::identity(), Vec::<u8>::new());
        assert_eq!(r.unwrap_err(), VolumeError::BadDims([0, 3, 2]));
    }

    #[test]
    fn rescale_applies_on_read() {
        let mut v = Volume::from_vec([2, 1, 1], Affine3::identity(), vec![10i16, -4]).unwrap();
        v.set_rescale(Rescale::new(0.5, -1.0));
        assert_eq!(v.value(VoxelIndex::new(0, 0, 0)), Some(4.0));
        assert_eq!(v.value(VoxelIndex::new(1, 0, 0)), Some(-3.0));
        assert_eq!(Rescale::new(0.0, 5.0), None);
        assert_eq!(Rescale::new(f64::NAN, 0.0), None);
        assert_eq!(Rescale::new(1.0, 0.0), None);
    }
}
