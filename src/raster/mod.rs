//! Images as the fill sees them, and as they were stored.
//!
//! A [`Raster`] holds one `f32` plane per channel (every supported sample type — 8/16-bit
//! unsigned, 16-bit signed, 32-bit float — is exact in `f32`), plus what is needed to write it
//! back the way it came: the sample format, the channel layout, the file format and metadata to
//! carry through (ICC profile, GeoTIFF and other TIFF tags, PNG ancillary chunks, the no-data
//! value). This is the only module that touches codecs: PNG through the `png` crate, TIFF through
//! the `tiff` crate, JPEG through the `image` crate.

mod codec;
pub mod nodata;
mod png_io;
mod tiff_io;
mod tiff_tags;

use std::fmt;
use std::fs::File;
use std::io::{BufWriter, Read, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use thiserror::Error;

use crate::mask::Mask;

/// How each sample is stored in the file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SampleFormat {
    U8,
    U16,
    I16,
    F32,
}

impl SampleFormat {
    #[must_use]
    pub fn bits(self) -> u32 {
        match self {
            Self::U8 => 8,
            Self::U16 | Self::I16 => 16,
            Self::F32 => 32,
        }
    }

    /// The name used in reports: `uint`, `int` or `float`.
    #[must_use]
    pub fn kind(self) -> &'static str {
        match self {
            Self::U8 | Self::U16 => "uint",
            Self::I16 => "int",
            Self::F32 => "float",
        }
    }

    /// Converts a computed value to what this format stores: integers round to nearest and clamp
    /// to the type's range; floats are kept as computed.
    #[must_use]
    pub fn quantize(self, v: f32) -> f32 {
        let (lo, hi) = match self {
            Self::U8 => (0.0, 255.0),
            Self::U16 => (0.0, 65535.0),
            Self::I16 => (-32768.0, 32767.0),
            Self::F32 => return v,
        };
        if v.is_nan() { lo } else { v.round().clamp(lo, hi) }
    }
}

impl fmt::Display for SampleFormat {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = match self {
            Self::U8 => "8-bit unsigned",
            Self::U16 => "16-bit unsigned",
            Self::I16 => "16-bit signed",
            Self::F32 => "32-bit float",
        };
        f.write_str(s)
    }
}

/// Which channels a pixel has.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Layout {
    Gray,
    GrayAlpha,
    Rgb,
    Rgba,
}

impl Layout {
    #[must_use]
    pub fn channels(self) -> usize {
        match self {
            Self::Gray => 1,
            Self::GrayAlpha => 2,
            Self::Rgb => 3,
            Self::Rgba => 4,
        }
    }

    #[must_use]
    pub fn from_channels(n: usize) -> Option<Self> {
        match n {
            1 => Some(Self::Gray),
            2 => Some(Self::GrayAlpha),
            3 => Some(Self::Rgb),
            4 => Some(Self::Rgba),
            _ => None,
        }
    }

    #[must_use]
    pub fn has_alpha(self) -> bool {
        matches!(self, Self::GrayAlpha | Self::Rgba)
    }

    /// Short channel names, for reports.
    #[must_use]
    pub fn channel_names(self) -> &'static [&'static str] {
        match self {
            Self::Gray => &["gray"],
            Self::GrayAlpha => &["gray", "alpha"],
            Self::Rgb => &["red", "green", "blue"],
            Self::Rgba => &["red", "green", "blue", "alpha"],
        }
    }

    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Gray => "gray",
            Self::GrayAlpha => "gray+alpha",
            Self::Rgb => "rgb",
            Self::Rgba => "rgba",
        }
    }
}

/// The container format of a file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FileFormat {
    Png,
    Tiff,
    Jpeg,
}

impl FileFormat {
    /// The format named by a path's extension (`.png`, `.tif`, `.tiff`, `.jpg`, `.jpeg`).
    #[must_use]
    pub fn from_extension(path: &Path) -> Option<Self> {
        let ext = path.extension()?.to_str()?.to_ascii_lowercase();
        match ext.as_str() {
            "png" => Some(Self::Png),
            "tif" | "tiff" => Some(Self::Tiff),
            "jpg" | "jpeg" => Some(Self::Jpeg),
            _ => None,
        }
    }

    /// The format of a file's first bytes.
    #[must_use]
    pub fn sniff(head: &[u8]) -> Option<Self> {
        if head.starts_with(b"\x89PNG\r\n\x1a\n") {
            Some(Self::Png)
        } else if head.starts_with(b"II*\0")
            || head.starts_with(b"MM\0*")
            || head.starts_with(b"II+\0")
            || head.starts_with(b"MM\0+")
        {
            Some(Self::Tiff)
        } else if head.starts_with(&[0xFF, 0xD8, 0xFF]) {
            Some(Self::Jpeg)
        } else {
            None
        }
    }

    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Png => "PNG",
            Self::Tiff => "TIFF",
            Self::Jpeg => "JPEG",
        }
    }

    /// Whether writing this format keeps every sample exactly.
    #[must_use]
    pub fn is_lossless(self) -> bool {
        !matches!(self, Self::Jpeg)
    }
}

/// Metadata carried from input to output.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Metadata {
    /// The embedded ICC colour profile, byte for byte.
    pub icc_profile: Option<Vec<u8>>,
    /// The no-data value the file declares (TIFF tag 42113, GDAL_NODATA), as written there.
    pub nodata: Option<String>,
    /// How a TIFF was stored, and the tags to carry through.
    pub tiff: Option<TiffInfo>,
    /// Ancillary PNG chunks to carry through, raw (type and data), in file order.
    pub png_chunks: Vec<([u8; 4], Vec<u8>)>,
    /// Things the reader noticed and the user should hear about (extra pages ignored, …).
    pub warnings: Vec<String>,
}

/// A TIFF tag carried through verbatim: its field type, count and value bytes (little-endian,
/// as the output is written).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RawTag {
    pub tag: u16,
    pub field_type: u16,
    pub count: u64,
    pub data: Vec<u8>,
}

impl RawTag {
    /// A DOUBLE (type 12) tag.
    #[must_use]
    pub fn doubles(tag: u16, values: &[f64]) -> Self {
        Self {
            tag,
            field_type: 12,
            count: values.len() as u64,
            data: values.iter().flat_map(|v| v.to_le_bytes()).collect(),
        }
    }

    /// A SHORT (type 3) tag.
    #[must_use]
    pub fn shorts(tag: u16, values: &[u16]) -> Self {
        Self {
            tag,
            field_type: 3,
            count: values.len() as u64,
            data: values.iter().flat_map(|v| v.to_le_bytes()).collect(),
        }
    }

    /// An ASCII (type 2) tag, NUL-terminated as TIFF 6.0 §2 requires.
    #[must_use]
    pub fn ascii(tag: u16, text: &str) -> Self {
        let mut data = text.as_bytes().to_vec();
        data.push(0);
        Self { tag, field_type: 2, count: data.len() as u64, data }
    }
}

/// How a TIFF was stored.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct TiffInfo {
    /// Compression (tag 259): 1 none, 5 LZW, 8 or 32946 Deflate, 32773 PackBits.
    pub compression: u16,
    /// Predictor (tag 317): 1 none, 2 horizontal, 3 floating point.
    pub predictor: u16,
    pub big_endian: bool,
    /// Georeferencing, resolution and descriptive tags, in ascending tag order.
    pub tags: Vec<RawTag>,
}

impl TiffInfo {
    #[must_use]
    pub fn tag(&self, tag: u16) -> Option<&RawTag> {
        self.tags.iter().find(|t| t.tag == tag)
    }
}

/// An image: one `f32` plane per channel, row-major, and how it was stored.
#[derive(Clone, Debug, PartialEq)]
pub struct Raster {
    pub width: usize,
    pub height: usize,
    pub planes: Vec<Vec<f32>>,
    pub sample_format: SampleFormat,
    pub layout: Layout,
    /// The format the raster was read from (PNG when made in memory).
    pub file_format: FileFormat,
    pub metadata: Metadata,
}

impl Raster {
    /// A raster of zeros.
    #[must_use]
    pub fn new(width: usize, height: usize, layout: Layout, sample_format: SampleFormat) -> Self {
        Self {
            width,
            height,
            planes: vec![vec![0.0; width * height]; layout.channels()],
            sample_format,
            layout,
            file_format: FileFormat::Png,
            metadata: Metadata::default(),
        }
    }

    #[must_use]
    pub fn channels(&self) -> usize {
        self.planes.len()
    }

    /// Mutable slices of every plane, as the fill takes them.
    pub fn planes_mut(&mut self) -> Vec<&mut [f32]> {
        self.planes.iter_mut().map(Vec::as_mut_slice).collect()
    }

    /// Rounds and clamps every sample to what the sample format can store.
    pub fn quantize(&mut self) {
        let fmt = self.sample_format;
        for p in &mut self.planes {
            for v in p.iter_mut() {
                *v = fmt.quantize(*v);
            }
        }
    }

    /// A mask of the pixels whose alpha is zero (`None` without an alpha channel).
    #[must_use]
    pub fn transparent_mask(&self) -> Option<Mask> {
        if !self.layout.has_alpha() {
            return None;
        }
        let alpha = self.planes.last()?;
        Some(Mask::from_bits(self.width, self.height, alpha.iter().map(|&a| a == 0.0).collect()))
    }
}

/// Limits on what a file may make the loader allocate.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Limits {
    /// Largest accepted width × height.
    pub max_pixels: u64,
    /// Largest decoded image, in bytes.
    pub max_bytes: u64,
}

impl Default for Limits {
    fn default() -> Self {
        // 1 gigapixel and 8 GiB: room for a 16000×16000 float grid and a 12000×8000 16-bit RGB
        // scan, while a corrupt header claiming billions of pixels is refused before decoding.
        Self { max_pixels: 1 << 30, max_bytes: 8 << 30 }
    }
}

impl Limits {
    /// Refuses a `w × h` image over the pixel limit, before anything is allocated for it.
    ///
    /// # Errors
    /// [`RasterError::TooLarge`] naming `path`.
    pub fn check(&self, path: &Path, w: u32, h: u32) -> Result<(), RasterError> {
        if u64::from(w) * u64::from(h) > self.max_pixels {
            return Err(RasterError::TooLarge {
                path: path.to_owned(),
                width: w.into(),
                height: h.into(),
                limit: self.max_pixels,
            });
        }
        Ok(())
    }
}

/// Why reading or writing an image failed. Every message names the file and, where there is one,
/// what to do about it.
#[derive(Debug, Error)]
pub enum RasterError {
    #[error("cannot read '{path}': {error}")]
    /// `error` is shown in the message itself, so it is not a `source` (which would print it twice).
    Open { path: PathBuf, error: std::io::Error },
    #[error("'{path}' is a folder, not an image file")]
    IsDirectory { path: PathBuf },
    #[error("'{path}' is empty (0 bytes); it is not an image")]
    Empty { path: PathBuf },
    #[error("'{path}' is not a PNG, TIFF or JPEG file (its first bytes match none of them)")]
    UnknownFormat { path: PathBuf },
    #[error("'{path}' could not be decoded as {format}: {message} (the file may be truncated or damaged)")]
    Decode { path: PathBuf, format: &'static str, message: String },
    #[error("'{path}' holds {what}, which reweave cannot read yet")]
    Unsupported { path: PathBuf, what: String },
    #[error(
        "'{path}' claims {width}×{height} pixels, more than the limit of {limit} pixels (or more memory than --max-gigabytes allows); if the file is genuine, raise the limit with --max-megapixels or --max-gigabytes"
    )]
    TooLarge { path: PathBuf, width: u64, height: u64, limit: u64 },
    #[error("cannot tell the format of '{path}' from its extension; use .png, .tif or .jpg")]
    UnknownExtension { path: PathBuf },
    #[error("{format} cannot store {what}; write '{path}' as {suggestion} instead")]
    CannotStore { path: PathBuf, format: &'static str, what: String, suggestion: &'static str },
    #[error("cannot write '{path}': {message}")]
    Write { path: PathBuf, message: String },
    #[error(
        "the mask '{path}' is {mask_width}×{mask_height} but the image is {width}×{height}; use a mask of the image's size"
    )]
    MaskSize { path: PathBuf, width: usize, height: usize, mask_width: usize, mask_height: usize },
}

/// Reads an image file, whatever its extension says, keeping its sample format and layout.
///
/// # Errors
/// See [`RasterError`].
pub fn load(path: &Path) -> Result<Raster, RasterError> {
    load_with_limits(path, Limits::default())
}

/// [`load`] with explicit limits.
///
/// # Errors
/// See [`RasterError`].
pub fn load_with_limits(path: &Path, limits: Limits) -> Result<Raster, RasterError> {
    let format = detect(path)?;
    match format {
        FileFormat::Tiff => tiff_io::load(path, limits),
        FileFormat::Png => png_io::load(path, limits),
        FileFormat::Jpeg => codec::load(path, format, limits),
    }
}

/// Checks that `path` is a readable, non-empty file and tells its format from its first bytes.
fn detect(path: &Path) -> Result<FileFormat, RasterError> {
    let meta = std::fs::metadata(path).map_err(|error| RasterError::Open { path: path.to_owned(), error })?;
    if meta.is_dir() {
        return Err(RasterError::IsDirectory { path: path.to_owned() });
    }
    if meta.len() == 0 {
        return Err(RasterError::Empty { path: path.to_owned() });
    }
    let mut head = [0u8; 8];
    let mut file = File::open(path).map_err(|error| RasterError::Open { path: path.to_owned(), error })?;
    let mut got = 0;
    while got < head.len() {
        match file.read(&mut head[got..]) {
            Ok(0) => break,
            Ok(n) => got += n,
            Err(error) => return Err(RasterError::Open { path: path.to_owned(), error }),
        }
    }
    FileFormat::sniff(&head[..got]).ok_or_else(|| RasterError::UnknownFormat { path: path.to_owned() })
}

/// Writes `raster` to `path` in the format its extension names, with the raster's own sample
/// format, layout and metadata. The file is written to a temporary name in the same folder and
/// renamed into place, so a failure never leaves a partial file behind.
///
/// # Errors
/// See [`RasterError`].
pub fn save(raster: &Raster, path: &Path) -> Result<(), RasterError> {
    save_noting(raster, path).map(drop)
}

/// [`save`], returning notes about metadata that could not be kept as it was.
///
/// # Errors
/// See [`RasterError`].
pub fn save_noting(raster: &Raster, path: &Path) -> Result<Vec<String>, RasterError> {
    let format =
        FileFormat::from_extension(path).ok_or_else(|| RasterError::UnknownExtension { path: path.to_owned() })?;
    check_storable(raster, format, path)?;
    let mut notes = Vec::new();
    write_atomic(path, |w| match format {
        FileFormat::Tiff => tiff_io::save(raster, w, &mut notes),
        FileFormat::Png => png_io::save(raster, w),
        FileFormat::Jpeg => codec::save(raster, format, w),
    })?;
    Ok(notes)
}

/// Refuses sample formats and layouts the target format cannot hold.
fn check_storable(raster: &Raster, format: FileFormat, path: &Path) -> Result<(), RasterError> {
    let cannot = |what: String, suggestion| {
        Err(RasterError::CannotStore { path: path.to_owned(), format: format.name(), what, suggestion })
    };
    match format {
        FileFormat::Tiff => Ok(()),
        FileFormat::Png => match raster.sample_format {
            SampleFormat::U8 | SampleFormat::U16 => Ok(()),
            other => cannot(format!("{other} samples"), ".tif"),
        },
        FileFormat::Jpeg => {
            if raster.sample_format != SampleFormat::U8 {
                cannot(format!("{} samples", raster.sample_format), ".png or .tif")
            } else if raster.layout.has_alpha() {
                cannot("an alpha channel".to_owned(), ".png or .tif")
            } else {
                Ok(())
            }
        }
    }
}

static TEMP_COUNTER: AtomicU64 = AtomicU64::new(0);
/// Temporary files being written right now (see [`remove_temporary_files`]), and whether new
/// ones are refused because the process is ending.
static IN_FLIGHT: std::sync::Mutex<(Vec<PathBuf>, bool)> = std::sync::Mutex::new((Vec::new(), false));

/// Removes every temporary file a [`write_atomic`] in this process is writing, and refuses new
/// ones from then on. For an interrupt handler that then ends the process: finished outputs are
/// complete (they were renamed into place only once written), and nothing half-written is left
/// behind — a temporary file is created and recorded under the same lock, so none can appear
/// between this cleanup and the exit.
pub fn remove_temporary_files() {
    let mut in_flight = IN_FLIGHT.lock().unwrap_or_else(std::sync::PoisonError::into_inner);
    in_flight.1 = true;
    for path in in_flight.0.drain(..) {
        let _ = std::fs::remove_file(path);
    }
}

/// Creates the temporary file `tmp` and records it, unless the process is ending.
fn create_tracked(tmp: &Path) -> Result<File, String> {
    let mut in_flight = IN_FLIGHT.lock().unwrap_or_else(std::sync::PoisonError::into_inner);
    if in_flight.1 {
        return Err("reweave is being interrupted".to_owned());
    }
    let file = File::options().write(true).create_new(true).open(tmp).map_err(|e| e.to_string())?;
    in_flight.0.push(tmp.to_owned());
    Ok(file)
}

fn untrack(tmp: &Path) {
    let mut in_flight = IN_FLIGHT.lock().unwrap_or_else(std::sync::PoisonError::into_inner);
    in_flight.0.retain(|p| p != tmp);
}

/// The temporary name a file is written under before it is renamed to `path`.
fn temp_path(path: &Path) -> PathBuf {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let n = TEMP_COUNTER.fetch_add(1, Ordering::Relaxed);
    path.with_file_name(format!(".{name}.reweave-{}-{n}.tmp", std::process::id()))
}

/// Writes a file atomically: into a temporary file in the target folder, flushed and synced,
/// then renamed over `path`. On any error the temporary file is removed and `path` is untouched.
///
/// # Errors
/// [`RasterError::Write`] naming `path`.
pub fn write_atomic(
    path: &Path,
    write: impl FnOnce(&mut BufWriter<File>) -> Result<(), String>,
) -> Result<(), RasterError> {
    let fail = |message: String| RasterError::Write { path: path.to_owned(), message };
    if path.is_dir() {
        return Err(fail("it is a folder".to_owned()));
    }
    let tmp = temp_path(path);
    let file = create_tracked(&tmp).map_err(fail)?;
    let mut w = BufWriter::new(file);
    let result = write(&mut w)
        .and_then(|()| w.flush().map_err(|e| e.to_string()))
        .and_then(|()| w.get_ref().sync_all().map_err(|e| e.to_string()));
    drop(w);
    let outcome = match result {
        Err(message) => {
            let _ = std::fs::remove_file(&tmp);
            Err(fail(message))
        }
        Ok(()) => std::fs::rename(&tmp, path).map_err(|e| {
            let _ = std::fs::remove_file(&tmp);
            fail(e.to_string())
        }),
    };
    untrack(&tmp);
    outcome
}

/// Reads a mask image: a pixel is masked where its luma is at least 128 (on the 8-bit scale).
///
/// # Errors
/// See [`RasterError`]; [`RasterError::MaskSize`] when it is not `width × height`.
pub fn load_mask(path: &Path, width: usize, height: usize) -> Result<Mask, RasterError> {
    let r = load(path)?;
    if (r.width, r.height) != (width, height) {
        return Err(RasterError::MaskSize {
            path: path.to_owned(),
            width,
            height,
            mask_width: r.width,
            mask_height: r.height,
        });
    }
    Ok(mask_from_raster(&r))
}

/// The mask of a raster used as a mask image: luma (Rec. 709 weights of the colour channels,
/// alpha ignored) at least half of the 8-bit scale, i.e. ≥ 128 of 255.
#[must_use]
pub fn mask_from_raster(r: &Raster) -> Mask {
    // Threshold on the 0–255 scale, whatever the stored range.
    let scale = match r.sample_format {
        SampleFormat::U8 => 1.0,
        SampleFormat::U16 => 255.0 / 65535.0,
        SampleFormat::I16 => 255.0 / 32767.0,
        SampleFormat::F32 => 255.0,
    };
    let luma = |i: usize| -> f32 {
        match r.layout {
            Layout::Gray | Layout::GrayAlpha => r.planes[0][i],
            Layout::Rgb | Layout::Rgba => 0.2126 * r.planes[0][i] + 0.7152 * r.planes[1][i] + 0.0722 * r.planes[2][i],
        }
    };
    Mask::from_bits(r.width, r.height, (0..r.width * r.height).map(|i| luma(i) * scale >= 127.5).collect())
}

/// Writes a mask as an 8-bit grayscale PNG (255 masked, 0 known), atomically.
///
/// # Errors
/// See [`RasterError`].
pub fn save_mask(mask: &Mask, path: &Path) -> Result<(), RasterError> {
    let mut r = Raster::new(mask.width(), mask.height(), Layout::Gray, SampleFormat::U8);
    for (v, &m) in r.planes[0].iter_mut().zip(mask.bits()) {
        *v = if m { 255.0 } else { 0.0 };
    }
    let png = path.with_extension("png");
    if png != path {
        return Err(RasterError::CannotStore {
            path: path.to_owned(),
            format: "a mask file",
            what: "anything but PNG".to_owned(),
            suggestion: ".png",
        });
    }
    save(&r, path)
}
