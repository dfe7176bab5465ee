//! Seeded generators of the project's own: the benchmark mask families and test images.
//!
//! Everything here is deterministic for a given seed, so benchmarks, tests and the bundled
//! samples can be regenerated bit for bit on any machine.

pub mod samples;

use std::f64::consts::PI;
use std::fmt;
use std::str::FromStr;

use crate::mask::Mask;

/// A small, fast, seeded pseudo-random generator (SplitMix64). Not for cryptography.
#[derive(Clone, Debug)]
pub struct Rng(u64);

impl Rng {
    #[must_use]
    pub fn new(seed: u64) -> Self {
        Self(seed ^ 0x9E37_79B9_7F4A_7C15)
    }

    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in `[0, 1)`.
    pub fn uniform(&mut self) -> f64 {
        #[allow(clippy::cast_precision_loss)] // 53 bits are exact in f64
        let v = (self.next_u64() >> 11) as f64;
        v * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform in `0..n` (`n > 0`).
    pub fn below(&mut self, n: usize) -> usize {
        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss, clippy::cast_precision_loss)]
        let v = (self.uniform() * n as f64) as usize;
        v.min(n - 1)
    }

    /// Standard normal (Box–Muller).
    pub fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos()
    }
}

/// The benchmark mask families.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum MaskFamily {
    /// About 40 random polylines 1–3 px wide, about 2% of the pixels.
    Scratches,
    /// 0.1% isolated pixels, 3 dead columns and 1 dead row.
    Deadpix,
    /// A disk of radius 0.2·N and 5 small ones.
    Blob,
    /// Half the pixels, at random.
    Dropout,
    /// Everything but a 2-pixel border.
    Frame,
}

impl MaskFamily {
    pub const ALL: [Self; 5] = [Self::Scratches, Self::Deadpix, Self::Blob, Self::Dropout, Self::Frame];

    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Scratches => "scratches",
            Self::Deadpix => "deadpix",
            Self::Blob => "blob",
            Self::Dropout => "dropout",
            Self::Frame => "frame",
        }
    }

    /// The family's mask on an `n × n` image.
    #[must_use]
    pub fn mask(self, n: usize, seed: u64) -> Mask {
        let mut rng = Rng::new(seed);
        match self {
            Self::Scratches => scratches(n, n, &mut rng),
            Self::Deadpix => deadpix(n, &mut rng),
            Self::Blob => blob(n, &mut rng),
            Self::Dropout => Mask::from_fn(n, n, |_, _| rng.uniform() < 0.5),
            Self::Frame => Mask::from_fn(n, n, |x, y| x >= 2 && y >= 2 && x + 2 < n && y + 2 < n),
        }
    }
}

impl fmt::Display for MaskFamily {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for MaskFamily {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Self::ALL
            .into_iter()
            .find(|f| f.name() == s)
            .ok_or_else(|| format!("unknown case '{s}'; choose one of scratches, deadpix, blob, dropout, frame"))
    }
}

/// Marks a filled disk of radius `r` centred at `(cx, cy)`.
pub fn paint_disk(mask: &mut Mask, cx: f64, cy: f64, r: f64) {
    let (w, h) = (mask.width(), mask.height());
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    let clamp = |v: f64, hi: usize| v.max(0.0).min((hi - 1) as f64) as usize;
    let (x0, x1) = (clamp((cx - r).floor(), w), clamp((cx + r).ceil(), w));
    let (y0, y1) = (clamp((cy - r).floor(), h), clamp((cy + r).ceil(), h));
    for y in y0..=y1 {
        for x in x0..=x1 {
            #[allow(clippy::cast_precision_loss)]
            let (dx, dy) = (x as f64 - cx, y as f64 - cy);
            if dx * dx + dy * dy <= r * r {
                mask.set(x, y, true);
            }
        }
    }
}

/// Marks a line of width `width` from `a` to `b` (a chain of disks).
pub fn paint_line(mask: &mut Mask, a: (f64, f64), b: (f64, f64), width: f64) {
    let len = ((b.0 - a.0).powi(2) + (b.1 - a.1).powi(2)).sqrt();
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
    let steps = (len * 2.0).ceil().max(1.0) as usize;
    for s in 0..=steps {
        #[allow(clippy::cast_precision_loss)]
        let t = s as f64 / steps as f64;
        paint_disk(mask, a.0 + t * (b.0 - a.0), a.1 + t * (b.1 - a.1), width / 2.0);
    }
}

/// 40 polylines 1–3 px wide covering about 2% of the pixels at any size (so each polyline's
/// length grows with the image's area), bending at random.
#[must_use]
pub fn scratches(w: usize, h: usize, rng: &mut Rng) -> Mask {
    let mut mask = Mask::new(w, h);
    #[allow(clippy::cast_precision_loss)]
    let (wf, hf) = (w as f64, h as f64);
    let size = wf.min(hf);
    // 40 lines of mean width 2 and length A/4000 each cover 2% of the area A.
    let length = wf * hf / 4000.0;
    for _ in 0..40 {
        let width = 1.0 + 2.0 * rng.uniform();
        let mut p = (rng.uniform() * wf, rng.uniform() * hf);
        let mut heading = rng.uniform() * 2.0 * PI;
        let mut drawn = 0.0;
        while drawn < length {
            heading += (rng.uniform() - 0.5) * 1.2;
            let len = (size * (0.1 + 0.1 * rng.uniform())).min(length - drawn).max(1.0);
            let mut q = (p.0 + len * heading.cos(), p.1 + len * heading.sin());
            if q.0 < 0.0 || q.1 < 0.0 || q.0 > wf - 1.0 || q.1 > hf - 1.0 {
                // Turn back into the image instead of running along its edge.
                heading += PI;
                q = (
                    (p.0 + len * heading.cos()).clamp(0.0, wf - 1.0),
                    (p.1 + len * heading.sin()).clamp(0.0, hf - 1.0),
                );
            }
            paint_line(&mut mask, p, q, width);
            drawn += len;
            p = q;
        }
    }
    mask
}

fn deadpix(n: usize, rng: &mut Rng) -> Mask {
    let mut mask = Mask::new(n, n);
    for _ in 0..(n * n / 1000).max(1) {
        mask.set(rng.below(n), rng.below(n), true);
    }
    for _ in 0..3 {
        let x = rng.below(n);
        for y in 0..n {
            mask.set(x, y, true);
        }
    }
    let y = rng.below(n);
    for x in 0..n {
        mask.set(x, y, true);
    }
    mask
}

fn blob(n: usize, rng: &mut Rng) -> Mask {
    let mut mask = Mask::new(n, n);
    #[allow(clippy::cast_precision_loss)]
    let nf = n as f64;
    paint_disk(&mut mask, nf / 2.0, nf / 2.0, 0.2 * nf);
    for _ in 0..5 {
        // Small disks away from the big one's centre region.
        let angle = rng.uniform() * 2.0 * PI;
        let dist = nf * (0.3 + 0.15 * rng.uniform());
        paint_disk(
            &mut mask,
            nf / 2.0 + dist * angle.cos(),
            nf / 2.0 + dist * angle.sin(),
            nf * (0.01 + 0.02 * rng.uniform()),
        );
    }
    mask
}

/// A smooth test surface on an `n × n` grid with values in about `[0, 1]`.
#[must_use]
pub fn smooth_plane(w: usize, h: usize, seed: u64) -> Vec<f32> {
    let mut rng = Rng::new(seed);
    let (a, b, c) = (1.0 + 3.0 * rng.uniform(), 1.0 + 3.0 * rng.uniform(), rng.uniform() * PI);
    let mut out = Vec::with_capacity(w * h);
    #[allow(clippy::cast_precision_loss)]
    for y in 0..h {
        for x in 0..w {
            let (u, v) = (x as f64 / w.max(1) as f64, y as f64 / h.max(1) as f64);
            let f = 0.5 + 0.3 * (a * PI * u + c).sin() * (b * PI * v).cos() + 0.2 * (u - v);
            #[allow(clippy::cast_possible_truncation)]
            out.push(f as f32);
        }
    }
    out
}
