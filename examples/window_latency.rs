//! Figures (not a test) for the window as a user meets it, driven headless through egui_kittest:
//! opening a 24-megapixel RGB photo, and with Live on, the time from releasing the mouse after a
//! scratch-sized stroke until the repaired pixels are in the window's result.
//!
//! `cargo run --release --example window_latency`

use std::time::{Duration, Instant};

use egui::Pos2;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use reweave::gui::App;
use reweave::raster::{self, Layout, Raster, SampleFormat};

fn settle(h: &mut Harness<'_, App>) {
    h.step(); // the click or release is handled in this frame
    while h.state().busy() {
        h.step();
        std::thread::sleep(Duration::from_millis(1));
    }
    h.step();
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let dir = tempfile::tempdir()?;
    let (w, h) = (6000, 4000);
    let mut r = Raster::new(w, h, Layout::Rgb, SampleFormat::U8);
    for (c, p) in r.planes.iter_mut().enumerate() {
        for (i, v) in p.iter_mut().enumerate() {
            #[allow(clippy::cast_precision_loss)]
            let (x, y) = ((i % w) as f32, (i / w) as f32);
            *v = (120.0 + 60.0 * (x / 400.0 + c as f32).sin() * (y / 300.0).cos()).round();
        }
    }
    let path = dir.path().join("photo.png");
    raster::save(&r, &path)?;

    let mut harness =
        Harness::builder().with_size((1400.0, 900.0)).build_ui_state(|ui, app: &mut App| app.ui(ui), App::default());
    harness.state_mut().open_field = path.display().to_string();
    harness.run();
    let t0 = Instant::now();
    harness.get_by_label("Open").click();
    settle(&mut harness);
    println!("open 24 MP PNG: {:.3} s until shown", t0.elapsed().as_secs_f64());

    harness.state_mut().live = true;
    harness.state_mut().radius = 1.5;
    for run in 0..5 {
        let view = harness.state().view;
        let y = 1000.0 + 400.0 * run as f32;
        let (a, b) =
            (view.screen_from_image(Pos2::new(1000.0, y)), view.screen_from_image(Pos2::new(1300.0, y + 100.0)));
        harness.hover_at(a);
        harness.step();
        harness.drag_at(a);
        harness.step();
        for k in 1..=8 {
            harness.hover_at(a + (b - a) * (k as f32 / 8.0));
            harness.step();
        }
        harness.drop_at(b);
        let released = Instant::now();
        harness.step();
        settle(&mut harness);
        println!(
            "live re-fill {run}: {:.3} s from release to repaired result ({} masked pixels)",
            released.elapsed().as_secs_f64(),
            harness.state().doc.as_ref().map_or(0, |d| d.marked)
        );
    }
    // Difference: the heat map is built a few tiles per frame; report the slowest frame.
    harness.get_by_label("Difference").click();
    let mut slowest = 0f64;
    let started = Instant::now();
    for _ in 0..40 {
        let t = Instant::now();
        harness.step();
        slowest = slowest.max(t.elapsed().as_secs_f64());
    }
    println!(
        "difference view: slowest of 40 frames {slowest:.3} s ({:.3} s for all 40)",
        started.elapsed().as_secs_f64()
    );
    Ok(())
}
