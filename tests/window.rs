//! The window, driven as a user drives it (egui_kittest, through the accessibility tree and
//! pointer events): open an image, paint a stroke, fill, undo and redo, compare, save.

// Source: the expected counts and values follow from the fixtures drawn here (a 64×48 card, a
// stroke of known radius); a dilation by 1 adds the 4-neighbours first (an octagon step of
// mathematical morphology, common practice); the pictures in tests/snapshots are the reviewed
// looks, compared by egui_kittest's snapshot check (egui_kittest 0.37, `Harness::snapshot`).

use std::path::Path;

use egui::Pos2;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use reweave::gui::{App, Compare, Recovery};
use reweave::raster::{self, Layout, Raster, SampleFormat};

fn fixture(dir: &Path) -> std::path::PathBuf {
    let mut r = Raster::new(64, 48, Layout::Rgb, SampleFormat::U8);
    for (c, p) in r.planes.iter_mut().enumerate() {
        for (i, v) in p.iter_mut().enumerate() {
            let (x, y) = ((i % 64) as f32, (i / 64) as f32);
            // A smooth scene with a bright scratch along row 24, which the stroke covers.
            *v = if (23..=25).contains(&(i / 64)) && (22..42).contains(&(i % 64)) {
                255.0
            } else {
                (120.0 + 50.0 * (x / 6.0 + c as f32).sin() * (y / 8.0).cos()).round()
            };
        }
    }
    let path = dir.join("card.png");
    raster::save(&r, &path).unwrap();
    path
}

fn harness() -> Harness<'static, App> {
    Harness::builder().with_size((1200.0, 800.0)).build_ui_state(|ui, app: &mut App| app.ui(ui), App::default())
}

/// A window tall enough that the whole tools panel shows without scrolling.
fn tall_harness() -> Harness<'static, App> {
    Harness::builder().with_size((1200.0, 1200.0)).build_ui_state(|ui, app: &mut App| app.ui(ui), App::default())
}

/// Steps until background work is done (at most about 10 s).
fn settle(h: &mut Harness<'_, App>) {
    for _ in 0..1000 {
        h.step();
        if !h.state().busy() {
            h.step();
            return;
        }
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    panic!("background work did not finish");
}

/// Types `path` into the image field and opens it, waiting for the load.
fn open(h: &mut Harness<'_, App>, path: &Path) {
    h.state_mut().open_field = path.display().to_string();
    h.run();
    h.get_by_label("Open").click();
    settle(h);
}

/// Drags with the primary button from `a` to `b` (image coordinates) in `steps` moves.
fn drag(h: &mut Harness<'_, App>, a: Pos2, b: Pos2, steps: usize) {
    let view = h.state().view;
    let (a, b) = (view.screen_from_image(a), view.screen_from_image(b));
    h.hover_at(a);
    h.step();
    h.drag_at(a);
    h.step();
    for k in 1..=steps {
        h.hover_at(a + (b - a) * (k as f32 / steps as f32));
        h.step();
    }
    h.drop_at(b);
}

#[test]
fn open_paint_fill_undo_compare_save() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(dir.path());
    let mut h = harness();
    open(&mut h, &input);
    assert!(h.state().doc.is_some(), "opened: {}", h.state().status);

    // Paint a horizontal stroke across the middle of the image.
    h.state_mut().radius = 2.0;
    drag(&mut h, Pos2::new(20.0, 24.0), Pos2::new(44.0, 24.0), 10);
    h.run();
    let painted = h.state().doc.as_ref().unwrap().mask.count();
    assert!(painted > 40, "the stroke marked {painted} pixels");
    assert!(h.state().doc.as_ref().unwrap().mask.get(32, 24));

    // Fill in the background; only masked samples change.
    h.get_by_label("Fill").click();
    settle(&mut h);
    {
        let d = h.state().doc.as_ref().unwrap();
        let result = d.result.as_ref().expect("a result");
        let mut changed = 0;
        for (p, o) in result.iter().zip(&d.original.planes) {
            for (i, (&a, &b)) in p.iter().zip(o).enumerate() {
                if d.mask.bits()[i] {
                    changed += usize::from(a != b);
                } else {
                    assert_eq!(a.to_bits(), b.to_bits(), "pixel {i} outside the mask changed");
                }
            }
        }
        assert!(changed > 0);
        assert!(h.state().last_fill.is_some());
    }

    // Undo and redo the stroke.
    h.get_by_label("Undo").click();
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 0);
    h.get_by_label("Redo").click();
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), painted);

    // Compare modes.
    for (label, mode) in [("Split", Compare::Split), ("Before", Compare::Before), ("After", Compare::After)] {
        h.get_by_label(label).click();
        h.run();
        assert_eq!(h.state().compare, mode);
    }
    h.key_press(egui::Key::B);
    h.run();
    assert_eq!(h.state().compare, Compare::Blink);
    assert!(h.state().blink_before);

    // Save and read back: the repaired pixels and the rest, exactly.
    let out = dir.path().join("card-repaired.png");
    h.state_mut().save_field = out.display().to_string();
    h.run();
    h.get_by_label("Save result").click();
    settle(&mut h);
    let saved = raster::load(&out).unwrap_or_else(|_| panic!("{}", h.state().status));
    let d = h.state().doc.as_ref().unwrap();
    let expected = d.result_raster();
    for (a, b) in saved.planes.iter().zip(&expected.planes) {
        for (x, y) in a.iter().zip(b) {
            assert_eq!(*x, SampleFormat::U8.quantize(*y));
        }
    }
}

#[test]
fn a_file_that_fails_says_why_in_the_status() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("notes.png");
    std::fs::write(&bad, "not an image").unwrap();
    let mut h = harness();
    open(&mut h, &bad);
    assert!(h.state().doc.is_none());
    assert!(h.state().status.contains("notes.png"), "{}", h.state().status);
}

#[test]
fn a_geotiff_with_a_void_opens_with_the_void_marked_and_saves_with_its_tags() {
    let dir = tempfile::tempdir().unwrap();
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-images/island-elevation.tif");
    let mut h = harness();
    open(&mut h, &input);
    // The sample's void is 1258 pixels of -32768, its declared no-data (GDAL_NODATA).
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 1258, "{}", h.state().status);
    h.get_by_label("Fill").click();
    settle(&mut h);
    let out = dir.path().join("island-filled.tif");
    h.state_mut().save_field = out.display().to_string();
    h.run();
    h.get_by_label("Save result").click();
    settle(&mut h);
    let saved = raster::load(&out).unwrap_or_else(|_| panic!("{}", h.state().status));
    assert!(saved.planes[0].iter().all(|&v| v != -32768.0), "no void left");
    assert_eq!(saved.metadata.tiff.as_ref().unwrap().tags, raster::load(&input).unwrap().metadata.tiff.unwrap().tags);
}

#[test]
fn found_damage_is_shown_for_review_then_added() {
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-images/starfield-frame.tif");
    let mut h = harness();
    open(&mut h, &input);
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 0);
    h.get_by_label("Find").click();
    settle(&mut h);
    let found = h.state().proposal.as_ref().expect("a proposal").count();
    assert!(found > 250, "the dead column and the hot and dead pixels: {found}");
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 0, "nothing joins the mask before review");
    h.get_by_label("Add").click();
    h.run();
    assert!(h.state().proposal.is_none());
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), found);
    h.get_by_label("Undo").click();
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 0, "adding is undoable");
}

#[test]
fn box_pick_grow_shrink_and_difference() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(dir.path());
    let mut h = harness();
    open(&mut h, &input);

    // Box: drag from the centre of pixel (10, 10) to that of (19, 15): pixels 10..20 × 10..16.
    h.get_by_label("Box").click();
    h.run();
    drag(&mut h, Pos2::new(10.5, 10.5), Pos2::new(19.5, 15.5), 5);
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 60, "a 10×6 box");

    // Dilate by 1 (an octagon step: 4-neighbours first) and erode back.
    h.get_by_label("Dilate").click();
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 60 + 2 * 10 + 2 * 6);
    h.get_by_label("Erode").click();
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 60);

    // Pick by value: the bright scratch (255) is one connected region of 3 rows × 20 columns.
    h.get_by_label("Clear").click();
    h.run();
    h.get_by_label("Pick by value").click();
    h.run();
    h.state_mut().pick_tolerance = 1.0;
    let p = h.state().view.screen_from_image(Pos2::new(30.5, 24.5));
    h.hover_at(p);
    h.step();
    h.drag_at(p);
    h.step();
    h.drop_at(p);
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 60, "{}", h.state().status);

    // Difference after a fill.
    h.get_by_label("Fill").click();
    settle(&mut h);
    h.get_by_label("Difference").click();
    h.run();
    assert_eq!(h.state().compare, Compare::Difference);
}

#[test]
fn live_mode_refills_after_a_stroke_and_saving_over_a_file_asks_first() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(dir.path());
    let mut h = harness();
    open(&mut h, &input);
    h.get_by_label("Live: re-fill after each edit").click();
    h.run();
    assert!(h.state().live);
    drag(&mut h, Pos2::new(22.0, 24.0), Pos2::new(41.0, 24.0), 6);
    h.step();
    settle(&mut h);
    assert!(h.state().doc.as_ref().unwrap().result.is_some(), "filled without pressing Fill");

    // The report of that fill.
    let report = dir.path().join("card.json");
    h.state_mut().report_field = report.display().to_string();
    h.run();
    h.get_by_label("Save report").click();
    // The live fill re-filled the holes near the stroke; the report waits for the whole fill.
    settle(&mut h);
    let bytes = std::fs::read(&report).unwrap_or_else(|e| panic!("{e}: {}", h.state().status));
    let json: serde_json::Value = serde_json::from_slice(&bytes).unwrap();
    assert_eq!(json["unknowns"].as_u64().unwrap() as usize, h.state().doc.as_ref().unwrap().mask.count());
    assert!(json["caution"].as_str().unwrap().contains("estimates"));

    // Saving over an existing file waits for a confirmation.
    let out = dir.path().join("taken.png");
    std::fs::write(&out, b"keep me").unwrap();
    h.state_mut().save_field = out.display().to_string();
    h.run();
    h.get_by_label("Save result").click();
    h.run();
    assert!(h.state().pending_overwrite.is_some());
    assert_eq!(std::fs::read(&out).unwrap(), b"keep me");
    h.get_by_label("Replace").click();
    settle(&mut h);
    assert!(raster::load(&out).is_ok(), "{}", h.state().status);
}

#[test]
fn mask_saved_and_loaded_back_and_zoom_keys() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(dir.path());
    let mut h = harness();
    open(&mut h, &input);
    h.get_by_label("Complement").click();
    h.run();
    let all = h.state().doc.as_ref().unwrap().mask.count();
    assert_eq!(all, 64 * 48);
    let mask = dir.path().join("m.png");
    h.state_mut().mask_field = mask.display().to_string();
    h.run();
    h.get_by_label("Save mask").click();
    settle(&mut h); // written by a worker
    h.get_by_label("Clear").click();
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 0);
    h.get_by_label("Load mask").click();
    h.run();
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), all, "{}", h.state().status);
    let zoom = h.state().view.zoom;
    h.key_press(egui::Key::Plus);
    h.run();
    assert!((h.state().view.zoom / zoom - 1.25).abs() < 1e-3);
}

#[test]
fn holes_over_the_size_limit_are_left_and_reported() {
    let dir = tempfile::tempdir().unwrap();
    let input = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-images/island-elevation.tif");
    let mut h = harness();
    open(&mut h, &input);
    assert_eq!(h.state().doc.as_ref().unwrap().mask.count(), 1258, "the void is marked");
    // Also mark a small box away from the void; then leave holes over 100 pixels.
    h.get_by_label("Box").click();
    h.run();
    drag(&mut h, Pos2::new(20.5, 20.5), Pos2::new(24.5, 24.5), 4);
    h.run();
    h.state_mut().max_hole = Some(100);
    h.get_by_label("Fill").click();
    settle(&mut h);
    let d = h.state().doc.as_ref().unwrap();
    let result = d.result.as_ref().expect("the small hole was filled");
    let w = d.original.width;
    assert_eq!(result[0][175 + 110 * w], -32768.0, "the void (over the limit) is left as it was");
    assert_ne!(result[0][22 + 22 * w], d.original.planes[0][22 + 22 * w], "the box was filled");
    let report = dir.path().join("r.json");
    h.state_mut().report_field = report.display().to_string();
    h.run();
    h.get_by_label("Save report").click();
    settle(&mut h); // hashed and counted by a worker
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&report).unwrap()).unwrap();
    assert_eq!(json["skipped_pixels"], 1258);
    assert_eq!(json["unknowns"], 25);
    assert_eq!(json["nodata_pixels"], 1258);
}

/// Sets the text that changes from run to run (timings, temporary paths) to fixed values, so a
/// picture of the window depends only on what the window shows.
fn steady(h: &mut Harness<'_, App>, status: &str) {
    let app = h.state_mut();
    app.status = status.to_owned();
    if let Some(f) = &mut app.last_fill {
        (f.setup_seconds, f.solve_seconds) = (0.01, 0.02);
    }
    h.run();
}

/// The main states of the window as pictures, compared with the reviewed ones in
/// tests/snapshots (egui_kittest's wgpu renderer; `UPDATE_SNAPSHOTS=1` rewrites them). They are
/// made on Mesa's lavapipe, which `.ci/run` installs; other renderers differ by a few pixels, so
/// the comparison runs when `REWEAVE_SNAPSHOTS` is set, and otherwise the states are only driven.
#[test]
fn main_states_look_as_reviewed() {
    let compare = std::env::var_os("REWEAVE_SNAPSHOTS").is_some() || std::env::var_os("UPDATE_SNAPSHOTS").is_some();
    let shot = |h: &mut Harness<'_, App>, name: &str| {
        if compare {
            h.snapshot(name);
        }
    };
    // A fixed folder, so the path the window shows is the same on every run.
    let dir = std::env::temp_dir().join("reweave-window-looks");
    std::fs::create_dir_all(&dir).unwrap();
    let input = fixture(&dir);
    let mut h =
        Harness::builder().with_size((1100.0, 780.0)).build_ui_state(|ui, app: &mut App| app.ui(ui), App::default());
    open(&mut h, &input);
    steady(&mut h, "opened card.png");
    shot(&mut h, "opened");

    h.state_mut().radius = 2.0;
    drag(&mut h, Pos2::new(20.0, 24.0), Pos2::new(44.0, 24.0), 10);
    h.run();
    steady(&mut h, "painted a stroke");
    shot(&mut h, "painted");

    h.get_by_label("Fill").click();
    settle(&mut h);
    assert!(h.state().doc.as_ref().unwrap().result.is_some());
    steady(&mut h, "filled");
    shot(&mut h, "filled");

    for (label, name, mode) in [
        ("Split", "split", Compare::Split),
        ("Side by side", "side-by-side", Compare::SideBySide),
        ("Difference", "difference", Compare::Difference),
        ("Before", "before", Compare::Before),
    ] {
        h.get_by_label(label).click();
        h.run();
        assert_eq!(h.state().compare, mode);
        steady(&mut h, label);
        shot(&mut h, name);
    }

    h.get_by_label("After").click();
    h.get_by_label("Outline only").click();
    h.run();
    assert!(h.state().outline && h.state().overlay_visible);
    steady(&mut h, "outline");
    shot(&mut h, "outline");
}

#[test]
fn work_is_kept_and_offered_back_after_a_crash() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(dir.path());
    let data = dir.path().join("data");
    let mut h = harness();
    h.state_mut().use_recovery(Some(Recovery::in_dir(data.clone())));
    assert!(h.state().restore_offer.is_none(), "nothing to restore at first");
    open(&mut h, &input);
    h.state_mut().radius = 2.0;
    drag(&mut h, Pos2::new(20.0, 24.0), Pos2::new(44.0, 24.0), 10);
    h.run();
    h.get_by_label("Fill").click();
    settle(&mut h);
    let marked = h.state().doc.as_ref().unwrap().mask.count();
    // The work is written by a background thread at the fill (the window keeps running frames).
    let started = std::time::Instant::now();
    while Recovery::in_dir(data.clone()).found().is_none_or(|s| s.marked != marked) {
        assert!(started.elapsed().as_secs() < 10, "the work was not kept");
        h.step();
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    drop(h); // a crash: the window never exits normally

    let mut h = harness();
    h.state_mut().use_recovery(Some(Recovery::in_dir(data.clone())));
    let offer = h.state().restore_offer.clone().expect("the kept work is offered");
    assert_eq!((offer.image.as_path(), offer.marked), (input.as_path(), marked));
    h.run();
    h.get_by_label("Restore").click();
    settle(&mut h);
    let d = h.state().doc.as_ref().expect("the image is open again");
    assert_eq!(d.path, input);
    assert_eq!(d.mask.count(), marked, "{}", h.state().status);
    assert!(d.mask.get(32, 24));
}

#[test]
fn methods_grain_scientific_and_the_distance_view() {
    use reweave::fill::FillMethod;
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(dir.path());
    let mut h = tall_harness();
    open(&mut h, &input);
    // A wide box: its middle is about 18 px from any known pixel, deeper than the 16 px limit.
    h.get_by_label("Box").click();
    h.run();
    drag(&mut h, Pos2::new(8.5, 5.5), Pos2::new(46.5, 42.5), 6);
    h.run();

    // Pick the guided fill from the method list (the second list labelled Method; the first is
    // the detector's), with grain.
    h.get_all_by_label("Method").last().expect("the method list").click();
    h.run();
    h.get_by_label("Guided: texture from a matching area").click();
    h.run();
    assert_eq!(h.state().method, FillMethod::Guided);
    h.get_by_label("Matched noise").click();
    h.run();
    assert!(h.state().grain.is_some());
    assert!(h.query_by_label_contains("never measured").is_some(), "the texture caution is shown");

    h.get_by_label("Fill").click();
    settle(&mut h);
    let app = h.state();
    let fill = app.last_fill.as_ref().unwrap_or_else(|| panic!("not filled: {}", app.status));
    assert_eq!(fill.method, FillMethod::Guided);
    assert_eq!(fill.placements.len(), 1);
    assert!(fill.grain.is_some());
    let depth = app.doc.as_ref().unwrap().depth.as_ref().expect("distance measured after the fill");
    assert_eq!(depth.deep.len(), 1);
    assert!(depth.deep[0].pixels > 16.0);
    assert!(h.query_by_label_contains("any smooth fill is a guess").is_some(), "the deep-hole warning is shown");

    h.get_by_label("Distance to known pixels").click();
    h.run();
    assert_eq!(h.state().compare, Compare::Distance);

    // The scientific profile takes the invented texture away and keeps it away.
    h.get_by_label("Scientific data: no invented texture").click();
    h.run();
    assert_eq!(h.state().method, FillMethod::Harmonic);
    assert!(h.state().grain.is_none());
    h.get_by_label("Matched noise").click();
    h.run();
    assert!(h.state().grain.is_none(), "grain stays off in the scientific profile");

    h.get_all_by_label("Method").last().expect("the method list").click();
    h.run();
    h.get_by_label("Guided: texture from a matching area").click();
    h.run();
    assert_eq!(h.state().method, FillMethod::Harmonic, "guided is disabled in the scientific profile");

    // The biharmonic fill runs from the window too.
    if h.query_by_label("Biharmonic: keeps slopes (terrain, gradients)").is_none() {
        h.get_all_by_label("Method").last().expect("the method list").click();
        h.run();
    }
    h.get_by_label("Biharmonic: keeps slopes (terrain, gradients)").click();
    h.run();
    assert_eq!(h.state().method, FillMethod::Biharmonic);
    h.get_by_label("Fill").click();
    settle(&mut h);
    assert_eq!(h.state().last_fill.as_ref().unwrap().method, FillMethod::Biharmonic, "{}", h.state().status);
}

#[test]
fn a_dragged_source_is_used_for_its_hole() {
    use reweave::fill::FillMethod;
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(dir.path());
    let mut h = tall_harness();
    open(&mut h, &input);
    h.get_by_label("Box").click();
    h.run();
    drag(&mut h, Pos2::new(4.5, 4.5), Pos2::new(11.5, 9.5), 4);
    h.run();
    h.state_mut().method = FillMethod::Guided;
    h.run();
    h.get_by_label("Fill").click();
    settle(&mut h);
    let automatic = h.state().last_fill.as_ref().unwrap().placements[0];
    assert!(automatic.offset.is_some() && !automatic.chosen);

    // Drag from inside the hole 30 px right and 20 px down: that is the hole's source now.
    h.get_by_label("Drag a source").click();
    h.run();
    drag(&mut h, Pos2::new(6.5, 6.5), Pos2::new(36.5, 26.5), 5);
    h.step();
    settle(&mut h);
    let app = h.state();
    assert_eq!(app.chosen_sources.len(), 1, "{}", app.status);
    let placed = app.last_fill.as_ref().unwrap().placements[0];
    assert_eq!((placed.offset, placed.chosen), (Some((30, 20)), true), "{}", app.status);
    // The filled values are the source's texture plus the harmonic correction: compare with a
    // direct guided fill from the same source.
    let d = app.doc.as_ref().unwrap();
    let mut expected: Vec<Vec<f32>> = d.original.planes.clone();
    let mut views: Vec<&mut [f32]> = expected.iter_mut().map(Vec::as_mut_slice).collect();
    let params = reweave::fill::FillParams {
        method: FillMethod::Guided,
        chosen_sources: app.chosen_sources.clone(),
        ..Default::default()
    };
    reweave::fill::fill(&mut views, &d.mask, &params).unwrap();
    let result = d.result.as_ref().unwrap();
    for (a, b) in result.iter().zip(&expected) {
        for i in 0..a.len() {
            assert!((a[i] - b[i]).abs() < 1e-3, "pixel {i}: {} vs {}", a[i], b[i]);
        }
    }
}
