//! `reweave batch`: many files, one bad file does not stop the rest, re-runs skip finished work,
//! and shards split the work exactly.

// Source: the batch requirements of the detection-and-batch issue (common practice for batch tools:
// one failure does not stop the rest, exit 1 lists failures, shard k of N takes every N-th item).
// The repaired dead column value 1007 holds because an affine row is reproduced exactly by the
// 5-point fill (textbook; ORACLES.md §3).

use std::path::Path;
use std::process::{Command, Output};

use reweave::mask::Mask;
use reweave::raster::{self, Layout, Raster, SampleFormat};

fn reweave(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_reweave")).args(args).output().expect("run reweave")
}

/// 50 small 16-bit frames (two of them corrupt) and a bad-pixel map.
fn archive(dir: &Path) {
    std::fs::create_dir_all(dir.join("in")).unwrap();
    for k in 0..50 {
        let path = dir.join("in").join(format!("frame-{k:03}.png"));
        if k == 17 {
            std::fs::write(&path, b"not a frame").unwrap();
            continue;
        }
        let mut r = Raster::new(24, 20, Layout::Gray, SampleFormat::U16);
        for (i, v) in r.planes[0].iter_mut().enumerate() {
            *v = (1000 + k * 10 + i % 24) as f32;
        }
        raster::save(&r, &path).unwrap();
        if k == 33 {
            let bytes = std::fs::read(&path).unwrap();
            std::fs::write(&path, &bytes[..bytes.len() / 2]).unwrap();
        }
    }
    raster::save_mask(&Mask::from_fn(24, 20, |x, y| x == 7 || (x, y) == (15, 3)), &dir.join("badpix.png")).unwrap();
}

fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> =
        std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    v.sort();
    v
}

#[test]
fn one_bad_file_does_not_stop_the_rest_and_reruns_skip_finished_work() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    archive(d);
    let (input, out, mask, reports) = (d.join("in"), d.join("out"), d.join("badpix.png"), d.join("reports"));
    let args = [
        "batch",
        input.to_str().unwrap(),
        "--mask",
        mask.to_str().unwrap(),
        "-o",
        out.to_str().unwrap(),
        "--report-dir",
        reports.to_str().unwrap(),
    ];
    let o = reweave(&args);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(1), "{stdout}");
    assert_eq!(listing(&out).len(), 48, "48 results");
    assert!(stdout.contains("frame-017.png") && stdout.contains("frame-033.png"), "failures named: {stdout}");
    assert!(stdout.contains("repaired   48"), "{stdout}");
    assert_eq!(listing(&d.join("reports")).len(), 48);
    // Dead column filled from its neighbours: the row ramp is reproduced exactly (affine data).
    let r = raster::load(&out.join("frame-000.png")).unwrap();
    assert_eq!(r.planes[0][7], 1007.0);

    let before: Vec<_> =
        listing(&out).iter().map(|n| std::fs::metadata(out.join(n)).unwrap().modified().unwrap()).collect();
    let mut rerun = args.to_vec();
    rerun.push("--skip-existing");
    let o = reweave(&rerun);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("skipped    48") && stdout.contains("repaired   0"), "{stdout}");
    let after: Vec<_> =
        listing(&out).iter().map(|n| std::fs::metadata(out.join(n)).unwrap().modified().unwrap()).collect();
    assert_eq!(before, after, "nothing rewritten");
    assert!(!listing(&out).iter().any(|n| n.contains(".tmp")), "no temporary files left");
}

#[test]
fn shards_together_cover_every_file_once() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    archive(d);
    let mut all = Vec::new();
    for i in 1..=3 {
        let out = d.join(format!("out-{i}"));
        let shard = format!("{i}/3");
        let o = reweave(&[
            "batch",
            d.join("in").to_str().unwrap(),
            "--mask",
            d.join("badpix.png").to_str().unwrap(),
            "-o",
            out.to_str().unwrap(),
            "--shard",
            &shard,
            "--quiet",
        ]);
        assert!(o.status.code() == Some(0) || o.status.code() == Some(1));
        all.extend(listing(&out));
    }
    all.sort();
    let expected: Vec<String> = (0..50).filter(|k| *k != 17 && *k != 33).map(|k| format!("frame-{k:03}.png")).collect();
    assert_eq!(all, expected, "every good file exactly once across the shards");
}

#[test]
fn bad_shard_is_a_usage_error() {
    let dir = tempfile::tempdir().unwrap();
    let o = reweave(&[
        "batch",
        dir.path().to_str().unwrap(),
        "-o",
        dir.path().join("o").to_str().unwrap(),
        "--shard",
        "4/3",
    ]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn an_interrupted_batch_leaves_complete_outputs_only_and_a_rerun_finishes() {
    // Ctrl-C (SIGINT) part way: every output already in place loads and is complete, no
    // temporary file is left, and `--skip-existing` then does exactly the rest (common practice
    // for batch tools; the interrupt exit code 130 = 128 + SIGINT is the shell convention).
    let dir = tempfile::tempdir().unwrap();
    let (input, out, mask) = (dir.path().join("in"), dir.path().join("out"), dir.path().join("badpix.png"));
    std::fs::create_dir_all(&input).unwrap();
    let (w, h, files) = (384, 384, 150);
    for k in 0..files {
        let mut r = Raster::new(w, h, Layout::Gray, SampleFormat::U16);
        for (i, v) in r.planes[0].iter_mut().enumerate() {
            *v = (1000 + (k * 7 + i % w + i / w) % 3000) as f32;
        }
        raster::save(&r, &input.join(format!("frame-{k:03}.png"))).unwrap();
    }
    raster::save_mask(&Mask::from_fn(w, h, |x, y| x == 100 || (x + 3 * y) % 97 == 0), &mask).unwrap();
    let args = ["batch", input.to_str().unwrap(), "--mask", mask.to_str().unwrap(), "-o", out.to_str().unwrap()];
    let mut child = Command::new(env!("CARGO_BIN_EXE_reweave")).args(args).args(["--jobs", "1"]).spawn().unwrap();
    let started = std::time::Instant::now();
    while listing_or_empty(&out).iter().filter(|n| n.ends_with(".png")).count() < 3 {
        assert!(started.elapsed().as_secs() < 60, "batch made no progress");
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    let pid = child.id().to_string();
    assert!(Command::new("kill").args(["-INT", &pid]).status().unwrap().success());
    let status = child.wait().unwrap();
    assert_eq!(status.code(), Some(130), "interrupted, not finished: {status:?}");
    let done = listing(&out);
    assert!(!done.iter().any(|n| n.contains(".tmp")), "no temporary file left: {done:?}");
    assert!(done.len() < files, "the batch must still have been running when interrupted ({} done)", done.len());
    for name in &done {
        let r = raster::load(&out.join(name)).unwrap_or_else(|e| panic!("{name} is incomplete: {e}"));
        assert_eq!((r.width, r.height), (w, h));
    }
    let o = reweave(&[&args[..], &["--skip-existing"]].concat());
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(0), "{stdout}");
    assert!(stdout.contains(&format!("skipped    {}", done.len())), "{stdout}");
    assert_eq!(listing(&out).len(), files);
}

fn listing_or_empty(dir: &Path) -> Vec<String> {
    if dir.exists() { listing(dir) } else { Vec::new() }
}

#[test]
fn batch_takes_the_fill_method_and_the_scientific_profile() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    archive(d);
    let (input, out, mask, reports) = (d.join("in"), d.join("out"), d.join("badpix.png"), d.join("reports"));
    let base = [
        "batch",
        input.to_str().unwrap(),
        "--mask",
        mask.to_str().unwrap(),
        "-o",
        out.to_str().unwrap(),
        "--report-dir",
        reports.to_str().unwrap(),
    ];
    let mut refused = base.to_vec();
    refused.extend(["--scientific", "--method", "guided"]);
    let o = reweave(&refused);
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--scientific refuses"));
    assert!(!out.exists(), "nothing written on a usage error");

    let mut args = base.to_vec();
    args.extend(["--scientific", "--method", "biharmonic"]);
    let o = reweave(&args);
    assert_eq!(o.status.code(), Some(1), "two corrupt frames: {}", String::from_utf8_lossy(&o.stdout));
    assert_eq!(listing(&out).len(), 48);
    let json: serde_json::Value =
        serde_json::from_slice(&std::fs::read(reports.join(listing(&reports)[0].clone())).unwrap()).unwrap();
    assert_eq!(json["method"], "biharmonic");
    assert_eq!(json["scientific"], true);
    // Every frame is a ramp along x, which the biharmonic fill reproduces (a polynomial of degree
    // 1; ORACLES.md §4) — away from the image's edge columns, where the natural condition applies.
    let r = raster::load(&out.join("frame-000.png")).unwrap();
    assert_eq!(r.planes[0][7], 1007.0);
}
