//! The questions the app waits on: unsaved changes, an autosave to recover, a scan that is not
//! the recorded one, the operator's name. Each is a modal dialog that behaves as desktop users
//! expect: a text field has the focus when it opens, Enter confirms, Esc cancels.

use std::path::PathBuf;

use eframe::egui::{self, Key, RichText};

use super::command::{Answer, AppCommand, Command, DeskCommand};
use super::state::Scan;

/// What the app does once the unsaved-changes question is answered.
#[derive(Clone, Debug, PartialEq)]
pub enum After {
    Quit,
    Open(PathBuf),
    NewProject,
}

/// A question the app is waiting for the user to answer.
pub enum Prompt {
    /// The project has unsaved changes: save, discard or cancel, then do this.
    Unsaved(After),
    /// An autosave newer than the project file was found.
    Autosave(std::time::SystemTime),
    /// A specimen's scan is not the one its landmarks were placed on.
    Mismatch {
        specimen: String,
        scan: Box<Scan>,
        why: String,
    },
    /// The operator's name, asked before the first trial.
    Operator,
    /// A scan too large for the memory budget: build a store of it in the cache folder?
    BuildStore {
        scan: PathBuf,
        store: PathBuf,
        bytes: u64,
        budget: u64,
        /// The project specimen whose scan it is.
        specimen: Option<String>,
    },
}

/// Bytes in GB (10⁹, as disks are sold) with one decimal, or in MB below a gigabyte.
fn size_text(bytes: u64) -> String {
    if bytes >= 1_000_000_000 {
        format!("{:.1} GB", bytes as f64 / 1e9)
    } else {
        format!("{:.0} MB", bytes as f64 / 1e6)
    }
}

fn ago_text(secs: u64) -> String {
    match secs {
        0..=59 => format!("{secs} s ago"),
        60..=3599 => format!("{} min ago", secs / 60),
        _ => format!("{:.1} h ago", secs as f64 / 3600.0),
    }
}

/// Draws the question, if any; returns the answer's command. `name` is the project's name;
/// `operator` the name being typed.
#[allow(clippy::too_many_lines)] // reason: four short dialogs, each read top to bottom
pub fn prompt_ui(
    ctx: &egui::Context,
    prompt: Option<&Prompt>,
    name: &str,
    operator: &mut String,
) -> Vec<Command> {
    let Some(p) = prompt else {
        return Vec::new();
    };
    let mut out: Vec<Command> = Vec::new();
    let (enter, escape) = ctx.input(|i| (i.key_pressed(Key::Enter), i.key_pressed(Key::Escape)));
    let modal = egui::Modal::new(egui::Id::unique("sutura-prompt"));
    let _ = modal.show(ctx, |ui| {
        ui.set_width(420.0);
        match p {
            Prompt::Unsaved(after) => {
                ui.heading("Unsaved changes");
                let what = match after {
                    After::Quit => "before quitting",
                    After::Open(_) => "before opening another file",
                    After::NewProject => "before starting a new project",
                };
                ui.label(format!(
                    "{name} has changes that are not saved. Save them {what}?"
                ));
                ui.add_space(8.0);
                ui.horizontal(|ui| {
                    if ui.button("Save changes").clicked() || enter {
                        out.push(AppCommand::Unsaved(Answer::Save).into());
                    }
                    if ui.button("Discard changes").clicked() {
                        out.push(AppCommand::Unsaved(Answer::Discard).into());
                    }
                    if ui.button("Cancel").clicked() || escape {
                        out.push(AppCommand::Unsaved(Answer::Cancel).into());
                    }
                });
                ui.label(RichText::new("Enter saves · Esc cancels").small().weak());
            }
            Prompt::Autosave(when) => {
                ui.heading("Recover unsaved work?");
                let ago = when
                    .elapsed()
                    .map_or_else(|_| "recently".to_owned(), |d| ago_text(d.as_secs()));
                ui.label(format!(
                    "An autosave of {name} written {ago} holds changes that were never saved \
                     (the program may have stopped unexpectedly)."
                ));
                ui.add_space(8.0);
                ui.horizontal(|ui| {
                    if ui.button("Recover").clicked() || enter {
                        out.push(DeskCommand::Autosave(true).into());
                    }
                    if ui.button("Discard autosave").clicked() {
                        out.push(DeskCommand::Autosave(false).into());
                    }
                });
                ui.label(RichText::new("Enter recovers").small().weak());
            }
            Prompt::Mismatch { specimen, why, .. } => {
                ui.heading("Not the recorded scan");
                ui.label(format!(
                    "The scan found for {specimen} is not the one its landmarks were placed on:"
                ));
                ui.label(RichText::new(why).monospace().small());
                ui.label(
                    "Open it anyway to look (its landmarks cannot be changed), or cancel and put \
                     the right scan in place.",
                );
                ui.add_space(8.0);
                ui.horizontal(|ui| {
                    if ui.button("Open read-only").clicked() {
                        out.push(AppCommand::Mismatch(true).into());
                    }
                    if ui.button("Cancel").clicked() || escape {
                        out.push(AppCommand::Mismatch(false).into());
                    }
                });
            }
            Prompt::BuildStore {
                scan,
                store,
                bytes,
                budget,
                ..
            } => {
                ui.heading("A scan larger than the memory budget");
                let name = scan.file_name().map_or_else(
                    || scan.display().to_string(),
                    |n| n.to_string_lossy().into(),
                );
                ui.label(format!(
                    "{name} holds {} of voxels, more than the window's memory budget of {}. \
                     The window reads a scan this size from an OME-Zarr store: a copy in \
                     chunks and levels of detail, built once in one pass over the file \
                     (resumed if stopped), then opened at once every time.",
                    size_text(*bytes),
                    size_text(*budget)
                ));
                ui.label(
                    RichText::new(format!("store: {}", store.display()))
                        .small()
                        .monospace(),
                );
                ui.label(
                    RichText::new(
                        "The memory budget and the store folder are set in the File menu, under Settings.",
                    )
                    .small()
                    .weak(),
                );
                ui.add_space(8.0);
                ui.horizontal(|ui| {
                    if ui.button("Build the store and open it").clicked() || enter {
                        out.push(AppCommand::BuildStore(true).into());
                    }
                    if ui.button("Cancel").clicked() || escape {
                        out.push(AppCommand::BuildStore(false).into());
                    }
                });
                ui.label(RichText::new("Enter builds · Esc cancels").small().weak());
            }
            Prompt::Operator => {
                ui.heading("Who is digitising?");
                ui.label("Trials record their operator. Your name is kept for later trials.");
                let r = ui.add(
                    egui::TextEdit::singleline(operator)
                        .hint_text("your name or initials")
                        .desired_width(f32::INFINITY),
                );
                // the field has the focus from the start and keeps it while the dialog is open
                if !r.has_focus() {
                    r.request_focus();
                }
                ui.horizontal(|ui| {
                    let ok = !operator.trim().is_empty();
                    if (ui
                        .add_enabled(ok, egui::Button::new("Start trial"))
                        .clicked()
                        || enter)
                        && ok
                    {
                        out.push(AppCommand::Operator(Some(operator.clone())).into());
                    }
                    if ui.button("Cancel").clicked() || escape {
                        out.push(AppCommand::Operator(None).into());
                    }
                });
                ui.label(
                    RichText::new("Enter starts the trial · Esc cancels")
                        .small()
                        .weak(),
                );
            }
        }
    });
    out
}
