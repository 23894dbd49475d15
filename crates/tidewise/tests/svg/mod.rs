//! Geometry of a produced SVG file, read back with `roxmltree`: the legend's box, every drawn
//! line and polygon, and an estimated box for every text. Text boxes are an approximation:
//! width = characters × 0.6 × font size (an average sans-serif advance; fact of the trade,
//! not a measurement), height = the font size, placed by `text-anchor` and the `dy` shifts
//! the SVG uses. Rotated texts (axis descriptions) are left out of the text checks.

#![allow(dead_code)] // not every test that shares this module uses every check

/// An axis-aligned box: left, top, right, bottom.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Rect {
    pub x0: f64,
    pub y0: f64,
    pub x1: f64,
    pub y1: f64,
}

impl Rect {
    pub fn overlaps(&self, o: &Rect) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }
    pub fn contains(&self, o: &Rect) -> bool {
        o.x0 >= self.x0 && o.x1 <= self.x1 && o.y0 >= self.y0 && o.y1 <= self.y1
    }
    fn inside(&self, (x, y): (f64, f64)) -> bool {
        x > self.x0 && x < self.x1 && y > self.y0 && y < self.y1
    }
}

/// A text and its estimated box.
#[derive(Clone, Debug)]
pub struct Label {
    pub text: String,
    pub rect: Rect,
}

/// What the checks need of a figure.
#[derive(Debug, Default)]
pub struct Figure {
    pub width: f64,
    pub height: f64,
    /// The legend's box (`<g class="legend">`'s rect), if there is one.
    pub legend: Option<Rect>,
    pub legend_labels: Vec<Label>,
    /// Polylines and lines outside the legend, as point lists.
    pub lines: Vec<Vec<(f64, f64)>>,
    /// Filled polygons (bands).
    pub polygons: Vec<Vec<(f64, f64)>>,
    /// Unrotated texts outside the legend.
    pub labels: Vec<Label>,
}

fn attr(n: &roxmltree::Node, k: &str) -> f64 {
    n.attribute(k)
        .and_then(|v| v.trim().parse().ok())
        .unwrap_or(0.0)
}

fn points(s: &str) -> Vec<(f64, f64)> {
    s.split_whitespace()
        .filter_map(|p| {
            let (x, y) = p.split_once(',')?;
            Some((x.parse().ok()?, y.parse().ok()?))
        })
        .collect()
}

fn label(n: &roxmltree::Node) -> Option<Label> {
    if n.attribute("transform").is_some() {
        return None;
    }
    // The shown text, without a hover <title> child.
    let text: String = n
        .children()
        .filter(|c| c.is_text())
        .filter_map(|c| c.text())
        .collect::<String>()
        .trim()
        .to_string();
    if text.is_empty() {
        return None;
    }
    let fs = attr(n, "font-size").max(1.0);
    let w = text.chars().count() as f64 * 0.6 * fs;
    let (x, y) = (attr(n, "x"), attr(n, "y"));
    let x0 = match n.attribute("text-anchor") {
        Some("middle") => x - w / 2.0,
        Some("end") => x - w,
        _ => x,
    };
    // Top of the glyph box for each vertical placement the files use; plain is a baseline.
    let top = match n.attribute("dy") {
        Some("0.76em") => y,
        Some("0.5ex") => y - fs / 2.0,
        Some("-0.5ex") => y - fs,
        _ => y - 0.8 * fs,
    };
    Some(Label {
        text,
        rect: Rect {
            x0,
            y0: top,
            x1: x0 + w,
            y1: top + fs,
        },
    })
}

/// Reads a figure; fails on SVG that does not parse.
pub fn parse(svg: &str) -> Figure {
    let doc = roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("SVG does not parse: {e}"));
    let root = doc.root_element();
    let mut f = Figure {
        width: attr(&root, "width"),
        height: attr(&root, "height"),
        ..Figure::default()
    };
    for n in root.descendants().filter(|n| n.is_element()) {
        let in_legend = n
            .ancestors()
            .any(|a| a.attribute("class") == Some("legend"));
        match (n.tag_name().name(), in_legend) {
            ("rect", true) => {
                let (x, y) = (attr(&n, "x"), attr(&n, "y"));
                f.legend = Some(Rect {
                    x0: x,
                    y0: y,
                    x1: x + attr(&n, "width"),
                    y1: y + attr(&n, "height"),
                });
            }
            ("text", true) => f.legend_labels.extend(label(&n)),
            ("text", false) => f.labels.extend(label(&n)),
            ("polyline", false) => f.lines.push(points(n.attribute("points").unwrap_or(""))),
            ("line", false) => f.lines.push(vec![
                (attr(&n, "x1"), attr(&n, "y1")),
                (attr(&n, "x2"), attr(&n, "y2")),
            ]),
            ("polygon", false) => f.polygons.push(points(n.attribute("points").unwrap_or(""))),
            _ => {}
        }
    }
    f
}

/// Whether the segment a–b meets the box (Liang–Barsky clipping).
pub fn segment_meets(r: &Rect, a: (f64, f64), b: (f64, f64)) -> bool {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let (mut t0, mut t1) = (0.0f64, 1.0f64);
    for (p, q) in [
        (-dx, a.0 - r.x0),
        (dx, r.x1 - a.0),
        (-dy, a.1 - r.y0),
        (dy, r.y1 - a.1),
    ] {
        if p == 0.0 {
            if q < 0.0 {
                return false;
            }
        } else {
            let t = q / p;
            if p < 0.0 {
                t0 = t0.max(t);
            } else {
                t1 = t1.min(t);
            }
            if t0 > t1 {
                return false;
            }
        }
    }
    true
}

fn polygon_contains(poly: &[(f64, f64)], (x, y): (f64, f64)) -> bool {
    let mut inside = false;
    let n = poly.len();
    for i in 0..n {
        let (a, b) = (poly[i], poly[(i + n - 1) % n]);
        if (a.1 > y) != (b.1 > y) && x < (b.0 - a.0) * (y - a.1) / (b.1 - a.1) + a.0 {
            inside = !inside;
        }
    }
    inside
}

/// Fails when a line, point or band of the figure touches its legend's box, when a legend
/// text leaves the box, when a text leaves the figure, or when two texts overlap.
pub fn assert_clean(what: &str, svg: &str) {
    let f = parse(svg);
    let legend = f
        .legend
        .unwrap_or_else(|| panic!("{what}: no legend box in the figure"));
    assert!(
        !f.lines.is_empty(),
        "{what}: no lines at all: nothing was checked"
    );
    for line in &f.lines {
        for p in line {
            assert!(
                !legend.inside(*p),
                "{what}: point {p:?} lies in the legend {legend:?}"
            );
        }
        for w in line.windows(2) {
            assert!(
                !segment_meets(&legend, w[0], w[1]),
                "{what}: segment {:?}–{:?} crosses the legend {legend:?}",
                w[0],
                w[1]
            );
        }
    }
    for poly in &f.polygons {
        let corners = [
            (legend.x0, legend.y0),
            (legend.x1, legend.y0),
            (legend.x0, legend.y1),
            (legend.x1, legend.y1),
        ];
        assert!(
            !corners.iter().any(|&c| polygon_contains(poly, c)),
            "{what}: a band covers the legend {legend:?}"
        );
        let n = poly.len();
        for i in 0..n {
            assert!(
                !segment_meets(&legend, poly[i], poly[(i + 1) % n]),
                "{what}: a band's edge crosses the legend {legend:?}"
            );
        }
    }
    for l in &f.legend_labels {
        assert!(
            legend.contains(&l.rect),
            "{what}: legend text `{}` {:?} leaves its box {legend:?}",
            l.text,
            l.rect
        );
    }
    let page = Rect {
        x0: 0.0,
        y0: 0.0,
        x1: f.width,
        y1: f.height,
    };
    let all: Vec<&Label> = f.labels.iter().chain(&f.legend_labels).collect();
    for (i, a) in all.iter().enumerate() {
        assert!(
            page.contains(&a.rect),
            "{what}: text `{}` {:?} leaves the figure ({} × {})",
            a.text,
            a.rect,
            f.width,
            f.height
        );
        for b in &all[i + 1..] {
            assert!(
                !a.rect.overlaps(&b.rect),
                "{what}: texts `{}` {:?} and `{}` {:?} overlap",
                a.text,
                a.rect,
                b.text,
                b.rect
            );
        }
    }
}
