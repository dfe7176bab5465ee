//! Undo and redo of mask edits. An edit stores only the 64×64 tiles it changed (their previous
//! content), so memory follows what was painted, not the image size.

use crate::mask::Mask;

/// Side of a history tile.
pub const TILE: usize = 64;
/// Most edits kept for undo.
pub const MAX_STEPS: usize = 500;

/// The previous content of the tiles one edit changed.
#[derive(Clone, Debug, Default)]
pub struct Edit {
    tiles: Vec<(usize, Vec<bool>)>,
}

impl Edit {
    /// Whether the edit has saved tile `t` already.
    #[must_use]
    pub fn has(&self, t: usize) -> bool {
        self.tiles.iter().any(|(i, _)| *i == t)
    }

    /// Saves tile `t` of `mask` (call before changing it).
    pub fn save(&mut self, mask: &Mask, t: usize) {
        if !self.has(t) {
            self.tiles.push((t, read_tile(mask, t)));
        }
    }

    /// Saves every tile of `mask` (for whole-mask edits).
    pub fn save_all(&mut self, mask: &Mask) {
        for t in 0..tile_count(mask) {
            self.save(mask, t);
        }
    }

    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.tiles.is_empty()
    }

    /// Swaps the stored tiles with the mask's, so applying twice is a no-op (undo, then redo).
    fn swap(&mut self, mask: &mut Mask) {
        for (t, content) in &mut self.tiles {
            let now = read_tile(mask, *t);
            write_tile(mask, *t, content);
            *content = now;
        }
    }

    /// Bytes held.
    #[must_use]
    pub fn bytes(&self) -> usize {
        self.tiles.iter().map(|(_, c)| c.len()).sum()
    }
}

/// Tiles across and down.
fn tiles_x(mask: &Mask) -> usize {
    mask.width().div_ceil(TILE)
}

#[must_use]
pub fn tile_count(mask: &Mask) -> usize {
    tiles_x(mask) * mask.height().div_ceil(TILE)
}

/// The history tile holding pixel `(x, y)`.
#[must_use]
pub fn tile_of(mask: &Mask, x: usize, y: usize) -> usize {
    (y / TILE) * tiles_x(mask) + x / TILE
}

fn tile_rect(mask: &Mask, t: usize) -> (usize, usize, usize, usize) {
    let tx = tiles_x(mask);
    let (x0, y0) = ((t % tx) * TILE, (t / tx) * TILE);
    (x0, y0, (x0 + TILE).min(mask.width()), (y0 + TILE).min(mask.height()))
}

fn read_tile(mask: &Mask, t: usize) -> Vec<bool> {
    let (x0, y0, x1, y1) = tile_rect(mask, t);
    let w = mask.width();
    (y0..y1).flat_map(|y| mask.bits()[y * w + x0..y * w + x1].iter().copied()).collect()
}

fn write_tile(mask: &mut Mask, t: usize, content: &[bool]) {
    let (x0, y0, x1, y1) = tile_rect(mask, t);
    let w = mask.width();
    let span = x1 - x0;
    for (row, y) in (y0..y1).enumerate() {
        mask.bits_mut()[y * w + x0..y * w + x1].copy_from_slice(&content[row * span..(row + 1) * span]);
    }
}

/// Undo and redo stacks.
#[derive(Debug, Default)]
pub struct History {
    undo: Vec<Edit>,
    redo: Vec<Edit>,
    /// Edits, undos and redos so far: changes when the mask does.
    pub changes: u64,
}

impl History {
    /// Records a finished edit (clears the redo stack).
    pub fn push(&mut self, edit: Edit) {
        if edit.is_empty() {
            return;
        }
        self.undo.push(edit);
        self.redo.clear();
        self.changes += 1;
        if self.undo.len() > MAX_STEPS {
            self.undo.remove(0);
        }
    }

    /// Undoes the last edit; returns the tiles it touched.
    pub fn undo(&mut self, mask: &mut Mask) -> Option<Vec<usize>> {
        let mut e = self.undo.pop()?;
        e.swap(mask);
        self.changes += 1;
        let touched = e.tiles.iter().map(|(t, _)| *t).collect();
        self.redo.push(e);
        Some(touched)
    }

    /// Redoes the last undone edit; returns the tiles it touched.
    pub fn redo(&mut self, mask: &mut Mask) -> Option<Vec<usize>> {
        let mut e = self.redo.pop()?;
        e.swap(mask);
        self.changes += 1;
        let touched = e.tiles.iter().map(|(t, _)| *t).collect();
        self.undo.push(e);
        Some(touched)
    }

    #[must_use]
    pub fn can_undo(&self) -> bool {
        !self.undo.is_empty()
    }

    #[must_use]
    pub fn can_redo(&self) -> bool {
        !self.redo.is_empty()
    }

    /// Bytes held by both stacks.
    #[must_use]
    pub fn bytes(&self) -> usize {
        self.undo.iter().chain(&self.redo).map(Edit::bytes).sum()
    }
}

/// The pixel rectangle `(x0, y0, x1, y1)` (exclusive ends) of history tile `t`.
#[must_use]
pub fn rect_of(mask: &Mask, t: usize) -> (usize, usize, usize, usize) {
    tile_rect(mask, t)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn undo_and_redo_restore_exactly() {
        let mut m = Mask::new(150, 70);
        let mut h = History::default();
        let mut e = Edit::default();
        e.save(&m, tile_of(&m, 100, 65));
        m.set(100, 65, true);
        h.push(e);
        let mut e = Edit::default();
        e.save_all(&m);
        for b in m.bits_mut() {
            *b = !*b;
        }
        h.push(e);
        assert_eq!(m.count(), 150 * 70 - 1);
        h.undo(&mut m);
        assert_eq!(m.count(), 1);
        h.undo(&mut m);
        assert_eq!(m.count(), 0);
        h.redo(&mut m);
        assert!(m.get(100, 65) && m.count() == 1);
        assert!(h.bytes() > 0 && h.can_undo() && h.can_redo());
    }
}
