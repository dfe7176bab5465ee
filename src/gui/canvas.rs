//! The image view: one transform between image and screen, tiled textures (so large images fit
//! the GPU's texture limits and a stroke re-uploads only the tiles it touched), the mask overlay,
//! zoom about the cursor, pan, and painting.

use egui::{Color32, ColorImage, Pos2, Rect, TextureHandle, TextureOptions, Vec2, pos2, vec2};

use crate::mask::Mask;
use crate::raster::{Layout, Raster, SampleFormat};

/// Side of an image texture tile.
pub const IMAGE_TILE: usize = 1024;
/// Side of a mask overlay tile (small, so a stroke re-uploads little).
pub const OVERLAY_TILE: usize = 512;

/// The view transform: `pos_in_screen = origin + pos_in_image · zoom`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct View {
    /// Screen points per image pixel.
    pub zoom: f32,
    /// Screen position of the image's top-left corner.
    pub origin: Pos2,
    /// Fit the image to the canvas on the next frame.
    pub fit_pending: bool,
}

impl Default for View {
    fn default() -> Self {
        Self { zoom: 1.0, origin: Pos2::ZERO, fit_pending: true }
    }
}

impl View {
    #[must_use]
    pub fn screen_from_image(&self, pos_in_image: Pos2) -> Pos2 {
        self.origin + pos_in_image.to_vec2() * self.zoom
    }

    #[must_use]
    pub fn image_from_screen(&self, pos_in_screen: Pos2) -> Pos2 {
        ((pos_in_screen - self.origin) / self.zoom).to_pos2()
    }

    /// Fits an image of `size` into `rect`, centred.
    pub fn fit(&mut self, rect: Rect, size: Vec2) {
        self.zoom = (rect.width() / size.x).min(rect.height() / size.y).max(1e-3);
        self.origin = rect.center() - size * self.zoom / 2.0;
        self.fit_pending = false;
    }

    /// Zooms by `factor` keeping the image point under `anchor_in_screen` in place.
    pub fn zoom_about(&mut self, anchor_in_screen: Pos2, factor: f32) {
        let anchor_in_image = self.image_from_screen(anchor_in_screen);
        self.zoom = (self.zoom * factor).clamp(1.0 / 64.0, 128.0);
        self.origin = anchor_in_screen - anchor_in_image.to_vec2() * self.zoom;
    }
}

/// How samples map to display brightness: `(v − lo) · scale`, clamped to 0–255.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Stretch {
    pub lo: f32,
    pub scale: f32,
}

impl Stretch {
    /// 8-bit shown as is; 16-bit, signed and float data stretched from the 0.1st to the 99.9th
    /// percentile of their finite samples (detector frames and elevation grids use a small part
    /// of their range). Only the display is stretched, never the data.
    #[must_use]
    pub fn of(r: &Raster) -> Self {
        if r.sample_format == SampleFormat::U8 {
            return Self { lo: 0.0, scale: 1.0 };
        }
        let colour = if r.layout.has_alpha() { r.channels() - 1 } else { r.channels() };
        let n = r.width * r.height;
        let step = (n * colour / 1_000_000).max(1);
        let mut sample: Vec<f32> =
            r.planes[..colour].iter().flat_map(|p| p.iter().step_by(step)).copied().filter(|v| v.is_finite()).collect();
        if sample.is_empty() {
            return Self { lo: 0.0, scale: 1.0 };
        }
        sample.sort_unstable_by(f32::total_cmp);
        let at = |q: f64| {
            #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss, clippy::cast_precision_loss)]
            let k = ((sample.len() - 1) as f64 * q).round() as usize;
            sample[k]
        };
        let (lo, hi) = (at(0.001), at(0.999));
        if lo < hi { Self { lo, scale: 255.0 / (hi - lo) } } else { Self { lo: lo - 1.0, scale: 127.0 } }
    }
}

/// The display colour of pixel `i` of `planes` laid out as `layout`.
#[must_use]
#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)] // clamped to 0..=255 first
pub fn colour(planes: &[Vec<f32>], layout: Layout, s: Stretch, i: usize) -> Color32 {
    let c = |v: f32| -> u8 { if v.is_finite() { ((v - s.lo) * s.scale).round().clamp(0.0, 255.0) as u8 } else { 0 } };
    match layout {
        Layout::Gray | Layout::GrayAlpha => {
            let v = planes[0][i];
            if v.is_finite() {
                let g = c(v);
                Color32::from_rgb(g, g, g)
            } else {
                Color32::from_rgb(160, 0, 160) // not a number: shown in purple
            }
        }
        Layout::Rgb | Layout::Rgba => Color32::from_rgb(c(planes[0][i]), c(planes[1][i]), c(planes[2][i])),
    }
}

/// A set of texture tiles covering a `w × h` image.
pub struct Tiles {
    pub w: usize,
    pub h: usize,
    pub side: usize,
    pub handles: Vec<TextureHandle>,
    /// Whether each tile's texture belongs to this set (false: borrowed from the set it was
    /// [shared](Tiles::share) from, and replaced by its own texture on its first update).
    owned: Vec<bool>,
    name: String,
    ctx: egui::Context,
}

impl Tiles {
    /// Builds the tiles from a colour function of the pixel index (in parallel).
    pub fn new(
        ctx: &egui::Context,
        name: &str,
        w: usize,
        h: usize,
        side: usize,
        f: &(dyn Fn(usize) -> Color32 + Sync),
    ) -> Self {
        Self::from_images(ctx, name, w, h, side, tile_images(w, h, side, f))
    }

    /// Uploads tiles made by [`tile_images`] (which may run on another thread).
    pub fn from_images(
        ctx: &egui::Context,
        name: &str,
        w: usize,
        h: usize,
        side: usize,
        images: Vec<ColorImage>,
    ) -> Self {
        let handles = images
            .into_iter()
            .enumerate()
            .map(|(t, img)| ctx.load_texture(format!("{name}-{t}"), img, TextureOptions::NEAREST))
            .collect::<Vec<_>>();
        let owned = vec![true; handles.len()];
        Self { w, h, side, handles, owned, name: name.to_owned(), ctx: ctx.clone() }
    }

    /// A set showing the same picture as this one without copying it: its tiles borrow these
    /// textures until they are updated (a result that differs from the original only in a few
    /// places costs only those tiles).
    #[must_use]
    pub fn share(&self, name: &str) -> Self {
        Self {
            w: self.w,
            h: self.h,
            side: self.side,
            handles: self.handles.clone(),
            owned: vec![false; self.handles.len()],
            name: name.to_owned(),
            ctx: self.ctx.clone(),
        }
    }

    /// A set whose every tile shows one colour (all share a single 1×1 texture, stretched), to be
    /// replaced tile by tile with [`Tiles::set_tile`].
    #[must_use]
    pub fn uniform(ctx: &egui::Context, name: &str, w: usize, h: usize, side: usize, colour: Color32) -> Self {
        let blank =
            ctx.load_texture(format!("{name}-blank"), ColorImage::new([1, 1], vec![colour]), TextureOptions::NEAREST);
        let count = w.div_ceil(side) * h.div_ceil(side);
        Self {
            w,
            h,
            side,
            handles: vec![blank; count],
            owned: vec![false; count],
            name: name.to_owned(),
            ctx: ctx.clone(),
        }
    }

    /// Replaces tile `t` with `image` (a [`tile_images`]-sized picture of it).
    pub fn set_tile(&mut self, t: usize, image: ColorImage) {
        if self.owned[t] {
            self.handles[t].set(image, TextureOptions::NEAREST);
        } else {
            self.handles[t] = self.ctx.load_texture(format!("{}-{t}", self.name), image, TextureOptions::NEAREST);
            self.owned[t] = true;
        }
    }

    /// The pixel rectangle `(x0, y0, x1, y1)` (ends exclusive) of tile `t`.
    #[must_use]
    pub fn tile_rect(&self, t: usize) -> (usize, usize, usize, usize) {
        let tx = self.w.div_ceil(self.side);
        let (x0, y0) = ((t % tx) * self.side, (t / tx) * self.side);
        (x0, y0, (x0 + self.side).min(self.w), (y0 + self.side).min(self.h))
    }

    /// Re-uploads the tiles that hold any pixel of the rectangle `(x0, y0)–(x1, y1)` (exclusive).
    pub fn update_rect(&mut self, x0: usize, y0: usize, x1: usize, y1: usize, f: &(dyn Fn(usize) -> Color32 + Sync)) {
        let tx = self.w.div_ceil(self.side);
        let (cx0, cy0) = (x0 / self.side, y0 / self.side);
        let (cx1, cy1) = ((x1.max(x0 + 1) - 1) / self.side, (y1.max(y0 + 1) - 1) / self.side);
        for cy in cy0..=cy1 {
            for cx in cx0..=cx1 {
                let t = cy * tx + cx;
                let Some(h) = self.handles.get_mut(t) else { continue };
                if self.owned[t] {
                    // Only the part of the tile inside the rectangle.
                    let (tx0, ty0) = (cx * self.side, cy * self.side);
                    let (ax, ay) = (x0.max(tx0), y0.max(ty0));
                    let (bx, by) = (x1.min(tx0 + self.side).min(self.w), y1.min(ty0 + self.side).min(self.h));
                    if ax >= bx || ay >= by {
                        continue;
                    }
                    let mut pixels = Vec::with_capacity((bx - ax) * (by - ay));
                    for y in ay..by {
                        pixels.extend((ax..bx).map(|x| f(y * self.w + x)));
                    }
                    let part = ColorImage::new([bx - ax, by - ay], pixels);
                    h.set_partial([ax - tx0, ay - ty0], part, TextureOptions::NEAREST);
                } else {
                    let image = tile_image(self.w, self.h, self.side, t, f);
                    *h = self.ctx.load_texture(format!("{}-{t}", self.name), image, TextureOptions::NEAREST);
                    self.owned[t] = true;
                }
            }
        }
    }

    /// Paints the tiles for `view`, clipped to `clip`.
    pub fn paint(&self, painter: &egui::Painter, view: &View, clip: Rect, tint: Color32) {
        let tx = self.w.div_ceil(self.side);
        let painter = painter.with_clip_rect(clip);
        for (t, h) in self.handles.iter().enumerate() {
            let (x0, y0) = ((t % tx) * self.side, (t / tx) * self.side);
            let (x1, y1) = ((x0 + self.side).min(self.w), (y0 + self.side).min(self.h));
            #[allow(clippy::cast_precision_loss)]
            let rect = Rect::from_min_max(
                view.screen_from_image(pos2(x0 as f32, y0 as f32)),
                view.screen_from_image(pos2(x1 as f32, y1 as f32)),
            );
            if rect.intersects(clip) {
                painter.image(h.id(), rect, Rect::from_min_max(Pos2::ZERO, pos2(1.0, 1.0)), tint);
            }
        }
    }
}

/// The images of every tile of a `w × h` picture, made in parallel.
pub fn tile_images(w: usize, h: usize, side: usize, f: &(dyn Fn(usize) -> Color32 + Sync)) -> Vec<ColorImage> {
    use rayon::prelude::*;
    let count = w.div_ceil(side) * h.div_ceil(side);
    (0..count).into_par_iter().map(|t| tile_image(w, h, side, t, f)).collect()
}

/// The image of tile `t` of a `w × h` picture cut in `side × side` tiles.
pub fn tile_image(w: usize, h: usize, side: usize, t: usize, f: &(dyn Fn(usize) -> Color32 + Sync)) -> ColorImage {
    let tx = w.div_ceil(side);
    let (x0, y0) = ((t % tx) * side, (t / tx) * side);
    let (x1, y1) = ((x0 + side).min(w), (y0 + side).min(h));
    let mut pixels = Vec::with_capacity((x1 - x0) * (y1 - y0));
    for y in y0..y1 {
        for x in x0..x1 {
            pixels.push(f(y * w + x));
        }
    }
    ColorImage::new([x1 - x0, y1 - y0], pixels)
}

/// The overlay colour of a mask pixel: the whole mask, or (`outline`) only its edge pixels, the
/// masked pixels next to a known one or to the image edge, drawn opaque.
#[must_use]
pub fn mark(mask: &Mask, colour: Color32, outline: bool, i: usize) -> Color32 {
    if !outline {
        return overlay(mask, colour, i);
    }
    let bits = mask.bits();
    if !bits[i] {
        return Color32::TRANSPARENT;
    }
    let (w, h) = (mask.width(), mask.height());
    let (x, y) = (i % w, i / w);
    let edge =
        x == 0 || y == 0 || x + 1 == w || y + 1 == h || !bits[i - 1] || !bits[i + 1] || !bits[i - w] || !bits[i + w];
    if edge {
        let [r, g, b, _] = colour.to_srgba_unmultiplied();
        Color32::from_rgb(r, g, b)
    } else {
        Color32::TRANSPARENT
    }
}

/// The overlay colour of a mask pixel.
#[must_use]
pub fn overlay(mask: &Mask, colour: Color32, i: usize) -> Color32 {
    if mask.bits()[i] { colour } else { Color32::TRANSPARENT }
}

/// Marks (or clears) a disk of `radius` pixels around `centre` (image coordinates); calls `before`
/// with each pixel about to change. Returns the changed rectangle.
pub fn stamp(
    mask: &mut Mask,
    centre: Pos2,
    radius: f32,
    value: bool,
    before: &mut dyn FnMut(&Mask, usize, usize),
) -> Option<(usize, usize, usize, usize)> {
    let (w, h) = (mask.width(), mask.height());
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss, clippy::cast_precision_loss)]
    let (x0, y0, x1, y1) = (
        (centre.x - radius).floor().max(0.0) as usize,
        (centre.y - radius).floor().max(0.0) as usize,
        ((centre.x + radius).ceil().max(0.0) as usize).min(w),
        ((centre.y + radius).ceil().max(0.0) as usize).min(h),
    );
    if x0 >= x1 || y0 >= y1 {
        return None;
    }
    let r2 = radius * radius;
    let mut changed = false;
    for y in y0..y1 {
        for x in x0..x1 {
            #[allow(clippy::cast_precision_loss)]
            let d = vec2(x as f32 + 0.5 - centre.x, y as f32 + 0.5 - centre.y);
            if d.length_sq() <= r2 && mask.get(x, y) != value {
                before(mask, x, y);
                mask.set(x, y, value);
                changed = true;
            }
        }
    }
    changed.then_some((x0, y0, x1, y1))
}
