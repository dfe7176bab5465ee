//! Replays the fuzzers' committed corpus (fuzz/corpus, grown by `scripts/fuzz.sh`) through the
//! readers, so every input the fuzzers kept stays harmless: a raster or an error, never a panic.
//! A crash the fuzzers find is added here as a test named after what it reproduces; none has
//! been found so far (3 × 90 s, 166 k raster, 67 k mask and 5.8 k fill inputs).

// Source: the readers' contract (a raster or an error, never a panic) is the project's own;
// replaying kept fuzz inputs as tests is common practice with libFuzzer corpora.

use std::path::Path;

use reweave::raster::{self, Limits};

/// Writes each corpus input of `target` as a file (its first byte picks PNG, TIFF or JPEG, as in
/// the fuzz target) and calls `check` on it.
fn replay(target: &str, check: impl Fn(&Path)) -> usize {
    let dir = tempfile::tempdir().unwrap();
    let corpus = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz").join("corpus").join(target);
    let mut count = 0;
    for entry in std::fs::read_dir(&corpus).unwrap() {
        let data = std::fs::read(entry.unwrap().path()).unwrap();
        let Some((&kind, bytes)) = data.split_first() else { continue };
        let path = dir.path().join(format!("input.{}", ["png", "tif", "jpg"][usize::from(kind) % 3]));
        std::fs::write(&path, bytes).unwrap();
        check(&path);
        count += 1;
    }
    count
}

#[test]
fn every_kept_raster_input_reads_or_fails_cleanly() {
    let limits = Limits { max_pixels: 1 << 22, max_bytes: 1 << 26 };
    let n = replay("load_raster", |path| {
        if let Ok(r) = raster::load_with_limits(path, limits) {
            assert!(r.planes.iter().all(|p| p.len() == r.width * r.height));
        }
    });
    assert!(n > 100, "the corpus is there ({n} inputs)");
}

#[test]
fn every_kept_mask_input_reads_or_fails_cleanly() {
    let n = replay("load_mask", |path| {
        if let Ok(m) = raster::load_mask(path, 16, 12) {
            assert_eq!((m.width(), m.height()), (16, 12));
        }
    });
    assert!(n > 50, "the corpus is there ({n} inputs)");
}
