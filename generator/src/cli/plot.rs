//! SVG charts for the report and simulation commands (plotters, SVG backend only).
//!
//! A figure is a grid of panels; a panel is a set of lines (a polyline each, with
//! optional point markers) on linear or logarithmic axes, or in metres with equal
//! aspect for backbone shapes.

use plotters::coord::ranged1d::Ranged;
use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;
use std::path::Path;

/// Colours of successive series (a qualitative palette readable on white).
pub(crate) const PALETTE: [RGBColor; 10] = [
    RGBColor(31, 119, 180),
    RGBColor(255, 127, 14),
    RGBColor(44, 160, 44),
    RGBColor(214, 39, 40),
    RGBColor(148, 103, 189),
    RGBColor(140, 86, 75),
    RGBColor(227, 119, 194),
    RGBColor(127, 127, 127),
    RGBColor(188, 189, 34),
    RGBColor(23, 190, 207),
];

/// The `i`-th palette colour (cycling).
pub(crate) fn colour(i: usize) -> RGBColor {
    PALETTE[i % PALETTE.len()]
}

/// A colour from dark blue (`t = 0`) to orange (`t = 1`), for sequences in time.
pub(crate) fn ramp(t: f64) -> RGBColor {
    let t = t.clamp(0.0, 1.0);
    let mix = |a: u8, b: u8| (a as f64 + (b as f64 - a as f64) * t).round() as u8;
    RGBColor(mix(20, 240), mix(50, 120), mix(140, 20))
}

/// One polyline.
pub(crate) struct Line {
    /// Legend entry (`None`: not in the legend).
    pub label: Option<String>,
    pub points: Vec<(f64, f64)>,
    pub colour: RGBColor,
    pub width: u32,
    /// Draw a filled circle at every point.
    pub markers: bool,
}

impl Line {
    pub fn new(label: Option<String>, points: Vec<(f64, f64)>, colour: RGBColor) -> Self {
        Line {
            label,
            points,
            colour,
            width: 2,
            markers: false,
        }
    }
    pub fn width(mut self, w: u32) -> Self {
        self.width = w;
        self
    }
    pub fn markers(mut self) -> Self {
        self.markers = true;
        self
    }
}

/// How a panel's axes are scaled.
#[derive(Clone, Copy, PartialEq, Eq)]
pub(crate) enum Axes {
    Linear,
    /// Logarithmic y; values at or below the floor are drawn at the floor.
    LogY,
    /// Equal scales on x and y (shapes in metres).
    Equal,
}

pub(crate) struct Panel {
    pub title: String,
    pub x_label: String,
    pub y_label: String,
    pub axes: Axes,
    /// Label the x axis at integers only (orders).
    pub integer_x: bool,
    pub lines: Vec<Line>,
    /// Gravity `(g_x, g_y)` [m/s²] of a shape panel, drawn as an arrow beside it.
    pub gravity: Option<(f64, f64)>,
}

/// Width of the strip beside a chart that holds its legend (and gravity arrow), so
/// that neither ever sits on a curve [px].
const LEGEND_WIDTH: u32 = 120;

/// A tick label: short, and never `-0`.
fn tick(v: f64) -> String {
    if v == 0.0 || v.abs() < 1e-12 {
        return "0".into();
    }
    if v.abs() < 1e-3 || v.abs() >= 1e6 {
        return format!("{v:.1e}");
    }
    let s = format!("{v:.6}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.into()
    }
}

/// Smallest value a logarithmic axis shows.
pub(crate) const LOG_FLOOR: f64 = 1e-17;

/// Writes panels laid out in `cols` columns to an SVG file of `width × height` pixels.
pub(crate) fn write_svg(
    path: &Path,
    panels: &[Panel],
    cols: usize,
    size: (u32, u32),
) -> Result<(), String> {
    let svg = render_svg(panels, cols, size)?;
    super::write_file(path, &svg).map_err(|e| e.to_string())
}

/// The SVG text of [`write_svg`], for a command that writes its files only once
/// everything is computed.
pub(crate) fn render_svg(
    panels: &[Panel],
    cols: usize,
    size: (u32, u32),
) -> Result<String, String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let cols = cols.max(1);
        let rows = panels.len().div_ceil(cols).max(1);
        let areas = root.split_evenly((rows, cols));
        for (panel, area) in panels.iter().zip(areas.iter()) {
            draw_panel(area, panel)?;
        }
        root.present().map_err(|e| e.to_string())?;
    }
    Ok(svg)
}

fn draw_panel<DB: DrawingBackend>(
    whole: &DrawingArea<DB, plotters::coord::Shift>,
    panel: &Panel,
) -> Result<(), String> {
    let labelled = panel.lines.iter().any(|l| l.label.is_some());
    let (area, strip) = if labelled || panel.gravity.is_some() {
        let w = whole.dim_in_pixel().0;
        let (a, b) = whole.split_horizontally(w.saturating_sub(LEGEND_WIDTH));
        (a, Some(b))
    } else {
        (whole.clone(), None)
    };
    if let Some(strip) = &strip {
        draw_legend(strip, panel)?;
    }
    let area = &area;
    let finite = |v: f64| v.is_finite();
    let mut xs = (f64::INFINITY, f64::NEG_INFINITY);
    let mut ys = (f64::INFINITY, f64::NEG_INFINITY);
    for l in &panel.lines {
        for &(x, y) in &l.points {
            let y = if panel.axes == Axes::LogY {
                y.max(LOG_FLOOR)
            } else {
                y
            };
            if finite(x) && finite(y) {
                xs = (xs.0.min(x), xs.1.max(x));
                ys = (ys.0.min(y), ys.1.max(y));
            }
        }
    }
    if !xs.0.is_finite() {
        xs = (0.0, 1.0);
        ys = (if panel.axes == Axes::LogY { 1e-3 } else { 0.0 }, 1.0);
    }
    let pad = |(lo, hi): (f64, f64), frac: f64| {
        let span = hi - lo;
        let span = if span > 0.0 {
            span
        } else {
            lo.abs().max(1e-12)
        };
        (lo - frac * span, hi + frac * span)
    };
    let mut builder = ChartBuilder::on(area);
    builder
        .caption(&panel.title, ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(70);
    match panel.axes {
        Axes::LogY => {
            let x = pad(xs, 0.04);
            let y = (ys.0 / 3.0, ys.1 * 3.0);
            let mut chart = builder
                .build_cartesian_2d(x.0..x.1, (y.0..y.1).log_scale())
                .map_err(|e| e.to_string())?;
            let ticks = if panel.integer_x {
                (x.1 - x.0).round() as usize + 1
            } else {
                10
            };
            chart
                .configure_mesh()
                .x_desc(panel.x_label.as_str())
                .y_desc(panel.y_label.as_str())
                .x_labels(ticks.clamp(2, 12))
                .x_label_formatter(&|v| {
                    if panel.integer_x {
                        format!("{v:.0}")
                    } else {
                        tick(*v)
                    }
                })
                .y_label_formatter(&|v| format!("{v:.0e}"))
                .draw()
                .map_err(|e| e.to_string())?;
            draw_lines(&mut chart, &panel.lines, true)
        }
        Axes::Linear | Axes::Equal => {
            let (mut x, mut y) = (pad(xs, 0.03), pad(ys, 0.06));
            if panel.axes == Axes::Equal {
                // Grow the shorter range so one metre is as long on both axes.
                let (w, h) = area.dim_in_pixel();
                let (w, h) = ((w as f64 - 90.0).max(1.0), (h as f64 - 70.0).max(1.0));
                let (sx, sy) = ((x.1 - x.0) / w, (y.1 - y.0) / h);
                if sx > sy {
                    let c = 0.5 * (y.0 + y.1);
                    let half = 0.5 * sx * h;
                    y = (c - half, c + half);
                } else {
                    let c = 0.5 * (x.0 + x.1);
                    let half = 0.5 * sy * w;
                    x = (c - half, c + half);
                }
            }
            let mut chart = builder
                .build_cartesian_2d(x.0..x.1, y.0..y.1)
                .map_err(|e| e.to_string())?;
            chart
                .configure_mesh()
                .x_desc(panel.x_label.as_str())
                .y_desc(panel.y_label.as_str())
                .x_labels(6)
                .y_labels(9)
                .x_label_formatter(&|v| tick(*v))
                .y_label_formatter(&|v| tick(*v))
                .draw()
                .map_err(|e| e.to_string())?;
            draw_lines(&mut chart, &panel.lines, false)
        }
    }
}

fn draw_lines<'a, DB: DrawingBackend + 'a, Y: Ranged<ValueType = f64>>(
    chart: &mut ChartContext<'a, DB, Cartesian2d<RangedCoordf64, Y>>,
    lines: &[Line],
    log: bool,
) -> Result<(), String> {
    for l in lines {
        let pts: Vec<(f64, f64)> = l
            .points
            .iter()
            .map(|&(x, y)| (x, if log { y.max(LOG_FLOOR) } else { y }))
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .collect();
        // Width 0: markers only (a scatter).
        if l.width > 0 {
            let style = ShapeStyle::from(&l.colour).stroke_width(l.width);
            chart
                .draw_series(LineSeries::new(pts.clone(), style))
                .map_err(|e| e.to_string())?;
        }
        if l.markers {
            let c = l.colour;
            chart
                .draw_series(
                    pts.iter()
                        .map(|&p| Circle::new(p, 4, ShapeStyle::from(&c).filled())),
                )
                .map_err(|e| e.to_string())?;
        }
    }
    Ok(())
}

/// The legend strip beside a chart: one entry per labelled line, then the gravity
/// arrow of a shape panel (pixel y points down, so g_y is drawn negated).
fn draw_legend<DB: DrawingBackend>(
    strip: &DrawingArea<DB, plotters::coord::Shift>,
    panel: &Panel,
) -> Result<(), String> {
    let font = ("sans-serif", 13).into_font();
    let mut y = 48;
    for l in panel.lines.iter().filter(|l| l.label.is_some()) {
        let style = ShapeStyle::from(&l.colour).stroke_width(3);
        strip
            .draw(&PathElement::new(vec![(6, y), (26, y)], style))
            .map_err(|e| e.to_string())?;
        let label = l.label.as_deref().unwrap_or("");
        strip
            .draw(&Text::new(label.to_string(), (32, y - 7), font.clone()))
            .map_err(|e| e.to_string())?;
        y += 18;
    }
    if let Some((gx, gy)) = panel.gravity {
        let norm = gx.hypot(gy);
        let (cx, cy) = (40, y + 40);
        if norm > 0.0 {
            let (dx, dy) = (gx / norm * 24.0, -gy / norm * 24.0);
            let tip = (cx + dx.round() as i32, cy + dy.round() as i32);
            let back = (cx - dx.round() as i32, cy - dy.round() as i32);
            let style = ShapeStyle::from(&BLACK).stroke_width(2);
            strip
                .draw(&PathElement::new(vec![back, tip], style))
                .map_err(|e| e.to_string())?;
            // Arrow head: two strokes back from the tip, 25° either side.
            for turn in [0.45f64, -0.45] {
                let (c, s) = (turn.cos(), turn.sin());
                let (hx, hy) = (-(dx * c - dy * s) / 2.4, -(dx * s + dy * c) / 2.4);
                let end = (tip.0 + hx.round() as i32, tip.1 + hy.round() as i32);
                strip
                    .draw(&PathElement::new(vec![tip, end], style))
                    .map_err(|e| e.to_string())?;
            }
            strip
                .draw(&Text::new(
                    "gravity".to_string(),
                    (cx + 30, cy - 7),
                    font.clone(),
                ))
                .map_err(|e| e.to_string())?;
        } else {
            strip
                .draw(&Text::new(
                    "no gravity".to_string(),
                    (6, cy - 7),
                    font.clone(),
                ))
                .map_err(|e| e.to_string())?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_a_polyline_per_series() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.svg");
        let panels = vec![
            Panel {
                title: "errors".into(),
                x_label: "order".into(),
                y_label: "error".into(),
                axes: Axes::LogY,
                integer_x: true,
                gravity: None,
                lines: vec![
                    Line::new(
                        Some("a".into()),
                        vec![(0.0, 1e-2), (1.0, 1e-5), (2.0, 0.0)],
                        colour(0),
                    )
                    .markers(),
                    Line::new(
                        Some("b".into()),
                        vec![(0.0, 1e-1), (1.0, 1e-3), (2.0, 1e-9)],
                        colour(1),
                    ),
                ],
            },
            Panel {
                title: "shape".into(),
                x_label: "x [m]".into(),
                y_label: "y [m]".into(),
                axes: Axes::Equal,
                integer_x: false,
                gravity: Some((0.0, -9.81)),
                lines: vec![Line::new(
                    None,
                    vec![(0.0, 0.0), (0.1, 0.02), (0.15, 0.08)],
                    ramp(0.5),
                )],
            },
        ];
        write_svg(&path, &panels, 2, (900, 400)).unwrap();
        let text = std::fs::read_to_string(&path).unwrap();
        assert!(text.starts_with("<svg"), "{}", &text[..80.min(text.len())]);
        assert!(text.matches("<polyline").count() >= 3, "{text}");
        assert!(text.contains("<circle"));
        assert!(
            text.contains("\ngravity\n"),
            "the gravity arrow is labelled"
        );
    }

    #[test]
    fn ticks_never_read_minus_zero() {
        assert_eq!(tick(-0.0), "0");
        assert_eq!(tick(-1e-17), "0");
        assert_eq!(tick(-0.05), "-0.05");
        assert_eq!(tick(0.25), "0.25");
        assert_eq!(tick(2.0), "2");
        assert_eq!(tick(3e-5), "3.0e-5");
    }
}
