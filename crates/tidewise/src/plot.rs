//! SVG figures: stacked or tiled panels of line series, drawn with `plotters`.

use plotters::prelude::*;

/// One line on a panel.
#[derive(Clone, Debug)]
pub struct Series {
    /// Legend text.
    pub name: String,
    /// Colour as RGB.
    pub color: (u8, u8, u8),
    /// Dashed (used for the float reference).
    pub dashed: bool,
    /// Points `(x, y)`.
    pub points: Vec<(f64, f64)>,
}

/// One panel.
#[derive(Clone, Debug)]
pub struct Panel {
    /// Title above the panel.
    pub title: String,
    /// X-axis label.
    pub x_label: String,
    /// Y-axis label.
    pub y_label: String,
    /// The lines.
    pub series: Vec<Series>,
    /// Logarithmic y axis (values ≤ 0 are drawn at the axis floor).
    pub log_y: bool,
}

/// A shaded spread around a line: `(x, low, high)` points, drawn as a filled polygon
/// under the lines (e.g. the seed-to-seed range of a mean).
#[derive(Clone, Debug)]
pub struct Band {
    /// Colour as RGB (drawn translucent).
    pub color: (u8, u8, u8),
    /// `(x, low, high)`, in x order.
    pub points: Vec<(f64, f64, f64)>,
}

/// The colour of the fixed arm.
pub const FIXED: (u8, u8, u8) = (20, 110, 120);
/// The colour of the float arm.
pub const FLOAT: (u8, u8, u8) = (214, 120, 36);
/// Colours for further series (layers, classes).
pub const PALETTE: [(u8, u8, u8); 6] = [
    (20, 110, 120),
    (214, 120, 36),
    (92, 70, 160),
    (70, 140, 60),
    (180, 50, 80),
    (90, 90, 90),
];

fn bounds(panel: &Panel, bands: &[Band]) -> (f64, f64, f64, f64) {
    let band_pts: Vec<(f64, f64)> = bands
        .iter()
        .flat_map(|b| b.points.iter().flat_map(|&(x, lo, hi)| [(x, lo), (x, hi)]))
        .collect();
    let pts = panel
        .series
        .iter()
        .flat_map(|s| s.points.iter())
        .chain(band_pts.iter());
    let (mut x0, mut x1, mut y0, mut y1) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
    for &(x, y) in pts {
        if !x.is_finite() || !y.is_finite() || (panel.log_y && y <= 0.0) {
            continue;
        }
        x0 = x0.min(x);
        x1 = x1.max(x);
        y0 = y0.min(y);
        y1 = y1.max(y);
    }
    if x0 > x1 {
        return (0.0, 1.0, if panel.log_y { 0.1 } else { 0.0 }, 1.0);
    }
    if x1 - x0 < 1e-12 {
        x1 = x0 + 1.0;
    }
    if panel.log_y {
        y0 = y0.max(1e-12);
        if y1 / y0 < 10.0 {
            y1 = y0 * 10.0;
        }
        (x0, x1, y0 / 1.5, y1 * 1.5)
    } else {
        if y1 - y0 < 1e-9 {
            y1 = y0 + 1.0;
        }
        let pad = 0.05 * (y1 - y0);
        (x0, x1, y0 - pad, y1 + pad)
    }
}

/// A short tick label: plain decimals where they are short, else scientific.
fn tick(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if !(0.01..10_000.0).contains(&a) {
        format!("{v:.0e}")
    } else if (v - v.round()).abs() < 1e-9 {
        format!("{}", v.round() as i64)
    } else {
        let s = format!("{v:.3}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

fn draw<DB: DrawingBackend>(
    area: &DrawingArea<DB, plotters::coord::Shift>,
    panel: &Panel,
    bands: &[Band],
) -> Result<(), String>
where
    DB::ErrorType: 'static,
{
    let (x0, x1, y0, y1) = bounds(panel, bands);
    let mut builder = ChartBuilder::on(area);
    builder
        .caption(&panel.title, ("sans-serif", 16))
        .margin(8)
        .x_label_area_size(32)
        .y_label_area_size(64);
    let style = |s: &Series| {
        let c = RGBColor(s.color.0, s.color.1, s.color.2);
        ShapeStyle::from(&c).stroke_width(if s.dashed { 1 } else { 2 })
    };
    macro_rules! lines {
        ($chart:expr, $map:expr) => {{
            let chart = $chart;
            for s in &panel.series {
                let st = style(s);
                let pts: Vec<(f64, f64)> = s.points.iter().filter_map($map).collect();
                let name = s.name.clone();
                let color = st.color;
                if s.dashed {
                    chart
                        .draw_series(DashedLineSeries::new(pts, 6, 4, st))
                        .map_err(|e| e.to_string())?
                        .label(name)
                        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], color));
                } else {
                    chart
                        .draw_series(LineSeries::new(pts, st))
                        .map_err(|e| e.to_string())?
                        .label(name)
                        .legend(move |(x, y)| {
                            PathElement::new(vec![(x, y), (x + 16, y)], color.stroke_width(2))
                        });
                }
            }
            chart
                .configure_series_labels()
                .background_style(WHITE.mix(0.85))
                .border_style(BLACK.mix(0.3))
                .position(SeriesLabelPosition::UpperRight)
                .draw()
                .map_err(|e| e.to_string())?;
        }};
    }
    if panel.log_y {
        let mut chart = builder
            .build_cartesian_2d(x0..x1, (y0..y1).log_scale())
            .map_err(|e| e.to_string())?;
        chart
            .configure_mesh()
            .x_desc(&panel.x_label)
            .y_desc(&panel.y_label)
            .x_label_formatter(&|x| tick(*x))
            .y_label_formatter(&|y| tick(*y))
            .light_line_style(WHITE.mix(0.0))
            .draw()
            .map_err(|e| e.to_string())?;
        let floor = y0;
        lines!(
            &mut chart,
            |&(x, y): &(f64, f64)| if x.is_finite() && y.is_finite() {
                Some((x, if y > 0.0 { y } else { floor }))
            } else {
                None
            }
        );
    } else {
        let mut chart = builder
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(|e| e.to_string())?;
        chart
            .configure_mesh()
            .x_desc(&panel.x_label)
            .y_desc(&panel.y_label)
            .x_label_formatter(&|x| tick(*x))
            .y_label_formatter(&|y| tick(*y))
            .light_line_style(WHITE.mix(0.0))
            .draw()
            .map_err(|e| e.to_string())?;
        for b in bands {
            let mut poly: Vec<(f64, f64)> = b.points.iter().map(|&(x, lo, _)| (x, lo)).collect();
            poly.extend(b.points.iter().rev().map(|&(x, _, hi)| (x, hi)));
            poly.retain(|&(x, y)| x.is_finite() && y.is_finite());
            let c = RGBColor(b.color.0, b.color.1, b.color.2);
            chart
                .draw_series(std::iter::once(Polygon::new(poly, c.mix(0.22).filled())))
                .map_err(|e| e.to_string())?;
        }
        lines!(&mut chart, |&(x, y): &(f64, f64)| (x.is_finite()
            && y.is_finite())
        .then_some((x, y)));
    }
    Ok(())
}

/// Renders `panels` in a grid of `columns` columns under a `title`, as SVG text.
pub fn render(title: &str, panels: &[Panel], columns: usize) -> Result<String, String> {
    let plain: Vec<(Panel, Vec<Band>)> = panels.iter().map(|p| (p.clone(), Vec::new())).collect();
    render_banded(title, &plain, columns)
}

/// [`render`] with shaded bands under each panel's lines (linear y axes only).
pub fn render_banded(
    title: &str,
    panels: &[(Panel, Vec<Band>)],
    columns: usize,
) -> Result<String, String> {
    let columns = columns.clamp(1, panels.len().max(1));
    let rows = panels.len().div_ceil(columns).max(1);
    let (w, h) = (460 * columns as u32, 40 + 300 * rows as u32);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let (head, body) = root.split_vertically(40);
        head.titled(title, ("sans-serif", 20))
            .map_err(|e| e.to_string())?;
        let cells = body.split_evenly((rows, columns));
        for (cell, (panel, bands)) in cells.iter().zip(panels) {
            draw(cell, panel, bands)?;
        }
        root.present().map_err(|e| e.to_string())?;
    }
    Ok(svg)
}
