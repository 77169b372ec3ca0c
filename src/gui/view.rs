//! One view on screen: shows its latest picture, draws the crosshair and frame, and turns
//! pointer input into [`Command`]s. It changes no state itself: the hover read-out, a wheel
//! movement and a landmark being dragged go out as commands like everything else.
//!
//! Pointer (stage view):
//! - left button: plane views move the crosshair to the pointer (press or drag); the 3D view
//!   orbits; with Ctrl the oblique view turns its plane;
//! - middle button, or Shift + left: pan;
//! - right button: window/level (right/left = wider/narrower, up/down = brighter/darker);
//! - wheel: plane views step through slices, the 3D view zooms; Ctrl + wheel zooms a plane view
//!   about the pointer;
//! - double click: reset the view.
//!
//! In placing mode (a project open, key P) the left button places the current landmark instead
//! (a click), or moves a placed one (a drag that starts on its mark); see [`super::marks`].
//!
//! A small view in the strip takes the wheel (slices) and a click, which puts it on the stage.
//!
//! The picture on screen is placed by the geometry it was rendered with, mapped through the
//! current view: while a new picture is on its way, a pan or zoom already moves the old one.

use eframe::egui::{
    self, Align2, Color32, CursorIcon, FontId, PointerButton, Pos2, Rect, Sense, Stroke,
    StrokeKind, TextureHandle, Ui, Vec2,
};
use nalgebra::Vector3;
use std::fmt::Write as _;

use super::camera::{
    ScreenMap, axis_basis, fit_mm_per_point, half_extents, onto_slice, slice_index,
};
use super::command::{Command, DeskCommand, PrefsCommand, PrepCommand, PrepTool, ViewCommand};
use super::desk::Desk;
use super::marks;
use super::state::{Hover, Preferences, Scan, ViewId, ViewState, VolumeMode};
use super::worker::RenderKey;
use sutura_core::geometry::WorldPoint;
use sutura_core::render::Camera;
use sutura_core::volume::VolumeSource;

/// A picture a view shows: its texture, what it was rendered from, and (surface views) the
/// world point behind each pixel.
pub struct Shown {
    pub texture: TextureHandle,
    pub key: RenderKey,
    pub generation: u64,
    pub hits: Option<Vec<Option<WorldPoint>>>,
    /// A first picture from a coarser level, which the finished one of the same generation
    /// replaces.
    pub partial: bool,
}

/// The background behind the pictures.
pub const VIEW_BACKGROUND: Color32 = Color32::from_rgb(14, 17, 21);

/// Degrees of orbit per point of drag.
const ORBIT_DEG_PER_POINT: f64 = 0.4;
/// Degrees of oblique turn per point of drag.
const TURN_DEG_PER_POINT: f64 = 0.25;
/// Points of wheel movement that make one slice step (for wheels that report points).
const POINTS_PER_STEP: f32 = 40.0;

#[must_use]
pub fn colour32(rgb: [u8; 3]) -> Color32 {
    Color32::from_rgb(rgb[0], rgb[1], rgb[2])
}

fn rect4(r: Rect) -> [f64; 4] {
    [
        f64::from(r.min.x),
        f64::from(r.min.y),
        f64::from(r.max.x),
        f64::from(r.max.y),
    ]
}

fn pos2(p: [f64; 2]) -> Pos2 {
    Pos2::new(p[0] as f32, p[1] as f32)
}

fn arr(p: Pos2) -> [f64; 2] {
    [f64::from(p.x), f64::from(p.y)]
}

/// The basis `(u, v, n)` of a plane view.
#[must_use]
pub fn plane_basis(
    volume: &dyn VolumeSource,
    vs: &ViewState,
    view: ViewId,
) -> (Vector3<f64>, Vector3<f64>, Vector3<f64>) {
    match view.axis() {
        Some(a) => {
            let (u, v) = axis_basis(volume, a);
            (u, v, u.cross(&v))
        }
        None => vs.oblique.basis(volume),
    }
}

/// A point on a plane view's plane: the voxel plane at the crosshair's slice, or the oblique
/// plane through the crosshair.
#[must_use]
pub fn plane_point(
    volume: &dyn VolumeSource,
    vs: &ViewState,
    view: ViewId,
    near: WorldPoint,
) -> WorldPoint {
    if let Some(a) = view.axis() {
        onto_slice(volume, a, slice_index(volume, a, vs.cursor), near)
    } else {
        let (_, _, n) = vs.oblique.basis(volume);
        WorldPoint(near.0 + n * (vs.cursor.0 - near.0).dot(&n))
    }
}

/// This frame's screen map of a plane view occupying `rect`.
#[must_use]
pub fn plane_map(volume: &dyn VolumeSource, vs: &ViewState, view: ViewId, rect: Rect) -> ScreenMap {
    let (u, v, _) = plane_basis(volume, vs, view);
    let cam = vs.planes[view.index()];
    let r = rect4(rect);
    let fit = fit_mm_per_point(half_extents(volume, &u, &v), [r[2] - r[0], r[3] - r[1]]);
    ScreenMap {
        rect: r,
        origin: plane_point(volume, vs, view, cam.centre),
        u,
        v,
        mm_per_point: fit / cam.zoom,
    }
}

/// The 3D view's render camera for a view of `pixels` (physical pixels).
#[must_use]
pub fn volume_camera(
    volume: &dyn VolumeSource,
    vs: &ViewState,
    pixels: [usize; 2],
) -> Option<Camera> {
    vs.orbit.camera(volume, pixels[0], pixels[1]).ok()
}

/// Physical pixels covering `rect`.
#[must_use]
pub fn pixels_for(rect: Rect, pixels_per_point: f32) -> [usize; 2] {
    let w = (rect.width() * pixels_per_point).round().max(1.0) as usize;
    let h = (rect.height() * pixels_per_point).round().max(1.0) as usize;
    [w, h]
}

/// Camera right and down vectors (unit, world), as [`sutura_core::render::raycast`] lays out rows
/// and columns.
fn camera_axes(cam: &Camera) -> (Vector3<f64>, Vector3<f64>) {
    let dir = cam.view_dir.normalize();
    let up = (cam.up - dir * dir.dot(&cam.up)).normalize();
    (dir.cross(&up), -up)
}

/// What a view is drawn from.
#[derive(Clone, Copy)]
pub struct ViewInput<'a> {
    pub view: ViewId,
    /// The large working view; otherwise a small one in the strip.
    pub on_stage: bool,
    pub prefs: &'a Preferences,
    pub vs: &'a ViewState,
    pub shown: Option<&'a Shown>,
    /// The open project, whose landmarks are drawn over the view.
    pub desk: Option<&'a Desk>,
    /// A click places the current landmark (placing mode, on the stage).
    pub placing: bool,
    /// A preparation tool takes the clicks and drags (on the stage).
    pub prep: Option<PrepInput>,
}

/// The preparation tool a view's clicks and drags serve.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PrepInput {
    pub tool: PrepTool,
    /// The brush's radius in the world.
    pub radius_mm: f64,
    /// A stroke is being painted (it ends when the button is up).
    pub stroking: bool,
}

/// Shows a view in `rect` and collects its commands; returns a plane view's screen map.
#[allow(clippy::too_many_lines)] // reason: input handling reads best in one place
pub fn view_ui(
    ui: &mut Ui,
    rect: Rect,
    scan: &Scan,
    input: &ViewInput<'_>,
    out: &mut Vec<Command>,
) -> Option<ScreenMap> {
    let ViewInput {
        view,
        on_stage,
        prefs,
        vs,
        shown,
        desk,
        placing,
        prep,
    } = *input;
    let volume = scan.grid();
    let id = ui.scope_id().with(("view", view.index(), on_stage));
    let response = ui.interact(rect, id, Sense::click_and_drag());
    let painter = ui.painter_at(rect);
    painter.rect_filled(rect, 0.0, VIEW_BACKGROUND);
    let ppp = ui.ctx().pixels_per_point();

    let map = view.is_plane().then(|| plane_map(volume, vs, view, rect));
    let camera = if view.is_plane() {
        None
    } else {
        volume_camera(volume, vs, pixels_for(rect, ppp))
    };

    // the picture
    if let Some(s) = shown {
        let img_rect = match (&s.key, &map) {
            (RenderKey::Plane(k), Some(m)) => {
                let g = &k.geometry;
                let a = m.screen(g.pixel_world(-0.5, -0.5));
                let b = m.screen(g.pixel_world(g.width as f64 - 0.5, g.height as f64 - 0.5));
                Rect::from_two_pos(pos2(a), pos2(b))
            }
            _ => rect,
        };
        painter.image(
            s.texture.id(),
            img_rect,
            Rect::from_min_max(Pos2::ZERO, Pos2::new(1.0, 1.0)),
            Color32::WHITE,
        );
    } else {
        painter.text(
            rect.center(),
            Align2::CENTER_CENTER,
            "rendering…",
            FontId::proportional(13.0),
            Color32::from_gray(140),
        );
    }

    if let Some(m) = &map
        && prefs.show_crosshair
    {
        crosshair(&painter, volume, vs, view, m);
    }
    frame_and_label(&painter, rect, view, on_stage, volume, vs);
    if let Some(d) = desk {
        match (&map, shown) {
            (Some(m), _) => marks::plane_marks(
                &painter,
                scan,
                m,
                d,
                vs.drag.as_ref(),
                prefs.landmark_labels,
                on_stage,
            ),
            (None, Some(s)) => marks::volume_marks(
                &painter,
                rect,
                scan,
                s,
                d,
                prefs.landmark_labels && on_stage,
            ),
            _ => {}
        }
        if placing {
            marks::placing_badge(&painter, rect, d, view);
        }
    }

    // hover read-out
    if let Some(p) = response.hover_pos() {
        let world = match (&map, shown) {
            (Some(m), _) => Some(m.world(arr(p))),
            (None, Some(s)) => surface_hit(s, rect, p),
            _ => None,
        };
        let hover = world.map(|w| ViewState::hover_at(volume, view, w));
        if hover != vs.hover {
            out.push(ViewCommand::Hover(hover).into());
        }
    } else if vs.hover.is_some_and(|h| h.view == view) {
        out.push(ViewCommand::Hover(None).into());
    }

    // wheel
    if response.hovered() {
        wheel(
            ui,
            view,
            on_stage,
            map.as_ref(),
            camera.as_ref(),
            rect,
            ppp,
            out,
        );
    }

    if !on_stage {
        if response.clicked() {
            out.push(PrefsCommand::SetStage(view).into());
        }
        let _ = response.on_hover_cursor(CursorIcon::PointingHand);
        return map;
    }

    let modifiers = ui.input(|i| i.modifiers);
    if response.double_clicked() {
        out.push(ViewCommand::ResetView(view).into());
        return map;
    }
    let delta = response.drag_delta();
    let d = [f64::from(delta.x), f64::from(delta.y)];
    let panning = response.dragged_by(PointerButton::Middle)
        || (response.dragged_by(PointerButton::Primary) && modifiers.shift);
    if panning {
        if delta != Vec2::ZERO {
            let by = match (&map, &camera) {
                (Some(m), _) => Some(m.world_delta(d)),
                (None, Some(c)) => {
                    let (right, down) = camera_axes(c);
                    let mm = c.pixel_mm * f64::from(ppp);
                    Some(right * (d[0] * mm) + down * (d[1] * mm))
                }
                _ => None,
            };
            if let Some(by) = by {
                out.push(ViewCommand::Pan { view, by }.into());
            }
        }
    } else if response.dragged_by(PointerButton::Secondary) {
        if delta != Vec2::ZERO {
            out.push(window_drag(vs, d));
        }
    } else if let Some(tool) = prep {
        prep_input(ui, &response, view, rect, map.as_ref(), shown, tool, out);
    } else if let (true, Some(d)) = (placing && !modifiers.command, desk) {
        place_input(
            ui,
            &response,
            view,
            rect,
            scan,
            d,
            map.as_ref(),
            shown,
            vs,
            out,
        );
    } else if view == ViewId::Volume {
        if response.dragged_by(PointerButton::Primary) && delta != Vec2::ZERO {
            out.push(
                ViewCommand::Orbit {
                    d_azimuth_deg: -d[0] * ORBIT_DEG_PER_POINT,
                    d_elevation_deg: d[1] * ORBIT_DEG_PER_POINT,
                }
                .into(),
            );
        }
    } else if view == ViewId::Oblique && modifiers.command {
        if response.dragged_by(PointerButton::Primary) && delta != Vec2::ZERO {
            out.push(
                ViewCommand::TurnOblique {
                    about_u_deg: -d[1] * TURN_DEG_PER_POINT,
                    about_v_deg: d[0] * TURN_DEG_PER_POINT,
                }
                .into(),
            );
        }
    } else if let Some(m) = &map {
        // a press held over frames, or a click whose press and release came in one frame
        let held = response.is_pointer_button_down_on() && ui.input(|i| i.pointer.primary_down());
        if (held || response.clicked_by(PointerButton::Primary))
            && let Some(p) = response.interact_pointer_pos()
        {
            out.push(ViewCommand::MoveCursor(m.world(arr(p))).into());
        }
    }

    if let (Some(t), Some(m), Some(p)) = (prep, &map, response.hover_pos())
        && matches!(t.tool, PrepTool::Brush | PrepTool::Eraser)
    {
        // the brush's footprint on the plane
        let r = (t.radius_mm / m.mm_per_point) as f32;
        let colour = if t.tool == PrepTool::Eraser {
            Color32::from_rgb(240, 120, 110)
        } else {
            Color32::from_rgb(250, 230, 150)
        };
        painter.circle_stroke(p, r.max(1.5), egui::Stroke::new(1.2, colour));
    }
    let icon = match view {
        _ if prep.is_some() => CursorIcon::Crosshair,
        _ if placing && vs.drag.is_some() => CursorIcon::Grabbing,
        _ if placing && !panning => CursorIcon::Cell,
        ViewId::Volume if response.dragged() => CursorIcon::Grabbing,
        ViewId::Volume => CursorIcon::Grab,
        _ if panning => CursorIcon::Grabbing,
        _ => CursorIcon::Crosshair,
    };
    let _ = response.on_hover_cursor(icon);
    map
}

/// Pointer input while a preparation tool is chosen: the brush and the eraser paint while the
/// primary button is down on a view (a disc on a voxel-plane view's plane, a ball on the
/// oblique view) and end the stroke when it is released; growing and keeping a piece take a
/// click, on a plane or on the 3D view's surface.
#[allow(clippy::too_many_arguments)] // reason: the view, its geometry and the tool
fn prep_input(
    ui: &Ui,
    response: &egui::Response,
    view: ViewId,
    rect: Rect,
    map: Option<&ScreenMap>,
    shown: Option<&Shown>,
    tool: PrepInput,
    out: &mut Vec<Command>,
) {
    let at = |p: Pos2| match map {
        Some(m) => Some(m.world(arr(p))),
        None => shown.and_then(|s| surface_hit(s, rect, p)),
    };
    match tool.tool {
        PrepTool::Brush | PrepTool::Eraser => {
            let Some(m) = map else {
                return;
            };
            let down = ui.input(|i| i.pointer.primary_down());
            let held = response.is_pointer_button_down_on() && down;
            if (held || response.clicked_by(PointerButton::Primary))
                && let Some(p) = response.interact_pointer_pos()
            {
                out.push(
                    PrepCommand::PaintTo {
                        at: m.world(arr(p)),
                        axis: view.axis(),
                    }
                    .into(),
                );
            }
            if tool.stroking && (!held || response.clicked_by(PointerButton::Primary)) {
                out.push(PrepCommand::EndStroke.into());
            }
        }
        PrepTool::Grow | PrepTool::KeepPiece => {
            if response.clicked_by(PointerButton::Primary)
                && let Some(w) = response.interact_pointer_pos().and_then(at)
            {
                out.push(if tool.tool == PrepTool::Grow {
                    PrepCommand::Grow(w).into()
                } else {
                    PrepCommand::KeepPiece(w).into()
                });
            }
        }
        PrepTool::Look => {}
    }
}

/// Pointer input while placing: on a plane view a click places the current landmark (a click
/// on a placed landmark's mark makes that one current) and a drag that starts on a mark moves
/// it; on the 3D view a click places the current landmark on the surface under the pointer.
#[allow(clippy::too_many_arguments)] // reason: the view, its geometry and the state tiers
fn place_input(
    ui: &Ui,
    response: &egui::Response,
    view: ViewId,
    rect: Rect,
    scan: &Scan,
    desk: &Desk,
    map: Option<&ScreenMap>,
    shown: Option<&Shown>,
    vs: &ViewState,
    out: &mut Vec<Command>,
) {
    if let Some(m) = map {
        let mut drag = vs.drag.clone();
        if response.drag_started_by(PointerButton::Primary)
            && let Some(origin) = ui.input(|i| i.pointer.press_origin())
            && let Some(id) = marks::grab_on_plane(scan, m, desk, origin)
        {
            drag = Some((id, m.world(arr(origin))));
        }
        if let Some((id, at)) = &mut drag {
            if let Some(p) = response.interact_pointer_pos() {
                *at = m.world(arr(p));
            }
            if response.drag_stopped() || !ui.input(|i| i.pointer.primary_down()) {
                out.push(ViewCommand::Drag(None).into());
                out.push(
                    DeskCommand::MoveLandmark {
                        landmark: id.clone(),
                        to: *at,
                    }
                    .into(),
                );
                return;
            }
            if drag != vs.drag {
                out.push(ViewCommand::Drag(drag).into());
            }
        } else if response.clicked_by(PointerButton::Primary)
            && let Some(p) = response.interact_pointer_pos()
        {
            // a click on a placed landmark's mark makes it current rather than placing another
            // landmark on top of it
            out.push(match marks::grab_on_plane(scan, m, desk, p) {
                Some(id) => DeskCommand::SelectLandmark(id).into(),
                None => DeskCommand::PlaceOnPlane {
                    view,
                    at: m.world(arr(p)),
                }
                .into(),
            });
        }
        return;
    }
    if response.clicked_by(PointerButton::Primary)
        && let Some(p) = response.interact_pointer_pos()
        && let Some(s) = shown
        && let RenderKey::Volume(k) = &s.key
    {
        let [w, h] = s.key.size();
        let col = f64::from((p.x - rect.min.x) / rect.width()) * w as f64 - 0.5;
        let row = f64::from((p.y - rect.min.y) / rect.height()) * h as f64 - 0.5;
        if let Ok(through) = k.camera.pixel_world(col, row) {
            out.push(
                DeskCommand::PlaceOnSurface {
                    through,
                    direction: k.camera.view_dir,
                }
                .into(),
            );
        }
    }
}

/// Window/level from a right-button drag of `d` points: right widens, up brightens.
#[must_use]
pub fn window_drag(vs: &ViewState, d: [f64; 2]) -> Command {
    ViewCommand::NudgeWindow {
        centre_by: d[1] * vs.window.width * 0.004,
        width_factor: (d[0] * 0.006).exp(),
    }
    .into()
}

#[allow(clippy::too_many_arguments)] // reason: the wheel acts differently per view and modifier
fn wheel(
    ui: &Ui,
    view: ViewId,
    on_stage: bool,
    map: Option<&ScreenMap>,
    camera: Option<&Camera>,
    rect: Rect,
    ppp: f32,
    out: &mut Vec<Command>,
) {
    let (lines, zoom_lines, pointer) = ui.input(|i| {
        let mut lines = 0.0f32;
        let mut zoom = 0.0f32;
        for e in &i.events {
            if let egui::Event::MouseWheel {
                unit,
                delta,
                modifiers,
                ..
            } = e
            {
                let n = match unit {
                    egui::MouseWheelUnit::Line => delta.y,
                    egui::MouseWheelUnit::Point => delta.y / POINTS_PER_STEP,
                    egui::MouseWheelUnit::Page => delta.y * 10.0,
                };
                if modifiers.command || view == ViewId::Volume {
                    zoom += n;
                } else {
                    lines += n;
                }
            }
        }
        (lines, zoom, i.pointer.hover_pos())
    });
    if lines != 0.0 && view.is_plane() {
        out.push(ViewCommand::Wheel { view, lines }.into());
    }
    if zoom_lines != 0.0 && on_stage {
        let factor = 1.15f64.powf(f64::from(zoom_lines));
        let anchor = pointer.and_then(|p| match (map, camera) {
            (Some(m), _) => Some(m.world(arr(p))),
            (None, Some(c)) => {
                let col = f64::from((p.x - rect.min.x) * ppp) - 0.5;
                let row = f64::from((p.y - rect.min.y) * ppp) - 0.5;
                c.pixel_world(col, row).ok()
            }
            _ => None,
        });
        out.push(
            ViewCommand::Zoom {
                view,
                factor,
                anchor,
            }
            .into(),
        );
    }
}

/// The surface point under screen point `p`, from the picture's per-pixel hits.
fn surface_hit(s: &Shown, rect: Rect, p: Pos2) -> Option<WorldPoint> {
    let hits = s.hits.as_ref()?;
    let [w, h] = s.key.size();
    let fx = (p.x - rect.min.x) / rect.width();
    let fy = (p.y - rect.min.y) / rect.height();
    if !(0.0..1.0).contains(&fx) || !(0.0..1.0).contains(&fy) {
        return None;
    }
    let col = ((fx * w as f32) as usize).min(w - 1);
    let row = ((fy * h as f32) as usize).min(h - 1);
    hits.get(col + w * row).copied().flatten()
}

/// Lines where the other plane views cut this one, each in its view's colour, with a gap
/// around the crosshair point.
fn crosshair(
    painter: &egui::Painter,
    volume: &dyn VolumeSource,
    vs: &ViewState,
    view: ViewId,
    m: &ScreenMap,
) {
    let n = m.u.cross(&m.v);
    let centre = m.screen(vs.cursor);
    let reach = (m.size()[0].hypot(m.size()[1])) * 2.0;
    for other in [
        ViewId::PlaneI,
        ViewId::PlaneJ,
        ViewId::PlaneK,
        ViewId::Oblique,
    ] {
        if other == view {
            continue;
        }
        let (_, _, n_other) = plane_basis(volume, vs, other);
        let d = n_other.cross(&n);
        if d.norm() < 1e-6 {
            continue;
        }
        let d = d.normalize();
        let w = d.cross(&n);
        let p = plane_point(volume, vs, other, vs.cursor);
        let denom = w.dot(&n_other);
        if denom.abs() < 1e-12 {
            continue;
        }
        let x = WorldPoint(m.origin.0 + w * ((p.0 - m.origin.0).dot(&n_other) / denom));
        let s0 = m.screen(x);
        let dir = [d.dot(&m.u), d.dot(&m.v)];
        let len = dir[0].hypot(dir[1]);
        if len < 1e-9 {
            continue;
        }
        let dir = [dir[0] / len, dir[1] / len];
        // the crosshair point's position along the line, and a gap around it
        let t_c = (centre[0] - s0[0]) * dir[0] + (centre[1] - s0[1]) * dir[1];
        let gap = 10.0;
        let at = |t: f64| pos2([s0[0] + dir[0] * t, s0[1] + dir[1] * t]);
        let c = other.colour();
        let stroke = Stroke::new(1.2, Color32::from_rgba_unmultiplied(c[0], c[1], c[2], 200));
        painter.line_segment([at(t_c - reach), at(t_c - gap)], stroke);
        painter.line_segment([at(t_c + gap), at(t_c + reach)], stroke);
    }
}

fn frame_and_label(
    painter: &egui::Painter,
    rect: Rect,
    view: ViewId,
    on_stage: bool,
    volume: &dyn VolumeSource,
    vs: &ViewState,
) {
    let colour = colour32(view.colour());
    let width = if on_stage { 2.0 } else { 1.0 };
    painter.rect_stroke(rect, 3.0, Stroke::new(width, colour), StrokeKind::Inside);
    let text = match view {
        ViewId::PlaneI | ViewId::PlaneJ | ViewId::PlaneK => {
            let a = view.axis().unwrap_or(2);
            format!(
                "{}  slice {} of {}",
                view.label(),
                slice_index(volume, a, vs.cursor) + 1,
                volume.dims()[a]
            )
        }
        ViewId::Oblique => {
            let a = vs.oblique.angles_deg();
            format!("{}  {:.0}° {:.0}° {:.0}°", view.label(), a[0], a[1], a[2])
        }
        ViewId::Volume => match vs.volume_mode {
            VolumeMode::Surface => format!(
                "{}  surface, {}",
                view.label(),
                vs.iso.describe().split(" (").next().unwrap_or_default()
            ),
            VolumeMode::Projection => format!("{}  projection", view.label()),
        },
    };
    let font = FontId::proportional(if on_stage { 13.0 } else { 11.0 });
    let galley = painter.layout_no_wrap(text, font, Color32::from_gray(235));
    let pad = Vec2::new(6.0, 3.0);
    let at = rect.min + Vec2::new(6.0, 6.0);
    let bg = Rect::from_min_size(at, galley.size() + 2.0 * pad);
    painter.rect_filled(bg, 3.0, Color32::from_rgba_unmultiplied(10, 12, 16, 190));
    painter.rect_filled(
        Rect::from_min_size(bg.min, Vec2::new(3.0, bg.height())),
        1.0,
        colour,
    );
    painter.galley(
        at + pad + Vec2::new(2.0, 0.0),
        galley,
        Color32::from_gray(235),
    );
}

/// The hover read-out as status-line text.
#[must_use]
pub fn hover_text(h: &Hover) -> String {
    let p = h.world.0;
    let mut s = format!(
        "{}: x {:.3}  y {:.3}  z {:.3} mm",
        h.view.label(),
        p.x,
        p.y,
        p.z
    );
    if let Some(v) = h.voxel {
        let _ = write!(s, "   voxel ({}, {}, {})", v.i, v.j, v.k);
    }
    if let Some(val) = h.value {
        let _ = write!(s, "   value {}", format_value(val));
    }
    s
}

/// An intensity as integers show it, or with three decimals.
#[must_use]
pub fn format_value(v: f64) -> String {
    if v.fract() == 0.0 && v.abs() < 1e15 {
        format!("{v:.0}")
    } else {
        format!("{v:.3}")
    }
}
