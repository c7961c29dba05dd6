//! The bitmap half of a picture: plotters' bitmap backend with its costs
//! taken out and its pixels left exactly as they were.
//!
//! - Text: the font renderer outlines and rasterizes every character of
//!   every label anew (a tenth of a picture's time). [`GlyphCachedBitmap`]
//!   takes each character's coverage from the glyph cache (`glyphs.rs`,
//!   one rasterization per character and size per run, shared by the
//!   workers) and lays it down through the same pixel calls, in the same
//!   order, with the same positions and alpha as the backend's default
//!   `draw_text` (reproduced step for step below).
//! - Pixels: the bitmap backend draws lines, polygons and circles pixel by
//!   pixel through its general entry point. [`GlyphCachedBitmap`] has its
//!   own pixel, line and rectangle calls, each the bitmap backend's own
//!   arithmetic for RGB pixels (`BitMapBackend::draw_pixel`, `draw_line`,
//!   `draw_rect` and `RGBPixel`'s fills and blends) written straight into
//!   the buffer, runs plotters' line and circle rasterizers over them, and
//!   fills polygons (wide lines, areas) with a copy of plotters' polygon
//!   scan that allocates once per polygon instead of once per scanline
//!   (`raster.rs`).
//! - Memory: a fresh multi-megabyte pixel buffer costs a page fault per
//!   4 KiB on first touch; each worker keeps its buffer between pictures
//!   ([`with_pixel_buffer`]). The background, an opaque fill of the whole
//!   image, is written a row at a time when the row is first drawn on, and
//!   then only beside an opaque rectangle drawn there (a chart's panel), so
//!   the ground under a panel is not written twice; an old picture left in
//!   a reused buffer is treated as the zeros of a fresh one the same way.

use super::FONT;
use super::glyphs;
use plotters::prelude::*;
use plotters_backend::text_anchor::{HPos, VPos};
use plotters_backend::{BackendColor, BackendCoord, BackendStyle, BackendTextStyle, DrawingErrorKind};
use std::cell::RefCell;

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

/// Plotters' bitmap backend over an RGB buffer, drawing text of our font
/// from cached glyphs, and pixels, lines and opaque rectangles itself.
pub struct GlyphCachedBitmap<'a> {
    rgb: &'a mut [u8],
    size: (u32, u32),
    /// Rows not written yet, which hold `ground` as far as the picture is
    /// concerned: zeros over a reused buffer, or the colour of an opaque
    /// fill of the whole image. A row is written out when first drawn on,
    /// and an opaque rectangle then writes the ground only beside itself,
    /// so the background under a chart's panel is never written.
    unpainted: Vec<bool>,
    ground: [u8; 3],
    /// Whole rows of the colours filled lately, copied from by the fills
    /// (a row copy runs at memory speed; a pixel at a time does not).
    rows_of: Vec<([u8; 3], Vec<u8>)>,
}

impl<'a> GlyphCachedBitmap<'a> {
    /// A backend over `rgb` (3 bytes a pixel, rows top down); `stale` as
    /// [`with_pixel_buffer`] tells it.
    pub fn with_buffer(rgb: &'a mut [u8], size: (u32, u32), stale: bool) -> Self {
        // A fresh buffer is zeroed already; a stale one is, in effect.
        GlyphCachedBitmap { rgb, size, unpainted: vec![stale; size.1 as usize], ground: [0; 3], rows_of: Vec::new() }
    }

    /// Write out the ground of row `y` if it is still unpainted.
    #[inline]
    fn paint_row(&mut self, y: usize) {
        if self.unpainted[y] {
            self.unpainted[y] = false;
            let stride = 3 * self.size.0 as usize;
            let ground = row_of(&mut self.rows_of, self.ground, stride);
            self.rgb[y * stride..(y + 1) * stride].copy_from_slice(ground);
        }
    }

    /// Write out the ground of rows `y0..y1` still unpainted.
    fn paint_rows(&mut self, y0: i32, y1: i32) {
        for y in y0.max(0)..y1.min(self.size.1 as i32) {
            self.paint_row(y as usize);
        }
    }

    /// The bitmap backend over the buffer, every row written out.
    fn bitmap(&mut self) -> BitMapBackend<'_> {
        self.paint_rows(0, self.size.1 as i32);
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
        let colour = [rgb.0, rgb.1, rgb.2];
        if (x0, y0, x1, y1) == (0, 0, w, h) {
            self.ground = colour;
            self.unpainted.fill(true);
            return;
        }
        let stride = 3 * w as usize;
        let (left, right) = (3 * x0 as usize, 3 * x1 as usize);
        // The colour first: making the ground's row then drops the oldest,
        // never the one just made.
        row_of(&mut self.rows_of, colour, stride);
        row_of(&mut self.rows_of, self.ground, stride);
        let ground = &self.rows_of.iter().find(|(c, _)| *c == self.ground).expect("made above").1;
        let filled = &self.rows_of.iter().find(|(c, _)| *c == colour).expect("made above").1;
        for y in y0 as usize..y1 as usize {
            let row = &mut self.rgb[y * stride..(y + 1) * stride];
            if self.unpainted[y] {
                self.unpainted[y] = false;
                row[..left].copy_from_slice(&ground[..left]);
                row[right..].copy_from_slice(&ground[right..]);
            }
            row[left..right].copy_from_slice(&filled[left..right]);
        }
    }

    /// Set the pixels of column `x` from `ys.0` to `ys.1`, both included, as
    /// the bitmap backend's opaque vertical line does.
    fn fill_vertical(&mut self, x: i32, ys: (i32, i32), rgb: (u8, u8, u8)) {
        let (w, h) = (self.size.0 as i32, self.size.1 as i32);
        if x < 0 || x >= w {
            return;
        }
        let (y0, y1) = (ys.0.min(ys.1).max(0), ys.0.max(ys.1).min(h - 1));
        self.paint_rows(y0, y1 + 1);
        for y in y0..=y1 {
            let at = 3 * (y as usize * w as usize + x as usize);
            self.rgb[at..at + 3].copy_from_slice(&[rgb.0, rgb.1, rgb.2]);
        }
    }

    /// Blend `color` into the rectangle (clipped as [`Self::fill_opaque`]),
    /// as the bitmap backend's translucent fill does: with `a = floor(256
    /// alpha)`, each row's first `8 * floor((n - 1) / 8)` pixels become
    /// `floor((old (256 - a) + new a) / 256)` (it blends those eight at a
    /// time in 16-bit lanes) and the rest are blended as single pixels.
    fn blend_rect(&mut self, a: BackendCoord, b: BackendCoord, color: BackendColor) {
        let alpha = color.alpha.clamp(0.0, 1.0);
        let (w, h) = (self.size.0 as i32, self.size.1 as i32);
        let (x0, y0) = (a.0.min(b.0).max(0), a.1.min(b.1).max(0));
        let (x1, y1) = (a.0.max(b.0).min(w), a.1.max(b.1).min(h));
        if alpha == 0.0 || x0 >= x1 || y0 >= y1 {
            return;
        }
        self.paint_rows(y0, y1);
        // In (0, 256]: truncation is the floor the backend takes.
        let a = (256.0 * alpha) as u32;
        let (r, g, b) = color.rgb;
        let count = (x1 - x0) as usize;
        let in_lanes = 3 * ((count - 1) / 8 * 8);
        // Eight pixels' worth of `new * a`; `old * (256 - a) + new * a` is at
        // most 255 * 256, so 16 bits hold it (as in the backend's lanes).
        let keep = (256 - a) as u16;
        let mut added = [0u16; 24];
        for (k, v) in added.iter_mut().enumerate() {
            *v = u16::from([r, g, b][k % 3]) * a as u16;
        }
        for y in y0..y1 {
            let start = 3 * (y as usize * w as usize + x0 as usize);
            let (lanes, single) = self.rgb[start..start + 3 * count].split_at_mut(in_lanes);
            for eight in lanes.chunks_exact_mut(24) {
                for (old, add) in eight.iter_mut().zip(&added) {
                    *old = ((u16::from(*old) * keep + add) >> 8) as u8;
                }
            }
            for pixel in single.chunks_exact_mut(3) {
                blend_pixel(pixel, (r, g, b), a);
            }
        }
    }

    /// One pixel as the bitmap backend draws it: skipped off the image,
    /// set when nearly opaque, else each channel moved toward the colour
    /// by `floor(256 alpha) / 256` of the difference, rounded toward the
    /// old value.
    #[inline]
    fn put_pixel(&mut self, at: BackendCoord, color: BackendColor) {
        let step = if color.alpha >= 1.0 - 1.0 / 256.0 {
            256
        } else if color.alpha > 0.0 {
            // In (0, 255): truncation is the floor the backend takes.
            (color.alpha * 256.0) as u32
        } else {
            return;
        };
        self.put_step(at, color.rgb, step);
    }

    /// [`Self::put_pixel`] with the alpha as its step: 256 sets the pixel,
    /// 1..=255 blend it by that many 256ths, 0 changes nothing.
    #[inline]
    fn put_step(&mut self, (x, y): BackendCoord, (r, g, b): (u8, u8, u8), step: u32) {
        let (w, h) = self.size;
        if x < 0 || y < 0 || x as u32 >= w || y as u32 >= h {
            return;
        }
        self.paint_row(y as usize);
        let at = 3 * (y as usize * w as usize + x as usize);
        let pixel = &mut self.rgb[at..at + 3];
        if step >= 256 {
            pixel.copy_from_slice(&[r, g, b]);
        } else if step > 0 {
            blend_pixel(pixel, (r, g, b), step);
        }
    }
}

/// A row of `len` bytes of colour `rgb` from `rows`, made (and the oldest
/// of more than four dropped) if it is not there.
fn row_of(rows: &mut Vec<([u8; 3], Vec<u8>)>, rgb: [u8; 3], len: usize) -> &[u8] {
    let at = match rows.iter().position(|(c, _)| *c == rgb) {
        Some(at) => at,
        None => {
            if rows.len() == 4 {
                rows.remove(0);
            }
            rows.push((rgb, rgb.iter().copied().cycle().take(len).collect()));
            rows.len() - 1
        }
    };
    &rows[at].1
}

/// The bitmap backend's blend of one pixel by `a / 256`: each channel moves
/// toward the colour by that share of the difference, rounded toward the
/// old value.
#[inline]
fn blend_pixel(pixel: &mut [u8], (r, g, b): (u8, u8, u8), a: u32) {
    for (old, new) in pixel.iter_mut().zip([r, g, b]) {
        if new > *old {
            *old += (u32::from(new - *old) * a / 256) as u8;
        } else {
            *old -= (u32::from(*old - new) * a / 256) as u8;
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
    // change no pixel. Going through `bitmap()` here would write out every
    // row before the background is drawn.
    fn ensure_prepared(&mut self) -> Result<(), BitmapError> {
        Ok(())
    }
    fn present(&mut self) -> Result<(), BitmapError> {
        Ok(())
    }
    fn draw_pixel(&mut self, point: BackendCoord, color: BackendColor) -> Result<(), BitmapError> {
        self.put_pixel(point, color);
        Ok(())
    }
    /// The bitmap backend's: one-pixel-wide level and upright lines as
    /// rectangle fills, the rest by the rasterizer.
    fn draw_line<S: BackendStyle>(
        &mut self,
        from: BackendCoord,
        to: BackendCoord,
        style: &S,
    ) -> Result<(), BitmapError> {
        let color = style.color();
        if (from.0 == to.0 || from.1 == to.1) && style.stroke_width() == 1 {
            if color.alpha < 1.0 {
                self.blend_rect(from, (to.0 + 1, to.1 + 1), color);
                return Ok(());
            }
            if from.1 == to.1 {
                self.fill_opaque(from, (to.0 + 1, to.1 + 1), color.rgb);
            } else {
                self.fill_vertical(from.0, (from.1, to.1), color.rgb);
            }
            return Ok(());
        }
        plotters_backend::rasterizer::draw_line(self, from, to, style)
    }
    fn draw_rect<S: BackendStyle>(
        &mut self,
        upper_left: BackendCoord,
        bottom_right: BackendCoord,
        style: &S,
        fill: bool,
    ) -> Result<(), BitmapError> {
        // The bitmap backend's own choice between its fills and outlines.
        if !fill {
            return plotters_backend::rasterizer::draw_rect(self, upper_left, bottom_right, style, fill);
        }
        if style.color().alpha >= 1.0 {
            self.fill_opaque(upper_left, bottom_right, style.color().rgb);
        } else {
            self.blend_rect(upper_left, bottom_right, style.color());
        }
        Ok(())
    }
    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        vert: I,
        style: &S,
    ) -> Result<(), BitmapError> {
        let vertices: Vec<BackendCoord> = vert.into_iter().collect();
        super::raster::fill_polygon(self, &vertices, style)
    }
    // Paths and circles: the trait's rasterizers, as the bitmap backend uses
    // them, over the pixel, line and polygon calls above.
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
        // An opaque colour (most text) takes each pixel's blend step from
        // the cache instead of mixing its alpha anew.
        let opaque = color.alpha == 1.0;
        let drawn = glyphs::draw_text(style.size(), text, |x, y, coverage, step| {
            let (x, y) = trans.transform(x + dx - min_x, y + dy - min_y);
            if opaque {
                self.put_step((pos.0 + x, pos.1 + y), color.rgb, u32::from(step));
            } else {
                self.put_pixel((pos.0 + x, pos.1 + y), color.mix(coverage as f64));
            }
        });
        if !drawn {
            return self.bitmap().draw_text(text, style, pos);
        }
        Ok(())
    }
}

/// The buffer holds the whole picture once the backend is gone, whether or
/// not it was presented.
impl Drop for GlyphCachedBitmap<'_> {
    fn drop(&mut self) {
        self.paint_rows(0, self.size.1 as i32);
    }
}

#[cfg(test)]
mod tests {
    //! The pixels must be exactly those plotters' own bitmap backend draws,
    //! on a fresh buffer, whatever an earlier picture left in ours.

    use super::{GlyphCachedBitmap, with_pixel_buffer};
    use crate::pictures::ensure_font;
    use crate::pictures::test_scene::{SIZE, scene};
    use plotters::prelude::*;

    fn reference(background: bool, sparse: bool) -> Vec<u8> {
        let mut rgb = vec![0u8; (SIZE.0 * SIZE.1 * 3) as usize];
        {
            let root = BitMapBackend::with_buffer(&mut rgb, SIZE).into_drawing_area();
            scene(&root, background, sparse);
            root.present().unwrap();
        }
        rgb
    }

    /// Our backend's pixels, on a fresh or a reused buffer, the rows not
    /// drawn on written out by `present` or else when the backend is dropped.
    fn ours(background: bool, sparse: bool, stale: bool, present: bool) -> Vec<u8> {
        let mut rgb: Vec<u8> = (0..SIZE.0 * SIZE.1 * 3).map(|i| if stale { (i * 7 % 251) as u8 } else { 0 }).collect();
        {
            let root = GlyphCachedBitmap::with_buffer(&mut rgb, SIZE, stale).into_drawing_area();
            scene(&root, background, sparse);
            if present {
                root.present().unwrap();
            }
        }
        rgb
    }

    #[test]
    fn pixels_equal_the_bitmap_backends() {
        ensure_font().unwrap();
        for (background, sparse) in [(true, false), (false, false), (true, true), (false, true)] {
            let expected = reference(background, sparse);
            for stale in [false, true] {
                // Glyphs come from the cache after the first round.
                for present in [true, false] {
                    let got = ours(background, sparse, stale, present);
                    let differing = got.iter().zip(&expected).filter(|(a, b)| a != b).count();
                    let case = format!("background {background}, sparse {sparse}, stale {stale}, presented {present}");
                    assert_eq!(differing, 0, "{case}");
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
