//! Pictures drawn from aggregated stream data: each picture block keeps
//! bounded summaries while items pass and draws once, at `finish`, to a PNG
//! and an SVG made by the same drawing code.
//!
//! Shared here: the embedded font, our palette, text styles and the writer
//! that renders a [`Picture`] twice and stages both files atomically.

pub mod accum;
pub mod angle_plot;
pub mod beacon_spectrum;
pub mod bitmap;
pub mod circular;
pub mod circular_sweep;
pub mod discriminator_curve;
mod glyphs;
pub mod lobe_timeline;
pub mod range_trace;
mod raster;
pub mod split_pair;
mod svg_writer;
#[cfg(test)]
mod test_scene;

use crate::{BlockError, BlockSpec, FileStager};
use plotters::coord::Shift;
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;
use plotters::style::FontStyle;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;

/// Every picture kind, registered by [`crate::standard_registry`]. Each
/// writes `BASE.png` and `BASE.svg` from its `path` parameter (or one of
/// them: its `formats` parameter, [`PictureFormats`]).
pub const ALL: &[BlockSpec] = &[
    circular_sweep::SPEC,
    range_trace::SPEC,
    split_pair::SPEC,
    angle_plot::SPEC,
    lobe_timeline::SPEC,
    beacon_spectrum::SPEC,
    discriminator_curve::SPEC,
];

/// Whether `kind` is a picture kind (its `path` is a base name for a pair of
/// files).
pub fn is_picture_kind(kind: &str) -> bool {
    ALL.iter().any(|spec| spec.kind == kind)
}

/// Font family name the pictures ask for; SVG viewers without the embedded
/// font fall back to their own sans-serif face.
pub const FONT: &str = "DejaVu Sans";

static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// Register the embedded font with the text renderer, once per process.
pub fn ensure_font() -> Result<(), BlockError> {
    static REGISTERED: OnceLock<Result<(), String>> = OnceLock::new();
    REGISTERED
        .get_or_init(|| {
            plotters::style::register_font(FONT, FontStyle::Normal, FONT_BYTES)
                .map_err(|_| "the embedded picture font could not be read".to_string())
        })
        .clone()
        .map_err(BlockError::new)
}

/// Our palette: dark ink on a warm paper ground, lobe colours chosen to stay
/// apart for common colour-vision deficiencies.
pub mod palette {
    use plotters::style::RGBColor;
    pub const PAPER: RGBColor = RGBColor(250, 247, 240);
    pub const PANEL: RGBColor = RGBColor(255, 254, 250);
    pub const INK: RGBColor = RGBColor(38, 42, 52);
    pub const MUTED: RGBColor = RGBColor(118, 116, 110);
    pub const GRID: RGBColor = RGBColor(222, 216, 204);
    pub const GRID_FINE: RGBColor = RGBColor(238, 234, 225);
    pub const TRACE: RGBColor = RGBColor(22, 104, 112);
    pub const BAND: RGBColor = RGBColor(170, 206, 204);
    pub const GATE: RGBColor = RGBColor(236, 196, 120);
    pub const ALERT: RGBColor = RGBColor(196, 58, 40);
    pub const FLAG_EDGE: RGBColor = RGBColor(150, 80, 160);
    pub const GUARD: RGBColor = RGBColor(200, 196, 188);
    /// One colour per lobe, in lobe order (wrapping).
    pub const LOBES: [RGBColor; 6] = [
        RGBColor(22, 104, 112),
        RGBColor(205, 96, 36),
        RGBColor(84, 92, 170),
        RGBColor(168, 136, 20),
        RGBColor(150, 56, 110),
        RGBColor(70, 130, 60),
    ];

    pub fn lobe(i: usize) -> RGBColor {
        LOBES[i % LOBES.len()]
    }
}

/// Text of `size` pixels in colour `color`.
pub fn text_style(size: f64, color: RGBColor) -> TextStyle<'static> {
    let mut style = TextStyle::from((FONT, size).into_font());
    style.color = color.to_backend_color();
    style
}

/// Something that can draw itself on any plotters backend.
pub trait Picture {
    /// Width and height in pixels.
    fn size(&self) -> (u32, u32);
    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String>;
}

/// Turn any drawing error into text.
pub fn draw_err<E: std::fmt::Display>(e: E) -> String {
    format!("drawing failed: {e}")
}

/// The base name a picture's `path` setting gives (trimmed); empty is refused.
pub fn picture_base(path: &str) -> Result<String, crate::ParamError> {
    let base = path.trim();
    if base.is_empty() {
        return Err(crate::ParamError::invalid("path", "is empty"));
    }
    Ok(base.to_string())
}

crate::block_choice! {
    /// Which files a picture block writes from its `path` base name.
    pub enum PictureFormats {
        /// `<path>.png` and `<path>.svg`.
        Both = "both",
        /// `<path>.svg` only: no bitmap is drawn or encoded, which is most
        /// of a picture's cost (DEVELOPERS.md, speed budget).
        Svg = "svg",
        /// `<path>.png` only.
        Png = "png",
    }
}

impl PictureFormats {
    /// The file extensions written, in the order they are written.
    pub fn extensions(self) -> &'static [&'static str] {
        match self {
            PictureFormats::Both => &["png", "svg"],
            PictureFormats::Svg => &["svg"],
            PictureFormats::Png => &["png"],
        }
    }

    fn wants(self, extension: &str) -> bool {
        self.extensions().contains(&extension)
    }
}

/// Render `picture` to `<base>.png` and/or `<base>.svg` as `formats` asks,
/// staged with the run's other outputs. Returns the final paths.
pub fn write_picture<P: Picture>(
    picture: &P,
    base: &str,
    formats: PictureFormats,
    files: &FileStager,
) -> Result<Vec<PathBuf>, BlockError> {
    ensure_font()?;
    let (w, h) = picture.size();
    let mut written = Vec::new();
    if formats.wants("png") {
        let png_path = PathBuf::from(format!("{base}.png"));
        bitmap::with_pixel_buffer(w as usize * h as usize * 3, |rgb, stale| {
            {
                let root = bitmap::GlyphCachedBitmap::with_buffer(rgb, (w, h), stale).into_drawing_area();
                picture.draw(&root).map_err(BlockError::new)?;
                root.present().map_err(|e| BlockError::new(draw_err(e)))?;
            }
            write_png(&png_path, w, h, rgb, files)
        })?;
        written.push(png_path);
    }
    if formats.wants("svg") {
        let svg_path = PathBuf::from(format!("{base}.svg"));
        let mut svg = String::new();
        {
            let root = svg_writer::SvgWriter::with_string(&mut svg, (w, h)).into_drawing_area();
            picture.draw(&root).map_err(BlockError::new)?;
            root.present().map_err(|e| BlockError::new(draw_err(e)))?;
        }
        let mut f = files.create(&svg_path).map_err(|e| file_err(&svg_path, e))?;
        std::io::Write::write_all(&mut f, svg.as_bytes()).map_err(|e| file_err(&svg_path, e))?;
        f.finish(files).map_err(|e| file_err(&svg_path, e))?;
        written.push(svg_path);
    }
    Ok(written)
}

fn write_png(path: &Path, w: u32, h: u32, rgb: &[u8], files: &FileStager) -> Result<(), BlockError> {
    let mut f = files.create(path).map_err(|e| file_err(path, e))?;
    {
        let mut encoder = png::Encoder::new(f.writer(), w, h);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        // Deflate was most of a picture's cost. Plots are mostly flat
        // colour, so the `Up` filter turns most rows into zeros and the
        // fastest deflate level packs them: on the four-lobe graph's six
        // pictures 3.2 x less encoding time than level 3 without filters,
        // files 1.3 x larger (the adaptive filter search or the ultra-fast
        // mode were quicker still but made files 2 to 5 x larger). The
        // deflate is zlib-rs (the workspace's `png` feature): level 1 there
        // took half the time of the default backend's on these pictures,
        // files 1.1 x larger.
        encoder.set_deflate_compression(png::DeflateCompression::Level(1));
        encoder.set_filter(png::Filter::Up);
        let enc_err = |e: png::EncodingError| BlockError::new(format!("cannot encode {}: {e}", path.display()));
        let mut writer = encoder.write_header().map_err(enc_err)?;
        writer.write_image_data(rgb).map_err(enc_err)?;
        writer.finish().map_err(enc_err)?;
    }
    f.finish(files).map_err(|e| file_err(path, e))
}

fn file_err(path: &Path, e: std::io::Error) -> BlockError {
    BlockError::new(format!("cannot write {}: {e}", path.display()))
}

/// Fill the background and draw a title line; returns the area below it.
pub fn frame<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    title: &str,
    subtitle: &str,
) -> Result<DrawingArea<DB, Shift>, String> {
    root.fill(&palette::PAPER).map_err(draw_err)?;
    root.draw(&Text::new(title.to_string(), (18, 12), text_style(22.0, palette::INK))).map_err(draw_err)?;
    root.draw(&Text::new(subtitle.to_string(), (18, 40), text_style(14.0, palette::MUTED))).map_err(draw_err)?;
    let (w, _) = root.dim_in_pixel();
    root.draw(&PathElement::new(vec![(18, 62), (w as i32 - 18, 62)], palette::GRID.stroke_width(2)))
        .map_err(draw_err)?;
    Ok(root.margin(68, 0, 0, 0))
}

/// A readable number of significant digits for axis-free readouts.
pub fn fmt_km(metres: f64) -> String {
    format!("{:.3} km", metres / 1e3)
}

/// Pad a (min, max) range so a flat series still gets a visible axis.
pub fn padded(lo: f64, hi: f64, frac: f64, min_span: f64) -> (f64, f64) {
    let (lo, hi) = if lo.is_finite() && hi.is_finite() && hi >= lo { (lo, hi) } else { (0.0, 1.0) };
    let span = (hi - lo).max(min_span);
    let mid = 0.5 * (lo + hi);
    (mid - 0.5 * span * (1.0 + 2.0 * frac), mid + 0.5 * span * (1.0 + 2.0 * frac))
}

/// A chart with f64 axes on both sides.
pub type Chart<'a, DB> = ChartContext<'a, DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// A chart in our style on `area`: panel ground, optional caption.
pub fn chart<'a, DB: DrawingBackend>(
    area: &'a DrawingArea<DB, Shift>,
    caption: &str,
    x: std::ops::Range<f64>,
    y: std::ops::Range<f64>,
) -> Result<Chart<'a, DB>, String> {
    let mut builder = ChartBuilder::on(area);
    builder.margin(14).x_label_area_size(44).y_label_area_size(70);
    if !caption.is_empty() {
        builder.caption(caption, text_style(17.0, palette::INK));
    }
    let chart = builder.build_cartesian_2d(x, y).map_err(draw_err)?;
    chart.plotting_area().fill(&palette::PANEL).map_err(draw_err)?;
    Ok(chart)
}

/// Grid, tick labels and axis titles (with units) in our style.
pub fn draw_mesh<DB: DrawingBackend>(chart: &mut Chart<'_, DB>, x_desc: &str, y_desc: &str) -> Result<(), String> {
    chart
        .configure_mesh()
        .bold_line_style(palette::GRID)
        .light_line_style(TRANSPARENT)
        .axis_style(palette::MUTED)
        .label_style(text_style(13.0, palette::INK))
        .axis_desc_style(text_style(14.0, palette::INK))
        .x_desc(x_desc)
        .y_desc(y_desc)
        .x_labels(10)
        .y_labels(8)
        .draw()
        .map_err(draw_err)
}

/// A small legend box of (colour, label) at the top-right corner of `area`,
/// `top` pixels down.
pub fn legend<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    top: i32,
    entries: &[(RGBColor, String)],
) -> Result<(), String> {
    let (w, _) = area.dim_in_pixel();
    legend_at(area, (w as i32 - legend_width(entries) - 24).max(4), top, entries)
}

/// The legend box at the top-left corner of `area`'s plot (past the axis
/// labels), for charts whose data leave that corner free.
pub fn legend_top_left<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    top: i32,
    entries: &[(RGBColor, String)],
) -> Result<(), String> {
    legend_at(area, 100, top, entries)
}

fn legend_width(entries: &[(RGBColor, String)]) -> i32 {
    let widest = entries.iter().map(|e| e.1.chars().count()).max().unwrap_or(0) as i32;
    46 + 7 * widest
}

fn legend_at<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    x0: i32,
    y0: i32,
    entries: &[(RGBColor, String)],
) -> Result<(), String> {
    let box_w = legend_width(entries);
    let h = 22 * entries.len() as i32 + 10;
    area.draw(&Rectangle::new([(x0, y0), (x0 + box_w, y0 + h)], palette::PANEL.filled())).map_err(draw_err)?;
    area.draw(&Rectangle::new([(x0, y0), (x0 + box_w, y0 + h)], palette::GRID.stroke_width(1))).map_err(draw_err)?;
    for (i, (colour, label)) in entries.iter().enumerate() {
        let y = y0 + 16 + 22 * i as i32;
        area.draw(&PathElement::new(vec![(x0 + 8, y), (x0 + 32, y)], colour.stroke_width(3))).map_err(draw_err)?;
        area.draw(&Text::new(label.clone(), (x0 + 40, y - 8), text_style(13.0, palette::INK))).map_err(draw_err)?;
    }
    Ok(())
}
