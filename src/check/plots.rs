//! SVG figures of the predictive check (plotters, SVG backend): observed statistics as points
//! over the predicted 95 % bands (boxes from the 2.5 % to the 97.5 % replicate quantile) and the
//! predicted means (lines joining ordered bins, short bars for option sides), one position per
//! bin. Bins are labelled by the factor's values: the
//! range of |value difference| in a quintile, the effort level (or range) of an effort bin, the
//! side of an option bin; response times are in seconds. A legend under the panels names the
//! marks and the colour of each response-time quantile.

use super::{Factor, Kind, RT_QUANTILES, Response, Statistic};
use plotters::prelude::*;

const WIDTH: u32 = 1000;
const HEIGHT: u32 = 500;
/// Height of one row of the legend, in pixels.
const LEGEND_ROW: u32 = 24;
/// One colour per response-time quantile (.1 … .9).
const COLOURS: [RGBColor; 5] = [
    RGBColor(0, 90, 181),
    RGBColor(0, 150, 130),
    RGBColor(90, 90, 90),
    RGBColor(220, 120, 0),
    RGBColor(200, 30, 60),
];
/// Colour of the legend's marks, which stand for every colour.
const INK: RGBColor = RGBColor(60, 60, 60);

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
    /// Label of each bin, bin 1 first.
    ticks: Vec<String>,
    /// Whether the bins are ordered (the predicted means joined by a line) or categories such as
    /// option sides (each mean a short bar across its band).
    ordered: bool,
    series: Vec<Series>,
}

/// A figure that plotters could not draw.
#[derive(Debug, thiserror::Error)]
#[error("drawing the figure: {0}")]
pub struct DrawError(DrawingAreaErrorKind<std::io::Error>);

/// A number for a tick label: at most two decimals, trailing zeros dropped (2, 0.5, 0.13).
fn short(x: f64) -> String {
    let text = format!("{x:.2}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    if text == "-0" {
        "0".into()
    } else {
        text.into()
    }
}

/// Tick labels of the bins of `factor` in `statistics`: the side of an option bin, else the
/// range of the factor's values in the bin ("2" when it holds one value, "0.1–0.35"), or
/// "bin k" when no value fell in it.
fn ticks(statistics: &[Statistic], factor: Factor) -> Vec<String> {
    let n_bins = statistics
        .iter()
        .filter(|s| s.key.factor == factor)
        .map(|s| s.key.bin + 1)
        .max()
        .unwrap_or(0);
    (0..n_bins)
        .map(|bin| {
            if factor == Factor::Option {
                return crate::data::Choice(bin).as_str().to_string();
            }
            let range = statistics
                .iter()
                .find(|s| s.key.factor == factor && s.key.bin == bin && s.bin_range.is_some())
                .and_then(|s| s.bin_range);
            match range {
                Some((lo, hi)) if short(lo) == short(hi) => short(lo),
                Some((lo, hi)) => format!("{}–{}", short(lo), short(hi)),
                None => format!("bin {}", bin + 1),
            }
        })
        .collect()
}

/// Axis title of a factor's bins, with the unit of its values.
fn x_label(factor: Factor) -> &'static str {
    match factor {
        Factor::ValueDifference => "|value difference| by quintile (subjective-value units)",
        Factor::Effort => "effort of the better option (units of the effort columns)",
        Factor::Condition => "level of the condition column",
        Factor::Option => "option side chosen",
    }
}

/// Approximate width in pixels of `text` at `size` (plotters cannot measure SVG text; its SVG
/// backend writes fonts at size/1.24, about 0.45·size per character of a sans-serif font).
fn text_width(text: &str, size: u32) -> i32 {
    (text.chars().count() as f64 * 0.45 * size as f64).round() as i32
}

/// The legend under the panels: the marks (observed point, predicted band, predicted mean) on
/// the first row and, for figures of quantiles, one colour per quantile on the second.
fn draw_legend(
    area: &DrawingArea<SVGBackend<'_>, plotters::coord::Shift>,
    quantile_colours: bool,
) -> Result<(), DrawError> {
    let size = 13;
    let font = ("sans-serif", size).into_font();
    let row = LEGEND_ROW as i32;
    let mut x = 60;
    let y = row / 2;
    area.draw(&Circle::new((x, y), 4, INK.filled()))
        .map_err(DrawError)?;
    let label = |x: &mut i32, y: i32, text: &str| -> Result<(), DrawError> {
        area.draw(&Text::new(
            text.to_string(),
            (*x + 10, y - size as i32 / 2),
            font.clone(),
        ))
        .map_err(DrawError)?;
        *x += 10 + text_width(text, size) + 28;
        Ok(())
    };
    label(&mut x, y, "observed")?;
    area.draw(&Rectangle::new(
        [(x - 6, y - 8), (x + 6, y + 8)],
        INK.mix(0.25).filled(),
    ))
    .map_err(DrawError)?;
    label(
        &mut x,
        y,
        "predicted 95 % band (2.5–97.5 % of replicate datasets)",
    )?;
    area.draw(&PathElement::new(
        vec![(x - 10, y), (x + 6, y)],
        INK.stroke_width(1),
    ))
    .map_err(DrawError)?;
    label(&mut x, y, "predicted mean")?;
    if quantile_colours {
        let (mut x, y) = (60, row + row / 2);
        area.draw(&Text::new(
            "response-time quantile:",
            (x - 10, y - size as i32 / 2),
            font.clone(),
        ))
        .map_err(DrawError)?;
        x += text_width("response-time quantile:", size) + 10;
        for (q, colour) in RT_QUANTILES.iter().zip(COLOURS) {
            area.draw(&Circle::new((x, y), 4, colour.filled()))
                .map_err(DrawError)?;
            label(&mut x, y, &format!("{q:.1}").replacen("0.", ".", 1))?;
        }
    }
    Ok(())
}

fn draw(title: &str, panels: &[Panel], quantile_colours: bool) -> Result<String, DrawError> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&WHITE).map_err(DrawError)?;
        let root = root.titled(title, ("sans-serif", 16)).map_err(DrawError)?;
        let legend_rows = if quantile_colours { 2 } else { 1 };
        let plot_height = root.dim_in_pixel().1 - legend_rows * LEGEND_ROW - 6;
        let (plots, legend) = root.split_vertically(plot_height);
        for (area, panel) in plots.split_evenly((1, panels.len())).iter().zip(panels) {
            let n_bins = panel.ticks.len().max(1) as f64;
            let mut chart = ChartBuilder::on(area)
                .caption(&panel.title, ("sans-serif", 15))
                .margin(12)
                .x_label_area_size(45)
                .y_label_area_size(60)
                .build_cartesian_2d(0.5..n_bins + 0.5, panel.y_range.0..panel.y_range.1)
                .map_err(DrawError)?;
            // With at most n labels on 0.5..n + 0.5 the key points are the bins 1, …, n; any
            // other point gets no label.
            let tick = |x: &f64| {
                let bin = x.round();
                if (x - bin).abs() > 1e-9 || bin < 1.0 {
                    return String::new();
                }
                panel
                    .ticks
                    .get(bin as usize - 1)
                    .cloned()
                    .unwrap_or_default()
            };
            chart
                .configure_mesh()
                .disable_mesh()
                .x_labels(panel.ticks.len())
                .x_label_formatter(&tick)
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
                let means: Vec<PathElement<(f64, f64)>> = if panel.ordered {
                    s.points
                        .windows(2)
                        .filter_map(|w| match (w[0].2, w[1].2) {
                            (Some(a), Some(b)) => Some(PathElement::new(
                                vec![(w[0].0, a.0), (w[1].0, b.0)],
                                s.colour.stroke_width(1),
                            )),
                            _ => None,
                        })
                        .collect()
                } else {
                    s.points
                        .iter()
                        .filter_map(|&(x, _, b)| {
                            b.map(|(mean, _, _)| {
                                PathElement::new(
                                    vec![(x - 0.18, mean), (x + 0.18, mean)],
                                    s.colour.stroke_width(2),
                                )
                            })
                        })
                        .collect()
                };
                chart.draw_series(means).map_err(DrawError)?;
                let observed = s
                    .points
                    .iter()
                    .filter_map(|&(x, o, _)| o.map(|y| Circle::new((x, y), 4, s.colour.filled())));
                chart.draw_series(observed).map_err(DrawError)?;
            }
        }
        draw_legend(&legend, quantile_colours)?;
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

/// A y range for proportions: the data's range, kept within [−0.02, 1.02].
fn proportion_range<'a>(statistics: impl Iterator<Item = &'a Statistic>) -> (f64, f64) {
    let (lo, hi) = y_range(statistics);
    (lo.max(-0.02), hi.min(1.02))
}

/// One series per response-time quantile (.1 … .9, one colour each, fastest blue) of the
/// statistics `of` yields.
fn quantile_series<'a, I>(of: impl Fn() -> I) -> Vec<Series>
where
    I: Iterator<Item = &'a Statistic>,
{
    RT_QUANTILES
        .iter()
        .zip(COLOURS)
        .map(|(&q, colour)| {
            series_of(
                of().filter(move |s| {
                    matches!(s.key.kind, Kind::RtQuantile { quantile, .. } if quantile == q)
                }),
                colour,
            )
        })
        .collect()
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
            x_label: x_label(Factor::ValueDifference).into(),
            y_label: "response time (s)".into(),
            y_range,
            ticks: ticks(statistics, Factor::ValueDifference),
            ordered: true,
            series: quantile_series(|| of(response)),
        })
        .collect();
    let title = format!("Response-time quantiles by |value difference|, {scope}");
    draw(&title, &panels, true).map(Some)
}

/// Proportion of correct-by-value responses against the |value difference| quintile and against
/// the effort level of the better option, of the pooled or one subject's statistics (`scope`
/// names which in the title).
pub fn choice_figure(statistics: &[Statistic], scope: &str) -> Result<String, DrawError> {
    let panels: Vec<Panel> = [Factor::ValueDifference, Factor::Effort]
        .into_iter()
        .map(|factor| {
            let of = || {
                statistics
                    .iter()
                    .filter(move |s| s.key.factor == factor && s.key.kind == Kind::ChoiceProportion)
            };
            Panel {
                title: match factor {
                    Factor::ValueDifference => "by |value difference|".into(),
                    _ => "by effort of the better option".into(),
                },
                x_label: x_label(factor).into(),
                y_label: "P(correct by value)".into(),
                y_range: proportion_range(of()),
                ticks: ticks(statistics, factor),
                ordered: true,
                series: vec![series_of(of(), COLOURS[0])],
            }
        })
        .collect();
    let title = format!("Choices correct by value, {scope}");
    draw(&title, &panels, false)
}

/// Per option side: the share of responses that chose it and (for models of time, with the
/// quantile colours) the response-time quantiles .1 … .9 of the responses that chose it, of the
/// pooled or one subject's statistics (`scope` names which in the title); None when the
/// statistics hold no choice shares.
pub fn option_figure(statistics: &[Statistic], scope: &str) -> Result<Option<String>, DrawError> {
    let shares = || {
        statistics
            .iter()
            .filter(|s| s.key.factor == Factor::Option && s.key.kind == Kind::ChoiceShare)
    };
    if shares().next().is_none() {
        return Ok(None);
    }
    let ticks = ticks(statistics, Factor::Option);
    let mut panels = vec![Panel {
        title: "share of responses choosing each side".into(),
        x_label: x_label(Factor::Option).into(),
        y_label: "share of responses".into(),
        y_range: proportion_range(shares()),
        ticks: ticks.clone(),
        ordered: false,
        series: vec![series_of(shares(), COLOURS[0])],
    }];
    let times = || {
        statistics.iter().filter(|s| {
            s.key.factor == Factor::Option && matches!(s.key.kind, Kind::RtQuantile { .. })
        })
    };
    let with_times = times().next().is_some();
    if with_times {
        panels.push(Panel {
            title: "response-time quantiles of the responses choosing each side".into(),
            x_label: x_label(Factor::Option).into(),
            y_label: "response time (s)".into(),
            y_range: y_range(times()),
            ticks,
            ordered: false,
            series: quantile_series(times),
        });
    }
    let title = format!("Choices by option side, {scope}");
    draw(&title, &panels, with_times).map(Some)
}
