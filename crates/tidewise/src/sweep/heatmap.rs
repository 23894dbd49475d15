//! The sweep report's heatmaps, as SVG: one rounded tile per cell in the house colours (the
//! fixed arm's teal, the float arm's amber), its mean in the tile's corner, the run count and
//! spread in a hover title, and a colour bar under the grid.
//!
//! The accuracy gap is diverging around zero: a tile takes the colour of the arm that is
//! ahead (amber: float ahead, the fixed arm behind; teal: fixed ahead), fading to sand at
//! zero. Accuracies are sequential, from sand (the lowest) through teal to a deep teal (the
//! highest).

use std::fmt::Write as _;

use crate::plot::{self, esc};

/// Mean and spread of the runs that fall into one heatmap cell.
#[derive(Clone, Debug, Default)]
pub(super) struct Cell {
    pub values: Vec<f64>,
    pub failed: usize,
}

impl Cell {
    fn mean(&self) -> Option<f64> {
        (!self.values.is_empty())
            .then(|| self.values.iter().sum::<f64>() / self.values.len() as f64)
    }
}

/// How cell values map to colour.
#[derive(Clone, Copy, Debug)]
pub(super) enum Scale {
    /// Around zero: amber above (float ahead), teal below (fixed ahead).
    Diverging,
    /// From the lowest to the highest value (accuracies).
    Sequential,
}

fn mix(a: (u8, u8, u8), b: (u8, u8, u8), t: f64) -> (u8, u8, u8) {
    let t = t.clamp(0.0, 1.0);
    let f = |x: u8, y: u8| (f64::from(x) + (f64::from(y) - f64::from(x)) * t).round() as u8;
    (f(a.0, b.0), f(a.1, b.1), f(a.2, b.2))
}

/// The zero of the gap and the low end of accuracies: a pale sand.
const SAND: (u8, u8, u8) = (242, 237, 224);
/// The high end of accuracies: the fixed arm's teal, darkened.
const DEEP: (u8, u8, u8) = (10, 62, 70);
/// An empty or failed cell.
const EMPTY: (u8, u8, u8) = (250, 250, 248);

/// The colour of `t` in [0, 1] on the sequential scale: sand, teal at 0.7, deep teal.
fn sequential(t: f64) -> (u8, u8, u8) {
    if t < 0.7 {
        mix(SAND, plot::FIXED, t / 0.7)
    } else {
        mix(plot::FIXED, DEEP, (t - 0.7) / 0.3)
    }
}

fn css((r, g, b): (u8, u8, u8)) -> String {
    format!("rgb({r},{g},{b})")
}

fn dark((r, g, b): (u8, u8, u8)) -> bool {
    f64::from(r) * 0.299 + f64::from(g) * 0.587 + f64::from(b) * 0.114 < 150.0
}

/// What the grid is: its title, unit, axes and cells (`cells[row][col]`).
pub(super) struct Heatmap<'a> {
    pub title: &'a str,
    pub unit: &'a str,
    pub row_name: &'a str,
    pub rows: &'a [String],
    pub col_name: &'a str,
    pub cols: &'a [String],
    pub cells: &'a [Vec<Cell>],
    pub scale: Scale,
}

impl Heatmap<'_> {
    /// The lowest and highest value the colour bar spans, and a value's colour.
    fn range(&self) -> (f64, f64) {
        let means: Vec<f64> = self.cells.iter().flatten().filter_map(Cell::mean).collect();
        match self.scale {
            Scale::Diverging => {
                let m = means.iter().fold(0.0f64, |m, v| m.max(v.abs())).max(0.5);
                (-m, m)
            }
            Scale::Sequential => {
                let lo = means.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = means.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                if lo.is_finite() {
                    (lo, hi.max(lo + 1e-9))
                } else {
                    (0.0, 1.0)
                }
            }
        }
    }

    fn colour(&self, v: f64) -> (u8, u8, u8) {
        let (lo, hi) = self.range();
        match self.scale {
            Scale::Diverging if v >= 0.0 => mix(SAND, plot::FLOAT, v / hi),
            Scale::Diverging => mix(SAND, plot::FIXED, v / lo),
            Scale::Sequential => sequential((v - lo) / (hi - lo)),
        }
    }

    fn value_text(&self, m: f64) -> String {
        match self.scale {
            Scale::Diverging => format!("{m:+.1}"),
            Scale::Sequential => format!("{m:.1}"),
        }
    }

    fn tip(&self, i: usize, j: usize, cell: &Cell) -> String {
        let n = cell.values.len();
        let spread = if n > 1 {
            let (a, b) = cell
                .values
                .iter()
                .fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v), b.max(v)));
            format!(", range {a:.2} to {b:.2}")
        } else {
            String::new()
        };
        let failed = if cell.failed > 0 {
            format!(", {} failed", cell.failed)
        } else {
            String::new()
        };
        format!(
            "{} = {}, {} = {}: mean {} {} over {n} run(s){spread}{failed}",
            self.row_name,
            self.rows[i],
            self.col_name,
            self.cols[j],
            cell.mean().map_or("–".into(), |m| format!("{m:.3}")),
            self.unit
        )
    }

    /// The heatmap as an SVG document.
    pub fn svg(&self) -> String {
        let (cw, ch, gap) = (80.0, 38.0, 3.0);
        let px = 12.0;
        let label_w = self
            .rows
            .iter()
            .map(|r| plot::text_width(r, px))
            .fold(plot::text_width(self.row_name, px).min(200.0), f64::max)
            + 16.0;
        let (left, top) = (label_w + 8.0, 70.0);
        let grid_w = cw * self.cols.len() as f64;
        let grid_h = ch * self.rows.len() as f64;
        let bar_w = grid_w.clamp(220.0, 360.0);
        let title_w = plot::text_width(self.title, 15.0) + 16.0;
        let w = (left + grid_w).max(left + bar_w).max(title_w) + 16.0;
        let bar_y = top + grid_h + 22.0;
        let h = bar_y + 52.0;
        let mut s = String::new();
        let _ = write!(
            s,
            r##"<svg xmlns="http://www.w3.org/2000/svg" width="{w:.0}" height="{h:.0}" viewBox="0 0 {w:.0} {h:.0}" font-family="sans-serif" font-size="{px}"><rect width="100%" height="100%" fill="#ffffff"/>"##
        );
        let _ = write!(
            s,
            r##"<text x="8" y="22" font-size="15" font-weight="bold" fill="#1a1a1a">{}</text>"##,
            esc(self.title)
        );
        let _ = write!(
            s,
            r##"<text x="{:.1}" y="44" text-anchor="middle" fill="#555555">{}</text><text x="8" y="{:.1}" fill="#555555">{}</text>"##,
            left + grid_w / 2.0,
            esc(self.col_name),
            top - 8.0,
            esc(self.row_name)
        );
        for (j, c) in self.cols.iter().enumerate() {
            let _ = write!(
                s,
                r#"<text x="{:.1}" y="{:.1}" text-anchor="middle">{}</text>"#,
                left + cw * (j as f64 + 0.5),
                top - 8.0,
                esc(c)
            );
        }
        for (i, r) in self.rows.iter().enumerate() {
            let y = top + ch * i as f64;
            let _ = write!(
                s,
                r#"<text x="{:.1}" y="{:.1}" text-anchor="end">{}</text>"#,
                left - 8.0,
                y + ch / 2.0 + 4.0,
                esc(r)
            );
            for (j, cell) in self.cells[i].iter().enumerate() {
                let x = left + cw * j as f64;
                let (fill, text) = match cell.mean() {
                    Some(m) => (self.colour(m), self.value_text(m)),
                    None if cell.failed > 0 => (EMPTY, "failed".to_string()),
                    None => (EMPTY, "–".to_string()),
                };
                // The value sits in the tile's lower right corner, small, in tabular figures.
                let _ = write!(
                    s,
                    r##"<g><title>{}</title><rect x="{:.1}" y="{:.1}" width="{:.1}" height="{:.1}" rx="5" fill="{}" stroke="#e4e0d4" stroke-width="{}"/><text x="{:.1}" y="{:.1}" text-anchor="end" font-size="11" style="font-variant-numeric:tabular-nums" fill="{}">{}</text></g>"##,
                    esc(&self.tip(i, j, cell)),
                    x + gap / 2.0,
                    y + gap / 2.0,
                    cw - gap,
                    ch - gap,
                    css(fill),
                    if cell.mean().is_some() { 0.0 } else { 1.0 },
                    x + cw - 8.0,
                    y + ch - 8.0,
                    if dark(fill) { "#ffffff" } else { "#1a1a1a" },
                    esc(&text)
                );
            }
        }
        s.push_str(&self.bar(left, bar_y, bar_w));
        s.push_str("</svg>");
        s
    }

    /// The colour bar: a strip of the scale with its ends (and zero, on the gap) marked.
    fn bar(&self, left: f64, y: f64, width: f64) -> String {
        let (lo, hi) = self.range();
        let steps = 48;
        let mut s = String::from(r#"<g class="colour-bar">"#);
        for k in 0..steps {
            let v = lo + (hi - lo) * (k as f64 + 0.5) / steps as f64;
            let _ = write!(
                s,
                r#"<rect x="{:.2}" y="{y:.1}" width="{:.2}" height="10" fill="{}"/>"#,
                left + width * k as f64 / steps as f64,
                width / steps as f64 + 0.4,
                css(self.colour(v))
            );
        }
        let mark = |s: &mut String, x: f64, anchor: &str, text: &str| {
            let _ = write!(
                s,
                r##"<line x1="{x:.1}" y1="{:.1}" x2="{x:.1}" y2="{:.1}" stroke="#1a1a1a"/><text x="{x:.1}" y="{:.1}" text-anchor="{anchor}" font-size="11">{}</text>"##,
                y + 10.0,
                y + 14.0,
                y + 26.0,
                esc(text)
            );
        };
        mark(&mut s, left, "start", &format!("{lo:.2}"));
        mark(
            &mut s,
            left + width,
            "end",
            &format!("{hi:.2} {}", self.unit),
        );
        if let Scale::Diverging = self.scale {
            mark(&mut s, left + width / 2.0, "middle", "0");
            let _ = write!(
                s,
                r##"<text x="{left:.1}" y="{:.1}" font-size="11" fill="#555555">◀ fixed ahead</text><text x="{:.1}" y="{:.1}" text-anchor="end" font-size="11" fill="#555555">float ahead ▶</text>"##,
                y + 42.0,
                left + width,
                y + 42.0
            );
        }
        s.push_str("</g>");
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn map(values: &[f64]) -> (Vec<Vec<Cell>>, Vec<String>) {
        let cells = vec![values
            .iter()
            .map(|&v| Cell {
                values: vec![v],
                failed: 0,
            })
            .collect()];
        (cells, values.iter().map(|v| v.to_string()).collect())
    }

    #[test]
    fn gap_takes_the_colour_of_the_arm_ahead() {
        let (cells, cols) = map(&[-2.0, 0.0, 4.0]);
        let rows = vec!["r".to_string()];
        let h = Heatmap {
            title: "t",
            unit: "points",
            row_name: "row",
            rows: &rows,
            col_name: "col",
            cols: &cols,
            cells: &cells,
            scale: Scale::Diverging,
        };
        assert_eq!(h.colour(4.0), plot::FLOAT);
        assert_eq!(h.colour(-4.0), plot::FIXED);
        assert_eq!(h.colour(0.0), SAND);
        let svg = h.svg();
        assert!(svg.contains(&css(plot::FLOAT)) && svg.contains("float ahead"));
    }

    #[test]
    fn accuracy_runs_from_sand_to_deep_teal() {
        assert_eq!(sequential(0.0), SAND);
        assert_eq!(sequential(0.7), plot::FIXED);
        assert_eq!(sequential(1.0), DEEP);
        assert_eq!(mix(SAND, DEEP, 2.0), DEEP);
    }
}
