//! The report's figures as SVG text (plotters, SVG backend): every figure has axis labels with
//! units and a legend of its marks. Colours are the palette of Okabe & Ito (2008), readable with
//! the common forms of colour blindness.

use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;

/// Okabe & Ito (2008) colours: blue, orange, bluish green, vermillion, sky blue, reddish purple,
/// yellow, black.
pub const PALETTE: [RGBColor; 8] = [
    RGBColor(0, 114, 178),
    RGBColor(230, 159, 0),
    RGBColor(0, 158, 115),
    RGBColor(213, 94, 0),
    RGBColor(86, 180, 233),
    RGBColor(204, 121, 167),
    RGBColor(240, 228, 66),
    RGBColor(0, 0, 0),
];

fn colour(i: usize) -> RGBColor {
    PALETTE[i % PALETTE.len()]
}

/// A figure that plotters could not draw.
#[derive(Debug, thiserror::Error)]
#[error("drawing the figure `{figure}`: {message}")]
pub struct FigureError {
    /// The figure's title.
    pub figure: String,
    /// What plotters said.
    pub message: String,
}

fn fail<E: std::fmt::Debug>(figure: &str) -> impl Fn(E) -> FigureError + '_ {
    move |e| FigureError {
        figure: figure.to_string(),
        message: format!("{e:?}"),
    }
}

type Chart<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;
type Area<'b> = DrawingArea<SVGBackend<'b>, plotters::coord::Shift>;

/// An SVG figure of `size` drawn by `body` on a white area, as inline SVG text.
fn render(
    title: &str,
    size: (u32, u32),
    body: impl FnOnce(&Area<'_>) -> Result<(), FigureError>,
) -> Result<String, FigureError> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        root.fill(&WHITE).map_err(fail(title))?;
        body(&root)?;
        root.present().map_err(fail(title))?;
    }
    Ok(inline(&svg))
}

/// Draws the legend of the labelled series at `position`.
fn legend<'a, 'b: 'a>(
    chart: &mut Chart<'a, 'b>,
    position: SeriesLabelPosition,
    title: &str,
) -> Result<(), FigureError> {
    chart
        .configure_series_labels()
        .position(position)
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .draw()
        .map_err(fail(title))
}

/// The label of category `x` (an integer position) among `names`, empty between them.
fn category(names: &[String], x: f64) -> String {
    let i = x.round();
    if (x - i).abs() < 1e-6 && i >= 0.0 {
        names.get(i as usize).cloned().unwrap_or_default()
    } else {
        String::new()
    }
}

/// Lower and upper end of an axis holding `values`, with 5 % room (a unit range around a single
/// value).
fn span(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    if hi - lo < 1e-12 {
        return (lo - 0.5, hi + 0.5);
    }
    let pad = 0.05 * (hi - lo);
    (lo - pad, hi + pad)
}

/// Quantile of type 7 (Hyndman & Fan 1996) of sorted values.
fn quantile(sorted: &[f64], p: f64) -> f64 {
    crate::check::quantile_sorted(sorted, p).unwrap_or(f64::NAN)
}

/// The SVG text without the XML namespace attribute (an HTML5 page does not need it, and the
/// report holds no address of any kind).
pub fn inline(svg: &str) -> String {
    svg.replace(" xmlns=\"http://www.w3.org/2000/svg\"", "")
        .replace(" xmlns:xlink=\"http://www.w3.org/1999/xlink\"", "")
}

/// Per group, each participant's value as a point (spread sideways by a fixed low-discrepancy
/// offset, so the figure is the same at every run), the group median as a bar and the
/// interquartile range as a box.
pub fn strip(
    title: &str,
    y_label: &str,
    groups: &[(String, Vec<f64>)],
) -> Result<String, FigureError> {
    let err = fail(title);
    let width = (220 + 150 * groups.len() as u32).min(900);
    render(title, (width, 340), |root| {
        let (lo, hi) = span(groups.iter().flat_map(|(_, v)| v.iter().copied()));
        // Room above the points for the legend.
        let hi = hi + 0.3 * (hi - lo);
        let names: Vec<String> = groups.iter().map(|(g, _)| g.clone()).collect();
        let mut chart = ChartBuilder::on(root)
            .caption(title, ("sans-serif", 15))
            .margin(10)
            .x_label_area_size(35)
            .y_label_area_size(60)
            .build_cartesian_2d(-0.5..groups.len() as f64 - 0.5, lo..hi)
            .map_err(&err)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(groups.len().max(1))
            .x_label_formatter(&|x| category(&names, *x))
            .x_desc("group")
            .y_desc(y_label)
            .draw()
            .map_err(&err)?;
        for (k, (_, values)) in groups.iter().enumerate() {
            let centre = k as f64;
            let points = values.iter().enumerate().map(|(i, &v)| {
                // Golden-ratio sequence: evenly spread, fixed offsets in [−0.25, 0.25].
                let offset = ((i as f64 * 0.618_033_988_75) % 1.0 - 0.5) * 0.5;
                Circle::new((centre + offset, v), 3, colour(k).mix(0.7).filled())
            });
            let series = chart.draw_series(points).map_err(&err)?;
            if k == 0 {
                series
                    .label("one participant")
                    .legend(|(x, y)| Circle::new((x + 8, y), 3, colour(0).filled()));
            }
            let mut sorted: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
            if sorted.is_empty() {
                continue;
            }
            sorted.sort_by(f64::total_cmp);
            let (q1, q2, q3) = (
                quantile(&sorted, 0.25),
                quantile(&sorted, 0.5),
                quantile(&sorted, 0.75),
            );
            let boxes = chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(centre - 0.32, q1), (centre + 0.32, q3)],
                    BLACK.stroke_width(1),
                )))
                .map_err(&err)?;
            if k == 0 {
                boxes
                    .label("interquartile range")
                    .legend(|(x, y)| Rectangle::new([(x, y - 5), (x + 16, y + 5)], BLACK));
            }
            let medians = chart
                .draw_series(LineSeries::new(
                    [(centre - 0.36, q2), (centre + 0.36, q2)],
                    BLACK.stroke_width(3),
                ))
                .map_err(&err)?;
            if k == 0 {
                medians.label("group median").legend(|(x, y)| {
                    PathElement::new([(x, y), (x + 16, y)], BLACK.stroke_width(3))
                });
            }
        }
        legend(&mut chart, SeriesLabelPosition::UpperRight, title)
    })
}

/// Grouped bars: per category (x), one bar per series, with a legend of the series.
pub fn bars(
    title: &str,
    y_label: &str,
    categories: &[String],
    series: &[(String, Vec<f64>)],
) -> Result<String, FigureError> {
    let err = fail(title);
    let width = (260 + 110 * categories.len() as u32).min(1000);
    render(title, (width, 360), |root| {
        let mut chart = ChartBuilder::on(root)
            .caption(title, ("sans-serif", 15))
            .margin(10)
            .x_label_area_size(45)
            .y_label_area_size(60)
            // Room above 1 for the legend; the axis is labelled up to 1 only.
            .build_cartesian_2d(-0.5..categories.len() as f64 - 0.5, 0.0..1.3)
            .map_err(&err)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .y_label_formatter(&|y| {
                if *y <= 1.0 + 1e-9 {
                    format!("{y:.1}")
                } else {
                    String::new()
                }
            })
            .x_labels(categories.len().max(1))
            .x_label_formatter(&|x| category(categories, *x))
            .x_desc("model")
            .y_desc(y_label)
            .draw()
            .map_err(&err)?;
        let width = 0.8 / series.len().max(1) as f64;
        for (s, (label, values)) in series.iter().enumerate() {
            let c = colour(s);
            chart
                .draw_series(values.iter().enumerate().map(|(k, &v)| {
                    let left = k as f64 - 0.4 + s as f64 * width;
                    Rectangle::new([(left, 0.0), (left + width * 0.9, v)], c.filled())
                }))
                .map_err(&err)?
                .label(label.as_str())
                .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 16, y + 5)], c.filled()));
        }
        legend(&mut chart, SeriesLabelPosition::UpperRight, title)
    })
}

/// Generating values (x) against estimates (y) per series, with the identity line.
pub fn scatter(
    title: &str,
    x_label: &str,
    y_label: &str,
    series: &[(String, Vec<(f64, f64)>)],
) -> Result<String, FigureError> {
    let err = fail(title);
    render(title, (420, 380), |root| {
        let all = || series.iter().flat_map(|(_, p)| p.iter());
        let (lo, hi) = span(all().flat_map(|&(x, y)| [x, y]));
        let mut chart = ChartBuilder::on(root)
            .caption(title, ("sans-serif", 14))
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(55)
            .build_cartesian_2d(lo..hi, lo..hi)
            .map_err(&err)?;
        chart
            .configure_mesh()
            .x_desc(x_label)
            .y_desc(y_label)
            .draw()
            .map_err(&err)?;
        chart
            .draw_series(LineSeries::new([(lo, lo), (hi, hi)], BLACK.stroke_width(1)))
            .map_err(&err)?
            .label("estimate = generating value")
            .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], BLACK));
        for (s, (label, points)) in series.iter().enumerate() {
            let c = colour(s);
            chart
                .draw_series(
                    points
                        .iter()
                        .map(|&(x, y)| Circle::new((x, y), 2, c.mix(0.6).filled())),
                )
                .map_err(&err)?
                .label(label.as_str())
                .legend(move |(x, y)| Circle::new((x + 8, y), 3, c.filled()));
        }
        legend(&mut chart, SeriesLabelPosition::UpperLeft, title)
    })
}

/// A curve of estimates with intervals (x, y, low, high), and an optional theoretical curve.
pub struct Curve {
    /// Legend label.
    pub label: String,
    /// Points with their interval.
    pub points: Vec<(f64, f64, f64, f64)>,
    /// The same quantity in theory (dashed), when known.
    pub theory: Vec<(f64, f64)>,
}

/// Curves with interval bars (e.g. power against participants per group), the theoretical
/// curves dashed, and a horizontal reference line at `reference` (e.g. 0.8 power).
pub fn curves(
    title: &str,
    x_label: &str,
    y_label: &str,
    curves: &[Curve],
    reference: Option<(f64, &str)>,
) -> Result<String, FigureError> {
    let err = fail(title);
    render(title, (560, 380), |root| {
        let (x_lo, x_hi) = span(curves.iter().flat_map(|c| c.points.iter().map(|p| p.0)));
        let mut chart = ChartBuilder::on(root)
            .caption(title, ("sans-serif", 14))
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(55)
            .build_cartesian_2d(x_lo..x_hi, 0.0..1.02)
            .map_err(&err)?;
        chart
            .configure_mesh()
            .x_desc(x_label)
            .y_desc(y_label)
            .draw()
            .map_err(&err)?;
        if let Some((level, label)) = reference {
            chart
                .draw_series(LineSeries::new(
                    [(x_lo, level), (x_hi, level)],
                    RGBColor(150, 150, 150).stroke_width(1),
                ))
                .map_err(&err)?
                .label(label)
                .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], RGBColor(150, 150, 150)));
        }
        for (s, curve) in curves.iter().enumerate() {
            let c = colour(s);
            chart
                .draw_series(LineSeries::new(
                    curve.points.iter().map(|p| (p.0, p.1)),
                    c.stroke_width(2),
                ))
                .map_err(&err)?
                .label(format!("{} (simulated, 95 % interval)", curve.label))
                .legend(move |(x, y)| PathElement::new([(x, y), (x + 16, y)], c.stroke_width(2)));
            chart
                .draw_series(
                    curve.points.iter().map(|&(x, _, lo, hi)| {
                        PathElement::new([(x, lo), (x, hi)], c.stroke_width(1))
                    }),
                )
                .map_err(&err)?;
            chart
                .draw_series(
                    curve
                        .points
                        .iter()
                        .map(|&(x, y, _, _)| Circle::new((x, y), 3, c.filled())),
                )
                .map_err(&err)?;
            if curve.theory.len() > 1 {
                chart
                    .draw_series(DashedLineSeries::new(
                        curve.theory.iter().copied(),
                        5,
                        4,
                        c.stroke_width(1),
                    ))
                    .map_err(&err)?
                    .label(format!("{} (normal theory)", curve.label))
                    .legend(move |(x, y)| {
                        PathElement::new([(x, y), (x + 6, y)], c.stroke_width(1))
                    });
            }
        }
        legend(&mut chart, SeriesLabelPosition::LowerRight, title)
    })
}
