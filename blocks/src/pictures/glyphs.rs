//! Text for the bitmap backend: each character's coverage, per size, as the
//! font renderer draws it (`plotters` 0.3 `FontDataInternal::draw`,
//! reproduced step for step), rasterized once per run and shared by the
//! workers. Rasterizing every character of every label anew was a tenth of
//! a picture's time.

use ab_glyph::{Font, FontRef, GlyphId, ScaleFont};
use std::cell::RefCell;
use std::collections::{BTreeMap, HashMap};
use std::sync::{Arc, Mutex};

thread_local! {
    static GLYPHS: RefCell<GlyphCache> = RefCell::new(GlyphCache::default());
}

/// Call `draw(x, y, coverage)` for every pixel of `text` at `size` in our
/// font, pen at (0, 0), from this thread's glyph cache; false when the font
/// cannot be loaded (the caller then draws the text another way).
pub(super) fn draw_text(size: f64, text: &str, draw: impl FnMut(i32, i32, f32)) -> bool {
    GLYPHS.with(|cache| cache.borrow_mut().draw_text(size, text, draw))
}

/// One character at one size as the font renderer draws it with its pen at
/// the origin.
struct Glyph {
    id: GlyphId,
    /// Pixels the outline covers: offset from the pen (the renderer's
    /// vertical shift included) and coverage, in the renderer's order.
    pixels: Vec<(i32, i32, f32)>,
}

/// Glyphs rasterized by any worker, so each character at each size is
/// rasterized once per run; each worker keeps its own map of those it used
/// so the lock is taken once per new character, not per character drawn.
static SHARED_GLYPHS: Mutex<BTreeMap<(u64, char), Arc<Glyph>>> = Mutex::new(BTreeMap::new());

#[derive(Default)]
struct GlyphCache {
    font: Option<FontRef<'static>>,
    glyphs: HashMap<(u64, char), Arc<Glyph>>,
}

impl GlyphCache {
    fn font(&mut self) -> Option<FontRef<'static>> {
        if self.font.is_none() {
            self.font = FontRef::try_from_slice(super::FONT_BYTES).ok();
        }
        self.font.clone()
    }

    /// Call `draw(x, y, coverage)` for every pixel of `text` at `size`, as
    /// `FontDataInternal::draw` does with its pen at (0, 0).
    fn draw_text(&mut self, size: f64, text: &str, mut draw: impl FnMut(i32, i32, f32)) -> bool {
        let Some(font_ref) = self.font() else { return false };
        let font = font_ref.as_scaled(size as f32);
        let mut x_shift = 0f32;
        let mut prev: Option<GlyphId> = None;
        for c in text.chars() {
            let key = (size.to_bits(), c);
            let glyph = self.glyphs.entry(key).or_insert_with(|| {
                let mut shared = SHARED_GLYPHS.lock().unwrap_or_else(|poisoned| poisoned.into_inner());
                shared.entry(key).or_insert_with(|| Arc::new(rasterize(&font, size, c))).clone()
            });
            if let Some(pc) = prev {
                x_shift += font.kern(pc, glyph.id);
            }
            prev = Some(glyph.id);
            let x0 = x_shift as i32;
            for &(x, y, coverage) in &glyph.pixels {
                draw(x + x0, y, coverage);
            }
            x_shift += font.h_advance(glyph.id);
        }
        true
    }
}

fn rasterize(font: &ab_glyph::PxScaleFont<&FontRef<'static>>, size: f64, c: char) -> Glyph {
    let id = font.glyph_id(c);
    let mut pixels = Vec::new();
    if let Some(outline) = font.outline_glyph(font.scaled_glyph(c)) {
        let y_shift = ((size as f32) / 2.0 + outline.px_bounds().min.y) as i32;
        outline.draw(|x, y, coverage| pixels.push((x as i32, y as i32 + y_shift, coverage)));
    }
    Glyph { id, pixels }
}
