//! JPEG through the `image` crate, and the sample (de)interleaving shared by all codecs.

use std::fs::File;
use std::io::{BufReader, BufWriter, Write};
use std::path::Path;

use image::codecs::jpeg::JpegEncoder;
use image::{DynamicImage, ExtendedColorType, ImageDecoder, ImageEncoder, ImageReader};

use super::{FileFormat, Layout, Limits, Metadata, Raster, RasterError, SampleFormat};

/// JPEG quality used when a result must be written as JPEG (it is lossy either way).
const JPEG_QUALITY: u8 = 95;

pub(super) fn load(path: &Path, format: FileFormat, limits: Limits) -> Result<Raster, RasterError> {
    let decode_err = |e: image::ImageError| match e {
        image::ImageError::Limits(_) => {
            RasterError::TooLarge { path: path.to_owned(), width: 0, height: 0, limit: limits.max_pixels }
        }
        other => RasterError::Decode { path: path.to_owned(), format: format.name(), message: other.to_string() },
    };
    let file = File::open(path).map_err(|error| RasterError::Open { path: path.to_owned(), error })?;
    let mut reader = ImageReader::new(BufReader::new(file));
    reader.set_format(match format {
        FileFormat::Png => image::ImageFormat::Png,
        FileFormat::Jpeg => image::ImageFormat::Jpeg,
        FileFormat::Tiff => image::ImageFormat::Tiff,
    });
    let mut image_limits = image::Limits::default();
    image_limits.max_alloc = Some(limits.max_bytes);
    reader.limits(image_limits);
    let mut decoder = reader.into_decoder().map_err(decode_err)?;
    let (w, h) = decoder.dimensions();
    limits.check(path, w, h)?;
    let icc_profile = decoder.icc_profile().ok().flatten();
    let image = DynamicImage::from_decoder(decoder).map_err(decode_err)?;
    let (width, height) = (w as usize, h as usize);
    let (layout, sample_format, interleaved): (Layout, SampleFormat, Vec<f32>) = match image {
        DynamicImage::ImageLuma8(b) => (Layout::Gray, SampleFormat::U8, to_f32(b.as_raw())),
        DynamicImage::ImageLumaA8(b) => (Layout::GrayAlpha, SampleFormat::U8, to_f32(b.as_raw())),
        DynamicImage::ImageRgb8(b) => (Layout::Rgb, SampleFormat::U8, to_f32(b.as_raw())),
        DynamicImage::ImageRgba8(b) => (Layout::Rgba, SampleFormat::U8, to_f32(b.as_raw())),
        DynamicImage::ImageLuma16(b) => (Layout::Gray, SampleFormat::U16, to_f32(b.as_raw())),
        DynamicImage::ImageLumaA16(b) => (Layout::GrayAlpha, SampleFormat::U16, to_f32(b.as_raw())),
        DynamicImage::ImageRgb16(b) => (Layout::Rgb, SampleFormat::U16, to_f32(b.as_raw())),
        DynamicImage::ImageRgba16(b) => (Layout::Rgba, SampleFormat::U16, to_f32(b.as_raw())),
        DynamicImage::ImageRgb32F(b) => (Layout::Rgb, SampleFormat::F32, b.into_raw()),
        DynamicImage::ImageRgba32F(b) => (Layout::Rgba, SampleFormat::F32, b.into_raw()),
        other => {
            return Err(RasterError::Unsupported {
                path: path.to_owned(),
                what: format!("{:?} pixels", other.color()),
            });
        }
    };
    Ok(Raster {
        width,
        height,
        planes: deinterleave(&interleaved, layout.channels()),
        sample_format,
        layout,
        file_format: format,
        metadata: Metadata { icc_profile, ..Metadata::default() },
    })
}

fn to_f32<T: Copy + Into<f32>>(v: &[T]) -> Vec<f32> {
    v.iter().map(|&x| x.into()).collect()
}

/// Splits interleaved samples into one plane per channel.
pub(super) fn deinterleave(samples: &[f32], channels: usize) -> Vec<Vec<f32>> {
    let n = samples.len() / channels.max(1);
    let mut planes = vec![Vec::with_capacity(n); channels];
    for px in samples.chunks_exact(channels) {
        for (plane, &v) in planes.iter_mut().zip(px) {
            plane.push(v);
        }
    }
    planes
}

/// Interleaves the planes, converting each sample with `f` (after rounding and clamping).
pub(super) fn interleave<T>(r: &Raster, f: impl Fn(f32) -> T) -> Vec<T> {
    let n = r.width * r.height;
    let mut out = Vec::with_capacity(n * r.channels());
    for i in 0..n {
        for plane in &r.planes {
            out.push(f(r.sample_format.quantize(plane[i])));
        }
    }
    out
}

#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)] // values are rounded and clamped first
fn u8_bytes(r: &Raster) -> Vec<u8> {
    interleave(r, |v| v as u8)
}

pub(super) fn save(r: &Raster, format: FileFormat, w: &mut BufWriter<File>) -> Result<(), String> {
    let (width, height) =
        (u32::try_from(r.width).map_err(|e| e.to_string())?, u32::try_from(r.height).map_err(|e| e.to_string())?);
    let colour = match (r.layout, r.sample_format) {
        (Layout::Gray, SampleFormat::U8) => ExtendedColorType::L8,
        (Layout::GrayAlpha, SampleFormat::U8) => ExtendedColorType::La8,
        (Layout::Rgb, SampleFormat::U8) => ExtendedColorType::Rgb8,
        (Layout::Rgba, SampleFormat::U8) => ExtendedColorType::Rgba8,
        (Layout::Gray, SampleFormat::U16) => ExtendedColorType::L16,
        (Layout::GrayAlpha, SampleFormat::U16) => ExtendedColorType::La16,
        (Layout::Rgb, SampleFormat::U16) => ExtendedColorType::Rgb16,
        (Layout::Rgba, SampleFormat::U16) => ExtendedColorType::Rgba16,
        (layout, fmt) => return Err(format!("{} cannot store {} {fmt} samples", format.name(), layout.name())),
    };
    if format != FileFormat::Jpeg || r.sample_format != SampleFormat::U8 {
        return Err(format!("internal error: {} is not written by the JPEG module", format.name()));
    }
    let bytes = u8_bytes(r);
    let mut enc = JpegEncoder::new_with_quality(&mut *w, JPEG_QUALITY);
    if let Some(icc) = &r.metadata.icc_profile {
        enc.set_icc_profile(icc.clone()).map_err(|e| e.to_string())?;
    }
    enc.write_image(&bytes, width, height, colour).map_err(|e| e.to_string())?;
    w.flush().map_err(|e| e.to_string())
}
