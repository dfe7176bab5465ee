//! Any bytes, read as a mask file for a 16×12 image: a mask of that size or an error, never a
//! panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use reweave::raster;

fuzz_target!(|data: &[u8]| {
    let Some((&kind, bytes)) = data.split_first() else { return };
    let ext = ["png", "tif", "jpg"][usize::from(kind) % 3];
    let dir = std::env::temp_dir().join(format!("reweave-fuzz-mask-{}", std::process::id()));
    let _ = std::fs::create_dir_all(&dir);
    let path = dir.join(format!("mask.{ext}"));
    if std::fs::write(&path, bytes).is_err() {
        return;
    }
    if let Ok(m) = raster::load_mask(&path, 16, 12) {
        assert_eq!((m.width(), m.height()), (16, 12));
    }
});
