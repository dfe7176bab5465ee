//! Which pixels are damaged.
//!
//! A [`Mask`] is one flag per pixel: `true` means the pixel is unknown and will be filled, `false`
//! means it is known and kept exactly. Holes are the 4-connected components of masked pixels, the
//! same connectivity the 5-point stencil of the fill uses, so two holes never share an equation.

pub mod distance;

use rayon::prelude::*;
use std::fmt;

/// One flag per pixel, row-major, `true` where the pixel is to be filled.
#[derive(Clone, PartialEq, Eq)]
pub struct Mask {
    width: usize,
    height: usize,
    bits: Vec<bool>,
}

impl fmt::Debug for Mask {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Mask")
            .field("width", &self.width)
            .field("height", &self.height)
            .field("count", &self.count())
            .finish()
    }
}

/// A summary of the holes of a mask.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct HoleStats {
    /// Number of 4-connected components of masked pixels.
    pub holes: usize,
    /// Pixel count of the largest hole (0 when there is none).
    pub largest: usize,
}

/// One hole: its bounding box and pixel count.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct Hole {
    pub x: usize,
    pub y: usize,
    pub width: usize,
    pub height: usize,
    pub pixels: usize,
}

impl Mask {
    /// A mask with no pixel marked.
    #[must_use]
    pub fn new(width: usize, height: usize) -> Self {
        Self { width, height, bits: vec![false; width * height] }
    }

    /// Builds a mask from row-major flags.
    ///
    /// # Panics
    /// If `bits.len() != width * height` (a programming error, not a user error).
    #[must_use]
    pub fn from_bits(width: usize, height: usize, bits: Vec<bool>) -> Self {
        assert_eq!(bits.len(), width * height, "mask bits do not match its size");
        Self { width, height, bits }
    }

    /// Builds a mask by calling `f(x, y)` for every pixel.
    pub fn from_fn(width: usize, height: usize, mut f: impl FnMut(usize, usize) -> bool) -> Self {
        let mut bits = Vec::with_capacity(width * height);
        for y in 0..height {
            for x in 0..width {
                bits.push(f(x, y));
            }
        }
        Self { width, height, bits }
    }

    #[must_use]
    pub fn width(&self) -> usize {
        self.width
    }

    #[must_use]
    pub fn height(&self) -> usize {
        self.height
    }

    /// Row-major flags.
    #[must_use]
    pub fn bits(&self) -> &[bool] {
        &self.bits
    }

    /// Row-major flags, for editing in place.
    pub fn bits_mut(&mut self) -> &mut [bool] {
        &mut self.bits
    }

    #[must_use]
    pub fn get(&self, x: usize, y: usize) -> bool {
        self.bits[y * self.width + x]
    }

    pub fn set(&mut self, x: usize, y: usize, value: bool) {
        self.bits[y * self.width + x] = value;
    }

    /// Number of masked (unknown) pixels.
    #[must_use]
    pub fn count(&self) -> usize {
        self.bits.par_iter().with_min_len(1 << 16).filter(|&&b| b).count()
    }

    /// True when no pixel is marked.
    #[must_use]
    pub fn is_empty(&self) -> bool {
        !self.bits.iter().any(|&b| b)
    }

    /// Labels the holes (4-connected components of masked pixels).
    ///
    /// Returns one label per pixel (`0` for known pixels, `1..=n` for holes, in order of their
    /// first pixel in row-major order) and the pixel count of each hole (`sizes[k]` is hole `k+1`).
    #[must_use]
    pub fn label_holes(&self) -> (Vec<u32>, Vec<usize>) {
        let (w, h) = (self.width, self.height);
        let mut labels = vec![0u32; w * h];
        let mut sizes = Vec::new();
        let mut stack = Vec::new();
        for start in 0..w * h {
            if !self.bits[start] || labels[start] != 0 {
                continue;
            }
            sizes.push(0usize);
            let label = u32::try_from(sizes.len()).unwrap_or(u32::MAX);
            labels[start] = label;
            stack.push(start);
            let mut size = 0usize;
            while let Some(p) = stack.pop() {
                size += 1;
                let (x, y) = (p % w, p / w);
                let mut visit = |q: usize| {
                    if self.bits[q] && labels[q] == 0 {
                        labels[q] = label;
                        stack.push(q);
                    }
                };
                if x > 0 {
                    visit(p - 1);
                }
                if x + 1 < w {
                    visit(p + 1);
                }
                if y > 0 {
                    visit(p - w);
                }
                if y + 1 < h {
                    visit(p + w);
                }
            }
            if let Some(last) = sizes.last_mut() {
                *last = size;
            }
        }
        (labels, sizes)
    }

    /// Every hole with its bounding box and pixel count, largest first (ties in row-major order of
    /// their first pixel).
    #[must_use]
    pub fn holes(&self) -> Vec<Hole> {
        let (labels, sizes) = self.label_holes();
        let mut boxes: Vec<(usize, usize, usize, usize)> = vec![(usize::MAX, usize::MAX, 0, 0); sizes.len()];
        for (p, &l) in labels.iter().enumerate() {
            if l == 0 {
                continue;
            }
            let (x, y) = (p % self.width, p / self.width);
            let b = &mut boxes[l as usize - 1];
            *b = (b.0.min(x), b.1.min(y), b.2.max(x), b.3.max(y));
        }
        let mut holes: Vec<Hole> = boxes
            .iter()
            .zip(&sizes)
            .map(|(&(x0, y0, x1, y1), &pixels)| Hole { x: x0, y: y0, width: x1 - x0 + 1, height: y1 - y0 + 1, pixels })
            .collect();
        holes.sort_by_key(|h| std::cmp::Reverse(h.pixels));
        holes
    }

    /// Unmarks every hole larger than `max_pixels`, returning the holes it left.
    pub fn drop_holes_larger_than(&mut self, max_pixels: usize) -> Vec<Hole> {
        let (labels, sizes) = self.label_holes();
        let big: Vec<bool> = sizes.iter().map(|&s| s > max_pixels).collect();
        if !big.iter().any(|&b| b) {
            return Vec::new();
        }
        let mut dropped = Mask::new(self.width, self.height);
        for (p, &l) in labels.iter().enumerate() {
            if l != 0 && big[l as usize - 1] {
                self.bits[p] = false;
                dropped.bits[p] = true;
            }
        }
        dropped.holes()
    }

    /// Counts the holes and the size of the largest (from the runs of each row, in parallel, so
    /// it costs a pass over the flags and work in proportion to the runs).
    #[must_use]
    pub fn hole_stats(&self) -> HoleStats {
        let runs = row_runs(self);
        let (hole_of, holes) = run_holes(&runs);
        let mut sizes = vec![0usize; holes];
        for (&(a, b), &hole) in runs.iter().flatten().zip(&hole_of) {
            sizes[hole as usize] += (b - a) as usize;
        }
        HoleStats { holes, largest: sizes.iter().copied().max().unwrap_or(0) }
    }
}

/// The runs of unknowns `[a, b)` of every row of a mask.
pub(crate) fn row_runs(mask: &Mask) -> Vec<Vec<(u32, u32)>> {
    let width = mask.width();
    mask.bits()
        .par_chunks(width)
        .map(|row| {
            // SAFETY: `bool` has the size and alignment of `u8` and the values 0 and 1.
            let bytes: &[u8] = unsafe { std::slice::from_raw_parts(row.as_ptr().cast::<u8>(), row.len()) };
            // The first index from `x` whose byte differs from `b`, eight bytes at a time.
            let skip = |mut x: usize, b: u8| {
                let word = u64::from_ne_bytes([b; 8]);
                while x + 8 <= width && u64::from_ne_bytes(bytes[x..x + 8].try_into().expect("8 bytes")) == word {
                    x += 8;
                }
                while x < width && bytes[x] == b {
                    x += 1;
                }
                x
            };
            let mut runs = Vec::new();
            let mut x = skip(0, 0);
            while x < width {
                let end = skip(x, 1);
                runs.push((index_u32(x), index_u32(end)));
                x = skip(end, 0);
            }
            runs
        })
        .collect()
}

pub(crate) fn index_u32(i: usize) -> u32 {
    u32::try_from(i).expect("image sides fit in u32 (images are limited on load)")
}

/// The holes (4-connected components) of a mask given by its row runs: the hole of every run, in
/// row order, and the number of holes. Union-find over runs, so the cost follows the runs.
pub(crate) fn run_holes(runs: &[Vec<(u32, u32)>]) -> (Vec<u32>, usize) {
    let total: usize = runs.iter().map(Vec::len).sum();
    let mut parent: Vec<u32> = (0..index_u32(total)).collect();
    fn find(parent: &mut [u32], mut i: u32) -> u32 {
        while parent[i as usize] != i {
            let p = parent[i as usize];
            parent[i as usize] = parent[p as usize];
            i = p;
        }
        i
    }
    let mut start = 0usize;
    for y in 1..runs.len() {
        let (above, here) = (&runs[y - 1], &runs[y]);
        let above_start = start;
        start += above.len();
        let (mut i, mut j) = (0, 0);
        while i < above.len() && j < here.len() {
            let (a, b) = (above[i], here[j]);
            if a.0 < b.1 && b.0 < a.1 {
                let (ra, rb) = (find(&mut parent, index_u32(above_start + i)), find(&mut parent, index_u32(start + j)));
                if ra != rb {
                    parent[ra.max(rb) as usize] = ra.min(rb);
                }
            }
            if a.1 < b.1 {
                i += 1;
            } else {
                j += 1;
            }
        }
    }
    let mut hole = vec![u32::MAX; total];
    let mut count = 0u32;
    for i in 0..total {
        let r = find(&mut parent, index_u32(i)) as usize;
        if hole[r] == u32::MAX {
            hole[r] = count;
            count += 1;
        }
        hole[i] = hole[r];
    }
    (hole, count as usize)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn row_runs_match_a_pixel_by_pixel_scan() {
        // Widths around the eight-byte steps, runs of every length from 1 to 20 at every phase.
        let mut state = 7u64;
        for width in [1, 7, 8, 9, 15, 16, 17, 63, 64, 65, 100] {
            let m = Mask::from_fn(width, 12, |x, y| {
                state = state.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
                let run = 1 + y % 20;
                match y % 3 {
                    0 => (x / run) % 2 == 1,
                    1 => !(state >> 33).is_multiple_of(4),
                    _ => x >= width / 2,
                }
            });
            let expected: Vec<Vec<(u32, u32)>> = m
                .bits()
                .chunks(width)
                .map(|row| {
                    let mut runs = Vec::new();
                    for (x, &b) in row.iter().enumerate() {
                        let x = index_u32(x);
                        match runs.last_mut() {
                            Some((_, end)) if b && *end == x => *end = x + 1,
                            _ if b => runs.push((x, x + 1)),
                            _ => {}
                        }
                    }
                    runs
                })
                .collect();
            assert_eq!(row_runs(&m), expected, "width {width}");
        }
    }

    #[test]
    fn holes_are_four_connected() {
        // Two diagonal pixels touch only at a corner: two holes.
        let m = Mask::from_fn(4, 4, |x, y| (x, y) == (1, 1) || (x, y) == (2, 2));
        assert_eq!(m.hole_stats(), HoleStats { holes: 2, largest: 1 });
        let m = Mask::from_fn(4, 4, |x, y| y == 1 || (x == 3 && y == 2));
        assert_eq!(m.hole_stats(), HoleStats { holes: 1, largest: 5 });
    }

    #[test]
    fn holes_have_boxes_and_large_ones_can_be_left() {
        let mut m = Mask::from_fn(10, 8, |x, y| ((1..4).contains(&x) && (2..4).contains(&y)) || (x == 8 && y == 7));
        assert_eq!(
            m.holes(),
            vec![
                Hole { x: 1, y: 2, width: 3, height: 2, pixels: 6 },
                Hole { x: 8, y: 7, width: 1, height: 1, pixels: 1 }
            ]
        );
        let left = m.drop_holes_larger_than(5);
        assert_eq!(left.len(), 1);
        assert_eq!(m.count(), 1);
    }

    #[test]
    fn empty_mask_has_no_holes() {
        let m = Mask::new(3, 2);
        assert!(m.is_empty());
        assert_eq!(m.hole_stats(), HoleStats::default());
    }

    #[test]
    fn hole_stats_from_runs_agree_with_flood_fill_labels() {
        let mut rng = crate::synth::Rng::new(3);
        for density in [0.1, 0.45, 0.6, 0.9] {
            let mask = Mask::from_fn(97, 61, |_, _| rng.uniform() < density);
            let (_, sizes) = mask.label_holes();
            let stats = mask.hole_stats();
            assert_eq!(stats.holes, sizes.len(), "density {density}");
            assert_eq!(stats.largest, sizes.iter().copied().max().unwrap_or(0), "density {density}");
        }
    }
}
