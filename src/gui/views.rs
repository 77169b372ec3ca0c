//! Each view's bookkeeping on screen: where it was drawn, its screen map, the picture it shows,
//! the last picture asked for, and how long its last full picture took. One [`ViewSlot`] per
//! view, held together in [`Views`], which also asks the render workers for new pictures and
//! takes the finished ones.

use std::sync::Arc;
use std::time::Duration;

use eframe::egui::{self, Rect, TextureOptions};

use super::camera::ScreenMap;
use super::prep::Layers;
use super::state::{Preferences, Scan, ViewId, ViewState};
use super::view::{Shown, pixels_for, plane_map, volume_camera};
use super::worker::{JobLayers, PlaneKey, RenderKey, VolumeKey, Workers};
use sutura_core::geometry::Plane;
use sutura_core::render::{Quality, SliceGeometry};

/// How long the 3D view must be still before its full-quality pass is asked for.
pub const SETTLE_SECS: f64 = 0.25;
/// A plane view whose last full-resolution redraw took longer than this shows half-resolution
/// pictures while it moves (one frame at 60 Hz).
pub const PLANE_BUDGET_MS: f64 = 16.0;

/// One view on screen.
#[derive(Default)]
pub struct ViewSlot {
    /// Where it was drawn in the last frame (`None`: not drawn).
    pub rect: Option<Rect>,
    /// Its screen map in the last frame (plane views).
    pub map: Option<ScreenMap>,
    /// The picture it shows.
    pub shown: Option<Shown>,
    /// The key of the last picture asked for.
    pub sent: Option<RenderKey>,
    /// How long its last full-resolution picture took, milliseconds.
    pub render_ms: f64,
}

/// The five views' slots, by [`ViewId::index`].
#[derive(Default)]
pub struct Views {
    pub slots: [ViewSlot; 5],
}

impl Views {
    #[must_use]
    pub fn slot(&self, view: ViewId) -> &ViewSlot {
        &self.slots[view.index()]
    }

    pub fn slot_mut(&mut self, view: ViewId) -> &mut ViewSlot {
        &mut self.slots[view.index()]
    }

    /// Forgets where views were drawn (at the start of a frame).
    pub fn new_frame(&mut self) {
        for s in &mut self.slots {
            s.rect = None;
            s.map = None;
        }
    }

    /// Forgets every picture (a new scan).
    pub fn clear(&mut self) {
        for s in &mut self.slots {
            s.shown = None;
            s.sent = None;
        }
    }

    /// Whether the view shows its latest requested picture (no render outstanding).
    #[must_use]
    pub fn is_current(&self, view: ViewId) -> bool {
        let s = self.slot(view);
        match (&s.shown, &s.sent) {
            (Some(sh), Some(k)) => sh.key == *k,
            _ => false,
        }
    }

    /// Takes finished pictures for the scan shown; returns the failures' messages.
    pub fn take_finished(
        &mut self,
        workers: &Workers,
        scan_id: Option<u64>,
        ctx: &egui::Context,
    ) -> Vec<String> {
        let mut errors = Vec::new();
        for r in workers.finished() {
            let key_scan = match &r.key {
                RenderKey::Plane(k) => k.scan,
                RenderKey::Volume(k) => k.scan,
            };
            if Some(key_scan) != scan_id {
                continue;
            }
            let slot = self.slot_mut(r.view);
            if !r.key.is_coarse() {
                slot.render_ms = r.elapsed.as_secs_f64() * 1e3;
            }
            // newer pictures only; of the same generation, the finished one after a first one
            if slot.shown.as_ref().is_some_and(|s| {
                s.generation > r.generation
                    || (s.generation == r.generation && (!s.partial || r.partial))
            }) {
                continue;
            }
            match r.picture {
                Ok(pic) => {
                    if let Some(s) = &mut slot.shown {
                        s.texture.set(pic.image, TextureOptions::LINEAR);
                        s.key = r.key;
                        s.generation = r.generation;
                        s.hits = pic.hits;
                        s.partial = r.partial;
                    } else {
                        let texture = ctx.load_texture(
                            format!("view-{}", r.view.label()),
                            pic.image,
                            TextureOptions::LINEAR,
                        );
                        slot.shown = Some(Shown {
                            texture,
                            key: r.key,
                            generation: r.generation,
                            hits: pic.hits,
                            partial: r.partial,
                        });
                    }
                }
                Err(msg) => errors.push(format!("{}: {msg}", r.view.label())),
            }
        }
        errors
    }

    /// Asks for a new picture for every drawn view whose key changed; `layers`, the
    /// preparation's labels over the planes and kept in 3D.
    #[allow(clippy::too_many_arguments)] // reason: the state tiers a picture depends on
    pub fn request(
        &mut self,
        workers: &mut Workers,
        scan: &Arc<Scan>,
        prefs: &Preferences,
        vs: &ViewState,
        layers: Option<&Layers>,
        ctx: &egui::Context,
        now: f64,
    ) {
        let ppp = ctx.pixels_per_point();
        for view in ViewId::ALL {
            let slot = self.slot(view);
            let Some(rect) = slot.rect else {
                continue;
            };
            let pixels = pixels_for(rect, ppp);
            let on_stage = view == prefs.stage;
            let key = if view.is_plane() {
                let m = plane_map(scan.grid(), vs, view, rect);
                let plane = Plane {
                    origin: m.origin,
                    u: m.u,
                    v: m.v,
                };
                let moving = now - vs.planes_changed_at < SETTLE_SECS;
                let coarse = on_stage && moving && slot.render_ms > PLANE_BUDGET_MS;
                if coarse {
                    ctx.request_repaint_after(Duration::from_secs_f64(SETTLE_SECS));
                }
                let f = if coarse { 2 } else { 1 };
                let Ok(geometry) = SliceGeometry::centred(
                    &plane,
                    pixels[0].div_ceil(f),
                    pixels[1].div_ceil(f),
                    m.mm_per_point / f64::from(ppp) * f as f64,
                ) else {
                    continue;
                };
                RenderKey::Plane(PlaneKey {
                    scan: scan.id,
                    geometry,
                    window: vs.window,
                    colours: prefs.colour_map,
                    interpolation: prefs.interpolation,
                    scale_bar: prefs.show_scale_bar,
                    orientation: prefs.show_orientation && on_stage,
                    coarse,
                    labels: layers.and_then(|l| l.overlay),
                })
            } else {
                let Some(camera) = volume_camera(scan.grid(), vs, pixels) else {
                    continue;
                };
                let moving = now - vs.volume_changed_at < SETTLE_SECS;
                if moving {
                    ctx.request_repaint_after(Duration::from_secs_f64(SETTLE_SECS));
                }
                RenderKey::Volume(VolumeKey {
                    scan: scan.id,
                    camera,
                    mode: vs.volume_mode,
                    iso_value: vs.iso.value,
                    window: vs.window,
                    colours: prefs.colour_map,
                    quality: if moving && on_stage {
                        preview_quality(slot.render_ms)
                    } else {
                        Quality::full()
                    },
                    scale_bar: prefs.show_scale_bar && on_stage,
                    kept: layers.and_then(|l| l.kept.as_ref().map(|(k, _)| *k)),
                })
            };
            let slot = self.slot_mut(view);
            if slot.sent != Some(key) {
                let job = JobLayers {
                    labels: layers.map(|l| Arc::clone(&l.labels)),
                    kept: layers.and_then(|l| l.kept.as_ref().map(|(_, v)| Arc::clone(v))),
                };
                workers.request(view, key, Arc::clone(scan), job, u8::from(!on_stage));
                slot.sent = Some(key);
            }
        }
    }
}

/// The 3D view's picture while it moves: the render module's coarse pass, or one ray per 8×8
/// pixels when the last full picture took over half a second (a large scan filling the view).
fn preview_quality(last_full_ms: f64) -> Quality {
    if last_full_ms > 500.0 {
        Quality {
            downsample: 8,
            step_voxels: 3.0,
        }
    } else {
        Quality::coarse()
    }
}
