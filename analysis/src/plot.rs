//! Plots as PNG and SVG: line charts (time courses, profiles, coverage curves) and field slices
//! with a colour bar, a scale bar and units.
//!
//! Text in PNG files is drawn with DejaVu Sans, embedded in the crate (`analysis/fonts/`, with
//! its licence), so no system font is needed. SVG files name the `sans-serif` family and leave
//! the drawing of text to the viewer. Fields are coloured with cividis ([`crate::colour`]),
//! lines with the Okabe-Ito palette.

use std::sync::Once;

use plotters::coord::Shift;
use plotters::coord::ranged1d::{AsRangedCoord, Ranged, ValueFormatter};
use plotters::prelude::*;

use crate::colour::{cividis, line};
use crate::error::{AnalysisError, Result};

/// DejaVu Sans (Bitstream Vera licence with DejaVu changes in the public domain).
static FONT: &[u8] = include_bytes!("../fonts/DejaVuSans.ttf");
const FAMILY: &str = "sans-serif";

fn register_font() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        // The embedded file is a valid font; a failure would only leave text undrawn.
        let _ = plotters::style::register_font(FAMILY, FontStyle::Normal, FONT);
    });
}

/// Default size of a chart, pixels.
pub const SIZE: (u32, u32) = (800, 500);

/// One line of a chart.
#[derive(Debug, Clone, PartialEq)]
pub struct Line {
    /// Legend entry.
    pub label: String,
    /// Points (x, y) in the chart's display units; non-finite points are left out.
    pub points: Vec<(f64, f64)>,
    /// Colour number in the palette.
    pub colour: usize,
}

/// A line chart.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct LineChart {
    /// Title above the chart.
    pub title: String,
    /// X axis label, with units.
    pub x_label: String,
    /// Y axis label, with units.
    pub y_label: String,
    /// Lines.
    pub lines: Vec<Line>,
    /// Logarithmic x axis (points with x <= 0 are left out).
    pub log_x: bool,
}

/// A 2D slice of a lattice field.
#[derive(Debug, Clone, PartialEq)]
pub struct Slice {
    /// Title above the image.
    pub title: String,
    /// Colour bar label, with units.
    pub value_label: String,
    /// Cells along the horizontal axis.
    pub nu: usize,
    /// Cells along the vertical axis.
    pub nv: usize,
    /// Values, horizontal index fastest, row 0 at the bottom.
    pub values: Vec<f64>,
    /// Coordinate of the lower-left corner, m.
    pub corner_m: (f64, f64),
    /// Edge of one cell, m.
    pub cell_m: f64,
    /// Horizontal axis name ("x").
    pub u_name: String,
    /// Vertical axis name ("y").
    pub v_name: String,
}

impl Slice {
    /// Averages blocks of `f x f` cells (partial blocks at the edges average what they hold).
    pub fn coarsened(&self, f: usize) -> Slice {
        if f <= 1 {
            return self.clone();
        }
        let (nu, nv) = (self.nu.div_ceil(f), self.nv.div_ceil(f));
        let mut values = vec![0.0; nu * nv];
        let mut count = vec![0usize; nu * nv];
        for v in 0..self.nv {
            for u in 0..self.nu {
                let x = self.values[u + self.nu * v];
                if x.is_finite() {
                    let i = u / f + nu * (v / f);
                    values[i] += x;
                    count[i] += 1;
                }
            }
        }
        for (v, c) in values.iter_mut().zip(&count) {
            *v = if *c > 0 { *v / *c as f64 } else { f64::NAN };
        }
        Slice { nu, nv, values, cell_m: self.cell_m * f as f64, ..self.clone() }
    }
}

fn plot_err<E: std::error::Error>(what: &str) -> impl FnOnce(E) -> AnalysisError + '_ {
    move |e| AnalysisError::Plot { what: what.to_string(), reason: e.to_string() }
}

/// Tick labels: plain decimals between 0.01 and 10^4, otherwise scientific.
pub fn fmt_tick(v: f64) -> String {
    let a = v.abs();
    if v == 0.0 {
        "0".into()
    } else if !(1e-2..1e4).contains(&a) {
        let s = format!("{v:.1e}");
        s.replace(".0e", "e")
    } else {
        let s = format!("{v:.3}");
        let s = s.trim_end_matches('0').trim_end_matches('.');
        s.to_string()
    }
}

/// Range of finite values, widened when empty or flat.
fn range(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values.filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    if hi <= lo {
        let pad = if lo == 0.0 { 1.0 } else { lo.abs() * 0.1 };
        return (lo - pad, hi + pad);
    }
    (lo, hi)
}

fn rgb(c: [u8; 3]) -> RGBColor {
    RGBColor(c[0], c[1], c[2])
}

/// Draws a line chart on any backend.
fn draw_lines<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, chart: &LineChart) -> Result<()> {
    let e = || plot_err::<DrawingAreaErrorKind<DB::ErrorType>>("a line chart");
    root.fill(&WHITE).map_err(e())?;
    let keep = |p: &&(f64, f64)| p.0.is_finite() && p.1.is_finite() && (!chart.log_x || p.0 > 0.0);
    let pts = || chart.lines.iter().flat_map(|l| l.points.iter().filter(keep));
    let (x0, x1) = range(pts().map(|p| p.0));
    let (y0, y1) = range(pts().map(|p| p.1));
    let (y0, y1) = (y0.min(0.0f64.max(y0 - (y1 - y0) * 0.05)), y1 + (y1 - y0) * 0.05);
    if chart.log_x {
        let (x0, x1) = if x1 > x0 * 1.0001 { (x0, x1) } else { (x0 * 0.5, x1 * 2.0) };
        finish_lines(root, chart, (x0..x1).log_scale(), y0..y1, keep)
    } else {
        finish_lines(root, chart, x0..x1, y0..y1, keep)
    }
}

fn finish_lines<DB: DrawingBackend, X>(
    root: &DrawingArea<DB, Shift>,
    chart: &LineChart,
    xr: X,
    yr: std::ops::Range<f64>,
    keep: impl Fn(&&(f64, f64)) -> bool,
) -> Result<()>
where
    X: AsRangedCoord<Value = f64>,
    X::CoordDescType: Ranged<ValueType = f64> + ValueFormatter<f64>,
{
    let e = || plot_err::<DrawingAreaErrorKind<DB::ErrorType>>("a line chart");
    let mut c = ChartBuilder::on(root)
        .caption(&chart.title, (FAMILY, 22))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(84)
        .build_cartesian_2d(xr, yr)
        .map_err(e())?;
    c.configure_mesh()
        .x_desc(chart.x_label.as_str())
        .y_desc(chart.y_label.as_str())
        .x_label_formatter(&|v| fmt_tick(*v))
        .y_label_formatter(&|v| fmt_tick(*v))
        .label_style((FAMILY, 14))
        .axis_desc_style((FAMILY, 16))
        .light_line_style(RGBColor(235, 235, 235))
        .draw()
        .map_err(e())?;
    let mut labelled = false;
    for l in &chart.lines {
        let colour = rgb(line(l.colour));
        let style = ShapeStyle { color: colour.to_rgba(), filled: false, stroke_width: 2 };
        let pts: Vec<(f64, f64)> = l.points.iter().filter(|p| keep(p)).copied().collect();
        if pts.is_empty() {
            continue;
        }
        let single = pts.len() == 1;
        let series = c.draw_series(LineSeries::new(pts.clone(), style)).map_err(e())?;
        if !l.label.is_empty() {
            labelled = true;
            series.label(l.label.as_str()).legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 22, y)], style));
        }
        if single {
            c.draw_series(pts.iter().map(|&p| Circle::new(p, 4, colour.filled()))).map_err(e())?;
        }
    }
    if labelled {
        c.configure_series_labels()
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .label_font((FAMILY, 14))
            .position(SeriesLabelPosition::UpperRight)
            .draw()
            .map_err(e())?;
    }
    if chart.lines.iter().all(|l| l.points.iter().filter(|p| keep(p)).count() == 0) {
        let (w, h) = root.dim_in_pixel();
        root.draw(&Text::new("no data", (w as i32 / 2 - 30, h as i32 / 2), (FAMILY, 20).into_font().color(&BLACK)))
            .map_err(e())?;
    }
    root.present().map_err(e())?;
    Ok(())
}

/// A "nice" length (1, 2 or 5 times a power of ten) close to `x`, not above it.
pub fn nice_length(x: f64) -> f64 {
    if !(x > 0.0 && x.is_finite()) {
        return 1.0;
    }
    let p = 10f64.powf(x.log10().floor());
    let m = x / p;
    let n = if m >= 5.0 {
        5.0
    } else if m >= 2.0 {
        2.0
    } else {
        1.0
    };
    n * p
}

/// A length for a scale bar label: um below 1 mm, mm above.
pub fn fmt_length(m: f64) -> String {
    if m >= 1e-3 { format!("{} mm", fmt_tick(m * 1e3)) } else { format!("{} µm", fmt_tick(m * 1e6)) }
}

/// Draws a field slice on any backend.
fn draw_slice<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, s: &Slice) -> Result<()> {
    let e = || plot_err::<DrawingAreaErrorKind<DB::ErrorType>>("a field slice");
    root.fill(&WHITE).map_err(e())?;
    let (w, h) = root.dim_in_pixel();
    let (bar_w, ylab, xlab, cap, margin) = (150u32, 70u32, 50u32, 40u32, 12u32);
    let avail_w = w.saturating_sub(bar_w + ylab + 2 * margin).max(10) as f64;
    let avail_h = h.saturating_sub(xlab + cap + 2 * margin).max(10) as f64;
    let scale = (avail_w / s.nu.max(1) as f64).min(avail_h / s.nv.max(1) as f64);
    let left_w = (s.nu as f64 * scale).round() as u32 + ylab + 2 * margin;
    let (left, rest) = root.split_horizontally(left_w.min(w.saturating_sub(bar_w)));
    let (right, _) = rest.split_horizontally(bar_w);
    let um = 1e6;
    let (u0, v0) = (s.corner_m.0 * um, s.corner_m.1 * um);
    let (u1, v1) = (u0 + s.nu as f64 * s.cell_m * um, v0 + s.nv as f64 * s.cell_m * um);
    let (lo, hi) = range(s.values.iter().copied());
    let mut c = ChartBuilder::on(&left)
        .caption(&s.title, (FAMILY, 20))
        .margin(margin)
        .x_label_area_size(xlab)
        .y_label_area_size(ylab)
        .build_cartesian_2d(u0..u1, v0..v1)
        .map_err(e())?;
    c.configure_mesh()
        .disable_mesh()
        .x_desc(format!("{} (µm)", s.u_name))
        .y_desc(format!("{} (µm)", s.v_name))
        .x_label_formatter(&|v| fmt_tick(*v))
        .y_label_formatter(&|v| fmt_tick(*v))
        .label_style((FAMILY, 13))
        .axis_desc_style((FAMILY, 15))
        .x_labels(6)
        .y_labels(6)
        .draw()
        .map_err(e())?;
    let d = s.cell_m * um;
    c.draw_series((0..s.nv).flat_map(|v| {
        (0..s.nu).map(move |u| {
            let x = s.values[u + s.nu * v];
            let col = rgb(cividis((x - lo) / (hi - lo)));
            let (a, b) = (u0 + u as f64 * d, v0 + v as f64 * d);
            Rectangle::new([(a, b), (a + d, b + d)], col.filled())
        })
    }))
    .map_err(e())?;
    // Scale bar: about a fifth of the width, bottom left, on a white box.
    let len = nice_length((u1 - u0) / 5.0 / um) * um;
    let (bx, by) = (u0 + (u1 - u0) * 0.04, v0 + (v1 - v0) * 0.05);
    let bh = (v1 - v0) * 0.012;
    c.draw_series(std::iter::once(Rectangle::new(
        [(bx - (u1 - u0) * 0.015, by - (v1 - v0) * 0.03), (bx + len + (u1 - u0) * 0.015, by + (v1 - v0) * 0.11)],
        WHITE.mix(0.85).filled(),
    )))
    .map_err(e())?;
    c.draw_series(std::iter::once(Rectangle::new([(bx, by), (bx + len, by + bh)], BLACK.filled()))).map_err(e())?;
    c.draw_series(std::iter::once(Text::new(
        fmt_length(len / um),
        (bx, by + (v1 - v0) * 0.085),
        (FAMILY, 14).into_font().color(&BLACK),
    )))
    .map_err(e())?;

    // Colour bar with the value axis and its units.
    let mut cb = ChartBuilder::on(&right)
        .margin_top(cap + margin)
        .margin_bottom(xlab + margin)
        .margin_left(6)
        .margin_right(2)
        .set_label_area_size(LabelAreaPosition::Right, 96)
        .build_cartesian_2d(0.0..1.0, lo..hi)
        .map_err(e())?;
    cb.configure_mesh()
        .disable_mesh()
        .disable_x_axis()
        .set_tick_mark_size(LabelAreaPosition::Right, 6)
        .y_desc(s.value_label.as_str())
        .y_label_formatter(&|v| fmt_tick(*v))
        .label_style((FAMILY, 13))
        .axis_desc_style((FAMILY, 14))
        .y_labels(6)
        .draw()
        .map_err(e())?;
    let n = 128;
    cb.draw_series((0..n).map(|i| {
        let (a, b) = (lo + (hi - lo) * i as f64 / n as f64, lo + (hi - lo) * (i + 1) as f64 / n as f64);
        Rectangle::new([(0.0, a), (1.0, b)], rgb(cividis((i as f64 + 0.5) / n as f64)).filled())
    }))
    .map_err(e())?;
    root.present().map_err(e())?;
    Ok(())
}

/// Encodes an RGB buffer as PNG.
pub fn encode_png(rgb: &[u8], (w, h): (u32, u32)) -> Result<Vec<u8>> {
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w, h);
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
        let mut wr = enc.write_header().map_err(plot_err("a PNG header"))?;
        wr.write_image_data(rgb).map_err(plot_err("PNG image data"))?;
        wr.finish().map_err(plot_err("a PNG file"))?;
    }
    Ok(out)
}

fn png_of(
    size: (u32, u32),
    draw: impl FnOnce(&DrawingArea<BitMapBackend<'_>, Shift>) -> Result<()>,
) -> Result<Vec<u8>> {
    register_font();
    let mut buf = vec![255u8; size.0 as usize * size.1 as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, size).into_drawing_area();
        draw(&root)?;
    }
    encode_png(&buf, size)
}

fn svg_of(size: (u32, u32), draw: impl FnOnce(&DrawingArea<SVGBackend<'_>, Shift>) -> Result<()>) -> Result<String> {
    register_font();
    let mut s = String::new();
    {
        let root = SVGBackend::with_string(&mut s, size).into_drawing_area();
        draw(&root)?;
    }
    Ok(s)
}

/// A line chart as PNG bytes.
pub fn line_png(chart: &LineChart, size: (u32, u32)) -> Result<Vec<u8>> {
    png_of(size, |r| draw_lines(r, chart))
}

/// A line chart as SVG text.
pub fn line_svg(chart: &LineChart, size: (u32, u32)) -> Result<String> {
    svg_of(size, |r| draw_lines(r, chart))
}

/// Largest cells per side drawn in an SVG slice; larger slices are block-averaged first.
pub const SVG_SLICE_MAX: usize = 160;

/// A field slice as PNG bytes.
pub fn slice_png(slice: &Slice, size: (u32, u32)) -> Result<Vec<u8>> {
    png_of(size, |r| draw_slice(r, slice))
}

/// A field slice as SVG text (block-averaged to at most [`SVG_SLICE_MAX`] cells per side).
pub fn slice_svg(slice: &Slice, size: (u32, u32)) -> Result<String> {
    let f = slice.nu.max(slice.nv).div_ceil(SVG_SLICE_MAX);
    let s = slice.coarsened(f);
    svg_of(size, |r| draw_slice(r, &s))
}

#[cfg(test)]
mod tests {
    use super::*;

    // Known answers by hand.
    #[test]
    fn ticks_and_lengths_by_hand() {
        assert_eq!(fmt_tick(0.0), "0");
        assert_eq!(fmt_tick(2.5), "2.5");
        assert_eq!(fmt_tick(100.0), "100");
        assert_eq!(fmt_tick(1.5e15), "1.5e15");
        assert_eq!(fmt_tick(3e-5), "3e-5");
        assert_eq!(nice_length(0.00017), 0.0001);
        assert_eq!(nice_length(3.7), 2.0);
        assert_eq!(nice_length(7.0), 5.0);
        assert_eq!(fmt_length(1e-4), "100 µm");
        assert_eq!(fmt_length(2e-3), "2 mm");
    }

    // Known answer by hand: block averages of a 3 x 2 slice by 2.
    #[test]
    fn coarsening_averages_blocks() {
        let s = Slice {
            title: String::new(),
            value_label: String::new(),
            nu: 3,
            nv: 2,
            values: vec![1.0, 3.0, 5.0, 3.0, 5.0, f64::NAN],
            corner_m: (0.0, 0.0),
            cell_m: 1.0,
            u_name: "x".into(),
            v_name: "y".into(),
        };
        let c = s.coarsened(2);
        assert_eq!((c.nu, c.nv, c.cell_m), (2, 1, 2.0));
        assert_eq!(c.values, vec![3.0, 5.0]);
    }
}
