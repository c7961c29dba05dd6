//! The bitmap half of a picture: plotters' bitmap backend with two costs
//! taken out and its pixels left exactly as they were.
//!
//! - Text: the font renderer outlines and rasterizes every character of
//!   every label anew (a tenth of a picture's time). [`GlyphCachedBitmap`]
//!   keeps each character's coverage per size and lays it down through the
//!   same pixel calls, in the same order, with the same positions and alpha
//!   the renderer computes (`plotters` 0.3 `FontDataInternal::draw` and the
//!   backend's default `draw_text`, both reproduced step for step below).
//! - Memory: a fresh multi-megabyte pixel buffer costs a page fault per
//!   4 KiB on first touch; each worker keeps its buffer between pictures
//!   ([`with_pixel_buffer`]).

use super::FONT;
use ab_glyph::{Font, FontRef, GlyphId, ScaleFont};
use plotters::prelude::*;
use plotters_backend::text_anchor::{HPos, VPos};
use plotters_backend::{BackendColor, BackendCoord, BackendStyle, BackendTextStyle, DrawingErrorKind};
use std::cell::RefCell;
use std::collections::HashMap;

/// A pixel buffer kept for the next picture only up to this size, so an
/// unusually large picture does not hold its memory for the whole run.
const KEPT_BUFFER_BYTES: usize = 16 << 20;

thread_local! {
    static PIXELS: RefCell<Vec<u8>> = const { RefCell::new(Vec::new()) };
    static GLYPHS: RefCell<GlyphCache> = RefCell::new(GlyphCache::default());
}

/// Run `f` on a zeroed buffer of `len` bytes, reusing this thread's buffer
/// from an earlier picture (zeroed as a fresh one would be).
pub fn with_pixel_buffer<T>(len: usize, f: impl FnOnce(&mut [u8]) -> T) -> T {
    let mut buf = PIXELS.with(|b| std::mem::take(&mut *b.borrow_mut()));
    buf.clear();
    buf.resize(len, 0);
    let result = f(&mut buf);
    if buf.capacity() <= KEPT_BUFFER_BYTES {
        PIXELS.with(|b| *b.borrow_mut() = buf);
    }
    result
}

/// One character at one size as the font renderer draws it with its pen at
/// the origin.
struct Glyph {
    id: GlyphId,
    /// Pixels the outline covers: offset from the pen (the renderer's
    /// vertical shift included) and coverage, in the renderer's order.
    pixels: Vec<(i32, i32, f32)>,
}

#[derive(Default)]
struct GlyphCache {
    font: Option<FontRef<'static>>,
    glyphs: HashMap<(u64, char), Glyph>,
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
            let glyph = self.glyphs.entry((size.to_bits(), c)).or_insert_with(|| rasterize(&font, size, c));
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

/// Plotters' bitmap backend over an RGB buffer, drawing text of our font
/// from cached glyphs; everything else goes to the bitmap backend itself.
pub struct GlyphCachedBitmap<'a> {
    inner: BitMapBackend<'a>,
}

impl<'a> GlyphCachedBitmap<'a> {
    pub fn with_buffer(rgb: &'a mut [u8], size: (u32, u32)) -> Self {
        GlyphCachedBitmap { inner: BitMapBackend::with_buffer(rgb, size) }
    }
}

type BitmapError<'a> = DrawingErrorKind<<BitMapBackend<'a> as DrawingBackend>::ErrorType>;

impl<'a> DrawingBackend for GlyphCachedBitmap<'a> {
    type ErrorType = <BitMapBackend<'a> as DrawingBackend>::ErrorType;

    fn get_size(&self) -> (u32, u32) {
        self.inner.get_size()
    }
    fn ensure_prepared(&mut self) -> Result<(), BitmapError<'a>> {
        self.inner.ensure_prepared()
    }
    fn present(&mut self) -> Result<(), BitmapError<'a>> {
        self.inner.present()
    }
    fn draw_pixel(&mut self, point: BackendCoord, color: BackendColor) -> Result<(), BitmapError<'a>> {
        self.inner.draw_pixel(point, color)
    }
    fn draw_line<S: BackendStyle>(
        &mut self,
        from: BackendCoord,
        to: BackendCoord,
        style: &S,
    ) -> Result<(), BitmapError<'a>> {
        self.inner.draw_line(from, to, style)
    }
    fn draw_rect<S: BackendStyle>(
        &mut self,
        upper_left: BackendCoord,
        bottom_right: BackendCoord,
        style: &S,
        fill: bool,
    ) -> Result<(), BitmapError<'a>> {
        self.inner.draw_rect(upper_left, bottom_right, style, fill)
    }
    fn draw_path<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        path: I,
        style: &S,
    ) -> Result<(), BitmapError<'a>> {
        self.inner.draw_path(path, style)
    }
    fn draw_circle<S: BackendStyle>(
        &mut self,
        center: BackendCoord,
        radius: u32,
        style: &S,
        fill: bool,
    ) -> Result<(), BitmapError<'a>> {
        self.inner.draw_circle(center, radius, style, fill)
    }
    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        vert: I,
        style: &S,
    ) -> Result<(), BitmapError<'a>> {
        self.inner.fill_polygon(vert, style)
    }
    fn estimate_text_size<TStyle: BackendTextStyle>(
        &self,
        text: &str,
        style: &TStyle,
    ) -> Result<(u32, u32), BitmapError<'a>> {
        self.inner.estimate_text_size(text, style)
    }
    fn blit_bitmap(&mut self, pos: BackendCoord, size: (u32, u32), src: &[u8]) -> Result<(), BitmapError<'a>> {
        self.inner.blit_bitmap(pos, size, src)
    }

    /// The backend's default `draw_text` with the glyphs from the cache.
    fn draw_text<TStyle: BackendTextStyle>(
        &mut self,
        text: &str,
        style: &TStyle,
        pos: BackendCoord,
    ) -> Result<(), BitmapError<'a>> {
        if style.family().as_str() != FONT {
            return self.inner.draw_text(text, style, pos);
        }
        let color = style.color();
        if color.alpha == 0.0 {
            return Ok(());
        }
        let layout = style.layout_box(text).map_err(|e| DrawingErrorKind::FontError(Box::new(e)))?;
        let ((min_x, min_y), (max_x, max_y)) = layout;
        let (width, height) = (max_x - min_x, max_y - min_y);
        let dx = match style.anchor().h_pos {
            HPos::Left => 0,
            HPos::Right => -width,
            HPos::Center => -width / 2,
        };
        let dy = match style.anchor().v_pos {
            VPos::Top => 0,
            VPos::Center => -height / 2,
            VPos::Bottom => -height,
        };
        let trans = style.transform();
        let (w, h) = self.get_size();
        let inner = &mut self.inner;
        let mut result = Ok(());
        let drawn = GLYPHS.with(|cache| {
            cache.borrow_mut().draw_text(style.size(), text, |x, y, coverage| {
                let (x, y) = trans.transform(x + dx - min_x, y + dy - min_y);
                let (x, y) = (pos.0 + x, pos.1 + y);
                if result.is_ok() && x >= 0 && x < w as i32 && y >= 0 && y < h as i32 {
                    result = inner.draw_pixel((x, y), color.mix(coverage as f64));
                }
            })
        });
        if !drawn {
            return self.inner.draw_text(text, style, pos);
        }
        result
    }
}
