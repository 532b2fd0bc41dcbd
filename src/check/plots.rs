//! SVG figures of the pooled predictive check (plotters, SVG backend): observed statistics as
//! points over the predicted 95 % bands (boxes from the 2.5 % to the 97.5 % replicate quantile)
//! and the predicted means (lines), against the bin index.

use super::{Factor, Kind, Response, Statistic};
use plotters::prelude::*;

const WIDTH: u32 = 1000;
const HEIGHT: u32 = 460;
/// One colour per response-time quantile (.1 … .9).
const COLOURS: [RGBColor; 5] = [
    RGBColor(0, 90, 181),
    RGBColor(0, 150, 130),
    RGBColor(90, 90, 90),
    RGBColor(220, 120, 0),
    RGBColor(200, 30, 60),
];

/// (bin, observed, (predicted mean, low, high)).
type Point = (f64, Option<f64>, Option<(f64, f64, f64)>);

/// One series to draw in a panel: per bin (1-based) the observed value and the band.
struct Series {
    colour: RGBColor,
    points: Vec<Point>,
}

fn series_of<'a>(statistics: impl Iterator<Item = &'a Statistic>, colour: RGBColor) -> Series {
    Series {
        colour,
        points: statistics
            .map(|s| {
                (
                    s.key.bin as f64 + 1.0,
                    s.observed,
                    s.band().map(|b| (b.mean, b.low, b.high)),
                )
            })
            .collect(),
    }
}

struct Panel {
    title: String,
    x_label: String,
    y_label: String,
    y_range: (f64, f64),
    series: Vec<Series>,
}

/// A figure that plotters could not draw.
#[derive(Debug, thiserror::Error)]
#[error("drawing the figure: {0}")]
pub struct DrawError(DrawingAreaErrorKind<std::io::Error>);

fn draw(title: &str, panels: &[Panel]) -> Result<String, DrawError> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(DrawError)?;
        let root = root.titled(title, ("sans-serif", 16)).map_err(DrawError)?;
        for (area, panel) in root.split_evenly((1, panels.len())).iter().zip(panels) {
            let n_bins = panel
                .series
                .iter()
                .flat_map(|s| s.points.iter().map(|p| p.0))
                .fold(1.0, f64::max);
            let mut chart = ChartBuilder::on(area)
                .caption(&panel.title, ("sans-serif", 15))
                .margin(12)
                .x_label_area_size(40)
                .y_label_area_size(55)
                .build_cartesian_2d(0.5..n_bins + 0.5, panel.y_range.0..panel.y_range.1)
                .map_err(DrawError)?;
            chart
                .configure_mesh()
                .disable_mesh()
                .x_labels(n_bins as usize)
                .x_label_formatter(&|x| format!("{x:.0}"))
                .x_desc(panel.x_label.as_str())
                .y_desc(panel.y_label.as_str())
                .draw()
                .map_err(DrawError)?;
            for s in &panel.series {
                let bands = s.points.iter().filter_map(|&(x, _, b)| {
                    b.map(|(_, lo, hi)| {
                        Rectangle::new(
                            [(x - 0.18, lo), (x + 0.18, hi)],
                            s.colour.mix(0.25).filled(),
                        )
                    })
                });
                chart.draw_series(bands).map_err(DrawError)?;
                let means = s.points.windows(2).filter_map(|w| match (w[0].2, w[1].2) {
                    (Some(a), Some(b)) => Some(PathElement::new(
                        vec![(w[0].0, a.0), (w[1].0, b.0)],
                        s.colour.stroke_width(1),
                    )),
                    _ => None,
                });
                chart.draw_series(means).map_err(DrawError)?;
                let observed = s
                    .points
                    .iter()
                    .filter_map(|&(x, o, _)| o.map(|y| Circle::new((x, y), 4, s.colour.filled())));
                chart.draw_series(observed).map_err(DrawError)?;
            }
        }
        root.present().map_err(DrawError)?;
    }
    Ok(svg)
}

/// Range of every observed value and band of `statistics`, padded by 5 %.
fn y_range<'a>(statistics: impl Iterator<Item = &'a Statistic>) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for s in statistics {
        for v in s
            .observed
            .into_iter()
            .chain(s.band().into_iter().flat_map(|b| [b.low, b.high]))
        {
            lo = lo.min(v);
            hi = hi.max(v);
        }
    }
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    let pad = 0.05 * (hi - lo).max(1e-3);
    (lo - pad, hi + pad)
}

/// Response-time quantiles (.1 … .9, one colour each, fastest blue) against the |value
/// difference| quintile, for correct-by-value and for other responses, of the pooled or one
/// subject's statistics (`scope` names which in the title); None when the statistics hold no
/// quantiles (a model without response times).
pub fn rt_quantile_figure(
    statistics: &[Statistic],
    scope: &str,
) -> Result<Option<String>, DrawError> {
    let of = |response: Response| {
        statistics.iter().filter(move |s| {
            s.key.factor == Factor::ValueDifference
                && matches!(s.key.kind, Kind::RtQuantile { response: r, .. } if r == response)
        })
    };
    if of(Response::CorrectByValue).next().is_none() {
        return Ok(None);
    }
    let y_range = y_range(of(Response::CorrectByValue).chain(of(Response::Other)));
    let panels: Vec<Panel> = [Response::CorrectByValue, Response::Other]
        .into_iter()
        .map(|response| Panel {
            title: format!("{} responses", response.as_str().replace('_', "-")),
            x_label: "quintile of |value difference|".into(),
            y_label: "response time (s)".into(),
            y_range,
            series: super::RT_QUANTILES
                .iter()
                .zip(COLOURS)
                .map(|(&q, colour)| {
                    series_of(
                        of(response).filter(move |s| {
                            matches!(s.key.kind, Kind::RtQuantile { quantile, .. } if quantile == q)
                        }),
                        colour,
                    )
                })
                .collect(),
        })
        .collect();
    let title = format!(
        "Response-time quantiles .1 .3 .5 .7 .9, {scope}: points observed, boxes 95 % predicted \
         band, lines predicted mean"
    );
    draw(&title, &panels).map(Some)
}

/// Proportion of correct-by-value responses against the |value difference| quintile and against
/// the effort level of the better option, of the pooled or one subject's statistics (`scope`
/// names which in the title).
pub fn choice_figure(statistics: &[Statistic], scope: &str) -> Result<String, DrawError> {
    let panels: Vec<Panel> = [
        (Factor::ValueDifference, "quintile of |value difference|"),
        (Factor::Effort, "effort level of the better option (bin)"),
    ]
    .into_iter()
    .map(|(factor, x_label)| {
        let of = || {
            statistics
                .iter()
                .filter(move |s| s.key.factor == factor && s.key.kind == Kind::ChoiceProportion)
        };
        let (lo, hi) = y_range(of());
        Panel {
            title: format!("by {}", factor.as_str().replace('_', " ")),
            x_label: x_label.into(),
            y_label: "P(correct by value)".into(),
            y_range: (lo.max(-0.02), hi.min(1.02)),
            series: vec![series_of(of(), COLOURS[0])],
        }
    })
    .collect();
    let title = format!(
        "Choices, {scope}: points observed, boxes 95 % predicted band, line predicted mean"
    );
    draw(&title, &panels)
}
