//! The column's preparation tab: the scan's label image (make, open, save), its labels (the
//! current one, which are drawn over the planes and which the 3D view keeps), the tools the
//! views' clicks serve, and the steps on the current label. Reads the preparation and returns
//! commands; [`super::prep::Prep`] applies them.

use std::path::Path;

use eframe::egui::{self, Color32, RichText, Sense, Ui, Vec2};

use super::command::{Command, PrepCommand, PrepTool};
use super::prep::Prep;
use super::state::ViewId;
use super::view::format_value;
use sutura_core::labels::Combine;
use sutura_core::labels::morph::MorphOp;
use sutura_core::labels::region::Connectivity;
use sutura_core::mesh::write::MeshFormat;

/// The preparation tab. `path` is where the scan's label image is kept (`None`: no scan);
/// `stage` the view on the stage, whose axis interpolation follows.
pub fn prep_ui(
    ui: &mut Ui,
    prep: Option<&Prep>,
    path: Option<&Path>,
    stage: ViewId,
    new_label: &mut String,
    out: &mut Vec<Command>,
) {
    let Some(path) = path else {
        ui.label("Open a scan to prepare it.");
        return;
    };
    let Some(p) = prep else {
        ui.label(RichText::new("Virtual preparation").strong());
        ui.label(
            RichText::new(
                "Label the specimen and its matrix voxel by voxel: brush strokes on the planes, \
                 regions grown from a click, interpolation between drawn slices. The 3D view \
                 can then show the specimen alone, and surface picks land on it.",
            )
            .weak(),
        );
        ui.add_space(4.0);
        let place = sutura_core::labels::zarr::store_of(path)
            .map(|store| format!(" in {}", file_name(store)))
            .unwrap_or_default();
        ui.label(format!("label image: {}{place}", file_name(path)))
            .on_hover_text(path.display().to_string());
        ui.horizontal(|ui| {
            if path.exists() {
                if ui.button("Open it").clicked() {
                    out.push(PrepCommand::Open.into());
                }
            } else if ui
                .button("New label image")
                .on_hover_text("labels specimen and matrix; saved at once")
                .clicked()
            {
                out.push(PrepCommand::Create.into());
            }
        });
        return;
    };
    egui::ScrollArea::vertical().show(ui, |ui| {
        file_ui(ui, p, out);
        ui.separator();
        labels_ui(ui, p, new_label, out);
        ui.separator();
        tools_ui(ui, p, out);
        ui.separator();
        steps_ui(ui, p, stage, out);
        ui.separator();
        mesh_ui(ui, p, out);
    });
}

fn file_name(path: &Path) -> String {
    path.file_name().map_or_else(
        || path.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    )
}

fn file_ui(ui: &mut Ui, p: &Prep, out: &mut Vec<Command>) {
    ui.horizontal(|ui| {
        let name = file_name(p.path());
        let text = if p.is_dirty() {
            format!("{name} (changed)")
        } else {
            name
        };
        ui.label(RichText::new(text).strong())
            .on_hover_text(p.path().display().to_string());
    });
    ui.horizontal(|ui| {
        if ui
            .add_enabled(p.is_dirty(), egui::Button::new("Save"))
            .on_hover_text(
                "written atomically; also saved when the scan changes or the window closes",
            )
            .clicked()
        {
            out.push(PrepCommand::Save.into());
        }
        let (undo, redo) = p.history();
        if ui
            .add_enabled(undo.is_some(), egui::Button::new("Undo"))
            .on_hover_text(undo.map_or_else(String::new, |u| format!("undo {u} (Ctrl+Z)")))
            .clicked()
        {
            out.push(PrepCommand::Undo.into());
        }
        if ui
            .add_enabled(redo.is_some(), egui::Button::new("Redo"))
            .on_hover_text(redo.map_or_else(String::new, |r| format!("redo {r} (Ctrl+Y)")))
            .clicked()
        {
            out.push(PrepCommand::Redo.into());
        }
    });
}

/// The other label (for a threshold within it, and to combine with) and the combine buttons.
fn other_ui(ui: &mut Ui, p: &Prep, out: &mut Vec<Command>) {
    let labels = p.label_list();
    let name_of = |v: u8| {
        labels
            .iter()
            .find(|l| l.value == v)
            .map_or_else(|| "none".to_owned(), |l| l.name.clone())
    };
    ui.horizontal(|ui| {
        ui.label("other label");
        egui::ComboBox::from_id_salt("prep_other")
            .selected_text(name_of(p.other))
            .show_ui(ui, |ui| {
                if ui.selectable_label(p.other == 0, "none").clicked() {
                    out.push(PrepCommand::SetOther(0).into());
                }
                for l in &labels {
                    if ui.selectable_label(p.other == l.value, &l.name).clicked() {
                        out.push(PrepCommand::SetOther(l.value).into());
                    }
                }
            });
    });
    ui.add_enabled_ui(p.other != 0 && p.other != p.current, |ui| {
        ui.horizontal(|ui| {
            for (mode, tip) in [
                (
                    Combine::Add,
                    "the other label's voxels move to the chosen label",
                ),
                (
                    Combine::Subtract,
                    "the chosen label loses the other label's voxels",
                ),
                (
                    Combine::Intersect,
                    "the chosen label keeps only its voxels the other label holds",
                ),
            ] {
                if ui.button(mode.name()).on_hover_text(tip).clicked() {
                    out.push(PrepCommand::Combine(mode).into());
                }
            }
        });
    });
}

/// The current label's surface written as a mesh, and the last one's report.
fn mesh_ui(ui: &mut Ui, p: &Prep, out: &mut Vec<Command>) {
    ui.label(RichText::new("Surface mesh of the chosen label").strong());
    ui.horizontal(|ui| {
        for format in MeshFormat::ALL {
            let path = p.mesh_path(format);
            if ui
                .button(format!("Write {}", format.extension().to_uppercase()))
                .on_hover_text(format!(
                    "the scan at the 3D view's iso-value inside the label, to {}",
                    path.display()
                ))
                .clicked()
            {
                out.push(PrepCommand::ExportMesh(format).into());
            }
        }
    });
    if let Some((path, r)) = &p.last_mesh {
        egui::Grid::new("prep_mesh_report")
            .num_columns(2)
            .spacing([8.0, 2.0])
            .show(ui, |ui| {
                let name = path.file_name().map_or_else(
                    || path.display().to_string(),
                    |n| n.to_string_lossy().into_owned(),
                );
                for (k, v) in [
                    ("file", name),
                    ("triangles", r.triangles.to_string()),
                    ("area", format!("{} mm²", format_value(r.area_mm2))),
                    ("volume", format!("{} mm³", format_value(r.volume_mm3))),
                    ("pieces", r.pieces.to_string()),
                    ("closed", if r.closed { "yes" } else { "no" }.to_owned()),
                ] {
                    ui.label(RichText::new(k).weak());
                    ui.label(v);
                    ui.end_row();
                }
            });
    }
}

/// A radius in µm with its name; the new value when the user changed it.
fn radius_ui(ui: &mut Ui, name: &str, um: f64) -> Option<f64> {
    let mut r = um;
    ui.horizontal(|ui| {
        ui.label(name);
        ui.add(
            egui::DragValue::new(&mut r)
                .range(1.0..=1e6)
                .speed(1.0)
                .suffix(" µm"),
        )
        .changed()
    })
    .inner
    .then_some(r)
}

fn swatch(ui: &mut Ui, rgba: [u8; 4]) {
    let (r, _) = ui.allocate_exact_size(Vec2::splat(12.0), Sense::hover());
    ui.painter()
        .rect_filled(r, 2.0, Color32::from_rgb(rgba[0], rgba[1], rgba[2]));
}

fn labels_ui(ui: &mut Ui, p: &Prep, new_label: &mut String, out: &mut Vec<Command>) {
    ui.label(RichText::new("Labels").strong());
    egui::Grid::new("prep_labels")
        .num_columns(5)
        .spacing([6.0, 3.0])
        .show(ui, |ui| {
            ui.label("");
            ui.label(RichText::new("label").weak());
            ui.label(RichText::new("mm³").weak())
                .on_hover_text("volume of the label's voxels");
            ui.label(RichText::new("show").weak())
                .on_hover_text("drawn over the plane views");
            ui.label(RichText::new("3D").weak())
                .on_hover_text("kept in the 3D view when it shows ticked labels only");
            ui.end_row();
            for l in p.label_list() {
                swatch(ui, l.rgba);
                if ui
                    .selectable_label(p.current == l.value, &l.name)
                    .on_hover_text(format!(
                        "label {}: {} voxels; the tools and steps change the chosen label",
                        l.value,
                        p.voxels(l.value)
                    ))
                    .clicked()
                {
                    out.push(PrepCommand::SetCurrent(l.value).into());
                }
                ui.label(format_value(p.voxels(l.value) as f64 * p.voxel_mm3()));
                let mut drawn = p.drawn.contains(l.value);
                if ui.checkbox(&mut drawn, "").changed() {
                    out.push(PrepCommand::ToggleDrawn(l.value).into());
                }
                let mut kept = p.kept.contains(l.value);
                if ui.checkbox(&mut kept, "").changed() {
                    out.push(PrepCommand::ToggleKept(l.value).into());
                }
                ui.end_row();
            }
        });
    ui.horizontal(|ui| {
        let field = ui.add(
            egui::TextEdit::singleline(new_label)
                .hint_text("new label")
                .desired_width(120.0),
        );
        let enter = field.lost_focus() && ui.input(|i| i.key_pressed(egui::Key::Enter));
        if (ui.button("Add").clicked() || enter) && !new_label.trim().is_empty() {
            out.push(PrepCommand::AddLabel(std::mem::take(new_label)).into());
        }
    });
    ui.horizontal(|ui| {
        let mut opacity = p.opacity;
        ui.add_enabled_ui(!p.outline, |ui| {
            if ui
                .add(egui::Slider::new(&mut opacity, 0.0..=1.0).text("opacity"))
                .changed()
            {
                out.push(PrepCommand::SetOpacity(opacity).into());
            }
        });
        let mut outline = p.outline;
        if ui
            .checkbox(&mut outline, "outline")
            .on_hover_text("only the labels' edges, in full colour")
            .changed()
        {
            out.push(PrepCommand::SetOutline(outline).into());
        }
    });
    let mut kept = p.kept_in_3d && p.scan_in_memory;
    if ui
        .add_enabled(
            p.scan_in_memory,
            egui::Checkbox::new(&mut kept, "3D view: ticked labels only"),
        )
        .on_hover_text(
            "the 3D view shows only the material inside the labels ticked under 3D, and \
             surface picks land on it",
        )
        .on_disabled_hover_text(
            "this scan is over the memory budget and read from its store: the 3D view shows a \
             coarser level of the whole scan; export the label's mesh to see it alone",
        )
        .changed()
    {
        out.push(PrepCommand::SetKeptIn3d(kept).into());
    }
}

fn tools_ui(ui: &mut Ui, p: &Prep, out: &mut Vec<Command>) {
    ui.label(RichText::new("Tool on the stage view").strong());
    ui.horizontal_wrapped(|ui| {
        for (tool, name, tip) in [
            (PrepTool::Look, "none", "clicks move the crosshair"),
            (
                PrepTool::Brush,
                "brush",
                "drag to paint the chosen label: a disc on the plane (a ball on the oblique view)",
            ),
            (PrepTool::Eraser, "eraser", "drag to erase the chosen label"),
            (
                PrepTool::Grow,
                "grow",
                "click a voxel: the chosen label grows from it through the intensity range, \
                 not into other labels",
            ),
            (
                PrepTool::KeepPiece,
                "keep piece",
                "click the chosen label: it keeps only the connected piece under the click",
            ),
        ] {
            if ui
                .selectable_label(p.tool == tool, name)
                .on_hover_text(tip)
                .clicked()
            {
                out.push(PrepCommand::SetTool(tool).into());
            }
        }
    });
    if let Some(r) = radius_ui(ui, "brush radius", p.brush_um) {
        out.push(PrepCommand::SetBrushUm(r).into());
    }
    grow_ui(ui, p, out);
}

/// The range, connectivity and distance a region grows with.
fn grow_ui(ui: &mut Ui, p: &Prep, out: &mut Vec<Command>) {
    let mut g = p.grow;
    let mut changed = false;
    ui.label(RichText::new("Intensity range (grow, threshold)").weak());
    ui.horizontal(|ui| {
        ui.label("from");
        changed |= ui
            .add(egui::DragValue::new(&mut g.lo).speed(10.0))
            .changed();
        ui.label("to");
        let mut open = g.hi.is_infinite();
        let mut hi = if open { p.scan_max } else { g.hi };
        ui.add_enabled_ui(!open, |ui| {
            changed |= ui.add(egui::DragValue::new(&mut hi).speed(10.0)).changed();
        });
        changed |= ui
            .checkbox(&mut open, "no top")
            .on_hover_text("no upper end: every value from the lower one up")
            .changed();
        g.hi = if open { f64::INFINITY } else { hi };
    });
    ui.horizontal(|ui| {
        ui.label("connectivity");
        for (c, name) in [(Connectivity::Faces6, "6"), (Connectivity::All26, "26")] {
            if ui
                .selectable_label(g.connectivity == c, name)
                .on_hover_text(if c == Connectivity::Faces6 {
                    "voxels sharing a face"
                } else {
                    "voxels sharing a face, an edge or a corner"
                })
                .clicked()
            {
                g.connectivity = c;
                changed = true;
            }
        }
    });
    ui.horizontal(|ui| {
        let mut limited = g.max_distance_mm.is_some();
        let mut d = g.max_distance_mm.unwrap_or(1.0);
        changed |= ui.checkbox(&mut limited, "within").changed();
        ui.add_enabled_ui(limited, |ui| {
            changed |= ui
                .add(
                    egui::DragValue::new(&mut d)
                        .range(0.001..=1e4)
                        .speed(0.01)
                        .suffix(" mm"),
                )
                .changed();
        });
        ui.label("of the seed");
        g.max_distance_mm = limited.then_some(d);
    });
    if changed {
        out.push(PrepCommand::SetGrow(g).into());
    }
}

fn steps_ui(ui: &mut Ui, p: &Prep, stage: ViewId, out: &mut Vec<Command>) {
    ui.label(RichText::new("Steps on the chosen label").strong());
    let axis = stage.axis().unwrap_or(2);
    let axis_name = ["i", "j", "k"][axis];
    ui.horizontal_wrapped(|ui| {
        if ui
            .button(format!("Interpolate along {axis_name}"))
            .on_hover_text(
                "fill the slices between the label's drawn slices (the stage view's axis; \
                 k when the stage shows no voxel plane)",
            )
            .clicked()
        {
            out.push(PrepCommand::Interpolate(axis).into());
        }
        if ui
            .button("Fill holes")
            .on_hover_text("fill the label's enclosed cavities")
            .clicked()
        {
            out.push(PrepCommand::FillHoles.into());
        }
        if ui
            .button("Threshold")
            .on_hover_text(
                "add every voxel in the intensity range (within the other label, if one is \
                 chosen) that no other label holds",
            )
            .clicked()
        {
            out.push(PrepCommand::Threshold.into());
        }
    });
    other_ui(ui, p, out);
    if let Some(r) = radius_ui(ui, "ball radius", p.morph_um) {
        out.push(PrepCommand::SetMorphUm(r).into());
    }
    ui.horizontal_wrapped(|ui| {
        for op in MorphOp::ALL {
            if ui.button(op.name()).clicked() {
                out.push(PrepCommand::Morph(op).into());
            }
        }
    });
    ui.horizontal(|ui| {
        let mut n = p.min_voxels;
        if ui
            .button("Remove pieces under")
            .on_hover_text("the label loses its connected pieces smaller than this")
            .clicked()
        {
            out.push(PrepCommand::RemoveSmall.into());
        }
        if ui
            .add(
                egui::DragValue::new(&mut n)
                    .range(1..=u64::MAX)
                    .suffix(" voxels"),
            )
            .changed()
        {
            out.push(PrepCommand::SetMinVoxels(n).into());
        }
    });
}
