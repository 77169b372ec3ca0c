//! `sutura slice` and `sutura render`: plane images and CPU 3D views to PNG.

use super::ScanArgs;
use anyhow::{Context, Result, bail};
use clap::{Args, ValueEnum};
use nalgebra::Vector3;
use std::path::PathBuf;

use sutura_core::geometry::{LengthMm, Plane, Triple, WorldPoint};
use sutura_core::render::overlay::{AxisNames, Overlay};
use sutura_core::render::source::{self, Detail};
use sutura_core::render::{
    AxisPlane, Camera, ColourMap, F32Image, Interpolation, MipOptions, Quality, RgbaImage, Slab,
    SlabMode, SurfaceOptions, WindowLevel, raycast, slice,
};
use sutura_core::volume::VolumeSource;

/// Colour maps for slices and projections.
#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum Colours {
    Grey,
    InvertedGrey,
    Viridis,
}

impl From<Colours> for ColourMap {
    fn from(c: Colours) -> Self {
        match c {
            Colours::Grey => Self::Grey,
            Colours::InvertedGrey => Self::InvertedGrey,
            Colours::Viridis => Self::Viridis,
        }
    }
}

/// How to map intensities to brightness; shared by slice and projection images.
#[derive(Debug, Args)]
pub struct ToneArgs {
    /// Window as `CENTRE,WIDTH` in the scan's (rescaled) intensity units. Default: from the
    /// 0.5th to the 99.5th percentile of the image.
    #[arg(long, value_name = "CENTRE,WIDTH", allow_hyphen_values = true, value_parser = window_arg)]
    window: Option<WindowLevel>,

    /// Colour map.
    #[arg(long, value_enum, default_value = "grey")]
    colours: Colours,

    /// Leave out the scale bar and orientation labels.
    #[arg(long)]
    bare: bool,
}

impl ToneArgs {
    fn window_for(&self, img: &F32Image) -> Result<WindowLevel> {
        if let Some(w) = self.window {
            return Ok(w);
        }
        WindowLevel::from_image_percentiles(img, 0.5, 99.5)
            .context("the image holds no voxel values to set a window from")
    }
}

/// `CENTRE,WIDTH` with a positive width.
fn window_arg(text: &str) -> Result<WindowLevel, String> {
    let [c, w] = super::pair(text)?;
    WindowLevel::new(c, w).ok_or_else(|| format!("'{text}': the width must be positive"))
}

/// Voxel axes by the names a user gives them.
#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum Axis {
    /// The plane of constant i (columns j, rows k).
    I,
    /// The plane of constant j (columns i, rows k).
    J,
    /// The plane of constant k, the slice plane of a TIFF stack (columns i, rows j).
    K,
}

#[derive(Debug, Args)]
pub struct SliceArgs {
    #[command(flatten)]
    scan: ScanArgs,

    /// Output PNG.
    #[arg(short, long)]
    output: PathBuf,

    /// Voxel plane: normal to voxel axis i, j or k.
    #[arg(long, value_enum, default_value = "k", conflicts_with_all = ["normal", "through"])]
    plane: Axis,

    /// Slice index along that axis (default: the middle).
    #[arg(long)]
    index: Option<usize>,

    /// Oblique plane by its normal `NX,NY,NZ` in world coordinates, through `--centre`.
    #[arg(long, value_name = "NX,NY,NZ", allow_hyphen_values = true)]
    normal: Option<Triple>,

    /// Centre of an oblique plane `X,Y,Z` in world mm (default: the centre of the scan).
    #[arg(long, value_name = "X,Y,Z", allow_hyphen_values = true)]
    centre: Option<Triple>,

    /// Oblique plane through three world points (mm): `X,Y,Z;X,Y,Z;X,Y,Z`.
    #[arg(long, value_name = "P;Q;R", allow_hyphen_values = true)]
    through: Option<String>,

    /// Thick slab: thickness along the normal, e.g. `0.2mm` or `150um`.
    #[arg(long, value_name = "LEN")]
    slab: Option<LengthMm>,

    /// How a slab combines its samples.
    #[arg(long, value_enum, default_value = "max")]
    slab_mode: SlabModeArg,

    /// Output pixel size, e.g. `10um` (default: the smallest voxel spacing).
    #[arg(long, value_name = "LEN")]
    pixel: Option<LengthMm>,

    /// Nearest-voxel sampling instead of trilinear.
    #[arg(long)]
    nearest: bool,

    /// The largest picture to make, in megapixels: with the default pixel size a larger one
    /// is drawn with coarser pixels, with a `--pixel` that would pass it the command stops.
    #[arg(long, value_name = "N", default_value_t = default_megapixels())]
    max_megapixels: usize,

    #[command(flatten)]
    tone: ToneArgs,
}

fn default_megapixels() -> usize {
    sutura_core::render::DEFAULT_MAX_PIXELS.div_ceil(1_000_000)
}

/// The pixel limit from `--max-megapixels`.
fn max_pixels(megapixels: usize) -> Result<usize> {
    if megapixels == 0 {
        bail!("--max-megapixels must be at least 1");
    }
    Ok(megapixels.saturating_mul(1_000_000))
}

#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum SlabModeArg {
    Mean,
    Max,
}

pub fn run_slice(a: &SliceArgs) -> Result<()> {
    let v = a.scan.open_source()?;
    let v = v.as_ref();
    let pixel_mm = a.pixel.map(|l| l.0);
    let plane = oblique_plane(a, v)?;
    let level0 = v.level(0);
    let limit = max_pixels(a.max_megapixels)?;
    let hint = |e: sutura_core::render::RenderError| {
        let path = a.scan.scan.display();
        if sutura_core::render::budget::limit_can_be_raised(&e) {
            anyhow::anyhow!("{path}: {e}: give a coarser --pixel or raise --max-megapixels")
        } else if matches!(e, sutura_core::render::RenderError::TooManyPixels { .. }) {
            anyhow::anyhow!("{path}: {e}: give a coarser --pixel")
        } else {
            anyhow::anyhow!("{path}: {e}")
        }
    };
    let slab_mm = a.slab.map(|l| l.0);
    let (geometry, note) = if let Some(p) = plane {
        slice::SliceGeometry::section_grid(
            level0.dims,
            &level0.world_from_voxel,
            &p,
            pixel_mm,
            0.5 * slab_mm.unwrap_or(0.0),
            limit,
        )
        .map_err(hint)?
    } else {
        let axis = match a.plane {
            Axis::I => 0,
            Axis::J => 1,
            Axis::K => 2,
        };
        let index = a.index.unwrap_or(v.dims()[axis] / 2);
        if index >= v.dims()[axis] {
            bail!(
                "--index {index}: the scan has {} slices along that axis",
                v.dims()[axis]
            );
        }
        slice::SliceGeometry::axis_within_grid(
            level0.dims,
            &level0.world_from_voxel,
            AxisPlane { axis, index },
            pixel_mm,
            limit,
        )
        .map_err(hint)?
    };
    if let Some(n) = note {
        eprintln!("note: {n}");
    }
    let slab = slab_mm.map(|thickness_mm| Slab {
        thickness_mm,
        mode: match a.slab_mode {
            SlabModeArg::Mean => SlabMode::Mean,
            SlabModeArg::Max => SlabMode::Max,
        },
    });
    let interp = if a.nearest {
        Interpolation::Nearest
    } else {
        Interpolation::Trilinear
    };
    let img = source::render_slice(v, &geometry, interp, slab, Detail::Screen)?;
    let wl = a
        .tone
        .window_for(&img)
        .with_context(|| a.scan.scan.display().to_string())?;
    let mut rgba = wl.colourize(&img, a.tone.colours.into());
    if !a.tone.bare {
        rgba = annotate(&rgba, img.pixel_mm, Some((&geometry.u, &geometry.v)))?;
    }
    rgba.save_png(&a.output)?;
    eprintln!(
        "wrote {} ({}x{} px of {}, window {:.1}/{:.1})",
        a.output.display(),
        rgba.width,
        rgba.height,
        sutura_core::geometry::format_length_mm(img.pixel_mm),
        wl.centre,
        wl.width
    );
    Ok(())
}

fn oblique_plane(a: &SliceArgs, v: &dyn VolumeSource) -> Result<Option<Plane>> {
    if let Some(t) = &a.through {
        let pts: Vec<Vector3<f64>> = t
            .split(';')
            .map(|p| -> Result<Vector3<f64>> { Ok(Vector3::from(p.parse::<Triple>()?.0)) })
            .collect::<Result<_>>()
            .with_context(|| format!("--through {t}"))?;
        if pts.len() != 3 {
            bail!("--through {t}: give three points separated by ';'");
        }
        let w = |p: &Vector3<f64>| WorldPoint::new(p.x, p.y, p.z);
        return Ok(Some(Plane::through_points(
            w(&pts[0]),
            w(&pts[1]),
            w(&pts[2]),
        )?));
    }
    if let Some(n) = a.normal {
        let c = a.centre.map_or_else(
            || v.centre_world(),
            |c| WorldPoint::new(c.0[0], c.0[1], c.0[2]),
        );
        return Ok(Some(Plane::from_normal(
            c,
            Vector3::from(n.0),
            Vector3::z(),
        )?));
    }
    Ok(None)
}

fn annotate(
    img: &RgbaImage,
    pixel_mm: f64,
    basis: Option<(&Vector3<f64>, &Vector3<f64>)>,
) -> Result<RgbaImage> {
    let mut o = Overlay::new(img)?;
    o.scale_bar(pixel_mm, [255, 255, 255, 255]);
    if let Some((u, v)) = basis {
        o.orientation_labels(u, v, &AxisNames::default(), [255, 220, 120, 255]);
    }
    Ok(o.finish())
}

/// What a 3D view shows.
#[derive(Clone, Copy, Debug, ValueEnum)]
pub enum ViewMode {
    /// Maximum-intensity projection.
    Projection,
    /// Shaded surface at the scan's iso-value.
    Surface,
}

#[derive(Debug, Args)]
pub struct View3dArgs {
    #[command(flatten)]
    scan: ScanArgs,

    /// Output PNG.
    #[arg(short, long)]
    output: PathBuf,

    #[arg(long, value_enum, default_value = "surface")]
    mode: ViewMode,

    /// The surface's iso-value in the scan's grey values (default: the scan's ISO-50, the
    /// value the workstation's 3D view, snapping and `landmark pick` use).
    #[arg(long, value_name = "GREY", allow_hyphen_values = true)]
    iso_value: Option<f64>,

    /// Viewing direction by azimuth (about world z, from +x) and elevation, in degrees.
    #[arg(
        long,
        value_name = "AZ,EL",
        default_value = "30,25",
        allow_hyphen_values = true,
        value_parser = super::pair
    )]
    orbit: [f64; 2],

    /// Image size in pixels (square).
    #[arg(long, default_value_t = 512)]
    size: usize,

    /// A quick low-resolution image (what the workstation shows while dragging).
    #[arg(long)]
    coarse: bool,

    /// The largest picture to make, in megapixels (`--size` squared must fit).
    #[arg(long, value_name = "N", default_value_t = default_megapixels())]
    max_megapixels: usize,

    #[command(flatten)]
    tone: ToneArgs,
}

/// The viewing direction (from the camera into the scene) for azimuth/elevation in degrees.
#[must_use]
pub fn orbit_direction(az_deg: f64, el_deg: f64) -> Vector3<f64> {
    let (az, el) = (az_deg.to_radians(), el_deg.to_radians());
    -Vector3::new(el.cos() * az.cos(), el.cos() * az.sin(), el.sin())
}

pub fn run_view3d(a: &View3dArgs) -> Result<()> {
    let src = a.scan.open_source()?;
    // a store renders its finest level within half the cache budget
    let v = source::volume_for_3d(src.as_ref(), (a.scan.cache_mib << 20) / 2)?;
    if v.dims() != src.dims() {
        eprintln!(
            "note: rendering a {}x{}x{} level of the {}x{}x{} scan (raise --cache-mib for more detail)",
            v.dims()[0],
            v.dims()[1],
            v.dims()[2],
            src.dims()[0],
            src.dims()[1],
            src.dims()[2]
        );
    }
    let dir = orbit_direction(a.orbit[0], a.orbit[1]);
    let up = if dir.cross(&Vector3::z()).norm() < 1e-6 {
        Vector3::y()
    } else {
        Vector3::z()
    };
    sutura_core::render::check_pixels(a.size, a.size, max_pixels(a.max_megapixels)?)
        .with_context(|| format!("--size {} (raise --max-megapixels to allow it)", a.size))?;
    let camera = Camera::fit(&*v, dir, up, a.size, a.size)?;
    let quality = if a.coarse {
        Quality::coarse()
    } else {
        Quality::full()
    };
    let rgba = match a.mode {
        ViewMode::Projection => {
            let img = raycast::mip(&v, &camera, MipOptions { quality })?;
            let wl = a
                .tone
                .window_for(&img)
                .with_context(|| a.scan.scan.display().to_string())?;
            wl.colourize(&img, a.tone.colours.into())
        }
        ViewMode::Surface => {
            let iso = match a.iso_value {
                Some(v) => sutura_core::landmarks::pick::IsoValue::given(v),
                None => sutura_core::landmarks::pick_source::default_iso_value(src.as_ref())?,
            };
            let bricks = raycast::Bricks::new(&v);
            let mut opts = SurfaceOptions::new(iso.value);
            opts.quality = quality;
            let s = raycast::surface(&v, &camera, &opts, Some(&bricks))?;
            eprintln!("surface at the {}", iso.describe());
            s.image
        }
    };
    let rgba = if a.tone.bare {
        rgba
    } else {
        annotate(&rgba, camera.pixel_mm, None)?
    };
    rgba.save_png(&a.output)?;
    eprintln!(
        "wrote {} ({}x{} px)",
        a.output.display(),
        rgba.width,
        rgba.height
    );
    Ok(())
}
