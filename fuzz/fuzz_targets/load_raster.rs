//! Any bytes, read as a PNG, TIFF or JPEG file (the first byte picks which): reading must end in
//! a raster or an error, never a panic, and stay within the limits it was given.
#![no_main]

use libfuzzer_sys::fuzz_target;
use reweave::raster::{self, Limits};

fuzz_target!(|data: &[u8]| {
    let Some((&kind, bytes)) = data.split_first() else { return };
    let ext = ["png", "tif", "jpg"][usize::from(kind) % 3];
    let dir = std::env::temp_dir().join(format!("reweave-fuzz-{}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    let path = dir.join(format!("input.{ext}"));
    if std::fs::write(&path, bytes).is_err() {
        return;
    }
    let limits = Limits { max_pixels: 1 << 22, max_bytes: 1 << 26 };
    if let Ok(r) = raster::load_with_limits(&path, limits) {
        assert!(r.width * r.height <= 1 << 22);
        assert!(r.planes.iter().all(|p| p.len() == r.width * r.height));
    }
});
