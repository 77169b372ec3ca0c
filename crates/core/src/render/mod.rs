//! Rendering on the CPU: slices, window/level, ray casting, overlays and PNG export.
//!
//! Owns turning a [`Volume`](crate::volume::Volume) into pictures:
//! - [`slice`]: resampling a plane (axis-aligned, oblique, or a thick slab) into an
//!   [`F32Image`] of rescaled values, `NaN` outside the volume;
//! - [`window`]: window/level to grey, colour maps to RGBA;
//! - [`raycast`]: orthographic maximum-intensity projection and shaded iso-surface views;
//! - [`pyramid`]: block min/max copies of a volume for coarse passes and empty-space skipping;
//! - [`budget`]: the pixel limit, and slices framed to where the plane crosses the scan;
//! - [`source`]: the same pictures of a [`VolumeSource`](crate::volume::VolumeSource) of any
//!   size: each view reads the block it needs at the level it needs and renders it as above;
//! - [`overlay`]: scale bar, orientation labels, markers and lines drawn with tiny-skia;
//! - [`text`]: the bundled font (`DejaVu Sans`) and its glyphs drawn as paths, for overlays and
//!   charts;
//! - [`labels`]: label images blended over slice pictures, and a scan kept to chosen labels
//!   for 3D views;
//! - [`png`]: PNG encoding of an [`RgbaImage`].
//!
//! Image conventions, shared by every function here:
//! - pixel `(0, 0)` is the top-left; `pixels[col + width·row]`;
//! - for a slice, columns run along the plane's `u` and rows along its `v`; pixels are square
//!   in world units, `pixel_mm` on a side, whatever the voxel spacing;
//! - for a 3D view, columns run along the camera's right vector and rows along its down vector
//!   (`-up`), so the picture looks the way the camera's `up` says;
//! - RGBA is 8-bit, straight (not premultiplied) alpha, the layout PNG stores.
//!
//! Only this module and `chart` (through resvg) draw with tiny-skia. Must not import `gui`.

pub mod budget;
pub mod labels;
pub mod overlay;
pub mod png;
pub mod pyramid;
pub mod raycast;
pub mod slice;
pub mod source;
pub mod text;
pub mod window;

mod geom;

pub use budget::{DEFAULT_MAX_PIXELS, check_pixels};
pub use raycast::{Camera, MipOptions, Quality, SurfaceImage, SurfaceOptions};
pub use slice::{AxisPlane, Interpolation, Slab, SlabMode, SliceGeometry};
pub use window::{ColourMap, WindowLevel};

/// Why a render request cannot be carried out. These are caller mistakes (sizes, parameters)
/// or I/O failures when writing a file.
#[derive(Debug, thiserror::Error)]
pub enum RenderError {
    #[error("image size {width}x{height} is empty or too large")]
    BadSize { width: usize, height: usize },
    #[error("axis {0} is not 0, 1 or 2")]
    BadAxis(usize),
    #[error("slice index {index} is outside 0..{len} on axis {axis}")]
    IndexOutOfRange {
        axis: usize,
        index: usize,
        len: usize,
    },
    #[error("{name} must be finite and positive, got {value}")]
    NotPositive { name: &'static str, value: f64 },
    #[error("{name} must be finite, got {value}")]
    NotFinite { name: &'static str, value: f64 },
    #[error("direction {0} has zero length or is parallel to the up vector")]
    BadDirection(&'static str),
    #[error("pixel buffer holds {got} bytes, expected {expected} for {width}x{height} RGBA")]
    BufferSize {
        width: usize,
        height: usize,
        expected: usize,
        got: usize,
    },
    /// A picture that is rendered from voxels in memory was asked of a scan read through its
    /// store (read a level of it first, see [`source::volume_for_3d`]).
    #[error("this picture is rendered from a scan in memory; read a level of the store first")]
    NotInMemory,
    /// The voxels could not be read from the scan's store.
    #[error(transparent)]
    Read(#[from] crate::volume::ReadError),
    #[error("{path}: cannot write PNG: {source}")]
    Png {
        path: String,
        #[source]
        source: image::ImageError,
    },
    /// The picture would pass the pixel limit (see [`budget`]).
    #[error(
        "a {} x {} pixel picture {}",
        budget::count(*width),
        budget::count(*height),
        budget::what_is_passed(*width, *height, *max_pixels)
    )]
    TooManyPixels {
        width: f64,
        height: f64,
        max_pixels: usize,
    },
    /// The plane (or slab) does not cross the volume's box.
    #[error("the plane does not cross the scan")]
    MissesVolume,
    /// The file could not be written (full disk, no permission…).
    #[error(transparent)]
    Write(#[from] crate::export::ExportError),
}

/// The largest image side accepted, so that a bad parameter cannot ask for terabytes.
pub const MAX_SIDE: usize = 1 << 15;

pub(crate) fn check_size(width: usize, height: usize) -> Result<usize, RenderError> {
    if width == 0 || height == 0 || width > MAX_SIDE || height > MAX_SIDE {
        return Err(RenderError::BadSize { width, height });
    }
    Ok(width * height)
}

pub(crate) fn check_positive(name: &'static str, value: f64) -> Result<f64, RenderError> {
    if value.is_finite() && value > 0.0 {
        Ok(value)
    } else {
        Err(RenderError::NotPositive { name, value })
    }
}

/// A single-channel image of rescaled voxel values; `NaN` marks pixels outside the volume
/// (or rays that missed it).
#[derive(Clone, Debug, PartialEq)]
pub struct F32Image {
    pub width: usize,
    pub height: usize,
    /// Row-major, `pixels[col + width·row]`.
    pub pixels: Vec<f32>,
    /// Side of a pixel in millimetres (square pixels).
    pub pixel_mm: f64,
}

impl F32Image {
    #[must_use]
    pub fn get(&self, col: usize, row: usize) -> f32 {
        self.pixels[col + self.width * row]
    }

    /// The finite values, for percentiles and statistics.
    pub fn finite_values(&self) -> impl Iterator<Item = f32> + '_ {
        self.pixels.iter().copied().filter(|v| v.is_finite())
    }
}

/// An 8-bit grey image (window/level output without a colour map).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct GreyImage {
    pub width: usize,
    pub height: usize,
    pub pixels: Vec<u8>,
}

/// An 8-bit RGBA image, straight alpha, row-major, 4 bytes per pixel.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RgbaImage {
    pub width: usize,
    pub height: usize,
    pub pixels: Vec<u8>,
}

impl RgbaImage {
    /// An image filled with one colour.
    pub fn filled(width: usize, height: usize, rgba: [u8; 4]) -> Result<Self, RenderError> {
        let n = check_size(width, height)?;
        Ok(Self {
            width,
            height,
            pixels: rgba.repeat(n),
        })
    }

    #[must_use]
    pub fn get(&self, col: usize, row: usize) -> [u8; 4] {
        let o = 4 * (col + self.width * row);
        [
            self.pixels[o],
            self.pixels[o + 1],
            self.pixels[o + 2],
            self.pixels[o + 3],
        ]
    }

    /// Saves as PNG (see [`png::save_png`]).
    pub fn save_png(&self, path: &std::path::Path) -> Result<(), RenderError> {
        png::save_png(path, self.width, self.height, &self.pixels)
    }
}
