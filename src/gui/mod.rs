//! The window: open an image, mark the damage, fill in the background, compare, save.
//!
//! The app owns the document and applies commands in one place (`app.rs`); the canvas names its
//! spaces and keeps one transform (`canvas.rs`); mask edits are undone by tiles (`history.rs`);
//! loading, filling and saving run on named worker threads (`worker.rs`).

mod app;
mod canvas;
mod history;
mod recovery;
mod settings;
mod worker;

use std::path::PathBuf;

pub use app::{App, CAUTION, Command, Compare, Document, Tool};
pub use canvas::View;
pub use recovery::{Recovery, Saved};
pub use settings::Settings;

struct Window(App);

impl eframe::App for Window {
    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        let size = ui.ctx().input(|i| i.viewport().inner_rect).map(|r| [r.width(), r.height()]);
        if size.is_some() {
            self.0.settings.window_size = size;
        }
        self.0.ui(ui);
    }

    fn on_exit(&mut self, _gl: Option<&eframe::glow::Context>) {
        if let Err(e) = self.0.store_settings().save() {
            eprintln!("reweave: warning: the settings could not be saved: {e}");
        }
        // A normal exit: nothing to recover next time.
        if let Some(r) = &self.0.recovery {
            r.clear();
        }
    }
}

/// Opens the window, optionally on `file` with its `mask`, and returns when it is closed.
///
/// # Errors
/// When no window can be opened (no display, no OpenGL).
pub fn run(file: Option<PathBuf>, mask: Option<PathBuf>) -> anyhow::Result<()> {
    let settings = Settings::load();
    let size = settings.window_size.unwrap_or([1280.0, 820.0]);
    let options = eframe::NativeOptions {
        viewport: egui::ViewportBuilder::default().with_inner_size(size).with_title("reweave"),
        ..eframe::NativeOptions::default()
    };
    eframe::run_native(
        "reweave",
        options,
        Box::new(move |cc| {
            let mut app = App::default();
            app.apply_settings(settings);
            app.use_recovery(Recovery::for_user());
            if let Some(f) = file {
                app.open(&cc.egui_ctx, f, mask);
            }
            Ok(Box::new(Window(app)))
        }),
    )
    .map_err(|e| {
        anyhow::anyhow!(
            "cannot open a window ({e}); is a display available? The command line works without one: reweave --help"
        )
    })
}
