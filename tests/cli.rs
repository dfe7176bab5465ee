//! `reweave fill` from a user's side: exit codes, messages that name the file, nothing written on
//! failure, inputs never changed.

// Source: exit codes 0/1/2 as the Core issue fixes them (common practice; clap exits with 2 on
// usage errors); counts (16 unknowns, 1 hole) follow from the 4×4 fixture box; SHA-256 values are
// compared with an independent hash of the same file (FIPS 180-4 via the sha2 crate).

use std::path::PathBuf;
use std::process::{Command, Output};

use reweave::mask::Mask;
use reweave::raster::{self, Layout, Raster, SampleFormat};

fn reweave(args: &[&std::ffi::OsStr]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_reweave")).args(args).output().expect("run reweave")
}

fn os<P: AsRef<std::ffi::OsStr> + ?Sized>(p: &P) -> &std::ffi::OsStr {
    p.as_ref()
}

/// A temporary folder with a 32×24 RGB image and a mask with a small hole.
struct Fixture {
    dir: tempfile::TempDir,
    image: PathBuf,
    mask: PathBuf,
}

impl Fixture {
    fn new() -> Self {
        let dir = tempfile::tempdir().unwrap();
        let mut r = Raster::new(32, 24, Layout::Rgb, SampleFormat::U8);
        for (c, p) in r.planes.iter_mut().enumerate() {
            for (i, v) in p.iter_mut().enumerate() {
                *v = ((i * (c + 3)) % 256) as f32;
            }
        }
        let image = dir.path().join("scan.png");
        raster::save(&r, &image).unwrap();
        let mask = dir.path().join("damage.png");
        raster::save_mask(&Mask::from_fn(32, 24, |x, y| (10..14).contains(&x) && (5..9).contains(&y)), &mask).unwrap();
        Self { dir, image, mask }
    }

    fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// Names of the files in the folder (to check that nothing else was written).
    fn listing(&self) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(self.dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Runs a fill that must fail: checks the exit code, that the message names `names`, that no
/// new file appeared and that the inputs are unchanged.
fn assert_fails(fx: &Fixture, args: &[&std::ffi::OsStr], code: i32, names: &str) {
    let before = fx.listing();
    let image_bytes = std::fs::read(&fx.image).unwrap();
    let out = reweave(args);
    let msg = stderr(&out);
    assert_eq!(out.status.code(), Some(code), "exit code; stderr: {msg}");
    assert!(msg.contains(names), "message should name '{names}': {msg}");
    assert_eq!(msg.trim().lines().count(), 1, "one-line message: {msg}");
    assert_eq!(fx.listing(), before, "no file may be written on failure");
    assert_eq!(std::fs::read(&fx.image).unwrap(), image_bytes, "input changed");
}

#[test]
fn fill_writes_result_and_report() {
    let fx = Fixture::new();
    let (out, rep) = (fx.path("repaired.png"), fx.path("repaired.json"));
    let o =
        reweave(&[os("fill"), os(&fx.image), os("--mask"), os(&fx.mask), os("-o"), os(&out), os("--report"), os(&rep)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&rep).unwrap()).unwrap();
    assert_eq!(json["unknowns"], 16);
    assert_eq!(json["holes"], 1);
    assert_eq!(json["largest_hole"], 16);
    assert_eq!(json["width"], 32);
    assert_eq!(json["height"], 24);
    assert_eq!(json["channel_count"], 3);
    assert_eq!(json["bit_depth"], 8);
    assert_eq!(json["method"], "harmonic");
    assert_eq!(json["channels"].as_array().unwrap().len(), 3);
    assert!(json["caution"].as_str().unwrap().contains("estimates"));
    assert_eq!(json["inputs"]["image"]["sha256"], reweave::report::sha256_file(&fx.image).unwrap());
    assert_eq!(json["inputs"]["mask"]["sha256"], reweave::report::sha256_file(&fx.mask).unwrap());
    for key in ["load", "setup", "solve", "save"] {
        assert!(json["seconds"][key].as_f64().unwrap() >= 0.0);
    }
    assert!(!fx.listing().iter().any(|n| n.contains(".tmp")), "temporary files left: {:?}", fx.listing());
}

#[test]
fn missing_input_is_reported() {
    let fx = Fixture::new();
    let (missing, out) = (fx.path("nope.png"), fx.path("o.png"));
    let args = [os("fill"), os(&missing), os("--mask"), os(&fx.mask), os("-o"), os(&out)];
    assert_fails(&fx, &args, 1, "nope.png");
    // The system's reason is given once (it was repeated as the error's cause).
    let msg = stderr(&reweave(&args));
    assert_eq!(msg.matches("(os error").count(), 1, "{msg}");
}

#[test]
fn truncated_image_is_reported() {
    let fx = Fixture::new();
    let bytes = std::fs::read(&fx.image).unwrap();
    let cut = fx.path("cut.png");
    std::fs::write(&cut, &bytes[..bytes.len() / 2]).unwrap();
    assert_fails(
        &fx,
        &[os("fill"), os(&cut), os("--mask"), os(&fx.mask), os("-o"), os(&fx.path("o.png"))],
        1,
        "cut.png",
    );
}

#[test]
fn non_image_empty_file_and_folder_are_reported() {
    let fx = Fixture::new();
    let text = fx.path("notes.png");
    std::fs::write(&text, "this is not an image").unwrap();
    assert_fails(
        &fx,
        &[os("fill"), os(&text), os("--mask"), os(&fx.mask), os("-o"), os(&fx.path("o.png"))],
        1,
        "notes.png",
    );
    let empty = fx.path("empty.png");
    std::fs::write(&empty, b"").unwrap();
    assert_fails(
        &fx,
        &[os("fill"), os(&empty), os("--mask"), os(&fx.mask), os("-o"), os(&fx.path("o.png"))],
        1,
        "empty.png",
    );
    let folder = fx.path("folder.png");
    std::fs::create_dir(&folder).unwrap();
    assert_fails(
        &fx,
        &[os("fill"), os(&folder), os("--mask"), os(&fx.mask), os("-o"), os(&fx.path("o.png"))],
        1,
        "folder.png",
    );
}

#[test]
fn mask_of_another_size_is_reported() {
    let fx = Fixture::new();
    let small = fx.path("small-mask.png");
    raster::save_mask(&Mask::new(10, 10), &small).unwrap();
    assert_fails(
        &fx,
        &[os("fill"), os(&fx.image), os("--mask"), os(&small), os("-o"), os(&fx.path("o.png"))],
        1,
        "small-mask.png",
    );
}

#[test]
fn mask_covering_everything_is_reported() {
    let fx = Fixture::new();
    let all = fx.path("all.png");
    raster::save_mask(&Mask::from_fn(32, 24, |_, _| true), &all).unwrap();
    assert_fails(
        &fx,
        &[os("fill"), os(&fx.image), os("--mask"), os(&all), os("-o"), os(&fx.path("o.png"))],
        1,
        "scan.png",
    );
}

#[test]
fn writing_over_the_input_needs_in_place() {
    let fx = Fixture::new();
    assert_fails(&fx, &[os("fill"), os(&fx.image), os("--mask"), os(&fx.mask), os("-o"), os(&fx.image)], 2, "scan.png");
    let before = std::fs::read(&fx.image).unwrap();
    let o = reweave(&[os("fill"), os(&fx.image), os("--mask"), os(&fx.mask), os("--in-place")]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_ne!(std::fs::read(&fx.image).unwrap(), before, "--in-place rewrote the input");
}

#[test]
fn usage_errors_exit_with_2() {
    let fx = Fixture::new();
    assert_fails(
        &fx,
        &[os("fill"), os(&fx.image), os("--mask"), os(&fx.mask), os("-o"), os(&fx.path("o.bmp"))],
        2,
        "o.bmp",
    );
    let o = reweave(&[os("fill"), os(&fx.image), os("--bogus")]);
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn nothing_to_fill_is_reported() {
    // No mask, no alpha option, and an 8-bit PNG declares no no-data value: nothing marks pixels.
    let fx = Fixture::new();
    assert_fails(&fx, &[os("fill"), os(&fx.image), os("-o"), os(&fx.path("o.png"))], 1, "--mask");
}

#[test]
fn mask_from_alpha_needs_alpha() {
    let fx = Fixture::new();
    assert_fails(
        &fx,
        &[os("fill"), os(&fx.image), os("--mask-from-alpha"), os("-o"), os(&fx.path("o.png"))],
        1,
        "scan.png",
    );
}

#[test]
fn mask_from_alpha_fills_transparent_pixels() {
    let fx = Fixture::new();
    let mut r = Raster::new(16, 16, Layout::Rgba, SampleFormat::U8);
    for (c, p) in r.planes.iter_mut().enumerate() {
        for (i, v) in p.iter_mut().enumerate() {
            *v = if c == 3 { if i == 5 * 16 + 5 { 0.0 } else { 255.0 } } else { 100.0 };
        }
    }
    r.planes[0][5 * 16 + 5] = 0.0;
    let input = fx.path("logo.png");
    raster::save(&r, &input).unwrap();
    let out = fx.path("logo-filled.png");
    let o = reweave(&[os("fill"), os(&input), os("--mask-from-alpha"), os("-o"), os(&out)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let filled = raster::load(&out).unwrap();
    let i = 5 * 16 + 5;
    assert_eq!((filled.planes[0][i], filled.planes[3][i]), (100.0, 255.0), "colour and alpha filled from neighbours");
}

#[test]
fn empty_mask_copies_the_image_through() {
    let fx = Fixture::new();
    let none = fx.path("none.png");
    raster::save_mask(&Mask::new(32, 24), &none).unwrap();
    let out = fx.path("copy.png");
    let o = reweave(&[os("fill"), os(&fx.image), os("--mask"), os(&none), os("-o"), os(&out)]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stderr(&o).contains("no pixel"), "says so: {}", stderr(&o));
    assert_eq!(std::fs::read(&out).unwrap(), std::fs::read(&fx.image).unwrap());
}

#[test]
fn unwritable_output_folder_is_reported() {
    let fx = Fixture::new();
    let out = fx.path("no-such-folder").join("o.png");
    assert_fails(&fx, &[os("fill"), os(&fx.image), os("--mask"), os(&fx.mask), os("-o"), os(&out)], 1, "o.png");
}

#[test]
fn help_explains_every_option_with_an_example() {
    let o = reweave(&[os("fill"), os("--help")]);
    assert!(o.status.success());
    let text = String::from_utf8_lossy(&o.stdout);
    for flag in ["--mask", "--mask-from-alpha", "--output", "--in-place", "--report", "--tolerance", "Examples:"] {
        assert!(text.contains(flag), "help lacks {flag}");
    }
    let o = reweave(&[os("--help")]);
    assert!(o.status.success());
    assert!(String::from_utf8_lossy(&o.stdout).contains("reweave fill"));
}

#[test]
fn distance_map_and_deep_hole_warning() {
    // The distance of a filled pixel to the nearest known one (exact Euclidean distance transform,
    // Felzenszwalb & Huttenlocher 2012): 1 on the rim of the 4×4 hole, 2 inside, 0 outside.
    let fx = Fixture::new();
    let (out, map) = (fx.path("out.png"), fx.path("distance.tif"));
    let o = reweave(&[
        os("fill"),
        os(&fx.image),
        os("--mask"),
        os(&fx.mask),
        os("-o"),
        os(&out),
        os("--distance-map"),
        os(&map),
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert!(!stderr(&o).contains("more than 16 px"), "a small hole is not deep");
    let d = raster::load(&map).unwrap();
    assert_eq!((d.width, d.height, d.sample_format), (32, 24, SampleFormat::F32));
    assert_eq!(d.planes[0][5 * 32 + 10], 1.0);
    assert_eq!(d.planes[0][6 * 32 + 11], 2.0);
    assert_eq!(d.planes[0][0], 0.0);

    // A disk of radius 20 reaches about 20 px from any known pixel: warned and reported.
    let big = fx.path("big-mask.png");
    let mut r = Raster::new(64, 64, Layout::Gray, SampleFormat::U8);
    r.planes[0].fill(100.0);
    let image = fx.path("plain.png");
    raster::save(&r, &image).unwrap();
    raster::save_mask(
        &Mask::from_fn(64, 64, |x, y| (x as f64 - 32.0).powi(2) + (y as f64 - 32.0).powi(2) < 400.0),
        &big,
    )
    .unwrap();
    let report = fx.path("big.json");
    let o = reweave(&[
        os("fill"),
        os(&image),
        os("--mask"),
        os(&big),
        os("-o"),
        os(&fx.path("big.png")),
        os("--report"),
        os(&report),
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert!(stderr(&o).contains("more than 16 px") && stderr(&o).contains("plain.png"), "{}", stderr(&o));
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&report).unwrap()).unwrap();
    let deep = &json["deep_holes"][0];
    assert!((19.0..=21.0).contains(&deep["pixels"].as_f64().unwrap()), "{json}");
    assert_eq!((deep["x"].as_u64(), deep["y"].as_u64()), (Some(32), Some(32)));
    let warning = json["deep_hole_warning"].as_str().unwrap_or_default();
    assert!(warning.contains("more than 16 px") && warning.contains("guided"), "{json}");
}

#[test]
fn methods_grain_and_the_scientific_profile() {
    let fx = Fixture::new();
    // The scientific profile refuses invented texture, before reading anything (usage error).
    let refused = fx.path("x.png");
    for extra in [&["--method", "guided"][..], &["--grain", "5"][..]] {
        let mut args = vec![os("fill"), os(&fx.image), os("--mask"), os(&fx.mask), os("-o"), os(&refused)];
        args.push(os("--scientific"));
        args.extend(extra.iter().map(os));
        assert_fails(&fx, &args, 2, "--scientific refuses");
    }
    // Each method runs and says what it did; guided and grain carry their caution and records.
    for (method, grain) in [("biharmonic", None), ("guided", Some("11")), ("harmonic", Some("11"))] {
        let (out, rep) = (fx.path(&format!("{method}.png")), fx.path(&format!("{method}.json")));
        let mut args = vec![os("fill"), os(&fx.image), os("--mask"), os(&fx.mask), os("-o"), os(&out)];
        args.extend([os("--report"), os(&rep), os("--method"), os(method)]);
        if let Some(seed) = grain {
            args.extend([os("--grain"), os(seed)]);
        }
        let o = reweave(&args);
        assert_eq!(o.status.code(), Some(0), "{method}: {}", stderr(&o));
        let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&rep).unwrap()).unwrap();
        assert_eq!(json["method"], method);
        assert_eq!(json["scientific"], false);
        assert_eq!(json["texture_caution"].is_string(), method == "guided" || grain.is_some(), "{json}");
        assert_eq!(json["grain"]["seed"].as_u64(), grain.map(|s| s.parse().unwrap()), "{json}");
        if method == "guided" {
            assert_eq!(json["sources"].as_array().map(Vec::len), Some(1), "{json}");
            assert!(json["holes_without_source"].is_u64(), "{json}");
        }
        assert!(json["channels"][0]["relative_residual"].as_f64().unwrap() <= 1e-6, "{json}");
    }
    // The same seed gives the same grain.
    let again = fx.path("again.png");
    let o = reweave(&[
        os("fill"),
        os(&fx.image),
        os("--mask"),
        os(&fx.mask),
        os("-o"),
        os(&again),
        os("--method"),
        os("harmonic"),
        os("--grain"),
        os("11"),
    ]);
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    assert_eq!(std::fs::read(&again).unwrap(), std::fs::read(fx.path("harmonic.png")).unwrap());
}
