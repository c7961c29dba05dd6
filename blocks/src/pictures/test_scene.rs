//! One scene for the tests of both halves of a picture: every kind of
//! drawing the picture blocks make, drawn through any backend, so ours can
//! be compared with plotters' own.

use crate::pictures::{palette, text_style};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::FontTransform;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// The size the scene is drawn for; parts of it fall outside.
pub const SIZE: (u32, u32) = (320, 200);

/// The scene, on `background` or not; `sparse` draws only a few rows, so
/// the rows left to the background matter.
pub fn scene<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, background: bool, sparse: bool) {
    if background {
        root.fill(&palette::PAPER).unwrap();
    }
    if sparse {
        // A few rows drawn on, the rest left to the background: each
        // drawing's first and last rows matter.
        root.draw(&PathElement::new(vec![(3, 2), (3, 5)], palette::INK.stroke_width(1))).unwrap();
        root.draw(&PathElement::new(vec![(10, 40), (60, 40)], palette::ALERT.mix(0.5).stroke_width(1))).unwrap();
        root.draw(&Rectangle::new([(100, 80), (140, 84)], palette::BAND.mix(0.3).filled())).unwrap();
        root.draw(&Pixel::new((200, 150), palette::TRACE)).unwrap();
        return;
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
    let translucent = palette::TRACE.mix(0.5);
    let faint = text_style(15.0, palette::INK).color(&translucent);
    root.draw(&Text::new("translucent text".to_string(), (170, 40), faint)).unwrap();
    lines(root);
    shapes(root);
}

/// Lines of every kind the backend tells apart: level and upright ones
/// of one pixel (drawn either way, opaque or not), sloped ones steep and
/// shallow in all four directions, wide ones, and ones leaving the image.
fn lines<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>) {
    let centre = (160, 100);
    for (i, angle) in (0..24).map(|k| (k, k as f64 * std::f64::consts::PI / 12.0 + 0.05)) {
        let r = 30.0 + 4.0 * i as f64;
        let end = (centre.0 + (r * angle.cos()) as i32, centre.1 + (r * angle.sin()) as i32);
        let colour = palette::lobe(i).mix(if i % 3 == 0 { 0.6 } else { 1.0 });
        let width = [1, 1, 2, 3][i % 4];
        root.draw(&PathElement::new(vec![centre, end], colour.stroke_width(width))).unwrap();
    }
    let level_and_upright = [((40, 30), (90, 30)), ((90, 34), (40, 34)), ((70, 10), (70, 80)), ((74, 80), (74, 10))];
    for (k, &(a, b)) in level_and_upright.iter().enumerate() {
        let colour = if k % 2 == 0 { palette::ALERT.mix(1.0) } else { palette::TRACE.mix(0.35) };
        root.draw(&PathElement::new(vec![a, b], colour.stroke_width(1))).unwrap();
        let moved = |p: (i32, i32)| (p.0 + 200, p.1 + 100);
        root.draw(&PathElement::new(vec![moved(a), moved(b)], colour.stroke_width(1))).unwrap();
    }
    // Leaving the image on every side, and wholly outside it.
    let leaving = [((-40, 20), (60, -30)), ((300, 150), (360, 260)), ((10, -5), (10, 250)), ((-20, 190), (400, 190))];
    for &(a, b) in &leaving {
        root.draw(&PathElement::new(vec![a, b], palette::INK.stroke_width(1))).unwrap();
        root.draw(&PathElement::new(vec![(a.0 + 3, a.1 + 4), (b.0 + 3, b.1 + 4)], palette::GATE.stroke_width(3)))
            .unwrap();
    }
    root.draw(&PathElement::new(vec![(-50, -50), (-10, -80)], palette::INK.stroke_width(1))).unwrap();
    let zigzag: Vec<(i32, i32)> = (0..40).map(|i| (8 * i - 10, 120 + if i % 2 == 0 { 0 } else { 9 + i % 5 })).collect();
    root.draw(&PathElement::new(zigzag.clone(), palette::FLAG_EDGE.stroke_width(1))).unwrap();
    let lower: Vec<(i32, i32)> = zigzag.iter().map(|p| (p.0, p.1 + 30)).collect();
    root.draw(&PathElement::new(lower, palette::lobe(2).mix(0.7).stroke_width(2))).unwrap();
}

/// Filled and outlined shapes, translucent and opaque, some clipped.
fn shapes<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>) {
    let concave = vec![(200, 20), (260, 60), (230, 70), (290, 130), (210, 110), (180, 150)];
    root.draw(&Polygon::new(concave, palette::BAND.mix(0.7).filled())).unwrap();
    let clipped = vec![(280, 150), (340, 170), (330, 230), (260, 215)];
    root.draw(&Polygon::new(clipped, palette::GATE.filled())).unwrap();
    let tall = vec![(100, 130), (112, 198), (92, 205)];
    root.draw(&Polygon::new(tall, palette::ALERT.mix(0.4).filled())).unwrap();
    root.draw(&Rectangle::new([(150, 160), (190, 190)], palette::FLAG_EDGE.mix(0.5).stroke_width(1))).unwrap();
    for (k, &(x, y)) in [(40, 100), (120, 40), (318, 90), (5, 195), (250, 100)].iter().enumerate() {
        let colour = palette::lobe(k).mix([1.0, 0.55, 0.3][k % 3]);
        root.draw(&Circle::new((x, y), 2 + 3 * k as u32, colour.filled())).unwrap();
        root.draw(&Circle::new((x + 6, y + 4), 4 + 2 * k as u32, colour.stroke_width(1))).unwrap();
    }
    // Markers of one kind again and again (drawn from one stamp), some
    // cut by the edges; outlines thin and wide.
    for k in 0..14 {
        let at = (-3 + 26 * k, 198 - 15 * k);
        root.draw(&Circle::new(at, 2, palette::INK.mix(0.55).filled())).unwrap();
        root.draw(&Circle::new((at.0 + 4, at.1), 3, palette::ALERT.stroke_width(1))).unwrap();
        root.draw(&Circle::new((at.0, at.1 + 9), 5, palette::TRACE.mix(0.8).stroke_width(3))).unwrap();
    }
    for (k, &(x, y)) in [(0, 0), (319, 199), (-1, 5), (320, 5), (100, 200), (60, 70)].iter().enumerate() {
        root.draw(&Pixel::new((x, y), palette::INK.mix([1.0, 0.99, 0.5, 0.003][k % 4]))).unwrap();
    }
}
