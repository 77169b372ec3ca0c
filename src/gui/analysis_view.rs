//! The analysis workspace: the project's superimposition run in the background, the
//! morphospace scatter, the disparity table, and a button for every export.
//!
//! The analysis is [`sutura_core::analysis::analyse`] on the project as it stands in memory
//! (unsaved edits included), flattened by [`flatten`] with the `group` label, with the same
//! defaults as `sutura superimpose` (partial Procrustes, thin-plate-spline estimates of missing
//! landmarks, 999 resamples, seed 1), so the numbers here are the command line's numbers. The
//! exports write the same files as the command line does, into a folder the user picks.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::mpsc::{Receiver, TryRecvError, channel};
use std::time::Instant;

use eframe::egui::{self, Align2, Color32, FontId, Pos2, Rect, RichText, Sense, Stroke, Ui, Vec2};

use super::state::{Command, ExportKind, Workspace};
use sutura_core::analysis::{Analysis, AnalysisOptions, analyse};
use sutura_core::landmarks::Project;
use sutura_core::landmarks::project::points::flatten;
use sutura_core::measure::table::{measure_project, write_csv_file};

/// The group label the analysis compares.
pub const GROUP_KEY: &str = "group";

/// Colours of the groups in the scatter, in label order (then repeating).
const GROUP_COLOURS: [Color32; 6] = [
    Color32::from_rgb(98, 190, 214),
    Color32::from_rgb(236, 150, 82),
    Color32::from_rgb(150, 206, 110),
    Color32::from_rgb(206, 128, 196),
    Color32::from_rgb(230, 214, 100),
    Color32::from_rgb(160, 160, 236),
];

/// A run in progress.
pub struct Run {
    started: Instant,
    rx: Receiver<Result<Analysis, String>>,
}

/// The analysis workspace's state (never saved).
#[derive(Default)]
pub struct AnalysisState {
    pub run: Option<Run>,
    pub result: Option<Arc<Analysis>>,
    /// Why the last run failed.
    pub error: Option<String>,
    /// The document changed since the shown result was computed.
    pub stale: bool,
    /// PC axes shown (0-based).
    pub axes: [usize; 2],
    /// Where exports go.
    pub folder: Option<PathBuf>,
    /// What the last export wrote (or why it failed).
    pub last_export: Option<(String, bool)>,
    /// Seconds the last run took.
    pub secs: f64,
}

impl AnalysisState {
    /// Starts analysing `project` on a background thread; `wake` is called when it ends.
    pub fn start(&mut self, project: &Project, wake: impl Fn() + Send + 'static) {
        let project = project.clone();
        let (tx, rx) = channel();
        let spawned = std::thread::Builder::new()
            .name("sutura-analysis".into())
            .spawn(move || {
                let _ = tx.send(run(&project));
                wake();
            });
        match spawned {
            Ok(_) => {
                self.run = Some(Run {
                    started: Instant::now(),
                    rx,
                });
                self.error = None;
            }
            Err(e) => self.error = Some(format!("cannot start the analysis thread: {e}")),
        }
    }

    /// Takes a finished run's result.
    pub fn poll(&mut self) {
        let Some(r) = &self.run else {
            return;
        };
        let outcome = match r.rx.try_recv() {
            Ok(o) => o,
            Err(TryRecvError::Empty) => return,
            Err(TryRecvError::Disconnected) => Err("the analysis thread stopped".into()),
        };
        self.secs = r.started.elapsed().as_secs_f64();
        self.run = None;
        match outcome {
            Ok(a) => {
                let c = a.components();
                self.axes = [
                    self.axes[0].min(c.saturating_sub(1)),
                    self.axes[1].min(c.saturating_sub(1)),
                ];
                if self.axes[0] == self.axes[1] && c > 1 {
                    self.axes = [0, 1];
                }
                self.result = Some(Arc::new(a));
                self.stale = false;
                self.error = None;
            }
            Err(e) => self.error = Some(e),
        }
    }

    #[must_use]
    pub fn is_running(&self) -> bool {
        self.run.is_some()
    }
}

/// The analysis of a project, as `sutura superimpose PROJECT` runs it.
pub fn run(project: &Project) -> Result<Analysis, String> {
    let e = flatten(project, Some(GROUP_KEY), false);
    if e.table.observations.is_empty() {
        return Err("no trial has any landmark yet: nothing to superimpose".into());
    }
    analyse(&e.table, &AnalysisOptions::default()).map_err(|e| e.to_string())
}

/// Writes one export into `folder` (created if needed); says what it wrote.
pub fn export(
    kind: ExportKind,
    folder: &Path,
    project: &Project,
    project_file: &Path,
    analysis: Option<&Analysis>,
) -> Result<String, String> {
    std::fs::create_dir_all(folder).map_err(|e| format!("{}: {e}", folder.display()))?;
    let files = |v: &[PathBuf]| {
        let names: Vec<String> = v
            .iter()
            .filter_map(|p| p.file_name().map(|n| n.to_string_lossy().into_owned()))
            .collect();
        format!(
            "wrote {} files into {}: {}",
            names.len(),
            folder.display(),
            names.join(", ")
        )
    };
    let need = || analysis.ok_or_else(|| "run the analysis first (Run analysis)".to_owned());
    let e = flatten(project, Some(GROUP_KEY), false);
    let wrote = |p: PathBuf| format!("wrote {}", p.display());
    match kind {
        ExportKind::AnalysisTables => need()?
            .write_tables(folder, &project_file.display().to_string())
            .map(|v| files(&v))
            .map_err(|e| e.to_string()),
        ExportKind::AnalysisFigures => need()?
            .write_figures(folder)
            .map(|v| files(&v))
            .map_err(|e| e.to_string()),
        ExportKind::LongCsv => {
            let p = folder.join("landmarks_long.csv");
            e.table.write_long_csv(&p).map_err(|e| e.to_string())?;
            Ok(wrote(p))
        }
        ExportKind::WideCsv => {
            let p = folder.join("landmarks_wide.csv");
            e.table.write_wide_csv(&p).map_err(|e| e.to_string())?;
            Ok(wrote(p))
        }
        ExportKind::Json => {
            let p = folder.join("landmarks.json");
            e.write_json(&p, &project.scheme().id)
                .map_err(|e| e.to_string())?;
            Ok(wrote(p))
        }
        ExportKind::Npy => {
            let p = folder.join("landmarks.npy");
            let index = e.write_npy(&p).map_err(|e| e.to_string())?;
            Ok(format!("wrote {} and {}", p.display(), index.display()))
        }
        ExportKind::Ply => {
            let dir = folder.join("ply");
            let v = e.write_ply_sets(&dir).map_err(|e| e.to_string())?;
            Ok(format!(
                "wrote {} PLY files into {}",
                v.len(),
                dir.display()
            ))
        }
        ExportKind::Measurements => {
            let p = folder.join("measurements.csv");
            let rows = measure_project(project);
            write_csv_file(&p, project, &rows).map_err(|e| e.to_string())?;
            Ok(wrote(p))
        }
    }
}

/// Every export with its button text and what it writes.
pub const EXPORTS: &[(ExportKind, &str, &str)] = &[
    (
        ExportKind::AnalysisTables,
        "Analysis tables",
        "aligned coordinates, centroid sizes, PC scores and loadings, disparity, distances, \
         measurement error (CSV, JSON, NPY)",
    ),
    (
        ExportKind::AnalysisFigures,
        "Analysis figures",
        "morphospace, disparity and PC1 shape charts (SVG and PNG)",
    ),
    (
        ExportKind::LongCsv,
        "Landmarks, long CSV",
        "landmarks_long.csv: one row per specimen × trial × landmark",
    ),
    (
        ExportKind::WideCsv,
        "Landmarks, wide CSV",
        "landmarks_wide.csv: one row per specimen × trial",
    ),
    (
        ExportKind::Json,
        "Landmarks, JSON",
        "landmarks.json: operators, group labels, states, positions",
    ),
    (
        ExportKind::Npy,
        "Landmarks, .npy + index",
        "landmarks.npy (observations × points × 3, NaN where missing) and its index",
    ),
    (
        ExportKind::Ply,
        "Landmarks, PLY",
        "ply/SPECIMEN_TRIAL.ply: one point set per trial",
    ),
    (
        ExportKind::Measurements,
        "Measurements CSV",
        "measurements.csv: every measurement of every trial",
    ),
];

/// The analysis workspace.
pub fn analysis_ui(ui: &mut Ui, st: &AnalysisState, project: &Project, out: &mut Vec<Command>) {
    ui.horizontal(|ui| {
        ui.heading("Analysis");
        let label = if st.result.is_some() {
            "Run again"
        } else {
            "Run analysis"
        };
        if ui
            .add_enabled(!st.is_running(), egui::Button::new(label))
            .on_hover_text(
                "generalized Procrustes superimposition of every specimen's first trial, PCA, \
                 disparity (as sutura superimpose)",
            )
            .clicked()
        {
            out.push(Command::RunAnalysis);
        }
        if st.is_running() {
            ui.spinner();
            ui.label("superimposing…");
        } else if let Some(a) = &st.result {
            let g = &a.gpa;
            ui.label(
                RichText::new(format!(
                    "{} specimens × {} landmarks · {} iterations{} · {:.1} s",
                    a.n(),
                    a.landmarks.len(),
                    g.iterations,
                    if g.converged { "" } else { " (not converged)" },
                    st.secs
                ))
                .weak(),
            );
            if st.stale {
                ui.label(
                    RichText::new("the project changed since: run again")
                        .color(Color32::from_rgb(236, 190, 84)),
                );
            }
        }
        ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
            if ui.button("Back to digitising").clicked() {
                out.push(Command::SetWorkspace(Workspace::Digitise));
            }
        });
    });
    if let Some(e) = &st.error {
        ui.label(RichText::new(e).color(Color32::from_rgb(240, 120, 100)));
    }
    ui.separator();
    let avail = ui.available_size();
    let side = 400.0_f32.min(avail.x * 0.45);
    ui.horizontal_top(|ui| {
        ui.vertical(|ui| {
            ui.set_width(avail.x - side - 16.0);
            match &st.result {
                Some(a) => morphospace_ui(ui, a, st.axes, out),
                None => {
                    ui.label(
                        RichText::new(
                            "Run the analysis to see the morphospace and the disparity of each group.",
                        )
                        .weak(),
                    );
                }
            }
        });
        ui.separator();
        ui.vertical(|ui| {
            ui.set_width(side);
            egui::ScrollArea::vertical().show(ui, |ui| {
                if let Some(a) = &st.result {
                    disparity_ui(ui, a);
                    ui.separator();
                }
                exports_ui(ui, st, project, out);
            });
        });
    });
}

fn group_colour(groups: &[String], g: &str) -> Color32 {
    let i = groups.iter().position(|x| x == g).unwrap_or(0);
    GROUP_COLOURS[i % GROUP_COLOURS.len()]
}

/// The sorted distinct group labels.
fn group_names(a: &Analysis) -> Vec<String> {
    let mut g: Vec<String> = a.groups.clone();
    g.sort();
    g.dedup();
    g
}

#[allow(clippy::too_many_lines)] // reason: axes, points, hover and legend of one chart
fn morphospace_ui(ui: &mut Ui, a: &Analysis, axes: [usize; 2], out: &mut Vec<Command>) {
    let c = a.components();
    if c == 0 {
        ui.label("no principal components (all shapes identical)");
        return;
    }
    let name = |i: usize| {
        format!(
            "PC{} ({:.1} %)",
            i + 1,
            100.0 * a.pca.proportions.get(i).copied().unwrap_or(0.0)
        )
    };
    ui.horizontal(|ui| {
        ui.label("Morphospace:");
        for (slot, which) in [(0usize, "across"), (1, "up")] {
            egui::ComboBox::from_label(which)
                .selected_text(name(axes[slot]))
                .show_ui(ui, |ui| {
                    for i in 0..c.min(12) {
                        if ui.selectable_label(axes[slot] == i, name(i)).clicked() {
                            let mut n = axes;
                            n[slot] = i;
                            out.push(Command::SetAxes(n));
                        }
                    }
                });
        }
    });
    let size = ui.available_size();
    let h = size.y.clamp(200.0, 620.0);
    let (rect, response) = ui.allocate_exact_size(Vec2::new(size.x, h), Sense::click());
    let painter = ui.painter_at(rect);
    painter.rect_filled(rect, 4.0, Color32::from_rgb(18, 21, 26));
    let plot = rect.shrink2(Vec2::new(44.0, 30.0));
    let xs: Vec<f64> = (0..a.n()).map(|s| a.pca.scores[(s, axes[0])]).collect();
    let ys: Vec<f64> = (0..a.n())
        .map(|s| a.pca.scores[(s, axes[1].min(c - 1))])
        .collect();
    let span = |v: &[f64]| {
        let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let pad = ((hi - lo) * 0.08).max(1e-9);
        (lo - pad, hi + pad)
    };
    let (x0, x1) = span(&xs);
    let (y0, y1) = span(&ys);
    let to_screen = |x: f64, y: f64| {
        Pos2::new(
            plot.min.x + ((x - x0) / (x1 - x0)) as f32 * plot.width(),
            plot.max.y - ((y - y0) / (y1 - y0)) as f32 * plot.height(),
        )
    };
    let grid = Stroke::new(1.0, Color32::from_gray(55));
    if x0 < 0.0 && x1 > 0.0 {
        let x = to_screen(0.0, y0).x;
        painter.line_segment([Pos2::new(x, plot.min.y), Pos2::new(x, plot.max.y)], grid);
    }
    if y0 < 0.0 && y1 > 0.0 {
        let y = to_screen(x0, 0.0).y;
        painter.line_segment([Pos2::new(plot.min.x, y), Pos2::new(plot.max.x, y)], grid);
    }
    painter.rect_stroke(plot, 0.0, grid, egui::StrokeKind::Outside);
    let text = Color32::from_gray(200);
    painter.text(
        Pos2::new(plot.center().x, plot.max.y + 16.0),
        Align2::CENTER_CENTER,
        name(axes[0]),
        FontId::proportional(13.0),
        text,
    );
    painter.text(
        Pos2::new(plot.min.x - 6.0, plot.min.y - 14.0),
        Align2::LEFT_CENTER,
        name(axes[1]),
        FontId::proportional(13.0),
        text,
    );
    let groups = group_names(a);
    let pointer = response.hover_pos();
    let mut nearest: Option<(f32, usize)> = None;
    for s in 0..a.n() {
        let p = to_screen(xs[s], ys[s]);
        let col = group_colour(&groups, &a.groups[s]);
        painter.circle_filled(p, 6.0, col);
        painter.circle_stroke(p, 6.0, Stroke::new(1.0, Color32::from_black_alpha(200)));
        if let Some(q) = pointer {
            let d = p.distance(q);
            if d < 10.0 && nearest.is_none_or(|(e, _)| d < e) {
                nearest = Some((d, s));
            }
        }
    }
    // legend
    let mut y = rect.min.y + 10.0;
    for g in &groups {
        let at = Pos2::new(rect.max.x - 170.0, y);
        painter.circle_filled(at, 5.0, group_colour(&groups, g));
        painter.text(
            at + Vec2::new(10.0, 0.0),
            Align2::LEFT_CENTER,
            g,
            FontId::proportional(12.0),
            text,
        );
        y += 16.0;
    }
    if let Some((_, s)) = nearest {
        let o = &a.observations[s];
        let p = to_screen(xs[s], ys[s]);
        painter.circle_stroke(p, 9.0, Stroke::new(1.5, Color32::WHITE));
        let label = format!(
            "{}  ({})  {:.4}, {:.4}",
            o.specimen, a.groups[s], xs[s], ys[s]
        );
        let galley = painter.layout_no_wrap(label, FontId::proportional(13.0), Color32::WHITE);
        let at = p + Vec2::new(10.0, -22.0);
        let bg = Rect::from_min_size(
            at - Vec2::new(4.0, 2.0),
            galley.size() + Vec2::new(8.0, 4.0),
        );
        painter.rect_filled(bg, 3.0, Color32::from_black_alpha(210));
        painter.galley(at, galley, Color32::WHITE);
        if response.clicked() {
            out.push(Command::SelectSpecimen(o.specimen.clone()));
            out.push(Command::SetWorkspace(Workspace::Digitise));
        }
        let _ = response.on_hover_cursor(egui::CursorIcon::PointingHand);
    }
    ui.label(
        RichText::new("hover a point for its specimen; click it to open the specimen")
            .small()
            .weak(),
    );
}

fn disparity_ui(ui: &mut Ui, a: &Analysis) {
    ui.label(RichText::new("Disparity").strong().size(14.0));
    ui.label(
        RichText::new("Procrustes variance, 95 % bootstrap interval")
            .small()
            .weak(),
    );
    egui::Grid::new("disparity")
        .num_columns(4)
        .striped(true)
        .spacing([10.0, 3.0])
        .show(ui, |ui| {
            for h in ["group", "n", "variance", "interval"] {
                ui.label(RichText::new(h).small().strong());
            }
            ui.end_row();
            for g in &a.disparity {
                ui.label(&g.group);
                ui.label(g.n.to_string());
                ui.label(RichText::new(format!("{:.5}", g.procrustes_variance)).monospace());
                ui.label(
                    RichText::new(format!("{:.5}–{:.5}", g.interval.lower, g.interval.upper))
                        .monospace(),
                );
                ui.end_row();
            }
        });
    ui.label(
        RichText::new(format!("total variance {:.5}", a.total_variance))
            .small()
            .monospace(),
    );
    if let Some(t) = &a.group_test {
        ui.label(
            RichText::new(format!(
                "difference between the groups: p = {:.3}",
                t.p_value
            ))
            .small(),
        );
    }
}

fn exports_ui(ui: &mut Ui, st: &AnalysisState, _project: &Project, out: &mut Vec<Command>) {
    ui.label(RichText::new("Export").strong().size(14.0));
    ui.horizontal(|ui| {
        let folder = st.folder.as_ref().map_or_else(
            || "no folder chosen".to_owned(),
            |f| f.display().to_string(),
        );
        ui.label(RichText::new(folder).monospace().small());
    });
    if ui.button("Choose folder…").clicked() {
        out.push(Command::ShowOpenDialog(
            super::state::DialogKind::ExportFolder,
        ));
    }
    ui.add_space(4.0);
    for (kind, label, what) in EXPORTS {
        let needs_analysis = matches!(
            kind,
            ExportKind::AnalysisTables | ExportKind::AnalysisFigures
        );
        let enabled = st.folder.is_some() && (!needs_analysis || st.result.is_some());
        if ui
            .add_enabled(enabled, egui::Button::new(*label))
            .on_hover_text(*what)
            .on_disabled_hover_text(if st.folder.is_none() {
                "choose a folder first"
            } else {
                "run the analysis first"
            })
            .clicked()
        {
            out.push(Command::Export(*kind));
        }
    }
    if let Some((msg, is_error)) = &st.last_export {
        let colour = if *is_error {
            Color32::from_rgb(240, 120, 100)
        } else {
            Color32::from_gray(210)
        };
        ui.label(RichText::new(msg).color(colour).small());
    }
}
