//! The analysis workspace: the project's superimposition run in the background with the
//! options chosen here, the morphospace scatter, the disparity table, what the analysis could
//! not produce and why, the results beside it ([`super::analysis_extras`]: operator error,
//! disparity through time), and a button for every export.
//!
//! The analysis is [`analyse_project`] on the project as it stands in memory (unsaved edits
//! included) with a [`ProjectAnalysisOptions`] — the same function and options as
//! `sutura superimpose PROJECT` — so the same options give the command line's numbers. The
//! exports are the library's [`write_export_into`], as `sutura export` writes them.

use std::path::PathBuf;
use std::sync::Arc;
use std::sync::mpsc::{Receiver, TryRecvError, channel};
use std::time::Instant;

use eframe::egui::{self, Align2, Color32, FontId, Pos2, Rect, RichText, Sense, Stroke, Ui, Vec2};

use super::analysis_extras::{self, Extras, TimeBins};
use super::command::{AnalysisCommand, AppCommand, Command, DeskCommand, DialogKind, Workspace};
use super::status::Status;
use sutura_core::analysis::{
    Analysis, ExportKind, ExportSource, ProjectAnalysisOptions, TrialChoice, analyse_project,
    write_export_into,
};
use sutura_core::landmarks::Project;
use sutura_core::landmarks::project::Session;
use sutura_core::measure::table::group_keys;
use sutura_core::shape::Fit;
use sutura_core::shape::missing::MissingMethod;
use sutura_core::shape::sliding::SlideCriterion;

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
    rx: Receiver<Result<(Analysis, Extras), String>>,
    options: ProjectAnalysisOptions,
}

/// The analysis workspace's state (never saved).
#[derive(Default)]
pub struct AnalysisState {
    /// The options the next run uses.
    pub options: ProjectAnalysisOptions,
    pub run: Option<Run>,
    pub result: Option<Arc<Analysis>>,
    /// The results beside the shown analysis.
    pub extras: Option<Arc<Extras>>,
    /// The disparity-through-time figure on the GPU, made once per result.
    time_texture: Option<egui::TextureHandle>,
    /// How the next run bins the ages.
    pub time_bins: TimeBins,
    /// The options the shown result was computed with.
    pub result_options: Option<ProjectAnalysisOptions>,
    /// Why the last run failed.
    pub error: Option<String>,
    /// The document changed since the shown result was computed.
    pub stale: bool,
    /// PC axes shown (0-based).
    pub axes: [usize; 2],
    /// Where exports go.
    pub folder: Option<PathBuf>,
    /// What the last export wrote (or why it failed).
    pub last_export: Option<Status>,
    /// Seconds the last run took.
    pub secs: f64,
}

impl AnalysisState {
    /// Applies an analysis command to the project of `session`; `wake` repaints the window when
    /// a run ends. Returns a message for the status line, if any.
    pub fn apply(
        &mut self,
        cmd: AnalysisCommand,
        session: &Session,
        wake: impl Fn() + Send + 'static,
    ) -> Option<Status> {
        match cmd {
            AnalysisCommand::Run => {
                if !self.is_running() {
                    self.start(&session.project, wake);
                }
                None
            }
            AnalysisCommand::SetOptions(o) => {
                self.options = *o;
                None
            }
            AnalysisCommand::SetAxes(a) => {
                self.axes = a;
                None
            }
            AnalysisCommand::SetTimeBins(b) => {
                self.time_bins = b;
                None
            }
            AnalysisCommand::SetExportFolder(p) => {
                self.folder = Some(p);
                None
            }
            AnalysisCommand::Export(kind) => {
                let Some(folder) = &self.folder else {
                    return Some(Status::error("choose a folder to export into first"));
                };
                let used = self.result_options.as_ref().unwrap_or(&self.options);
                let src = ExportSource {
                    project: &session.project,
                    project_file: session.path(),
                    group_by: used.group_by.as_deref(),
                    semilandmarks: used.slide.is_some(),
                    analysis: self.result.as_deref(),
                };
                let st = match write_export_into(kind, folder, &src) {
                    Ok(e) => Status::info(e.describe()),
                    Err(e) => Status::error(e.to_string()),
                };
                self.last_export = Some(st.clone());
                Some(st)
            }
        }
    }

    /// Starts analysing `project` with the chosen options on a background thread; `wake` is
    /// called when it ends.
    pub fn start(&mut self, project: &Project, wake: impl Fn() + Send + 'static) {
        let project = project.clone();
        let options = self.options.clone();
        let opts = options.clone();
        let bins = self.time_bins.clone();
        let (tx, rx) = channel();
        let spawned = std::thread::Builder::new()
            .name("sutura-analysis".into())
            .spawn(move || {
                let outcome = run(&project, &opts).map(|a| {
                    let extras = analysis_extras::compute(&project, &a, &opts.analysis, &bins);
                    (a, extras)
                });
                let _ = tx.send(outcome);
                wake();
            });
        match spawned {
            Ok(_) => {
                self.run = Some(Run {
                    started: Instant::now(),
                    rx,
                    options,
                });
                self.error = None;
            }
            Err(e) => self.error = Some(format!("cannot start the analysis thread: {e}")),
        }
    }

    /// Takes a finished run's result (`ctx` receives its figure).
    pub fn poll(&mut self, ctx: &egui::Context) {
        let Some(r) = &self.run else {
            return;
        };
        let outcome = match r.rx.try_recv() {
            Ok(o) => o,
            Err(TryRecvError::Empty) => return,
            Err(TryRecvError::Disconnected) => Err("the analysis thread stopped".into()),
        };
        self.secs = r.started.elapsed().as_secs_f64();
        let options = r.options.clone();
        self.run = None;
        match outcome {
            Ok((a, extras)) => {
                self.time_texture = extras
                    .time_figure
                    .as_ref()
                    .map(|img| analysis_extras::figure_texture(ctx, img));
                self.extras = Some(Arc::new(extras));
                let c = a.components();
                self.axes = [
                    self.axes[0].min(c.saturating_sub(1)),
                    self.axes[1].min(c.saturating_sub(1)),
                ];
                if self.axes[0] == self.axes[1] && c > 1 {
                    self.axes = [0, 1];
                }
                self.result = Some(Arc::new(a));
                self.result_options = Some(options);
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

/// The analysis of a project with these options, as `sutura superimpose PROJECT` runs it.
pub fn run(project: &Project, options: &ProjectAnalysisOptions) -> Result<Analysis, String> {
    analyse_project(project, options)
        .map(|(a, _)| a)
        .map_err(|e| e.to_string())
}

fn fit_name(f: Fit) -> &'static str {
    match f {
        Fit::Partial => "partial Procrustes",
        Fit::Full => "full Procrustes",
    }
}

/// The options of the next run.
#[allow(clippy::too_many_lines)] // reason: one row per option, read top to bottom
fn options_ui(ui: &mut Ui, st: &AnalysisState, project: &Project, out: &mut Vec<Command>) {
    let mut o = st.options.clone();
    let mut changed = false;
    egui::CollapsingHeader::new("Options")
        .id_salt("analysis_options")
        .default_open(true)
        .show(ui, |ui| {
            egui::Grid::new("analysis_options_grid")
                .num_columns(2)
                .spacing([10.0, 4.0])
                .show(ui, |ui| {
                    ui.label("fit");
                    ui.horizontal(|ui| {
                        for f in [Fit::Partial, Fit::Full] {
                            if ui.selectable_label(o.analysis.gpa.fit == f, fit_name(f)).clicked() {
                                o.analysis.gpa.fit = f;
                                changed = true;
                            }
                        }
                    });
                    ui.end_row();
                    ui.label("missing landmarks");
                    ui.horizontal(|ui| {
                        let tps = matches!(o.analysis.fill, MissingMethod::ThinPlateSpline);
                        if ui.selectable_label(tps, "thin-plate spline").clicked() {
                            o.analysis.fill = MissingMethod::ThinPlateSpline;
                            changed = true;
                        }
                        if ui.selectable_label(!tps, "regression").clicked() {
                            o.analysis.fill = MissingMethod::Regression { ridge: 0.0 };
                            changed = true;
                        }
                    });
                    ui.end_row();
                    ui.label("curve sliding");
                    ui.horizontal(|ui| {
                        for (v, name) in [
                            (None, "none"),
                            (Some(SlideCriterion::BendingEnergy), "bending energy"),
                            (Some(SlideCriterion::ProcrustesDistance), "Procrustes distance"),
                        ] {
                            if ui.selectable_label(o.slide == v, name).clicked() {
                                o.slide = v;
                                changed = true;
                            }
                        }
                    });
                    ui.end_row();
                    ui.label("groups compared");
                    let keys = group_keys(project);
                    egui::ComboBox::from_id_salt("group_by")
                        .selected_text(o.group_by.clone().unwrap_or_else(|| "none (one sample)".into()))
                        .show_ui(ui, |ui| {
                            if ui.selectable_label(o.group_by.is_none(), "none (one sample)").clicked() {
                                o.group_by = None;
                                changed = true;
                            }
                            for k in keys {
                                if ui
                                    .selectable_label(o.group_by.as_deref() == Some(k.as_str()), &k)
                                    .clicked()
                                {
                                    o.group_by = Some(k);
                                    changed = true;
                                }
                            }
                        });
                    ui.end_row();
                    ui.label("trial analysed");
                    ui.horizontal(|ui| {
                        for (v, name) in [(TrialChoice::First, "first"), (TrialChoice::Latest, "latest")] {
                            if ui.selectable_label(o.trial == v, name).clicked() {
                                o.trial = v;
                                changed = true;
                            }
                        }
                        let mut id = match &o.trial {
                            TrialChoice::Named(id) => id.clone(),
                            _ => String::new(),
                        };
                        let r = ui.add(
                            egui::TextEdit::singleline(&mut id)
                                .hint_text("or a trial id")
                                .desired_width(70.0),
                        );
                        if r.changed() {
                            o.trial = if id.trim().is_empty() {
                                TrialChoice::First
                            } else {
                                TrialChoice::Named(id.trim().to_owned())
                            };
                            changed = true;
                        }
                    });
                    ui.end_row();
                    ui.label("resamples");
                    let mut n = o.analysis.resamples;
                    if ui
                        .add(egui::DragValue::new(&mut n).range(0..=99_999).speed(10.0))
                        .on_hover_text("bootstrap resamples for intervals, permutations for tests")
                        .changed()
                    {
                        o.analysis.resamples = n;
                        changed = true;
                    }
                    ui.end_row();
                    ui.label("seed");
                    let mut seed = o.analysis.seed;
                    if ui.add(egui::DragValue::new(&mut seed)).changed() {
                        o.analysis.seed = seed;
                        changed = true;
                    }
                    ui.end_row();
                });
            ui.label(
                RichText::new("the same options as sutura superimpose: --fit, --fill, --slide-curves, --group-by, --trial, --resamples, --seed")
                    .small()
                    .weak(),
            );
        });
    if changed {
        out.push(AnalysisCommand::SetOptions(Box::new(o)).into());
    }
}

/// The analysis workspace.
pub fn analysis_ui(ui: &mut Ui, st: &AnalysisState, project: &Project) -> Vec<Command> {
    let mut out: Vec<Command> = Vec::new();
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
                "generalized Procrustes superimposition, PCA and disparity with the options \
                 below (as sutura superimpose)",
            )
            .clicked()
        {
            out.push(AnalysisCommand::Run.into());
        }
        if st.is_running() {
            ui.spinner();
            ui.label("superimposing…");
        } else if let (Some(a), Some(o)) = (&st.result, &st.result_options) {
            let g = &a.gpa;
            ui.label(
                RichText::new(format!(
                    "{} specimens ({} of each) × {} landmarks · {} · {} iterations{} · {:.1} s",
                    a.n(),
                    o.trial.describe(),
                    a.landmarks.len(),
                    fit_name(o.analysis.gpa.fit),
                    g.iterations,
                    if g.converged { "" } else { " (not converged)" },
                    st.secs
                ))
                .weak(),
            );
            if st.stale || st.options != *o {
                ui.label(
                    RichText::new(if st.stale {
                        "the project changed since: run again"
                    } else {
                        "the options changed since: run again"
                    })
                    .color(Color32::from_rgb(236, 190, 84)),
                );
            }
        }
        ui.with_layout(egui::Layout::right_to_left(egui::Align::Center), |ui| {
            if ui.button("Back to digitising").clicked() {
                out.push(AppCommand::SetWorkspace(Workspace::Digitise).into());
            }
        });
    });
    if let Some(e) = &st.error {
        ui.label(RichText::new(e).color(Color32::from_rgb(240, 120, 100)));
    }
    ui.separator();
    let avail = ui.available_size();
    let side = 420.0_f32.min(avail.x * 0.45);
    ui.horizontal_top(|ui| {
        ui.vertical(|ui| {
            ui.set_width(avail.x - side - 16.0);
            match &st.result {
                Some(a) => morphospace_ui(ui, a, st.axes, &mut out),
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
            egui::ScrollArea::vertical().show(ui, |ui| side_ui(ui, st, project, &mut out));
        });
    });
    out
}

/// The column beside the morphospace: options, disparity, what was not produced, exports, then
/// the results beside the superimposition.
fn side_ui(ui: &mut Ui, st: &AnalysisState, project: &Project, out: &mut Vec<Command>) {
    options_ui(ui, st, project, out);
    ui.separator();
    if let Some(a) = &st.result {
        disparity_ui(ui, a);
        report_ui(ui, a);
        ui.separator();
    }
    exports_ui(ui, st, out);
    ui.separator();
    let extras = st.extras.as_deref();
    if let Some(op) = extras.and_then(|x| x.operators.as_ref()) {
        analysis_extras::operators_ui(ui, op);
        ui.separator();
    }
    analysis_extras::through_time_ui(
        ui,
        &st.time_bins,
        extras.map(|x| x.through_time.as_ref()),
        st.time_texture.as_ref(),
        out,
    );
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
                            out.push(AnalysisCommand::SetAxes(n).into());
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
            out.push(DeskCommand::SelectSpecimen(o.specimen.clone()).into());
            out.push(AppCommand::SetWorkspace(Workspace::Digitise).into());
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
                "difference in Procrustes variance between the two groups: p = {:.3} \
                 (permutation test, {} permutations of the group labels)",
                t.p_value, a.options.resamples
            ))
            .small(),
        );
    }
}

/// What the analysis could not produce, and why (as `summary.json` lists it).
fn report_ui(ui: &mut Ui, a: &Analysis) {
    let r = a.report();
    for o in &r.not_produced {
        ui.label(
            RichText::new(format!("not produced: {}: {}", o.output, o.reason))
                .small()
                .color(Color32::from_rgb(236, 190, 84)),
        );
    }
    for n in &r.notes {
        ui.label(RichText::new(n).small().weak());
    }
}

fn exports_ui(ui: &mut Ui, st: &AnalysisState, out: &mut Vec<Command>) {
    ui.label(RichText::new("Export").strong().size(14.0));
    ui.horizontal(|ui| {
        let folder = st.folder.as_ref().map_or_else(
            || "no folder chosen".to_owned(),
            |f| f.display().to_string(),
        );
        ui.label(RichText::new(folder).monospace().small());
    });
    if ui.button("Choose folder…").clicked() {
        out.push(AppCommand::ShowDialog(DialogKind::ExportFolder).into());
    }
    ui.add_space(4.0);
    for kind in ExportKind::ALL {
        let enabled = st.folder.is_some() && (!kind.needs_analysis() || st.result.is_some());
        if ui
            .add_enabled(enabled, egui::Button::new(kind.title()))
            .on_hover_text(kind.description())
            .on_disabled_hover_text(if st.folder.is_none() {
                "choose a folder first"
            } else {
                "run the analysis first"
            })
            .clicked()
        {
            out.push(AnalysisCommand::Export(kind).into());
        }
    }
    if let Some(st) = &st.last_export {
        ui.label(RichText::new(&st.text).color(st.colour()).small());
    }
}
