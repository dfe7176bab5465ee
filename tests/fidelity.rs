//! What users gave comes back exactly, plus the repair: sample formats, TIFF compression, GeoTIFF
//! tags, ICC profiles, PNG chunks, no-data values; and the record of what was filled.
//!
//! The TIFF fixtures were written by an independent writer (tifffile; tests/fixtures/
//! make_fixtures.py) and the tags of results are read back with the `tiff` crate's decoder.

use std::fs::File;
use std::io::BufReader;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use reweave::mask::Mask;
use reweave::raster::{self, Layout, Raster, SampleFormat};
use tiff::decoder::Decoder;
use tiff::tags::Tag;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures").join(name)
}

fn reweave(args: &[&std::ffi::OsStr]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_reweave")).args(args).output().expect("run reweave")
}

fn os<P: AsRef<std::ffi::OsStr> + ?Sized>(p: &P) -> &std::ffi::OsStr {
    p.as_ref()
}

fn fill_ok(args: &[&std::ffi::OsStr]) -> String {
    let o = reweave(args);
    let err = String::from_utf8_lossy(&o.stderr).into_owned();
    assert!(o.status.success(), "{err}");
    err
}

/// A TIFF tag's value as the `tiff` crate decodes it, for comparison.
fn tag_value(path: &Path, tag: u16) -> Option<String> {
    let mut d = Decoder::new(BufReader::new(File::open(path).unwrap())).unwrap();
    d.find_tag(Tag::from_u16_exhaustive(tag)).unwrap().map(|v| format!("{v:?}"))
}

fn tiff_u16(path: &Path, tag: Tag) -> Option<u32> {
    let mut d = Decoder::new(BufReader::new(File::open(path).unwrap())).unwrap();
    d.find_tag(tag).unwrap().map(|v| v.into_u32().unwrap())
}

/// Geo tags of OGC GeoTIFF 1.1 (19-008r4, Req 1.2) and GDAL_NODATA (42113, GDAL's private tag).
const GEO_TAGS: [u16; 7] = [33550, 33922, 34264, 34735, 34736, 34737, 42113];

/// Checks a no-data fill: tags identical, sample format identical, no no-data left, filled values
/// within the rim's range, every other sample identical.
fn check_nodata_fill(name: &str, is_void: impl Fn(f32) -> bool) {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(name);
    let out = dir.path().join(format!("filled-{name}"));
    let mask_out = dir.path().join("filled.png");
    fill_ok(&[os("fill"), os(&input), os("-o"), os(&out), os("--mask-out"), os(&mask_out)]);
    for tag in GEO_TAGS {
        assert_eq!(tag_value(&out, tag), tag_value(&input, tag), "{name}: tag {tag}");
    }
    assert_eq!(tiff_u16(&out, Tag::Compression), tiff_u16(&input, Tag::Compression), "{name}: compression");
    let (a, b) = (raster::load(&input).unwrap(), raster::load(&out).unwrap());
    assert_eq!(b.sample_format, a.sample_format);
    assert_eq!(b.layout, a.layout);
    let mask = raster::load_mask(&mask_out, a.width, a.height).unwrap();
    // Each hole's rim range: the known pixels next to it (discrete maximum principle).
    let (labels, sizes) = mask.label_holes();
    let (w, h) = (a.width, a.height);
    let mut lo = vec![f32::MAX; sizes.len() + 1];
    let mut hi = vec![f32::MIN; sizes.len() + 1];
    for p in 0..w * h {
        if labels[p] != 0 {
            continue;
        }
        let (x, y) = (p % w, p / w);
        let nbrs =
            [(x > 0).then(|| p - 1), (x + 1 < w).then(|| p + 1), (y > 0).then(|| p - w), (y + 1 < h).then(|| p + w)];
        for q in nbrs.into_iter().flatten() {
            let l = labels[q] as usize;
            lo[l] = lo[l].min(a.planes[0][p]);
            hi[l] = hi[l].max(a.planes[0][p]);
        }
    }
    for (i, (&x, &y)) in a.planes[0].iter().zip(&b.planes[0]).enumerate() {
        if is_void(x) {
            let l = labels[i] as usize;
            assert!(l != 0, "{name}: void pixel {i} not in --mask-out");
            // Integer outputs are rounded: allow half a unit.
            assert!(
                !is_void(y) && y >= lo[l] - 0.5 && y <= hi[l] + 0.5,
                "{name}: pixel {i} filled with {y}, outside its rim's [{}, {}]",
                lo[l],
                hi[l]
            );
        } else {
            assert_eq!(labels[i], 0);
            assert_eq!(x.to_bits(), y.to_bits(), "{name}: known pixel {i} changed");
        }
    }
}

#[test]
fn float_geotiff_with_nan_and_nodata_is_filled_and_keeps_its_tags() {
    // NaN is always missing in float data; -9999 is declared by GDAL_NODATA (common practice for
    // grids: ESRI ASCII grid's default NODATA_value).
    check_nodata_fill("dem-float32-geo.tif", |v| v.is_nan() || v == -9999.0);
}

#[test]
fn big_endian_int16_elevation_voids_are_filled() {
    // -32768 marks voids in SRTM elevation data (SRTM Topography documentation §3.1, via ORACLES.md §6).
    check_nodata_fill("dem-int16-voids-be.tif", |v| v == -32768.0);
}

#[test]
fn rgb16_tiff_keeps_its_icc_profile_and_compression() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("scan-rgb16-icc.tif");
    let mask = dir.path().join("m.png");
    raster::save_mask(&Mask::from_fn(40, 32, |x, y| (10..20).contains(&x) && (8..14).contains(&y)), &mask).unwrap();
    let out = dir.path().join("out.tif");
    fill_ok(&[os("fill"), os(&input), os("--mask"), os(&mask), os("-o"), os(&out)]);
    assert_eq!(tag_value(&out, 34675), tag_value(&input, 34675), "ICC profile (TIFF tag 34675)");
    assert_eq!(tiff_u16(&out, Tag::Compression), Some(5), "LZW kept");
    assert_eq!(tiff_u16(&out, Tag::Predictor), Some(2), "horizontal predictor kept");
    let (a, b) = (raster::load(&input).unwrap(), raster::load(&out).unwrap());
    assert_eq!((b.sample_format, b.layout), (SampleFormat::U16, Layout::Rgb));
    // The input is a linear ramp in each channel, which the harmonic fill reproduces exactly.
    for (pa, pb) in a.planes.iter().zip(&b.planes) {
        assert_eq!(pa, pb);
    }
}

#[test]
fn multi_page_tiff_reads_the_first_page_and_warns() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out.tif");
    let err =
        fill_ok(&[os("fill"), os(&fixture("frame-u16-2pages-be.tif")), os("--nodata"), os("0"), os("-o"), os(&out)]);
    assert!(err.contains("2 pages"), "warns: {err}");
    let r = raster::load(&out).unwrap();
    assert!(r.planes[0].iter().all(|&v| v > 900.0), "the dead column (0) was filled");
}

#[test]
fn fills_never_land_on_the_nodata_value() {
    // A 16-bit frame whose no-data is 0 and whose known pixels are 0 and 1 around a hole: rounded
    // fills of 0 would read as no-data again, so they are moved to 1.
    let dir = tempfile::tempdir().unwrap();
    let mut r = Raster::new(16, 16, Layout::Gray, SampleFormat::U16);
    for (i, v) in r.planes[0].iter_mut().enumerate() {
        *v = if (i / 16) % 2 == 0 { 1.0 } else { 3.0 };
    }
    for y in 4..12 {
        for x in 4..12 {
            r.planes[0][y * 16 + x] = 0.0;
        }
    }
    r.planes[0][5 * 16] = 0.0; // a void touching the left edge, next to rows of 1
    let input = dir.path().join("frame.png");
    raster::save(&r, &input).unwrap();
    let out = dir.path().join("out.png");
    fill_ok(&[os("fill"), os(&input), os("--nodata"), os("0"), os("-o"), os(&out)]);
    let b = raster::load(&out).unwrap();
    assert!(b.planes[0].iter().all(|&v| v != 0.0), "no sample equals the no-data value");
}

#[test]
fn max_hole_leaves_large_holes_and_lists_them() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("dem-int16-voids-be.tif");
    let (out, report) = (dir.path().join("out.tif"), dir.path().join("r.json"));
    fill_ok(&[os("fill"), os(&input), os("--max-hole"), os("10"), os("-o"), os(&out), os("--report"), os(&report)]);
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&report).unwrap()).unwrap();
    assert_eq!(json["unknowns"], 6);
    assert_eq!(json["nodata"], "-32768");
    assert_eq!(json["nodata_pixels"], 83);
    assert_eq!(json["skipped_pixels"], 77);
    let skipped = &json["skipped_holes"][0];
    assert_eq!(
        (skipped["x"].as_u64(), skipped["y"].as_u64(), skipped["width"].as_u64(), skipped["height"].as_u64()),
        (Some(30), Some(5), Some(11), Some(7))
    );
    let listed = &json["hole_list"][0];
    assert_eq!((listed["x"].as_u64(), listed["y"].as_u64(), listed["pixels"].as_u64()), (Some(10), Some(25), Some(6)));
    let b = raster::load(&out).unwrap();
    assert_eq!(b.planes[0].iter().filter(|&&v| v == -32768.0).count(), 77, "the large void is left as it was");
    assert!(json["output"]["sha256"].as_str().unwrap().len() == 64);
}

/// A PNG chunk: length, type, data, CRC-32 (W3C PNG 3rd ed. §5.3; CRC of ISO 3309 / ITU-T V.42).
fn chunk(kind: &[u8; 4], data: &[u8]) -> Vec<u8> {
    fn crc32(bytes: &[u8]) -> u32 {
        let mut c = 0xFFFF_FFFFu32;
        for &b in bytes {
            c ^= u32::from(b);
            for _ in 0..8 {
                c = if c & 1 != 0 { 0xEDB8_8320 ^ (c >> 1) } else { c >> 1 };
            }
        }
        !c
    }
    let mut out = (data.len() as u32).to_be_bytes().to_vec();
    let mut body = kind.to_vec();
    body.extend_from_slice(data);
    out.extend_from_slice(&body);
    out.extend_from_slice(&crc32(&body).to_be_bytes());
    out
}

/// Chunk types and data of a PNG file, in order.
fn chunks_of(path: &Path) -> Vec<([u8; 4], Vec<u8>)> {
    let bytes = std::fs::read(path).unwrap();
    let mut out = Vec::new();
    let mut i = 8;
    while i + 8 <= bytes.len() {
        let len = u32::from_be_bytes(bytes[i..i + 4].try_into().unwrap()) as usize;
        let kind: [u8; 4] = bytes[i + 4..i + 8].try_into().unwrap();
        out.push((kind, bytes[i + 8..i + 8 + len].to_vec()));
        i += 12 + len;
    }
    out
}

#[test]
fn png_ancillary_chunks_survive_and_stale_ones_are_dropped() {
    let dir = tempfile::tempdir().unwrap();
    let base = dir.path().join("base.png");
    let mut r = Raster::new(20, 12, Layout::Rgb, SampleFormat::U8);
    for p in &mut r.planes {
        for (i, v) in p.iter_mut().enumerate() {
            *v = (i % 20 * 10) as f32;
        }
    }
    raster::save(&r, &base).unwrap();
    // Insert pHYs (300 dpi = 11811 px/m), tEXt, iTXt, tIME and a private unsafe-to-copy chunk
    // after IHDR (W3C PNG 3rd ed. §11.3.4.5 pHYs, §11.3.3 text, §11.3.6.1 tIME, §14.2 copying).
    let phys = [11811u32.to_be_bytes(), 11811u32.to_be_bytes()].concat().into_iter().chain([1u8]).collect::<Vec<u8>>();
    let mut extra = chunk(b"pHYs", &phys);
    extra.extend(chunk(b"tEXt", b"Title\0Velmora Bay, harbour at dusk"));
    extra.extend(chunk(b"iTXt", b"Author\0\0\0\0\0Studio Kessel"));
    extra.extend(chunk(b"tIME", &[7, 234, 12, 2, 4, 20, 0]));
    extra.extend(chunk(b"prVA", b"private, unsafe to copy"));
    let bytes = std::fs::read(&base).unwrap();
    let ihdr_end = 8 + 12 + 13;
    let input = dir.path().join("card.png");
    std::fs::write(&input, [&bytes[..ihdr_end], &extra[..], &bytes[ihdr_end..]].concat()).unwrap();
    let mask = dir.path().join("m.png");
    raster::save_mask(&Mask::from_fn(20, 12, |x, y| x == 9 && y > 2), &mask).unwrap();
    let out = dir.path().join("out.png");
    let err = fill_ok(&[os("fill"), os(&input), os("--mask"), os(&mask), os("-o"), os(&out)]);
    assert!(err.contains("prVA"), "the dropped chunk is named: {err}");
    let got = chunks_of(&out);
    let find = |k: &[u8; 4]| got.iter().find(|(kind, _)| kind == k).map(|(_, d)| d.clone());
    assert_eq!(find(b"pHYs"), Some(phys));
    assert_eq!(find(b"tEXt").as_deref(), Some(&b"Title\0Velmora Bay, harbour at dusk"[..]));
    assert_eq!(find(b"iTXt").as_deref(), Some(&b"Author\0\0\0\0\0Studio Kessel"[..]));
    assert_eq!(find(b"tIME"), None, "tIME is stale after a repair");
    assert_eq!(find(b"prVA"), None, "unsafe-to-copy chunks are dropped when pixels change");
}

#[test]
fn a_header_claiming_ten_gigapixels_is_refused_quickly() {
    let dir = tempfile::tempdir().unwrap();
    let mut ihdr = 100_000u32.to_be_bytes().to_vec();
    ihdr.extend(100_000u32.to_be_bytes());
    ihdr.extend([8, 2, 0, 0, 0]);
    let mut png = b"\x89PNG\r\n\x1a\n".to_vec();
    png.extend(chunk(b"IHDR", &ihdr));
    png.extend(chunk(b"IDAT", &[0x78, 0x9c, 0x03, 0x00]));
    png.extend(chunk(b"IEND", &[]));
    let huge = dir.path().join("huge.png");
    std::fs::write(&huge, png).unwrap();
    let mask = dir.path().join("m.png");
    raster::save_mask(&Mask::new(4, 4), &mask).unwrap();
    let t0 = std::time::Instant::now();
    let o = reweave(&[os("fill"), os(&huge), os("--mask"), os(&mask), os("-o"), os(&dir.path().join("o.png"))]);
    let elapsed = t0.elapsed();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(err.contains("huge.png") && err.contains("--max-megapixels"), "{err}");
    assert!(elapsed.as_secs_f64() < 1.0, "refused in {elapsed:?}");

    // And in little memory: the peak resident size of the whole process (GNU time's %M, in KB),
    // where GNU time is installed (it is on the CI machine).
    let time = std::path::Path::new("/usr/bin/time");
    if time.exists() {
        let o = std::process::Command::new(time)
            .args(["-f", "%M"])
            .arg(env!("CARGO_BIN_EXE_reweave"))
            .args([os("fill"), os(&huge), os("--mask"), os(&mask), os("-o"), os(&dir.path().join("o.png"))])
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&o.stderr);
        let kb: u64 = err.lines().last().and_then(|l| l.trim().parse().ok()).expect("GNU time's report");
        assert!(kb < 100_000, "peak resident {kb} KB");
    }
}

#[test]
fn jpeg_keeps_its_icc_profile_and_warns_that_it_is_lossy() {
    // JPEG carries ICC profiles in APP2 segments (ICC.1 Annex B); the bytes here are a stand-in.
    let dir = tempfile::tempdir().unwrap();
    let mut r = Raster::new(48, 32, Layout::Rgb, SampleFormat::U8);
    for (c, p) in r.planes.iter_mut().enumerate() {
        for (i, v) in p.iter_mut().enumerate() {
            *v = ((i % 48) * 4 + c * 20) as f32;
        }
    }
    let profile: Vec<u8> = (0..500u32).map(|i| (i * 13 % 251) as u8).collect();
    r.metadata.icc_profile = Some(profile.clone());
    let input = dir.path().join("photo.jpg");
    raster::save(&r, &input).unwrap();
    let mask = dir.path().join("m.png");
    raster::save_mask(&Mask::from_fn(48, 32, |x, y| (20..24).contains(&x) && (10..20).contains(&y)), &mask).unwrap();
    let out = dir.path().join("out.jpg");
    let err = fill_ok(&[os("fill"), os(&input), os("--mask"), os(&mask), os("-o"), os(&out)]);
    assert!(err.contains("lossy"), "{err}");
    assert_eq!(raster::load(&out).unwrap().metadata.icc_profile, Some(profile));
}

#[test]
fn tiff_and_jpeg_headers_claiming_gigapixels_are_refused_before_decoding() {
    // TIFF 6.0 §2 (header, IFD entries ImageWidth 256 / ImageLength 257 as LONG) and JPEG
    // (ITU T.81 B.2.2, SOF0 frame header with 16-bit sides). StripOffsets 273 and StripByteCounts
    // 279 are there as TIFF requires.: tiny files whose headers claim
    // 10 and 4.3 gigapixels. Both are refused from the header alone, naming the file and the option
    // that raises the limit.
    let dir = tempfile::tempdir().unwrap();
    let mut tiff = b"II*\0\x08\0\0\0".to_vec();
    let entries: [(u16, u16, u32); 7] =
        [(256, 4, 100_000), (257, 4, 100_000), (258, 3, 8), (259, 3, 1), (262, 3, 1), (273, 4, 200), (279, 4, 100)];
    tiff.extend((entries.len() as u16).to_le_bytes());
    for (tag, kind, value) in entries {
        tiff.extend(tag.to_le_bytes());
        tiff.extend(kind.to_le_bytes());
        tiff.extend(1u32.to_le_bytes());
        tiff.extend(value.to_le_bytes());
    }
    tiff.extend(0u32.to_le_bytes());
    // A real small JPEG (baseline, from the image crate's encoder) with the frame header's sides
    // set to 65535 and everything after the scan header cut off.
    let small = dir.path().join("small.jpg");
    raster::save(&Raster::new(16, 12, Layout::Rgb, SampleFormat::U8), &small).unwrap();
    let mut jpeg = std::fs::read(&small).unwrap();
    let sof = jpeg.windows(2).position(|m| m == [0xFF, 0xC0]).expect("a baseline frame header");
    jpeg[sof + 5..sof + 9].copy_from_slice(&[0xFF, 0xFF, 0xFF, 0xFF]);
    let sos = jpeg.windows(2).position(|m| m == [0xFF, 0xDA]).expect("a scan header");
    let sos_len = usize::from(u16::from_be_bytes([jpeg[sos + 2], jpeg[sos + 3]]));
    jpeg.truncate(sos + 2 + sos_len);
    for (name, bytes) in [("huge.tif", tiff), ("huge.jpg", jpeg)] {
        let path = dir.path().join(name);
        std::fs::write(&path, &bytes).unwrap();
        let t0 = std::time::Instant::now();
        let err = raster::load(&path).expect_err("refused");
        assert!(t0.elapsed().as_secs_f64() < 1.0, "{name}: refused in {:?}", t0.elapsed());
        let text = err.to_string();
        assert!(text.contains(name) && text.contains("--max-megapixels"), "{name}: {text}");
    }
}
