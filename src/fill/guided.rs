//! Guided fill: the texture of a source region elsewhere in the image, the colours of the rim.
//!
//! For a hole Ω and a source offset `o`, let `s(p) = f(p + o)`. The fill solves the discrete
//! Poisson equation whose right-hand side is the 5-point Laplacian of `s` (Pérez, Gangnet & Blake,
//! "Poisson Image Editing", ACM TOG 22(3) 2003, eq. 7 with the guidance `v_pq = s_p − s_q`):
//!
//! `|N_p|·u_p − Σ_{q ∈ N_p ∩ Ω} u_q = Σ_{q ∈ N_p ∩ ∂Ω} f_q + Σ_{q ∈ N_p} (s_p − s_q)`.
//!
//! Writing `u = s + h`, the equation says `h` is the discrete harmonic fill of `f − s` over the
//! hole, so the harmonic solver does the work: `u` meets the rim exactly and carries the source's
//! detail inside.
//!
//! The offset is chosen per hole: the one whose band of known pixels around the shifted hole best
//! matches the band around the hole itself (sum of squared differences with each channel's mean
//! difference removed, since the harmonic part absorbs a smooth shift). The search runs on an image
//! pyramid: exhaustively over a window on a level coarse enough to keep the work bounded, then the
//! best few candidates are refined level by level down to the full image. A source must lie inside
//! the image and consist of known pixels only.

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::{ChannelReport, FillError, FillParams, FillReport, Progress, Solver, Start};
use crate::mask::{Hole, Mask};

/// Band of known pixels around a hole compared when placing a source (Chebyshev distance, full
/// resolution).
const BAND: usize = 3;
/// Band on the coarse levels of the search.
const COARSE_BAND: usize = 2;
/// Candidates kept from one level to the next.
const KEEP: usize = 8;
/// Work allowed for the exhaustive search on one level (offsets × compared pixels).
const BUDGET: usize = 30_000_000;
/// Holes at least this large are solved one at a time with progress reports.
const LARGE_HOLE: usize = 50_000;

/// A source offset chosen by the user for the hole holding pixel `at`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ChosenSource {
    pub at: (usize, usize),
    /// The source is the hole moved by this many pixels.
    pub offset: (isize, isize),
}

/// Where one hole's texture came from.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Placement {
    pub hole: Hole,
    /// The source is the hole moved by `(dx, dy)`; `None` when no source of known pixels fits in
    /// the search window (the hole is then filled harmonically).
    pub offset: Option<(isize, isize)>,
    /// Root-mean-square difference of the bands (after removing the mean difference), in sample
    /// units; `None` without a source.
    pub mismatch: Option<f64>,
    /// Whether the user chose the offset.
    pub chosen: bool,
}

/// The holes of a mask with their pixels (row-major indices), in label order.
pub(crate) struct HolePixels {
    pub holes: Vec<Hole>,
    pub pixels: Vec<Vec<u32>>,
    pub labels: Vec<u32>,
}

impl HolePixels {
    pub(crate) fn of(mask: &Mask) -> Self {
        let w = mask.width();
        let (labels, sizes) = mask.label_holes();
        let mut pixels: Vec<Vec<u32>> = sizes.iter().map(|&s| Vec::with_capacity(s)).collect();
        for (p, &l) in labels.iter().enumerate() {
            if l != 0 {
                pixels[l as usize - 1].push(crate::mask::index_u32(p));
            }
        }
        let holes = pixels
            .iter()
            .map(|px| {
                let (mut x0, mut y0, mut x1, mut y1) = (usize::MAX, usize::MAX, 0, 0);
                for &p in px {
                    let (x, y) = (p as usize % w, p as usize / w);
                    (x0, y0, x1, y1) = (x0.min(x), y0.min(y), x1.max(x), y1.max(y));
                }
                Hole { x: x0, y: y0, width: x1 - x0 + 1, height: y1 - y0 + 1, pixels: px.len() }
            })
            .collect();
        Self { holes, pixels, labels }
    }
}

/// One level of the search pyramid.
struct Level<'a> {
    w: usize,
    h: usize,
    planes: Vec<std::borrow::Cow<'a, [f32]>>,
    /// Unknown pixels: a coarse pixel is unknown when any of its children is.
    masked: Vec<bool>,
}

fn pyramid<'a>(planes: &[&'a [f32]], mask: &Mask) -> Vec<Level<'a>> {
    let mut levels = vec![Level {
        w: mask.width(),
        h: mask.height(),
        planes: planes.iter().map(|p| std::borrow::Cow::Borrowed(*p)).collect(),
        masked: mask.bits().to_vec(),
    }];
    while let Some(fine) = levels.last() {
        if fine.w < 32 || fine.h < 32 {
            break;
        }
        let (w, h) = (fine.w.div_ceil(2), fine.h.div_ceil(2));
        let children = |x: usize, y: usize| {
            let xs = [2 * x, (2 * x + 1).min(fine.w - 1)];
            let ys = [2 * y, (2 * y + 1).min(fine.h - 1)];
            [(xs[0], ys[0]), (xs[1], ys[0]), (xs[0], ys[1]), (xs[1], ys[1])]
        };
        let masked: Vec<bool> = (0..w * h)
            .into_par_iter()
            .map(|i| children(i % w, i / w).iter().any(|&(x, y)| fine.masked[y * fine.w + x]))
            .collect();
        let planes = fine
            .planes
            .iter()
            .map(|p| {
                let coarse: Vec<f32> = (0..w * h)
                    .into_par_iter()
                    .map(|i| children(i % w, i / w).iter().map(|&(x, y)| p[y * fine.w + x]).sum::<f32>() * 0.25)
                    .collect();
                std::borrow::Cow::Owned(coarse)
            })
            .collect();
        levels.push(Level { w, h, planes, masked });
    }
    levels
}

/// A hole on one level: its pixels and the band of known pixels around it, as `(x, y)`.
struct Region {
    hole: Vec<(i64, i64)>,
    band: Vec<(i64, i64)>,
    /// Bounding box of hole and band: `(x0, y0, x1, y1)`, inclusive.
    bbox: (i64, i64, i64, i64),
}

fn region(level: &Level<'_>, k: usize, pixels: &[u32], full_w: usize, band: usize) -> Region {
    region_in(level.w, level.h, &level.masked, k, pixels, full_w, band)
}

/// The known pixels within `band` (Chebyshev distance) of a hole, as row-major indices.
#[allow(clippy::cast_sign_loss)]
pub(crate) fn band_pixels(mask: &Mask, pixels: &[u32], band: usize) -> Vec<usize> {
    let w = mask.width();
    region_in(w, mask.height(), mask.bits(), 0, pixels, w, band)
        .band
        .iter()
        .map(|&(x, y)| y as usize * w + x as usize)
        .collect()
}

#[allow(clippy::cast_possible_wrap)] // image sides are far below 2^62
fn region_in(lw: usize, lh: usize, masked: &[bool], k: usize, pixels: &[u32], full_w: usize, band: usize) -> Region {
    let (mut x0, mut y0, mut x1, mut y1) = (usize::MAX, usize::MAX, 0, 0);
    for &p in pixels {
        let (x, y) = ((p as usize % full_w) >> k, (p as usize / full_w) >> k);
        (x0, y0, x1, y1) = (x0.min(x), y0.min(y), x1.max(x), y1.max(y));
    }
    let (bx0, by0) = (x0.saturating_sub(band), y0.saturating_sub(band));
    let (bx1, by1) = ((x1 + band).min(lw - 1), (y1 + band).min(lh - 1));
    let (bw, bh) = (bx1 - bx0 + 1, by1 - by0 + 1);
    let mut inside = vec![false; bw * bh];
    for &p in pixels {
        let (x, y) = ((p as usize % full_w) >> k, (p as usize / full_w) >> k);
        inside[(y - by0) * bw + x - bx0] = true;
    }
    // Separable square dilation of the hole by `band`.
    let mut rows = vec![false; bw * bh];
    for y in 0..bh {
        for x in 0..bw {
            if inside[y * bw + x] {
                for xx in x.saturating_sub(band)..=(x + band).min(bw - 1) {
                    rows[y * bw + xx] = true;
                }
            }
        }
    }
    let mut grown = vec![false; bw * bh];
    for y in 0..bh {
        for x in 0..bw {
            if rows[y * bw + x] {
                for yy in y.saturating_sub(band)..=(y + band).min(bh - 1) {
                    grown[yy * bw + x] = true;
                }
            }
        }
    }
    let (mut hole, mut ring) = (Vec::new(), Vec::new());
    for y in 0..bh {
        for x in 0..bw {
            let (gx, gy) = (bx0 + x, by0 + y);
            let at = ((gx) as i64, (gy) as i64);
            if inside[y * bw + x] {
                hole.push(at);
            } else if grown[y * bw + x] && !masked[gy * lw + gx] {
                ring.push(at);
            }
        }
    }
    Region { hole, band: ring, bbox: (bx0 as i64, by0 as i64, bx1 as i64, by1 as i64) }
}

/// The mismatch of the bands for offset `o`, or `None` when the shifted hole or band leaves the
/// image or touches an unknown pixel.
#[allow(clippy::cast_possible_wrap, clippy::cast_sign_loss, clippy::cast_precision_loss)]
fn score(level: &Level<'_>, r: &Region, o: (i64, i64)) -> Option<f64> {
    let (w, h) = (level.w as i64, level.h as i64);
    let (x0, y0, x1, y1) = r.bbox;
    if x0 + o.0 < 0 || y0 + o.1 < 0 || x1 + o.0 >= w || y1 + o.1 >= h {
        return None;
    }
    let at = |(x, y): (i64, i64)| ((y + o.1) * w + x + o.0) as usize;
    if r.hole.iter().any(|&p| level.masked[at(p)]) {
        return None;
    }
    let mut total = 0f64;
    for plane in &level.planes {
        let (mut sum, mut sq) = (0f64, 0f64);
        for &p in &r.band {
            let q = at(p);
            if level.masked[q] {
                return None;
            }
            let d = f64::from(plane[(p.1 * w + p.0) as usize]) - f64::from(plane[q]);
            sum += d;
            sq += d * d;
        }
        total += sq - sum * sum / r.band.len().max(1) as f64;
    }
    Some(total.max(0.0))
}

/// Keeps the `KEEP` best `(score, offset)` pairs, best first.
fn keep_best(mut scored: Vec<(f64, (i64, i64))>) -> Vec<(f64, (i64, i64))> {
    scored.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    scored.dedup_by_key(|s| s.1);
    scored.truncate(KEEP);
    scored
}

/// Finds the source offset of one hole (see the module documentation).
#[allow(clippy::cast_possible_wrap, clippy::cast_precision_loss, clippy::cast_possible_truncation)]
fn place_hole(levels: &[Level<'_>], hole: &Hole, pixels: &[u32]) -> Option<(f64, (isize, isize))> {
    let full_w = levels[0].w;
    let extent = hole.width.max(hole.height);
    let radius = 4 * extent + 16;
    // The coarsest level worth starting from: the first one whose exhaustive search fits the
    // budget (and where the hole still spans a few pixels).
    let mut top = 0;
    for (k, level) in levels.iter().enumerate() {
        let rk = (radius >> k).max(2);
        let span = (2 * rk + 1).min(2 * level.w) * (2 * rk + 1).min(2 * level.h);
        let band = if k == 0 { BAND } else { COARSE_BAND };
        let compared = (pixels.len() >> (2 * k)) + 4 * band * (((hole.width + hole.height) >> k) + 2 * band) + 1;
        top = k;
        if span * compared <= BUDGET || (extent >> (k + 1)) < 2 {
            break;
        }
    }
    let band_of = |k: usize| if k == 0 { BAND } else { COARSE_BAND };
    let r = region(&levels[top], top, pixels, full_w, band_of(top));
    let rk = ((radius >> top).max(2)) as i64;
    let rows: Vec<Vec<(f64, (i64, i64))>> = (-rk..=rk)
        .into_par_iter()
        .map(|dy| {
            let scored: Vec<(f64, (i64, i64))> =
                (-rk..=rk).filter_map(|dx| score(&levels[top], &r, (dx, dy)).map(|s| (s, (dx, dy)))).collect();
            keep_best(scored)
        })
        .collect();
    let mut best = keep_best(rows.into_iter().flatten().collect());
    for k in (0..top).rev() {
        let r = region(&levels[k], k, pixels, full_w, band_of(k));
        let mut scored = Vec::new();
        for &(_, (cx, cy)) in &best {
            for dy in -2..=2 {
                for dx in -2..=2 {
                    let o = (2 * cx + dx, 2 * cy + dy);
                    if let Some(s) = score(&levels[k], &r, o) {
                        scored.push((s, o));
                    }
                }
            }
        }
        best = keep_best(scored);
    }
    let &(s, (dx, dy)) = best.first()?;
    let r = region(&levels[0], 0, pixels, full_w, BAND);
    let n = (r.band.len().max(1) * levels[0].planes.len().max(1)) as f64;
    Some(((s / n).sqrt(), (dx as isize, dy as isize)))
}

/// Places a source for every hole of `mask` (in label order), honouring the offsets the user
/// chose.
#[must_use]
pub fn place(planes: &[&[f32]], mask: &Mask, chosen: &[ChosenSource]) -> Vec<Placement> {
    let holes = HolePixels::of(mask);
    place_holes(planes, mask, &holes, chosen)
}

fn place_holes(planes: &[&[f32]], mask: &Mask, holes: &HolePixels, chosen: &[ChosenSource]) -> Vec<Placement> {
    let w = mask.width();
    let mut wanted: Vec<Option<(isize, isize)>> = vec![None; holes.holes.len()];
    for c in chosen {
        if c.at.0 < w && c.at.1 < mask.height() {
            let l = holes.labels[c.at.1 * w + c.at.0];
            if l != 0 {
                wanted[l as usize - 1] = Some(c.offset);
            }
        }
    }
    let levels = pyramid(planes, mask);
    holes
        .holes
        .par_iter()
        .zip(&holes.pixels)
        .zip(&wanted)
        .map(|((hole, pixels), want)| {
            if let Some(o) = *want {
                let r = region(&levels[0], 0, pixels, w, BAND);
                #[allow(clippy::cast_possible_wrap, clippy::cast_precision_loss)]
                let mismatch = score(&levels[0], &r, (o.0 as i64, o.1 as i64))
                    .map(|s| (s / (r.band.len().max(1) * planes.len().max(1)) as f64).sqrt());
                // A chosen source that leaves the image or covers unknown pixels cannot be used.
                let offset = mismatch.map(|_| o);
                return Placement { hole: *hole, offset, mismatch, chosen: true };
            }
            match place_hole(&levels, hole, pixels) {
                Some((m, o)) => Placement { hole: *hole, offset: Some(o), mismatch: Some(m), chosen: false },
                None => Placement { hole: *hole, offset: None, mismatch: None, chosen: false },
            }
        })
        .collect()
}

/// The planes being filled and their size.
#[derive(Clone, Copy)]
struct Image<'a> {
    planes: &'a [&'a mut [f32]],
    width: usize,
    height: usize,
}

/// One hole's filled values, channel after channel, and its convergence record.
struct HoleResult {
    values: Vec<f32>,
    reports: Vec<ChannelReport>,
}

/// Solves one hole: the harmonic fill of `f − s` over a cut around it, plus `s`.
#[allow(clippy::cast_possible_wrap, clippy::cast_sign_loss)]
fn solve_hole(
    image: Image<'_>,
    pixels: &[u32],
    hole: &Hole,
    offset: Option<(isize, isize)>,
    params: &FillParams,
    progress: &mut (dyn FnMut(&Progress) -> bool + Send),
) -> Result<HoleResult, FillError> {
    let Image { planes, width, height } = image;
    let (x0, y0, cw, ch) =
        super::margin_box((hole.x, hole.y, hole.x + hole.width - 1, hole.y + hole.height - 1), width, height);
    let mut cut_mask = Mask::new(cw, ch);
    for &p in pixels {
        cut_mask.set(p as usize % width - x0, p as usize / width - y0, true);
    }
    let (ox, oy) = offset.unwrap_or((0, 0));
    let source = |plane: &[f32], x: usize, y: usize| -> f32 {
        if offset.is_none() {
            return 0.0;
        }
        let (sx, sy) = (x as isize + ox, y as isize + oy);
        plane[sy as usize * width + sx as usize]
    };
    // Which cut pixels enter the equations: the hole and its 4-neighbours.
    let used = |cx: usize, cy: usize| {
        cut_mask.get(cx, cy)
            || (cx > 0 && cut_mask.get(cx - 1, cy))
            || (cx + 1 < cw && cut_mask.get(cx + 1, cy))
            || (cy > 0 && cut_mask.get(cx, cy - 1))
            || (cy + 1 < ch && cut_mask.get(cx, cy + 1))
    };
    let mut cut: Vec<Vec<f32>> = planes
        .iter()
        .map(|plane| {
            (0..cw * ch)
                .map(|i| {
                    let (cx, cy) = (i % cw, i / cw);
                    if !used(cx, cy) {
                        return 0.0;
                    }
                    let (x, y) = (x0 + cx, y0 + cy);
                    if cut_mask.get(cx, cy) { 0.0 } else { plane[y * width + x] - source(plane, x, y) }
                })
                .collect()
        })
        .collect();
    let solver = Solver::new(&cut_mask).map_err(|e| match e {
        FillError::NonFiniteRim { x, y } => FillError::NonFiniteRim { x: x + x0, y: y + y0 },
        e => e,
    })?;
    let harmonic = FillParams { method: super::FillMethod::Harmonic, ..params.clone() };
    let mut views: Vec<&mut [f32]> = cut.iter_mut().map(Vec::as_mut_slice).collect();
    let report = solver.solve(&mut views, &harmonic, Start::FullMultigrid, progress).map_err(|e| match e {
        FillError::NonFiniteRim { x, y } => FillError::NonFiniteRim { x: x + x0, y: y + y0 },
        e => e,
    })?;
    let mut values = Vec::with_capacity(pixels.len() * planes.len());
    for (plane, c) in planes.iter().zip(&cut) {
        for &p in pixels {
            let (x, y) = (p as usize % width, p as usize / width);
            values.push(c[(y - y0) * cw + x - x0] + source(plane, x, y));
        }
    }
    Ok(HoleResult { values, reports: report.channels })
}

/// Fills every hole of `mask` with the guided fill, placing sources automatically except where
/// `params.chosen_sources` names one. The report lists the placements.
///
/// # Errors
/// See [`FillError`]; on error the planes are unchanged.
pub fn fill(
    planes: &mut [&mut [f32]],
    mask: &Mask,
    params: &FillParams,
    progress: &mut (dyn FnMut(&Progress) -> bool + Send),
) -> Result<FillReport, FillError> {
    let t0 = std::time::Instant::now();
    let (width, height) = (mask.width(), mask.height());
    for p in planes.iter() {
        if p.len() != width * height {
            return Err(FillError::PlaneLength { width, height, len: p.len() });
        }
    }
    let count = mask.count();
    if count > 0 && count == width * height {
        return Err(FillError::NoKnownPixels);
    }
    let holes = HolePixels::of(mask);
    let placements = {
        let views: Vec<&[f32]> = planes.iter().map(|p| &**p).collect();
        place_holes(&views, mask, &holes, &params.chosen_sources)
    };
    let setup_seconds = t0.elapsed().as_secs_f64();
    let mut order: Vec<usize> = (0..holes.holes.len()).collect();
    order.sort_by_key(|&k| std::cmp::Reverse(holes.pixels[k].len()));
    let total = order.len();
    let mut results: Vec<Option<HoleResult>> = (0..total).map(|_| None).collect();
    let shared: &[&mut [f32]] = planes;
    let image = Image { planes: shared, width, height };
    let mut done = 0;
    let mut start = 0;
    while start < total {
        let k = order[start];
        let mut tick = |p: &Progress| {
            progress(&Progress { cycle: done, max_cycles: total, residual: p.residual, tolerance: p.tolerance })
        };
        if holes.pixels[k].len() >= LARGE_HOLE {
            let r = solve_hole(image, &holes.pixels[k], &holes.holes[k], placements[k].offset, params, &mut tick)?;
            results[k] = Some(r);
            start += 1;
        } else {
            let end = (start + 256).min(total);
            let chunk: Vec<Result<HoleResult, FillError>> = order[start..end]
                .par_iter()
                .map(|&k| {
                    solve_hole(image, &holes.pixels[k], &holes.holes[k], placements[k].offset, params, &mut |_| true)
                })
                .collect();
            for (&k, r) in order[start..end].iter().zip(chunk) {
                results[k] = Some(r?);
            }
            start = end;
        }
        done = start;
        let report = Progress { cycle: done, max_cycles: total, residual: 0.0, tolerance: params.tolerance };
        if !progress(&report) {
            return Err(FillError::Cancelled);
        }
    }
    let mut channels = vec![ChannelReport::default(); planes.len()];
    for (k, r) in results.iter().enumerate() {
        let Some(r) = r else { continue };
        for (c, rep) in r.reports.iter().enumerate() {
            channels[c].relative_residual = channels[c].relative_residual.max(rep.relative_residual);
            channels[c].cycles = channels[c].cycles.max(rep.cycles);
        }
        let n = holes.pixels[k].len();
        for (c, plane) in planes.iter_mut().enumerate() {
            for (i, &p) in holes.pixels[k].iter().enumerate() {
                plane[p as usize] = r.values[c * n + i];
            }
        }
    }
    Ok(FillReport {
        method: super::FillMethod::Guided,
        unknowns: count,
        levels: 0,
        channels,
        setup_seconds,
        solve_seconds: t0.elapsed().as_secs_f64() - setup_seconds,
        placements,
        grain: None,
    })
}
