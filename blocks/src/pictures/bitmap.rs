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
//!   ([`with_pixel_buffer`]). Zeroing it again is skipped when the first
//!   drawing covers every pixel anyway (the background), and opaque
//!   rectangles are filled a row at a time by copying the first row.

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
/// A new buffer is made at least this large (the largest of the reference
/// graphs' pictures is 4.3 MB): its pages cost nothing until drawn on, and
/// a later, larger picture then draws on the pages the earlier ones
/// already touched instead of faulting in a whole new buffer.
const NEW_BUFFER_BYTES: usize = 8 << 20;

thread_local! {
    static PIXELS: RefCell<Vec<u8>> = const { RefCell::new(Vec::new()) };
    static GLYPHS: RefCell<GlyphCache> = RefCell::new(GlyphCache::default());
}

/// Run `f` on a buffer of `len` bytes and whether it holds an earlier
/// picture's pixels (else it is zeroed, as a fresh one). The buffer is
/// this thread's from an earlier picture when it is large enough.
pub fn with_pixel_buffer<T>(len: usize, f: impl FnOnce(&mut [u8], bool) -> T) -> T {
    let mut buf = PIXELS.with(|b| std::mem::take(&mut *b.borrow_mut()));
    // A buffer is handed out at its full length, so reusing it never writes.
    let stale = !buf.is_empty() && buf.len() >= len;
    if !stale {
        // Zeroed by the kernel as its pages are first touched.
        buf = vec![0; len.max(NEW_BUFFER_BYTES)];
    }
    let result = f(&mut buf[..len], stale);
    if buf.len() <= KEPT_BUFFER_BYTES {
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
/// from cached glyphs and opaque rectangles itself; everything else goes
/// to the bitmap backend.
pub struct GlyphCachedBitmap<'a> {
    rgb: &'a mut [u8],
    size: (u32, u32),
    /// The buffer holds an earlier picture's pixels: it is zeroed before the
    /// first drawing that may leave some of them showing.
    stale: bool,
}

impl<'a> GlyphCachedBitmap<'a> {
    /// A backend over `rgb` (3 bytes a pixel, rows top down); `stale` as
    /// [`with_pixel_buffer`] tells it.
    pub fn with_buffer(rgb: &'a mut [u8], size: (u32, u32), stale: bool) -> Self {
        GlyphCachedBitmap { rgb, size, stale }
    }

    /// Zero a stale buffer, as a fresh one would be.
    fn clear_stale(&mut self) {
        if self.stale {
            self.rgb.fill(0);
            self.stale = false;
        }
    }

    /// The bitmap backend over the buffer.
    fn bitmap(&mut self) -> BitMapBackend<'_> {
        self.clear_stale();
        BitMapBackend::with_buffer(self.rgb, self.size)
    }

    /// Set every pixel of the rectangle to `rgb`, clipped to the image
    /// exactly as the bitmap backend's opaque fill clips it (corners in any
    /// order, the bottom-right one excluded).
    fn fill_opaque(&mut self, a: BackendCoord, b: BackendCoord, rgb: (u8, u8, u8)) {
        let (w, h) = (self.size.0 as i32, self.size.1 as i32);
        let (x0, y0) = (a.0.min(b.0).max(0), a.1.min(b.1).max(0));
        let (x1, y1) = (a.0.max(b.0).min(w), a.1.max(b.1).min(h));
        if x0 >= x1 || y0 >= y1 {
            return;
        }
        if self.stale && (x0, y0, x1, y1) == (0, 0, w, h) {
            self.stale = false;
        }
        self.clear_stale();
        let stride = 3 * w as usize;
        let (left, right) = (3 * x0 as usize, 3 * x1 as usize);
        let first = y0 as usize * stride;
        for pixel in self.rgb[first + left..first + right].chunks_exact_mut(3) {
            pixel.copy_from_slice(&[rgb.0, rgb.1, rgb.2]);
        }
        for y in y0 as usize + 1..y1 as usize {
            self.rgb.copy_within(first + left..first + right, y * stride + left);
        }
    }
}

type BitmapError = DrawingErrorKind<<BitMapBackend<'static> as DrawingBackend>::ErrorType>;

impl DrawingBackend for GlyphCachedBitmap<'_> {
    type ErrorType = <BitMapBackend<'static> as DrawingBackend>::ErrorType;

    fn get_size(&self) -> (u32, u32) {
        self.size
    }
    // Called before every drawing; the bitmap backend's own, over a buffer,
    // change no pixel. Going through `bitmap()` here would zero a stale
    // buffer before the background is drawn over all of it.
    fn ensure_prepared(&mut self) -> Result<(), BitmapError> {
        Ok(())
    }
    fn present(&mut self) -> Result<(), BitmapError> {
        Ok(())
    }
    fn draw_pixel(&mut self, point: BackendCoord, color: BackendColor) -> Result<(), BitmapError> {
        self.bitmap().draw_pixel(point, color)
    }
    fn draw_line<S: BackendStyle>(
        &mut self,
        from: BackendCoord,
        to: BackendCoord,
        style: &S,
    ) -> Result<(), BitmapError> {
        self.bitmap().draw_line(from, to, style)
    }
    fn draw_rect<S: BackendStyle>(
        &mut self,
        upper_left: BackendCoord,
        bottom_right: BackendCoord,
        style: &S,
        fill: bool,
    ) -> Result<(), BitmapError> {
        // The bitmap backend's own test for its opaque fill.
        if fill && style.color().alpha >= 1.0 {
            self.fill_opaque(upper_left, bottom_right, style.color().rgb);
            return Ok(());
        }
        self.bitmap().draw_rect(upper_left, bottom_right, style, fill)
    }
    fn draw_path<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        path: I,
        style: &S,
    ) -> Result<(), BitmapError> {
        self.bitmap().draw_path(path, style)
    }
    fn draw_circle<S: BackendStyle>(
        &mut self,
        center: BackendCoord,
        radius: u32,
        style: &S,
        fill: bool,
    ) -> Result<(), BitmapError> {
        self.bitmap().draw_circle(center, radius, style, fill)
    }
    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        vert: I,
        style: &S,
    ) -> Result<(), BitmapError> {
        self.bitmap().fill_polygon(vert, style)
    }
    fn blit_bitmap(&mut self, pos: BackendCoord, size: (u32, u32), src: &[u8]) -> Result<(), BitmapError> {
        self.bitmap().blit_bitmap(pos, size, src)
    }

    /// The backend's default `draw_text` with the glyphs from the cache.
    fn draw_text<TStyle: BackendTextStyle>(
        &mut self,
        text: &str,
        style: &TStyle,
        pos: BackendCoord,
    ) -> Result<(), BitmapError> {
        if style.family().as_str() != FONT {
            return self.bitmap().draw_text(text, style, pos);
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
        let mut bitmap = self.bitmap();
        let mut result = Ok(());
        let drawn = GLYPHS.with(|cache| {
            cache.borrow_mut().draw_text(style.size(), text, |x, y, coverage| {
                let (x, y) = trans.transform(x + dx - min_x, y + dy - min_y);
                let (x, y) = (pos.0 + x, pos.1 + y);
                if result.is_ok() && x >= 0 && x < w as i32 && y >= 0 && y < h as i32 {
                    result = bitmap.draw_pixel((x, y), color.mix(coverage as f64));
                }
            })
        });
        if !drawn {
            return bitmap.draw_text(text, style, pos);
        }
        result
    }
}

#[cfg(test)]
mod tests {
    //! The pixels must be exactly those plotters' own bitmap backend draws,
    //! on a fresh buffer, whatever an earlier picture left in ours.

    use super::{GlyphCachedBitmap, with_pixel_buffer};
    use crate::pictures::{ensure_font, palette, text_style};
    use plotters::coord::Shift;
    use plotters::prelude::*;
    use plotters::style::FontTransform;
    use plotters::style::text_anchor::{HPos, Pos, VPos};

    const SIZE: (u32, u32) = (320, 200);

    fn scene<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, background: bool) {
        if background {
            root.fill(&palette::PAPER).unwrap();
        }
        // Opaque rectangles: corners in either order, partly off the image.
        root.draw(&Rectangle::new([(30, 20), (10, 60)], palette::GATE.filled())).unwrap();
        root.draw(&Rectangle::new([(-15, 150), (40, 260)], palette::ALERT.filled())).unwrap();
        root.draw(&Rectangle::new([(300, 5), (400, 30)], palette::MUTED.filled())).unwrap();
        // Translucent fill, outline, lines of both kinds.
        root.draw(&Rectangle::new([(50, 50), (140, 120)], palette::BAND.mix(0.4).filled())).unwrap();
        root.draw(&Rectangle::new([(60, 60), (130, 110)], palette::INK.stroke_width(1))).unwrap();
        root.draw(&PathElement::new(vec![(0, 199), (319, 0)], palette::TRACE.stroke_width(2))).unwrap();
        root.draw(&PathElement::new(vec![(5, 100), (315, 100)], palette::GRID)).unwrap();
        // Text: sizes, anchors, rotation, characters without outlines, past the edge.
        let style = text_style(13.0, palette::INK);
        root.draw(&Text::new("range 12.5 km -3 dB".to_string(), (12, 8), style.clone())).unwrap();
        root.draw(&Text::new("Az/El ±σ".to_string(), (160, 100), text_style(22.0, palette::ALERT))).unwrap();
        let centred = style.pos(Pos::new(HPos::Center, VPos::Center));
        root.draw(&Text::new("centred  twice".to_string(), (160, 150), centred)).unwrap();
        let turned = text_style(14.0, palette::MUTED).transform(FontTransform::Rotate270);
        root.draw(&Text::new("power (dB)".to_string(), (20, 180), turned)).unwrap();
        root.draw(&Text::new("cut off at the right edge".to_string(), (250, 180), style)).unwrap();
    }

    fn reference(background: bool) -> Vec<u8> {
        let mut rgb = vec![0u8; (SIZE.0 * SIZE.1 * 3) as usize];
        {
            let root = BitMapBackend::with_buffer(&mut rgb, SIZE).into_drawing_area();
            scene(&root, background);
            root.present().unwrap();
        }
        rgb
    }

    fn ours(background: bool, stale: bool) -> Vec<u8> {
        let mut rgb: Vec<u8> = (0..SIZE.0 * SIZE.1 * 3).map(|i| if stale { (i * 7 % 251) as u8 } else { 0 }).collect();
        {
            let root = GlyphCachedBitmap::with_buffer(&mut rgb, SIZE, stale).into_drawing_area();
            scene(&root, background);
            root.present().unwrap();
        }
        rgb
    }

    #[test]
    fn pixels_equal_the_bitmap_backends() {
        ensure_font().unwrap();
        for background in [true, false] {
            let expected = reference(background);
            for stale in [false, true] {
                // Twice: the second time every glyph comes from the cache.
                for round in 0..2 {
                    let got = ours(background, stale);
                    let differing = got.iter().zip(&expected).filter(|(a, b)| a != b).count();
                    assert_eq!(differing, 0, "background {background}, stale buffer {stale}, round {round}");
                }
            }
        }
    }

    #[test]
    fn a_reused_buffer_is_handed_out_whole_and_marked_stale() {
        let first = with_pixel_buffer(300, |buf, stale| {
            buf.fill(9);
            (buf.len(), stale)
        });
        assert_eq!(first, (300, false));
        let second = with_pixel_buffer(200, |buf, stale| (buf.len(), stale, buf[0]));
        assert_eq!(second, (200, true, 9));
    }
}
