//! The JSON record written beside a result: what went in, what was filled, how well the equation
//! was solved, how long it took, and the caution that filled values are estimates.

use std::fs::File;
use std::io::{self, Read};
use std::path::Path;

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::fill::FillReport;
use crate::mask::{Hole, HoleStats, Mask};
use crate::raster::Raster;

/// The caution written into every report.
pub const CAUTION: &str = "Filled values are estimates computed from the surrounding pixels, not measurements. \
Do not use them as data where measured values matter (scientific, medical, forensic or survey-grade work) \
without following your field's practice; the mask records exactly which pixels were filled.";

/// A file and its SHA-256.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct FileRecord {
    pub path: String,
    pub sha256: String,
}

impl FileRecord {
    /// Hashes the file at `path`.
    ///
    /// # Errors
    /// When the file cannot be read.
    pub fn of(path: &Path) -> io::Result<Self> {
        Ok(Self { path: path.display().to_string(), sha256: sha256_file(path)? })
    }
}

/// The files a fill read.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Inputs {
    pub image: FileRecord,
    /// The mask file, when one was given.
    pub mask: Option<FileRecord>,
    /// Whether the image's own transparent pixels were added to the mask.
    pub mask_from_alpha: bool,
}

/// How well one channel was solved.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ChannelRecord {
    pub name: String,
    /// ‖b − A·u‖₂ / ‖b‖₂ of the final iterate.
    pub relative_residual: f64,
    pub cycles: usize,
}

/// Wall-clock seconds of each stage.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Seconds {
    pub load: f64,
    pub setup: f64,
    pub solve: f64,
    pub save: f64,
}

/// The report of one fill.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Report {
    /// reweave's version.
    pub version: String,
    pub caution: String,
    pub inputs: Inputs,
    pub output: Option<FileRecord>,
    pub width: usize,
    pub height: usize,
    /// Number of channels (`channels` below lists them).
    pub channel_count: usize,
    /// gray, gray+alpha, rgb or rgba.
    pub layout: String,
    pub bit_depth: u32,
    /// uint, int or float.
    pub sample_format: String,
    /// Masked (filled) pixels.
    pub unknowns: usize,
    /// 4-connected components of the mask.
    pub holes: usize,
    pub largest_hole: usize,
    /// Every hole (largest first), at most [`HOLE_LIST_MAX`]; `holes` is the total.
    pub hole_list: Vec<Hole>,
    /// The no-data value that marked pixels to fill (as given or as declared by the file).
    pub nodata: Option<String>,
    /// Pixels marked because they held the no-data value or were not finite numbers.
    pub nodata_pixels: usize,
    /// The detector run on the image, if any, and how many pixels it marked.
    pub detector: Option<String>,
    pub detected_pixels: usize,
    /// Holes left unfilled because they were larger than `--max-hole` (largest first, at most
    /// [`HOLE_LIST_MAX`]), and their total pixel count.
    pub skipped_holes: Vec<Hole>,
    pub skipped_pixels: usize,
    /// Filled holes whose deepest pixel is farther than `deep_hole_limit_px` from any known pixel
    /// (deepest first, at most [`HOLE_LIST_MAX`]): there a smooth fill only interpolates the rim.
    pub deep_holes: Vec<crate::mask::distance::Depth>,
    pub deep_hole_limit_px: f32,
    /// What the deep holes mean for the result, when there are any.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub deep_hole_warning: Option<String>,
    pub method: String,
    /// Whether the scientific profile (no invented texture) was in force.
    pub scientific: bool,
    /// What the method adds beyond interpolation, when it does (guided fill, grain).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub texture_caution: Option<String>,
    /// Guided fill: where each hole's texture came from (at most [`HOLE_LIST_MAX`]), and how
    /// many holes found no source and were filled harmonically.
    #[serde(skip_serializing_if = "Vec::is_empty", default)]
    pub sources: Vec<crate::fill::guided::Placement>,
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub holes_without_source: Option<usize>,
    /// The grain added: its seed and σ per channel.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub grain: Option<crate::fill::grain::GrainRecord>,
    pub tolerance: f64,
    pub channels: Vec<ChannelRecord>,
    pub seconds: Seconds,
    /// Notes on metadata that could not be kept as it was.
    pub notes: Vec<String>,
}

/// A filled hole reaching farther than this from any known pixel is reported as deep.
pub const DEEP_HOLE_PX: f32 = 16.0;

/// A hole's depth as the warnings print it: one decimal, or two where one would not show that it
/// exceeds [`DEEP_HOLE_PX`] (√257 px prints as 16.03, not 16.0).
#[must_use]
pub fn depth_text(px: f32) -> String {
    let one = format!("{px:.1}");
    if one.parse::<f32>().is_ok_and(|v| v <= DEEP_HOLE_PX) { format!("{px:.2}") } else { one }
}

/// Most holes listed in a report.
pub const HOLE_LIST_MAX: usize = 1000;

impl Report {
    /// Assembles a report from the pieces of a finished fill.
    #[must_use]
    pub fn new(
        inputs: Inputs,
        raster: &Raster,
        mask: &Mask,
        holes: &HoleStats,
        fill: &FillReport,
        tolerance: f64,
    ) -> Self {
        let names = raster.layout.channel_names();
        let channels = (0..raster.channels())
            .map(|c| {
                let ch = fill.channels.get(c).cloned().unwrap_or_default();
                ChannelRecord {
                    name: names.get(c).map_or_else(|| format!("channel {c}"), |n| (*n).to_owned()),
                    relative_residual: ch.relative_residual,
                    cycles: ch.cycles,
                }
            })
            .collect();
        Self {
            version: env!("CARGO_PKG_VERSION").to_owned(),
            caution: CAUTION.to_owned(),
            inputs,
            output: None,
            width: raster.width,
            height: raster.height,
            channel_count: raster.channels(),
            layout: raster.layout.name().to_owned(),
            bit_depth: raster.sample_format.bits(),
            sample_format: raster.sample_format.kind().to_owned(),
            unknowns: mask.count(),
            holes: holes.holes,
            largest_hole: holes.largest,
            hole_list: mask.holes().into_iter().take(HOLE_LIST_MAX).collect(),
            nodata: None,
            nodata_pixels: 0,
            detector: None,
            detected_pixels: 0,
            skipped_holes: Vec::new(),
            deep_holes: Vec::new(),
            deep_hole_limit_px: DEEP_HOLE_PX,
            deep_hole_warning: None,
            skipped_pixels: 0,
            notes: Vec::new(),
            method: fill.method.name().to_owned(),
            scientific: false,
            texture_caution: texture_caution(fill),
            sources: fill.placements.iter().take(HOLE_LIST_MAX).copied().collect(),
            holes_without_source: (fill.method == crate::fill::FillMethod::Guided)
                .then(|| fill.placements.iter().filter(|p| p.offset.is_none()).count()),
            grain: fill.grain.clone(),
            tolerance,
            channels,
            seconds: Seconds { setup: fill.setup_seconds, solve: fill.solve_seconds, ..Seconds::default() },
        }
    }

    /// The report as pretty-printed JSON.
    #[must_use]
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"))
    }
}

/// The warning about holes deeper than [`DEEP_HOLE_PX`] (deepest first), for the command line and
/// the report; `None` when there is none.
#[must_use]
pub fn deep_hole_warning(
    deep: &[crate::mask::distance::Depth],
    method: crate::fill::FillMethod,
    scientific: bool,
) -> Option<String> {
    Some(format!(
        "{}: {}",
        deep_hole_summary(deep)?,
        if method == crate::fill::FillMethod::Guided {
            "the texture there is copied from elsewhere, and only the rim is real"
        } else if scientific {
            "a smooth fill only interpolates the rim there; treat those values as the least reliable"
        } else {
            "a smooth fill only interpolates the rim there and texture is not reconstructed; for photographs, the guided fill (--method guided) carries texture in"
        }
    ))
}

/// "N holes reach more than 16 px from any known pixel (deepest D px, at (x, y))", or `None`
/// without deep holes: the start of every deep-hole warning (command line, report, window).
#[must_use]
pub fn deep_hole_summary(deep: &[crate::mask::distance::Depth]) -> Option<String> {
    let d = deep.first()?;
    let n = deep.len();
    Some(format!(
        "{n} hole{} reach{} more than {DEEP_HOLE_PX} px from any known pixel (deepest {} px, at ({}, {}))",
        if n == 1 { "" } else { "s" },
        if n == 1 { "es" } else { "" },
        depth_text(d.pixels),
        d.x,
        d.y,
    ))
}

/// The caution for fills that add detail nobody measured.
fn texture_caution(fill: &FillReport) -> Option<String> {
    let guided = fill.method == crate::fill::FillMethod::Guided;
    match (guided, fill.grain.is_some()) {
        (false, false) => None,
        (true, false) => Some(GUIDED_CAUTION.to_owned()),
        (false, true) => Some(GRAIN_CAUTION.to_owned()),
        (true, true) => Some(format!("{GUIDED_CAUTION} {GRAIN_CAUTION}")),
    }
}

/// Said of every guided fill.
pub const GUIDED_CAUTION: &str = "The texture inside the filled holes was copied from other parts of the image (see sources): it shows what the surroundings look like, not what was there. Do not use it for measurement, evidence or diagnosis.";
/// Said of every fill with grain.
pub const GRAIN_CAUTION: &str = "Random grain was added to the filled pixels (see grain): it imitates the noise of the surroundings and carries no information.";

/// The SHA-256 of a file, as lowercase hex.
///
/// # Errors
/// When the file cannot be read.
pub fn sha256_file(path: &Path) -> io::Result<String> {
    let mut file = File::open(path)?;
    let mut hasher = Sha256::new();
    let mut buf = vec![0u8; 1 << 16];
    loop {
        let n = file.read(&mut buf)?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
    }
    Ok(hex(&hasher.finalize()))
}

/// Lowercase hex of some bytes.
#[must_use]
pub fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write;
    bytes.iter().fold(String::with_capacity(bytes.len() * 2), |mut s, b| {
        let _ = write!(s, "{b:02x}");
        s
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_of_abc_matches_the_standard() {
        // FIPS 180-2, Appendix B.1: SHA-256("abc").
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("abc.txt");
        std::fs::write(&p, b"abc").unwrap();
        assert_eq!(sha256_file(&p).unwrap(), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    }

    #[test]
    fn a_depth_just_over_the_limit_does_not_print_as_the_limit() {
        // Pixel-centre distances are square roots of integers; √257 ≈ 16.0312 (from memory,
        // and 16.03² = 256.96, 16.04² = 257.28 bracket it).
        assert_eq!(depth_text(257f32.sqrt()), "16.03");
        assert_eq!(depth_text(16.06), "16.1");
        assert_eq!(depth_text(24.0832), "24.1");
    }
}
