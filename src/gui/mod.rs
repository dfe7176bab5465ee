//! The window: open an image, mark the damage, fill in the background, compare, save.
//!
//! The app owns the document and applies commands in one place (`app.rs`); the canvas names its
//! spaces and keeps one transform (`canvas.rs`); mask edits are undone by tiles (`history.rs`);
//! loading, filling and saving run on named worker threads (`worker.rs`).

mod app;
mod canvas;
mod history;
mod worker;

use std::path::PathBuf;

pub use app::{App, CAUTION, Command, Compare, Document, Tool};
pub use canvas::View;

struct Window(App);

impl eframe::App for Window {
    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        self.0.ui(ui);
    }
}

/// Opens the window, optionally on `file` with its `mask`, and returns when it is closed.
///
/// # Errors
/// When no window can be opened (no display, no OpenGL).
pub fn run(file: Option<PathBuf>, mask: Option<PathBuf>) -> anyhow::Result<()> {
    let options = eframe::NativeOptions {
        viewport: egui::ViewportBuilder::default().with_inner_size([1280.0, 820.0]).with_title("reweave"),
        ..eframe::NativeOptions::default()
    };
    eframe::run_native(
        "reweave",
        options,
        Box::new(move |cc| {
            let app = match file {
                Some(f) => App::with_file(&cc.egui_ctx, f, mask),
                None => App::default(),
            };
            Ok(Box::new(Window(app)))
        }),
    )
    .map_err(|e| {
        anyhow::anyhow!(
            "cannot open a window ({e}); is a display available? The command line works without one: reweave --help"
        )
    })
}
