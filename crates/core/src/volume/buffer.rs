//! Voxel storage: one contiguous, aligned allocation of a primitive type.
//!
//! Large buffers come from an anonymous memory map advised for transparent huge pages, so that
//! filling a multi-GB scan is not bounded by 4 KiB page faults; small ones are plain `Vec`s.
//! Either way the voxels are a `&[T]` to everyone else.

use memmap2::MmapMut;

/// Buffers at least this large are mapped (and advised for huge pages) rather than allocated.
const MAP_THRESHOLD_BYTES: usize = 32 << 20;

enum Backing<T> {
    Vec(Vec<T>),
    Map(MmapMut),
}

/// A contiguous run of voxels of type `T`.
pub struct VoxelBuffer<T: bytemuck::Pod> {
    backing: Backing<T>,
    len: usize,
}

impl<T: bytemuck::Pod> std::fmt::Debug for VoxelBuffer<T> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("VoxelBuffer")
            .field("type", &std::any::type_name::<T>())
            .field("len", &self.len)
            .field("mapped", &matches!(self.backing, Backing::Map(_)))
            .finish()
    }
}

impl<T: bytemuck::Pod> VoxelBuffer<T> {
    /// Wraps an existing vector.
    #[must_use]
    pub fn from_vec(v: Vec<T>) -> Self {
        let len = v.len();
        Self {
            backing: Backing::Vec(v),
            len,
        }
    }

    /// A zero-filled buffer of `len` voxels. Fails only when the memory cannot be had.
    pub fn zeroed(len: usize) -> std::io::Result<Self> {
        let bytes = len
            .checked_mul(size_of::<T>())
            .ok_or_else(|| std::io::Error::other("voxel buffer size overflows"))?;
        if bytes < MAP_THRESHOLD_BYTES {
            return Ok(Self::from_vec(vec![T::zeroed(); len]));
        }
        let map = MmapMut::map_anon(bytes)?;
        #[cfg(target_os = "linux")]
        {
            // Advice only: where THP is off the map still works, just with small pages.
            let _ = map.advise(memmap2::Advice::HugePage);
        }
        Ok(Self {
            backing: Backing::Map(map),
            len,
        })
    }

    #[must_use]
    pub fn len(&self) -> usize {
        self.len
    }

    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    #[must_use]
    pub fn as_slice(&self) -> &[T] {
        match &self.backing {
            Backing::Vec(v) => v,
            Backing::Map(m) => bytemuck::cast_slice(&m[..self.len * size_of::<T>()]),
        }
    }

    #[must_use]
    pub fn as_mut_slice(&mut self) -> &mut [T] {
        let len = self.len;
        match &mut self.backing {
            Backing::Vec(v) => v,
            Backing::Map(m) => bytemuck::cast_slice_mut(&mut m[..len * size_of::<T>()]),
        }
    }

    /// The voxels as bytes in native byte order (for loaders that read straight into them).
    #[must_use]
    pub fn as_bytes_mut(&mut self) -> &mut [u8] {
        bytemuck::cast_slice_mut(self.as_mut_slice())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_and_mapped_buffers_are_zeroed_and_writable() {
        for len in [10usize, (MAP_THRESHOLD_BYTES / 2) + 7] {
            let mut b = VoxelBuffer::<u16>::zeroed(len).unwrap();
            assert_eq!(b.len(), len);
            assert!(b.as_slice().iter().all(|&v| v == 0));
            b.as_mut_slice()[len - 1] = 7;
            assert_eq!(b.as_slice()[len - 1], 7);
            assert_eq!(b.as_bytes_mut().len(), len * 2);
        }
    }
}
