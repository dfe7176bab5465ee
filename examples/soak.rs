//! Soak figures (not a test): 500 fills of random masks on random images in one process, with the
//! resident memory sampled along the way (it should stay flat), then 1000 synthetic strokes in the
//! window's live mode, with the frame times' percentiles.
//!
//! `cargo run --release --example soak [FILLS] [STROKES]`

use std::time::{Duration, Instant};

use egui::Pos2;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use reweave::fill::{FillParams, fill};
use reweave::gui::App;
use reweave::raster::{self, Layout, Raster, SampleFormat};
use reweave::synth::{MaskFamily, Rng, smooth_plane};

fn rss_mb() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    let kb = status
        .lines()
        .find(|l| l.starts_with("VmRSS:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse::<f64>().ok())
        .unwrap_or(0.0);
    kb / 1024.0
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let fills: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(500);
    let strokes: usize = args.next().and_then(|a| a.parse().ok()).unwrap_or(1000);

    // 1. Many fills in one process.
    let mut rng = Rng::new(42);
    let mut samples = Vec::new();
    let started = Instant::now();
    for k in 0..fills {
        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
        let n = 128 + (rng.uniform() * 640.0) as usize;
        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
        let family = MaskFamily::ALL[(rng.uniform() * 5.0) as usize % 5];
        let mask = family.mask(n, k as u64);
        let mut plane = smooth_plane(n, n, k as u64);
        fill(&mut [&mut plane[..]], &mask, &FillParams::default())?;
        if k % 50 == 49 {
            samples.push(rss_mb());
        }
    }
    let later = &samples[samples.len() / 2..];
    let (lo, hi) = later.iter().fold((f64::MAX, 0f64), |(a, b), &v| (a.min(v), b.max(v)));
    println!(
        "{fills} fills of random masks (128²–768²) in {:.1} s; resident MB every 50 fills: {:?}; second half spread {:.1} MB",
        started.elapsed().as_secs_f64(),
        samples.iter().map(|v| v.round()).collect::<Vec<_>>(),
        hi - lo
    );

    // 2. Strokes in live mode.
    let dir = tempfile::tempdir()?;
    let (w, h) = (2000, 1500);
    let mut r = Raster::new(w, h, Layout::Rgb, SampleFormat::U8);
    for (c, p) in r.planes.iter_mut().enumerate() {
        for (i, v) in p.iter_mut().enumerate() {
            #[allow(clippy::cast_precision_loss)]
            let (x, y) = ((i % w) as f32, (i / w) as f32);
            *v = (120.0 + 60.0 * (x / 170.0 + c as f32).sin() * (y / 130.0).cos()).round();
        }
    }
    let path = dir.path().join("photo.png");
    raster::save(&r, &path)?;
    let mut harness =
        Harness::builder().with_size((1400.0, 900.0)).build_ui_state(|ui, app: &mut App| app.ui(ui), App::default());
    harness.state_mut().open_field = path.display().to_string();
    harness.run();
    harness.get_by_label("Open").click();
    harness.step();
    while harness.state().busy() {
        harness.step();
        std::thread::sleep(Duration::from_millis(2));
    }
    harness.state_mut().live = true;
    harness.state_mut().radius = 2.0;
    let mut frames = Vec::new();
    let mut timed = |h: &mut Harness<'_, App>| {
        let t = Instant::now();
        h.step();
        frames.push(t.elapsed().as_secs_f64());
    };
    let before = rss_mb();
    let mut resident = Vec::new();
    for k in 0..strokes {
        if k % 100 == 99 {
            resident.push(rss_mb().round());
        }
        let view = harness.state().view;
        #[allow(clippy::cast_precision_loss)]
        let (x, y) = (100.0 + rng.uniform() as f32 * 1700.0, 100.0 + rng.uniform() as f32 * 1300.0);
        #[allow(clippy::cast_precision_loss)]
        let (a, b) = (
            view.screen_from_image(Pos2::new(x, y)),
            view.screen_from_image(Pos2::new(x + 40.0 + (k % 7) as f32 * 10.0, y + 15.0)),
        );
        harness.hover_at(a);
        timed(&mut harness);
        harness.drag_at(a);
        timed(&mut harness);
        for s in 1..=4 {
            #[allow(clippy::cast_precision_loss)]
            harness.hover_at(a + (b - a) * (s as f32 / 4.0));
            timed(&mut harness);
        }
        harness.drop_at(b);
        timed(&mut harness);
        while harness.state().busy() {
            timed(&mut harness);
            std::thread::sleep(Duration::from_millis(1));
        }
    }
    frames.sort_by(f64::total_cmp);
    let pct = |p: f64| {
        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss, clippy::cast_precision_loss)]
        let i = ((frames.len() - 1) as f64 * p).round() as usize;
        frames[i] * 1000.0
    };
    println!(
        "{strokes} live strokes on a {w}×{h} RGB image: {} frames, p50 {:.1} ms, p99 {:.1} ms, max {:.1} ms; resident {:.0} MB before, every 100 strokes {resident:?}, {:.0} MB after",
        frames.len(),
        pct(0.5),
        pct(0.99),
        pct(1.0),
        before,
        rss_mb()
    );
    Ok(())
}
