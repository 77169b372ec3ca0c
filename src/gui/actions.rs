//! The one table of the workstation's actions: each action's keys, its line in the help, and
//! the command it sends. The keyboard handler, the menus' shortcut texts and the help overlay
//! all read [`ACTIONS`], so a key cannot be bound without being listed, nor listed without being
//! bound.

use eframe::egui::{self, Key, Modifiers};

use super::command::{
    AppCommand, Command, DeskCommand, DialogKind, PrefsCommand, PrepCommand, ViewCommand,
};
use super::state::ViewId;

/// A key with its modifiers.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Chord {
    pub modifiers: Modifiers,
    pub key: Key,
}

const fn plain(key: Key) -> Chord {
    Chord {
        modifiers: Modifiers::NONE,
        key,
    }
}
const fn ctrl(key: Key) -> Chord {
    Chord {
        modifiers: Modifiers::COMMAND,
        key,
    }
}
const fn shift(key: Key) -> Chord {
    Chord {
        modifiers: Modifiers::SHIFT,
        key,
    }
}
const fn ctrl_shift(key: Key) -> Chord {
    Chord {
        modifiers: Modifiers::COMMAND.plus(Modifiers::SHIFT),
        key,
    }
}

impl Chord {
    /// How the help and the menus write it: `Ctrl+Shift+Z`, `Page Up`, `[`.
    #[must_use]
    pub fn text(&self) -> String {
        let mut s = String::new();
        if self.modifiers.command || self.modifiers.ctrl {
            s.push_str("Ctrl+");
        }
        if self.modifiers.alt {
            s.push_str("Alt+");
        }
        if self.modifiers.shift {
            s.push_str("Shift+");
        }
        s.push_str(match self.key {
            Key::ArrowUp => "Up",
            Key::ArrowDown => "Down",
            Key::ArrowLeft => "Left",
            Key::ArrowRight => "Right",
            Key::PageUp => "Page Up",
            Key::PageDown => "Page Down",
            Key::Escape => "Esc",
            Key::OpenBracket => "[",
            Key::CloseBracket => "]",
            Key::Plus => "+",
            Key::Equals => "=",
            Key::Minus => "-",
            k => k.name(),
        });
        s
    }

    fn modifier_count(self) -> u8 {
        let m = self.modifiers;
        u8::from(m.command || m.ctrl) + u8::from(m.shift) + u8::from(m.alt)
    }
}

/// Everything a key can do.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Action {
    Help,
    Escape,
    OpenScan,
    OpenSliceFolder,
    OpenProject,
    NewProject,
    Quit,
    Stage(ViewId),
    NextView,
    PreviousView,
    SliceForward,
    SliceBack,
    TenForward,
    TenBack,
    TurnLeft,
    TurnRight,
    ZoomIn,
    ZoomOut,
    ResetView,
    ResetAll,
    ResetWindow,
    Crosshair,
    ScaleBar,
    VolumeMode,
    IsoDown,
    IsoUp,
    Placing,
    NextLandmark,
    PreviousLandmark,
    Missing,
    Clear,
    GoTo,
    Mirror,
    Snap,
    Labels,
    Trace,
    NewTrial,
    Undo,
    Redo,
    Save,
    Workspace,
}

/// When an action's keys work.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Needs {
    Always,
    /// A scan is shown.
    Scan,
    /// A project is open.
    Project,
}

/// One action: its keys, when they work, and what the help says it does.
#[derive(Clone, Copy, Debug)]
pub struct ActionDef {
    pub action: Action,
    pub keys: &'static [Chord],
    pub needs: Needs,
    pub what: &'static str,
}

const fn def(
    action: Action,
    keys: &'static [Chord],
    needs: Needs,
    what: &'static str,
) -> ActionDef {
    ActionDef {
        action,
        keys,
        needs,
        what,
    }
}

use Action as A;
use Needs::{Always, Project, Scan};

/// Every action with keys, in the order the help lists them.
pub const ACTIONS: &[ActionDef] = &[
    def(
        A::Help,
        &[plain(Key::F1), plain(Key::H)],
        Always,
        "show or hide this help",
    ),
    def(
        A::Escape,
        &[plain(Key::Escape)],
        Always,
        "close the help · cancel a load · stop placing",
    ),
    def(
        A::NewProject,
        &[ctrl(Key::N)],
        Always,
        "start a new project",
    ),
    def(
        A::OpenProject,
        &[ctrl_shift(Key::P)],
        Always,
        "open a project",
    ),
    def(A::OpenScan, &[ctrl(Key::O)], Always, "open a scan file"),
    def(
        A::OpenSliceFolder,
        &[ctrl_shift(Key::O)],
        Always,
        "open a folder of TIFF slices",
    ),
    def(
        A::Quit,
        &[ctrl(Key::Q)],
        Always,
        "quit (asks first if the project has unsaved changes)",
    ),
    def(
        A::Stage(ViewId::PlaneI),
        &[plain(Key::Num1)],
        Scan,
        "the i plane on the stage",
    ),
    def(
        A::Stage(ViewId::PlaneJ),
        &[plain(Key::Num2)],
        Scan,
        "the j plane on the stage",
    ),
    def(
        A::Stage(ViewId::PlaneK),
        &[plain(Key::Num3)],
        Scan,
        "the k plane on the stage",
    ),
    def(
        A::Stage(ViewId::Oblique),
        &[plain(Key::Num4)],
        Scan,
        "the oblique plane on the stage",
    ),
    def(
        A::Stage(ViewId::Volume),
        &[plain(Key::Num5)],
        Scan,
        "the 3D view on the stage",
    ),
    def(
        A::NextView,
        &[plain(Key::Tab)],
        Scan,
        "next view on the stage",
    ),
    def(
        A::PreviousView,
        &[shift(Key::Tab)],
        Scan,
        "previous view on the stage",
    ),
    def(
        A::SliceForward,
        &[plain(Key::ArrowUp)],
        Scan,
        "next slice (3D view: tilt up)",
    ),
    def(
        A::SliceBack,
        &[plain(Key::ArrowDown)],
        Scan,
        "previous slice (3D view: tilt down)",
    ),
    def(
        A::TenForward,
        &[plain(Key::PageUp)],
        Scan,
        "ten slices forward",
    ),
    def(A::TenBack, &[plain(Key::PageDown)], Scan, "ten slices back"),
    def(
        A::TurnLeft,
        &[plain(Key::ArrowLeft)],
        Scan,
        "oblique: turn the plane · 3D: orbit left",
    ),
    def(
        A::TurnRight,
        &[plain(Key::ArrowRight)],
        Scan,
        "oblique: turn the plane · 3D: orbit right",
    ),
    def(
        A::ZoomIn,
        &[plain(Key::Plus), plain(Key::Equals)],
        Scan,
        "zoom the stage view in",
    ),
    def(
        A::ZoomOut,
        &[plain(Key::Minus)],
        Scan,
        "zoom the stage view out",
    ),
    def(A::ResetView, &[plain(Key::R)], Scan, "reset the stage view"),
    def(A::ResetAll, &[shift(Key::R)], Scan, "reset every view"),
    def(
        A::ResetWindow,
        &[plain(Key::W)],
        Scan,
        "window from the scan's grey range",
    ),
    def(A::Crosshair, &[plain(Key::C)], Scan, "crosshair on / off"),
    def(A::ScaleBar, &[plain(Key::B)], Scan, "scale bar on / off"),
    def(
        A::VolumeMode,
        &[plain(Key::M)],
        Scan,
        "3D view: surface or projection",
    ),
    def(
        A::IsoDown,
        &[plain(Key::OpenBracket)],
        Scan,
        "iso-value down (3D surface, snapping, picking)",
    ),
    def(A::IsoUp, &[plain(Key::CloseBracket)], Scan, "iso-value up"),
    def(
        A::Placing,
        &[plain(Key::P)],
        Project,
        "placing on / off: a click on the stage places the current landmark",
    ),
    def(A::NextLandmark, &[plain(Key::N)], Project, "next landmark"),
    def(
        A::PreviousLandmark,
        &[shift(Key::N)],
        Project,
        "previous landmark",
    ),
    def(
        A::Missing,
        &[plain(Key::X)],
        Project,
        "mark the current landmark missing",
    ),
    def(
        A::Clear,
        &[plain(Key::Delete), plain(Key::Backspace)],
        Project,
        "clear the current landmark",
    ),
    def(
        A::GoTo,
        &[plain(Key::G)],
        Project,
        "move the crosshair to the current landmark",
    ),
    def(
        A::Mirror,
        &[plain(Key::E)],
        Project,
        "estimate the current landmark from its bilateral partner",
    ),
    def(
        A::Snap,
        &[plain(Key::S)],
        Project,
        "snap surface landmarks to the boundary on / off",
    ),
    def(
        A::Labels,
        &[plain(Key::L)],
        Project,
        "landmark labels on / off",
    ),
    def(
        A::Trace,
        &[plain(Key::T)],
        Project,
        "trace the next curve segment (after the last: back to landmarks)",
    ),
    def(
        A::NewTrial,
        &[ctrl(Key::T)],
        Project,
        "new trial of the specimen",
    ),
    def(
        A::Undo,
        &[ctrl(Key::Z)],
        Scan,
        "undo (the label image's last step while preparing, else the project's)",
    ),
    def(A::Redo, &[ctrl_shift(Key::Z), ctrl(Key::Y)], Scan, "redo"),
    def(A::Save, &[ctrl(Key::S)], Project, "save the project"),
    def(
        A::Workspace,
        &[plain(Key::A)],
        Project,
        "analysis or digitising: switch",
    ),
];

/// What the keys' commands depend on.
#[allow(
    clippy::struct_excessive_bools,
    reason = "independent facts about the window, each a yes or no"
)]
#[derive(Clone, Copy, Debug, Default)]
pub struct KeyContext {
    pub stage: ViewId,
    pub scan: bool,
    pub project: bool,
    pub loading: bool,
    pub help_open: bool,
    pub placing: bool,
    /// The preparation tab is open on a label image: undo and redo are its.
    pub preparing: bool,
}

/// The command an action sends now, if it does anything now.
#[must_use]
pub fn command_for(action: Action, cx: &KeyContext) -> Option<Command> {
    let stage = cx.stage;
    let slices = |steps: i32| -> Command {
        if stage == ViewId::Volume {
            ViewCommand::Orbit {
                d_azimuth_deg: 0.0,
                d_elevation_deg: f64::from(steps.signum()) * 5.0,
            }
            .into()
        } else {
            ViewCommand::Scroll { view: stage, steps }.into()
        }
    };
    let turn = |sign: f64| -> Option<Command> {
        match stage {
            ViewId::Volume => Some(
                ViewCommand::Orbit {
                    d_azimuth_deg: sign * 5.0,
                    d_elevation_deg: 0.0,
                }
                .into(),
            ),
            ViewId::Oblique => Some(
                ViewCommand::TurnOblique {
                    about_u_deg: 0.0,
                    about_v_deg: sign * 2.0,
                }
                .into(),
            ),
            _ => None,
        }
    };
    let zoom = |factor: f64| -> Command {
        ViewCommand::Zoom {
            view: stage,
            factor,
            anchor: None,
        }
        .into()
    };
    Some(match action {
        A::Help => AppCommand::ToggleHelp.into(),
        A::Escape => {
            if cx.loading {
                AppCommand::CancelLoad.into()
            } else if cx.help_open {
                AppCommand::ToggleHelp.into()
            } else if cx.placing {
                DeskCommand::StopPlacing.into()
            } else {
                return None;
            }
        }
        A::OpenScan => AppCommand::ShowDialog(DialogKind::ScanFile).into(),
        A::OpenSliceFolder => AppCommand::ShowDialog(DialogKind::SliceFolder).into(),
        A::OpenProject => AppCommand::ShowDialog(DialogKind::Project).into(),
        A::NewProject => AppCommand::NewProject.into(),
        A::Quit => AppCommand::Quit.into(),
        A::Stage(v) => PrefsCommand::SetStage(v).into(),
        A::NextView => PrefsCommand::CycleStage(1).into(),
        A::PreviousView => PrefsCommand::CycleStage(-1).into(),
        A::SliceForward => slices(1),
        A::SliceBack => slices(-1),
        A::TenForward => slices(10),
        A::TenBack => slices(-10),
        A::TurnLeft => return turn(-1.0),
        A::TurnRight => return turn(1.0),
        A::ZoomIn => zoom(1.25),
        A::ZoomOut => zoom(0.8),
        A::ResetView => ViewCommand::ResetView(stage).into(),
        A::ResetAll => ViewCommand::ResetAll.into(),
        A::ResetWindow => ViewCommand::ResetWindow.into(),
        A::Crosshair => PrefsCommand::ToggleCrosshair.into(),
        A::ScaleBar => PrefsCommand::ToggleScaleBar.into(),
        A::VolumeMode => ViewCommand::ToggleVolumeMode.into(),
        A::IsoDown => ViewCommand::NudgeIsoValue(-0.01).into(),
        A::IsoUp => ViewCommand::NudgeIsoValue(0.01).into(),
        A::Placing => DeskCommand::TogglePlacing.into(),
        A::NextLandmark => DeskCommand::StepLandmark(1).into(),
        A::PreviousLandmark => DeskCommand::StepLandmark(-1).into(),
        A::Missing => DeskCommand::MarkMissing.into(),
        A::Clear => DeskCommand::ClearLandmark.into(),
        A::GoTo => DeskCommand::GoToLandmark.into(),
        A::Mirror => DeskCommand::EstimateFromPartner.into(),
        A::Snap => PrefsCommand::ToggleSnap.into(),
        A::Labels => PrefsCommand::ToggleLabels.into(),
        A::Trace => DeskCommand::CycleTracing.into(),
        A::NewTrial => DeskCommand::StartTrial.into(),
        A::Undo if cx.preparing => PrepCommand::Undo.into(),
        A::Redo if cx.preparing => PrepCommand::Redo.into(),
        A::Undo if cx.project => DeskCommand::Undo.into(),
        A::Redo if cx.project => DeskCommand::Redo.into(),
        A::Undo | A::Redo => return None,
        A::Save => DeskCommand::Save.into(),
        A::Workspace => AppCommand::ToggleWorkspace.into(),
    })
}

/// The commands of this frame's key presses. Chords with more modifiers are tried first, so
/// Ctrl+Shift+Z is not also taken as Ctrl+Z (egui matches a chord whose modifiers are held
/// among others).
#[must_use]
pub fn keyboard(ctx: &egui::Context, cx: &KeyContext) -> Vec<Command> {
    let mut chords: Vec<(Chord, &ActionDef)> = ACTIONS
        .iter()
        .filter(|d| match d.needs {
            Needs::Always => true,
            Needs::Scan => cx.scan,
            Needs::Project => cx.project,
        })
        .flat_map(|d| d.keys.iter().map(move |k| (*k, d)))
        .collect();
    chords.sort_by_key(|(c, _)| std::cmp::Reverse(c.modifier_count()));
    let mut out = Vec::new();
    ctx.input_mut(|i| {
        for (chord, d) in chords {
            let n = i.count_and_consume_key(chord.modifiers, chord.key);
            for _ in 0..n {
                if let Some(c) = command_for(d.action, cx) {
                    out.push(c);
                }
            }
        }
    });
    out
}

/// The keys of an action as the help and the menus write them (`Ctrl+Shift+Z  or  Ctrl+Y`).
#[must_use]
pub fn keys_text(action: Action) -> String {
    ACTIONS
        .iter()
        .find(|d| d.action == action)
        .map(|d| {
            d.keys
                .iter()
                .map(Chord::text)
                .collect::<Vec<_>>()
                .join("  or  ")
        })
        .unwrap_or_default()
}

/// The help's rows: keys and what they do, in table order.
#[must_use]
pub fn help_rows() -> Vec<(String, &'static str)> {
    ACTIONS
        .iter()
        .map(|d| (keys_text(d.action), d.what))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_bound_key_is_listed_in_the_help_and_bound_once() {
        let rows = help_rows();
        let mut seen: Vec<Chord> = Vec::new();
        for d in ACTIONS {
            assert!(!d.keys.is_empty(), "{:?} has no key", d.action);
            for k in d.keys {
                assert!(
                    rows.iter()
                        .any(|(keys, _)| keys.split("  or  ").any(|t| t == k.text())),
                    "{} is bound but not in the help",
                    k.text()
                );
                assert!(!seen.contains(k), "{} is bound twice", k.text());
                seen.push(*k);
            }
        }
        // Backspace was once bound and left out of the help
        assert!(rows.iter().any(|(k, _)| k.contains("Backspace")));
    }

    #[test]
    fn every_action_sends_a_command_somewhere() {
        let cx = KeyContext {
            stage: ViewId::Oblique,
            scan: true,
            project: true,
            loading: false,
            help_open: true,
            placing: true,
            preparing: false,
        };
        for d in ACTIONS {
            assert!(command_for(d.action, &cx).is_some(), "{:?}", d.action);
        }
    }
}
