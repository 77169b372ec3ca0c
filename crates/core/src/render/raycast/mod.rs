//! 3D views by ray casting on the CPU, with an orthographic [`Camera`].
//!
//! Every pixel owns one ray: it starts on the image plane (through [`Camera::centre`],
//! perpendicular to the view direction), runs along [`Camera::view_dir`] both ways, and is
//! clipped to the volume's box of cells `[-0.5, n - 0.5)` in voxel coordinates.
//!
//! - [`mip`] ([`mip`](self::mip) module): maximum-intensity projection by shear-warp
//!   factorisation: the volume is walked plane by plane along the axis most aligned with the
//!   rays, into an intermediate image on that plane's voxel grid, which is then warped onto the
//!   picture.
//! - [`surface`] ([`surface`](self::surface) module): a shaded iso-surface, the first crossing
//!   of a threshold along each ray, with empty space skipped by a min/max [`Bricks`] grid; the
//!   world point of each hit is returned for picking.
//!
//! Progressive rendering: a [`Quality`] with `downsample = 4` casts one ray per 4×4 pixels
//! with longer steps, replicated to the full image size, for a quick preview while the view
//! moves; [`Quality::full`] then renders every pixel. With a [`Pyramid`](super::pyramid::Pyramid)
//! the preview can also read a downsampled copy of the volume.

mod mip;
mod surface;

pub use mip::{MipOptions, mip};
pub use surface::{Bricks, SurfaceImage, SurfaceOptions, surface};

use super::geom::{PixelGrid, cell_corners_of, orthonormal_pair};
use super::{F32Image, RenderError, check_positive, check_size};
use crate::geometry::WorldPoint;
use crate::volume::Volume;
use nalgebra::Vector3;
use rayon::prelude::*;

/// An orthographic camera. Image columns run along `view_dir × up` (the right), rows along
/// `-up` (down), so that `up` points to the top of the picture.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Camera {
    /// The world point shown at the image centre.
    pub centre: WorldPoint,
    /// The direction the rays travel (from the viewer into the scene).
    pub view_dir: Vector3<f64>,
    /// Up in the picture; only its part orthogonal to `view_dir` matters.
    pub up: Vector3<f64>,
    /// Side of a pixel in millimetres.
    pub pixel_mm: f64,
    pub width: usize,
    pub height: usize,
}

/// Render quality: `downsample` (1 = every pixel, 4 = one ray per 4×4 pixels) and the step
/// along the ray in voxels (of the smallest spacing). The maximum-intensity projection steps
/// from one voxel plane to the next, skipping `step_voxels.floor() - 1` planes between.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Quality {
    pub downsample: usize,
    pub step_voxels: f64,
}

impl Quality {
    /// Every pixel, half-voxel steps.
    #[must_use]
    pub const fn full() -> Self {
        Self {
            downsample: 1,
            step_voxels: 0.5,
        }
    }

    /// One ray per 4×4 pixels, two-voxel steps: the preview while the view is moving.
    #[must_use]
    pub const fn coarse() -> Self {
        Self {
            downsample: 4,
            step_voxels: 2.0,
        }
    }
}

impl Quality {
    /// For rendering a [`Pyramid::preview`](crate::render::pyramid::Pyramid::preview)
    /// volume (4× fewer voxels per axis) while the view moves: one ray per 4×4 pixels,
    /// half-voxel steps of the preview volume (two source voxels, as [`Quality::coarse`]).
    #[must_use]
    pub const fn preview() -> Self {
        Self {
            downsample: 4,
            step_voxels: 0.5,
        }
    }
}

impl Default for Quality {
    fn default() -> Self {
        Self::full()
    }
}

/// The camera's frame in world space: unit right, down and view vectors.
#[derive(Clone, Copy, Debug)]
struct Frame {
    right: Vector3<f64>,
    down: Vector3<f64>,
    dir: Vector3<f64>,
}

impl Camera {
    /// A camera looking along `view_dir` at the volume's centre, zoomed so that the whole box
    /// fits the smaller image side whatever the direction (its diagonal spans that side).
    pub fn fit(
        volume: &dyn crate::volume::VolumeSource,
        view_dir: Vector3<f64>,
        up: Vector3<f64>,
        width: usize,
        height: usize,
    ) -> Result<Self, RenderError> {
        check_size(width, height)?;
        // the longest of the four box diagonals (corner n and corner 7 - n are opposite)
        let c = cell_corners_of(volume.dims(), &volume.world_from_voxel());
        let longest = (0..4).map(|i| (c[i] - c[7 - i]).norm()).fold(0.0, f64::max);
        let cam = Self {
            centre: volume.centre_world(),
            view_dir,
            up,
            pixel_mm: longest / width.min(height) as f64,
            width,
            height,
        };
        cam.frame()?;
        Ok(cam)
    }

    /// The same camera with pixels `zoom` times smaller (`zoom > 1` magnifies).
    #[must_use]
    pub fn zoomed(mut self, zoom: f64) -> Self {
        self.pixel_mm /= zoom;
        self
    }

    fn frame(&self) -> Result<Frame, RenderError> {
        check_positive("camera pixel size", self.pixel_mm)?;
        if !self.centre.0.coords.iter().all(|c| c.is_finite()) {
            return Err(RenderError::NotFinite {
                name: "camera centre",
                value: f64::NAN,
            });
        }
        let (dir, up) = orthonormal_pair(self.view_dir, self.up, ("view direction", "up"))?;
        Ok(Frame {
            right: dir.cross(&up),
            down: -up,
            dir,
        })
    }

    /// The point on the image plane at pixel `(col, row)` (its ray runs along `view_dir`).
    pub fn pixel_world(&self, col: f64, row: f64) -> Result<WorldPoint, RenderError> {
        let f = self.frame()?;
        let c = col - (self.width as f64 - 1.0) / 2.0;
        let r = row - (self.height as f64 - 1.0) / 2.0;
        Ok(WorldPoint(
            self.centre.0 + f.right * (c * self.pixel_mm) + f.down * (r * self.pixel_mm),
        ))
    }

    /// The fractional pixel `(col, row)` a world point projects to.
    pub fn project(&self, p: WorldPoint) -> Result<(f64, f64), RenderError> {
        let f = self.frame()?;
        let d = p.0 - self.centre.0;
        Ok((
            d.dot(&f.right) / self.pixel_mm + (self.width as f64 - 1.0) / 2.0,
            d.dot(&f.down) / self.pixel_mm + (self.height as f64 - 1.0) / 2.0,
        ))
    }

    /// The camera for a downsampled pass: one pixel per `factor`×`factor` block, same view.
    fn downsampled(&self, factor: usize) -> Self {
        if factor <= 1 {
            return *self;
        }
        let w = self.width.div_ceil(factor);
        let h = self.height.div_ceil(factor);
        let f = factor as f64;
        // the small image's pixel (c, r) sits at the centre of the block it stands for
        let shift_c =
            ((w as f64 * f - 1.0) / 2.0 - (self.width as f64 - 1.0) / 2.0) * self.pixel_mm;
        let shift_r =
            ((h as f64 * f - 1.0) / 2.0 - (self.height as f64 - 1.0) / 2.0) * self.pixel_mm;
        let mut out = *self;
        if let Ok(fr) = self.frame() {
            out.centre = WorldPoint(self.centre.0 + fr.right * shift_c + fr.down * shift_r);
        }
        out.width = w;
        out.height = h;
        out.pixel_mm = self.pixel_mm * f;
        out
    }
}

/// Rays in voxel coordinates: the ray of pixel `(c, r)` starts at `grid.at(c, r)` and moves
/// by `dir` per millimetre.
#[derive(Clone, Copy, Debug)]
struct VoxelRays {
    grid: PixelGrid,
    dir: Vector3<f64>,
}

impl VoxelRays {
    fn new(volume: &Volume, cam: &Camera) -> Result<Self, RenderError> {
        let f = cam.frame()?;
        let grid = PixelGrid::new(
            volume,
            cam.pixel_world(0.0, 0.0)?,
            f.right * cam.pixel_mm,
            f.down * cam.pixel_mm,
        )?;
        Ok(Self {
            grid,
            dir: volume.voxel_from_world().apply_vector(f.dir),
        })
    }
}

/// Replicates each pixel of a downsampled image over its `ds`×`ds` block.
fn upsample_f32(img: &F32Image, ds: usize, w: usize, h: usize, pixel_mm: f64) -> F32Image {
    if ds <= 1 {
        return img.clone();
    }
    let mut pixels = vec![f32::NAN; w * h];
    pixels.par_chunks_mut(w).enumerate().for_each(|(r, line)| {
        let src = &img.pixels[(r / ds) * img.width..][..img.width];
        for (c, p) in line.iter_mut().enumerate() {
            *p = src[c / ds];
        }
    });
    F32Image {
        width: w,
        height: h,
        pixels,
        pixel_mm,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::geometry::Affine3;

    #[test]
    fn bad_cameras_are_refused() {
        let v = Volume::from_vec([4, 4, 4], Affine3::identity(), vec![0u8; 64]).unwrap();
        assert!(Camera::fit(&v, Vector3::z(), Vector3::z(), 10, 10).is_err());
        assert!(Camera::fit(&v, Vector3::zeros(), Vector3::z(), 10, 10).is_err());
        assert!(Camera::fit(&v, Vector3::x(), Vector3::z(), 0, 10).is_err());
        let cam = Camera::fit(&v, Vector3::x(), Vector3::z(), 10, 10).unwrap();
        assert!(surface(&v, &cam, &SurfaceOptions::new(f64::NAN), None).is_err());
        let c = Camera {
            pixel_mm: -1.0,
            ..cam
        };
        assert!(mip(&v, &c, MipOptions::default()).is_err());
    }

    #[test]
    fn fit_spans_the_longest_diagonal_and_projects_back() {
        let v = Volume::from_vec(
            [10, 6, 4],
            Affine3::from_spacing([1.0, 2.0, 3.0]),
            vec![0u8; 240],
        )
        .unwrap();
        let cam = Camera::fit(&v, Vector3::new(0.2, 0.3, 1.0), Vector3::y(), 50, 40).unwrap();
        let diag = (10f64.powi(2) + 12f64.powi(2) + 12f64.powi(2)).sqrt();
        assert!((cam.pixel_mm - diag / 40.0).abs() < 1e-12);
        let p = cam.pixel_world(7.0, 31.0).unwrap();
        let (c, r) = cam.project(p).unwrap();
        assert!((c - 7.0).abs() < 1e-9 && (r - 31.0).abs() < 1e-9);
    }
}
