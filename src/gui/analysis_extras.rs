//! The results the analysis workspace shows beside the superimposition, computed on the same
//! background run from the same [`Analysis`]: measurement error by operator (when the trials
//! come from two or more operators) and disparity through time (when specimens carry an age
//! label). Each is the library call the command line makes — `sutura measurement-error`
//! ([`operator_error`]) and `sutura disparity-through-time` ([`through_time_of`] with the
//! project's labels and the default age keys) — so the window shows the command line's numbers.
//! A result that cannot be had says why; it never stops the others.

use eframe::egui::{self, Color32, ColorImage, RichText, TextureHandle, TextureOptions, Ui};

use super::command::{AnalysisCommand, Command};
use sutura_core::analysis::evolution::{
    AgeKeys, BinsSpec, SpecimenLabels, ThroughTimeReport, through_time_of,
};
use sutura_core::analysis::operators::{OperatorError, operator_error};
use sutura_core::analysis::{Analysis, AnalysisOptions};
use sutura_core::evolution::time::TimeOptions;
use sutura_core::landmarks::Project;
use sutura_core::shape::anova::OperatorAnova;

/// How the time bins are given (the command line's `--bin-count`, `--bins`, `--bin-names`).
#[derive(Clone, Debug, PartialEq)]
pub enum TimeBins {
    /// Equal bins over the ages' span.
    Count(usize),
    /// Edges in Ma, as typed (comma-separated).
    Edges(String),
    /// Bin names, oldest first, as typed (comma-separated).
    Names(String),
}

impl Default for TimeBins {
    fn default() -> Self {
        Self::Count(3)
    }
}

impl TimeBins {
    /// The library's bins; says what is wrong with typed edges or names.
    pub fn spec(&self) -> Result<BinsSpec, String> {
        let items = |t: &str| -> Vec<String> {
            t.split(',')
                .map(str::trim)
                .filter(|x| !x.is_empty())
                .map(str::to_owned)
                .collect()
        };
        match self {
            Self::Count(n) => Ok(BinsSpec::Count(*n)),
            Self::Edges(t) => items(t)
                .iter()
                .map(|x| {
                    x.parse::<f64>()
                        .ok()
                        .filter(|v| v.is_finite())
                        .ok_or_else(|| format!("bin edge '{x}' is not a number of Ma"))
                })
                .collect::<Result<Vec<f64>, String>>()
                .map(BinsSpec::Edges),
            Self::Names(t) => Ok(BinsSpec::Names(items(t))),
        }
    }
}

/// The results beside the superimposition.
pub struct Extras {
    /// `None`: every trial is by one operator.
    pub operators: Option<Result<OperatorError, String>>,
    /// `None`: no specimen has an age label.
    pub through_time: Option<Result<ThroughTimeReport, String>>,
    /// The disparity-through-time figure, as `sutura disparity-through-time` draws it.
    pub time_figure: Option<ColorImage>,
}

/// Whether some specimen of the project carries an age under the default keys.
#[must_use]
pub fn has_ages(project: &Project) -> bool {
    let labels = SpecimenLabels::from_project(project, "the project");
    let keys = AgeKeys::default();
    project
        .specimens()
        .iter()
        .any(|s| matches!(keys.age_of(&labels, &s.id), Ok(Some(_)) | Err(_)))
}

/// Computes the extras of `analysis` (made from `project` with `opts`).
#[must_use]
pub fn compute(
    project: &Project,
    analysis: &Analysis,
    opts: &AnalysisOptions,
    bins: &TimeBins,
) -> Extras {
    let operators = match operator_error(project, opts) {
        Ok(Some(r)) => Some(Ok(r)),
        Ok(None) => None,
        Err(e) => Some(Err(e.to_string())),
    };
    let through_time = has_ages(project).then(|| {
        let labels = SpecimenLabels::from_project(project, "the project's labels");
        let spec = bins.spec()?;
        through_time_of(
            analysis,
            &labels,
            &AgeKeys::default(),
            &spec,
            &TimeOptions {
                resamples: opts.resamples,
                level: 0.95,
                seed: opts.seed,
            },
        )
        .map_err(|e| e.to_string())
    });
    let time_figure = match &through_time {
        Some(Ok(r)) => {
            let fig = r.figure();
            fig.to_rgba().ok().map(|rgba| {
                ColorImage::from_rgba_unmultiplied([fig.width as usize, fig.height as usize], &rgba)
            })
        }
        _ => None,
    };
    Extras {
        operators,
        through_time,
        time_figure,
    }
}

fn percent(x: f64) -> String {
    format!("{:.1} %", 100.0 * x)
}

/// Measurement error by operator: the shares of each variable, and notes.
pub fn operators_ui(ui: &mut Ui, r: &Result<OperatorError, String>) {
    ui.label(
        RichText::new("Measurement error by operator")
            .strong()
            .size(14.0),
    );
    let r = match r {
        Ok(r) => r,
        Err(e) => {
            ui.label(RichText::new(format!("not computed: {e}")).small().weak());
            return;
        }
    };
    ui.label(
        RichText::new(format!(
            "two-way Procrustes ANOVA, individual × operator ({}): shares of the variance \
             (balanced designs) and the test of the operator term",
            r.operators.join(", ")
        ))
        .small()
        .weak(),
    );
    egui::Grid::new("operator_shares")
        .num_columns(5)
        .striped(true)
        .spacing([10.0, 3.0])
        .show(ui, |ui| {
            for h in [
                "variable",
                "individual",
                "inter-operator",
                "intra-operator",
                "operator effect",
            ] {
                ui.label(RichText::new(h).small().strong());
            }
            ui.end_row();
            for (name, t) in r.tables() {
                ui.label(name.replace('_', " "));
                shares_row(ui, t);
                ui.end_row();
            }
        });
    for n in &r.notes {
        ui.label(RichText::new(n).small().weak());
    }
    for (name, e) in &r.measurements {
        if let Err(e) = e {
            ui.label(
                RichText::new(format!("{name}: no table: {e}"))
                    .small()
                    .weak(),
            );
        }
    }
}

fn shares_row(ui: &mut Ui, t: &OperatorAnova) {
    match t.components {
        Some(c) => {
            for x in [
                c.individual_share,
                c.inter_operator_share,
                c.intra_operator_share,
            ] {
                ui.label(RichText::new(percent(x)).monospace());
            }
        }
        None => {
            for _ in 0..3 {
                ui.label(RichText::new("—").weak())
                    .on_hover_text("shares need a balanced design: every specimen measured equally often by each operator");
            }
        }
    }
    let op = t.term("operator");
    ui.label(
        RichText::new(match op.and_then(|o| o.f.zip(o.p)) {
            Some((f, p)) => format!("F = {f:.2}, p = {p:.3}"),
            None => "—".to_owned(),
        })
        .monospace(),
    );
}

/// Disparity through time: the bins' choice, then (once the analysis ran: `result` is
/// `Some`) the table per bin, the tests between consecutive bins and the figure, or why there
/// are none.
pub fn through_time_ui(
    ui: &mut Ui,
    bins: &TimeBins,
    result: Option<Option<&Result<ThroughTimeReport, String>>>,
    figure: Option<&TextureHandle>,
    out: &mut Vec<Command>,
) {
    ui.label(RichText::new("Disparity through time").strong().size(14.0));
    bins_ui(ui, bins, out);
    let Some(result) = result else {
        return;
    };
    let Some(result) = result else {
        ui.label(
            RichText::new(
                "No specimen has an age: give specimens an age_ma label (a number of Ma, or an \
                 interval such as 83.6-72.1), oldest_ma and youngest_ma, or a bin name, then \
                 run again.",
            )
            .small()
            .weak(),
        );
        return;
    };
    let r = match result {
        Ok(r) => r,
        Err(e) => {
            ui.label(
                RichText::new(format!("not computed: {e}"))
                    .small()
                    .color(Color32::from_rgb(240, 120, 100)),
            );
            return;
        }
    };
    let t = &r.result;
    ui.label(
        RichText::new(format!(
            "Procrustes variance per bin, 95 % bootstrap interval; rarefied to {} specimens{}",
            t.rarefied_to,
            if t.age_draws {
                "; interval ages drawn in each resample"
            } else {
                ""
            }
        ))
        .small()
        .weak(),
    );
    egui::Grid::new("through_time")
        .num_columns(4)
        .striped(true)
        .spacing([10.0, 3.0])
        .show(ui, |ui| {
            for h in ["bin", "n", "variance (interval)", "rarefied"] {
                ui.label(RichText::new(h).small().strong());
            }
            ui.end_row();
            for b in &t.bins {
                let m = &b.metrics[0];
                ui.label(&b.bin.label);
                ui.label(b.n.to_string());
                ui.label(
                    RichText::new(format!(
                        "{:.5} ({:.5}–{:.5})",
                        m.estimate, m.boot_lower, m.boot_upper
                    ))
                    .monospace(),
                );
                ui.label(RichText::new(format!("{:.5}", m.rarefied)).monospace());
                ui.end_row();
            }
        });
    for c in &t.changes {
        ui.label(
            RichText::new(format!(
                "{} to {}: change {:+.5}, p = {:.3} (permutation test)",
                c.from, c.to, c.difference, c.p_value
            ))
            .small(),
        );
    }
    for n in &t.notes {
        ui.label(RichText::new(n).small().weak());
    }
    for (s, why) in &r.left_out {
        ui.label(RichText::new(format!("{s} left out: {why}")).small().weak());
    }
    if let Some(tex) = figure {
        let w = ui.available_width().min(tex.size_vec2().x);
        let size = tex.size_vec2() * (w / tex.size_vec2().x);
        ui.image((tex.id(), size));
    }
}

fn bins_ui(ui: &mut Ui, bins: &TimeBins, out: &mut Vec<Command>) {
    let mut b = bins.clone();
    let mut changed = false;
    ui.horizontal(|ui| {
        ui.label("bins");
        for (name, v) in [
            ("equal", TimeBins::Count(3)),
            ("edges (Ma)", TimeBins::Edges(String::new())),
            ("named", TimeBins::Names(String::new())),
        ] {
            let on = std::mem::discriminant(&b) == std::mem::discriminant(&v);
            if ui.selectable_label(on, name).clicked() && !on {
                b = v;
                changed = true;
            }
        }
        match &mut b {
            TimeBins::Count(n) => {
                changed |= ui
                    .add(egui::DragValue::new(n).range(1..=50))
                    .on_hover_text("equal bins over the ages' span")
                    .changed();
            }
            TimeBins::Edges(t) => {
                changed |= ui
                    .add(
                        egui::TextEdit::singleline(t)
                            .hint_text("140,125,110")
                            .desired_width(120.0),
                    )
                    .changed();
            }
            TimeBins::Names(t) => {
                changed |= ui
                    .add(
                        egui::TextEdit::singleline(t)
                            .hint_text("oldest first, comma-separated")
                            .desired_width(160.0),
                    )
                    .changed();
            }
        }
    });
    if changed {
        out.push(AnalysisCommand::SetTimeBins(b).into());
    }
}

/// A texture of the figure, made once per result.
pub fn figure_texture(ctx: &egui::Context, image: &ColorImage) -> TextureHandle {
    ctx.load_texture("through_time_figure", image.clone(), TextureOptions::LINEAR)
}
