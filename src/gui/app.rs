//! The window's state and its panels. Panels return a [`Command`]; commands are applied in one
//! place ([`App::run_command`]), so state changes in one place.

use std::path::PathBuf;

use egui::{Color32, Key, Pos2, Rect, Sense, Stroke, Vec2};

use super::canvas::{self, IMAGE_TILE, OVERLAY_TILE, Stretch, Tiles, View};
use super::history::{self, Edit, History};
use super::worker::{Message, Worker};
use crate::fill::{FillParams, FillReport, Start};
use crate::mask::{HoleStats, Mask};
use crate::raster::{self, Raster};

/// The caution shown next to every result.
pub const CAUTION: &str = "Filled pixels are estimates, not measurements.";

/// What the pointer does on the image.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Tool {
    Brush,
    Eraser,
    /// Drag a rectangle to mark.
    Box,
    /// Click a pixel: mark the connected pixels within a tolerance of its value (or all such).
    Pick,
    /// Click vertices; close on the first vertex or with Enter (Escape drops it).
    Polygon,
    /// Guided fill: drag from a hole to where its texture should come from.
    Source,
}

/// What the canvas shows.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Compare {
    /// The repaired image (the original until a fill is done).
    After,
    /// The image as it was read.
    Before,
    /// Before on the left of a draggable divider, after on the right.
    Split,
    /// Before and after alternating on a key (B).
    Blink,
    /// Before and after next to each other, sharing zoom and pan.
    SideBySide,
    /// |after − before| as a heat map.
    Difference,
    /// Each filled pixel's distance to the nearest known pixel: how far the fill reaches from
    /// real data.
    Distance,
}

/// The open image and everything made from it.
pub struct Document {
    pub path: PathBuf,
    pub original: Raster,
    /// The filled planes, once a fill is done.
    pub result: Option<Vec<Vec<f32>>>,
    pub mask: Mask,
    pub holes: HoleStats,
    /// Marked pixels (kept with `holes`, so no frame counts them).
    pub marked: usize,
    pub stretch: Stretch,
    /// The no-data value the file declares, kept off by filled samples, and how many pixels held
    /// it (or NaN) when the file was opened.
    pub nodata: Option<f64>,
    pub nodata_pixels: usize,
    /// Holes left unfilled by the last fill because they were larger than the limit.
    pub skipped: Vec<crate::mask::Hole>,
    /// The mask the result was filled under (the mask may have been edited since).
    pub result_mask: Option<std::sync::Arc<Mask>>,
    /// Distance of every pixel to the nearest known pixel under `result_mask` (computed off the
    /// UI thread after each fill), and its holes deeper than `DEEP_HOLE_PX`.
    pub depth: Option<Depth>,
}

/// How far the filled pixels reach from real data.
pub struct Depth {
    pub distance: std::sync::Arc<Vec<f32>>,
    pub max: f32,
    pub deep: Vec<crate::mask::distance::Depth>,
}

impl Document {
    fn new(path: PathBuf, original: Raster, mask: Option<Mask>, stretch: Stretch) -> Self {
        let mask = mask.unwrap_or_else(|| Mask::new(original.width, original.height));
        let holes = mask.hole_stats();
        let marked = mask.count();
        Self {
            path,
            original,
            result: None,
            mask,
            holes,
            marked,
            stretch,
            nodata: None,
            nodata_pixels: 0,
            skipped: Vec::new(),
            result_mask: None,
            depth: None,
        }
    }

    /// Recounts the mask's pixels and holes after an edit.
    pub fn refresh(&mut self) {
        self.holes = self.mask.hole_stats();
        self.marked = self.mask.count();
    }

    /// The result as a raster in the input's format (the original where nothing was filled).
    #[must_use]
    pub fn result_raster(&self) -> Raster {
        let mut r = self.original.clone();
        if let Some(planes) = &self.result {
            r.planes.clone_from(planes);
        }
        r
    }
}

/// Textures of the open document (runtime only).
struct Textures {
    before: Tiles,
    after: Option<Tiles>,
    /// The difference heat map and its largest value.
    difference: Option<Difference>,
    /// The distance heat map.
    distance: Option<Difference>,
    overlay: Tiles,
    proposal: Option<Tiles>,
}

/// A command from a panel or a key.
#[derive(Clone, Debug, PartialEq)]
pub enum Command {
    Open(PathBuf),
    Fill,
    Cancel,
    SaveResult(PathBuf),
    SaveMask(PathBuf),
    Undo,
    Redo,
    ClearMask,
    InvertMask,
    Fit,
    OneToOne,
    /// Zoom about the canvas centre by a factor.
    Zoom(f32),
    /// Load a mask PNG of the image's size, replacing the current mask (undoable).
    LoadMask(PathBuf),
    /// Look for damage with a detector; the result is shown for review.
    Find(crate::cli::DetectMethod),
    /// Add the proposal to the mask, or replace the mask with it, or drop it.
    AcceptProposal {
        replace: bool,
    },
    DiscardProposal,
    /// Mark a rectangle of image pixels `(x0, y0, x1, y1)`, ends exclusive.
    MarkBox(usize, usize, usize, usize),
    /// Mark by the value of the pixel at `(x, y)`.
    Pick(usize, usize),
    Grow(usize),
    Shrink(usize),
    /// Mark the pixels whose centres lie inside the polygon (image coordinates).
    MarkPolygon(Vec<Pos2>),
    SaveReport(PathBuf),
    /// The user confirmed replacing an existing file with the pending save.
    ConfirmOverwrite,
}

/// A stroke in progress.
struct StrokeState {
    edit: Edit,
    last: Pos2,
}

/// The application.
pub struct App {
    pub doc: Option<Document>,
    pub tool: Tool,
    /// Brush radius in image pixels.
    pub radius: f32,
    pub compare: Compare,
    /// Divider position of the split view, 0–1 across the canvas.
    pub split: f32,
    pub blink_before: bool,
    pub overlay_visible: bool,
    pub overlay_colour: Color32,
    /// Draw only the outline of the mask (kept visible after a fill, on every view).
    pub outline: bool,
    /// Where the work is kept for crash recovery (`None`: not kept).
    pub recovery: Option<super::Recovery>,
    /// Work a session that ended abnormally left, offered for restoring.
    pub restore_offer: Option<super::Saved>,
    /// When the work was last kept, and the history's change count then.
    last_kept: Option<(std::time::Instant, u64)>,
    /// A thread is writing the kept work (one at a time).
    keeping: std::sync::Arc<std::sync::atomic::AtomicBool>,
    /// Work to keep once that thread is done.
    keep_pending: bool,
    /// The running local fill is the document's first (nothing was filled before).
    near_first: bool,
    /// The compare mode of the last frame was side by side (whose views are half as wide).
    was_side_by_side: bool,
    pub tolerance: f64,
    /// The fill method, grain (seed) and whether the scientific profile forbids invented texture.
    pub method: crate::fill::FillMethod,
    pub grain: Option<u64>,
    pub scientific: bool,
    /// Texture sources the user dragged out for the guided fill.
    pub chosen_sources: Vec<crate::fill::guided::ChosenSource>,
    /// Where a source drag started (a masked pixel).
    source_anchor: Option<(usize, usize)>,
    /// The distance map being computed for the last fill.
    depth_rx: Option<std::sync::mpsc::Receiver<(u64, Depth)>>,
    /// Counts fills, so a distance map of an older fill is dropped.
    fill_serial: u64,
    pub open_field: String,
    pub save_field: String,
    pub mask_field: String,
    pub status: String,
    pub history: History,
    pub view: View,
    pub last_fill: Option<FillReport>,
    pub progress: Option<(usize, usize, f64)>,
    pub show_help: bool,
    pub cursor: Option<(usize, usize)>,
    /// Damage found by a detector, shown for review before it joins the mask.
    pub proposal: Option<Mask>,
    pub find_method: crate::cli::DetectMethod,
    /// Pick by value: tolerance in the image's units, and whether to take all such pixels.
    pub pick_tolerance: f64,
    pub pick_all: bool,
    /// Pixels to grow or shrink the mask by.
    pub mask_steps: usize,
    /// A result not saved since the last fill.
    pub unsaved: bool,
    pub close_prompt: bool,
    /// Re-fill automatically after every mask edit (warm start from the last result).
    pub live: bool,
    /// Leave holes larger than this many pixels unfilled (`None`: fill every hole).
    pub max_hole: Option<usize>,
    pub report_field: String,
    /// A save waiting for the user to confirm replacing an existing file.
    pub pending_overwrite: Option<Command>,
    box_anchor: Option<Pos2>,
    /// Vertices of the polygon being drawn, in image coordinates.
    pub polygon: Vec<Pos2>,
    /// Settings kept between runs (recent files, last folder, window size…).
    pub settings: super::Settings,
    dialog: Option<std::sync::mpsc::Receiver<Option<PathBuf>>>,
    /// Tiles of a just-loaded picture, made by the loader, waiting to be uploaded.
    pending_tiles: Option<Vec<egui::ColorImage>>,
    canvas_rect: Rect,
    /// The mask or its colour changed as a whole: rebuild the overlay tiles (only those).
    overlay_dirty: bool,
    live_refill: bool,
    /// A fill was asked for while another ran; run it when that one ends.
    refill_after: bool,
    /// The last fill re-filled only the holes near an edit; a report needs a whole fill first.
    last_fill_local: bool,
    /// The next fill covers the whole mask even if a local re-fill would do.
    whole_next: bool,
    /// A report to write once the running whole fill is done.
    report_after_fill: Option<PathBuf>,
    worker: Option<Worker>,
    textures: Option<Textures>,
    stroke: Option<StrokeState>,
    mask_after_load: Option<PathBuf>,
}

impl Default for App {
    fn default() -> Self {
        Self {
            doc: None,
            tool: Tool::Brush,
            radius: 4.0,
            compare: Compare::After,
            split: 0.5,
            blink_before: false,
            overlay_visible: true,
            overlay_colour: Color32::from_rgba_unmultiplied(255, 40, 200, 140),
            outline: false,
            was_side_by_side: false,
            near_first: false,
            recovery: None,
            restore_offer: None,
            last_kept: None,
            keeping: std::sync::Arc::default(),
            keep_pending: false,
            tolerance: 1e-6,
            method: crate::fill::FillMethod::Harmonic,
            grain: None,
            scientific: false,
            chosen_sources: Vec::new(),
            source_anchor: None,
            depth_rx: None,
            fill_serial: 0,
            open_field: String::new(),
            save_field: String::new(),
            mask_field: String::new(),
            status: "Open an image: type its path above and press Open, or drop it on the window.".to_owned(),
            history: History::default(),
            view: View::default(),
            last_fill: None,
            progress: None,
            show_help: false,
            cursor: None,
            proposal: None,
            find_method: crate::cli::DetectMethod::Outliers,
            pick_tolerance: 8.0,
            pick_all: false,
            mask_steps: 1,
            unsaved: false,
            close_prompt: false,
            live: false,
            max_hole: None,
            report_field: String::new(),
            pending_overwrite: None,
            box_anchor: None,
            polygon: Vec::new(),
            settings: super::Settings::default(),
            dialog: None,
            pending_tiles: None,
            canvas_rect: Rect::from_min_size(Pos2::ZERO, Vec2::new(800.0, 600.0)),
            overlay_dirty: false,
            live_refill: false,
            refill_after: false,
            last_fill_local: false,
            whole_next: false,
            report_after_fill: None,
            worker: None,
            textures: None,
            stroke: None,
            mask_after_load: None,
        }
    }
}

impl App {
    /// Starts loading `path` (and then its `mask`).
    pub fn open(&mut self, ctx: &egui::Context, path: PathBuf, mask: Option<PathBuf>) {
        self.open_field = path.display().to_string();
        self.mask_after_load = mask;
        self.run_command(ctx, Command::Open(path));
    }

    /// Keeps the work in `recovery` from now on, and offers what an abnormally ended session left
    /// there.
    pub fn use_recovery(&mut self, recovery: Option<super::Recovery>) {
        self.restore_offer = recovery.as_ref().and_then(super::Recovery::found);
        self.recovery = recovery;
    }

    /// Keeps the current mask for crash recovery (on a background thread: encoding a large mask
    /// takes a moment), with the settings. Called at every fill, and every 30 s while editing.
    fn keep_work(&mut self) {
        use std::sync::atomic::Ordering;
        let (Some(r), Some(d)) = (&self.recovery, &self.doc) else { return };
        if self.keeping.swap(true, Ordering::AcqRel) {
            // The last one is still being written: keep this one as soon as it is done.
            self.keep_pending = true;
            return;
        }
        self.keep_pending = false;
        self.last_kept = Some((std::time::Instant::now(), self.history.changes));
        let (r, image, mask, keeping) = (r.clone(), d.path.clone(), d.mask.clone(), self.keeping.clone());
        let _ = self.store_settings().save();
        let spawned = std::thread::Builder::new().name("keep work".to_owned()).spawn(move || {
            if let Err(e) = r.save(&image, &mask) {
                eprintln!("reweave: warning: the work could not be kept for recovery: {e}");
            }
            keeping.store(false, Ordering::Release);
        });
        if let Err(e) = spawned {
            self.keeping.store(false, Ordering::Release);
            eprintln!("reweave: warning: the work could not be kept for recovery: {e}");
        }
    }

    /// Takes over saved settings (brush, overlay, tolerance, recent files).
    pub fn apply_settings(&mut self, s: super::Settings) {
        self.radius = s.radius.clamp(0.5, 500.0);
        let [r, g, b, a] = s.overlay_rgba;
        self.overlay_colour = Color32::from_rgba_unmultiplied(r, g, b, a);
        self.outline = s.outline;
        if s.tolerance > 0.0 && s.tolerance < 1.0 {
            self.tolerance = s.tolerance;
        }
        self.scientific = s.scientific;
        self.method =
            if s.scientific && s.method.invents_texture() { crate::fill::FillMethod::Harmonic } else { s.method };
        self.settings = s;
    }

    /// The settings as they are now, to be saved.
    pub fn store_settings(&mut self) -> &super::Settings {
        self.settings.radius = self.radius;
        self.settings.overlay_rgba = self.overlay_colour.to_srgba_unmultiplied();
        self.settings.outline = self.outline;
        self.settings.tolerance = self.tolerance;
        self.settings.method = self.method;
        self.settings.scientific = self.scientific;
        &self.settings
    }

    /// Whether background work is running.
    #[must_use]
    pub fn busy(&self) -> bool {
        self.worker.is_some() || self.depth_rx.is_some()
    }

    /// Draws the whole window into `ui`.
    pub fn ui(&mut self, ui: &mut egui::Ui) {
        let ctx = ui.ctx().clone();
        self.poll(&ctx);
        let mut commands = self.keys(&ctx);
        for file in ctx.input(|i| i.raw.dropped_files.clone()) {
            let p = file.path();
            if !p.as_os_str().is_empty() {
                commands.push(Command::Open(p.to_owned()));
            }
        }
        egui::Panel::top("files").show(ui, |ui| commands.extend(self.files_ui(ui)));
        egui::Panel::bottom("status").show(ui, |ui| self.status_ui(ui));
        egui::Panel::left("tools").resizable(false).exact_size(240.0).show(ui, |ui| {
            // Scrolls when the window is too short for every section.
            egui::ScrollArea::vertical().show(ui, |ui| commands.extend(self.tools_ui(ui)));
        });
        egui::CentralPanel::default().show(ui, |ui| commands.extend(self.canvas_ui(ui)));
        if self.show_help {
            self.help_ui(&ctx);
        }
        if let Some(pending) = self.pending_overwrite.clone() {
            let target = match &pending {
                Command::SaveResult(p) | Command::SaveMask(p) | Command::SaveReport(p) => p.display().to_string(),
                _ => String::new(),
            };
            egui::Window::new("Replace file?").collapsible(false).resizable(false).show(&ctx, |ui| {
                ui.label(format!("{target} exists. Replace it?"));
                ui.horizontal(|ui| {
                    if ui.button("Replace").clicked() {
                        commands.push(Command::ConfirmOverwrite);
                    }
                    if ui.button("Keep it").clicked() {
                        self.pending_overwrite = None;
                    }
                });
            });
        }
        if ctx.input(|i| i.viewport().close_requested()) && self.unsaved {
            ctx.send_viewport_cmd(egui::ViewportCommand::CancelClose);
            self.close_prompt = true;
        }
        if self.close_prompt {
            egui::Window::new("Unsaved result").collapsible(false).resizable(false).show(&ctx, |ui| {
                ui.label("The repaired image has not been saved.");
                ui.horizontal(|ui| {
                    if ui.button("Save and close").clicked() {
                        commands.push(Command::SaveResult(PathBuf::from(self.save_field.trim())));
                        self.close_prompt = false;
                    }
                    if ui.button("Close without saving").clicked() {
                        self.unsaved = false;
                        self.close_prompt = false;
                        ctx.send_viewport_cmd(egui::ViewportCommand::Close);
                    }
                    if ui.button("Keep working").clicked() {
                        self.close_prompt = false;
                    }
                });
            });
        }
        if let Some(offer) = self.restore_offer.clone() {
            egui::Window::new("Restore earlier work?").collapsible(false).resizable(false).show(&ctx, |ui| {
                ui.label(format!(
                    "reweave did not close normally last time. It kept a mask of {} pixels drawn on {}.",
                    offer.marked,
                    offer.image.display()
                ));
                ui.horizontal(|ui| {
                    if ui.button("Restore").clicked() {
                        if let Some(r) = &self.recovery {
                            self.open_field = offer.image.display().to_string();
                            self.mask_after_load = Some(r.mask_path());
                            commands.push(Command::Open(offer.image.clone()));
                        }
                        self.restore_offer = None;
                    }
                    if ui.button("Discard").clicked() {
                        if let Some(r) = &self.recovery {
                            r.clear();
                        }
                        self.restore_offer = None;
                    }
                });
            });
        }
        for c in commands {
            self.run_command(&ctx, c);
        }
        if std::mem::take(&mut self.live_refill) {
            self.run_command(&ctx, Command::Fill);
        }
        // Keep the work for crash recovery at least every 30 s while the mask is being edited.
        if self.recovery.is_some() && self.doc.is_some() {
            let changes = self.history.changes;
            let interval = std::time::Duration::from_secs(super::recovery::INTERVAL_SECONDS);
            match self.last_kept {
                _ if self.keep_pending => {
                    self.keep_work();
                    ctx.request_repaint_after(std::time::Duration::from_millis(100));
                }
                None if changes == 0 => {}
                Some((_, kept)) if kept == changes => {}
                Some((at, _)) if at.elapsed() < interval => ctx.request_repaint_after(interval - at.elapsed()),
                _ => self.keep_work(),
            }
        }
    }

    fn keys(&mut self, ctx: &egui::Context) -> Vec<Command> {
        let mut out = Vec::new();
        let mut quit = false;
        if ctx.egui_wants_keyboard_input() {
            return out;
        }
        ctx.input(|i| {
            let cmd = i.modifiers.command;
            if cmd && i.key_pressed(Key::Z) {
                out.push(if i.modifiers.shift { Command::Redo } else { Command::Undo });
            }
            if cmd && i.key_pressed(Key::Y) {
                out.push(Command::Redo);
            }
            if cmd && i.key_pressed(Key::Q) {
                quit = true;
            }
            if !cmd {
                if i.key_pressed(Key::B) {
                    self.blink_before = !self.blink_before;
                    self.compare = Compare::Blink;
                }
                if i.key_pressed(Key::M) {
                    self.overlay_visible = !self.overlay_visible;
                }
                if i.key_pressed(Key::F) {
                    out.push(Command::Fit);
                }
                if i.key_pressed(Key::Num1) {
                    out.push(Command::OneToOne);
                }
                if i.key_pressed(Key::Plus) || i.key_pressed(Key::Equals) {
                    out.push(Command::Zoom(1.25));
                }
                if i.key_pressed(Key::Minus) {
                    out.push(Command::Zoom(0.8));
                }
                if i.key_pressed(Key::OpenBracket) {
                    self.radius = (self.radius / 1.25).max(0.5);
                }
                if i.key_pressed(Key::CloseBracket) {
                    self.radius = (self.radius * 1.25).min(500.0);
                }
                if i.key_pressed(Key::E) {
                    self.tool = Tool::Eraser;
                }
                if i.key_pressed(Key::P) {
                    self.tool = Tool::Brush;
                }
                if i.key_pressed(Key::F1) {
                    self.show_help = !self.show_help;
                }
            }
        });
        if quit {
            // Outside the input closure: the context must not be locked while sending.
            ctx.send_viewport_cmd(egui::ViewportCommand::Close);
        }
        out
    }

    fn files_ui(&mut self, ui: &mut egui::Ui) -> Vec<Command> {
        let mut out = Vec::new();
        ui.horizontal(|ui| {
            let label = ui.label("Image");
            ui.add(egui::TextEdit::singleline(&mut self.open_field).desired_width(260.0)).labelled_by(label.id);
            if ui.button("Open").clicked() && !self.open_field.trim().is_empty() {
                out.push(Command::Open(PathBuf::from(self.open_field.trim())));
            }
            if ui.add_enabled(self.dialog.is_none(), egui::Button::new("Browse…")).clicked() {
                // The system dialog blocks its thread, so it gets one of its own.
                let mut dialog = rfd::FileDialog::new().add_filter("images", &["png", "tif", "tiff", "jpg", "jpeg"]);
                if let Some(folder) = &self.settings.last_folder {
                    dialog = dialog.set_directory(folder);
                }
                let (tx, rx) = std::sync::mpsc::channel();
                let ctx = ui.ctx().clone();
                let spawned = std::thread::Builder::new().name("reweave-dialog".to_owned()).spawn(move || {
                    let _ = tx.send(dialog.pick_file());
                    ctx.request_repaint();
                });
                if spawned.is_ok() {
                    self.dialog = Some(rx);
                }
            }
            if let Some(rx) = &self.dialog
                && let Ok(choice) = rx.try_recv()
            {
                self.dialog = None;
                match choice {
                    Some(p) => out.push(Command::Open(p)),
                    None => {
                        self.status = "no file chosen (where no file dialog is available, type the path)".to_owned();
                    }
                }
            }
            egui::ComboBox::from_label("Recent").selected_text("").show_ui(ui, |ui| {
                for p in &self.settings.recent {
                    if ui.selectable_label(false, p.display().to_string()).clicked() {
                        out.push(Command::Open(p.clone()));
                    }
                }
            });
        });
        ui.horizontal(|ui| {
            let label = ui.label("Result to");
            ui.add(egui::TextEdit::singleline(&mut self.save_field).desired_width(200.0)).labelled_by(label.id);
            if ui.add_enabled(self.doc.is_some(), egui::Button::new("Save result")).clicked() {
                out.push(Command::SaveResult(PathBuf::from(self.save_field.trim())));
            }
            let label = ui.label("Mask to");
            ui.add(egui::TextEdit::singleline(&mut self.mask_field).desired_width(160.0)).labelled_by(label.id);
            if ui.add_enabled(self.doc.is_some(), egui::Button::new("Save mask")).clicked() {
                out.push(Command::SaveMask(PathBuf::from(self.mask_field.trim())));
            }
            if ui.add_enabled(self.doc.is_some(), egui::Button::new("Load mask")).clicked() {
                out.push(Command::LoadMask(PathBuf::from(self.mask_field.trim())));
            }
            let label = ui.label("Report to");
            ui.add(egui::TextEdit::singleline(&mut self.report_field).desired_width(140.0)).labelled_by(label.id);
            if ui.add_enabled(self.last_fill.is_some(), egui::Button::new("Save report")).clicked() {
                out.push(Command::SaveReport(PathBuf::from(self.report_field.trim())));
            }
        });
        out
    }

    fn tools_ui(&mut self, ui: &mut egui::Ui) -> Vec<Command> {
        let mut out = Vec::new();
        ui.spacing_mut().slider_width = 100.0;
        ui.heading("Mark");
        ui.horizontal(|ui| {
            ui.selectable_value(&mut self.tool, Tool::Brush, "Brush");
            ui.selectable_value(&mut self.tool, Tool::Eraser, "Eraser");
            ui.selectable_value(&mut self.tool, Tool::Box, "Box");
        });
        ui.horizontal(|ui| {
            ui.selectable_value(&mut self.tool, Tool::Polygon, "Polygon");
            ui.selectable_value(&mut self.tool, Tool::Pick, "Pick by value");
        });
        if self.tool == Tool::Pick {
            ui.add(egui::Slider::new(&mut self.pick_tolerance, 0.0..=65535.0).logarithmic(true).text("Within"));
            ui.checkbox(&mut self.pick_all, "All such pixels");
        }
        ui.horizontal(|ui| {
            let label = ui.label("By");
            ui.add(egui::DragValue::new(&mut self.mask_steps).range(1..=100)).labelled_by(label.id);
            if ui.button("Dilate").clicked() {
                out.push(Command::Grow(self.mask_steps));
            }
            if ui.button("Erode").clicked() {
                out.push(Command::Shrink(self.mask_steps));
            }
        });
        ui.add(egui::Slider::new(&mut self.radius, 0.5..=200.0).logarithmic(true).text("Size"));
        ui.horizontal(|ui| {
            if ui.add_enabled(self.history.can_undo(), egui::Button::new("Undo")).clicked() {
                out.push(Command::Undo);
            }
            if ui.add_enabled(self.history.can_redo(), egui::Button::new("Redo")).clicked() {
                out.push(Command::Redo);
            }
        });
        ui.horizontal(|ui| {
            if ui.button("Clear").clicked() {
                out.push(Command::ClearMask);
            }
            if ui.button("Complement").clicked() {
                out.push(Command::InvertMask);
            }
        });
        ui.horizontal(|ui| {
            ui.checkbox(&mut self.overlay_visible, "Show mask (M)");
            let before = self.overlay_colour;
            let label = ui.label("Colour");
            ui.color_edit_button_srgba(&mut self.overlay_colour).labelled_by(label.id);
            if self.overlay_colour != before {
                self.overlay_dirty = true;
            }
        });
        if ui.checkbox(&mut self.outline, "Outline only").changed() {
            self.overlay_dirty = true;
            self.overlay_visible = true;
        }
        let mut alpha = f32::from(self.overlay_colour.a()) / 255.0;
        if ui.add(egui::Slider::new(&mut alpha, 0.1..=1.0).text("Opacity")).changed() {
            let [r, g, b, _] = self.overlay_colour.to_srgba_unmultiplied();
            #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
            let a = (alpha * 255.0).round() as u8;
            self.overlay_colour = Color32::from_rgba_unmultiplied(r, g, b, a);
            self.overlay_dirty = true;
        }
        ui.separator();
        ui.heading("Detect");
        egui::ComboBox::from_label("Method").selected_text(format!("{:?}", self.find_method)).show_ui(ui, |ui| {
            use crate::cli::DetectMethod as M;
            for m in [M::Outliers, M::Lines, M::Scratches, M::Nodata] {
                ui.selectable_value(&mut self.find_method, m, format!("{m:?}"));
            }
        });
        match &self.proposal {
            None => {
                if ui.add_enabled(self.doc.is_some() && self.worker.is_none(), egui::Button::new("Find")).clicked() {
                    out.push(Command::Find(self.find_method));
                }
            }
            Some(p) => {
                ui.label(format!("found {} px (cyan)", p.count()));
                ui.horizontal(|ui| {
                    if ui.button("Add").clicked() {
                        out.push(Command::AcceptProposal { replace: false });
                    }
                    if ui.button("Replace").clicked() {
                        out.push(Command::AcceptProposal { replace: true });
                    }
                    if ui.button("Discard").clicked() {
                        out.push(Command::DiscardProposal);
                    }
                });
            }
        }
        ui.separator();
        ui.heading("Repair");
        self.method_ui(ui);
        egui::ComboBox::from_label("Tolerance").selected_text(format!("{:.0e}", self.tolerance)).show_ui(ui, |ui| {
            for t in [1e-4, 1e-6, 1e-8, 1e-10] {
                ui.selectable_value(&mut self.tolerance, t, format!("{t:.0e}"));
            }
        });
        match (&self.worker, self.progress) {
            (Some(w), progress) => {
                ui.horizontal(|ui| {
                    ui.spinner();
                    ui.label(format!("{}…", w.what));
                });
                if let Some((cycle, max, residual)) = progress {
                    #[allow(clippy::cast_precision_loss)]
                    let done = (residual.max(1e-300).log10() / self.tolerance.log10()).clamp(0.0, 1.0) as f32;
                    ui.add(egui::ProgressBar::new(done).text(format!("cycle {cycle}/{max}, residual {residual:.1e}")));
                }
                if w.what == "fill" && ui.button("Cancel").clicked() {
                    out.push(Command::Cancel);
                }
            }
            (None, _) => {
                if ui.add_enabled(self.doc.as_ref().is_some_and(|d| d.marked > 0), egui::Button::new("Fill")).clicked()
                {
                    out.push(Command::Fill);
                }
            }
        }
        ui.checkbox(&mut self.live, "Live: re-fill after each edit");
        ui.horizontal(|ui| {
            let mut limit = self.max_hole.is_some();
            ui.checkbox(&mut limit, "Leave holes over");
            let mut n = self.max_hole.unwrap_or(10_000);
            let label = ui.label("px");
            ui.add_enabled(limit, egui::DragValue::new(&mut n).range(1..=usize::MAX)).labelled_by(label.id);
            self.max_hole = limit.then_some(n);
        });
        ui.small(CAUTION);
        if let Some(summary) = self
            .doc
            .as_ref()
            .and_then(|d| d.depth.as_ref())
            .and_then(|depth| crate::report::deep_hole_summary(&depth.deep))
        {
            let advice = if self.method == crate::fill::FillMethod::Guided || self.scientific {
                ""
            } else {
                " For photographs, Guided carries texture in."
            };
            ui.colored_label(
                Color32::from_rgb(230, 170, 40),
                format!("{summary}: there any smooth fill is a guess.{advice}"),
            );
        }
        ui.separator();
        ui.heading("Compare");
        ui.horizontal_wrapped(|ui| {
            ui.selectable_value(&mut self.compare, Compare::After, "After");
            ui.selectable_value(&mut self.compare, Compare::Before, "Before");
            ui.selectable_value(&mut self.compare, Compare::Split, "Split");
            ui.selectable_value(&mut self.compare, Compare::SideBySide, "Side by side");
            ui.selectable_value(&mut self.compare, Compare::Blink, "Blink (B)");
            ui.selectable_value(&mut self.compare, Compare::Difference, "Difference");
            ui.selectable_value(&mut self.compare, Compare::Distance, "Distance to known pixels");
        });
        ui.separator();
        ui.horizontal(|ui| {
            if ui.button("Fit").clicked() {
                out.push(Command::Fit);
            }
            if ui.button("1:1").clicked() {
                out.push(Command::OneToOne);
            }
            if ui.button("Keys (F1)").clicked() {
                self.show_help = !self.show_help;
            }
        });
        out
    }

    /// The fill method, grain and the scientific profile.
    fn method_ui(&mut self, ui: &mut egui::Ui) {
        use crate::fill::FillMethod;
        let label = |m: FillMethod| match m {
            FillMethod::Harmonic => "Harmonic: smoothest, within the rim's range",
            FillMethod::Biharmonic => "Biharmonic: keeps slopes (terrain, gradients)",
            FillMethod::Guided => "Guided: texture from a matching area",
        };
        egui::ComboBox::new("fill-method", "Method").selected_text(self.method.name()).show_ui(ui, |ui| {
            for m in [FillMethod::Harmonic, FillMethod::Biharmonic, FillMethod::Guided] {
                let allowed = !(self.scientific && m.invents_texture());
                ui.add_enabled_ui(allowed, |ui| ui.selectable_value(&mut self.method, m, label(m)));
            }
        });
        ui.horizontal(|ui| {
            let mut on = self.grain.is_some();
            ui.add_enabled(!self.scientific, egui::Checkbox::new(&mut on, "Matched noise"))
                .on_hover_text("Adds noise like that of each hole's surroundings to the filled pixels (the command line's --grain); the seed makes it repeatable.");
            let mut seed = self.grain.unwrap_or(1);
            let label = ui.label("seed");
            ui.add_enabled(on && !self.scientific, egui::DragValue::new(&mut seed)).labelled_by(label.id);
            self.grain = (on && !self.scientific).then_some(seed);
        });
        if ui
            .checkbox(&mut self.scientific, "Scientific data: no invented texture")
            .on_hover_text("Refuses the guided fill and grain: every filled value is then a smooth interpolation of measured ones.")
            .changed()
            && self.scientific
        {
            self.grain = None;
            if self.method.invents_texture() {
                self.method = FillMethod::Harmonic;
            }
        }
        if self.method == FillMethod::Guided {
            ui.horizontal(|ui| {
                ui.selectable_value(&mut self.tool, Tool::Source, "Drag a source").on_hover_text(
                    "Drag from a hole to where its texture should come from; the hole is filled again from there.",
                );
                let n = self.chosen_sources.len();
                if n > 0 && ui.button(format!("Forget {n} chosen")).clicked() {
                    self.chosen_sources.clear();
                }
            });
        } else if self.tool == Tool::Source {
            self.tool = Tool::Brush;
        }
        if self.method == FillMethod::Guided || self.grain.is_some() {
            ui.colored_label(
                Color32::from_rgb(230, 170, 40),
                "Texture in the holes is copied or random: it looks like the surroundings but was never measured. Not for measurement, evidence or diagnosis.",
            );
        }
    }

    fn fill_params(&self) -> FillParams {
        FillParams {
            tolerance: self.tolerance,
            method: self.method,
            grain: self.grain,
            chosen_sources: self.chosen_sources.clone(),
            ..FillParams::default()
        }
    }

    /// Starts computing the distance map of the filled mask off the UI thread.
    fn measure_depth(&mut self, ctx: &egui::Context) {
        let Some(d) = &self.doc else { return };
        // Shared, not copied: the UI thread only bumps a count.
        let Some(mask) = d.result_mask.clone() else { return };
        self.fill_serial += 1;
        let serial = self.fill_serial;
        let (tx, rx) = std::sync::mpsc::channel();
        self.depth_rx = Some(rx);
        let ctx = ctx.clone();
        let spawned = std::thread::Builder::new().name("distance".to_owned()).spawn(move || {
            let distance = crate::mask::distance::distance_to_known(&mask);
            let deep = crate::mask::distance::holes_deeper_than(&mask, &distance, crate::report::DEEP_HOLE_PX);
            let max = distance.iter().copied().filter(|v| v.is_finite()).fold(0.0, f32::max);
            let _ = tx.send((serial, Depth { distance: std::sync::Arc::new(distance), max, deep }));
            ctx.request_repaint();
        });
        if spawned.is_err() {
            self.depth_rx = None;
        }
    }

    /// Takes a finished distance map of the latest fill.
    fn receive_depth(&mut self) {
        let Some(rx) = &self.depth_rx else { return };
        match rx.try_recv() {
            Ok((serial, depth)) => {
                self.depth_rx = None;
                if serial == self.fill_serial
                    && let Some(d) = &mut self.doc
                {
                    d.depth = Some(depth);
                    if let Some(t) = &mut self.textures {
                        t.distance = None;
                    }
                }
            }
            Err(std::sync::mpsc::TryRecvError::Empty) => {}
            Err(std::sync::mpsc::TryRecvError::Disconnected) => self.depth_rx = None,
        }
    }

    fn status_ui(&self, ui: &mut egui::Ui) {
        ui.horizontal(|ui| {
            if let Some(d) = &self.doc {
                ui.label(format!(
                    "{}×{} {} {}",
                    d.original.width,
                    d.original.height,
                    d.original.layout.name(),
                    d.original.sample_format
                ));
                ui.separator();
                if let Some((x, y)) = self.cursor {
                    let i = y * d.original.width + x;
                    let values: Vec<String> = d.original.planes.iter().map(|p| format!("{}", p[i])).collect();
                    ui.label(format!("({x}, {y}) = {}", values.join(", ")));
                    ui.separator();
                }
                let holes = d.holes.holes;
                ui.label(format!("mask {} px in {holes} hole{}", d.marked, if holes == 1 { "" } else { "s" }));
                if let Some(r) = &self.last_fill {
                    ui.separator();
                    let worst = r.channels.iter().map(|c| c.relative_residual).fold(0.0, f64::max);
                    ui.label(format!("last fill {:.3} s, residual {worst:.1e}", r.setup_seconds + r.solve_seconds));
                }
                ui.separator();
            }
            ui.label(&self.status);
        });
    }

    fn help_ui(&mut self, ctx: &egui::Context) {
        let mut open = self.show_help;
        egui::Window::new("Keys").open(&mut open).show(ctx, |ui| {
            egui::Grid::new("keys").show(ui, |ui| {
                for (k, what) in [
                    ("P / E", "brush / eraser"),
                    ("[ and ]", "smaller / larger brush"),
                    ("drag", "paint (brush) or erase; Box: drag a rectangle"),
                    ("click, Enter", "Polygon: add a vertex; close it (or click the first vertex)"),
                    ("Escape", "drop the polygon being drawn"),
                    ("middle drag, Space + drag", "pan"),
                    ("wheel, pinch", "zoom about the cursor"),
                    ("F / 1", "fit / actual pixels"),
                    ("+ / -", "zoom in / out"),
                    ("M", "show or hide the mask"),
                    ("B", "blink between before and after"),
                    ("Ctrl+Z", "undo"),
                    ("Ctrl+Shift+Z, Ctrl+Y", "redo"),
                    ("Ctrl+Q", "close the window (asks first if a result is unsaved)"),
                    ("F1", "this list"),
                ] {
                    ui.label(k);
                    ui.label(what);
                    ui.end_row();
                }
            });
        });
        self.show_help = open;
    }

    /// The canvas: draws the image, handles zoom, pan and painting.
    fn canvas_ui(&mut self, ui: &mut egui::Ui) -> Vec<Command> {
        let (response, painter) = ui.allocate_painter(ui.available_size(), Sense::click_and_drag());
        let rect = response.rect;
        self.canvas_rect = rect;
        painter.rect_filled(rect, 0.0, Color32::from_gray(40));
        let Some(doc) = &mut self.doc else {
            return Vec::new();
        };
        let ctx = ui.ctx().clone();
        #[allow(clippy::cast_precision_loss)]
        let size = Vec2::new(doc.original.width as f32, doc.original.height as f32);
        // Side by side shows two half-width views: entering or leaving it fits the image again.
        let side_by_side = self.compare == Compare::SideBySide;
        if side_by_side != std::mem::replace(&mut self.was_side_by_side, side_by_side) {
            self.view.fit_pending = true;
        }
        if self.view.fit_pending {
            let area = if side_by_side {
                Rect::from_min_size(rect.min, Vec2::new(rect.width() / 2.0, rect.height()))
            } else {
                rect
            };
            self.view.fit(area, size);
        }
        // Textures, made on first use.
        let textures = self.textures.get_or_insert_with(|| {
            make_textures(&ctx, doc, self.overlay_colour, self.outline, self.pending_tiles.take())
        });
        if std::mem::take(&mut self.overlay_dirty) {
            let (mask, colour) = (&doc.mask, self.overlay_colour);
            let (w, h) = (mask.width(), mask.height());
            let outline = self.outline;
            textures.overlay =
                Tiles::new(&ctx, "mask", w, h, OVERLAY_TILE, &|i| canvas::mark(mask, colour, outline, i));
        }
        if doc.result.is_some() && textures.after.is_none() {
            textures.after = Some(after_tiles(&ctx, doc));
        }
        // Zoom about the cursor, pan.
        let hover = response.hover_pos();
        if let Some(p) = hover {
            let (scroll, zoom) = ctx.input(|i| (i.smooth_scroll_delta, i.zoom_delta()));
            let factor = zoom * (scroll.y * 0.002).exp();
            if (factor - 1.0).abs() > 1e-4 {
                self.view.zoom_about(p, factor);
            }
        }
        let space = ctx.input(|i| i.key_down(Key::Space));
        let panning = response.dragged_by(egui::PointerButton::Middle) || (space && response.dragged());
        if panning {
            self.view.origin += response.drag_delta();
        }
        self.cursor = hover.and_then(|p| {
            let q = self.view.image_from_screen(p);
            #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
            (q.x >= 0.0 && q.y >= 0.0 && q.x < size.x && q.y < size.y).then_some((q.x as usize, q.y as usize))
        });
        let mut commands = Vec::new();
        let mut shapes: Vec<egui::Shape> = Vec::new();
        let pixel_at = |p: Pos2| -> Option<(usize, usize)> {
            #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
            (p.x >= 0.0 && p.y >= 0.0 && p.x < size.x && p.y < size.y).then_some((p.x as usize, p.y as usize))
        };
        if self.tool == Tool::Polygon && !panning {
            if response.clicked()
                && let Some(p) = response.interact_pointer_pos()
            {
                let close =
                    self.polygon.len() >= 3 && (self.view.screen_from_image(self.polygon[0]) - p).length() <= 8.0;
                if close {
                    commands.push(Command::MarkPolygon(std::mem::take(&mut self.polygon)));
                } else {
                    self.polygon.push(self.view.image_from_screen(p));
                }
            }
            let (enter, escape) = ui.ctx().input(|i| (i.key_pressed(Key::Enter), i.key_pressed(Key::Escape)));
            if enter && self.polygon.len() >= 3 {
                commands.push(Command::MarkPolygon(std::mem::take(&mut self.polygon)));
            }
            if escape {
                self.polygon.clear();
            }
            if !self.polygon.is_empty() {
                let mut pts: Vec<Pos2> = self.polygon.iter().map(|&q| self.view.screen_from_image(q)).collect();
                if let Some(h) = hover {
                    pts.push(h);
                }
                painter.add(egui::Shape::line(pts, Stroke::new(1.5, Color32::YELLOW)));
                painter.circle_stroke(
                    self.view.screen_from_image(self.polygon[0]),
                    8.0,
                    Stroke::new(1.0, Color32::YELLOW),
                );
            }
        } else if self.tool == Tool::Source && !panning {
            let placements: &[crate::fill::guided::Placement] = match &self.last_fill {
                Some(r) if r.method == crate::fill::FillMethod::Guided => &r.placements,
                _ => &[],
            };
            let mut tool = SourceTool {
                view: &self.view,
                placements,
                anchor: &mut self.source_anchor,
                chosen: &mut self.chosen_sources,
                status: &mut self.status,
                whole_next: &mut self.whole_next,
            };
            tool.ui(ui, &response, &mut shapes, &doc.mask, &mut commands);
        } else if matches!(self.tool, Tool::Box | Tool::Pick) && !panning {
            if self.tool == Tool::Pick
                && response.clicked()
                && let Some((x, y)) =
                    response.interact_pointer_pos().and_then(|p| pixel_at(self.view.image_from_screen(p)))
            {
                commands.push(Command::Pick(x, y));
            }
            if self.tool == Tool::Box {
                if response.drag_started_by(egui::PointerButton::Primary) {
                    // From where the button went down, not where the drag was recognised.
                    let origin = ui.ctx().input(|i| i.pointer.press_origin()).or(response.interact_pointer_pos());
                    self.box_anchor = origin.map(|p| self.view.image_from_screen(p));
                }
                if let (Some(a), Some(p)) = (self.box_anchor, response.interact_pointer_pos()) {
                    let b = self.view.image_from_screen(p);
                    let r = Rect::from_two_pos(a, b);
                    painter.rect_stroke(
                        Rect::from_min_max(self.view.screen_from_image(r.min), self.view.screen_from_image(r.max)),
                        0.0,
                        Stroke::new(1.5, Color32::YELLOW),
                        egui::StrokeKind::Middle,
                    );
                    if response.drag_stopped() {
                        #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
                        let c = |v: f32, hi: f32| v.clamp(0.0, hi) as usize;
                        let (x0, y0) = (c(r.min.x.floor(), size.x), c(r.min.y.floor(), size.y));
                        let (x1, y1) = (c(r.max.x.ceil(), size.x), c(r.max.y.ceil(), size.y));
                        commands.push(Command::MarkBox(x0, y0, x1, y1));
                        self.box_anchor = None;
                    }
                }
            }
        } else if !panning && response.dragged_by(egui::PointerButton::Primary) {
            if let Some(p) = response.interact_pointer_pos() {
                let here = self.view.image_from_screen(p);
                let origin =
                    ui.ctx().input(|i| i.pointer.press_origin()).map_or(here, |p| self.view.image_from_screen(p));
                let stroke = self.stroke.get_or_insert_with(|| StrokeState { edit: Edit::default(), last: origin });
                let value = self.tool == Tool::Brush;
                let step = (self.radius * 0.5).max(0.5);
                let n = ((here - stroke.last).length() / step).ceil().max(1.0);
                #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
                for k in 0..=n as usize {
                    #[allow(clippy::cast_precision_loss)]
                    let c = stroke.last + (here - stroke.last) * (k as f32 / n);
                    let edit = &mut stroke.edit;
                    let changed = canvas::stamp(&mut doc.mask, c, self.radius, value, &mut |m, x, y| {
                        edit.save(m, history::tile_of(m, x, y));
                    });
                    if let Some(rect) = changed {
                        let (x0, y0, x1, y1) = grown(rect, &doc.mask);
                        let (mask, colour, outline) = (&doc.mask, self.overlay_colour, self.outline);
                        textures.overlay.update_rect(x0, y0, x1, y1, &|i| canvas::mark(mask, colour, outline, i));
                    }
                }
                stroke.last = here;
            }
        } else if let Some(stroke) = self.stroke.take() {
            self.history.push(stroke.edit);
            doc.refresh();
            if self.live {
                commands.push(Command::Fill);
            }
        }
        // Draw.
        let show_before = match self.compare {
            Compare::Before => true,
            Compare::Blink => self.blink_before,
            Compare::After | Compare::Split | Compare::Difference | Compare::SideBySide | Compare::Distance => false,
        };
        if self.compare == Compare::Difference {
            let diff = textures.difference.get_or_insert_with(|| Difference::new(&ctx, doc, Heat::Change));
            // A few tiles per frame, so a very large image never freezes the window.
            if diff.build_some(doc) {
                ctx.request_repaint();
            }
        }
        if self.compare == Compare::Distance && doc.depth.is_some() {
            let map = textures.distance.get_or_insert_with(|| Difference::new(&ctx, doc, Heat::Distance));
            if map.build_some(doc) {
                ctx.request_repaint();
            }
        }
        let after = textures.after.as_ref().unwrap_or(&textures.before);
        let heat_map = match self.compare {
            Compare::Difference => textures.difference.as_ref(),
            Compare::Distance => textures.distance.as_ref(),
            _ => None,
        };
        if let Some(Difference { tiles, max, kind, .. }) = heat_map {
            if *kind == Heat::Distance {
                after.paint(&painter, &self.view, rect, Color32::WHITE);
            }
            tiles.paint(&painter, &self.view, rect, Color32::WHITE);
            // Legend: black is no change (or a known pixel), white the largest change in the
            // image's units (or the largest distance in pixels).
            let legend = Rect::from_min_size(rect.left_bottom() + Vec2::new(12.0, -34.0), Vec2::new(160.0, 10.0));
            for k in 0..32 {
                #[allow(clippy::cast_precision_loss, clippy::cast_possible_truncation, clippy::cast_sign_loss)]
                let c = heat(k as f32 / 31.0);
                #[allow(clippy::cast_precision_loss)]
                let x = legend.left() + legend.width() * k as f32 / 32.0;
                painter.rect_filled(
                    Rect::from_min_size(
                        Pos2::new(x, legend.top()),
                        Vec2::new(legend.width() / 32.0 + 0.5, legend.height()),
                    ),
                    0.0,
                    c,
                );
            }
            painter.text(
                legend.left_bottom() + Vec2::new(0.0, 2.0),
                egui::Align2::LEFT_TOP,
                "0",
                egui::FontId::proportional(12.0),
                Color32::WHITE,
            );
            painter.text(
                legend.right_bottom() + Vec2::new(0.0, 2.0),
                egui::Align2::RIGHT_TOP,
                match kind {
                    Heat::Distance => format!("{max:.1} px from known pixels"),
                    Heat::Change if *max >= 1.0 => format!("{max:.1}"),
                    Heat::Change => format!("{max:.3e}"),
                },
                egui::FontId::proportional(12.0),
                Color32::WHITE,
            );
        } else if self.compare == Compare::SideBySide {
            let half = rect.width() / 2.0;
            let (left, right) = (
                Rect::from_min_size(rect.min, Vec2::new(half, rect.height())),
                Rect::from_min_max(Pos2::new(rect.left() + half, rect.top()), rect.max),
            );
            let right_view = View { origin: self.view.origin + Vec2::new(half, 0.0), ..self.view };
            textures.before.paint(&painter, &self.view, left, Color32::WHITE);
            after.paint(&painter, &right_view, right, Color32::WHITE);
            painter.line_segment([left.right_top(), left.right_bottom()], Stroke::new(2.0, Color32::from_gray(20)));
        } else if self.compare == Compare::Split {
            let x = rect.left() + rect.width() * self.split;
            let (left, right) = (
                Rect::from_min_max(rect.min, Pos2::new(x, rect.bottom())),
                Rect::from_min_max(Pos2::new(x, rect.top()), rect.max),
            );
            textures.before.paint(&painter, &self.view, left, Color32::WHITE);
            after.paint(&painter, &self.view, right, Color32::WHITE);
            let handle = ui.interact(
                Rect::from_center_size(Pos2::new(x, rect.center().y), Vec2::new(12.0, rect.height())),
                ui.scope_id().with("divider"),
                Sense::drag(),
            );
            if handle.dragged() {
                self.split = ((x + handle.drag_delta().x - rect.left()) / rect.width()).clamp(0.02, 0.98);
            }
            painter.line_segment(
                [Pos2::new(x, rect.top()), Pos2::new(x, rect.bottom())],
                Stroke::new(2.0, Color32::YELLOW),
            );
        } else if show_before {
            textures.before.paint(&painter, &self.view, rect, Color32::WHITE);
        } else {
            after.paint(&painter, &self.view, rect, Color32::WHITE);
        }
        if self.overlay_visible {
            if self.compare == Compare::SideBySide {
                // The mask on both images.
                let half = rect.width() / 2.0;
                let left = Rect::from_min_size(rect.min, Vec2::new(half, rect.height()));
                let right = Rect::from_min_max(Pos2::new(rect.left() + half, rect.top()), rect.max);
                let right_view = View { origin: self.view.origin + Vec2::new(half, 0.0), ..self.view };
                textures.overlay.paint(&painter, &self.view, left, Color32::WHITE);
                textures.overlay.paint(&painter, &right_view, right, Color32::WHITE);
            } else {
                textures.overlay.paint(&painter, &self.view, rect, Color32::WHITE);
            }
        }
        if let Some(p) = &self.proposal {
            let tiles = textures.proposal.get_or_insert_with(|| {
                let cyan = Color32::from_rgba_unmultiplied(0, 230, 255, 170);
                Tiles::new(&ctx, "proposal", p.width(), p.height(), OVERLAY_TILE, &|i| canvas::overlay(p, cyan, i))
            });
            tiles.paint(&painter, &self.view, rect, Color32::WHITE);
        }
        // Pixel grid from 8× up.
        if self.view.zoom >= 8.0 {
            let img = Rect::from_min_max(
                self.view.screen_from_image(Pos2::ZERO),
                self.view.screen_from_image(size.to_pos2()),
            )
            .intersect(rect);
            let a = self.view.image_from_screen(img.min);
            let b = self.view.image_from_screen(img.max);
            let grid = Stroke::new(1.0, Color32::from_black_alpha(60));
            for x in (a.x.floor() as i64)..=(b.x.ceil() as i64) {
                #[allow(clippy::cast_precision_loss)]
                let sx = self.view.screen_from_image(Pos2::new(x as f32, 0.0)).x;
                painter.line_segment([Pos2::new(sx, img.top()), Pos2::new(sx, img.bottom())], grid);
            }
            for y in (a.y.floor() as i64)..=(b.y.ceil() as i64) {
                #[allow(clippy::cast_precision_loss)]
                let sy = self.view.screen_from_image(Pos2::new(0.0, y as f32)).y;
                painter.line_segment([Pos2::new(img.left(), sy), Pos2::new(img.right(), sy)], grid);
            }
        }
        // The source tool's marks, over the picture.
        painter.extend(shapes);
        // Brush outline.
        if let Some(p) = hover.filter(|_| matches!(self.tool, Tool::Brush | Tool::Eraser)) {
            painter.circle_stroke(p, self.radius * self.view.zoom, Stroke::new(1.0, Color32::WHITE));
            painter.circle_stroke(p, self.radius * self.view.zoom + 1.0, Stroke::new(1.0, Color32::BLACK));
        }
        commands
    }

    /// Receives what the worker reports.
    fn poll(&mut self, ctx: &egui::Context) {
        self.receive_depth();
        let Some(worker) = &self.worker else { return };
        let mut finished = false;
        let mut filled_now = false;
        let mut report_inputs = None;
        while let Ok(msg) = worker.receiver.try_recv() {
            match msg {
                Message::Progress { cycle, max_cycles, residual } => {
                    self.progress = Some((cycle, max_cycles, residual))
                }
                Message::Loaded { path, raster, mask, nodata, missing, stretch, tiles } => {
                    self.pending_tiles = Some(tiles);
                    self.status = format!("opened {}", path.display());
                    self.settings.remember(&path);
                    if self.save_field.is_empty() {
                        self.save_field = sibling(&path, "-repaired").display().to_string();
                    }
                    if self.report_field.is_empty() {
                        self.report_field = sibling(&path, "-repaired").with_extension("json").display().to_string();
                    }
                    if self.mask_field.is_empty() {
                        self.mask_field = sibling(&path, "-mask").with_extension("png").display().to_string();
                    }
                    if missing > 0 {
                        self.status.push_str(&format!("; {missing} no-data or NaN pixels are marked"));
                    }
                    let mut doc = Document::new(path, *raster, mask, stretch);
                    doc.nodata = nodata;
                    doc.nodata_pixels = missing;
                    self.doc = Some(doc);
                    self.textures = None;
                    self.history = History::default();
                    self.view.fit_pending = true;
                    self.last_fill = None;
                    self.proposal = None;
                    finished = true;
                }
                Message::Filled { planes, report, mask } => {
                    filled_now = true;
                    if let Some(d) = &mut self.doc {
                        self.status = format!("filled {} pixels. {CAUTION}", mask.count());
                        let refused = report.placements.iter().filter(|p| p.chosen && p.offset.is_none()).count();
                        let unplaced = report.placements.iter().filter(|p| p.offset.is_none()).count();
                        if refused > 0 {
                            self.status.push_str(&format!(
                                " {refused} chosen source{} left the image or covered marked pixels; {} filled smoothly instead.",
                                if refused == 1 { "" } else { "s" },
                                if refused == 1 { "its hole was" } else { "their holes were" }
                            ));
                        } else if unplaced > 0 {
                            self.status.push_str(&format!(
                                " {unplaced} hole{} found no clean source nearby and {} filled smoothly.",
                                if unplaced == 1 { "" } else { "s" },
                                if unplaced == 1 { "was" } else { "were" }
                            ));
                        }
                        let mut planes = planes;
                        if let Some(v) = d.nodata {
                            raster::nodata::keep_off_nodata(&mut planes, d.original.sample_format, &mask, v);
                        }
                        // Re-upload only the tiles where this fill or the one before changed pixels.
                        let bbox = changed_box(&mask, d.result_mask.as_deref());
                        d.result = Some(planes);
                        d.result_mask = Some(std::sync::Arc::new(mask));
                        self.unsaved = true;
                        if let Some(t) = &mut self.textures {
                            t.difference = None;
                            match (&mut t.after, bbox, &d.result) {
                                (Some(after), Some((x0, y0, x1, y1)), Some(planes)) => {
                                    let (layout, st) = (d.original.layout, d.stretch);
                                    after.update_rect(x0, y0, x1, y1, &|i| canvas::colour(planes, layout, st, i));
                                }
                                _ => t.after = None,
                            }
                        }
                    }
                    self.last_fill = Some(report);
                    self.last_fill_local = false;
                    if self.compare != Compare::SideBySide && self.compare != Compare::Split {
                        self.compare = Compare::After;
                    }
                    // Show the repair itself; M brings the mask back. An outline stays.
                    self.overlay_visible = self.outline;
                    finished = true;
                }
                Message::MaskSaved(result) => {
                    self.status = match result {
                        Ok(path) => format!("saved the mask to {}", path.display()),
                        Err(e) => e,
                    };
                    finished = true;
                }
                Message::ReportInputs { path, image, output, holes } => {
                    match image {
                        Ok(image) => report_inputs = Some((path, image, output, holes)),
                        Err(e) => self.status = e,
                    }
                    finished = true;
                }
                Message::Saved { path, notes } => {
                    self.unsaved = false;
                    self.status = format!("saved {}", path.display());
                    if !notes.is_empty() {
                        self.status.push_str(&format!(" ({})", notes.join("; ")));
                    }
                    finished = true;
                }
                Message::Detected { mask, method } => {
                    self.status = format!(
                        "{method:?}: found {} pixels; review them (cyan), then Add, Replace or Discard",
                        mask.count()
                    );
                    self.proposal = Some(mask);
                    if let Some(t) = &mut self.textures {
                        t.proposal = None;
                    }
                    finished = true;
                }
                Message::FilledNear { planes, report, mask, changed } => {
                    if let Some(d) = &mut self.doc {
                        self.status = match &report {
                            Some(r) => format!(
                                "{} {} pixels in {:.2} s. {CAUTION}",
                                if self.near_first { "filled" } else { "re-filled the holes near the edit:" },
                                r.unknowns,
                                r.setup_seconds + r.solve_seconds
                            ),
                            None => "no hole left near the edit; the pixels taken out of the mask are original again"
                                .to_owned(),
                        };
                        d.result = Some(planes);
                        d.result_mask = Some(std::sync::Arc::new(mask));
                        filled_now = true;
                        self.unsaved = true;
                        if let (Some(t), Some(planes)) = (&mut self.textures, &d.result) {
                            t.difference = None;
                            // The first result borrows the original's tiles and replaces only
                            // those where pixels changed.
                            let after = t.after.get_or_insert_with(|| t.before.share("after"));
                            let (layout, st) = (d.original.layout, d.stretch);
                            let (x0, y0, x1, y1) = changed;
                            after.update_rect(x0, y0, x1, y1, &|i| canvas::colour(planes, layout, st, i));
                        }
                    }
                    if let Some(r) = report {
                        self.last_fill = Some(r);
                        self.last_fill_local = true;
                    }
                    if self.compare != Compare::SideBySide && self.compare != Compare::Split {
                        self.compare = Compare::After;
                    }
                    self.overlay_visible = self.outline;
                    finished = true;
                }
                Message::FillFailed { planes, error } => {
                    if let Some(d) = &mut self.doc
                        && d.result_mask.is_some()
                    {
                        d.result = Some(planes);
                    }
                    self.status = error;
                    finished = true;
                }
                Message::Failed(e) => {
                    self.status = e;
                    finished = true;
                }
            }
        }
        if let Some((path, image, output, holes)) = report_inputs {
            self.write_report(&path, image, output, &holes);
        }
        if filled_now {
            self.measure_depth(ctx);
        }
        if finished {
            self.worker = None;
            self.progress = None;
            if std::mem::take(&mut self.refill_after) && self.doc.is_some() {
                self.live_refill = true;
            }
            if !self.last_fill_local
                && let Some(path) = self.report_after_fill.take()
            {
                self.run_command(ctx, Command::SaveReport(path));
            }
            ctx.request_repaint();
        }
    }

    /// Writes the report once its inputs are hashed and its holes counted.
    fn write_report(
        &mut self,
        path: &std::path::Path,
        image: crate::report::FileRecord,
        output: Option<crate::report::FileRecord>,
        holes: &crate::mask::HoleStats,
    ) {
        let (Some(d), Some(fill)) = (&self.doc, &self.last_fill) else { return };
        let inputs = crate::report::Inputs { image, mask: None, mask_from_alpha: false };
        let filled = d.result_mask.as_deref().unwrap_or(&d.mask);
        let mut report = crate::report::Report::new(inputs, &d.original, filled, holes, fill, self.tolerance);
        report.scientific = self.scientific;
        report.output = output;
        report.nodata = d.nodata.map(|v| v.to_string());
        report.nodata_pixels = d.nodata_pixels;
        if let Some(depth) = &d.depth {
            report.deep_holes = depth.deep.iter().take(crate::report::HOLE_LIST_MAX).copied().collect();
            report.deep_hole_warning = crate::report::deep_hole_warning(&depth.deep, fill.method, self.scientific);
        }
        report.skipped_pixels = d.skipped.iter().map(|h| h.pixels).sum();
        report.skipped_holes = d.skipped.iter().take(crate::report::HOLE_LIST_MAX).copied().collect();
        let json = report.to_json();
        self.status = match raster::write_atomic(path, |w| {
            use std::io::Write;
            w.write_all(json.as_bytes()).map_err(|e| e.to_string())
        }) {
            Ok(()) => format!("saved the report to {}", path.display()),
            Err(e) => e.to_string(),
        };
    }

    /// Applies one command.
    pub fn run_command(&mut self, ctx: &egui::Context, command: Command) {
        // Saving over an existing file asks first.
        let command = match command {
            Command::SaveResult(ref p) | Command::SaveMask(ref p) | Command::SaveReport(ref p)
                if p.exists() && self.pending_overwrite.as_ref() != Some(&command) =>
            {
                self.pending_overwrite = Some(command);
                return;
            }
            Command::ConfirmOverwrite => match self.pending_overwrite.take() {
                Some(c) => {
                    self.pending_overwrite = Some(c.clone());
                    self.run_command(ctx, c);
                    self.pending_overwrite = None;
                    return;
                }
                None => return,
            },
            other => other,
        };
        let repaint = {
            let ctx = ctx.clone();
            move || ctx.request_repaint()
        };
        match command {
            Command::Open(path) => {
                if self.worker.is_some() {
                    self.status = "wait for the current work to finish".to_owned();
                    return;
                }
                self.status = format!("opening {}…", path.display());
                self.open_field = path.display().to_string();
                // A mask given with the file is read by the loader too, off the UI thread.
                self.worker = Some(Worker::load(path, self.mask_after_load.take(), repaint));
            }
            Command::Fill => {
                let Some(d) = &mut self.doc else { return };
                if self.worker.is_some() {
                    self.refill_after = true;
                    return;
                }
                if d.mask.is_empty() {
                    return;
                }
                // Start from the previous result where there is one (a warm start after an edit).
                // Its planes move to the worker and come back, so nothing image-sized is copied;
                // the textures keep showing it meanwhile.
                self.keep_work();
                let params = self.fill_params();
                let Some(d) = &mut self.doc else { return };
                // Only the harmonic fill keeps holes independent of each other within a one-pixel
                // rim (the biharmonic one reaches two pixels, the guided one searches the image).
                let whole = std::mem::take(&mut self.whole_next) || params.method != crate::fill::FillMethod::Harmonic;
                // After an edit, re-fill only the holes near it: holes never touch, so the others
                // keep their values. (With a hole size limit, the limit's bookkeeping needs the
                // whole mask, so that case takes the whole fill.)
                if !whole && self.max_hole.is_none() {
                    // The first fill starts from the original (nothing filled yet).
                    let first = d.result.is_none();
                    let mut p = d.result.take().unwrap_or_else(|| copy_planes(&d.original.planes));
                    let empty;
                    let previous = match &d.result_mask {
                        Some(m) if !first => m,
                        _ => {
                            empty = Mask::new(d.mask.width(), d.mask.height());
                            &empty
                        }
                    };
                    let Some(region) = differing_box(previous, &d.mask) else {
                        d.result = (!first).then_some(p);
                        self.status = "the mask has not changed since the last fill".to_owned();
                        return;
                    };
                    restore_unmasked_in(&mut p, &d.original.planes, previous, &d.mask, region);
                    let nodata = d.nodata.map(|v| (v, d.original.sample_format));
                    self.status = if first { "filling…" } else { "re-filling the holes near the edit…" }.to_owned();
                    self.near_first = first;
                    self.worker = Some(Worker::fill_near(p, d.mask.clone(), region, params, nodata, repaint));
                    return;
                }
                let (planes, start) = match d.result.take() {
                    Some(mut p) => {
                        if let Some(previous) = &d.result_mask {
                            restore_unmasked(&mut p, &d.original.planes, previous, &d.mask);
                        }
                        (p, Start::Warm)
                    }
                    None => (d.original.planes.clone(), Start::FullMultigrid),
                };
                let mut fill_mask = d.mask.clone();
                d.skipped = self.max_hole.map(|n| fill_mask.drop_holes_larger_than(n)).unwrap_or_default();
                self.status = if d.skipped.is_empty() {
                    "filling…".to_owned()
                } else {
                    format!("filling, leaving {} hole(s) over the size limit…", d.skipped.len())
                };
                if fill_mask.is_empty() {
                    self.status = "every hole is over the size limit; nothing to fill".to_owned();
                    d.result = (start == Start::Warm).then_some(planes);
                    return;
                }
                self.worker = Some(Worker::fill(planes, fill_mask, params, start, repaint));
            }
            Command::Cancel => {
                if let Some(w) = &self.worker {
                    w.cancel();
                }
            }
            Command::SaveResult(path) => {
                let Some(d) = &self.doc else { return };
                if self.worker.is_some() {
                    return;
                }
                if path.as_os_str().is_empty() || crate::cli::same_file(&path, &d.path) {
                    self.status = "choose a file name for the result other than the input".to_owned();
                    return;
                }
                self.worker = Some(Worker::save(d.result_raster(), path, repaint));
            }
            Command::SaveMask(path) => {
                let Some(d) = &self.doc else { return };
                if self.worker.is_some() {
                    return;
                }
                self.worker = Some(Worker::save_mask(d.mask.clone(), path, repaint));
            }
            Command::SaveReport(path) => {
                if self.last_fill_local {
                    // The report describes the whole fill: finish it over every hole first (a
                    // warm start from the current result, so it takes a cycle or two).
                    if self.worker.is_none() {
                        self.report_after_fill = Some(path);
                        self.whole_next = true;
                        self.run_command(ctx, Command::Fill);
                    }
                    return;
                }
                let (Some(d), Some(_)) = (&self.doc, &self.last_fill) else { return };
                if self.worker.is_some() {
                    return;
                }
                let saved = PathBuf::from(self.save_field.trim());
                let output = (!self.unsaved && !saved.as_os_str().is_empty()).then_some(saved);
                // Shared with the worker, not copied on the UI thread.
                let filled = d.result_mask.clone().unwrap_or_else(|| std::sync::Arc::new(d.mask.clone()));
                self.worker = Some(Worker::report_inputs(path, d.path.clone(), output, filled, repaint));
            }
            Command::ConfirmOverwrite => {}
            Command::Undo | Command::Redo => {
                let Some(d) = &mut self.doc else { return };
                let touched = if command == Command::Undo {
                    self.history.undo(&mut d.mask)
                } else {
                    self.history.redo(&mut d.mask)
                };
                if let (Some(tiles), Some(t)) = (touched, &mut self.textures) {
                    for tile in tiles {
                        let (x0, y0, x1, y1) = grown(history::rect_of(&d.mask, tile), &d.mask);
                        let (mask, colour, outline) = (&d.mask, self.overlay_colour, self.outline);
                        t.overlay.update_rect(x0, y0, x1, y1, &|i| canvas::mark(mask, colour, outline, i));
                    }
                }
                d.refresh();
                self.live_refill = self.live;
            }
            Command::ClearMask | Command::InvertMask => {
                let Some(d) = &mut self.doc else { return };
                let mut edit = Edit::default();
                edit.save_all(&d.mask);
                for b in d.mask.bits_mut() {
                    *b = command == Command::InvertMask && !*b;
                }
                self.history.push(edit);
                d.refresh();
                self.overlay_dirty = true;
            }
            Command::Find(method) => {
                let Some(d) = &self.doc else { return };
                if self.worker.is_some() {
                    return;
                }
                self.status = format!("looking for damage ({method:?})…");
                self.worker = Some(Worker::detect(d.original.clone(), method, repaint));
            }
            Command::AcceptProposal { replace } => {
                let (Some(d), Some(p)) = (&mut self.doc, self.proposal.take()) else { return };
                let mut edit = Edit::default();
                edit.save_all(&d.mask);
                for (m, &x) in d.mask.bits_mut().iter_mut().zip(p.bits()) {
                    *m = x || (*m && !replace);
                }
                self.history.push(edit);
                d.refresh();
                self.overlay_visible = true;
                self.overlay_dirty = true;
            }
            Command::DiscardProposal => {
                self.proposal = None;
                if let Some(t) = &mut self.textures {
                    t.proposal = None;
                }
            }
            Command::MarkBox(x0, y0, x1, y1) => {
                let Some(d) = &mut self.doc else { return };
                let value = self.tool != Tool::Eraser;
                let mut edit = Edit::default();
                for y in y0..y1 {
                    for x in x0..x1 {
                        edit.save(&d.mask, history::tile_of(&d.mask, x, y));
                    }
                }
                for y in y0..y1 {
                    for x in x0..x1 {
                        d.mask.set(x, y, value);
                    }
                }
                self.finish_mask_edit(edit);
            }
            Command::MarkPolygon(points) => {
                let Some(d) = &mut self.doc else { return };
                let inside = polygon_mask(d.mask.width(), d.mask.height(), &points);
                let mut edit = Edit::default();
                for (i, &m) in inside.bits().iter().enumerate() {
                    if m {
                        let w = d.mask.width();
                        edit.save(&d.mask, history::tile_of(&d.mask, i % w, i / w));
                    }
                }
                for (m, &x) in d.mask.bits_mut().iter_mut().zip(inside.bits()) {
                    *m |= x;
                }
                self.finish_mask_edit(edit);
            }
            Command::Pick(x, y) => {
                let Some(d) = &mut self.doc else { return };
                let i = y * d.original.width + x;
                let values: Vec<f64> = d.original.planes.iter().map(|p| f64::from(p[i])).collect();
                let seed = (!self.pick_all).then_some((x, y));
                let found = crate::detect::by_value(
                    &d.original.planes,
                    d.original.width,
                    d.original.height,
                    &values,
                    self.pick_tolerance,
                    seed,
                );
                let mut edit = Edit::default();
                edit.save_all(&d.mask);
                for (m, &f) in d.mask.bits_mut().iter_mut().zip(found.bits()) {
                    *m |= f;
                }
                self.status = format!("picked {} pixels near {values:?}", found.count());
                self.finish_mask_edit(edit);
            }
            Command::Grow(n) | Command::Shrink(n) => {
                let Some(d) = &mut self.doc else { return };
                let mut edit = Edit::default();
                edit.save_all(&d.mask);
                let shrink = matches!(command, Command::Shrink(_));
                if shrink {
                    for b in d.mask.bits_mut() {
                        *b = !*b;
                    }
                }
                crate::detect::grow(&mut d.mask, n);
                if shrink {
                    for b in d.mask.bits_mut() {
                        *b = !*b;
                    }
                }
                self.finish_mask_edit(edit);
            }
            Command::Fit => self.view.fit_pending = true,
            Command::Zoom(factor) => {
                let centre = self.canvas_rect.center();
                self.view.zoom_about(centre, factor);
            }
            Command::LoadMask(path) => {
                let Some(d) = &mut self.doc else { return };
                match raster::load_mask(&path, d.original.width, d.original.height) {
                    Ok(mask) => {
                        let mut edit = Edit::default();
                        edit.save_all(&d.mask);
                        d.mask = mask;
                        self.status = format!("loaded the mask {}", path.display());
                        self.finish_mask_edit(edit);
                    }
                    Err(e) => self.status = e.to_string(),
                }
            }
            Command::OneToOne => {
                let centre = self.view.screen_from_image(Pos2::ZERO);
                self.view.zoom_about(centre, 1.0 / self.view.zoom);
            }
        }
    }
}

impl App {
    /// Records a whole-mask edit and refreshes what depends on the mask.
    fn finish_mask_edit(&mut self, edit: Edit) {
        self.history.push(edit);
        self.live_refill = self.live;
        if let Some(d) = &mut self.doc {
            d.refresh();
        }
        self.overlay_visible = true;
        self.overlay_dirty = true;
    }
}

/// The pixels whose centres lie inside `points` (even-odd rule), within the image.
fn polygon_mask(w: usize, h: usize, points: &[Pos2]) -> Mask {
    let mut mask = Mask::new(w, h);
    if points.len() < 3 {
        return mask;
    }
    let (lo, hi) = points.iter().fold((f32::MAX, f32::MIN), |(l, h), p| (l.min(p.y), h.max(p.y)));
    #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss, clippy::cast_precision_loss)]
    let (y0, y1) = ((lo.floor().max(0.0) as usize).min(h), (hi.ceil().max(0.0) as usize).min(h));
    for y in y0..y1 {
        #[allow(clippy::cast_precision_loss)]
        let cy = y as f32 + 0.5;
        // Crossings of the scanline with the edges, sorted; pixels between pairs are inside.
        let mut xs: Vec<f32> = Vec::new();
        for k in 0..points.len() {
            let (a, b) = (points[k], points[(k + 1) % points.len()]);
            if (a.y <= cy) != (b.y <= cy) {
                xs.push(a.x + (cy - a.y) / (b.y - a.y) * (b.x - a.x));
            }
        }
        xs.sort_by(f32::total_cmp);
        for pair in xs.chunks_exact(2) {
            #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss, clippy::cast_precision_loss)]
            let (x0, x1) =
                (((pair[0] - 0.5).ceil().max(0.0) as usize).min(w), ((pair[1] - 0.5).ceil().max(0.0) as usize).min(w));
            for x in x0..x1 {
                mask.set(x, y, true);
            }
        }
    }
    mask
}

/// A dark-to-bright heat colour for `t` in 0–1.
#[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss)]
fn heat(t: f32) -> Color32 {
    let t = t.clamp(0.0, 1.0);
    let r = (t * 3.0).min(1.0);
    let g = (t * 3.0 - 1.0).clamp(0.0, 1.0);
    let b = (t * 3.0 - 2.0).clamp(0.0, 1.0);
    Color32::from_rgb((r * 255.0) as u8, (g * 255.0) as u8, (b * 255.0) as u8)
}

/// The heat map of |after − before| (largest over the channels), built a few tiles per frame.
/// Only filled pixels can differ, so tiles without one stay black and cost nothing.
struct Difference {
    kind: Heat,
    tiles: Tiles,
    /// The largest difference, in the image's units (white on the map).
    max: f32,
    /// Tiles holding filled pixels that are not built yet.
    todo: Vec<usize>,
}

impl Difference {
    /// Tiles built per frame (each up to `IMAGE_TILE`² pixels, made in parallel).
    const PER_FRAME: usize = 4;

    fn new(ctx: &egui::Context, d: &Document, kind: Heat) -> Self {
        use rayon::prelude::*;
        let (w, h) = (d.original.width, d.original.height);
        let tiles = Tiles::uniform(ctx, kind.name(), w, h, IMAGE_TILE, kind.background());
        let (Some(after), Some(filled)) = (&d.result, &d.result_mask) else {
            return Self { kind, tiles, max: 0.0, todo: Vec::new() };
        };
        let bits = filled.bits();
        let max = match kind {
            Heat::Change => (0..w * h)
                .into_par_iter()
                .with_min_len(1 << 16)
                .filter(|&i| bits[i])
                .map(|i| pixel_difference(after, &d.original.planes, i))
                .reduce(|| 0.0, f32::max),
            Heat::Distance => match &d.depth {
                Some(depth) => depth.max,
                None => return Self { kind, tiles, max: 0.0, todo: Vec::new() },
            },
        };
        let count = w.div_ceil(IMAGE_TILE) * h.div_ceil(IMAGE_TILE);
        let mut todo: Vec<usize> = (0..count)
            .into_par_iter()
            .filter(|&t| {
                let (x0, y0, x1, y1) = tiles.tile_rect(t);
                (y0..y1).any(|y| bits[y * w + x0..y * w + x1].contains(&true))
            })
            .collect();
        todo.reverse(); // built from the top left
        Self { kind, tiles, max, todo }
    }

    /// Builds the next few tiles; true while some are left.
    fn build_some(&mut self, d: &Document) -> bool {
        use rayon::prelude::*;
        let (Some(after), Some(filled)) = (&d.result, &d.result_mask) else { return false };
        let (w, h) = (d.original.width, d.original.height);
        let scale = if self.max > 0.0 { 1.0 / self.max } else { 0.0 };
        let next: Vec<usize> = (0..Self::PER_FRAME).filter_map(|_| self.todo.pop()).collect();
        let bits = filled.bits();
        let distance = d.depth.as_ref().map(|depth| &depth.distance);
        let kind = self.kind;
        let colour = |i: usize| {
            if !bits[i] {
                return kind.background();
            }
            let v = match (kind, distance) {
                (Heat::Change, _) => pixel_difference(after, &d.original.planes, i),
                (Heat::Distance, Some(dist)) => dist[i],
                (Heat::Distance, None) => 0.0,
            };
            heat(v * scale)
        };
        let images: Vec<egui::ColorImage> =
            next.par_iter().map(|&t| canvas::tile_image(w, h, IMAGE_TILE, t, &colour)).collect();
        for (t, image) in next.into_iter().zip(images) {
            self.tiles.set_tile(t, image);
        }
        !self.todo.is_empty()
    }
}

/// The source tool's view of the app: shows where each hole's texture came from and lets the
/// user drag a hole to another source.
struct SourceTool<'a> {
    view: &'a View,
    placements: &'a [crate::fill::guided::Placement],
    anchor: &'a mut Option<(usize, usize)>,
    chosen: &'a mut Vec<crate::fill::guided::ChosenSource>,
    status: &'a mut String,
    whole_next: &'a mut bool,
}

impl SourceTool<'_> {
    /// Draws the sources and handles a drag.
    fn ui(
        &mut self,
        ui: &egui::Ui,
        response: &egui::Response,
        shapes: &mut Vec<egui::Shape>,
        mask: &Mask,
        commands: &mut Vec<Command>,
    ) {
        let placements = self.placements;
        let to_screen = |x: f32, y: f32| self.view.screen_from_image(Pos2::new(x, y));
        #[allow(clippy::cast_precision_loss)]
        let hole_rect = |h: &crate::mask::Hole, dx: f32, dy: f32| {
            Rect::from_min_max(
                to_screen(h.x as f32 + dx, h.y as f32 + dy),
                to_screen((h.x + h.width) as f32 + dx, (h.y + h.height) as f32 + dy),
            )
        };
        // Where the texture came from (the largest holes; a dust field would hide the picture).
        for p in placements.iter().take(200) {
            if let Some((dx, dy)) = p.offset {
                #[allow(clippy::cast_precision_loss)]
                let (dx, dy) = (dx as f32, dy as f32);
                let (a, b) = (hole_rect(&p.hole, 0.0, 0.0), hole_rect(&p.hole, dx, dy));
                let colour = if p.chosen { Color32::YELLOW } else { Color32::from_rgb(80, 220, 255) };
                shapes.push(egui::Shape::rect_stroke(b, 0.0, Stroke::new(1.0, colour), egui::StrokeKind::Middle));
                shapes.push(egui::Shape::line_segment([a.center(), b.center()], Stroke::new(1.0, colour)));
            }
        }
        let pixel = |p: Pos2| -> Option<(usize, usize)> {
            let q = self.view.image_from_screen(p);
            #[allow(clippy::cast_possible_truncation, clippy::cast_sign_loss, clippy::cast_precision_loss)]
            (q.x >= 0.0 && q.y >= 0.0 && q.x < mask.width() as f32 && q.y < mask.height() as f32)
                .then_some((q.x as usize, q.y as usize))
        };
        if response.drag_started_by(egui::PointerButton::Primary) {
            let origin = ui.ctx().input(|i| i.pointer.press_origin()).or(response.interact_pointer_pos());
            *self.anchor = origin.and_then(pixel).filter(|&(x, y)| mask.get(x, y));
            if self.anchor.is_none() {
                *self.status = "start the drag on a marked hole".to_owned();
            }
        }
        let Some((ax, ay)) = *self.anchor else { return };
        let Some(here) = response.interact_pointer_pos() else { return };
        let q = self.view.image_from_screen(here);
        #[allow(clippy::cast_precision_loss, clippy::cast_possible_truncation)]
        let (dx, dy) = ((q.x - ax as f32 - 0.5).round(), (q.y - ay as f32 - 0.5).round());
        let hole = placements
            .iter()
            .map(|p| p.hole)
            .find(|h| (h.x..h.x + h.width).contains(&ax) && (h.y..h.y + h.height).contains(&ay));
        let shown = hole.unwrap_or(crate::mask::Hole { x: ax, y: ay, width: 1, height: 1, pixels: 1 });
        shapes.push(egui::Shape::rect_stroke(
            hole_rect(&shown, dx, dy),
            0.0,
            Stroke::new(2.0, Color32::YELLOW),
            egui::StrokeKind::Middle,
        ));
        if response.drag_stopped() {
            *self.anchor = None;
            #[allow(clippy::cast_possible_truncation)]
            let offset = (dx as isize, dy as isize);
            if offset == (0, 0) {
                return;
            }
            // One chosen source per hole: drop an earlier choice made in the same hole.
            if let Some(h) = hole {
                self.chosen
                    .retain(|c| !((h.x..h.x + h.width).contains(&c.at.0) && (h.y..h.y + h.height).contains(&c.at.1)));
            }
            self.chosen.push(crate::fill::guided::ChosenSource { at: (ax, ay), offset });
            *self.whole_next = true;
            commands.push(Command::Fill);
        }
    }
}

/// What a heat map shows.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Heat {
    /// |after − before|.
    Change,
    /// Distance to the nearest known pixel.
    Distance,
}

impl Heat {
    /// The colour of pixels that were not filled: black for the difference, see-through for the
    /// distance (drawn over the result).
    fn background(self) -> Color32 {
        match self {
            Self::Change => Color32::BLACK,
            Self::Distance => Color32::TRANSPARENT,
        }
    }

    fn name(self) -> &'static str {
        match self {
            Self::Change => "difference",
            Self::Distance => "distance",
        }
    }
}

/// |after − before| at pixel `i`, the largest over the channels (non-finite values left out).
fn pixel_difference(after: &[Vec<f32>], before: &[Vec<f32>], i: usize) -> f32 {
    after.iter().zip(before).map(|(a, b)| (a[i] - b[i]).abs()).filter(|v| v.is_finite()).fold(0.0, f32::max)
}

/// `dir/stem-suffix.ext` next to `path`.
fn sibling(path: &std::path::Path, suffix: &str) -> PathBuf {
    let stem = path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    let ext = path.extension().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "png".to_owned());
    path.with_file_name(format!("{stem}{suffix}.{ext}"))
}

/// Puts back the original samples of pixels filled before (`previous`) but no longer masked.
fn restore_unmasked(planes: &mut [Vec<f32>], original: &[Vec<f32>], previous: &Mask, mask: &Mask) {
    for (i, (&was, &is)) in previous.bits().iter().zip(mask.bits()).enumerate() {
        if was && !is {
            for (p, o) in planes.iter_mut().zip(original) {
                p[i] = o[i];
            }
        }
    }
}

/// A rectangle `(x0, y0, x1, y1)` grown by one pixel within the mask's image (an edit changes the
/// outline of its neighbours too).
fn grown((x0, y0, x1, y1): (usize, usize, usize, usize), mask: &Mask) -> (usize, usize, usize, usize) {
    (x0.saturating_sub(1), y0.saturating_sub(1), (x1 + 1).min(mask.width()), (y1 + 1).min(mask.height()))
}

/// A copy of the planes, made in parallel (a 24-megapixel RGB image is 288 MB of `f32`).
fn copy_planes(planes: &[Vec<f32>]) -> Vec<Vec<f32>> {
    use rayon::prelude::*;
    planes
        .iter()
        .map(|p| {
            let mut out = vec![0f32; p.len()];
            out.par_chunks_mut(1 << 18).zip(p.par_chunks(1 << 18)).for_each(|(o, i)| o.copy_from_slice(i));
            out
        })
        .collect()
}

/// `restore_unmasked` within the rectangle `(x0, y0, x1, y1)` (ends exclusive).
fn restore_unmasked_in(
    planes: &mut [Vec<f32>],
    original: &[Vec<f32>],
    previous: &Mask,
    mask: &Mask,
    (x0, y0, x1, y1): (usize, usize, usize, usize),
) {
    let w = mask.width();
    for y in y0..y1 {
        for i in y * w + x0..y * w + x1 {
            if previous.bits()[i] && !mask.bits()[i] {
                for (p, o) in planes.iter_mut().zip(original) {
                    p[i] = o[i];
                }
            }
        }
    }
}

/// The bounding box `(x0, y0, x1, y1)` (ends exclusive) of the pixels where two masks differ.
fn differing_box(a: &Mask, b: &Mask) -> Option<(usize, usize, usize, usize)> {
    use rayon::prelude::*;
    let w = a.width();
    let rows: Vec<Option<(usize, usize)>> = a
        .bits()
        .par_chunks(w)
        .zip(b.bits().par_chunks(w))
        .map(|(ra, rb)| {
            let first = ra.iter().zip(rb).position(|(x, y)| x != y)?;
            let last = ra.iter().zip(rb).rposition(|(x, y)| x != y)?;
            Some((first, last + 1))
        })
        .collect();
    let mut bbox: Option<(usize, usize, usize, usize)> = None;
    for (y, r) in rows.iter().enumerate() {
        if let Some((a0, a1)) = *r {
            bbox = Some(match bbox {
                None => (a0, y, a1, y + 1),
                Some((x0, y0, x1, _)) => (x0.min(a0), y0, x1.max(a1), y + 1),
            });
        }
    }
    bbox
}

/// The bounding box `(x0, y0, x1, y1)` (ends exclusive) of the pixels set in either mask.
fn changed_box(a: &Mask, b: Option<&Mask>) -> Option<(usize, usize, usize, usize)> {
    let w = a.width();
    let mut bbox: Option<(usize, usize, usize, usize)> = None;
    for (i, &m) in a.bits().iter().enumerate() {
        if m || b.is_some_and(|b| b.bits()[i]) {
            let (x, y) = (i % w, i / w);
            bbox = Some(match bbox {
                None => (x, y, x + 1, y + 1),
                Some((x0, y0, x1, y1)) => (x0.min(x), y0.min(y), x1.max(x + 1), y1.max(y + 1)),
            });
        }
    }
    bbox
}

fn make_textures(
    ctx: &egui::Context,
    d: &Document,
    colour: Color32,
    outline: bool,
    ready: Option<Vec<egui::ColorImage>>,
) -> Textures {
    let (w, h) = (d.original.width, d.original.height);
    let (planes, layout, s) = (&d.original.planes, d.original.layout, d.stretch);
    let before = match ready {
        Some(images) => Tiles::from_images(ctx, "before", w, h, IMAGE_TILE, images),
        None => Tiles::new(ctx, "before", w, h, IMAGE_TILE, &|i| canvas::colour(planes, layout, s, i)),
    };
    let overlay = Tiles::new(ctx, "mask", w, h, OVERLAY_TILE, &|i| canvas::mark(&d.mask, colour, outline, i));
    let after = d.result.as_ref().map(|_| after_tiles(ctx, d));
    Textures { before, after, difference: None, distance: None, overlay, proposal: None }
}

fn after_tiles(ctx: &egui::Context, d: &Document) -> Tiles {
    let (w, h) = (d.original.width, d.original.height);
    let planes = d.result.as_ref().unwrap_or(&d.original.planes);
    let (layout, s) = (d.original.layout, d.stretch);
    Tiles::new(ctx, "after", w, h, IMAGE_TILE, &|i| canvas::colour(planes, layout, s, i))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn polygon_marks_pixel_centres_inside() {
        // A 4×3 rectangle from (2, 1) to (6, 4): exactly 12 pixel centres inside.
        let pts = [Pos2::new(2.0, 1.0), Pos2::new(6.0, 1.0), Pos2::new(6.0, 4.0), Pos2::new(2.0, 4.0)];
        let m = polygon_mask(10, 8, &pts);
        assert_eq!(m.count(), 12);
        assert!(m.get(2, 1) && m.get(5, 3) && !m.get(6, 3) && !m.get(1, 1));
        // A triangle: half of a 6×6 square, the diagonal's centres excluded on one side.
        let tri = [Pos2::new(0.0, 0.0), Pos2::new(6.0, 0.0), Pos2::new(0.0, 6.0)];
        assert_eq!(polygon_mask(8, 8, &tri).count(), 15);
    }
}
