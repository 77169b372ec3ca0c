//! The trial's lists in the desk column: the checklist (each landmark's state, and the
//! digitising checks against the rest of the sample), the scheme's curves with the tracing
//! switch, and the live measurements. Like every panel they only read the state and return
//! [`Command`]s.

use eframe::egui::{self, Color32, RichText, Sense, Stroke, Ui, Vec2};

use super::command::{Command, DeskCommand};
use super::desk::Desk;
use super::desk_panel::{heading, state_icon};
use super::marks::{CURRENT, OPEN, PLACED};
use sutura_core::analysis::checks::{Flag, FlagKind, TrialChecks};
use sutura_core::measure::table::measure_trial;

pub fn checklist_ui(ui: &mut Ui, s: &Desk, out: &mut Vec<Command>) {
    let project = &s.session.project;
    let scheme = project.scheme();
    if let Some(p) = s
        .specimen
        .as_deref()
        .zip(s.trial.as_deref())
        .and_then(|(sp, t)| project.progress(sp, t))
    {
        heading(
            ui,
            &format!(
                "Checklist: {} of {} recorded",
                p.landmarks_done(),
                p.landmarks_total
            ),
        );
        ui.label(
            RichText::new(format!(
                "{} placed · {} estimated · {} missing",
                p.placed, p.estimated, p.missing
            ))
            .small()
            .weak(),
        );
    }
    let checks = s.checks();
    let flags_of = |id: &str| -> Vec<&Flag> {
        checks.map_or_else(Vec::new, |c| {
            c.flags
                .iter()
                .filter(|f| {
                    f.kind != FlagKind::OutlyingMeasurement && f.items.iter().any(|i| i == id)
                })
                .collect()
        })
    };
    for def in &scheme.landmarks {
        let state = s.state_of(&def.id);
        let is_current = s.current.as_deref() == Some(def.id.as_str());
        let flags = flags_of(&def.id);
        ui.horizontal(|ui| {
            state_icon(ui, state);
            let text = RichText::new(&def.id).monospace();
            let text = if is_current {
                text.color(CURRENT).strong()
            } else {
                text
            };
            let r = ui.selectable_label(is_current, text).on_hover_text(format!(
                "{} (type {}): {}",
                def.name,
                def.bookstein_type.name(),
                def.definition
            ));
            if r.clicked() {
                out.push(DeskCommand::SelectLandmark(def.id.clone()).into());
            }
            ui.label(RichText::new(def.bookstein_type.name()).small().weak());
            if !flags.is_empty() {
                let reasons: Vec<&str> = flags.iter().map(|f| f.reason.as_str()).collect();
                ui.label(RichText::new("check").small().color(FLAG))
                    .on_hover_text(reasons.join("\n"));
            }
        });
    }
    checks_ui(ui, checks);
}

/// Colour of a digitising check's flag.
const FLAG: Color32 = Color32::from_rgb(236, 190, 84);

/// The digitising checks of the trial: each flag with its reason, or why there are none.
fn checks_ui(ui: &mut Ui, checks: Option<&TrialChecks>) {
    let Some(c) = checks else {
        return;
    };
    ui.add_space(4.0);
    if let Some(why) = &c.not_checked {
        ui.label(
            RichText::new(format!("Checks: not yet — {why}"))
                .small()
                .weak(),
        );
        return;
    }
    if c.flags.is_empty() {
        ui.label(
            RichText::new(format!(
                "Checks: nothing unusual against {} complete specimens",
                c.reference
            ))
            .small()
            .weak(),
        );
        return;
    }
    ui.label(
        RichText::new(format!(
            "Checks against {} complete specimens (they never change the data):",
            c.reference
        ))
        .small()
        .color(FLAG),
    );
    for f in &c.flags {
        ui.label(RichText::new(format!("• {}", f.reason)).small().color(FLAG));
    }
}

/// The scheme's curves: traced control points and semilandmarks, and the tracing switch.
pub fn curves_ui(ui: &mut Ui, s: &Desk, out: &mut Vec<Command>) {
    let tracing = s.tracing.as_ref();
    let scheme = s.session.project.scheme();
    if scheme.curves.is_empty() {
        return;
    }
    ui.separator();
    heading(ui, "Curves");
    let t = s.trial_ref();
    for def in &scheme.curves {
        let entry = t.and_then(|t| t.curve(&def.id));
        let traced: usize = entry.map_or(0, |e| e.traced_mm.iter().map(Vec::len).sum());
        let done = entry.and_then(|e| e.semilandmarks(def)).is_some();
        ui.horizontal(|ui| {
            let (rect, _) = ui.allocate_exact_size(Vec2::splat(12.0), Sense::hover());
            let c = rect.center();
            let col = if done { PLACED } else { OPEN };
            let d = 4.5;
            let diamond = vec![
                c + Vec2::new(0.0, -d),
                c + Vec2::new(d, 0.0),
                c + Vec2::new(0.0, d),
                c + Vec2::new(-d, 0.0),
            ];
            if done {
                ui.painter()
                    .add(egui::Shape::convex_polygon(diamond, col, Stroke::NONE));
            } else {
                ui.painter()
                    .add(egui::Shape::closed_line(diamond, Stroke::new(1.2, col)));
            }
            ui.label(RichText::new(&def.id).monospace())
                .on_hover_text(format!("{}: {}", def.name, def.definition));
            ui.label(
                RichText::new(format!(
                    "{traced} pts · {}",
                    if done {
                        format!("{} semilandmarks", def.total_semilandmarks())
                    } else {
                        "anchors needed".to_owned()
                    }
                ))
                .small()
                .weak(),
            );
        });
        ui.horizontal(|ui| {
            for seg in 0..def.segments() {
                let on = tracing.is_some_and(|(c, k)| *c == def.id && *k == seg);
                let label = if def.segments() == 1 {
                    "Trace".to_owned()
                } else {
                    format!("Trace {}", seg + 1)
                };
                if ui
                    .add(egui::Button::new(label).selected(on))
                    .on_hover_text(format!(
                        "while placing, clicks add control points from {} towards {} (T)",
                        def.anchors[seg],
                        def.anchors[seg + 1]
                    ))
                    .clicked()
                {
                    out.push(DeskCommand::SetTracing((!on).then(|| (def.id.clone(), seg))).into());
                }
            }
            if ui
                .add_enabled(entry.is_some(), egui::Button::new("Clear curve"))
                .clicked()
            {
                out.push(DeskCommand::ClearCurve(def.id.clone()).into());
            }
        });
    }
}

/// The live measurements of the selected trial (the same numbers as `sutura measure`).
pub fn measurements_ui(ui: &mut Ui, s: &Desk) {
    let (Some(sp), Some(t)) = (s.specimen_ref(), s.trial_ref()) else {
        return;
    };
    let rows = measure_trial(s.session.project.scheme(), sp, t);
    if rows.is_empty() {
        return;
    }
    heading(ui, "Measurements");
    egui::Grid::new("measurements")
        .num_columns(2)
        .striped(true)
        .spacing([10.0, 2.0])
        .show(ui, |ui| {
            for r in &rows {
                ui.label(RichText::new(&r.measurement).monospace().small());
                match &r.result {
                    Ok(m) => {
                        let mut text = format!("{:.3} {}", m.value, r.unit);
                        if !r.estimated.is_empty() {
                            text.push_str(" (est.)");
                        }
                        ui.label(RichText::new(text).monospace()).on_hover_text(format!(
                            "resolution {:.3} {}: how much one voxel's shift of a point changes it",
                            m.resolution, r.unit
                        ));
                    }
                    Err(why) => {
                        ui.label(RichText::new("—").weak())
                            .on_hover_text(why.as_str());
                    }
                }
                ui.end_row();
            }
        });
}
