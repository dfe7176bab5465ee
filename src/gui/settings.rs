//! Settings kept between runs: brush size, overlay colour, tolerance, recent files, the last
//! folder and the window size, in `$XDG_CONFIG_HOME/reweave/settings.json` (or
//! `~/.config/reweave/settings.json`).

use std::path::PathBuf;

use serde::{Deserialize, Serialize};

/// Most recent files remembered.
pub const RECENT_MAX: usize = 10;

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct Settings {
    pub radius: f32,
    pub overlay_rgba: [u8; 4],
    /// Show only the mask's outline.
    #[serde(default)]
    pub outline: bool,
    pub tolerance: f64,
    /// The fill method, and the scientific profile (no invented texture).
    pub method: crate::fill::FillMethod,
    pub scientific: bool,
    pub recent: Vec<PathBuf>,
    pub last_folder: Option<PathBuf>,
    pub window_size: Option<[f32; 2]>,
}

impl Default for Settings {
    fn default() -> Self {
        Self {
            radius: 4.0,
            overlay_rgba: [255, 40, 200, 140],
            outline: false,
            tolerance: 1e-6,
            method: crate::fill::FillMethod::Harmonic,
            scientific: false,
            recent: Vec::new(),
            last_folder: None,
            window_size: None,
        }
    }
}

impl Settings {
    /// Where the settings live, if a home or config folder is known.
    #[must_use]
    pub fn path() -> Option<PathBuf> {
        let base = std::env::var_os("XDG_CONFIG_HOME")
            .map(PathBuf::from)
            .filter(|p| p.is_absolute())
            .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".config")))?;
        Some(base.join("reweave").join("settings.json"))
    }

    /// The saved settings, or the defaults when there are none or they cannot be read.
    #[must_use]
    pub fn load() -> Self {
        Self::path()
            .and_then(|p| std::fs::read(p).ok())
            .and_then(|b| serde_json::from_slice(&b).ok())
            .unwrap_or_default()
    }

    /// Writes the settings (atomically); failures are returned as text for the status bar.
    pub fn save(&self) -> Result<(), String> {
        let path = Self::path().ok_or("no home folder to keep settings in")?;
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir).map_err(|e| e.to_string())?;
        }
        let json = serde_json::to_vec_pretty(self).map_err(|e| e.to_string())?;
        crate::raster::write_atomic(&path, |w| {
            use std::io::Write;
            w.write_all(&json).map_err(|e| e.to_string())
        })
        .map_err(|e| e.to_string())
    }

    /// Puts `path` first in the recent files.
    pub fn remember(&mut self, path: &std::path::Path) {
        let path = &path.canonicalize().unwrap_or_else(|_| path.to_owned());
        self.recent.retain(|p| p != path);
        self.recent.insert(0, path.to_owned());
        self.recent.truncate(RECENT_MAX);
        self.last_folder = path.parent().map(std::path::Path::to_owned);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recent_files_are_unique_newest_first_and_bounded() {
        let mut s = Settings::default();
        for k in 0..15 {
            s.remember(std::path::Path::new(&format!("/data/scan-{k}.tif")));
        }
        s.remember(std::path::Path::new("/data/scan-3.tif"));
        assert_eq!(s.recent.len(), RECENT_MAX);
        assert_eq!(s.recent[0], PathBuf::from("/data/scan-3.tif"));
        assert_eq!(s.recent.iter().filter(|p| p.ends_with("scan-3.tif")).count(), 1);
        assert_eq!(s.last_folder, Some(PathBuf::from("/data")));
        let json = serde_json::to_string(&s).unwrap();
        assert_eq!(serde_json::from_str::<Settings>(&json).unwrap(), s);
    }
}
