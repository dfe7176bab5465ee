//! The bundled demo data: an invented scenario, drawn entirely by this generator.
//!
//! - `harbour-postcard.png`: a scanned postcard of the invented fishing port of Velmora Bay
//!   (8-bit RGB), with scratches, a fold line and dust, and `harbour-postcard-mask.png` marking them.
//! - `starfield-frame.tif`: a 16-bit frame from the invented Kessel Ridge survey camera, with dead
//!   and hot pixels and a dead column, and `starfield-badpix.png`, its bad-pixel map.
//! - `island-elevation.tif`: a signed 16-bit GeoTIFF elevation grid (metres) of the invented island
//!   of Tarrow, Deflate-compressed with a predictor, with a void of −32768 declared as no-data, and
//!   `island-void-mask.png` marking the void.

use std::f64::consts::PI;
use std::path::{Path, PathBuf};

use super::{Rng, paint_disk, paint_line};
use crate::mask::Mask;
use crate::raster::{self, FileFormat, Layout, Raster, RasterError, RawTag, SampleFormat, TiffInfo};

/// Writes every sample and its mask into `dir` and returns the paths written.
///
/// # Errors
/// When a file cannot be written.
pub fn write_all(dir: &Path) -> Result<Vec<PathBuf>, RasterError> {
    std::fs::create_dir_all(dir).map_err(|e| RasterError::Write { path: dir.to_owned(), message: e.to_string() })?;
    let mut written = Vec::new();
    for (name, mask_name, (image, mask)) in [
        ("harbour-postcard.png", "harbour-postcard-mask.png", harbour_postcard()),
        ("starfield-frame.tif", "starfield-badpix.png", starfield_frame()),
        ("island-elevation.tif", "island-void-mask.png", island_elevation()),
    ] {
        let (ip, mp) = (dir.join(name), dir.join(mask_name));
        raster::save(&image, &ip)?;
        raster::save_mask(&mask, &mp)?;
        written.push(ip);
        written.push(mp);
    }
    Ok(written)
}

fn lerp(a: [f64; 3], b: [f64; 3], t: f64) -> [f64; 3] {
    [a[0] + (b[0] - a[0]) * t, a[1] + (b[1] - a[1]) * t, a[2] + (b[2] - a[2]) * t]
}

/// A hand-tinted postcard of a small harbour at dusk, scanned with paper grain, then damaged.
#[allow(clippy::cast_precision_loss, clippy::cast_possible_truncation)]
#[must_use]
pub fn harbour_postcard() -> (Raster, Mask) {
    let (w, h) = (480usize, 320usize);
    let mut rng = Rng::new(1931);
    let horizon = 0.55 * h as f64;
    let mut rgb = vec![[0f64; 3]; w * h];
    for y in 0..h {
        for x in 0..w {
            let (xf, yf) = (x as f64, y as f64);
            let mut c = if yf < horizon {
                // Sky: warm at the horizon, blue above; a low sun.
                let t = yf / horizon;
                let mut c = lerp([95.0, 130.0, 185.0], [235.0, 185.0, 140.0], t * t);
                let d = ((xf - 0.7 * w as f64).powi(2) + (yf - 0.42 * h as f64).powi(2)).sqrt();
                c = lerp(c, [250.0, 225.0, 170.0], (1.0 - d / 28.0).clamp(0.0, 1.0));
                // Hills on the far shore.
                let ridge = horizon - 18.0 - 14.0 * (xf / 55.0).sin() - 9.0 * (xf / 23.0 + 1.0).sin();
                if yf > ridge {
                    c = lerp(c, [80.0, 95.0, 90.0], 0.8);
                }
                c
            } else {
                // Sea: darker further down, with wave bands.
                let t = (yf - horizon) / (h as f64 - horizon);
                let base = lerp([120.0, 140.0, 150.0], [40.0, 70.0, 90.0], t);
                let wave = 12.0 * ((yf * 0.9 + 6.0 * (xf / 37.0).sin()).sin()) * (0.3 + t);
                [base[0] + wave, base[1] + wave, base[2] + wave]
            };
            // The pier: a dark walkway from the left with posts.
            if (yf - (horizon + 30.0)).abs() < 4.0 && xf < 0.45 * w as f64 {
                c = [70.0, 52.0, 40.0];
            }
            if yf > horizon + 30.0 && yf < horizon + 52.0 && xf < 0.45 * w as f64 && (x % 24) < 3 {
                c = [55.0, 40.0, 32.0];
            }
            rgb[y * w + x] = c;
        }
    }
    // Two sailing boats: hulls and sails.
    for &(bx, by, s) in &[(300.0, horizon + 45.0, 1.0), (390.0, horizon + 20.0, 0.6)] {
        for y in 0..h {
            for x in 0..w {
                let (dx, dy) = ((x as f64 - bx) / s, (y as f64 - by) / s);
                let hull = dy > 0.0 && dy < 8.0 && dx.abs() < 26.0 - dy;
                let sail = dy <= 0.0 && dy > -48.0 && dx > -2.0 && dx < 22.0 * (1.0 + dy / 48.0);
                if hull {
                    rgb[y * w + x] = [120.0, 40.0, 35.0];
                } else if sail {
                    rgb[y * w + x] = [238.0, 230.0, 210.0];
                }
            }
        }
    }
    // Scan: paper grain and a slight sepia tint.
    let mut img = Raster::new(w, h, Layout::Rgb, SampleFormat::U8);
    for (i, c) in rgb.iter().enumerate() {
        let grain = 3.0 * rng.normal();
        let sepia = [c[0] * 0.95 + 12.0, c[1] * 0.93 + 8.0, c[2] * 0.85];
        for (plane, s) in img.planes.iter_mut().zip(sepia) {
            plane[i] = (s + grain).round().clamp(0.0, 255.0) as f32;
        }
    }
    // Damage: scratches (light), a fold line (light, across the card) and dust (dark).
    let mut mask = Mask::new(w, h);
    let mut scratch = Mask::new(w, h);
    for _ in 0..9 {
        let a = (rng.uniform() * w as f64, rng.uniform() * h as f64);
        let ang = rng.uniform() * PI;
        let len = 60.0 + 140.0 * rng.uniform();
        let b = (a.0 + len * ang.cos(), a.1 + len * ang.sin());
        paint_line(&mut scratch, a, b, 1.0 + 1.5 * rng.uniform());
    }
    paint_line(&mut scratch, (0.0, 0.3 * h as f64), (w as f64 - 1.0, 0.38 * h as f64), 2.5);
    let mut dust = Mask::new(w, h);
    for _ in 0..60 {
        paint_disk(&mut dust, rng.uniform() * w as f64, rng.uniform() * h as f64, 0.6 + 2.0 * rng.uniform());
    }
    for i in 0..w * h {
        let (x, y) = (i % w, i / w);
        if scratch.get(x, y) {
            for p in &mut img.planes {
                p[i] = 242.0;
            }
            mask.set(x, y, true);
        } else if dust.get(x, y) {
            for p in &mut img.planes {
                p[i] = 18.0;
            }
            mask.set(x, y, true);
        }
    }
    (img, mask)
}

/// A 16-bit survey-camera frame: sky background, stars, read noise; dead, hot and a dead column.
#[must_use]
pub fn starfield_frame() -> (Raster, Mask) {
    survey_frame(256, 2077, 2077)
}

/// A `size × size` 16-bit frame of the invented Kessel Ridge survey camera: a sky with a gradient,
/// stars of 2–5 px FWHM placed by `seed`, read noise, and the sensor's fixed defects (dead and hot
/// pixels and a dead column, placed by `sensor`), with the sensor's bad-pixel map.
#[allow(
    clippy::cast_precision_loss,
    clippy::cast_possible_truncation,
    clippy::cast_sign_loss,
    clippy::cast_possible_wrap
)]
#[must_use]
pub fn survey_frame(size: usize, seed: u64, sensor: u64) -> (Raster, Mask) {
    let (w, h) = (size, size);
    let mut rng = Rng::new(seed);
    let mut v: Vec<f64> = (0..w * h)
        .map(|i| 1200.0 + 0.8 * (i % w) as f64 * 256.0 / size as f64 + 0.3 * (i / w) as f64 * 256.0 / size as f64)
        .collect();
    let stars = 45 * (size * size) / (256 * 256);
    for _ in 0..stars {
        let (sx, sy) = (rng.uniform() * w as f64, rng.uniform() * h as f64);
        let fwhm = 2.0 + 3.0 * rng.uniform();
        let sigma = fwhm / 2.354_820_045;
        let peak = 500.0 + 20000.0 * rng.uniform().powi(3);
        let r = (4.0 * sigma).ceil() as isize;
        for dy in -r..=r {
            for dx in -r..=r {
                let (x, y) = (sx as isize + dx, sy as isize + dy);
                if x < 0 || y < 0 || x >= w as isize || y >= h as isize {
                    continue;
                }
                let d2 = (x as f64 - sx).powi(2) + (y as f64 - sy).powi(2);
                v[y as usize * w + x as usize] += peak * (-d2 / (2.0 * sigma * sigma)).exp();
            }
        }
    }
    let mut img = Raster::new(w, h, Layout::Gray, SampleFormat::U16);
    for (o, &s) in img.planes[0].iter_mut().zip(&v) {
        *o = (s + 8.0 * rng.normal()).round().clamp(0.0, 65535.0) as f32;
    }
    let mut defects = Rng::new(sensor);
    let mut mask = Mask::new(w, h);
    let col = (171 * size) / 256;
    for y in 0..h {
        img.planes[0][y * w + col] = 0.0;
        mask.set(col, y, true);
    }
    for k in 0..(60 * size * size) / (256 * 256) {
        let (x, y) = (defects.below(w), defects.below(h));
        img.planes[0][y * w + x] = if k % 2 == 0 { 65535.0 } else { 0.0 };
        mask.set(x, y, true);
    }
    (img, mask)
}

/// Writes `count` survey frames of one sensor (`frame-0000.tif`, …) and its map `badpix.png`.
///
/// # Errors
/// When a file cannot be written.
pub fn write_frames(dir: &Path, count: usize, size: usize) -> Result<Vec<PathBuf>, RasterError> {
    std::fs::create_dir_all(dir).map_err(|e| RasterError::Write { path: dir.to_owned(), message: e.to_string() })?;
    let mut written = Vec::with_capacity(count + 1);
    for k in 0..count {
        let (frame, mask) = survey_frame(size, 1000 + k as u64, 7);
        let path = dir.join(format!("frame-{k:04}.tif"));
        raster::save(&frame, &path)?;
        written.push(path);
        if k == 0 {
            let mp = dir.join("badpix.png");
            raster::save_mask(&mask, &mp)?;
            written.push(mp);
        }
    }
    Ok(written)
}

/// A signed 16-bit elevation grid of a small volcanic island, with a void of −32768.
#[allow(clippy::cast_precision_loss, clippy::cast_possible_truncation)]
#[must_use]
pub fn island_elevation() -> (Raster, Mask) {
    let (w, h) = (300usize, 240usize);
    let mut img = Raster::new(w, h, Layout::Gray, SampleFormat::I16);
    for y in 0..h {
        for x in 0..w {
            let (u, v) = (x as f64 / w as f64 - 0.5, y as f64 / h as f64 - 0.5);
            let cone = 640.0 * (-(u * u + v * v) / 0.035).exp();
            let ridge = 180.0 * (-((u - 0.15) * (u - 0.15) + (v + 0.12) * (v + 0.12)) / 0.008).exp();
            let swell = 25.0 * (u * 17.0).sin() * (v * 13.0).cos();
            let z = cone + ridge + swell - 40.0;
            img.planes[0][y * w + x] = z.round().clamp(-200.0, 2000.0) as f32;
        }
    }
    // The void: an irregular patch where the survey returned nothing.
    let mut mask = Mask::new(w, h);
    paint_disk(&mut mask, 175.0, 110.0, 16.0);
    paint_disk(&mut mask, 192.0, 121.0, 11.0);
    paint_line(&mut mask, (150.0, 100.0), (210.0, 140.0), 5.0);
    for (i, &m) in mask.bits().iter().enumerate() {
        if m {
            img.planes[0][i] = -32768.0;
        }
    }
    // Georeferencing (OGC GeoTIFF 1.1): WGS 84 longitude/latitude, pixel-is-area, 1/1200° pixels
    // from a tiepoint in the open Atlantic where no real island is; no-data −32768 (GDAL_NODATA).
    img.file_format = FileFormat::Tiff;
    img.metadata.nodata = Some("-32768".to_owned());
    img.metadata.tiff = Some(TiffInfo {
        compression: 8,
        predictor: 2,
        big_endian: false,
        tags: vec![
            RawTag::doubles(33550, &[1.0 / 1200.0, 1.0 / 1200.0, 0.0]),
            RawTag::doubles(33922, &[0.0, 0.0, 0.0, -31.5, 38.25, 0.0]),
            RawTag::shorts(34735, &[1, 1, 0, 3, 1024, 0, 1, 2, 1025, 0, 1, 1, 2048, 0, 1, 4326]),
            RawTag::ascii(42113, "-32768"),
        ],
    });
    (img, mask)
}
