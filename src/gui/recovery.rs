//! Crash recovery. While the window runs it keeps the current mask, and the image it was drawn
//! on, in the user's data folder (`$XDG_DATA_HOME/reweave/`, or `~/.local/share/reweave/`): at
//! every fill and at least every 30 seconds while the mask is being edited. A normal exit removes
//! them; finding them at start means the last session ended abnormally, and the window offers to
//! restore the work.

use std::path::{Path, PathBuf};
use std::time::{SystemTime, UNIX_EPOCH};

use serde::{Deserialize, Serialize};

use crate::mask::Mask;
use crate::raster;

/// Seconds of editing between two automatic saves.
pub const INTERVAL_SECONDS: u64 = 30;

/// What was saved, as recorded beside the mask.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Saved {
    /// The image the mask belongs to.
    pub image: PathBuf,
    /// Masked pixels.
    pub marked: usize,
    /// Seconds since 1970 when it was saved.
    pub saved_at: u64,
}

/// The recovery files of one data folder.
#[derive(Clone, Debug)]
pub struct Recovery {
    dir: PathBuf,
}

impl Recovery {
    /// The user's data folder, if one can be named.
    #[must_use]
    pub fn for_user() -> Option<Self> {
        let base = std::env::var_os("XDG_DATA_HOME")
            .filter(|v| !v.is_empty())
            .map(PathBuf::from)
            .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".local").join("share")))?;
        Some(Self::in_dir(base.join("reweave")))
    }

    /// Recovery files in `dir` (created when first needed).
    #[must_use]
    pub fn in_dir(dir: PathBuf) -> Self {
        Self { dir }
    }

    /// The saved mask (a PNG, loadable like any mask file).
    #[must_use]
    pub fn mask_path(&self) -> PathBuf {
        self.dir.join("recovery-mask.png")
    }

    fn record_path(&self) -> PathBuf {
        self.dir.join("recovery.json")
    }

    /// The work left by a session that did not end normally, if any.
    #[must_use]
    pub fn found(&self) -> Option<Saved> {
        let text = std::fs::read_to_string(self.record_path()).ok()?;
        let saved: Saved = serde_json::from_str(&text).ok()?;
        self.mask_path().is_file().then_some(saved)
    }

    /// Saves `mask`, drawn on `image` (each file written atomically; the record last, so a record
    /// always has its mask).
    ///
    /// # Errors
    /// A message naming the file that could not be written.
    pub fn save(&self, image: &Path, mask: &Mask) -> Result<(), String> {
        std::fs::create_dir_all(&self.dir).map_err(|e| format!("cannot create {}: {e}", self.dir.display()))?;
        raster::save_mask(mask, &self.mask_path()).map_err(|e| e.to_string())?;
        let saved_at = SystemTime::now().duration_since(UNIX_EPOCH).map_or(0, |d| d.as_secs());
        let record = Saved { image: image.to_owned(), marked: mask.count(), saved_at };
        let json = serde_json::to_string_pretty(&record).map_err(|e| e.to_string())?;
        raster::write_atomic(&self.record_path(), |w| {
            use std::io::Write;
            w.write_all(json.as_bytes()).map_err(|e| e.to_string())
        })
        .map_err(|e| e.to_string())
    }

    /// Removes the recovery files (a normal exit, or the user declined to restore).
    pub fn clear(&self) {
        let _ = std::fs::remove_file(self.record_path());
        let _ = std::fs::remove_file(self.mask_path());
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn saved_work_is_found_until_cleared() {
        let dir = tempfile::tempdir().expect("temporary folder");
        let r = Recovery::in_dir(dir.path().join("data"));
        assert_eq!(r.found(), None);
        let mask = Mask::from_fn(9, 7, |x, y| x == y);
        r.save(Path::new("/photos/card.png"), &mask).expect("saved");
        let found = r.found().expect("found");
        assert_eq!((found.image.as_path(), found.marked), (Path::new("/photos/card.png"), 7));
        assert_eq!(raster::load_mask(&r.mask_path(), 9, 7).expect("mask loads"), mask);
        r.clear();
        assert_eq!(r.found(), None);
    }
}
