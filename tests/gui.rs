//! The workstation driven through its real UI with `egui_kittest` (no display, no GPU): events
//! go in as a user's pointer and keys would, and the tests check the app's state afterwards.

use std::path::PathBuf;
use std::time::{Duration, Instant};

use eframe::egui::{
    self, Event, Modifiers, MouseWheelSource, MouseWheelUnit, PointerButton, Pos2, TouchPhase, Vec2,
};
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use sutura::gui::{AnalysisCommand, App, AppCommand, Preferences, PrefsCommand, ViewId};
use sutura_core::geometry::VoxelSizeMm;

fn sample() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-002.nii.gz")
}

/// Steps frames until `done` holds (the loader and renderers run on their own threads).
fn step_until(h: &mut Harness<'_, App>, what: &str, done: impl Fn(&App) -> bool) {
    let t0 = Instant::now();
    loop {
        h.step();
        if done(h.state()) {
            return;
        }
        if t0.elapsed() > Duration::from_secs(20) {
            let a = h.state();
            eprintln!(
                "waiting for {what}, the app shows: status {:?}, loading {}, form {:?}, specimens {:?}, prompt {}",
                a.status(),
                a.is_loading(),
                a.new_project_form()
                    .map(|f| (f.error.clone(), f.all_read())),
                a.desk().map(|d| d.session.project.specimens().len()),
                a.prompt().is_some()
            );
            panic!("timed out waiting for {what}");
        }
        std::thread::sleep(Duration::from_millis(5));
    }
}

/// The app on the sample scan, its stage picture on screen.
/// The window on `app` at 1280 × 800, driven as the tests drive it.
fn harness(app: App) -> Harness<'static, App> {
    Harness::builder()
        .with_size(Vec2::new(1280.0, 800.0))
        .build_ui_state(|ui, app: &mut App| app.ui_for_test(ui), app)
}

/// A 0.5 MiB memory budget (each sample scan, 1 MB of voxels, is over it) with stores built
/// in `cache`.
fn over_budget(cache: &std::path::Path) -> Preferences {
    Preferences {
        memory_budget_gib: Some(1.0 / 2048.0),
        store_cache: cache.to_string_lossy().into_owned(),
        ..Preferences::default()
    }
}

/// The names of what a folder holds.
fn names_in(dir: &std::path::Path) -> Vec<String> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect()
}

fn app_on_sample() -> Harness<'static, App> {
    let app = App::new(Preferences::default(), Some(sample()));
    let mut h = harness(app);
    step_until(&mut h, "the sample scan to load", |a| {
        a.document().scan.is_some() && !a.is_loading()
    });
    step_until(&mut h, "the stage picture", |a| {
        a.is_view_current(ViewId::PlaneK)
    });
    h
}

fn stage_centre(h: &Harness<'_, App>) -> Pos2 {
    h.state()
        .view_rect(h.state().preferences().stage)
        .expect("the stage is drawn")
        .center()
}

fn k_slice(app: &App) -> usize {
    let scan = app.document().scan.as_ref().unwrap();
    app.view_state().slice(scan.grid(), ViewId::PlaneK).unwrap()
}

fn wheel(h: &Harness<'_, App>, lines: f32, modifiers: Modifiers) {
    h.event(Event::MouseWheel {
        unit: MouseWheelUnit::Line,
        delta: Vec2::new(0.0, lines),
        phase: TouchPhase::Move,
        source: MouseWheelSource::Wheel,
        modifiers,
    });
}

#[test]
fn opens_the_sample_and_shows_every_view() {
    let mut h = app_on_sample();
    let app = h.state();
    let scan = app.document().scan.as_ref().unwrap();
    assert_eq!(
        scan.grid().dims(),
        [120, 88, 48],
        "HDC-002 is 120 × 88 × 48 voxels"
    );
    // the stage and the four strip views are all drawn and rendered
    step_until(&mut h, "every view's picture", |a| {
        ViewId::ALL.iter().all(|v| a.is_view_current(*v))
    });
    for v in ViewId::ALL {
        assert!(h.state().view_rect(v).is_some(), "{v:?} is on screen");
    }
    // the stage is the large one
    let stage = h.state().view_rect(ViewId::PlaneK).unwrap();
    let small = h.state().view_rect(ViewId::PlaneI).unwrap();
    assert!(stage.area() > 4.0 * small.area());
}

#[test]
fn the_wheel_scrolls_slices_on_the_stage() {
    let mut h = app_on_sample();
    let before = k_slice(h.state());
    h.hover_at(stage_centre(&h));
    h.step();
    wheel(&h, 1.0, Modifiers::NONE);
    h.step();
    assert_eq!(k_slice(h.state()), before + 1);
    wheel(&h, -3.0, Modifiers::NONE);
    h.step();
    assert_eq!(k_slice(h.state()), before - 2);
    // the arrow keys do the same
    h.key_press(egui::Key::ArrowUp);
    h.step();
    assert_eq!(k_slice(h.state()), before - 1);
}

#[test]
fn ctrl_wheel_zooms_about_the_pointer() {
    let mut h = app_on_sample();
    let rect = h.state().view_rect(ViewId::PlaneK).unwrap();
    let p = rect.center() + Vec2::new(120.0, -80.0);
    h.hover_at(p);
    h.step();
    let map = h.state().screen_map(ViewId::PlaneK).unwrap();
    let under = map.world([f64::from(p.x), f64::from(p.y)]);
    wheel(&h, 2.0, Modifiers::COMMAND);
    h.step();
    h.step();
    let vs = h.state().view_state();
    assert!(vs.planes[ViewId::PlaneK.index()].zoom > 1.2);
    let after = h.state().screen_map(ViewId::PlaneK).unwrap();
    let s = after.screen(under);
    assert!((s[0] - f64::from(p.x)).abs() < 1e-3 && (s[1] - f64::from(p.y)).abs() < 1e-3);
}

#[test]
fn right_drag_changes_the_window() {
    let mut h = app_on_sample();
    let w0 = h.state().view_state().window;
    let start = stage_centre(&h);
    h.hover_at(start);
    h.step();
    h.event(Event::PointerButton {
        pos: start,
        button: PointerButton::Secondary,
        pressed: true,
        modifiers: Modifiers::NONE,
    });
    h.step();
    for n in 1..=5 {
        h.hover_at(start + Vec2::new(12.0 * n as f32, -6.0 * n as f32));
        h.step();
    }
    h.event(Event::PointerButton {
        pos: start + Vec2::new(60.0, -30.0),
        button: PointerButton::Secondary,
        pressed: false,
        modifiers: Modifiers::NONE,
    });
    h.step();
    let w = h.state().view_state().window;
    assert!(
        w.width > w0.width * 1.2,
        "dragging right widens: {w0:?} → {w:?}"
    );
    assert!(
        w.centre < w0.centre,
        "dragging up brightens: {w0:?} → {w:?}"
    );
    // W resets it to the scan's range
    h.key_press(egui::Key::W);
    h.step();
    assert_eq!(h.state().view_state().window, w0);
}

#[test]
fn the_stage_switches_by_button_key_and_click() {
    let mut h = app_on_sample();
    h.get_by_label("3D").click();
    h.step();
    assert_eq!(h.state().preferences().stage, ViewId::Volume);
    h.key_press(egui::Key::Num2);
    h.step();
    assert_eq!(h.state().preferences().stage, ViewId::PlaneJ);
    // a click on a small view in the strip puts it on the stage
    let oblique = h.state().view_rect(ViewId::Oblique).unwrap().center();
    h.hover_at(oblique);
    h.step();
    h.event(Event::PointerButton {
        pos: oblique,
        button: PointerButton::Primary,
        pressed: true,
        modifiers: Modifiers::NONE,
    });
    h.step();
    h.event(Event::PointerButton {
        pos: oblique,
        button: PointerButton::Primary,
        pressed: false,
        modifiers: Modifiers::NONE,
    });
    h.step();
    assert_eq!(h.state().preferences().stage, ViewId::Oblique);
    // and the 3D view, once on the stage, renders its full picture after the coarse one
    h.state_mut().send(PrefsCommand::SetStage(ViewId::Volume));
    step_until(&mut h, "the full 3D picture", |a| {
        a.is_view_current(ViewId::Volume)
    });
}

#[test]
fn a_click_moves_the_crosshair_to_the_point_under_it() {
    let mut h = app_on_sample();
    let p = stage_centre(&h) + Vec2::new(-90.0, 40.0);
    h.hover_at(p);
    h.step();
    let map = h.state().screen_map(ViewId::PlaneK).unwrap();
    let expected = map.world([f64::from(p.x), f64::from(p.y)]);
    let slice = k_slice(h.state());
    h.event(Event::PointerButton {
        pos: p,
        button: PointerButton::Primary,
        pressed: true,
        modifiers: Modifiers::NONE,
    });
    h.step();
    h.event(Event::PointerButton {
        pos: p,
        button: PointerButton::Primary,
        pressed: false,
        modifiers: Modifiers::NONE,
    });
    h.step();
    let c = h.state().view_state().cursor;
    assert!(c.distance_mm(expected) < 1e-6, "{c:?} vs {expected:?}");
    // moving within the k plane keeps the k slice
    assert_eq!(k_slice(h.state()), slice);
    // a quick click, its press and release in the same frame, counts too
    let q = p + Vec2::new(50.0, -30.0);
    h.hover_at(q);
    h.step();
    let expected = h
        .state()
        .screen_map(ViewId::PlaneK)
        .unwrap()
        .world([f64::from(q.x), f64::from(q.y)]);
    for pressed in [true, false] {
        h.event(Event::PointerButton {
            pos: q,
            button: PointerButton::Primary,
            pressed,
            modifiers: Modifiers::NONE,
        });
    }
    h.step();
    let c = h.state().view_state().cursor;
    assert!(c.distance_mm(expected) < 1e-6, "{c:?} vs {expected:?}");
    // the status line reads the voxel under the pointer
    let hover = h.state().view_state().hover.expect("hovering the stage");
    assert!(hover.voxel.is_some() && hover.value.is_some());
}

#[test]
fn help_lists_the_shortcuts() {
    let mut h = app_on_sample();
    assert!(h.query_by_label("show or hide this help").is_none());
    h.key_press(egui::Key::F1);
    h.step();
    h.step();
    assert!(h.query_by_label("show or hide this help").is_some());
    h.key_press(egui::Key::Escape);
    h.step();
    h.step();
    assert!(!h.state().view_state().help_open);
}

#[test]
fn a_bad_file_reports_an_error_and_keeps_the_scan() {
    let mut h = app_on_sample();
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("not_a_scan.nii");
    std::fs::write(&bad, b"nothing like a header").unwrap();
    h.state_mut().send(AppCommand::Open(bad));
    step_until(&mut h, "the failed load", |a| !a.is_loading());
    let msg = h.state().status().cloned().expect("an error message");
    assert!(
        msg.is_error() && msg.text.contains("not_a_scan.nii"),
        "{msg:?}"
    );
    assert!(h.state().document().scan.is_some());
}

#[test]
fn a_slice_folder_opens_with_the_voxel_size_given() {
    let app = App::new(Preferences::default(), None);
    let mut h = harness(app);
    h.step();
    // a bare number is refused by the one voxel-size rule: µm and mm differ by 1000
    assert!("36".parse::<VoxelSizeMm>().is_err());
    assert!(h.state().preferences().tiff_voxel_size.is_empty());
    h.state_mut().send(PrefsCommand::SetTiffVoxelSize(Some(
        "36um,36um,50um".parse::<VoxelSizeMm>().unwrap(),
    )));
    let folder = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-001_slices");
    h.state_mut().send(AppCommand::Open(folder));
    step_until(&mut h, "the slice folder to load", |a| {
        a.document().scan.is_some() && !a.is_loading()
    });
    let sp = h
        .state()
        .document()
        .scan
        .as_ref()
        .unwrap()
        .grid()
        .spacing_mm();
    for (got, want) in sp.iter().zip([0.036, 0.036, 0.050]) {
        assert!((got - want).abs() < 1e-12, "{sp:?}");
    }
}

#[test]
fn the_open_dialog_lists_scans_and_opens_one() {
    let mut h = app_on_sample();
    assert!(h.query_by_label("Open a scan file").is_none());
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::O);
    h.step();
    h.step();
    assert!(h.query_by_label("Open a scan file").is_some());
    // it starts in the open scan's folder: the slice folder first, then the scans
    assert!(h.query_by_label("HDC-001_slices/").is_some());
    // projects are listed too (the same dialog opens them), other JSON files are not
    assert!(h.query_by_label_contains("sample_project.json").is_some());
    assert!(h.query_by_label_contains("landmarks.json").is_none());
    h.get_by_label_contains("TF-003.nii.gz").click();
    h.step();
    h.get_by_label("Open").click();
    h.step();
    step_until(&mut h, "TF-003 to load", |a| {
        !a.is_loading()
            && a.document()
                .scan
                .as_ref()
                .is_some_and(|s| s.path.ends_with("TF-003.nii.gz"))
    });
    assert!(h.query_by_label("Open a scan file").is_none());
}

// ---------------------------------------------------------------------------------------------
// The desk: digitising a project through the UI.

use sutura::gui::{Prompt, Workspace};
use sutura_core::landmarks::Project;
use sutura_core::landmarks::pick::{Crossing, PickOptions, SliceSearch, pick_in_slice};
use sutura_core::landmarks::project::{LandmarkState, Method, autosave_path, backup_path};

/// A copy of the sample project in `dir`, its scans linked beside it.
fn project_copy(dir: &std::path::Path) -> PathBuf {
    let src = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample_volumes");
    let project = dir.join("sample_project.json");
    std::fs::copy(src.join("sample_project.json"), &project).unwrap();
    for e in std::fs::read_dir(&src).unwrap() {
        let e = e.unwrap();
        let name = e.file_name().to_string_lossy().into_owned();
        if name.ends_with(".nii.gz") || name.ends_with("_slices") {
            std::os::unix::fs::symlink(e.path(), dir.join(&name)).unwrap();
        }
    }
    project
}

/// The app on a project, its first specimen's scan on the stage.
fn app_on_project(project: &std::path::Path, prefs: Preferences) -> Harness<'static, App> {
    let app = App::new(prefs, Some(project.to_path_buf()));
    let mut h = harness(app);
    step_until(&mut h, "the project and its first scan", |a| {
        a.desk().is_some() && a.scan_of().is_some() && !a.is_loading()
    });
    h
}

fn named(operator: &str) -> Preferences {
    Preferences {
        operator: operator.into(),
        ..Preferences::default()
    }
}

/// A click of the primary button at `p` (press and release in separate frames).
fn click(h: &mut Harness<'_, App>, p: Pos2) {
    h.hover_at(p);
    h.step();
    for pressed in [true, false] {
        h.event(Event::PointerButton {
            pos: p,
            button: PointerButton::Primary,
            pressed,
            modifiers: Modifiers::NONE,
        });
        h.step();
    }
    h.step();
}

fn world_at(h: &Harness<'_, App>, p: Pos2) -> [f64; 3] {
    let m = h.state().screen_map(ViewId::PlaneK).unwrap();
    let w = m.world([f64::from(p.x), f64::from(p.y)]);
    [w.0.x, w.0.y, w.0.z]
}

fn close(a: [f64; 3], b: [f64; 3], tol: f64) -> bool {
    (0..3).all(|i| (a[i] - b[i]).abs() <= tol)
}

#[test]
#[allow(clippy::too_many_lines)] // reason: one user's session, step by step
fn digitising_a_specimen_through_the_ui_gives_exactly_the_clicked_document() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let original = Project::load(&path).unwrap();
    let mut h = app_on_project(&path, Preferences::default());
    assert_eq!(h.state().scan_of(), Some("HDC-001"));

    // select HDC-002 in the specimen list; its scan opens and passes its fingerprint check
    h.get_by_label("HDC-002").click();
    step_until(&mut h, "HDC-002's scan", |a| {
        a.scan_of() == Some("HDC-002") && !a.is_loading() && a.is_view_current(ViewId::PlaneK)
    });
    assert!(h.state().prompt().is_none());

    // a new trial asks for the operator's name once
    h.get_by_label("New trial").click();
    h.step();
    h.step();
    assert!(matches!(h.state().prompt(), Some(Prompt::Operator)));
    h.event(Event::Text("Ana Ruiz".into()));
    h.step();
    h.get_by_label("Start trial").click();
    h.step();
    h.step();
    assert!(h.state().prompt().is_none());
    assert_eq!(h.state().preferences().operator, "Ana Ruiz");
    let s = h.state().desk().unwrap();
    assert_eq!(s.trial.as_deref(), Some("3"));
    assert!(s.trial_ref().unwrap().landmarks.is_empty());
    assert!(h.state().is_placing(), "a new trial starts placing");
    let lms: Vec<String> = s
        .session
        .project
        .scheme()
        .landmarks
        .iter()
        .map(|l| l.id.clone())
        .collect();
    assert_eq!(s.current.as_deref(), Some(lms[0].as_str()));
    assert!(s.session.project.scheme().landmarks[0].on_surface);

    // the first click snaps the surface landmark to the boundary, as the library's pick does
    let centre = stage_centre(&h);
    let p0 = centre + Vec2::new(-40.0, 10.0);
    h.hover_at(p0);
    h.step();
    let w0 = world_at(&h, p0);
    let scan = h.state().document().scan.clone().unwrap();
    let threshold = h.state().view_state().iso.value;
    let sp = scan.grid().spacing_mm();
    let opts = PickOptions {
        threshold,
        max_distance_mm: sutura_core::landmarks::pick_source::SNAP_REACH_VOXELS
            * sp[0].min(sp[1]).min(sp[2]),
        refine_to_edge: true,
    };
    let m = h.state().screen_map(ViewId::PlaneK).unwrap();
    let pick = pick_in_slice(
        scan.whole().unwrap(),
        sutura_core::geometry::WorldPoint::new(w0[0], w0[1], w0[2]),
        m.u.cross(&m.v),
        SliceSearch::AllAround,
        &opts,
    )
    .unwrap()
    .filter(|p| p.crossing != Crossing::VolumeFace);
    click(&mut h, p0);
    let e = h
        .state()
        .desk()
        .unwrap()
        .trial_ref()
        .unwrap()
        .landmark(&lms[0])
        .cloned()
        .expect("the first landmark is placed");
    assert_eq!(e.state, LandmarkState::Placed);
    if let Some(p) = pick {
        assert_eq!(e.method, Some(Method::Surface));
        let want = [p.point.0.x, p.point.0.y, p.point.0.z];
        assert!(
            close(e.position_mm.unwrap(), want, 1e-9),
            "{e:?} vs {want:?}"
        );
        assert!(e.pick.is_some());
    } else {
        assert_eq!(e.method, Some(Method::Slice));
        assert!(close(e.position_mm.unwrap(), w0, 1e-9));
    }
    assert_eq!(
        h.state().desk().unwrap().current.as_deref(),
        Some(lms[1].as_str()),
        "the next landmark becomes current"
    );

    // snapping off (S): the next clicks place exactly where clicked, on the shown slice
    h.key_press(egui::Key::S);
    h.step();
    assert!(!h.state().preferences().snap);
    let offsets = [
        Vec2::new(30.0, -20.0),
        Vec2::new(60.0, 25.0),
        Vec2::new(-10.0, 50.0),
    ];
    let mut placed = Vec::new();
    for (n, off) in offsets.iter().enumerate() {
        let p = centre + *off;
        h.hover_at(p);
        h.step();
        let w = world_at(&h, p);
        click(&mut h, p);
        let t = h.state().desk().unwrap().trial_ref().unwrap().clone();
        let e = t.landmark(&lms[n + 1]).expect("placed");
        assert_eq!(e.method, Some(Method::Slice));
        assert!(close(e.position_mm.unwrap(), w, 1e-6), "{e:?} vs {w:?}");
        placed.push(w);
    }
    let full = h.state().desk().unwrap().session.project.clone();

    // undo and redo, by both redo keys
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Z);
    h.step();
    assert!(
        h.state()
            .desk()
            .unwrap()
            .trial_ref()
            .unwrap()
            .landmark(&lms[3])
            .is_none()
    );
    h.key_press_modifiers(Modifiers::COMMAND | Modifiers::SHIFT, egui::Key::Z);
    h.step();
    assert_eq!(h.state().desk().unwrap().session.project, full);
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Z);
    h.step();
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Y);
    h.step();
    assert_eq!(h.state().desk().unwrap().session.project, full);

    // mark the current landmark (the fifth) missing with X
    assert_eq!(
        h.state().desk().unwrap().current.as_deref(),
        Some(lms[4].as_str())
    );
    h.key_press(egui::Key::X);
    h.step();
    let t = h.state().desk().unwrap().trial_ref().unwrap().clone();
    let e = t.landmark(&lms[4]).unwrap();
    assert_eq!(e.state, LandmarkState::Missing);
    assert!(e.position_mm.is_none() && e.method.is_none());

    // drag the second landmark's mark 20 points to the right
    let from = centre + offsets[0];
    let to = from + Vec2::new(20.0, 0.0);
    h.hover_at(to);
    h.step();
    let w_to = world_at(&h, to);
    h.hover_at(from);
    h.step();
    h.event(Event::PointerButton {
        pos: from,
        button: PointerButton::Primary,
        pressed: true,
        modifiers: Modifiers::NONE,
    });
    h.step();
    for k in 1..=5 {
        h.hover_at(from + Vec2::new(4.0 * k as f32, 0.0));
        h.step();
    }
    h.event(Event::PointerButton {
        pos: to,
        button: PointerButton::Primary,
        pressed: false,
        modifiers: Modifiers::NONE,
    });
    h.step();
    h.step();
    let t = h.state().desk().unwrap().trial_ref().unwrap().clone();
    let moved = t.landmark(&lms[1]).unwrap();
    assert!(
        close(moved.position_mm.unwrap(), w_to, 1e-6),
        "{moved:?} vs {w_to:?}"
    );
    assert_eq!(t.landmarks.len(), 5, "a drag places nothing new");
    let trial3 = t;

    // a second trial (Ctrl+T): the name is not asked again, the earlier trial is hidden
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::T);
    h.step();
    h.step();
    assert!(h.state().prompt().is_none());
    let s = h.state().desk().unwrap();
    assert_eq!(s.trial.as_deref(), Some("4"));
    assert!(s.trial_ref().unwrap().landmarks.is_empty());
    assert_eq!(s.current.as_deref(), Some(lms[0].as_str()));
    let p = centre + Vec2::new(-70.0, -30.0);
    h.hover_at(p);
    h.step();
    let w4 = world_at(&h, p);
    click(&mut h, p);

    // save (Ctrl+S), reload from disk
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::S);
    h.step();
    assert!(!h.state().desk().unwrap().session.is_dirty());
    assert!(backup_path(&path).exists());
    let saved = Project::load(&path).unwrap();
    let sp2 = saved.specimen("HDC-002").unwrap();
    assert_eq!(sp2.trials.len(), 4);
    assert_eq!(sp2.trial("3").unwrap(), &trial3);
    assert_eq!(sp2.trial("3").unwrap().operator, "Ana Ruiz");
    let t4 = sp2.trial("4").unwrap();
    assert_eq!(t4.landmarks.len(), 1);
    assert_eq!(t4.landmarks[0].id, lms[0]);
    assert_eq!(t4.landmarks[0].method, Some(Method::Slice));
    assert!(close(t4.landmarks[0].position_mm.unwrap(), w4, 1e-6));
    // positions of trial 3 as clicked (the dragged one moved)
    for (n, w) in placed.iter().enumerate().skip(1) {
        assert!(close(
            sp2.trial("3").unwrap().position(&lms[n + 1]).unwrap(),
            *w,
            1e-6
        ));
    }
    // nothing else changed
    for (a, b) in saved.specimens().iter().zip(original.specimens()) {
        if a.id != "HDC-002" {
            assert_eq!(a, b);
        }
    }
    assert_eq!(
        &sp2.trials[..2],
        &original.specimen("HDC-002").unwrap().trials[..]
    );
}

#[test]
fn after_a_crash_the_autosave_is_offered_and_recovered() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let on_disk = std::fs::read(&path).unwrap();
    let edited = {
        let mut h = app_on_project(&path, named("Bo"));
        h.state_mut().desk_mut().unwrap().session.autosave_delay = Duration::ZERO;
        h.key_press_modifiers(Modifiers::COMMAND, egui::Key::T);
        h.step();
        h.key_press(egui::Key::X);
        h.step();
        h.step();
        assert!(autosave_path(&path).exists(), "the autosave is written");
        h.state().desk().unwrap().session.project.clone()
        // the harness drops here without saving: a crash
    };
    assert_eq!(
        std::fs::read(&path).unwrap(),
        on_disk,
        "the project file is untouched"
    );
    let mut h = app_on_project(&path, named("Bo"));
    assert!(matches!(h.state().prompt(), Some(Prompt::Autosave(_))));
    assert_ne!(h.state().desk().unwrap().session.project, edited);
    h.get_by_label("Recover").click();
    h.step();
    h.step();
    assert!(h.state().prompt().is_none());
    let s = h.state().desk().unwrap();
    assert_eq!(s.session.project, edited);
    assert!(
        s.session.is_dirty(),
        "recovered work is not saved until the user saves"
    );
}

#[test]
fn quitting_with_unsaved_changes_asks_first() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let on_disk = std::fs::read(&path).unwrap();
    let mut h = app_on_project(&path, named("Bo"));
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::T);
    h.step();
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Q);
    h.step();
    h.step();
    assert!(matches!(
        h.state().prompt(),
        Some(Prompt::Unsaved(sutura::gui::After::Quit))
    ));
    h.get_by_label("Cancel").click();
    h.step();
    h.step();
    assert!(h.state().prompt().is_none() && !h.state().is_closing());
    // discard: the file stays as it was, no autosave is left
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Q);
    h.step();
    h.step();
    h.get_by_label("Discard changes").click();
    h.step();
    assert!(h.state().is_closing());
    assert_eq!(std::fs::read(&path).unwrap(), on_disk);
    assert!(!autosave_path(&path).exists());

    // save: the change is written before closing
    drop(h);
    let mut h = app_on_project(&path, named("Bo"));
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::T);
    h.step();
    let edited = h.state().desk().unwrap().session.project.clone();
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Q);
    h.step();
    h.step();
    h.get_by_label("Save changes").click();
    h.step();
    assert!(h.state().is_closing());
    assert_eq!(Project::load(&path).unwrap(), edited);
}

#[test]
fn the_analysis_view_runs_the_superimposition_and_exports() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let mut h = app_on_project(&path, named("Bo"));
    h.key_press(egui::Key::A);
    h.step();
    h.step();
    assert_eq!(h.state().workspace(), Workspace::Analysis);
    h.get_by_label("Run analysis").click();
    step_until(&mut h, "the analysis", |a| {
        !a.analysis().is_running() && a.analysis().result.is_some()
    });
    let a = h.state().analysis().result.clone().unwrap();
    // the command line's analysis of the same project gives the same numbers
    let project = Project::load(&path).unwrap();
    let options = sutura_core::analysis::ProjectAnalysisOptions::for_project(&project);
    let cli = sutura::gui::analysis_view::run(&project, &options).unwrap();
    assert_eq!(a.n(), 10);
    assert_eq!(a.disparity.len(), 2);
    for (g, c) in a.disparity.iter().zip(&cli.disparity) {
        assert_eq!(g.group, c.group);
        assert!((g.procrustes_variance - c.procrustes_variance).abs() < 1e-15);
    }
    let out = dir.path().join("exports");
    h.state_mut()
        .send(AnalysisCommand::SetExportFolder(out.clone()));
    h.step();
    h.step();
    h.get_by_label("Landmarks, long CSV").click();
    h.step();
    h.get_by_label("Measurements CSV").click();
    h.step();
    h.get_by_label("Analysis tables").click();
    h.step();
    let long = std::fs::read_to_string(out.join("landmarks_long.csv")).unwrap();
    // one row per specimen × trial × landmark (14 trials × 17 landmarks) and a header
    assert_eq!(long.lines().count(), 14 * 17 + 1);
    assert!(out.join("measurements.csv").exists());
    assert!(out.join("aligned_long.csv").exists());
    let msg = h.state().analysis().last_export.clone().unwrap();
    assert!(
        !msg.is_error() && msg.text.contains("aligned_long.csv"),
        "{msg:?}"
    );
}

#[test]
fn a_scan_that_is_not_the_recorded_one_is_shown_plainly_and_kept_read_only() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    // HDC-002's scan replaced by another specimen's
    let link = dir.path().join("HDC-002.nii.gz");
    std::fs::remove_file(&link).unwrap();
    std::os::unix::fs::symlink(
        PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-003.nii.gz"),
        &link,
    )
    .unwrap();
    let mut h = app_on_project(&path, named("Bo"));
    h.get_by_label("HDC-002").click();
    step_until(&mut h, "the fingerprint check", |a| {
        matches!(a.prompt(), Some(Prompt::Mismatch { .. }))
    });
    h.step();
    assert!(h.query_by_label("Not the recorded scan").is_some());
    h.get_by_label("Open read-only").click();
    h.step();
    h.step();
    assert_eq!(h.state().scan_of(), Some("HDC-002"));
    let before = h.state().desk().unwrap().session.project.clone();
    h.get_by_label("snout_tip").click();
    h.step();
    assert_eq!(
        h.state().desk().unwrap().current.as_deref(),
        Some("snout_tip")
    );
    h.key_press(egui::Key::X);
    h.step();
    let msg = h.state().status().cloned().unwrap();
    assert!(
        msg.is_error() && msg.text.contains("not the recorded one"),
        "{msg:?}"
    );
    assert_eq!(h.state().desk().unwrap().session.project, before);
}

#[test]
fn a_curve_is_traced_by_clicks_and_resampled_once_its_anchors_are_placed() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let mut h = app_on_project(&path, named("Bo"));
    h.get_by_label("HDC-002").click();
    step_until(&mut h, "HDC-002's scan", |a| {
        a.scan_of() == Some("HDC-002") && !a.is_loading() && a.is_view_current(ViewId::PlaneK)
    });
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::T);
    h.step();
    h.key_press(egui::Key::S); // snapping off: points land where clicked
    h.step();
    h.key_press(egui::Key::T); // trace the scheme's curve (also the Trace button under Curves)
    h.step();
    h.step();
    assert!(h.state().is_placing());
    let centre = stage_centre(&h);
    let clicks = [Vec2::new(-20.0, -5.0), Vec2::new(10.0, -15.0)];
    let mut traced = Vec::new();
    for off in clicks {
        let p = centre + off;
        h.hover_at(p);
        h.step();
        traced.push(world_at(&h, p));
        click(&mut h, p);
    }
    let curve = |h: &Harness<'_, App>| {
        h.state()
            .desk()
            .unwrap()
            .trial_ref()
            .unwrap()
            .curve("dorsal_midline")
            .cloned()
    };
    let c = curve(&h).expect("the curve is traced");
    assert_eq!(c.traced_mm.len(), 1);
    assert_eq!(c.traced_mm[0].len(), 2);
    for (got, want) in c.traced_mm[0].iter().zip(&traced) {
        assert!(close(*got, *want, 1e-6));
    }
    assert!(c.semilandmarks_mm[0].is_empty(), "no anchors yet");
    // stop tracing (T after the last segment), place both anchors: snout_tip, then crest_top
    h.key_press(egui::Key::T);
    h.step();
    h.step();
    for off in [Vec2::new(-60.0, 0.0), Vec2::new(40.0, -30.0)] {
        click(&mut h, centre + off);
    }
    let c = curve(&h).unwrap();
    assert_eq!(c.semilandmarks_mm[0].len(), 8, "the scheme asks for 8");
    // undo takes the second anchor back, and the semilandmarks with it
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Z);
    h.step();
    assert!(curve(&h).unwrap().semilandmarks_mm[0].is_empty());
}

// ---------------------------------------------------------------------------------------------
// Starting and running a project in the window.

use sutura::gui::{DeskCommand, TypedPosition};

/// The generator's true landmarks of a sample specimen (world mm).
fn truth(specimen: &str) -> std::collections::BTreeMap<String, [f64; 3]> {
    let p = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("sample_volumes")
        .join(format!("{specimen}.landmarks.json"));
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(p).unwrap()).unwrap();
    v["landmarks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| {
            (
                l["id"].as_str().unwrap().to_owned(),
                [
                    l["x"].as_f64().unwrap(),
                    l["y"].as_f64().unwrap(),
                    l["z"].as_f64().unwrap(),
                ],
            )
        })
        .collect()
}

#[test]
fn a_project_is_started_in_the_window_from_the_sample_scans() {
    let dir = tempfile::tempdir().unwrap();
    let app = App::new(named("Ana"), None);
    let mut h = harness(app);
    h.step();
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::N);
    h.step();
    h.step();
    assert!(
        h.state().new_project_form().is_some(),
        "Ctrl+N opens the form"
    );
    // the bundled example scheme is proposed; scans come from a folder of scans
    let target = dir.path().join("my_skulls.json");
    {
        let f = h.state_mut().new_project_form_mut().unwrap();
        assert!(f.scheme_text.ends_with("scheme.toml"), "{}", f.scheme_text);
        f.target_text = target.display().to_string();
        f.groups_text = "formation=Harrowdene Clay".into();
        f.add_scans(vec![
            PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample_volumes"),
        ]);
        assert_eq!(f.scans.len(), 10);
        // an id is editable before the project is made
        f.scans[0].id = "HDC-001a".into();
    }
    step_until(&mut h, "every scan to be read", |a| {
        a.new_project_form()
            .is_some_and(sutura::gui::new_project::NewProjectForm::all_read)
    });
    // a frame drawn with every scan read: the button is enabled in it
    h.step();
    h.get_by_label("Make project").click();
    step_until(&mut h, "the project with its specimens", |a| {
        a.new_project_form().is_none()
            && !a.is_loading()
            && a.desk()
                .is_some_and(|d| d.session.project.specimens().len() == 10)
    });
    let d = h.state().desk().unwrap();
    let ids: Vec<&str> = d
        .session
        .project
        .specimens()
        .iter()
        .map(|s| s.id.as_str())
        .collect();
    assert_eq!(ids[0], "HDC-001a");
    assert_eq!(ids[9], "TF-005");
    assert!(
        d.session
            .project
            .specimens()
            .iter()
            .all(|s| s.groups["formation"] == "Harrowdene Clay")
    );
    // the specimens were added as one undoable step; the file has the empty project until saved
    assert!(d.session.is_dirty());
    assert_eq!(d.session.next_undo(), Some("add 10 specimens"));
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::S);
    h.step();
    let saved = Project::load(&target).unwrap();
    assert_eq!(saved.specimens().len(), 10);
    // scan paths are recorded relative to the project file and resolve to the sample scans
    assert_eq!(
        std::fs::canonicalize(saved.specimens()[1].scan.resolve(&target)).unwrap(),
        std::fs::canonicalize(
            PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-002.nii.gz")
        )
        .unwrap()
    );
}

#[test]
fn groups_are_set_for_a_specimen_from_the_column_and_undone_in_one_step() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let mut h = app_on_project(&path, named("Bo"));
    h.get_by_label("Groups of HDC-001").click();
    h.step();
    for (field, text) in [("key", "horizon"), ("value", "lower lens")] {
        h.get_by_label(field).focus();
        h.step();
        h.get_by_label(field).type_text(text);
        h.step();
    }
    h.get_by_label("Set").click();
    h.step();
    h.step();
    let groups = |h: &Harness<'_, App>| {
        h.state()
            .desk()
            .unwrap()
            .session
            .project
            .specimen("HDC-001")
            .unwrap()
            .groups
            .clone()
    };
    assert_eq!(groups(&h)["horizon"], "lower lens");
    // several specimens at once (the ticked ones) go through the same command
    h.state_mut().send(DeskCommand::SetGroup {
        specimens: vec!["HDC-002".into(), "TF-001".into()],
        key: "horizon".into(),
        value: Some("upper".into()),
    });
    h.step();
    h.step();
    let p = &h.state().desk().unwrap().session.project;
    assert_eq!(p.specimen("TF-001").unwrap().groups["horizon"], "upper");
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Z);
    h.step();
    let p = &h.state().desk().unwrap().session.project;
    assert!(!p.specimen("TF-001").unwrap().groups.contains_key("horizon"));
    assert!(
        !p.specimen("HDC-002")
            .unwrap()
            .groups
            .contains_key("horizon")
    );
    assert_eq!(groups(&h)["horizon"], "lower lens");
}

#[test]
fn typed_positions_and_the_partner_estimate_agree_with_the_generator() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let mut h = app_on_project(&path, named("Bo"));
    h.get_by_label("HDC-002").click();
    step_until(&mut h, "HDC-002's scan", |a| {
        a.scan_of() == Some("HDC-002") && !a.is_loading()
    });
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::T);
    h.step();
    h.step();
    let t = truth("HDC-002");
    let target = "orbit_anterior_R";
    // every other landmark typed at its true position, one of them in voxel coordinates
    for (id, p) in &t {
        if id == target {
            continue;
        }
        h.state_mut().send(DeskCommand::SelectLandmark(id.clone()));
        h.step();
        let pos = if id == "snout_tip" {
            let rec = &h.state().desk().unwrap().specimen_ref().unwrap().scan;
            TypedPosition::Voxel(rec.voxel_from_world_point(*p))
        } else {
            TypedPosition::WorldMm(*p)
        };
        h.state_mut().send(DeskCommand::PlaceTyped(pos));
        h.step();
    }
    let d = h.state().desk().unwrap();
    let tr = d.trial_ref().unwrap();
    for (id, p) in &t {
        if id == target {
            continue;
        }
        let e = tr.landmark(id).unwrap();
        assert_eq!(e.method, Some(Method::Typed));
        assert!(close(e.position_mm.unwrap(), *p, 1e-9), "{id}");
    }
    // a position outside the scan is refused with a message
    h.state_mut()
        .send(DeskCommand::SelectLandmark(target.into()));
    h.step();
    h.state_mut()
        .send(DeskCommand::PlaceTyped(TypedPosition::WorldMm([
            1e3, 0.0, 0.0,
        ])));
    h.step();
    assert!(h.state().status().unwrap().is_error());
    // the synthetic skulls are bilaterally symmetric: the mirrored partner is the truth
    h.get_by_label("From partner").click();
    h.step();
    h.step();
    let e = h
        .state()
        .desk()
        .unwrap()
        .trial_ref()
        .unwrap()
        .landmark(target)
        .unwrap()
        .clone();
    assert_eq!(e.state, LandmarkState::Estimated);
    assert!(close(e.position_mm.unwrap(), t[target], 1e-9), "{e:?}");
    let note = e.note.unwrap();
    assert!(
        note.contains("orbit_anterior_L") && note.contains("rms"),
        "{note}"
    );
    // one undo takes the estimate and its note back
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Z);
    h.step();
    assert!(
        h.state()
            .desk()
            .unwrap()
            .trial_ref()
            .unwrap()
            .landmark(target)
            .is_none()
    );
}

#[test]
fn analysis_options_in_the_window_give_the_command_lines_numbers() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let mut h = app_on_project(&path, named("Bo"));
    h.key_press(egui::Key::A);
    h.step();
    h.step();
    h.get_by_label("full Procrustes").click();
    h.step();
    h.get_by_label("regression").click();
    h.step();
    h.get_by_label("latest").click();
    h.step();
    h.get_by_label("Run analysis").click();
    step_until(&mut h, "the analysis", |a| {
        !a.analysis().is_running() && a.analysis().result.is_some()
    });
    let gui = dir.path().join("gui");
    h.state_mut()
        .send(AnalysisCommand::SetExportFolder(gui.clone()));
    h.step();
    h.step();
    h.get_by_label("Analysis tables").click();
    h.step();
    let cli = dir.path().join("cli");
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_sutura"))
        .args([
            "superimpose",
            path.to_str().unwrap(),
            "-o",
            cli.to_str().unwrap(),
            "--fit",
            "full",
            "--fill",
            "regression",
            "--trial",
            "latest",
            "--group-by",
            "formation",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for f in [
        "specimens.csv",
        "disparity.csv",
        "pc_scores.csv",
        "aligned_long.csv",
    ] {
        assert_eq!(
            std::fs::read(gui.join(f)).unwrap(),
            std::fs::read(cli.join(f)).unwrap(),
            "{f} differs between the window and the command line"
        );
    }
    // the latest trial was analysed: HDC-002 has two
    let specimens = std::fs::read_to_string(gui.join("specimens.csv")).unwrap();
    let row = specimens.lines().find(|l| l.contains(",HDC-002,")).unwrap();
    assert!(row.contains(",HDC-002,2,"), "{row}");
}

#[test]
fn a_landmark_moved_by_a_millimetre_is_flagged_in_the_checklist() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let mut h = app_on_project(&path, named("Bo"));
    let checks = |h: &Harness<'_, App>| h.state().desk().unwrap().checks().cloned().unwrap();
    // the sample as digitised raises no flag
    let before = checks(&h);
    assert!(before.not_checked.is_none(), "{before:?}");
    assert!(before.flags.is_empty(), "{:?}", before.flags);
    let d = h.state().desk().unwrap();
    let p = d.trial_ref().unwrap().position("snout_tip").unwrap();
    h.state_mut().send(DeskCommand::MoveLandmark {
        landmark: "snout_tip".into(),
        to: sutura_core::geometry::WorldPoint::new(p[0] + 1.0, p[1], p[2]),
    });
    h.step();
    h.step();
    let after = checks(&h);
    let flag = after
        .flags
        .iter()
        .find(|f| f.items == ["snout_tip"])
        .unwrap_or_else(|| panic!("snout_tip not flagged: {:?}", after.flags));
    // the reason is in the checklist, and the landmark's row is marked
    h.get_by_label(&format!("• {}", flag.reason));
    assert!(h.query_all_by_label("check").count() >= 1);
    // undo brings the clean state back, and the flag goes
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Z);
    h.step();
    h.step();
    assert!(checks(&h).flags.is_empty());
}

#[test]
fn the_analysis_view_shows_operator_error_and_disparity_through_time_as_the_cli_computes_them() {
    use sutura::gui::analysis_extras::TimeBins;
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let mut h = app_on_project(&path, named("Bo"));
    // ages: the Harrowdene specimens older than the others (one with an interval age)
    let ids: Vec<String> = h
        .state()
        .desk()
        .unwrap()
        .session
        .project
        .specimens()
        .iter()
        .map(|s| s.id.clone())
        .collect();
    for (n, id) in ids.iter().enumerate() {
        let age = match (id.starts_with("HDC"), n % 5) {
            (true, 0) => "131.0-127.5".to_owned(),
            (true, k) => format!("{}", 126.0 + k as f64),
            (false, k) => format!("{}", 112.0 + k as f64),
        };
        h.state_mut().send(DeskCommand::SetGroup {
            specimens: vec![id.clone()],
            key: "age_ma".into(),
            value: Some(age),
        });
        h.step();
    }
    h.state_mut().send(DeskCommand::Save);
    h.step();
    h.key_press(egui::Key::A);
    h.step();
    h.step();
    h.state_mut()
        .send(AnalysisCommand::SetTimeBins(TimeBins::Edges(
            "135,120,105".into(),
        )));
    h.step();
    h.get_by_label("Run analysis").click();
    step_until(&mut h, "the analysis", |a| {
        !a.analysis().is_running() && a.analysis().extras.is_some()
    });
    h.step();
    h.get_by_label("Measurement error by operator");
    h.get_by_label("Disparity through time");
    let options = h.state().analysis().options.analysis;
    let extras = h.state().analysis().extras.clone().unwrap();
    let gui = dir.path().join("gui");
    let ops = extras.operators.as_ref().unwrap().as_ref().unwrap();
    ops.write_tables(&gui).unwrap();
    let dtt = extras.through_time.as_ref().unwrap().as_ref().unwrap();
    assert_eq!(dtt.result.bins.len(), 2);
    dtt.write_tables(&gui).unwrap();
    // the command line on the saved project
    let cli = dir.path().join("cli");
    let run = run_cli;
    let p = path.to_str().unwrap();
    let c = cli.to_str().unwrap();
    run(&["measurement-error", p, "-o", c]);
    run(&[
        "disparity-through-time",
        p,
        "-o",
        c,
        "--bins",
        "135,120,105",
        "--resamples",
        &options.resamples.to_string(),
        "--seed",
        &options.seed.to_string(),
    ]);
    for f in [
        "operator_anova.csv",
        "operator_shares.csv",
        "disparity_through_time.csv",
        "bin_changes.csv",
    ] {
        assert_eq!(
            std::fs::read_to_string(gui.join(f)).unwrap(),
            std::fs::read_to_string(cli.join(f)).unwrap(),
            "{f} differs between the window and the command line"
        );
    }
    // the operator term's test shown is the table's (the sample is unbalanced: no shares)
    let shape = ops.tables()[0].1;
    assert!(shape.components.is_none());
    let term = shape.term("operator").unwrap();
    h.get_by_label(&format!(
        "F = {:.2}, p = {:.3}",
        term.f.unwrap(),
        term.p.unwrap()
    ));
}

/// Drags the primary button from `a` to `b` on the stage (press, one move, release, each in
/// its own frame).
fn drag(h: &mut Harness<'_, App>, a: Pos2, b: Pos2) {
    h.hover_at(a);
    h.step();
    h.event(Event::PointerButton {
        pos: a,
        button: PointerButton::Primary,
        pressed: true,
        modifiers: Modifiers::NONE,
    });
    h.step();
    h.hover_at(b);
    h.step();
    h.event(Event::PointerButton {
        pos: b,
        button: PointerButton::Primary,
        pressed: false,
        modifiers: Modifiers::NONE,
    });
    h.step();
    h.step();
}

/// Where a world point lies on the stage (the k plane view), after moving the crosshair there
/// so the plane passes through it; returns the screen point and the world point it maps back
/// to (on the plane), which is what the window's tools receive.
fn on_stage(h: &mut Harness<'_, App>, w: [f64; 3]) -> (Pos2, [f64; 3]) {
    use sutura_core::geometry::WorldPoint;
    h.state_mut()
        .send(sutura::gui::ViewCommand::MoveCursor(WorldPoint::new(
            w[0], w[1], w[2],
        )));
    h.step();
    h.step();
    let m = h.state().screen_map(ViewId::PlaneK).unwrap();
    let s = m.screen(WorldPoint::new(w[0], w[1], w[2]));
    let p = Pos2::new(s[0] as f32, s[1] as f32);
    (p, world_at(h, p))
}

fn triple(w: [f64; 3]) -> String {
    format!("{},{},{}", w[0], w[1], w[2])
}

/// The README's recipe for the rock sample, done in the window by a user's drags and clicks on
/// the k plane view (the Prepare tab, its buttons, the brush and the grow tool), writes the
/// same label voxels as `sutura labels` given the same points; Ctrl+Z undoes the grow and
/// Ctrl+Y redoes it; the planes draw the labels and the 3D view keeps only the specimen, so a
/// surface pick lands on it.
#[test]
#[allow(clippy::too_many_lines)] // reason: one preparator's session, step by step, then the CLI
fn the_rock_specimen_is_prepared_in_the_window_as_the_command_line_prepares_it() {
    use sutura::gui::{GrowSettings, PrepCommand};
    use sutura_core::labels::region::Connectivity;
    use sutura_core::labels::{dice, zarr};
    let dir = tempfile::tempdir().unwrap();
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let scan = dir.path().join("RM-001.nii.gz");
    std::os::unix::fs::symlink(root.join("sample_volumes/rock/RM-001.nii.gz"), &scan).unwrap();
    let app = App::new(Preferences::default(), Some(scan.clone()));
    let mut h = harness(app);
    step_until(&mut h, "the rock scan to load", |a| {
        a.document().scan.is_some() && !a.is_loading()
    });
    step_until(&mut h, "the stage picture", |a| {
        a.is_view_current(ViewId::PlaneK)
    });
    // a new label image beside the scan, by the Prepare tab's button
    h.get_by_label("Prepare").click();
    h.step();
    h.get_by_label("New label image").click();
    h.step();
    let labels_path = dir.path().join("RM-001.labels.zarr");
    assert!(h.state().prep().is_some(), "{:?}", h.state().status());
    assert!(labels_path.exists());
    h.step();
    // 1. three matrix strokes of 90 µm across the vein (README: slices k = 11, 16, 21)
    h.get_by_label("matrix").click();
    h.step();
    h.get_by_label("brush").click();
    h.step();
    h.state_mut().send(PrepCommand::SetBrushUm(90.0));
    h.step();
    let mut strokes = Vec::new();
    for z in [0.55, 0.80, 1.05] {
        let (a, wa) = on_stage(&mut h, [1.374, 2.288, z]);
        let (b, wb) = on_stage(&mut h, [0.736, 2.235, z]);
        drag(&mut h, a, b);
        strokes.push((wa, wb));
    }
    let prep = h.state().prep().unwrap();
    let matrix = prep
        .label_list()
        .iter()
        .find(|l| l.name == "matrix")
        .unwrap()
        .value;
    assert!(prep.voxels(matrix) > 0, "{:?}", h.state().status());
    assert!(!prep.stroking(), "each stroke ended at the release");
    // 2. interpolate along k (the stage's axis)
    h.get_by_label("Interpolate along k").click();
    h.step();
    // 3. grow the specimen from the braincase wall through values ≥ 22000
    h.get_by_label("specimen").click();
    h.step();
    h.get_by_label("grow").click();
    h.step();
    h.state_mut().send(PrepCommand::SetGrow(GrowSettings {
        lo: 22000.0,
        hi: f64::INFINITY,
        connectivity: Connectivity::Faces6,
        max_distance_mm: None,
    }));
    let (p, seed) = on_stage(&mut h, [1.224, 1.44, 1.55]);
    click(&mut h, p);
    let specimen = 1;
    let grown = h.state().prep().unwrap().voxels(specimen);
    assert!(grown > 1000, "{:?}", h.state().status());
    // undo and redo by keys
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Z);
    h.step();
    assert_eq!(h.state().prep().unwrap().voxels(specimen), 0);
    h.key_press_modifiers(Modifiers::COMMAND, egui::Key::Y);
    h.step();
    assert_eq!(h.state().prep().unwrap().voxels(specimen), grown);
    // the planes draw the labels at the latest revision
    h.step();
    match h.state().requested(ViewId::PlaneK) {
        Some(sutura::gui::worker::RenderKey::Plane(k)) => {
            let o = k.labels.expect("labels drawn over the stage");
            assert_eq!(o.revision, h.state().prep().unwrap().revision());
        }
        other => panic!("{other:?}"),
    }
    // the 3D view keeps the specimen only: its copy holds the scan's minimum outside it
    h.get_by_label("3D view: ticked labels only").click();
    h.step();
    h.step();
    match h.state().requested(ViewId::Volume) {
        Some(sutura::gui::worker::RenderKey::Volume(k)) => {
            assert!(k.kept.is_some_and(|kk| kk.kept.contains(specimen)));
        }
        other => panic!("{other:?}"),
    }
    let kept = h.state().prep().unwrap().pick_volume().unwrap().clone();
    let opened = h.state().document().scan.clone().unwrap();
    let original = opened.whole().unwrap();
    let min = original.percentiles(&[0.0])[0];
    let truth_free = [2, 2, 2]; // a corner of the rock block, outside the skull
    let at = sutura_core::geometry::VoxelIndex::new(truth_free[0], truth_free[1], truth_free[2]);
    assert!(original.value(at).unwrap() > min);
    assert!((kept.value(at).unwrap() - min).abs() < 1e-9);
    // saved by the button
    h.get_by_label("Save").click();
    h.step();
    assert!(!h.state().prep().unwrap().is_dirty());
    // the specimen's surface written as a mesh by the tab's button, and its report
    h.get_by_label("Write PLY").click();
    h.step();
    let (mesh_path, report) = h.state().prep().unwrap().last_mesh.clone().unwrap();
    assert_eq!(mesh_path, dir.path().join("RM-001-specimen.ply"));
    assert!(mesh_path.exists());
    assert!(report.closed, "{report:?}");

    // the command line, given the points the window's tools received
    let cli = dir.path().join("cli.labels.zarr");
    let run = run_cli;
    let (s, l) = (scan.to_str().unwrap(), cli.to_str().unwrap());
    run(&[
        "labels", "new", "--quiet", s, "-o", l, "--label", "specimen", "--label", "matrix",
    ]);
    for (a, b) in &strokes {
        let points = format!("{};{}", triple(*a), triple(*b));
        run(&[
            "labels", "brush", "--quiet", s, "--labels", l, "--label", "matrix", "--points",
            &points, "--radius", "90um",
        ]);
    }
    run(&["labels", "interpolate", "--labels", l, "--label", "matrix"]);
    run(&[
        "labels",
        "grow",
        "--quiet",
        s,
        "--labels",
        l,
        "--label",
        "specimen",
        "--seed",
        &triple(seed),
        "--range",
        "22000:",
    ]);
    let window = zarr::load(&labels_path).unwrap();
    let line = zarr::load(&cli).unwrap();
    for name in ["specimen", "matrix"] {
        let a = window.mask_of(window.value_of(name).unwrap());
        let b = line.mask_of(line.value_of(name).unwrap());
        assert_eq!(a.count(), b.count(), "{name}");
        assert!(a.words() == b.words(), "{name}: the same voxels");
    }
    // and the recipe frees the skull (README: Dice 0.987 with the true mask)
    let truth = sutura_core::landmarks::scan::open_scan(
        &root.join("sample_volumes/rock/RM-001_skull_truth.nii.gz"),
        None,
        &sutura_core::io::Progress::new(None),
    )
    .unwrap();
    let bytes: Vec<u8> = match truth.voxels() {
        sutura_core::volume::Voxels::U8(b) => b.as_slice().to_vec(),
        _ => panic!("the truth mask is u8"),
    };
    let truth = sutura_core::labels::BitMask::from_bytes(truth.dims(), &bytes);
    let d = dice(&window.mask_of(specimen), &truth);
    assert!(d >= 0.95, "Dice {d}");
    // the command line's mesh of the same label: the same surface
    let cli_mesh = dir.path().join("cli.ply");
    let cli_report = dir.path().join("cli.json");
    run(&[
        "mesh",
        "--quiet",
        s,
        "--labels",
        l,
        "--label",
        "specimen",
        "-o",
        cli_mesh.to_str().unwrap(),
        "--report",
        cli_report.to_str().unwrap(),
    ]);
    let cli: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&cli_report).unwrap()).unwrap();
    assert_eq!(cli["report"]["triangles"], report.triangles);
    assert_eq!(cli["report"]["area_mm2"], report.area_mm2);
    assert_eq!(cli["report"]["volume_mm3"], report.volume_mm3);
    assert_eq!(cli["report"]["closed"], true);
}

/// Runs the command line, asserting it succeeds.
fn run_cli(args: &[&str]) {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_sutura"))
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// With the 3D view keeping only the specimen label, a landmark placed on the 3D view lands on
/// the specimen, not on a rock grain in front of it: the pick is made on the copy the view
/// shows.
#[test]
fn a_surface_pick_lands_on_the_kept_specimen_not_on_the_rock() {
    use nalgebra::Vector3;
    use sutura::gui::{DeskCommand, GrowSettings, PrepCommand};
    use sutura_core::geometry::WorldPoint;
    use sutura_core::labels::region::Connectivity;
    use sutura_core::landmarks::pick::PickOptions;
    use sutura_core::landmarks::pick_source::pick_view_ray;
    let dir = tempfile::tempdir().unwrap();
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let scan = dir.path().join("RM-001.nii.gz");
    std::os::unix::fs::symlink(root.join("sample_volumes/rock/RM-001.nii.gz"), &scan).unwrap();
    let project = dir.path().join("rock.json");
    let (p, s) = (project.to_str().unwrap(), scan.to_str().unwrap());
    let scheme = root.join("sample_volumes/scheme.toml");
    run_cli(&["project", "new", p, "--scheme", scheme.to_str().unwrap()]);
    run_cli(&["project", "add", p, s]);
    let mut h = app_on_project(&project, named("Ana"));
    step_until(&mut h, "the stage picture", |a| {
        a.is_view_current(ViewId::PlaneK)
    });
    // the skull grown from its braincase wall, kept alone in the 3D view
    h.get_by_label("Prepare").click();
    h.step();
    h.get_by_label("New label image").click();
    h.step();
    assert!(
        dir.path().join("RM-001.labels.zarr").exists(),
        "beside the project"
    );
    h.state_mut().send(PrepCommand::SetGrow(GrowSettings {
        lo: 22000.0,
        hi: f64::INFINITY,
        connectivity: Connectivity::Faces6,
        max_distance_mm: None,
    }));
    h.state_mut()
        .send(PrepCommand::Grow(WorldPoint::new(1.224, 1.44, 1.55)));
    h.state_mut().send(PrepCommand::SetKeptIn3d(true));
    h.step();
    h.step();
    let kept = h.state().prep().unwrap().pick_volume().unwrap().clone();
    let scan = h.state().document().scan.clone().unwrap();
    let whole = scan.whole().unwrap();
    // a vertical ray on which a grain of rock lies above the skull
    let iso = h.state().view_state().iso.value;
    let options = PickOptions::new(iso);
    let down = Vector3::new(0.0, 0.0, -1.0);
    let ray = (0..60)
        .flat_map(|a| (0..44).map(move |b| (f64::from(a) * 0.072, f64::from(b) * 0.072)))
        .map(|(x, y)| WorldPoint::new(x, y, 3.0))
        .find_map(|through| {
            let on_kept = pick_view_ray(&*kept, through, down, &options).ok()??;
            let on_whole = pick_view_ray(whole, through, down, &options).ok()??;
            (on_whole.point.distance_mm(on_kept.point) > 0.2).then_some((through, on_kept))
        })
        .expect("a ray meeting rock before the skull");
    // place the first landmark on the 3D view along that ray
    h.get_by_label("Landmarks").click();
    h.step();
    h.state_mut().send(DeskCommand::StartTrial);
    h.step();
    h.state_mut().send(DeskCommand::TogglePlacing);
    h.step();
    h.state_mut().send(DeskCommand::PlaceOnSurface {
        through: ray.0,
        direction: down,
    });
    h.step();
    let d = h.state().desk().unwrap();
    let current = d.session.project.specimen("RM-001").unwrap();
    let placed = current.trials[0]
        .landmarks
        .iter()
        .find_map(|l| l.position_mm)
        .unwrap_or_else(|| panic!("nothing placed: {:?}", h.state().status()));
    let p = ray.1.point.0;
    assert!(
        (placed[0] - p.x).abs() < 1e-9
            && (placed[1] - p.y).abs() < 1e-9
            && (placed[2] - p.z).abs() < 1e-9,
        "{placed:?} vs {p:?}"
    );
}

/// A specimen's scan larger than the window's memory budget is not read: the window offers to
/// build an OME-Zarr store of it in the store folder, builds it, and shows the scan through the
/// volume interface (a chunk cache of a few chunks, the 3D view from a coarser level). Every
/// view draws; the cursor read-out and a snapped landmark are those of the scan in memory (the
/// pick reads full-resolution chunks around the click); the record's fingerprint check passes
/// on the store; opening the specimen again takes the store already built, without asking.
#[test]
#[allow(clippy::too_many_lines)] // reason: one user's session, step by step
fn a_scan_over_the_memory_budget_is_shown_from_a_store_built_for_it() {
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let cache = dir.path().join("stores");
    let prefs = Preferences {
        operator: "Ana Ruiz".into(),
        ..over_budget(&cache)
    };
    let app = App::new(prefs, Some(path.clone()));
    let mut h = harness(app);
    step_until(&mut h, "the question about the store", |a| {
        matches!(a.prompt(), Some(Prompt::BuildStore { .. }))
    });
    assert!(h.state().document().scan.is_none(), "nothing was read");
    // a dialog takes a frame to lay itself out before its buttons can be clicked
    h.step();
    h.get_by_label("Build the store and open it").click();
    step_until(&mut h, "the store built and opened", |a| {
        a.scan_of().is_some() && !a.is_loading()
    });
    assert_eq!(h.state().scan_of(), Some("HDC-001"));
    assert!(h.state().prompt().is_none(), "the record's checks pass");
    let stores = names_in(&cache);
    assert_eq!(stores.len(), 1, "{stores:?}");
    assert!(stores[0].starts_with("HDC-001-") && stores[0].ends_with(".ome.zarr"));
    let scan = h.state().document().scan.clone().unwrap();
    assert!(scan.whole().is_none(), "read through the store, not whole");
    assert!(scan.grid().level_count() > 1);
    // the scan in memory as the project places it (a folder of TIFF slices and the recorded
    // voxel size)
    let (whole, _) = Project::load(&path)
        .unwrap()
        .specimen("HDC-001")
        .unwrap()
        .scan
        .open(&path, &sutura_core::io::Progress::none())
        .unwrap();
    assert_eq!(scan.grid().dims(), whole.dims());
    assert_eq!(
        scan.iso,
        sutura_core::landmarks::pick::default_iso_value(&whole)
    );

    // every view draws, the 3D view from a level within its share of the budget
    for view in ViewId::ALL {
        h.state_mut().send(PrefsCommand::SetStage(view));
        step_until(&mut h, "the view's picture", |a| a.is_view_current(view));
        assert!(
            h.state().status().is_none_or(|s| !s.is_error()),
            "{view:?}: {:?}",
            h.state().status()
        );
    }
    h.state_mut().send(PrefsCommand::SetStage(ViewId::PlaneK));
    step_until(&mut h, "the stage picture", |a| {
        a.is_view_current(ViewId::PlaneK)
    });

    // the read-out under the pointer is the voxel's value
    let centre = stage_centre(&h);
    let p0 = centre + Vec2::new(-40.0, 10.0);
    h.hover_at(p0);
    h.step();
    let hover = h.state().view_state().hover.expect("a read-out");
    let voxel = hover.voxel.expect("over the scan");
    assert_eq!(hover.value, whole.value(voxel));

    // a snapped landmark lands where the pick on the scan in memory does
    h.get_by_label("New trial").click();
    h.step();
    h.step();
    assert!(h.state().is_placing());
    let lm = h.state().desk().unwrap().current.clone().unwrap();
    h.hover_at(p0);
    h.step();
    let w0 = world_at(&h, p0);
    let threshold = h.state().view_state().iso.value;
    let m = h.state().screen_map(ViewId::PlaneK).unwrap();
    click(&mut h, p0);
    let e = h
        .state()
        .desk()
        .unwrap()
        .trial_ref()
        .unwrap()
        .landmark(&lm)
        .cloned()
        .expect("placed");
    assert_eq!(e.method, Some(Method::Surface));
    let clicked = e.pick.as_ref().unwrap().origin_mm;
    assert!(close(clicked, w0, 1e-9), "{clicked:?} vs {w0:?}");
    let pick = sutura_core::landmarks::pick_source::snap_to_boundary(
        &whole,
        sutura_core::geometry::WorldPoint::new(clicked[0], clicked[1], clicked[2]),
        m.u.cross(&m.v),
        threshold,
    )
    .unwrap()
    .expect("a boundary within reach of the click");
    let want = [pick.point.0.x, pick.point.0.y, pick.point.0.z];
    assert!(
        close(e.position_mm.unwrap(), want, 1e-9),
        "{e:?} vs {want:?}"
    );

    // the scan is prepared in the window as in memory; its label image lives in the store
    {
        use sutura::gui::{GrowSettings, PrepCommand};
        use sutura_core::labels::region::{Connectivity, GrowOptions, IntensityRange};
        use sutura_core::labels::{Combine, LabelVolume, ops};
        h.get_by_label("Prepare").click();
        h.step();
        h.get_by_label("New label image").click();
        h.step();
        assert!(h.state().prep().is_some(), "{:?}", h.state().status());
        // where the scan's label image goes whatever the budget: beside the project
        let store = dir.path().join("HDC-001.labels.zarr");
        assert!(store.join("zarr.json").is_file());
        let iso = h.state().view_state().iso.value;
        h.state_mut().send(PrepCommand::SetGrow(GrowSettings {
            lo: iso,
            hi: f64::INFINITY,
            connectivity: Connectivity::Faces6,
            max_distance_mm: None,
        }));
        // the brightest voxel seeds the region
        let d = whole.dims();
        let seed = (0..d[2])
            .flat_map(|k| (0..d[1]).flat_map(move |j| (0..d[0]).map(move |i| [i, j, k])))
            .max_by(|a, b| {
                let v = |p: &[usize; 3]| {
                    whole
                        .value(sutura_core::geometry::VoxelIndex::new(p[0], p[1], p[2]))
                        .unwrap()
                };
                v(a).total_cmp(&v(b))
            })
            .unwrap();
        let at = whole.voxel_to_world(
            sutura_core::geometry::VoxelIndex::new(seed[0], seed[1], seed[2]).centre(),
        );
        h.state_mut().send(PrepCommand::Grow(at));
        h.step();
        let grown = h.state().prep().unwrap().voxels(1);
        let mut lv = LabelVolume::new(whole.dims(), whole.spacing_mm());
        let specimen = lv.add_label("specimen").unwrap();
        let options = GrowOptions {
            range: IntensityRange::new(iso, f64::INFINITY).unwrap(),
            connectivity: Connectivity::Faces6,
            max_distance_mm: None,
        };
        ops::grow_label(
            &mut lv,
            &whole,
            specimen,
            seed,
            &options,
            false,
            Combine::Add,
            false,
        )
        .unwrap();
        assert!(grown > 1000, "{:?}", h.state().status());
        assert_eq!(grown, lv.counts()[usize::from(specimen)]);
        assert!(
            !h.state().prep().unwrap().scan_in_memory,
            "the 3D view cannot keep labels of a scan read from its store"
        );
        h.get_by_label("Save").click();
        h.step();
        let saved = sutura_core::labels::zarr::load(&store).unwrap();
        assert_eq!(saved.counts()[1], grown);
        h.get_by_label("Landmarks").click();
        h.step();
    }

    // another specimen and back: the store built is opened without asking again
    h.get_by_label("HDC-002").click();
    step_until(&mut h, "the question for HDC-002", |a| {
        matches!(a.prompt(), Some(Prompt::BuildStore { .. }))
    });
    h.key_press(egui::Key::Escape);
    h.step();
    h.step();
    assert!(h.state().prompt().is_none());
    h.get_by_label("HDC-001").click();
    step_until(&mut h, "HDC-001 from its store", |a| {
        a.scan_of() == Some("HDC-001") && !a.is_loading() && a.prompt().is_none()
    });
    assert!(
        h.state()
            .document()
            .scan
            .as_ref()
            .unwrap()
            .whole()
            .is_none()
    );
}

/// A scan over the memory budget is added to a project without being read whole: a store is
/// built for it in the store folder and the specimen recorded from it — the same record (path,
/// voxel size, placement, fingerprint) as reading the scan whole gives.
#[test]
fn a_scan_over_the_budget_is_added_from_a_store_with_the_record_reading_it_whole_gives() {
    use sutura_core::landmarks::project::create::{NewSpecimen, specimen_from_scan};
    let dir = tempfile::tempdir().unwrap();
    let path = project_copy(dir.path());
    let cache = dir.path().join("stores");
    let app = App::new(over_budget(&cache), Some(path.clone()));
    let mut h = harness(app);
    step_until(&mut h, "the question about HDC-001's store", |a| {
        matches!(a.prompt(), Some(Prompt::BuildStore { .. }))
    });
    h.key_press(egui::Key::Escape);
    h.step();
    let new = NewSpecimen {
        scan: dir.path().join("HDC-003.nii.gz"),
        id: "HDC-003-again".into(),
        voxel_size_mm: None,
        groups: std::collections::BTreeMap::new(),
    };
    h.state_mut()
        .send(AppCommand::AddSpecimens(vec![new.clone()]));
    step_until(&mut h, "the specimen added", |a| {
        !a.is_loading()
            && a.desk()
                .is_some_and(|d| d.session.project.specimen("HDC-003-again").is_some())
    });
    let added = h
        .state()
        .desk()
        .unwrap()
        .session
        .project
        .specimen("HDC-003-again")
        .unwrap()
        .clone();
    let (whole, _) = specimen_from_scan(&path, &new, &sutura_core::io::Progress::none()).unwrap();
    assert_eq!(
        added.scan, whole.scan,
        "the record reading the scan whole gives"
    );
    let stores = names_in(&cache);
    assert_eq!(stores.len(), 1, "{stores:?}");
    assert!(stores[0].starts_with("HDC-003-"), "{stores:?}");
}

/// The memory budget is typed in File ▸ Settings: a number of GiB sets it, a word is refused
/// with a message under the field (the budget unchanged), an empty field is automatic again.
#[test]
fn the_memory_budget_is_typed_in_the_file_menu() {
    let mut h = harness(App::new(Preferences::default(), None));
    h.step();
    let field = "Memory budget, GiB";
    let enter = |h: &mut Harness<'_, App>, text: &str| {
        // the menu as a user opens it: File, then Settings
        if h.query_by_label(field).is_none() {
            if h.query_by_label("Settings").is_none() {
                h.get_by_label("File").click();
                h.step();
                h.step(); // a menu lays itself out for a frame before its entries can be clicked
            }
            h.get_by_label("Settings").click();
            h.step();
            h.step();
        }
        h.get_by_label(field).focus();
        h.step();
        h.key_press_modifiers(Modifiers::COMMAND, egui::Key::A);
        h.key_press(egui::Key::Backspace);
        h.step();
        if !text.is_empty() {
            h.get_by_label(field).type_text(text);
            h.step();
        }
        h.key_press(egui::Key::Tab); // the field loses the focus
        h.step();
        h.step();
    };
    enter(&mut h, "0.5");
    assert_eq!(h.state().preferences().memory_budget_gib, Some(0.5));
    assert_eq!(h.state().preferences().budget().bytes, 1 << 29);
    enter(&mut h, "lots");
    assert_eq!(h.state().preferences().memory_budget_gib, Some(0.5));
    assert!(
        h.query_by_label_contains("a memory budget is a number of GiB")
            .is_some(),
        "the refusal is shown"
    );
    enter(&mut h, "");
    assert_eq!(h.state().preferences().memory_budget_gib, None);
    assert!(
        h.query_by_label_contains("a memory budget is a number")
            .is_none()
    );
}
