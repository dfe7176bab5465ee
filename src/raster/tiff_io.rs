//! TIFF through the `tiff` crate: unsigned 8/16-bit, signed 16-bit and 32-bit float samples,
//! 1–4 channels, either byte order.

use std::fs::File;
use std::io::{BufReader, BufWriter};
use std::path::Path;

use tiff::ColorType as TiffColour;
use tiff::decoder::{Decoder, DecodingResult};
use tiff::encoder::colortype::{self, ColorType};
use tiff::encoder::compression::DeflateLevel;
use tiff::encoder::{Compression, TiffEncoder, TiffValue};
use tiff::tags::{ExtraSamples, PhotometricInterpretation, Predictor, SampleFormat as TiffSampleFormat, Tag, Type};

use super::codec::{deinterleave, interleave};
use super::tiff_tags::{self, GDAL_NODATA, PRESERVED};
use super::{FileFormat, Layout, Limits, Metadata, Raster, RasterError, SampleFormat, TiffInfo};

pub(super) fn load(path: &Path, limits: Limits) -> Result<Raster, RasterError> {
    let decode_err = |e: tiff::TiffError| match e {
        tiff::TiffError::UnsupportedError(u) => RasterError::Unsupported { path: path.to_owned(), what: u.to_string() },
        other => RasterError::Decode { path: path.to_owned(), format: "TIFF", message: other.to_string() },
    };
    let file = File::open(path).map_err(|error| RasterError::Open { path: path.to_owned(), error })?;
    let mut tiff_limits = tiff::decoder::Limits::default();
    tiff_limits.decoding_buffer_size = usize::try_from(limits.max_bytes).unwrap_or(usize::MAX);
    tiff_limits.intermediate_buffer_size = usize::try_from(limits.max_bytes).unwrap_or(usize::MAX);
    tiff_limits.ifd_value_size = 64 << 20;
    let mut dec = Decoder::new(BufReader::new(file)).map_err(decode_err)?.with_limits(tiff_limits);
    let (w, h) = dec.dimensions().map_err(decode_err)?;
    limits.check(path, w, h)?;
    let colour = dec.colortype().map_err(decode_err)?;
    let layout = match colour {
        TiffColour::Gray(_) => Layout::Gray,
        TiffColour::GrayA(_) => Layout::GrayAlpha,
        TiffColour::RGB(_) => Layout::Rgb,
        TiffColour::RGBA(_) => Layout::Rgba,
        // The decoder reports gray with one extra sample (alpha) as two-band data.
        TiffColour::Multiband { num_samples: 2, .. } => Layout::GrayAlpha,
        other => return Err(RasterError::Unsupported { path: path.to_owned(), what: format!("{other:?} pixels") }),
    };
    let icc_profile = dec.get_tag_u8_vec(Tag::IccProfile).ok();
    let compression = dec.get_tag_u32(Tag::Compression).ok().and_then(|v| u16::try_from(v).ok()).unwrap_or(1);
    let predictor = dec.get_tag_u32(Tag::Predictor).ok().and_then(|v| u16::try_from(v).ok()).unwrap_or(1);
    let (sample_format, samples) = match dec.read_image().map_err(decode_err)? {
        DecodingResult::U8(v) => (SampleFormat::U8, v.into_iter().map(f32::from).collect::<Vec<_>>()),
        DecodingResult::U16(v) => (SampleFormat::U16, v.into_iter().map(f32::from).collect()),
        DecodingResult::I16(v) => (SampleFormat::I16, v.into_iter().map(f32::from).collect()),
        DecodingResult::F32(v) => (SampleFormat::F32, v),
        other => {
            let what = match other {
                DecodingResult::U32(_) => "32-bit unsigned samples",
                DecodingResult::U64(_) => "64-bit unsigned samples",
                DecodingResult::I8(_) => "8-bit signed samples",
                DecodingResult::I32(_) => "32-bit signed samples",
                DecodingResult::I64(_) => "64-bit signed samples",
                DecodingResult::F16(_) => "16-bit float samples",
                DecodingResult::F64(_) => "64-bit float samples",
                _ => "an unknown sample type",
            };
            return Err(RasterError::Unsupported { path: path.to_owned(), what: what.to_owned() });
        }
    };
    let (width, height) = (w as usize, h as usize);
    if samples.len() != width * height * layout.channels() {
        return Err(RasterError::Decode {
            path: path.to_owned(),
            format: "TIFF",
            message: format!("expected {} samples, found {}", width * height * layout.channels(), samples.len()),
        });
    }
    let mut metadata = Metadata { icc_profile, ..Metadata::default() };
    match tiff_tags::read(path, PRESERVED) {
        Ok(found) => {
            if found.pages > 1 {
                metadata.warnings.push(format!(
                    "'{}' has {} pages; only the first was read and will be written",
                    path.display(),
                    found.pages
                ));
            }
            metadata.nodata = found.tags.iter().find(|t| t.tag == GDAL_NODATA).map(tiff_tags::ascii);
            metadata.tiff = Some(TiffInfo { compression, predictor, big_endian: found.big_endian, tags: found.tags });
        }
        Err(e) => {
            metadata.warnings.push(format!("the tags of '{}' could not be read for copying ({e})", path.display()));
            metadata.tiff = Some(TiffInfo { compression, predictor, ..TiffInfo::default() });
        }
    }
    Ok(Raster {
        width,
        height,
        planes: deinterleave(&samples, layout.channels()),
        sample_format,
        layout,
        file_format: FileFormat::Tiff,
        metadata,
    })
}

/// Gray with an (unassociated) alpha sample, which the `tiff` crate has no colour type for.
struct GrayAlpha<T>(std::marker::PhantomData<T>);

macro_rules! gray_alpha {
    ($inner:ty, $bits:expr, $fmt:expr) => {
        impl ColorType for GrayAlpha<$inner> {
            type Inner = $inner;
            const TIFF_VALUE: PhotometricInterpretation = PhotometricInterpretation::BlackIsZero;
            const BITS_PER_SAMPLE: &'static [u16] = &[$bits, $bits];
            const SAMPLE_FORMAT: &'static [TiffSampleFormat] = &[$fmt, $fmt];
            fn horizontal_predict(row: &[Self::Inner], result: &mut Vec<Self::Inner>) {
                // TIFF 6.0 §14: each sample minus the same sample of the previous pixel.
                result.extend(row.iter().take(2).copied());
                result.extend(row.iter().skip(2).zip(row).map(|(cur, prev)| predict_diff(*cur, *prev)));
            }
        }
    };
}
trait PredictDiff: Copy {
    fn diff(self, prev: Self) -> Self;
}
macro_rules! int_diff {
    ($($t:ty),*) => {$(impl PredictDiff for $t { fn diff(self, prev: Self) -> Self { self.wrapping_sub(prev) } })*};
}
int_diff!(u8, u16, i16);
impl PredictDiff for f32 {
    fn diff(self, _prev: Self) -> Self {
        unreachable!("the tiff crate refuses a horizontal predictor for float samples")
    }
}
fn predict_diff<T: PredictDiff>(cur: T, prev: T) -> T {
    cur.diff(prev)
}

gray_alpha!(u8, 8, TiffSampleFormat::Uint);
gray_alpha!(u16, 16, TiffSampleFormat::Uint);
gray_alpha!(i16, 16, TiffSampleFormat::Int);
gray_alpha!(f32, 32, TiffSampleFormat::IEEEFP);

fn write<C: ColorType>(
    enc: &mut TiffEncoder<&mut BufWriter<File>>,
    r: &Raster,
    data: &[C::Inner],
) -> tiff::TiffResult<()>
where
    [C::Inner]: TiffValue,
{
    let (w, h) = (u32::try_from(r.width)?, u32::try_from(r.height)?);
    let mut image = enc.new_image::<C>(w, h)?;
    if r.layout.has_alpha() {
        // Alpha that is not premultiplied (TIFF 6.0 §18, ExtraSamples = 2). Written directly: the
        // colour types already count the alpha sample in SamplesPerPixel.
        image.encoder().write_tag(Tag::ExtraSamples, &[ExtraSamples::UnassociatedAlpha.to_u16()][..])?;
    }
    let dir = image.encoder();
    if let Some(icc) = &r.metadata.icc_profile {
        let entry = dir.write_entry_bytes(Type::UNDEFINED, icc)?;
        dir.extend_from(&[(Tag::IccProfile, entry)].into_iter().collect());
    }
    if let Some(info) = &r.metadata.tiff {
        for t in &info.tags {
            let Some(ty) = Type::from_u16(t.field_type) else { continue };
            let entry = dir.write_entry_bytes(ty, &t.data)?;
            dir.extend_from(&[(Tag::from_u16_exhaustive(t.tag), entry)].into_iter().collect());
        }
    }
    let software = format!("reweave {}", env!("CARGO_PKG_VERSION"));
    dir.write_tag(Tag::Software, software.as_str())?;
    image.write_data(data)
}

/// The compression and predictor to write: the input's where the `tiff` crate can write them.
fn output_coding(r: &Raster, notes: &mut Vec<String>) -> (Compression, Predictor) {
    let (compression, predictor) = r.metadata.tiff.as_ref().map_or((1, 1), |t| (t.compression, t.predictor));
    let c = match compression {
        1 => Compression::Uncompressed,
        5 => Compression::Lzw,
        8 | 32946 => Compression::Deflate(DeflateLevel::Balanced),
        32773 => Compression::Packbits,
        other => {
            notes.push(format!(
                "TIFF compression {other} cannot be written; the result is Deflate-compressed (lossless)"
            ));
            Compression::Deflate(DeflateLevel::Balanced)
        }
    };
    let float = r.sample_format == SampleFormat::F32;
    let p = match (predictor, float) {
        (2, false) => Predictor::Horizontal,
        (2 | 3, true) => {
            notes.push(
                "the floating-point TIFF was written without its predictor (not available in the TIFF writer); samples are unchanged"
                    .to_owned(),
            );
            Predictor::None
        }
        _ => Predictor::None,
    };
    (c, p)
}

#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)] // samples are rounded and clamped first
pub(super) fn save(r: &Raster, w: &mut BufWriter<File>, notes: &mut Vec<String>) -> Result<(), String> {
    let (compression, predictor) = output_coding(r, notes);
    let mut enc =
        TiffEncoder::new(w).map_err(|e| e.to_string())?.with_compression(compression).with_predictor(predictor);
    let e = &mut enc;
    let result = match (r.layout, r.sample_format) {
        (Layout::Gray, SampleFormat::U8) => write::<colortype::Gray8>(e, r, &interleave(r, |v| v as u8)),
        (Layout::GrayAlpha, SampleFormat::U8) => write::<GrayAlpha<u8>>(e, r, &interleave(r, |v| v as u8)),
        (Layout::Rgb, SampleFormat::U8) => write::<colortype::RGB8>(e, r, &interleave(r, |v| v as u8)),
        (Layout::Rgba, SampleFormat::U8) => write::<colortype::RGBA8>(e, r, &interleave(r, |v| v as u8)),
        (Layout::Gray, SampleFormat::U16) => write::<colortype::Gray16>(e, r, &interleave(r, |v| v as u16)),
        (Layout::GrayAlpha, SampleFormat::U16) => write::<GrayAlpha<u16>>(e, r, &interleave(r, |v| v as u16)),
        (Layout::Rgb, SampleFormat::U16) => write::<colortype::RGB16>(e, r, &interleave(r, |v| v as u16)),
        (Layout::Rgba, SampleFormat::U16) => write::<colortype::RGBA16>(e, r, &interleave(r, |v| v as u16)),
        (Layout::Gray, SampleFormat::I16) => write::<colortype::GrayI16>(e, r, &interleave(r, |v| v as i16)),
        (Layout::GrayAlpha, SampleFormat::I16) => write::<GrayAlpha<i16>>(e, r, &interleave(r, |v| v as i16)),
        (Layout::Gray, SampleFormat::F32) => write::<colortype::Gray32Float>(e, r, &interleave(r, |v| v)),
        (Layout::GrayAlpha, SampleFormat::F32) => write::<GrayAlpha<f32>>(e, r, &interleave(r, |v| v)),
        (Layout::Rgb, SampleFormat::F32) => write::<colortype::RGB32Float>(e, r, &interleave(r, |v| v)),
        (Layout::Rgba, SampleFormat::F32) => write::<colortype::RGBA32Float>(e, r, &interleave(r, |v| v)),
        (layout, fmt) => return Err(format!("TIFF output of {} {fmt} samples is not supported", layout.name())),
    };
    result.map_err(|e| e.to_string())
}
