//! The report's plots as SVG text, drawn with plotters' SVG backend: pure functions from
//! numbers to a string. Every plot keeps its `viewBox` and loses its fixed width and
//! height, so the page's CSS can scale it to the screen or the paper.

use super::compute::{BandPoint, LooOutput, PredictiveQuantity};
use plotters::coord::Shift;
use plotters::prelude::*;

/// Colour-blind-safe palette (Okabe & Ito 2008, "Color universal design"; common
/// practice for scientific plots), without its yellow, which is too light on white.
const PALETTE: [RGBColor; 7] = [
    RGBColor(0, 114, 178),
    RGBColor(230, 159, 0),
    RGBColor(0, 158, 115),
    RGBColor(204, 121, 167),
    RGBColor(86, 180, 233),
    RGBColor(213, 94, 0),
    RGBColor(0, 0, 0),
];
const GREY: RGBColor = RGBColor(150, 150, 150);
const FAILED: RGBColor = RGBColor(213, 94, 0);
const FONT: &str = "sans-serif";

pub fn color(i: usize) -> RGBColor {
    PALETTE[i % PALETTE.len()]
}

type PlotResult = Result<String, String>;

fn err<E: std::fmt::Display>(e: E) -> String {
    e.to_string()
}

/// Drop the fixed size of plotters' `<svg>` tag (the `viewBox` stays) and give it a
/// title for screen readers.
fn finish(svg: String, title: &str) -> String {
    let title = super::html::esc(title);
    let Some(start) = svg.find("<svg ") else {
        return svg;
    };
    let Some(vb) = svg[start..].find("viewBox=") else {
        return svg;
    };
    let Some(end) = svg[start..].find('>') else {
        return svg;
    };
    let (head, rest) = svg.split_at(start);
    let tag_rest = &rest[vb..end];
    format!(
        "{head}<svg class=\"plot\" role=\"img\" aria-label=\"{title}\" preserveAspectRatio=\"xMidYMid meet\" {tag_rest}><title>{title}</title>{}",
        &rest[end + 1..]
    )
}

/// A range that contains `values` with a margin; never empty.
pub fn padded_range(values: impl IntoIterator<Item = f64>) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values.into_iter().filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return (0.0, 1.0);
    }
    let span = hi - lo;
    let pad = if span > 0.0 {
        0.05 * span
    } else {
        0.5 * lo.abs().max(1.0) * 0.1
    };
    (lo - pad, hi + pad)
}

fn draw<F>(size: (u32, u32), title: &str, f: F) -> PlotResult
where
    F: FnOnce(&DrawingArea<SVGBackend, Shift>) -> Result<(), String>,
{
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, size).into_drawing_area();
        root.fill(&WHITE).map_err(err)?;
        f(&root)?;
        root.present().map_err(err)?;
    }
    Ok(finish(buf, title))
}

/// Axis label with a unit when there is one.
pub fn label(name: &str, unit: Option<&str>) -> String {
    match unit {
        Some(u) if !u.is_empty() => format!("{name} [{u}]"),
        _ => name.to_string(),
    }
}

/// Scatter matrix of the design points: panel (i, j) plots parameter j across and
/// parameter i up; the diagonal names the parameter. `state[k]` colours point k: 0 done
/// or not run, 1 with a failed run.
pub fn design_matrix(
    labels: &[String],
    bounds: &[(f64, f64)],
    points: &[Vec<f64>],
    failed: &[bool],
) -> PlotResult {
    let d = labels.len();
    let cell = if d <= 2 { 260 } else { 200 };
    let size = ((cell * d as u32).max(260), (cell * d as u32).max(260));
    draw(size, "Design points, pairwise", |root| {
        let panels = root.split_evenly((d, d));
        for i in 0..d {
            for j in 0..d {
                let area = &panels[i * d + j];
                if i == j {
                    area.draw(&Text::new(
                        labels[i].clone(),
                        (10, (cell / 2) as i32 - 8),
                        (FONT, 15).into_font(),
                    ))
                    .map_err(err)?;
                    area.draw(&Text::new(
                        format!("[{}, {}]", short(bounds[i].0), short(bounds[i].1)),
                        (10, (cell / 2) as i32 + 12),
                        (FONT, 11).into_font(),
                    ))
                    .map_err(err)?;
                    continue;
                }
                let mut chart = ChartBuilder::on(area)
                    .margin(4)
                    .x_label_area_size(22)
                    .y_label_area_size(40)
                    .build_cartesian_2d(bounds[j].0..bounds[j].1, bounds[i].0..bounds[i].1)
                    .map_err(err)?;
                chart
                    .configure_mesh()
                    .disable_mesh()
                    .x_labels(3)
                    .y_labels(3)
                    .label_style((FONT, 10))
                    .draw()
                    .map_err(err)?;
                chart
                    .draw_series(
                        points
                            .iter()
                            .zip(failed)
                            .filter(|(_, f)| !**f)
                            .map(|(p, _)| Circle::new((p[j], p[i]), 3, color(0).filled())),
                    )
                    .map_err(err)?;
                chart
                    .draw_series(
                        points
                            .iter()
                            .zip(failed)
                            .filter(|(_, f)| **f)
                            .map(|(p, _)| Cross::new((p[j], p[i]), 4, FAILED.stroke_width(2))),
                    )
                    .map_err(err)?;
            }
        }
        Ok(())
    })
}

/// The design points of a one-parameter study: value across, point number up.
pub fn design_strip(
    label: &str,
    bounds: (f64, f64),
    points: &[Vec<f64>],
    failed: &[bool],
) -> PlotResult {
    let n = points.len().max(2) as f64;
    draw((560, 260), "Design points", |root| {
        let mut chart = ChartBuilder::on(root)
            .margin(10)
            .x_label_area_size(36)
            .y_label_area_size(44)
            .build_cartesian_2d(bounds.0..bounds.1, 0.0..n)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc(label)
            .y_desc("point")
            .label_style((FONT, 11))
            .draw()
            .map_err(err)?;
        chart
            .draw_series(points.iter().zip(failed).enumerate().map(|(k, (p, f))| {
                let c = if *f { FAILED } else { color(0) };
                Circle::new((p[0], k as f64 + 0.5), 3, c.filled())
            }))
            .map_err(err)?;
        Ok(())
    })
}

/// Leave-one-out predicted against observed for every output value of an experiment,
/// with ±2 sd bars and the 1:1 line.
pub fn loo_plot(experiment: &str, outputs: &[LooOutput]) -> PlotResult {
    let all = outputs
        .iter()
        .flat_map(|o| {
            o.observed.iter().copied().chain(
                o.mean
                    .iter()
                    .zip(&o.sd)
                    .flat_map(|(m, s)| [m - 2.0 * s, m + 2.0 * s]),
            )
        })
        .collect::<Vec<_>>();
    let (lo, hi) = padded_range(all);
    let title = format!("{experiment}: leave-one-out prediction against the run's output");
    draw((560, 440), &title, |root| {
        let mut chart = ChartBuilder::on(root)
            .margin(10)
            .caption(title.as_str(), (FONT, 15))
            .x_label_area_size(40)
            .y_label_area_size(60)
            .build_cartesian_2d(lo..hi, lo..hi)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc("simulator output")
            .y_desc("leave-one-out mean ± 2 sd")
            .label_style((FONT, 11))
            .light_line_style(RGBColor(235, 235, 235))
            .draw()
            .map_err(err)?;
        chart
            .draw_series(LineSeries::new([(lo, lo), (hi, hi)], GREY.stroke_width(1)))
            .map_err(err)?;
        for (k, o) in outputs.iter().enumerate() {
            let c = color(k);
            chart
                .draw_series(
                    o.observed
                        .iter()
                        .zip(&o.mean)
                        .zip(&o.sd)
                        .map(|((y, m), s)| {
                            PathElement::new(vec![(*y, m - 2.0 * s), (*y, m + 2.0 * s)], c.mix(0.5))
                        }),
                )
                .map_err(err)?;
            let series = chart
                .draw_series(
                    o.observed
                        .iter()
                        .zip(&o.mean)
                        .map(|(y, m)| Circle::new((*y, *m), 3, c.filled())),
                )
                .map_err(err)?;
            if outputs.len() <= PALETTE.len() {
                series
                    .label(o.name.clone())
                    .legend(move |(x, y)| Circle::new((x + 5, y), 3, c.filled()));
            }
        }
        if outputs.len() <= PALETTE.len() {
            chart
                .configure_series_labels()
                .position(SeriesLabelPosition::UpperLeft)
                .label_font((FONT, 11))
                .background_style(WHITE.mix(0.85))
                .border_style(GREY)
                .draw()
                .map_err(err)?;
        }
        Ok(())
    })
}

/// Trace of one quantity: value against draw number, one line per chain.
pub fn trace_plot(name: &str, per_chain: &[Vec<f64>], max_per_chain: usize) -> PlotResult {
    let n = per_chain.iter().map(Vec::len).max().unwrap_or(0).max(2);
    let step = n.div_ceil(max_per_chain.max(1)).max(1);
    let (lo, hi) = padded_range(per_chain.iter().flatten().copied());
    let title = format!("{name}: trace per chain");
    draw((720, 230), &title, |root| {
        let mut chart = ChartBuilder::on(root)
            .margin(8)
            .caption(title.as_str(), (FONT, 14))
            .x_label_area_size(30)
            .y_label_area_size(60)
            .build_cartesian_2d(0.0..(n - 1) as f64, lo..hi)
            .map_err(err)?;
        chart
            .configure_mesh()
            .x_desc("draw (after warm-up)")
            .label_style((FONT, 11))
            .light_line_style(RGBColor(240, 240, 240))
            .draw()
            .map_err(err)?;
        for (k, c) in per_chain.iter().enumerate() {
            let col = color(k);
            chart
                .draw_series(LineSeries::new(
                    c.iter()
                        .enumerate()
                        .step_by(step)
                        .map(|(i, v)| (i as f64, *v)),
                    col.mix(0.8).stroke_width(1),
                ))
                .map_err(err)?
                .label(format!("chain {k}"))
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], col));
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .label_font((FONT, 10))
            .background_style(WHITE.mix(0.85))
            .border_style(GREY)
            .draw()
            .map_err(err)?;
        Ok(())
    })
}

fn histogram(values: &[f64], lo: f64, hi: f64, bins: usize) -> Vec<(f64, f64, f64)> {
    let w = (hi - lo) / bins as f64;
    let mut counts = vec![0usize; bins];
    for v in values {
        let b = (((v - lo) / w).floor() as isize).clamp(0, bins as isize - 1) as usize;
        counts[b] += 1;
    }
    let n = values.len().max(1) as f64;
    counts
        .iter()
        .enumerate()
        .map(|(b, c)| {
            let x0 = lo + b as f64 * w;
            (x0, x0 + w, *c as f64 / (n * w))
        })
        .collect()
}

/// Number of histogram bins for `n` draws: the square-root rule, between 10 and 60
/// (common practice).
fn bins_for(n: usize) -> usize {
    ((n as f64).sqrt() as usize).clamp(10, 60)
}

/// Marginal posterior density (histogram of the pooled draws), the prior density when
/// given, and the central 95 % interval.
pub fn density_plot(
    name: &str,
    values: &[f64],
    prior: Option<&[(f64, f64)]>,
    interval: (f64, f64),
) -> PlotResult {
    let (lo, hi) = padded_range(values.iter().copied());
    let hist = histogram(values, lo, hi, bins_for(values.len()));
    let prior_in: Vec<(f64, f64)> = prior
        .unwrap_or(&[])
        .iter()
        .copied()
        .filter(|(x, _)| *x >= lo && *x <= hi)
        .collect();
    let top = hist
        .iter()
        .map(|h| h.2)
        .chain(prior_in.iter().map(|p| p.1))
        .fold(0.0f64, f64::max)
        .max(f64::MIN_POSITIVE)
        * 1.1;
    let title = format!("{name}: marginal posterior");
    draw((440, 280), &title, |root| {
        let mut chart = ChartBuilder::on(root)
            .margin(8)
            .caption(title.as_str(), (FONT, 14))
            .x_label_area_size(30)
            .y_label_area_size(60)
            .build_cartesian_2d(lo..hi, 0.0..top)
            .map_err(err)?;
        chart
            .configure_mesh()
            .y_desc("density")
            .x_labels(5)
            .label_style((FONT, 11))
            .light_line_style(RGBColor(240, 240, 240))
            .draw()
            .map_err(err)?;
        chart
            .draw_series(hist.iter().map(|(x0, x1, h)| {
                Rectangle::new([(*x0, 0.0), (*x1, *h)], color(0).mix(0.45).filled())
            }))
            .map_err(err)?
            .label("posterior")
            .legend(|(x, y)| {
                Rectangle::new([(x, y - 4), (x + 12, y + 4)], color(0).mix(0.45).filled())
            });
        for x in [interval.0, interval.1] {
            chart
                .draw_series(LineSeries::new(
                    [(x, 0.0), (x, top)],
                    color(5).stroke_width(1),
                ))
                .map_err(err)?;
        }
        if !prior_in.is_empty() {
            chart
                .draw_series(LineSeries::new(prior_in.clone(), BLACK.stroke_width(1)))
                .map_err(err)?
                .label("prior")
                .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 14, y)], BLACK));
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .label_font((FONT, 10))
            .background_style(WHITE.mix(0.85))
            .border_style(GREY)
            .draw()
            .map_err(err)?;
        Ok(())
    })
}

/// Pairwise plot of posterior draws: scatter below the diagonal, histograms on it.
pub fn pairs_plot(labels: &[String], rows: &[&[f64]], columns: &[usize]) -> PlotResult {
    let d = columns.len();
    let cell = if d <= 2 { 260 } else { 190 };
    let ranges: Vec<(f64, f64)> = columns
        .iter()
        .map(|&j| padded_range(rows.iter().map(|r| r[j])))
        .collect();
    draw(
        (cell * d as u32, cell * d as u32),
        "Posterior draws, pairwise",
        |root| {
            let panels = root.split_evenly((d, d));
            for i in 0..d {
                for j in 0..d {
                    let area = &panels[i * d + j];
                    if j > i {
                        continue;
                    }
                    let (xl, xh) = ranges[j];
                    if i == j {
                        let vals: Vec<f64> = rows.iter().map(|r| r[columns[j]]).collect();
                        let hist = histogram(&vals, xl, xh, bins_for(vals.len()).min(30));
                        let top = hist.iter().map(|h| h.2).fold(0.0f64, f64::max).max(1e-300) * 1.1;
                        let mut chart = ChartBuilder::on(area)
                            .margin(4)
                            .caption(labels[j].as_str(), (FONT, 12))
                            .x_label_area_size(22)
                            .y_label_area_size(10)
                            .build_cartesian_2d(xl..xh, 0.0..top)
                            .map_err(err)?;
                        chart
                            .configure_mesh()
                            .disable_mesh()
                            .disable_y_axis()
                            .x_labels(3)
                            .label_style((FONT, 10))
                            .draw()
                            .map_err(err)?;
                        chart
                            .draw_series(hist.iter().map(|(a, b, h)| {
                                Rectangle::new([(*a, 0.0), (*b, *h)], color(0).mix(0.45).filled())
                            }))
                            .map_err(err)?;
                        continue;
                    }
                    let (yl, yh) = ranges[i];
                    let mut chart = ChartBuilder::on(area)
                        .margin(4)
                        .x_label_area_size(22)
                        .y_label_area_size(44)
                        .build_cartesian_2d(xl..xh, yl..yh)
                        .map_err(err)?;
                    chart
                        .configure_mesh()
                        .disable_mesh()
                        .x_labels(3)
                        .y_labels(3)
                        .label_style((FONT, 10))
                        .draw()
                        .map_err(err)?;
                    chart
                        .draw_series(rows.iter().map(|r| {
                            Circle::new(
                                (r[columns[j]], r[columns[i]]),
                                1,
                                color(0).mix(0.35).filled(),
                            )
                        }))
                        .map_err(err)?;
                }
            }
            Ok(())
        },
    )
}

/// Posterior predictive bands of one quantity with the field data: mean, ±2 sd of the
/// surrogate and parameters (dark), ±2 sd with measurement noise (light), measured
/// points. Below, the same about the predictive mean (data − mean), where narrow bands
/// stay visible. Scalar outputs (no station) are drawn at positions 0, 1, … with bars.
pub fn predictive_plot(q: &PredictiveQuantity, x_label: &str, y_label: &str) -> PlotResult {
    let curve = q.points.iter().all(|p| p.x.is_some()) && q.points.len() > 1;
    let xs: Vec<f64> = q
        .points
        .iter()
        .enumerate()
        .map(|(i, p)| p.x.unwrap_or(i as f64))
        .collect();
    let (xl, xh) = if curve {
        padded_range(xs.iter().copied())
    } else {
        (-1.0, q.points.len() as f64)
    };
    let title = format!(
        "{}: {} — posterior predictive and data",
        q.experiment, q.quantity
    );
    draw((640, 560), &title, |root| {
        let (top, bottom) = root.split_vertically(330);
        // Upper panel: values; lower panel: values minus the predictive mean.
        for (area, centred) in [(&top, false), (&bottom, true)] {
            let shift = |p: &BandPoint| if centred { p.mean } else { 0.0 };
            let (yl, yh) = padded_range(q.points.iter().flat_map(|p| {
                let c = shift(p);
                p.observed
                    .iter()
                    .map(move |y| y - c)
                    .chain([p.mean - c - 2.0 * p.sd_total, p.mean - c + 2.0 * p.sd_total])
            }));
            let mut b = ChartBuilder::on(area);
            b.margin(10).x_label_area_size(36).y_label_area_size(64);
            if !centred {
                b.caption(title.as_str(), (FONT, 14));
            }
            let mut chart = b.build_cartesian_2d(xl..xh, yl..yh).map_err(err)?;
            let y_desc = if centred {
                "data − predictive mean".to_string()
            } else {
                y_label.to_string()
            };
            chart
                .configure_mesh()
                .x_desc(x_label)
                .y_desc(y_desc)
                .label_style((FONT, 11))
                .light_line_style(RGBColor(240, 240, 240))
                .draw()
                .map_err(err)?;
            let band = |k: f64, total: bool| -> Vec<(f64, f64)> {
                let sd = |p: &BandPoint| if total { p.sd_total } else { p.sd_model };
                let upper = xs
                    .iter()
                    .zip(&q.points)
                    .map(|(x, p)| (*x, p.mean - shift(p) + k * sd(p)));
                let lower = xs
                    .iter()
                    .zip(&q.points)
                    .rev()
                    .map(|(x, p)| (*x, p.mean - shift(p) - k * sd(p)));
                upper.chain(lower).collect()
            };
            let legend = !centred;
            if curve {
                let s = chart
                    .draw_series(std::iter::once(Polygon::new(
                        band(2.0, true),
                        color(4).mix(0.25).filled(),
                    )))
                    .map_err(err)?;
                if legend {
                    s.label("± 2 sd, with measurement noise").legend(|(x, y)| {
                        Rectangle::new([(x, y - 4), (x + 14, y + 4)], color(4).mix(0.25).filled())
                    });
                }
                let s = chart
                    .draw_series(std::iter::once(Polygon::new(
                        band(2.0, false),
                        color(0).mix(0.35).filled(),
                    )))
                    .map_err(err)?;
                if legend {
                    s.label("± 2 sd, surrogate and parameters")
                        .legend(|(x, y)| {
                            Rectangle::new(
                                [(x, y - 4), (x + 14, y + 4)],
                                color(0).mix(0.35).filled(),
                            )
                        });
                }
                let s = chart
                    .draw_series(LineSeries::new(
                        xs.iter()
                            .zip(&q.points)
                            .map(|(x, p)| (*x, p.mean - shift(p))),
                        color(0).stroke_width(2),
                    ))
                    .map_err(err)?;
                if legend {
                    s.label("predictive mean").legend(|(x, y)| {
                        PathElement::new(vec![(x, y), (x + 14, y)], color(0).stroke_width(2))
                    });
                }
            } else {
                for (x, p) in xs.iter().zip(&q.points) {
                    let m = p.mean - shift(p);
                    chart
                        .draw_series([
                            PathElement::new(
                                vec![(*x, m - 2.0 * p.sd_total), (*x, m + 2.0 * p.sd_total)],
                                color(4).stroke_width(6),
                            ),
                            PathElement::new(
                                vec![(*x, m - 2.0 * p.sd_model), (*x, m + 2.0 * p.sd_model)],
                                color(0).stroke_width(3),
                            ),
                        ])
                        .map_err(err)?;
                    chart
                        .draw_series(std::iter::once(Cross::new(
                            (*x, m),
                            5,
                            color(0).stroke_width(2),
                        )))
                        .map_err(err)?;
                }
            }
            let s = chart
                .draw_series(xs.iter().zip(&q.points).flat_map(|(x, p)| {
                    let c = shift(p);
                    p.observed
                        .iter()
                        .map(move |y| Circle::new((*x, *y - c), 3, color(5).filled()))
                }))
                .map_err(err)?;
            if legend {
                s.label("field data")
                    .legend(|(x, y)| Circle::new((x + 6, y), 3, color(5).filled()));
                chart
                    .configure_series_labels()
                    .position(SeriesLabelPosition::LowerRight)
                    .label_font((FONT, 10))
                    .background_style(WHITE.mix(0.85))
                    .border_style(GREY)
                    .draw()
                    .map_err(err)?;
            }
        }
        Ok(())
    })
}

/// A number in at most 4 significant digits for tick-like labels.
fn short(v: f64) -> String {
    super::html::sig(v, 4)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn svg_keeps_its_view_box_and_drops_its_fixed_size() {
        let svg = trace_plot("E", &[vec![1.0, 2.0, 1.5], vec![1.2, 1.1, 1.9]], 100).unwrap();
        let tag = &svg[svg.find("<svg").unwrap()..];
        let tag = &tag[..tag.find('>').unwrap()];
        assert!(tag.contains("viewBox=\"0 0 720 230\""), "{tag}");
        assert!(!tag.contains("width=") && !tag.contains("height="), "{tag}");
        assert!(svg.contains("<title>E: trace per chain</title>"));
    }

    #[test]
    fn padded_range_is_never_empty() {
        let (a, b) = padded_range([3.0, 3.0]);
        assert!(a < 3.0 && b > 3.0);
        assert_eq!(padded_range([]), (0.0, 1.0));
        let (a, b) = padded_range([0.0, 10.0]);
        assert!((a + 0.5).abs() < 1e-12 && (b - 10.5).abs() < 1e-12);
    }
}
