//! The SVG half of a picture: the markup of plotters' SVG backend, byte for
//! byte, written straight into the string.
//!
//! Plotters' backend formats every attribute of every element into a string
//! of its own before copying it out: seven or eight allocations per circle,
//! line or point of a polyline's list. A picture of thousands of operating
//! points spent most of its SVG time there. [`SvgWriter`] writes the same
//! elements, attributes, number formats and escapes in the same order with
//! `write!` into the one output string; a test draws a scene with both and
//! compares the text.

use plotters_backend::text_anchor::{HPos, VPos};
use plotters_backend::{
    BackendColor, BackendCoord, BackendStyle, BackendTextStyle, DrawingBackend, DrawingErrorKind, FontStyle,
    FontTransform,
};
use std::fmt::Write as _;

type SvgError = DrawingErrorKind<std::io::Error>;

/// An SVG document of `size` pixels written into a string.
pub struct SvgWriter<'a> {
    buf: &'a mut String,
    size: (u32, u32),
    /// Whether the closing `</svg>` is written (every other element is
    /// closed where it is opened).
    closed: bool,
}

impl<'a> SvgWriter<'a> {
    /// Start the document in `buf`.
    pub fn with_string(buf: &'a mut String, size: (u32, u32)) -> Self {
        let (w, h) = size;
        // Writing into a String cannot fail.
        let _ = writeln!(
            buf,
            "<svg width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" xmlns=\"http://www.w3.org/2000/svg\">"
        );
        SvgWriter { buf, size, closed: false }
    }

    /// `value` with the five markup characters escaped.
    fn push_escaped(&mut self, value: &str) {
        for c in value.chars() {
            match c {
                '<' => self.buf.push_str("&lt;"),
                '>' => self.buf.push_str("&gt;"),
                '&' => self.buf.push_str("&amp;"),
                '"' => self.buf.push_str("&quot;"),
                '\'' => self.buf.push_str("&apos;"),
                other => self.buf.push(other),
            }
        }
    }

    /// ` opacity="A"`, as plotters formats an alpha.
    fn opacity(&mut self, color: BackendColor) {
        let _ = write!(self.buf, " opacity=\"{}\"", color.alpha);
    }

    /// ` name="#RRGGBB"`.
    fn colour(&mut self, name: &str, color: BackendColor) {
        let (r, g, b) = color.rgb;
        let _ = write!(self.buf, " {name}=\"#{r:02X}{g:02X}{b:02X}\"");
    }

    /// ` fill="#C" stroke="none"` for a filled shape, else the other way.
    fn fill_or_stroke(&mut self, color: BackendColor, fill: bool) {
        if fill {
            self.colour("fill", color);
            self.buf.push_str(" stroke=\"none\"");
        } else {
            self.buf.push_str(" fill=\"none\"");
            self.colour("stroke", color);
        }
    }

    /// A polyline or polygon: `open`, the opacity, the colour as
    /// `colour_attr`, the stroke width if any, then ` points="x,y x,y "`.
    /// Nothing for a transparent colour.
    fn points_element(
        &mut self,
        open: &str,
        colour_attr: &str,
        color: BackendColor,
        width: Option<u32>,
        path: impl IntoIterator<Item = BackendCoord>,
    ) {
        if color.alpha == 0.0 {
            return;
        }
        self.buf.push_str(open);
        self.opacity(color);
        self.colour(colour_attr, color);
        if let Some(width) = width {
            let _ = write!(self.buf, " stroke-width=\"{width}\"");
        }
        self.buf.push_str(" points=\"");
        for (x, y) in path {
            let _ = write!(self.buf, "{x},{y} ");
        }
        self.buf.push_str("\"/>\n");
    }
}

impl DrawingBackend for SvgWriter<'_> {
    type ErrorType = std::io::Error;

    fn get_size(&self) -> (u32, u32) {
        self.size
    }

    fn ensure_prepared(&mut self) -> Result<(), SvgError> {
        Ok(())
    }

    fn present(&mut self) -> Result<(), SvgError> {
        if !self.closed {
            self.buf.push_str("</svg>\n");
            self.closed = true;
        }
        Ok(())
    }

    fn draw_pixel(&mut self, (x, y): BackendCoord, color: BackendColor) -> Result<(), SvgError> {
        if color.alpha == 0.0 {
            return Ok(());
        }
        let _ = write!(self.buf, "<rect x=\"{x}\" y=\"{y}\" width=\"1\" height=\"1\" stroke=\"none\"");
        self.opacity(color);
        self.colour("fill", color);
        self.buf.push_str("/>\n");
        Ok(())
    }

    fn draw_line<S: BackendStyle>(&mut self, from: BackendCoord, to: BackendCoord, style: &S) -> Result<(), SvgError> {
        let color = style.color();
        if color.alpha == 0.0 {
            return Ok(());
        }
        self.buf.push_str("<line");
        self.opacity(color);
        self.colour("stroke", color);
        let _ = writeln!(
            self.buf,
            " stroke-width=\"{}\" x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\"/>",
            style.stroke_width(),
            from.0,
            from.1,
            to.0,
            to.1
        );
        Ok(())
    }

    fn draw_rect<S: BackendStyle>(
        &mut self,
        upper_left: BackendCoord,
        bottom_right: BackendCoord,
        style: &S,
        fill: bool,
    ) -> Result<(), SvgError> {
        let color = style.color();
        if color.alpha == 0.0 {
            return Ok(());
        }
        let _ = write!(
            self.buf,
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"",
            upper_left.0,
            upper_left.1,
            bottom_right.0 - upper_left.0,
            bottom_right.1 - upper_left.1
        );
        self.opacity(color);
        self.fill_or_stroke(color, fill);
        self.buf.push_str("/>\n");
        Ok(())
    }

    fn draw_path<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        path: I,
        style: &S,
    ) -> Result<(), SvgError> {
        self.points_element("<polyline fill=\"none\"", "stroke", style.color(), Some(style.stroke_width()), path);
        Ok(())
    }

    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        path: I,
        style: &S,
    ) -> Result<(), SvgError> {
        self.points_element("<polygon", "fill", style.color(), None, path);
        Ok(())
    }

    fn draw_circle<S: BackendStyle>(
        &mut self,
        (x, y): BackendCoord,
        radius: u32,
        style: &S,
        fill: bool,
    ) -> Result<(), SvgError> {
        let color = style.color();
        if color.alpha == 0.0 {
            return Ok(());
        }
        let _ = write!(self.buf, "<circle cx=\"{x}\" cy=\"{y}\" r=\"{radius}\"");
        self.opacity(color);
        self.fill_or_stroke(color, fill);
        let _ = writeln!(self.buf, " stroke-width=\"{}\"/>", style.stroke_width());
        Ok(())
    }

    fn draw_text<S: BackendTextStyle>(&mut self, text: &str, style: &S, (x, y): BackendCoord) -> Result<(), SvgError> {
        let color = style.color();
        if color.alpha == 0.0 {
            return Ok(());
        }
        let anchor = match style.anchor().h_pos {
            HPos::Left => "start",
            HPos::Right => "end",
            HPos::Center => "middle",
        };
        let dy = match style.anchor().v_pos {
            VPos::Top => "0.76em",
            VPos::Center => "0.5ex",
            VPos::Bottom => "-0.5ex",
        };
        let _ = write!(self.buf, "<text x=\"{x}\" y=\"{y}\" dy=\"{dy}\" text-anchor=\"{anchor}\" font-family=\"");
        self.push_escaped(style.family().as_str());
        let _ = write!(self.buf, "\" font-size=\"{}\"", style.size() / 1.24);
        self.opacity(color);
        self.colour("fill", color);
        match style.style() {
            FontStyle::Normal => {}
            FontStyle::Bold => self.buf.push_str(" font-weight=\"bold\""),
            other => {
                self.buf.push_str(" font-style=\"");
                self.push_escaped(other.as_str());
                self.buf.push('"');
            }
        }
        let turn = match style.transform() {
            FontTransform::Rotate90 => Some(90),
            FontTransform::Rotate180 => Some(180),
            FontTransform::Rotate270 => Some(270),
            _ => None,
        };
        if let Some(degrees) = turn {
            let _ = write!(self.buf, " transform=\"rotate({degrees}, {x}, {y})\"");
        }
        self.buf.push_str(">\n");
        self.push_escaped(text);
        self.buf.push_str("\n</text>\n");
        Ok(())
    }
}

/// Closed when dropped, as plotters' backend is.
impl Drop for SvgWriter<'_> {
    fn drop(&mut self) {
        let _ = self.present();
    }
}

#[cfg(test)]
mod tests {
    use super::SvgWriter;
    use crate::pictures::test_scene::{SIZE, scene};
    use crate::pictures::{FONT, ensure_font};
    use plotters::prelude::*;
    use plotters::style::FontStyle;

    #[test]
    fn markup_equals_the_svg_backends() {
        ensure_font().unwrap();
        for (background, sparse) in [(true, false), (false, false), (true, true)] {
            let mut expected = String::new();
            {
                let root = SVGBackend::with_string(&mut expected, SIZE).into_drawing_area();
                scene(&root, background, sparse);
                root.present().unwrap();
            }
            let mut got = String::new();
            {
                let root = SvgWriter::with_string(&mut got, SIZE).into_drawing_area();
                scene(&root, background, sparse);
                root.present().unwrap();
            }
            assert!(expected.len() > 200, "{expected}");
            assert_eq!(got, expected, "background {background}, sparse {sparse}");
        }
    }

    #[test]
    fn escapes_styles_and_an_unpresented_document_match_too() {
        ensure_font().unwrap();
        let draw = |root_svg: &mut String, ours: bool| {
            let words = "a <b> & \"c\" 'd'".to_string();
            let styled = |style| TextStyle::from((FONT, 12.0).into_font().style(style)).color(&RGBColor(1, 2, 3));
            let (bold, oblique) = (styled(FontStyle::Bold), styled(FontStyle::Oblique));
            if ours {
                let root = SvgWriter::with_string(root_svg, SIZE).into_drawing_area();
                root.draw(&Text::new(words.clone(), (5, 5), bold)).unwrap();
                root.draw(&Text::new(words, (5, 25), oblique)).unwrap();
                root.draw(&Pixel::new((3, 4), RGBColor(9, 8, 7).mix(0.25))).unwrap();
            } else {
                let root = SVGBackend::with_string(root_svg, SIZE).into_drawing_area();
                root.draw(&Text::new(words.clone(), (5, 5), bold)).unwrap();
                root.draw(&Text::new(words, (5, 25), oblique)).unwrap();
                root.draw(&Pixel::new((3, 4), RGBColor(9, 8, 7).mix(0.25))).unwrap();
            }
        };
        let (mut expected, mut got) = (String::new(), String::new());
        draw(&mut expected, false);
        draw(&mut got, true);
        assert!(expected.contains("&lt;b&gt; &amp; &quot;c&quot; &apos;d&apos;"), "{expected}");
        assert_eq!(got, expected);
    }
}
