//! The workstation driven through its real UI with `egui_kittest` (no display, no GPU): events
//! go in as a user's pointer and keys would, and the tests check the app's state afterwards.

use std::path::PathBuf;
use std::time::{Duration, Instant};

use eframe::egui::{
    self, Event, Modifiers, MouseWheelSource, MouseWheelUnit, PointerButton, Pos2, TouchPhase, Vec2,
};
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use sutura::gui::{App, Command, Preferences, ViewId};

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
        assert!(
            t0.elapsed() < Duration::from_mins(2),
            "timed out waiting for {what}"
        );
        std::thread::sleep(Duration::from_millis(5));
    }
}

/// The app on the sample scan, its stage picture on screen.
fn app_on_sample() -> Harness<'static, App> {
    let app = App::new(Preferences::default(), Some(sample()));
    let mut h = Harness::builder()
        .with_size(Vec2::new(1280.0, 800.0))
        .build_ui_state(|ui, app: &mut App| app.ui_for_test(ui), app);
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
    app.view_state()
        .slice(&scan.volume, ViewId::PlaneK)
        .unwrap()
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
        scan.volume.dims(),
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
    let map = h.state().view_state().maps[ViewId::PlaneK.index()].unwrap();
    let under = map.world([f64::from(p.x), f64::from(p.y)]);
    wheel(&h, 2.0, Modifiers::COMMAND);
    h.step();
    h.step();
    let vs = h.state().view_state();
    assert!(vs.planes[ViewId::PlaneK.index()].zoom > 1.2);
    let after = vs.maps[ViewId::PlaneK.index()].unwrap();
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
    h.state_mut().send(Command::SetStage(ViewId::Volume));
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
    let map = h.state().view_state().maps[ViewId::PlaneK.index()].unwrap();
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
    let expected = h.state().view_state().maps[ViewId::PlaneK.index()]
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
    h.state_mut().send(Command::Open(bad));
    step_until(&mut h, "the failed load", |a| !a.is_loading());
    let msg = h
        .state()
        .view_state()
        .message
        .clone()
        .expect("an error message");
    assert!(msg.1 && msg.0.contains("not_a_scan.nii"), "{msg:?}");
    assert!(h.state().document().scan.is_some());
}

#[test]
fn a_slice_folder_opens_with_the_voxel_size_given() {
    let app = App::new(Preferences::default(), None);
    let mut h = Harness::builder()
        .with_size(Vec2::new(1280.0, 800.0))
        .build_ui_state(|ui, app: &mut App| app.ui_for_test(ui), app);
    h.step();
    // a bare number is refused: µm and mm differ by 1000
    h.state_mut().send(Command::SetTiffVoxelSize("36".into()));
    h.step();
    let msg = h.state().view_state().message.clone().expect("an error");
    assert!(msg.1, "{msg:?}");
    assert!(h.state().preferences().tiff_voxel_size.is_empty());
    h.state_mut()
        .send(Command::SetTiffVoxelSize("36um,36um,50um".into()));
    let folder = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample_volumes/HDC-001_slices");
    h.state_mut().send(Command::Open(folder));
    step_until(&mut h, "the slice folder to load", |a| {
        a.document().scan.is_some() && !a.is_loading()
    });
    let sp = h
        .state()
        .document()
        .scan
        .as_ref()
        .unwrap()
        .volume
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
    assert!(h.query_by_label_contains("scheme.json").is_none());
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
