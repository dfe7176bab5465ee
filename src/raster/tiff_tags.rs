//! Reads chosen TIFF tags verbatim (field type, count, value bytes) from the first image file
//! directory, so they can be written back unchanged, and counts the pages. Classic TIFF and
//! BigTIFF, either byte order (TIFF 6.0 §2; BigTIFF design note).

use std::fs::File;
use std::io::{self, BufReader, Read, Seek, SeekFrom};
use std::path::Path;

use super::RawTag;

/// Tags carried from input to output unchanged (Software is replaced by the writer).
pub(super) const PRESERVED: &[u16] = &[
    270,   // ImageDescription
    282,   // XResolution
    283,   // YResolution
    296,   // ResolutionUnit
    306,   // DateTime
    315,   // Artist
    700,   // XMP packet
    33432, // Copyright
    33723, // IPTC-NAA
    33550, // ModelPixelScale (GeoTIFF)
    33922, // ModelTiepoint (GeoTIFF)
    34264, // ModelTransformation (GeoTIFF)
    34735, // GeoKeyDirectory (GeoTIFF)
    34736, // GeoDoubleParams (GeoTIFF)
    34737, // GeoAsciiParams (GeoTIFF)
    42112, // GDAL_METADATA
    42113, // GDAL_NODATA
];

/// The tag holding GDAL's no-data value (ASCII).
pub(super) const GDAL_NODATA: u16 = 42113;

/// Largest tag value read (a GeoTIFF's tags are a few kilobytes).
const MAX_TAG_BYTES: u64 = 64 << 20;
/// Most directory entries accepted.
const MAX_ENTRIES: u64 = 65_536;
/// Pages counted at most.
const MAX_PAGES: usize = 100_000;

/// Bytes per element, and the unit whose byte order flips (rationals flip per 32-bit half).
fn type_size(field_type: u16) -> Option<(u64, usize)> {
    Some(match field_type {
        1 | 2 | 6 | 7 => (1, 1),
        3 | 8 => (2, 2),
        4 | 9 | 11 | 13 => (4, 4),
        5 | 10 => (8, 4),
        12 | 16 | 17 | 18 => (8, 8),
        _ => return None,
    })
}

/// What the directory reader found.
pub(super) struct Found {
    pub big_endian: bool,
    pub tags: Vec<RawTag>,
    pub pages: usize,
}

struct Reader<R> {
    r: R,
    be: bool,
}

impl<R: Read + Seek> Reader<R> {
    fn bytes<const N: usize>(&mut self) -> io::Result<[u8; N]> {
        let mut b = [0u8; N];
        self.r.read_exact(&mut b)?;
        if self.be {
            b.reverse();
        }
        Ok(b)
    }
    fn u16(&mut self) -> io::Result<u16> {
        self.bytes::<2>().map(u16::from_le_bytes)
    }
    fn u32(&mut self) -> io::Result<u32> {
        self.bytes::<4>().map(u32::from_le_bytes)
    }
    fn u64(&mut self) -> io::Result<u64> {
        self.bytes::<8>().map(u64::from_le_bytes)
    }
}

/// Reads the tags listed in `wanted` from the first directory of the TIFF at `path`.
pub(super) fn read(path: &Path, wanted: &[u16]) -> io::Result<Found> {
    let mut file = BufReader::new(File::open(path)?);
    let mut order = [0u8; 2];
    file.read_exact(&mut order)?;
    let be = match &order {
        b"II" => false,
        b"MM" => true,
        _ => return Err(io::Error::new(io::ErrorKind::InvalidData, "not a TIFF byte-order mark")),
    };
    let mut r = Reader { r: file, be };
    let version = r.u16()?;
    let big = match version {
        42 => false,
        43 => true,
        _ => return Err(io::Error::new(io::ErrorKind::InvalidData, "not a TIFF version")),
    };
    let first = if big {
        let _bytesize = r.u16()?;
        let _zero = r.u16()?;
        r.u64()?
    } else {
        u64::from(r.u32()?)
    };
    let file_len = r.r.seek(SeekFrom::End(0))?;
    let mut tags = Vec::new();
    let mut pages = 0;
    let mut next = first;
    while next != 0 && next < file_len && pages < MAX_PAGES {
        r.r.seek(SeekFrom::Start(next))?;
        let entries = if big { r.u64()? } else { u64::from(r.u16()?) };
        if entries > MAX_ENTRIES {
            return Err(io::Error::new(io::ErrorKind::InvalidData, "implausible TIFF directory"));
        }
        let entry_size: u64 = if big { 20 } else { 12 };
        if pages == 0 {
            for k in 0..entries {
                r.r.seek(SeekFrom::Start(next + if big { 8 } else { 2 } + k * entry_size))?;
                let tag = r.u16()?;
                let field_type = r.u16()?;
                let count = if big { r.u64()? } else { u64::from(r.u32()?) };
                if !wanted.contains(&tag) {
                    continue;
                }
                let Some((size, unit)) = type_size(field_type) else { continue };
                let total = size.saturating_mul(count);
                if total > MAX_TAG_BYTES {
                    continue;
                }
                let inline = if big { 8 } else { 4 };
                if total > inline {
                    let offset = if big { r.u64()? } else { u64::from(r.u32()?) };
                    r.r.seek(SeekFrom::Start(offset))?;
                }
                #[allow(clippy::cast_possible_truncation)] // bounded by MAX_TAG_BYTES
                let mut data = vec![0u8; total as usize];
                r.r.read_exact(&mut data)?;
                if be && unit > 1 {
                    for chunk in data.chunks_exact_mut(unit) {
                        chunk.reverse();
                    }
                }
                tags.push(RawTag { tag, field_type, count, data });
            }
        }
        pages += 1;
        r.r.seek(SeekFrom::Start(next + if big { 8 } else { 2 } + entries * entry_size))?;
        let following = if big { r.u64()? } else { u64::from(r.u32()?) };
        if following <= next {
            break; // a loop or the end
        }
        next = following;
    }
    tags.sort_by_key(|t| t.tag);
    Ok(Found { big_endian: be, tags, pages: pages.max(1) })
}

/// The text of an ASCII tag, without its terminating NUL.
pub(super) fn ascii(tag: &RawTag) -> String {
    let end = tag.data.iter().position(|&b| b == 0).unwrap_or(tag.data.len());
    String::from_utf8_lossy(&tag.data[..end]).trim().to_owned()
}
