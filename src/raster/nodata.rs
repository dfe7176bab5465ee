//! No-data values: parsing them, finding the pixels that hold them, and keeping filled samples
//! off them.

use crate::mask::Mask;
use crate::raster::{Raster, SampleFormat};

/// Parses a no-data value: a number, or "nan" (any case), as GDAL writes them.
pub fn parse_nodata(text: &str) -> Option<f64> {
    let t = text.trim().trim_end_matches('\0').trim();
    if t.eq_ignore_ascii_case("nan") || t.eq_ignore_ascii_case("-nan") {
        return Some(f64::NAN);
    }
    t.parse::<f64>().ok()
}

/// Pixels to fill because a sample holds the no-data value or is not a finite number.
pub fn missing_samples(image: &Raster, nodata: Option<f64>) -> Mask {
    let n = image.width * image.height;
    let mut bits = vec![false; n];
    for plane in &image.planes {
        for (b, &v) in bits.iter_mut().zip(plane) {
            let hit = !v.is_finite() || nodata.is_some_and(|d| if d.is_nan() { v.is_nan() } else { f64::from(v) == d });
            *b |= hit;
        }
    }
    Mask::from_bits(image.width, image.height, bits)
}

/// Moves filled samples that would be stored as the no-data value one step off it, so the output
/// holds no false no-data pixels. Returns how many were moved.
pub fn keep_off_nodata(planes: &mut [Vec<f32>], fmt: SampleFormat, mask: &Mask, nodata: f64) -> usize {
    if nodata.is_nan() {
        return 0; // a fill is never NaN
    }
    let mut moved = 0;
    for plane in planes {
        for (v, &m) in plane.iter_mut().zip(mask.bits()) {
            if !m || f64::from(fmt.quantize(*v)) != nodata {
                continue;
            }
            let q = fmt.quantize(*v);
            *v = if fmt == SampleFormat::F32 {
                let up = f32::from_bits(q.to_bits() + 1);
                if up.is_finite() { up } else { f32::from_bits(q.to_bits() - 1) }
            } else if fmt.quantize(q + 1.0) != q && (*v >= q || fmt.quantize(q - 1.0) == q) {
                q + 1.0
            } else {
                q - 1.0
            };
            moved += 1;
        }
    }
    moved
}
