//! SVG figures: stacked or tiled panels of line series, drawn with `plotters`.
//!
//! `plotters` draws the axes and the data; the figure's title, the panel captions and one
//! legend for the whole figure are written here as plain SVG, in a header strip above the
//! panels, so no legend ever covers data. Text widths are estimated from the font size and
//! the number of characters (see [`text_width`]): an approximation, with room to spare.

use plotters::coord::ranged1d::Ranged;
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

/// Average advance of a sans-serif glyph, in ems: an approximation (fact of the trade, for
/// the common sans faces), on the wide side so estimated boxes cover the rendered text.
pub const GLYPH_EM: f64 = 0.62;
/// Font size of tick labels, in SVG pixels.
pub const TICK_PX: f64 = 11.0;
/// `plotters`' SVG back end writes a font of size `s` as `s / 1.24` pixels.
const PLOTTERS_FONT: f64 = 1.24;
const CELL_W: u32 = 460;
const CELL_H: u32 = 300;
const CAPTION_H: u32 = 24;
const TITLE_H: f64 = 32.0;
const LEGEND_ROW: f64 = 18.0;
const MARGIN: u32 = 8;
const X_LABELS: u32 = 34;
const Y_LABELS: u32 = 64;

/// Estimated width of `s` at `px` pixels: characters × [`GLYPH_EM`] × size.
pub fn text_width(s: &str, px: f64) -> f64 {
    s.chars().count() as f64 * GLYPH_EM * px
}

/// Escapes text for HTML and SVG.
pub fn esc(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            _ => o.push(c),
        }
    }
    o
}

/// Ticks of a logarithmic axis over `[lo, hi]` drawn `px` pixels long, at least `gap`
/// pixels apart: 1-2-5 in every decade where they fit, else 1-3, else decades, else every
/// k-th decade.
pub fn log_ticks(lo: f64, hi: f64, px: f64, gap: f64) -> Vec<f64> {
    if !(lo > 0.0 && hi > lo && px > 0.0) {
        return Vec::new();
    }
    let (a, b) = (lo.log10(), hi.log10());
    let per_decade = px / (b - a);
    let (d0, d1) = (a.floor() as i32, b.ceil() as i32);
    let inside = |v: f64| v >= lo * (1.0 - 1e-9) && v <= hi * (1.0 + 1e-9);
    // The closest pair of each choice, in decades: log10(2) for 1-2-5, log10(3) for 1-3.
    for (mantissas, closest) in [
        (&[1.0, 2.0, 5.0][..], 2f64.log10()),
        (&[1.0, 3.0][..], 3f64.log10()),
    ] {
        if closest * per_decade >= gap {
            return (d0..=d1)
                .flat_map(|d| mantissas.iter().map(move |m| m * 10f64.powi(d)))
                .filter(|&v| inside(v))
                .collect();
        }
    }
    let every = (gap / per_decade).ceil().max(1.0) as i32;
    (d0..=d1)
        .filter(|d| d.rem_euclid(every) == 0)
        .map(|d| 10f64.powi(d))
        .filter(|&v| inside(v))
        .collect()
}

/// Ticks of a linear axis over `[lo, hi]`: multiples of a 1-2-5 step, at most `most` of them
/// (whole numbers only when `whole`, e.g. epochs).
pub fn linear_ticks(lo: f64, hi: f64, most: usize, whole: bool) -> Vec<f64> {
    if !(lo.is_finite() && hi.is_finite() && hi > lo) {
        return Vec::new();
    }
    let most = most.max(2) as f64;
    let raw = (hi - lo) / most;
    let mut exp = raw.log10().floor() as i32;
    let mut mantissa = [1.0, 2.0, 5.0, 10.0]
        .into_iter()
        .find(|m| {
            let s = m * 10f64.powi(exp);
            (hi / s + 1e-9).floor() - (lo / s - 1e-9).ceil() + 1.0 <= most
        })
        .unwrap_or(10.0);
    if whole && exp < 0 {
        (mantissa, exp) = (1.0, 0);
    }
    // k × mantissa scaled by a power of ten in one rounding (0.6, not 0.6000000000000001).
    let value = |k: i64| {
        if exp >= 0 {
            k as f64 * mantissa * 10f64.powi(exp)
        } else {
            k as f64 * mantissa / 10f64.powi(-exp)
        }
    };
    let step = value(1);
    let first = (lo / step - 1e-9).ceil() as i64;
    let last = (hi / step + 1e-9).floor() as i64;
    (first..=last).map(value).collect()
}

/// One axis, linear or logarithmic, with the ticks chosen here (`plotters` draws exactly
/// these and no light lines).
struct Axis {
    lo: f64,
    hi: f64,
    log: bool,
    ticks: Vec<f64>,
}

impl Axis {
    fn at(&self, v: f64) -> f64 {
        if self.log {
            let (a, b) = (self.lo.log10(), self.hi.log10());
            (v.max(self.lo * 1e-6).log10() - a) / (b - a)
        } else {
            (v - self.lo) / (self.hi - self.lo)
        }
    }
}

impl Ranged for Axis {
    type FormatOption = plotters::coord::ranged1d::DefaultFormatting;
    type ValueType = f64;
    fn map(&self, v: &f64, limit: (i32, i32)) -> i32 {
        let t = self.at(*v).clamp(-10.0, 11.0);
        limit.0 + (t * f64::from(limit.1 - limit.0)).round() as i32
    }
    fn key_points<H: plotters::coord::ranged1d::KeyPointHint>(&self, hint: H) -> Vec<f64> {
        if hint.weight().allow_light_points() {
            Vec::new()
        } else {
            self.ticks.clone()
        }
    }
    fn range(&self) -> std::ops::Range<f64> {
        self.lo..self.hi
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
    let (w, h) = area.dim_in_pixel();
    let plot_w = f64::from(w.saturating_sub(2 * MARGIN + Y_LABELS));
    let plot_h = f64::from(h.saturating_sub(2 * MARGIN + X_LABELS));
    let whole = panel
        .series
        .iter()
        .flat_map(|s| s.points.iter())
        .all(|&(x, _)| !x.is_finite() || x.fract() == 0.0);
    // Room for the widest x label of about six characters.
    let x_most = (plot_w / text_width("000000", TICK_PX)).floor().max(2.0) as usize;
    let xt = linear_ticks(x0, x1, x_most.min(11), whole);
    let y_gap = 2.0 * TICK_PX;
    let mut builder = ChartBuilder::on(area);
    builder
        .margin(MARGIN)
        .x_label_area_size(X_LABELS)
        .y_label_area_size(Y_LABELS);
    let label_font = ("sans-serif", TICK_PX * PLOTTERS_FONT);
    let style = |s: &Series| {
        let c = RGBColor(s.color.0, s.color.1, s.color.2);
        ShapeStyle::from(&c).stroke_width(if s.dashed { 1 } else { 2 })
    };
    let x_axis = Axis {
        lo: x0,
        hi: x1,
        log: false,
        ticks: xt,
    };
    let y_axis = Axis {
        lo: y0,
        hi: y1,
        log: panel.log_y,
        ticks: if panel.log_y {
            log_ticks(y0, y1, plot_h, y_gap)
        } else {
            linear_ticks(
                y0,
                y1,
                ((plot_h / y_gap).floor() as usize).clamp(2, 11),
                false,
            )
        },
    };
    let mut chart = builder
        .build_cartesian_2d(x_axis, y_axis)
        .map_err(|e| e.to_string())?;
    chart
        .configure_mesh()
        .x_desc(&panel.x_label)
        .y_desc(&panel.y_label)
        .label_style(label_font)
        .axis_desc_style(label_font)
        .x_label_formatter(&|x| tick(*x))
        .y_label_formatter(&|y| tick(*y))
        .light_line_style(WHITE.mix(0.0))
        .bold_line_style(BLACK.mix(0.08))
        .draw()
        .map_err(|e| e.to_string())?;
    // Values at or below zero on a log axis sit on its floor.
    let (log, floor) = (panel.log_y, y0);
    let shown = |&(x, y): &(f64, f64)| {
        (x.is_finite() && y.is_finite()).then_some((x, if log && y <= 0.0 { floor } else { y }))
    };
    for b in bands {
        let mut poly: Vec<(f64, f64)> = b.points.iter().map(|&(x, lo, _)| (x, lo)).collect();
        poly.extend(b.points.iter().rev().map(|&(x, _, hi)| (x, hi)));
        let poly: Vec<(f64, f64)> = poly.iter().filter_map(shown).collect();
        let c = RGBColor(b.color.0, b.color.1, b.color.2);
        chart
            .draw_series(std::iter::once(Polygon::new(poly, c.mix(0.22).filled())))
            .map_err(|e| e.to_string())?;
    }
    for s in &panel.series {
        let st = style(s);
        let pts: Vec<(f64, f64)> = s.points.iter().filter_map(shown).collect();
        if s.dashed {
            chart
                .draw_series(DashedLineSeries::new(pts, 6, 4, st))
                .map_err(|e| e.to_string())?;
        } else {
            chart
                .draw_series(LineSeries::new(pts, st))
                .map_err(|e| e.to_string())?;
        }
    }
    Ok(())
}

/// One line of text fitted into `width` pixels: at `px` if it fits, else smaller down to
/// `min_px`, else cut with an ellipsis (the full text then goes into a hover title).
fn fitted_text(s: &str, x: f64, y: f64, width: f64, px: f64, min_px: f64, attrs: &str) -> String {
    let room = width.max(1.0);
    let mut size = px;
    if text_width(s, size) > room {
        size = (room / (s.chars().count().max(1) as f64 * GLYPH_EM)).max(min_px);
    }
    let fits = (room / (GLYPH_EM * size) + 1e-6).floor() as usize;
    let (shown, cut) = if s.chars().count() > fits {
        let keep: String = s.chars().take(fits.saturating_sub(1)).collect();
        (format!("{keep}…"), true)
    } else {
        (s.to_string(), false)
    };
    let hover = if cut {
        format!("<title>{}</title>", esc(s))
    } else {
        String::new()
    };
    format!(
        r#"<text x="{x:.1}" y="{y:.1}" font-family="sans-serif" font-size="{size:.1}" {attrs}>{hover}{}</text>"#,
        esc(&shown)
    )
}

/// One legend entry: the line's look and its name.
#[derive(Clone, Debug, PartialEq)]
struct Entry {
    name: String,
    color: (u8, u8, u8),
    dashed: bool,
}

const LEGEND_PX: f64 = 12.0;
const SWATCH: f64 = 24.0;

fn entry_width(e: &Entry) -> f64 {
    SWATCH + 6.0 + text_width(&e.name, LEGEND_PX) + 18.0
}

/// Lays the entries out in rows no wider than `width`: `(row, x offset)` of each, and the rows.
fn legend_rows(entries: &[Entry], width: f64) -> (Vec<(usize, f64)>, usize) {
    let mut at = Vec::with_capacity(entries.len());
    let (mut row, mut x) = (0usize, 0.0f64);
    for e in entries {
        let ew = entry_width(e);
        if x > 0.0 && x + ew > width {
            row += 1;
            x = 0.0;
        }
        at.push((row, x));
        x += ew;
    }
    (at, if entries.is_empty() { 0 } else { row + 1 })
}

/// The legend as an SVG group (`class="legend"`) with its box, at `(left, top)`.
fn legend_svg(entries: &[Entry], at: &[(usize, f64)], rows: usize, left: f64, top: f64) -> String {
    let width = entries
        .iter()
        .zip(at)
        .map(|(e, &(_, x))| x + entry_width(e) - 12.0)
        .fold(0.0, f64::max);
    let mut s = format!(
        r##"<g class="legend"><rect x="{:.1}" y="{:.1}" width="{:.1}" height="{:.1}" fill="#fbfaf6" stroke="#d9d6cc" rx="3"/>"##,
        left - 6.0,
        top,
        width + 12.0,
        rows as f64 * LEGEND_ROW + 4.0
    );
    for (e, &(row, x)) in entries.iter().zip(at) {
        let y = top + 2.0 + LEGEND_ROW * (row as f64 + 0.5);
        let dash = if e.dashed {
            r#" stroke-dasharray="6 4""#
        } else {
            ""
        };
        s.push_str(&format!(
            r#"<line x1="{:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="rgb({},{},{})" stroke-width="{}"{dash}/>"#,
            left + x,
            left + x + SWATCH,
            e.color.0,
            e.color.1,
            e.color.2,
            if e.dashed { 1.5 } else { 2.5 },
        ));
        s.push_str(&format!(
            r##"<text x="{:.1}" y="{:.1}" font-family="sans-serif" font-size="{LEGEND_PX}" fill="#1a1a1a">{}</text>"##,
            left + x + SWATCH + 6.0,
            y + 0.35 * LEGEND_PX,
            esc(&e.name)
        ));
    }
    s.push_str("</g>");
    s
}

/// Renders `panels` in a grid of `columns` columns under a `title`, as SVG text.
pub fn render(title: &str, panels: &[Panel], columns: usize) -> Result<String, String> {
    let plain: Vec<(Panel, Vec<Band>)> = panels.iter().map(|p| (p.clone(), Vec::new())).collect();
    render_banded(title, &plain, columns)
}

/// [`render`] with shaded bands under each panel's lines.
pub fn render_banded(
    title: &str,
    panels: &[(Panel, Vec<Band>)],
    columns: usize,
) -> Result<String, String> {
    let columns = columns.clamp(1, panels.len().max(1));
    let rows = panels.len().div_ceil(columns).max(1);
    // A figure of one panel is drawn wider: its caption and legend get the room of two.
    let cell_w = if columns == 1 {
        2 * CELL_W - 160
    } else {
        CELL_W
    };
    let w = cell_w * columns as u32;
    // One legend for the figure: every distinct line, in the order of first appearance.
    let mut entries: Vec<Entry> = Vec::new();
    for s in panels.iter().flat_map(|(p, _)| p.series.iter()) {
        let e = Entry {
            name: s.name.clone(),
            color: s.color,
            dashed: s.dashed,
        };
        if !s.name.is_empty() && !entries.contains(&e) {
            entries.push(e);
        }
    }
    let side = 16.0;
    let (at, legend_lines) = legend_rows(&entries, f64::from(w) - 2.0 * side);
    let legend_h = if legend_lines == 0 {
        0.0
    } else {
        legend_lines as f64 * LEGEND_ROW + 12.0
    };
    let head = (TITLE_H + legend_h).ceil() as u32;
    let h = head + CELL_H * rows as u32;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (w, h)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let (_, body) = root.split_vertically(head);
        let cells = body.split_evenly((rows, columns));
        for (cell, (panel, bands)) in cells.iter().zip(panels) {
            let (_, plot) = cell.split_vertically(CAPTION_H);
            draw(&plot, panel, bands)?;
        }
        root.present().map_err(|e| e.to_string())?;
    }
    let mut over = fitted_text(
        title,
        side,
        22.0,
        f64::from(w) - 2.0 * side,
        17.0,
        11.0,
        r##"font-weight="bold" fill="#1a1a1a""##,
    );
    if legend_lines > 0 {
        over.push_str(&legend_svg(
            &entries,
            &at,
            legend_lines,
            side + 6.0,
            TITLE_H,
        ));
    }
    for (k, (panel, _)) in panels.iter().enumerate() {
        let (r, c) = (k / columns, k % columns);
        let x = f64::from(cell_w) * c as f64 + f64::from(MARGIN + Y_LABELS);
        let y = f64::from(head) + f64::from(CELL_H) * r as f64 + 17.0;
        over.push_str(&fitted_text(
            &panel.title,
            x,
            y,
            f64::from(cell_w) * (c + 1) as f64 - x - f64::from(MARGIN),
            13.0,
            10.0,
            r##"fill="#1a1a1a""##,
        ));
    }
    match svg.rfind("</svg>") {
        Some(i) => svg.insert_str(i, &over),
        None => return Err("the SVG back end wrote no closing tag".into()),
    }
    Ok(svg)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log_ticks_thin_with_room() {
        // 0.05 to 2 on 228 px: one decade is 142 px, so 1-2-5 fit 22 px apart.
        assert_eq!(
            log_ticks(0.05, 2.0, 228.0, 22.0),
            vec![0.05, 0.1, 0.2, 0.5, 1.0, 2.0]
        );
        // Eight decades on 228 px: 28.5 px a decade, decades only.
        assert_eq!(log_ticks(1e-4, 1e4, 228.0, 22.0).len(), 9);
        // Twenty decades: every second decade.
        let t = log_ticks(1e-10, 1e10, 228.0, 22.0);
        assert_eq!(t.first().copied(), Some(1e-10));
        assert_eq!(t.len(), 11);
    }

    #[test]
    fn linear_ticks_are_round() {
        assert_eq!(
            linear_ticks(1.0, 5.0, 11, true),
            vec![1.0, 2.0, 3.0, 4.0, 5.0]
        );
        assert_eq!(
            linear_ticks(0.37, 0.96, 8, false),
            vec![0.4, 0.5, 0.6, 0.7, 0.8, 0.9]
        );
        assert_eq!(
            linear_ticks(1.0, 40.0, 8, true),
            vec![5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 35.0, 40.0]
        );
    }

    #[test]
    fn long_text_is_fitted() {
        let t = fitted_text(&"x".repeat(300), 8.0, 20.0, 400.0, 16.0, 10.0, "");
        assert!(t.contains("<title>") && t.contains('…'), "{t}");
    }
}
