//! PNG through the `png` crate, carrying ancillary chunks through verbatim.
//!
//! Palettes and bit depths below 8 are expanded on reading (to RGB/RGBA or 8-bit gray), so the
//! result is written as 8-bit truecolour or gray. Chunks kept byte for byte: iCCP, sRGB, gAMA,
//! cHRM, pHYs, tEXt, zTXt, iTXt, eXIf, cICP, mDCV, cLLI, and sBIT and bKGD when the pixel format
//! did not change; unknown chunks whose safe-to-copy bit is set. Dropped, following W3C PNG 3rd
//! ed. §14.2 (pixel data changed): tIME (the image was modified), unknown chunks that are not safe
//! to copy, and what expansion made meaningless (PLTE, tRNS — it became an alpha channel — and
//! animation chunks, since only the first frame is read).

use std::fs::File;
use std::io::{BufReader, BufWriter, Read, Seek, SeekFrom, Write};
use std::path::Path;

use png::{BitDepth, ColorType, Transformations};

use super::codec::deinterleave;
use super::{FileFormat, Layout, Limits, Metadata, Raster, RasterError, SampleFormat};

/// Chunks that stay valid whatever happens to the pixels.
const ALWAYS_KEPT: [&[u8; 4]; 12] =
    [b"iCCP", b"sRGB", b"gAMA", b"cHRM", b"pHYs", b"tEXt", b"zTXt", b"iTXt", b"eXIf", b"cICP", b"mDCV", b"cLLI"];
/// Chunks tied to the stored pixel format.
const FORMAT_BOUND: [&[u8; 4]; 2] = [b"sBIT", b"bKGD"];
/// Chunks never copied (rebuilt by the writer, or made invalid by the repair or by expansion).
const NEVER: [&[u8; 4]; 9] = [b"IHDR", b"PLTE", b"IDAT", b"IEND", b"tRNS", b"tIME", b"acTL", b"fcTL", b"fdAT"];
/// Most bytes of ancillary chunks carried through.
const MAX_KEPT_BYTES: u64 = 64 << 20;

pub(super) fn load(path: &Path, limits: Limits) -> Result<Raster, RasterError> {
    let decode_err = |e: png::DecodingError| match e {
        png::DecodingError::LimitsExceeded => {
            RasterError::TooLarge { path: path.to_owned(), width: 0, height: 0, limit: limits.max_pixels }
        }
        other => RasterError::Decode { path: path.to_owned(), format: "PNG", message: other.to_string() },
    };
    let file = File::open(path).map_err(|error| RasterError::Open { path: path.to_owned(), error })?;
    let bytes_limit = usize::try_from(limits.max_bytes).unwrap_or(usize::MAX);
    let mut decoder = png::Decoder::new_with_limits(BufReader::new(file), png::Limits { bytes: bytes_limit });
    decoder.set_transformations(Transformations::EXPAND);
    let mut reader = decoder.read_info().map_err(decode_err)?;
    let (w, h, source_colour, source_depth) = {
        let info = reader.info();
        (info.width, info.height, info.color_type, info.bit_depth)
    };
    limits.check(path, w, h)?;
    let icc_profile = reader.info().icc_profile.as_ref().map(|p| p.to_vec());
    let (colour, depth) = reader.output_color_type();
    let layout = match colour {
        ColorType::Grayscale => Layout::Gray,
        ColorType::GrayscaleAlpha => Layout::GrayAlpha,
        ColorType::Rgb => Layout::Rgb,
        ColorType::Rgba => Layout::Rgba,
        ColorType::Indexed => {
            return Err(RasterError::Unsupported { path: path.to_owned(), what: "an unexpanded palette".to_owned() });
        }
    };
    let size = reader.output_buffer_size().ok_or_else(|| RasterError::TooLarge {
        path: path.to_owned(),
        width: w.into(),
        height: h.into(),
        limit: limits.max_pixels,
    })?;
    let mut buf = vec![0u8; size];
    let frame = reader.next_frame(&mut buf).map_err(decode_err)?;
    buf.truncate(frame.buffer_size());
    let (sample_format, samples): (SampleFormat, Vec<f32>) = match depth {
        BitDepth::Sixteen => {
            (SampleFormat::U16, buf.chunks_exact(2).map(|b| f32::from(u16::from_be_bytes([b[0], b[1]]))).collect())
        }
        _ => (SampleFormat::U8, buf.iter().map(|&b| f32::from(b)).collect()),
    };
    let (width, height) = (w as usize, h as usize);
    if samples.len() < width * height * layout.channels() {
        return Err(RasterError::Decode {
            path: path.to_owned(),
            format: "PNG",
            message: "too few samples".to_owned(),
        });
    }
    let unchanged_format = source_colour != ColorType::Indexed && source_depth as u8 >= 8;
    let mut metadata = Metadata { icc_profile, ..Metadata::default() };
    match read_chunks(path, unchanged_format) {
        Ok((chunks, dropped)) => {
            metadata.png_chunks = chunks;
            if !dropped.is_empty() {
                metadata.warnings.push(format!(
                    "'{}': these chunks will not be copied to the output, as the PNG standard requires when the image changes: {}",
                    path.display(),
                    dropped.join(", ")
                ));
            }
        }
        Err(e) => {
            metadata.warnings.push(format!("the chunks of '{}' could not be read for copying ({e})", path.display()))
        }
    }
    Ok(Raster {
        width,
        height,
        planes: deinterleave(&samples[..width * height * layout.channels()], layout.channels()),
        sample_format,
        layout,
        file_format: FileFormat::Png,
        metadata,
    })
}

/// Reads the ancillary chunks to carry through, in file order, and names the unknown ones dropped.
#[allow(clippy::type_complexity)]
fn read_chunks(path: &Path, unchanged_format: bool) -> std::io::Result<(Vec<([u8; 4], Vec<u8>)>, Vec<String>)> {
    let mut f = BufReader::new(File::open(path)?);
    f.seek(SeekFrom::Start(8))?;
    let mut kept = Vec::new();
    let mut dropped = Vec::new();
    let mut total = 0u64;
    loop {
        let mut head = [0u8; 8];
        if f.read_exact(&mut head).is_err() {
            break;
        }
        let len = u64::from(u32::from_be_bytes([head[0], head[1], head[2], head[3]]));
        let kind = [head[4], head[5], head[6], head[7]];
        if &kind == b"IEND" {
            break;
        }
        let known = ALWAYS_KEPT.contains(&&kind) || FORMAT_BOUND.contains(&&kind) || NEVER.contains(&&kind);
        let safe_to_copy = kind[3] & 0x20 != 0;
        let keep = ALWAYS_KEPT.contains(&&kind)
            || (FORMAT_BOUND.contains(&&kind) && unchanged_format)
            || (!known && kind[0] & 0x20 != 0 && safe_to_copy);
        if !known && !keep && kind[0] & 0x20 != 0 {
            dropped.push(String::from_utf8_lossy(&kind).into_owned());
        }
        if keep && total + len <= MAX_KEPT_BYTES {
            #[allow(clippy::cast_possible_truncation)] // bounded by MAX_KEPT_BYTES
            let mut data = vec![0u8; len as usize];
            f.read_exact(&mut data)?;
            total += len;
            kept.push((kind, data));
            f.seek(SeekFrom::Current(4))?;
        } else {
            f.seek(SeekFrom::Current(i64::try_from(len).unwrap_or(i64::MAX) + 4))?;
        }
    }
    Ok((kept, dropped))
}

#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)] // values are rounded and clamped first
pub(super) fn save(r: &Raster, w: &mut BufWriter<File>) -> Result<(), String> {
    let (width, height) =
        (u32::try_from(r.width).map_err(|e| e.to_string())?, u32::try_from(r.height).map_err(|e| e.to_string())?);
    let colour = match r.layout {
        Layout::Gray => ColorType::Grayscale,
        Layout::GrayAlpha => ColorType::GrayscaleAlpha,
        Layout::Rgb => ColorType::Rgb,
        Layout::Rgba => ColorType::Rgba,
    };
    let (depth, data): (BitDepth, Vec<u8>) = match r.sample_format {
        SampleFormat::U8 => (BitDepth::Eight, super::codec::interleave(r, |v| v as u8)),
        SampleFormat::U16 => {
            // PNG stores 16-bit samples most significant byte first (W3C PNG 3rd ed. §7.1).
            (
                BitDepth::Sixteen,
                super::codec::interleave(r, |v| v as u16).into_iter().flat_map(u16::to_be_bytes).collect(),
            )
        }
        other => return Err(format!("PNG cannot store {other} samples")),
    };
    let mut info = png::Info::with_size(width, height);
    info.color_type = colour;
    info.bit_depth = depth;
    let raw_icc = r.metadata.png_chunks.iter().any(|(k, _)| k == b"iCCP");
    if !raw_icc && let Some(icc) = &r.metadata.icc_profile {
        info.icc_profile = Some(icc.clone().into());
    }
    let mut encoder = png::Encoder::with_info(&mut *w, info).map_err(|e| e.to_string())?;
    encoder.set_compression(png::Compression::Balanced);
    let mut writer = encoder.write_header().map_err(|e| e.to_string())?;
    for (kind, data) in &r.metadata.png_chunks {
        writer.write_chunk(png::chunk::ChunkType(*kind), data).map_err(|e| e.to_string())?;
    }
    writer.write_image_data(&data).map_err(|e| e.to_string())?;
    writer.finish().map_err(|e| e.to_string())?;
    w.flush().map_err(|e| e.to_string())
}
