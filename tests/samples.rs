//! The bundled demo data is reproducible by the project's own generator, and the README's first
//! command works on it.

// Source: common practice (seeded generators reproduce their output bit for bit); the residual
// bound is the default tolerance of the Core issue.

use std::process::Command;

#[test]
fn bundled_samples_are_regenerated_bit_for_bit() {
    let dir = tempfile::tempdir().unwrap();
    let written = reweave::synth::samples::write_all(dir.path()).expect("write samples");
    let bundled = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-images");
    assert_eq!(written.len(), 6);
    for p in written {
        let name = p.file_name().unwrap();
        let ours = std::fs::read(&p).unwrap();
        let theirs = std::fs::read(bundled.join(name)).expect("bundled sample exists");
        assert!(ours == theirs, "{name:?} differs from sample-images/; run `reweave samples --out sample-images`");
    }
}

#[test]
fn every_sample_fills_with_its_mask() {
    let dir = tempfile::tempdir().unwrap();
    let s = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-images");
    for (image, mask) in [
        ("harbour-postcard.png", "harbour-postcard-mask.png"),
        ("starfield-frame.tif", "starfield-badpix.png"),
        ("island-elevation.tif", "island-void-mask.png"),
    ] {
        let out = dir.path().join(format!("repaired-{image}"));
        let report = dir.path().join(format!("{image}.json"));
        let status = Command::new(env!("CARGO_BIN_EXE_reweave"))
            .arg("fill")
            .arg(s.join(image))
            .arg("--mask")
            .arg(s.join(mask))
            .arg("-o")
            .arg(&out)
            .arg("--report")
            .arg(&report)
            .output()
            .expect("run reweave");
        assert!(status.status.success(), "{image}: {}", String::from_utf8_lossy(&status.stderr));
        let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&report).unwrap()).unwrap();
        assert!(json["unknowns"].as_u64().unwrap() > 0);
        for ch in json["channels"].as_array().unwrap() {
            assert!(ch["relative_residual"].as_f64().unwrap() <= 1e-6);
        }
        // The island's void (−32768) must be gone: the fill stays within the rim's elevations.
        if image.starts_with("island") {
            let r = reweave::raster::load(&out).unwrap();
            assert!(r.planes[0].iter().all(|&v| v > -1000.0), "void values left in the filled grid");
        }
    }
}
