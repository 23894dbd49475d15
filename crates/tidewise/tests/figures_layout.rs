//! The figures read cleanly: read back from the SVG files themselves, no plotted line, point
//! or band touches the legend's box, and no two texts (tick labels included) overlap, for
//! data that fills every corner of a panel (curves rising to the top left and the top right,
//! flat at the top, bands over the whole panel, log axes over many or few decades).
//! Text boxes are estimated from font size × characters (see `svg/mod.rs`); the segment test
//! is Liang–Barsky line clipping ("A new concept and method for line clipping", ACM
//! Transactions on Graphics, 1984).

mod svg;

use tidewise::arms;
use tidewise::plot::{self, Band, Panel, Series};
use tidewise::spec;
use tidewise::summary;

fn line(name: &str, k: usize, dashed: bool, pts: Vec<(f64, f64)>) -> Series {
    Series {
        name: name.into(),
        color: plot::PALETTE[k % plot::PALETTE.len()],
        dashed,
        points: pts,
    }
}

fn panel(title: &str, log_y: bool, series: Vec<Series>) -> Panel {
    Panel {
        title: title.into(),
        x_label: "epoch".into(),
        y_label: "value".into(),
        series,
        log_y,
    }
}

fn xs(n: usize) -> impl Iterator<Item = f64> {
    (1..=n).map(|e| e as f64)
}

/// Curves that reach the top left (falling from the first epoch), the top right (rising to
/// the last), stay flat at the top, or fill the panel.
fn corner_panels() -> Vec<Panel> {
    vec![
        panel(
            "rises to the top right",
            false,
            vec![
                line("fixed", 0, false, xs(30).map(|x| (x, x / 30.0)).collect()),
                line(
                    "float",
                    1,
                    true,
                    xs(30).map(|x| (x, (x / 30.0).sqrt())).collect(),
                ),
            ],
        ),
        panel(
            "starts at the top left",
            false,
            vec![
                line("fixed", 0, false, xs(30).map(|x| (x, 1.0 / x)).collect()),
                line(
                    "float",
                    1,
                    true,
                    xs(30).map(|x| (x, 1.0 - x / 31.0)).collect(),
                ),
            ],
        ),
        panel(
            "flat at the top, zig-zag below",
            false,
            vec![
                line("fixed", 0, false, xs(40).map(|x| (x, 100.0)).collect()),
                line(
                    "float",
                    1,
                    true,
                    xs(40)
                        .map(|x| {
                            (
                                x,
                                if (x as u32).is_multiple_of(2) {
                                    0.0
                                } else {
                                    99.0
                                },
                            )
                        })
                        .collect(),
                ),
            ],
        ),
        panel(
            "loss over nine decades",
            true,
            vec![
                line(
                    "fixed",
                    0,
                    false,
                    xs(20).map(|x| (x, 10f64.powf(3.0 - x / 3.3))).collect(),
                ),
                line(
                    "float",
                    1,
                    true,
                    xs(20).map(|x| (x, 10f64.powf(2.0 - x / 4.0))).collect(),
                ),
            ],
        ),
        panel(
            "loss within two decades, touching zero",
            true,
            vec![
                line(
                    "fixed",
                    0,
                    false,
                    xs(12).map(|x| (x, 0.05 + 1.0 / x)).collect(),
                ),
                line(
                    "float",
                    1,
                    true,
                    xs(12)
                        .map(|x| (x, if x > 10.0 { 0.0 } else { 0.9 / x }))
                        .collect(),
                ),
            ],
        ),
    ]
}

#[test]
fn corner_curves_leave_the_legend_clear() {
    for columns in [1, 2, 3] {
        let svg = plot::render("corner cases, invented data", &corner_panels(), columns).unwrap();
        svg::assert_clean(&format!("{columns} column(s)"), &svg);
    }
}

#[test]
fn bands_over_the_whole_panel_and_long_names_leave_the_legend_clear() {
    // Like bits.svg: several rounding lines with their spread, the float reference and the
    // tolerance line, names long enough to wrap the legend onto several rows.
    let mut panels = Vec::new();
    for (k, class) in ["forward_weights", "biases", "activations"]
        .iter()
        .enumerate()
    {
        let w: Vec<f64> = (4..=16).step_by(2).map(f64::from).collect();
        let mean = |x: f64| 95.0 - 60.0 * (-(x - 3.0) / (1.5 + k as f64)).exp();
        let series = vec![
            line(
                "fixed, stochastic rounding: mean of 4 (band: range)",
                0,
                false,
                w.iter().map(|&x| (x, mean(x))).collect(),
            ),
            line(
                "fixed, nearest rounding: mean of 4 (band: range)",
                2,
                false,
                w.iter().map(|&x| (x, mean(x) - 5.0)).collect(),
            ),
            line(
                "float reference (mean)",
                1,
                true,
                vec![(4.0, 95.0), (16.0, 95.0)],
            ),
            line(
                "float − 1.0 points",
                5,
                true,
                vec![(4.0, 94.0), (16.0, 94.0)],
            ),
        ];
        let bands = vec![Band {
            color: plot::FIXED,
            points: w.iter().map(|&x| (x, 0.0, 100.0)).collect(),
        }];
        panels.push((
            Panel {
                title: (*class).into(),
                x_label: "word bits".into(),
                y_label: "test accuracy (%)".into(),
                series,
                log_y: false,
            },
            bands,
        ));
    }
    let title = "a/very/long/path/to/an/invented/spec.toml: dtp-direct on csv — accuracy against word bits, with a title far longer than the figure is wide, so that it has to be cut short";
    let svg = plot::render_banded(title, &panels, 2).unwrap();
    svg::assert_clean("bits-like", &svg);
    assert!(
        svg.contains("<title>"),
        "the cut title keeps its full text as a hover title"
    );
}

#[test]
fn training_curves_leave_the_legend_clear() {
    // A real run on the invented pump data: curves.svg as `tidewise train` writes it.
    let text = "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [6]\n\
                [rule]\nname = \"dtp\"\n[run]\nepochs = 12\n";
    let (spec, design) = spec::parse(text, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let cmp = arms::run(
        &spec,
        &design,
        &prepared,
        &mut arms::NoObserver,
        &mut |_, _, _| {},
    )
    .unwrap();
    let svg = summary::curves_svg("pump (invented data): dtp", &cmp).unwrap();
    svg::assert_clean("curves.svg", &svg);
}

#[test]
fn the_check_finds_a_legend_over_data() {
    // The check itself can fail: a line drawn across the legend's box is caught.
    let svg = plot::render("control", &corner_panels()[..1], 1).unwrap();
    let f = svg::parse(&svg);
    let r = f.legend.unwrap();
    let crossing = format!(
        r#"<polyline fill="none" stroke="black" points="{},{} {},{} "/></svg>"#,
        r.x0 - 5.0,
        (r.y0 + r.y1) / 2.0,
        r.x1 + 5.0,
        (r.y0 + r.y1) / 2.0
    );
    let bad = svg.replace("</svg>", &crossing);
    let caught = std::panic::catch_unwind(|| svg::assert_clean("control", &bad));
    assert!(caught.is_err(), "a line across the legend went unnoticed");
}
