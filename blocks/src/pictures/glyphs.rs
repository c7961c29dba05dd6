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

/// Call `draw(x, y, coverage, step)` for every pixel of `text` at `size` in
/// our font, pen at (0, 0), from this thread's glyph cache (`step` as
/// [`opaque_step`] gives it); false when the font cannot be loaded (the
/// caller then draws the text another way).
pub(super) fn draw_text(size: f64, text: &str, draw: impl FnMut(i32, i32, f32, u16)) -> bool {
    GLYPHS.with(|cache| cache.borrow_mut().draw_text(size, text, draw))
}

/// One character at one size as the font renderer draws it with its pen at
/// the origin.
struct Glyph {
    id: GlyphId,
    /// Pixels the outline covers (coverage above 0): offset from the pen
    /// (the renderer's vertical shift included) and coverage, in the
    /// renderer's order, with the coverage's [`opaque_step`].
    pixels: Vec<(i32, i32, f32, u16)>,
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
    fn draw_text(&mut self, size: f64, text: &str, mut draw: impl FnMut(i32, i32, f32, u16)) -> bool {
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
            for &(x, y, coverage, step) in &glyph.pixels {
                draw(x + x0, y, coverage, step);
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
        // The renderer visits every pixel of the glyph's box; one it does
        // not cover draws nothing (alpha 0), so it is not kept: a third to
        // a half of the box in our font.
        outline.draw(|x, y, coverage| {
            if coverage > 0.0 {
                pixels.push((x as i32, y as i32 + y_shift, coverage, opaque_step(coverage)));
            }
        });
    }
    Glyph { id, pixels }
}

/// What the bitmap backend makes of `coverage` as the alpha of an opaque
/// colour (`color.mix(coverage)` then its pixel call): 256 when it sets the
/// pixel (alpha of at least 255/256), else the blend's `floor(256 alpha)`.
/// Worked out once per glyph pixel rather than per pixel drawn.
pub(super) fn opaque_step(coverage: f32) -> u16 {
    // The mix of an opaque colour: 1.0 times the coverage, exactly it.
    let alpha = f64::from(coverage);
    if alpha >= 1.0 - 1.0 / 256.0 { 256 } else { (alpha * 256.0) as u16 }
}
