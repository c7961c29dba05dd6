//! Polygon filling as plotters' rasterizer does it (`plotters-backend`
//! 0.3 `rasterizer::fill_polygon`), step for step and call for call, so
//! the pixels are the same, without its per-scanline allocations and
//! re-computed edge positions. Wide lines and wide paths are polygons, so
//! this is where most of a chart's line drawing goes. The algorithm is
//! adapted from plotters-backend (MIT licence, copyright the plotters
//! developers), a dependency of this crate, so that its pixels are kept.
//!
//! The scan runs along the polygon's longer side ("master" axis); each
//! edge crossing a scanline has a position on the other ("slave") axis.
//! Edges are ordered by that position and taken in pairs: the span
//! between them is drawn as a line and each end gets one pixel with the
//! fractional coverage.

use plotters_backend::{BackendCoord, BackendStyle, DrawingBackend, DrawingErrorKind};

/// An edge as the scan meets it: `epoch` scanlines of `total_epoch` past
/// its start, its slave coordinate going from `slave_begin` to `slave_end`.
#[derive(Clone, Copy)]
struct Edge {
    epoch: u32,
    total_epoch: u32,
    slave_begin: i32,
    slave_end: i32,
    /// The slave position at the current epoch, as the rasterizer computes it.
    slave_pos: f64,
}

impl Edge {
    /// An edge from `from` to `to` in (master, slave) order; none when it
    /// lies along a scanline.
    fn new(mut from: BackendCoord, mut to: BackendCoord) -> Option<Edge> {
        if from.0 == to.0 {
            return None;
        }
        if from.0 > to.0 {
            std::mem::swap(&mut from, &mut to);
        }
        let mut edge = Edge {
            epoch: 0,
            total_epoch: (to.0 - from.0) as u32,
            slave_begin: from.1,
            slave_end: to.1,
            slave_pos: 0.0,
        };
        edge.slave_pos = edge.position();
        Some(edge)
    }

    /// Scanlines left before the edge ends.
    fn master_pos(&self) -> i32 {
        (self.total_epoch - self.epoch) as i32
    }

    fn step(&mut self) {
        self.epoch += 1;
        self.slave_pos = self.position();
    }

    fn position(&self) -> f64 {
        f64::from(self.slave_begin)
            + (i64::from(self.slave_end - self.slave_begin) * i64::from(self.epoch)) as f64
                / f64::from(self.total_epoch)
    }
}

/// Fill the polygon through `vertices` on `back` with `style`, drawing
/// exactly what `plotters_backend::rasterizer::fill_polygon` draws, through
/// the same backend calls in the same order.
pub fn fill_polygon<DB: DrawingBackend, S: BackendStyle>(
    back: &mut DB,
    vertices: &[BackendCoord],
    style: &S,
) -> Result<(), DrawingErrorKind<DB::ErrorType>> {
    let Some(&first) = vertices.first() else {
        return Ok(());
    };
    let (mut x_span, mut y_span) = ((first.0, first.0), (first.1, first.1));
    for &(x, y) in vertices {
        x_span = (x_span.0.min(x), x_span.1.max(x));
        y_span = (y_span.0.min(y), y_span.1.max(y));
    }
    // All the points on one level or upright line.
    if x_span.0 == x_span.1 || y_span.0 == y_span.1 {
        return back.draw_line((x_span.0, y_span.0), (x_span.1, y_span.1), style);
    }
    let horizontal_sweep = x_span.1 - x_span.0 > y_span.1 - y_span.0;
    // Points as (master, slave).
    let oriented = |p: BackendCoord| if horizontal_sweep { p } else { (p.1, p.0) };
    let mut edges: Vec<(BackendCoord, BackendCoord)> =
        vertices.iter().zip(vertices.iter().cycle().skip(1)).map(|(&a, &b)| (oriented(a), oriented(b))).collect();
    // Stable, by the edge's lower master coordinate, as the rasterizer sorts.
    edges.sort_by_key(|(a, b)| a.0.min(b.0));
    for edge in &mut edges {
        if edge.0.0 > edge.1.0 {
            std::mem::swap(&mut edge.0, &mut edge.1);
        }
    }
    let (low, high) = if horizontal_sweep { x_span } else { y_span };
    let colour = style.color();
    let mut next_edge = 0;
    let mut active: Vec<Edge> = Vec::new();
    for sweep_line in low..=high {
        active.retain_mut(|e| {
            let going = e.master_pos() > 0;
            if going {
                e.step();
            }
            going
        });
        while next_edge < edges.len() && edges[next_edge].0.0 <= sweep_line {
            active.extend(Edge::new(edges[next_edge].0, edges[next_edge].1));
            next_edge += 1;
        }
        // Stable, as the rasterizer's `sort` of its edges by position.
        active.sort_by(|a, b| a.slave_pos.partial_cmp(&b.slave_pos).expect("edge positions are finite"));
        let mut pair: (Option<Edge>, Option<Edge>) = (None, None);
        for &edge in &active {
            if pair.0.is_none() {
                pair.0 = Some(edge);
            } else if pair.1.is_none() {
                pair.1 = Some(edge);
            }
            let (Some(a), Some(b)) = pair else { continue };
            let (a_ends, b_ends) = (a.master_pos() == 0, b.master_pos() == 0);
            if a_ends != b_ends {
                // Keep the one still going as the first of the next pair.
                pair = (Some(if a_ends { b } else { a }), None);
                continue;
            }
            let (from, to) = (a.slave_pos, b.slave_pos);
            pair = (None, None);
            if a_ends && b_ends && to - from > 1.0 {
                continue;
            }
            span(back, sweep_line, (from, to), horizontal_sweep, colour)?;
        }
    }
    Ok(())
}

/// One pair's span on a scanline and its two end pixels, as the
/// rasterizer draws them (the far end pixel of a vertical sweep gets a
/// coverage of zero or less there, so it draws nothing; kept for the same
/// calls).
fn span<DB: DrawingBackend>(
    back: &mut DB,
    sweep_line: i32,
    (from, to): (f64, f64),
    horizontal_sweep: bool,
    colour: plotters_backend::BackendColor,
) -> Result<(), DrawingErrorKind<DB::ErrorType>> {
    if horizontal_sweep {
        back.draw_line((sweep_line, from.ceil() as i32), (sweep_line, to.floor() as i32), &colour)?;
        back.draw_pixel((sweep_line, from.floor() as i32), colour.mix(from.ceil() - from))?;
        back.draw_pixel((sweep_line, to.ceil() as i32), colour.mix(to - to.floor()))
    } else {
        back.draw_line((from.ceil() as i32, sweep_line), (to.floor() as i32, sweep_line), &colour)?;
        back.draw_pixel((from.floor() as i32, sweep_line), colour.mix(from.ceil() - from))?;
        back.draw_pixel((to.ceil() as i32, sweep_line), colour.mix(to.floor() - to))
    }
}
