//! Rendering off the UI thread.
//!
//! Each view asks for a picture by a [`RenderKey`]: everything that decides its pixels (the
//! slice geometry or 3D camera, window, colour map, quality, overlays). The app sends a key only
//! when it differs from the last one sent for that view, tagged with a per-view generation
//! number. Jobs wait in a mailbox with one slot per view: a newer job replaces a waiting older
//! one, which is then never rendered. Two threads take jobs — one for the plane views (the
//! stage's first), one for the 3D view, so that a slow full 3D pass never holds up a slice —
//! and use rayon inside the `render` calls. Results come back by channel with their
//! generation; the app shows a result only if it is newer than what the view shows.
//!
//! All pixels come from [`sutura_core::render`]: slices, window/level, colour maps, ray casting and
//! the scale bar; [`render_view`] only chains those calls and converts the RGBA image to the
//! texture format, so the benchmark measures exactly what the workstation does per redraw.

use std::sync::mpsc::{Receiver, Sender, channel};
use std::sync::{Arc, Condvar, Mutex, PoisonError, RwLock};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

use eframe::egui;
use rayon::prelude::*;

use super::prep::{KeptKey, OverlayKey};
use super::state::{Scan, ViewId, VolumeMode};
use sutura_core::geometry::WorldPoint;
use sutura_core::labels::LabelVolume;
use sutura_core::render::overlay::{AxisNames, Overlay};
use sutura_core::render::pyramid::Pyramid;
use sutura_core::render::raycast::{self, Bricks};
use sutura_core::render::source::{self as render_source, Detail};
use sutura_core::render::{
    Camera, ColourMap, F32Image, Interpolation, MipOptions, Quality, RenderError, RgbaImage,
    SliceGeometry, SurfaceOptions, WindowLevel,
};
use sutura_core::volume::{Block, Volume, VolumeSource};

/// Everything that decides a plane view's pixels.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlaneKey {
    pub scan: u64,
    pub geometry: SliceGeometry,
    pub window: WindowLevel,
    pub colours: ColourMap,
    pub interpolation: Interpolation,
    pub scale_bar: bool,
    pub orientation: bool,
    /// A preview at reduced resolution while the view moves (see the app's redraw budget).
    pub coarse: bool,
    /// The label image drawn over the slice, if any.
    pub labels: Option<OverlayKey>,
}

/// Everything that decides the 3D view's pixels.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct VolumeKey {
    pub scan: u64,
    pub camera: Camera,
    pub mode: VolumeMode,
    /// The scan's iso-value: the surface drawn.
    pub iso_value: f64,
    pub window: WindowLevel,
    pub colours: ColourMap,
    pub quality: Quality,
    pub scale_bar: bool,
    /// The 3D view shows the scan's copy keeping only some labels' material (see
    /// [`super::prep`]); `None`: the whole scan.
    pub kept: Option<KeptKey>,
}

#[derive(Clone, Copy, Debug, PartialEq)]
pub enum RenderKey {
    Plane(PlaneKey),
    Volume(VolumeKey),
}

impl RenderKey {
    #[must_use]
    pub fn size(&self) -> [usize; 2] {
        match self {
            Self::Plane(p) => [p.geometry.width, p.geometry.height],
            Self::Volume(v) => [v.camera.width, v.camera.height],
        }
    }

    /// Whether this is a coarse (preview) picture.
    #[must_use]
    pub fn is_coarse(&self) -> bool {
        match self {
            Self::Plane(p) => p.coarse,
            Self::Volume(v) => v.quality.downsample > 1,
        }
    }
}

/// A rendered picture, ready to upload as a texture.
pub struct Picture {
    pub image: egui::ColorImage,
    /// For a surface view: the world point each pixel's ray met, for the hover read-out.
    pub hits: Option<Vec<Option<WorldPoint>>>,
}

/// A finished job.
pub struct Rendered {
    pub view: ViewId,
    pub generation: u64,
    /// A first picture from a coarser level; the finished one of the same generation follows.
    pub partial: bool,
    pub key: RenderKey,
    pub picture: Result<Picture, String>,
    pub elapsed: Duration,
}

/// The colour of overlay text and the scale bar.
const OVERLAY_COLOUR: [u8; 4] = [245, 236, 214, 255];

/// Renders one view's picture: the slice or 3D image, window/level and colour map, the scale
/// bar and orientation labels, converted to an egui image. `bricks` gives the empty-space
/// table for surface views (built once per scan by the caller).
pub fn render_view(
    volume: &dyn VolumeSource,
    key: &RenderKey,
    bricks: Option<&Bricks>,
) -> Result<Picture, RenderError> {
    render_view_reusing(volume, key, bricks, &mut None, None)
}

/// The resampled values of a plane view's last picture, kept so that a change of window or
/// colour map only maps the values again.
pub type PlaneValues = Option<(PlaneKey, F32Image)>;

/// As [`render_view`], reusing `last` (and replacing it) for plane views: when only the
/// window, colour map or overlays changed, the slice is not resampled again. A plane key with
/// labels blends `labels` (on the volume's grid) over the slice.
///
/// A plane of a scan that is not in memory is read through the volume interface at the
/// coarsest level with a voxel per pixel ([`Detail::Screen`]): a moving (coarse) picture reads
/// a coarse level, the picture at rest the level its zoom needs — full resolution when zoomed
/// in to the voxels. A 3D picture needs the scan in memory: the caller passes the level it
/// reads for the 3D view ([`render_source::volume_for_3d`]).
pub fn render_view_reusing(
    volume: &dyn VolumeSource,
    key: &RenderKey,
    bricks: Option<&Bricks>,
    last: &mut PlaneValues,
    labels: Option<&LabelVolume>,
) -> Result<Picture, RenderError> {
    match key {
        RenderKey::Plane(p) => {
            let img = match last.take() {
                Some((k, img))
                    if k.scan == p.scan
                        && k.geometry == p.geometry
                        && k.interpolation == p.interpolation =>
                {
                    img
                }
                _ => render_source::render_slice(
                    volume,
                    &p.geometry,
                    p.interpolation,
                    None,
                    Detail::Screen,
                )?,
            };
            let mut rgba = p.window.colourize(&img, p.colours);
            *last = Some((*p, img));
            if let (Some(o), Some(l)) = (p.labels, labels)
                && l.dims() == volume.dims()
            {
                sutura_core::render::labels::blend_labels(
                    &mut rgba,
                    &p.geometry,
                    &volume.world_from_voxel(),
                    l,
                    sutura_core::render::labels::LabelStyle {
                        opacity: f64::from(o.opacity),
                        outline: o.outline,
                    },
                    &|v| o.drawn.contains(v),
                );
            }
            let rgba = if p.scale_bar || p.orientation {
                let mut o = Overlay::new(&rgba)?;
                if p.scale_bar {
                    o.scale_bar(p.geometry.pixel_mm, OVERLAY_COLOUR);
                }
                if p.orientation {
                    o.orientation_labels(
                        &p.geometry.u,
                        &p.geometry.v,
                        &AxisNames::default(),
                        OVERLAY_COLOUR,
                    );
                }
                o.finish()
            } else {
                rgba
            };
            Ok(Picture {
                image: to_color_image(&rgba),
                hits: None,
            })
        }
        RenderKey::Volume(v) => {
            let volume = volume.whole().ok_or(RenderError::NotInMemory)?;
            let (rgba, hits) = match v.mode {
                VolumeMode::Projection => {
                    let img = raycast::mip(volume, &v.camera, MipOptions { quality: v.quality })?;
                    (v.window.colourize(&img, v.colours), None)
                }
                VolumeMode::Surface => {
                    let mut opts = SurfaceOptions::new(v.iso_value);
                    opts.quality = v.quality;
                    opts.depth_cue = 0.35;
                    let s = raycast::surface(volume, &v.camera, &opts, bricks)?;
                    (s.image, Some(s.hits))
                }
            };
            let rgba = if v.scale_bar {
                let mut o = Overlay::new(&rgba)?;
                o.scale_bar(v.camera.pixel_mm, OVERLAY_COLOUR);
                o.finish()
            } else {
                rgba
            };
            Ok(Picture {
                image: to_color_image(&rgba),
                hits,
            })
        }
    }
}

/// Straight-alpha RGBA to egui's premultiplied colours, in parallel.
#[must_use]
pub fn to_color_image(rgba: &RgbaImage) -> egui::ColorImage {
    let pixels: Vec<egui::Color32> = rgba
        .pixels
        .par_chunks_exact(4)
        .map(|p| egui::Color32::from_rgba_unmultiplied(p[0], p[1], p[2], p[3]))
        .collect();
    egui::ColorImage::new([rgba.width, rgba.height], pixels)
}

/// What a job needs besides the scan: the label image (plane views) and the 3D view's
/// kept-labels copy of the scan.
#[derive(Clone, Default)]
pub struct JobLayers {
    pub labels: Option<Arc<RwLock<LabelVolume>>>,
    pub kept: Option<Arc<Volume>>,
}

struct Job {
    generation: u64,
    key: RenderKey,
    scan: Arc<Scan>,
    layers: JobLayers,
    /// Lower runs first: the stage view before the strip.
    priority: u8,
}

#[derive(Default)]
struct Slots {
    jobs: [Option<Job>; 5],
    quit: bool,
}

struct Mailbox {
    slots: Mutex<Slots>,
    ready: Condvar,
}

/// The render threads and the channel their results come back on.
pub struct Workers {
    mailbox: Arc<Mailbox>,
    results: Receiver<Rendered>,
    threads: Vec<JoinHandle<()>>,
    generation: [u64; 5],
}

impl Workers {
    /// Starts the threads; `wake` is called after each result is sent (the app's repaint).
    pub fn start(wake: impl Fn() + Send + Sync + 'static) -> Self {
        let mailbox = Arc::new(Mailbox {
            slots: Mutex::new(Slots::default()),
            ready: Condvar::new(),
        });
        let (tx, results) = channel();
        let wake: Arc<dyn Fn() + Send + Sync> = Arc::new(wake);
        let lanes: [&[ViewId]; 2] = [
            &[
                ViewId::PlaneI,
                ViewId::PlaneJ,
                ViewId::PlaneK,
                ViewId::Oblique,
            ],
            &[ViewId::Volume],
        ];
        let threads = lanes
            .iter()
            .enumerate()
            .map(|(n, lane)| {
                let (mb, tx, wake) = (Arc::clone(&mailbox), tx.clone(), Arc::clone(&wake));
                let lane: Vec<ViewId> = lane.to_vec();
                std::thread::Builder::new()
                    .name(format!("sutura-render-{n}"))
                    .spawn(move || serve(&mb, &lane, &tx, &*wake))
                    .expect("spawning a render thread")
            })
            .collect();
        Self {
            mailbox,
            results,
            threads,
            generation: [0; 5],
        }
    }

    /// Queues a picture for `view`, replacing any job of that view still waiting. Returns the
    /// job's generation.
    pub fn request(
        &mut self,
        view: ViewId,
        key: RenderKey,
        scan: Arc<Scan>,
        layers: JobLayers,
        priority: u8,
    ) -> u64 {
        let i = view.index();
        self.generation[i] += 1;
        let generation = self.generation[i];
        let mut slots = self
            .mailbox
            .slots
            .lock()
            .unwrap_or_else(PoisonError::into_inner);
        slots.jobs[i] = Some(Job {
            generation,
            key,
            scan,
            layers,
            priority,
        });
        drop(slots);
        self.mailbox.ready.notify_all();
        generation
    }

    /// Drops every waiting job (a new scan is coming).
    pub fn clear(&mut self) {
        let mut slots = self
            .mailbox
            .slots
            .lock()
            .unwrap_or_else(PoisonError::into_inner);
        for j in &mut slots.jobs {
            *j = None;
        }
    }

    /// Finished pictures, oldest first.
    pub fn finished(&self) -> impl Iterator<Item = Rendered> + '_ {
        self.results.try_iter()
    }

    /// Waits up to `timeout` for one finished picture (tests and the benchmark).
    #[must_use]
    pub fn wait(&self, timeout: Duration) -> Option<Rendered> {
        self.results.recv_timeout(timeout).ok()
    }
}

impl Drop for Workers {
    fn drop(&mut self) {
        self.mailbox
            .slots
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .quit = true;
        self.mailbox.ready.notify_all();
        for t in self.threads.drain(..) {
            // a render in progress finishes first; its result goes nowhere
            let _ = t.join();
        }
    }
}

/// Scans with at least this many voxels get a block pyramid for the 3D view: its moving
/// pictures are rendered from the 4x preview level, and the surface's empty-space table is read
/// off it. Below it the full volume renders fast enough (common practice: previews pay off
/// from about 256³).
const PYRAMID_MIN_VOXELS: usize = 1 << 24;

/// What the 3D worker keeps per scan: the block pyramid (large scans) and the surface's
/// empty-space table, built on first use.
pub struct VolumeAids {
    scan: u64,
    pyramid: Option<Pyramid>,
    bricks: Option<Bricks>,
    /// The empty-space table of the pyramid's preview level.
    preview_bricks: Option<Bricks>,
}

impl VolumeAids {
    /// For scan `scan` (its id), whose voxels are `v`; builds the pyramid of a large scan.
    #[must_use]
    pub fn new(scan: u64, v: &Volume) -> Self {
        let pyramid = if v.dims().iter().product::<usize>() >= PYRAMID_MIN_VOXELS {
            Pyramid::new(v).ok()
        } else {
            None
        };
        Self {
            scan,
            pyramid,
            bricks: None,
            preview_bricks: None,
        }
    }

    /// Renders a 3D view's picture of `volume` (the scan these aids were made for) as the
    /// worker does: moving pictures of a large scan from the preview level, surfaces of the
    /// full volume with the empty-space table.
    pub fn render(&mut self, volume: &Volume, key: &RenderKey) -> Result<Picture, RenderError> {
        if let RenderKey::Volume(v) = key
            && v.mode == VolumeMode::Surface
        {
            if v.quality.downsample > 1
                && let Some(preview) = self.pyramid.as_ref().and_then(Pyramid::preview)
            {
                self.preview_bricks
                    .get_or_insert_with(|| Bricks::new(preview));
            } else {
                self.bricks(volume);
            }
        }
        let (vol, key, preview) = volume_job(self, volume, key);
        let bricks = if preview {
            self.preview_bricks.as_ref()
        } else {
            self.bricks.as_ref()
        };
        render_view(vol, &key, bricks)
    }

    fn bricks(&mut self, volume: &Volume) -> &Bricks {
        let pyramid = self.pyramid.as_ref();
        self.bricks.get_or_insert_with(|| {
            pyramid
                .and_then(|p| Bricks::from_pyramid(p, volume))
                .unwrap_or_else(|| Bricks::new(volume))
        })
    }
}

/// The volume and key a 3D job renders: a moving (downsampled) picture of a large scan comes
/// from the pyramid's preview level, stepping half a preview voxel (two source voxels), with
/// the job's own ray spacing; anything else from the scan itself. The flag says which.
fn volume_job<'a>(
    aids: &'a VolumeAids,
    scan: &'a Volume,
    key: &RenderKey,
) -> (&'a Volume, RenderKey, bool) {
    if let RenderKey::Volume(v) = key
        && v.quality.downsample > 1
        && let Some(preview) = aids.pyramid.as_ref().and_then(Pyramid::preview)
    {
        let mut k = *v;
        k.quality = Quality {
            downsample: v.quality.downsample,
            step_voxels: Quality::preview().step_voxels,
        };
        return (preview, RenderKey::Volume(k), true);
    }
    (scan, *key, false)
}

/// A 3D job: the scan in memory (or its kept-labels copy), or, for a scan read through its
/// store, the finest level within its `volume_view_bytes`, read once per scan and kept in
/// `overview`. Picks on the 3D view go back to full resolution (see `pick_source`).
///
/// Reading that level takes a while on a large scan (432 MB of a 2400³ scan): the first time,
/// a first picture of the coarsest level goes to `first` at once.
fn render_3d(
    job: &Job,
    k: VolumeKey,
    aids: &mut Option<(Option<KeptKey>, VolumeAids)>,
    overview: &mut Option<(u64, Volume)>,
    first: &dyn Fn(Result<Picture, RenderError>),
) -> Result<Picture, RenderError> {
    // a level read for another scan is let go whatever this scan is
    if overview.as_ref().is_some_and(|(id, _)| *id != job.scan.id) {
        *overview = None;
    }
    // the kept-labels copy, when the key asks for one and it came with the job
    let (volume, kept) = match (&job.layers.kept, k.kept, job.scan.whole()) {
        (Some(v), Some(key), _) => (&**v, Some(key)),
        (_, _, Some(v)) => (v, None),
        (_, _, None) => {
            if overview.is_none() {
                let source = job.scan.grid();
                let coarsest = source.level_count() - 1;
                if source.level_within(job.scan.volume_view_bytes) < coarsest {
                    // a first picture only when it could be made; a failure shows with the
                    // finished one
                    let quick = source
                        .read_block(coarsest, &source.level(coarsest).full_region())
                        .map_err(RenderError::from)
                        .and_then(|quick| {
                            VolumeAids::new(job.scan.id, &quick).render(&quick, &job.key)
                        });
                    if quick.is_ok() {
                        first(quick);
                    }
                }
                let level = match render_source::volume_for_3d(
                    job.scan.grid(),
                    job.scan.volume_view_bytes,
                )? {
                    Block::Read(v) => v,
                    // a source that is not whole reads blocks; never the whole of it
                    Block::Whole(_) => return Err(RenderError::NotInMemory),
                };
                *overview = Some((job.scan.id, level));
            }
            (&overview.as_ref().expect("just read").1, None)
        }
    };
    if aids
        .as_ref()
        .is_none_or(|(kk, a)| a.scan != job.scan.id || *kk != kept)
    {
        *aids = None;
        *aids = Some((kept, VolumeAids::new(job.scan.id, volume)));
    }
    aids.as_mut().expect("just set").1.render(volume, &job.key)
}

/// Warms the cache for the next planes of a view scrolling through a scan read from its store:
/// when the plane moved along its normal since the last picture, the two planes further on in
/// that direction are read in the background (at the level the picture read).
fn prefetch_ahead(source: &dyn VolumeSource, p: &PlaneKey, last: &mut Option<SliceGeometry>) {
    let g = p.geometry;
    let before = last.replace(g);
    let Some(b) = before else { return };
    let n = g.normal();
    let step = g.origin.0 - b.origin.0;
    let along = step.dot(&n);
    // the same plane orientation and framing, moved only along its normal
    let moved_in_plane = (step - n * along).norm();
    if along.abs() < 1e-12
        || moved_in_plane > 1e-9 * (1.0 + step.norm())
        || (g.u - b.u).norm() > 1e-12
        || (g.v - b.v).norm() > 1e-12
    {
        return;
    }
    let level = Detail::Screen.level(source, g.pixel_mm);
    // one region holding both planes: a store runs one prefetch at a time
    let mut ahead: Option<sutura_core::volume::Region> = None;
    for steps in 1..=2 {
        let mut next = g;
        next.origin = WorldPoint(g.origin.0 + n * (along * f64::from(steps)));
        if let Some(r) = render_source::slice_region(source, level, &next, None) {
            ahead = Some(match ahead {
                None => r,
                Some(a) => [0, 1, 2].map(|x| a[x].start.min(r[x].start)..a[x].end.max(r[x].end)),
            });
        }
    }
    if let Some(region) = ahead {
        source.prefetch(level, &region);
    }
}

fn serve(mb: &Mailbox, lane: &[ViewId], tx: &Sender<Rendered>, wake: &(dyn Fn() + Send + Sync)) {
    let mut aids: Option<(Option<KeptKey>, VolumeAids)> = None;
    let mut overview: Option<(u64, Volume)> = None;
    let mut values: [PlaneValues; 5] = Default::default();
    let mut last_plane: [Option<SliceGeometry>; 5] = Default::default();
    loop {
        let (view, job) = {
            let mut slots = mb.slots.lock().unwrap_or_else(PoisonError::into_inner);
            loop {
                if slots.quit {
                    return;
                }
                let next = lane
                    .iter()
                    .filter(|v| slots.jobs[v.index()].is_some())
                    .min_by_key(|v| {
                        slots.jobs[v.index()]
                            .as_ref()
                            .map_or(u8::MAX, |j| j.priority)
                    })
                    .copied();
                if let Some(v) = next
                    && let Some(job) = slots.jobs[v.index()].take()
                {
                    break (v, job);
                }
                slots = mb.ready.wait(slots).unwrap_or_else(PoisonError::into_inner);
            }
        };
        let start = Instant::now();
        let picture = if let RenderKey::Volume(k) = job.key {
            let first = |picture: Result<Picture, RenderError>| {
                let _ = tx.send(Rendered {
                    view,
                    generation: job.generation,
                    partial: true,
                    key: job.key,
                    picture: picture.map_err(|e| e.to_string()),
                    elapsed: start.elapsed(),
                });
                wake();
            };
            render_3d(&job, k, &mut aids, &mut overview, &first)
        } else {
            let labels = job
                .layers
                .labels
                .as_ref()
                .map(|l| l.read().unwrap_or_else(PoisonError::into_inner));
            let source = job.scan.grid();
            let picture = render_view_reusing(
                source,
                &job.key,
                None,
                &mut values[view.index()],
                labels.as_deref(),
            );
            if source.whole().is_none()
                && let RenderKey::Plane(p) = job.key
            {
                prefetch_ahead(source, &p, &mut last_plane[view.index()]);
            }
            picture
        }
        .map_err(|e| e.to_string());
        let sent = tx.send(Rendered {
            view,
            generation: job.generation,
            partial: false,
            key: job.key,
            picture,
            elapsed: start.elapsed(),
        });
        if sent.is_err() {
            return;
        }
        wake();
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::Vector3;
    use sutura_core::geometry::{Affine3, Plane, WorldPoint};

    fn key(volume: &Volume, window: WindowLevel) -> PlaneKey {
        let plane = Plane {
            origin: WorldPoint(volume.centre_world().0 + Vector3::new(0.01, -0.02, 0.0)),
            u: Vector3::x(),
            v: Vector3::y(),
        };
        PlaneKey {
            scan: 1,
            geometry: SliceGeometry::centred(&plane, 40, 30, 0.013).unwrap(),
            window,
            colours: ColourMap::Grey,
            interpolation: Interpolation::Trilinear,
            scale_bar: true,
            orientation: false,
            coarse: false,
            labels: None,
        }
    }

    #[test]
    fn a_window_change_reuses_the_values_and_matches_a_fresh_render() {
        let data: Vec<u16> = (0..20 * 16 * 8).map(|i| (i * 37 % 4000) as u16).collect();
        let vol = Volume::from_vec([20, 16, 8], Affine3::from_spacing([0.02; 3]), data).unwrap();
        let a = key(
            &vol,
            WindowLevel {
                centre: 2000.0,
                width: 4000.0,
            },
        );
        let b = PlaneKey {
            window: WindowLevel {
                centre: 1000.0,
                width: 500.0,
            },
            ..a
        };
        let mut last = None;
        render_view_reusing(&vol, &RenderKey::Plane(a), None, &mut last, None).unwrap();
        let bits = |l: &PlaneValues| {
            l.as_ref()
                .map(|(_, img)| img.pixels.iter().map(|v| v.to_bits()).collect::<Vec<u32>>())
        };
        let kept = bits(&last);
        let reused =
            render_view_reusing(&vol, &RenderKey::Plane(b), None, &mut last, None).unwrap();
        let fresh = render_view(&vol, &RenderKey::Plane(b), None).unwrap();
        assert_eq!(reused.image, fresh.image);
        assert_eq!(bits(&last), kept, "the values were kept, not resampled");
        // a new geometry resamples
        let mut c = b;
        c.geometry.origin = WorldPoint(c.geometry.origin.0 + Vector3::new(0.0, 0.0, 0.02));
        let moved = render_view_reusing(&vol, &RenderKey::Plane(c), None, &mut last, None).unwrap();
        assert_eq!(
            moved.image,
            render_view(&vol, &RenderKey::Plane(c), None).unwrap().image
        );
        assert_ne!(moved.image, fresh.image);
    }

    /// A large scan's moving 3D pictures come from the pyramid's preview level and show the
    /// same object as the full volume's coarse pass (a ball: the silhouettes agree but for a
    /// rim, the preview's block maxima reaching up to two source voxels further); still
    /// pictures, and every picture of a small scan, come from the scan itself.
    #[test]
    fn moving_pictures_of_a_large_scan_come_from_the_preview_level() {
        let n = 256;
        let c = (n as f64 - 1.0) / 2.0;
        let data: Vec<u8> = (0..n * n * n)
            .map(|i| {
                let (x, y, z) = ((i % n) as f64, ((i / n) % n) as f64, (i / n / n) as f64);
                let r = ((x - c).powi(2) + (y - c).powi(2) + (z - c).powi(2)).sqrt();
                if r < 80.0 { 200 } else { 10 }
            })
            .collect();
        let vol = Volume::from_vec([n; 3], Affine3::from_spacing([0.01; 3]), data).unwrap();
        let aids = VolumeAids::new(7, &vol);
        assert!(aids.pyramid.is_some(), "256³ is past the pyramid threshold");
        let camera = Camera::fit(&vol, Vector3::new(1.0, 0.4, 0.3), Vector3::z(), 96, 96).unwrap();
        let key = |quality| {
            RenderKey::Volume(VolumeKey {
                scan: 7,
                camera,
                mode: VolumeMode::Surface,
                iso_value: 100.0,
                window: WindowLevel {
                    centre: 100.0,
                    width: 200.0,
                },
                colours: ColourMap::Grey,
                quality,
                scale_bar: false,
                kept: None,
            })
        };
        let (still_vol, _, still_preview) = volume_job(&aids, &vol, &key(Quality::full()));
        assert!(!still_preview && std::ptr::eq(still_vol, &raw const vol));
        let moving = key(Quality::coarse());
        let (pv, pkey, preview) = volume_job(&aids, &vol, &moving);
        assert!(preview && pv.dims() == [64; 3], "{:?}", pv.dims());
        let silhouette = |p: &Picture| -> Vec<bool> {
            p.hits
                .as_ref()
                .unwrap()
                .iter()
                .map(Option::is_some)
                .collect()
        };
        let from_preview = silhouette(&render_view(pv, &pkey, None).unwrap());
        let from_full = silhouette(&render_view(&vol, &moving, None).unwrap());
        let inside = from_full.iter().filter(|&&h| h).count();
        let differ = from_preview
            .iter()
            .zip(&from_full)
            .filter(|(a, b)| a != b)
            .count();
        assert!(inside > 500, "the ball fills the view: {inside}");
        assert!(differ * 10 < inside, "{differ} of {inside} pixels differ");
        // a small scan renders from itself however it moves
        let small = Volume::from_vec(
            [64; 3],
            Affine3::from_spacing([0.01; 3]),
            vec![0u8; 64 * 64 * 64],
        )
        .unwrap();
        let small_aids = VolumeAids::new(8, &small);
        assert!(small_aids.pyramid.is_none());
        assert!(!volume_job(&small_aids, &small, &moving).2);
    }

    /// A scan read through its store draws the pictures of the scan in memory: a plane zoomed
    /// in to its voxels reads level 0 and is the same picture; zoomed out it reads a coarser
    /// level; the 3D view draws the finest level within its share of the budget.
    #[test]
    #[allow(
        clippy::too_many_lines,
        reason = "one scan's planes, then its 3D view, in order"
    )]
    fn a_scan_read_through_its_store_draws_the_pictures_of_the_scan_in_memory() {
        use sutura_core::io::Progress;
        use sutura_core::io::slices::VolumeSlices;
        use sutura_core::store::{Store, StoreOptions, write};
        let n = 48;
        let c = (n as f64 - 1.0) / 2.0;
        let data: Vec<u16> = (0..n * n * n)
            .map(|i| {
                let (x, y, z) = ((i % n) as f64, ((i / n) % n) as f64, (i / n / n) as f64);
                let r = ((x - c).powi(2) + (y - c).powi(2) + (z - c).powi(2)).sqrt();
                if r < 15.0 {
                    3000 + (i % 17) as u16
                } else {
                    100 + (i % 13) as u16
                }
            })
            .collect();
        let vol = Volume::from_vec([n; 3], Affine3::from_spacing([0.01; 3]), data).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("ball.ome.zarr");
        let options = write::ConvertOptions {
            chunk: 16,
            coarsest_bytes: 4_000,
            ..write::ConvertOptions::default()
        };
        let mut slices = VolumeSlices::new(&vol, std::path::Path::new("ball"));
        write::convert(&mut slices, &out, &options, &Progress::none()).unwrap();
        let store = Store::open(
            &out,
            &StoreOptions {
                cache_bytes: 4 * 16 * 16 * 16 * 2,
                ..StoreOptions::default()
            },
        )
        .unwrap();
        assert!(store.level_count() >= 3);
        let window = WindowLevel {
            centre: 1500.0,
            width: 3000.0,
        };
        // zoomed in: 4 pixels per voxel, level 0, the same picture
        let mut fine = key(&vol, window);
        fine.geometry.pixel_mm = 0.0025;
        let from_store = render_view(&store, &RenderKey::Plane(fine), None).unwrap();
        let from_memory = render_view(&vol, &RenderKey::Plane(fine), None).unwrap();
        assert_eq!(from_store.image, from_memory.image);
        // zoomed out: a coarser level, the same ball (its rim may differ by a level voxel)
        let mut coarse = fine;
        coarse.geometry.pixel_mm = 0.045;
        assert!(Detail::Screen.level(&store, coarse.geometry.pixel_mm) >= 2);
        let a = render_view(&store, &RenderKey::Plane(coarse), None).unwrap();
        let b = render_view(&vol, &RenderKey::Plane(coarse), None).unwrap();
        let bright =
            |p: &Picture| -> Vec<bool> { p.image.pixels.iter().map(|c| c.r() > 128).collect() };
        let (a, b) = (bright(&a), bright(&b));
        let differ = a.iter().zip(&b).filter(|(x, y)| x != y).count();
        assert!(b.iter().any(|&x| x) && differ * 10 < a.len(), "{differ}");
        // the 3D view: the finest level within its bytes, read once per scan
        let shared: Arc<dyn VolumeSource> = Arc::new(store);
        let scan = Arc::new(Scan::from_source(9, out.clone(), shared, 24 * 24 * 24 * 2).unwrap());
        assert!(scan.whole().is_none());
        let camera = Camera::fit(
            scan.grid(),
            Vector3::new(1.0, 0.4, 0.3),
            Vector3::z(),
            64,
            64,
        )
        .unwrap();
        let vkey = VolumeKey {
            scan: 9,
            camera,
            mode: VolumeMode::Surface,
            iso_value: scan.iso.value,
            window,
            colours: ColourMap::Grey,
            quality: Quality::full(),
            scale_bar: false,
            kept: None,
        };
        let job = Job {
            generation: 1,
            key: RenderKey::Volume(vkey),
            scan: Arc::clone(&scan),
            layers: JobLayers::default(),
            priority: 0,
        };
        let (mut aids, mut overview) = (None, None);
        let firsts = Mutex::new(Vec::new());
        let first = |p: Result<Picture, RenderError>| {
            firsts
                .lock()
                .unwrap()
                .push(p.map(|p| p.hits.is_some()).is_ok());
        };
        let picture = render_3d(&job, vkey, &mut aids, &mut overview, &first).unwrap();
        assert_eq!(
            *firsts.lock().unwrap(),
            vec![true],
            "a first picture of the coarsest level came before"
        );
        // the level is kept: the next picture comes at once, with no first one
        render_3d(&job, vkey, &mut aids, &mut overview, &first).unwrap();
        assert_eq!(firsts.lock().unwrap().len(), 1);
        let level = &overview.as_ref().unwrap().1;
        assert_eq!(
            level.dims(),
            [24; 3],
            "level 1: the finest within 24³ voxels"
        );
        let hits = picture.hits.unwrap();
        assert!(
            hits.iter().filter(|h| h.is_some()).count() > 100,
            "the ball is drawn"
        );
    }
}
