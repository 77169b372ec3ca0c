//! Pictures of a scan of any size: each view reads, through the volume interface, the block it
//! needs at the level it needs, and renders it with the in-memory code of [`super::slice`] and
//! [`super::raycast`].
//!
//! - A slice ([`render_slice`]) reads the coarsest level with at least one voxel per pixel
//!   ([`VolumeSource::level_for_pixel`]) — or level 0 when asked ([`Detail::Full`]) — and of it
//!   only the slab of voxels its pixels' trilinear samples touch ([`slice_region`]); the
//!   picture equals the one rendered from the whole level in memory.
//! - A 3D view ([`volume_for_3d`]) reads a whole level: the finest one within a byte budget.
//!   It is the picture of that level; picking on it goes back to full resolution (see
//!   `landmarks::pick_source`).
//!
//! A workstation view scrolling through slices calls [`VolumeSource::prefetch`] with the
//! [`slice_region`] of the next slices in the scroll direction, so their chunks are decoded
//! before they are asked for.

use super::slice::{self, Interpolation, Slab, SliceGeometry};
use super::{F32Image, RenderError};
use crate::volume::source::region_around;
use crate::volume::{Block, Region, VolumeSource};

/// Which level a picture reads.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Detail {
    /// The coarsest level that still has a voxel per pixel (what a view shows while moving,
    /// and at rest when zoomed out).
    #[default]
    Screen,
    /// Full resolution, whatever the zoom.
    Full,
    /// A given level.
    Level(usize),
}

impl Detail {
    /// The level this detail means for a picture of `pixel_mm` per pixel.
    #[must_use]
    pub fn level(self, source: &dyn VolumeSource, pixel_mm: f64) -> usize {
        match self {
            Self::Screen => source.level_for_pixel(pixel_mm),
            Self::Full => 0,
            Self::Level(l) => l.min(source.level_count() - 1),
        }
    }
}

/// The voxels of `level` that a slice's pixels (and a slab's samples) read with trilinear
/// interpolation; `None` when the picture misses the scan.
#[must_use]
pub fn slice_region(
    source: &dyn VolumeSource,
    level: usize,
    geometry: &SliceGeometry,
    slab: Option<Slab>,
) -> Option<Region> {
    let info = source.level(level);
    let voxel_from_world = info.world_from_voxel.inverse();
    let (w, h) = (geometry.width as f64 - 1.0, geometry.height as f64 - 1.0);
    let half = slab.map_or(0.0, |s| s.thickness_mm / 2.0);
    let n = geometry.normal();
    let mut points = Vec::with_capacity(8);
    for (c, r) in [(0.0, 0.0), (w, 0.0), (0.0, h), (w, h)] {
        for t in [-half, half] {
            let p = geometry.pixel_world(c, r);
            let p = crate::geometry::WorldPoint(p.0 + n * t);
            points.push(voxel_from_world.world_to_voxel(p).0.coords);
        }
    }
    // the slice's box in voxel coordinates is the hull of these corners: a plane's pixels are
    // affine in (column, row)
    region_around(&points, info.dims, 0)
}

/// A slice of any source: reads the block at the level `detail` says and renders it as
/// [`slice::render_slice`] does. Pixels outside the scan are `NaN`.
pub fn render_slice(
    source: &dyn VolumeSource,
    geometry: &SliceGeometry,
    interpolation: Interpolation,
    slab: Option<Slab>,
    detail: Detail,
) -> Result<F32Image, RenderError> {
    let level = detail.level(source, geometry.pixel_mm);
    if let (Some(v), 0) = (source.whole(), level) {
        return slice::render_slice(v, geometry, interpolation, slab);
    }
    let Some(region) = slice_region(source, level, geometry, slab) else {
        // the picture misses the scan: every pixel outside
        super::check_size(geometry.width, geometry.height)?;
        return Ok(F32Image {
            width: geometry.width,
            height: geometry.height,
            pixels: vec![f32::NAN; geometry.width * geometry.height],
            pixel_mm: geometry.pixel_mm,
        });
    };
    let bytes = crate::volume::source::region_voxels(&region) * source.dtype().size_bytes() as u64;
    if bytes <= PART_BYTES || geometry.width * geometry.height <= 64 {
        let block = source.read_block(level, &region)?;
        return slice::render_slice(&block, geometry, interpolation, slab);
    }
    // an oblique plane's box can hold far more voxels than the plane touches: render it in
    // four parts, each with its own smaller box
    let (w, h) = (geometry.width, geometry.height);
    let mut out = F32Image {
        width: w,
        height: h,
        pixels: vec![f32::NAN; w * h],
        pixel_mm: geometry.pixel_mm,
    };
    let (wc, hr) = (w.div_ceil(2), h.div_ceil(2));
    for (c0, cw) in [(0, wc), (wc, w - wc)] {
        for (r0, rh) in [(0, hr), (hr, h - hr)] {
            if cw == 0 || rh == 0 {
                continue;
            }
            let part = SliceGeometry {
                origin: geometry.pixel_world(c0 as f64, r0 as f64),
                width: cw,
                height: rh,
                ..*geometry
            };
            let img = render_slice(source, &part, interpolation, slab, Detail::Level(level))?;
            for r in 0..rh {
                out.pixels[(r0 + r) * w + c0..][..cw].copy_from_slice(&img.pixels[r * cw..][..cw]);
            }
        }
    }
    Ok(out)
}

/// The largest block one part of a slice reads (common practice for a view's working set:
/// a few tens of megabytes keep a redraw's reads in the chunk cache).
const PART_BYTES: u64 = 32 << 20;

/// The volume a 3D view renders: the whole scan if it is in memory, else the finest level
/// whose voxels fit in `budget_bytes`, read whole.
pub fn volume_for_3d(
    source: &dyn VolumeSource,
    budget_bytes: u64,
) -> Result<Block<'_>, RenderError> {
    if let Some(v) = source.whole() {
        return Ok(Block::Whole(v));
    }
    let level = source.level_within(budget_bytes);
    Ok(source.read_block(level, &source.level(level).full_region())?)
}
