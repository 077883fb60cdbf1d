//! Charts as inline SVG, drawn with plotters' SVG backend into a string.
//!
//! Every coordinate is filtered for finiteness and clamped into the plotted range before
//! it reaches plotters: upstream numbers may be NaN or huge (an unbounded forecast), and a
//! report must still render.

use std::fmt::Write as _;

use plotters::coord::types::RangedCoordf64;
use plotters::prelude::*;

use super::escape::{chart_text, fmt_pct, fmt_sig};
use super::model::{CycleLine, FitSummary, ForecastStatus};

/// Why a chart could not be drawn; the page shows the reason in place of the chart.
#[derive(Debug, thiserror::Error)]
pub enum ChartError {
    #[error("no finite points to draw")]
    NoData,
    #[error("the chart could not be drawn: {0}")]
    Draw(String),
}

fn draw_err<E: std::fmt::Display>(e: E) -> ChartError {
    ChartError::Draw(e.to_string())
}

const MEASURED: RGBColor = RGBColor(31, 78, 140);
const CURVE: RGBColor = RGBColor(200, 82, 0);
const BAND: RGBColor = RGBColor(240, 170, 110);
const CRITERION: RGBColor = RGBColor(170, 20, 40);
const FORECAST: RGBColor = RGBColor(20, 120, 60);
const GRID: RGBColor = RGBColor(232, 232, 232);

/// Width and height of the main charts, in SVG user units (pixels at 100 % zoom).
pub const CHART_SIZE: (u32, u32) = (820, 460);

/// How far past the data an unbounded or distant forecast interval is drawn before it is
/// cut off (and marked as continuing).
fn x_cap(x_data_max: f64) -> f64 {
    (x_data_max * 2.5).max(x_data_max + 8.0)
}

struct Ranges {
    x0: f64,
    x1: f64,
    y0: f64,
    y1: f64,
}

impl Ranges {
    fn cy(&self, y: f64) -> f64 {
        y.clamp(self.y0, self.y1)
    }
    fn cx(&self, x: f64) -> f64 {
        x.clamp(self.x0, self.x1)
    }
}

fn finite_max(it: impl Iterator<Item = f64>) -> Option<f64> {
    it.filter(|v| v.is_finite()).reduce(f64::max)
}

fn finite_min(it: impl Iterator<Item = f64>) -> Option<f64> {
    it.filter(|v| v.is_finite()).reduce(f64::min)
}

fn ranges_for(fit: &FitSummary) -> Option<Ranges> {
    let data_x = finite_max(
        fit.observed
            .iter()
            .map(|p| p.x)
            .chain(fit.curve.iter().map(|p| p.x)),
    )?;
    let cap = x_cap(data_x);
    let fx = fit
        .forecast
        .iter()
        .flat_map(|f| [f.x, f.upper])
        .flatten()
        .map(|x| x.min(cap));
    let x_hi = finite_max(std::iter::once(data_x).chain(fx))?;
    let x_lo = finite_min(
        fit.observed
            .iter()
            .map(|p| p.x)
            .chain(fit.curve.iter().map(|p| p.x)),
    )
    .unwrap_or(0.0)
    .min(0.0);
    let y_hi = finite_max(
        fit.observed
            .iter()
            .map(|p| p.y)
            .chain(fit.curve.iter().map(|p| p.y))
            .chain(fit.threshold),
    )?;
    let y_lo = finite_min(
        fit.observed
            .iter()
            .map(|p| p.y)
            .chain(fit.curve.iter().map(|p| p.y))
            .chain(fit.threshold),
    )
    .unwrap_or(0.0)
    .min(0.0);
    let span_y = (y_hi - y_lo).max(1e-9);
    let span_x = (x_hi - x_lo).max(1.0);
    Some(Ranges {
        x0: x_lo,
        x1: x_hi + 0.05 * span_x,
        y0: y_lo,
        y1: y_hi + 0.15 * span_y,
    })
}

/// An axis tick: whole numbers without a decimal point, others with what they need.
fn tick(v: f64) -> String {
    if (v - v.round()).abs() < 1e-9 {
        format!("{}", v.round())
    } else {
        let s = format!("{v:.3}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

/// The activity-versus-cycle chart: measured points (censored ones as open triangles),
/// the fitted curve, its confidence band, the dashed criterion line and the forecast
/// crossing with its interval.
pub fn activity_svg(fit: &FitSummary, title: &str) -> Result<String, ChartError> {
    let r = ranges_for(fit).ok_or(ChartError::NoData)?;
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, CHART_SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(draw_err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(chart_text(title), ("sans-serif", 18))
            .margin(14)
            .x_label_area_size(48)
            .y_label_area_size(64)
            .build_cartesian_2d(r.x0..r.x1, r.y0..r.y1)
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .x_desc(chart_text(&fit.x_label))
            .y_desc(chart_text(&fit.y_label))
            .x_label_formatter(&|x| tick(*x))
            .y_label_formatter(&|y| tick(*y))
            .max_light_lines(2)
            .light_line_style(GRID)
            .axis_desc_style(("sans-serif", 15))
            .label_style(("sans-serif", 13))
            .draw()
            .map_err(draw_err)?;

        draw_band(&mut chart, fit, &r)?;
        draw_curve(&mut chart, fit, &r)?;
        draw_criterion(&mut chart, fit, &r)?;
        draw_points(&mut chart, fit, &r)?;
        draw_forecast(&mut chart, fit, &r)?;

        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(WHITE.mix(0.9))
            .border_style(BLACK.mix(0.5))
            .label_font(("sans-serif", 13))
            .draw()
            .map_err(draw_err)?;
        root.present().map_err(draw_err)?;
    }
    Ok(buf)
}

type Chart<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

fn draw_band<'a, 'b: 'a>(
    chart: &mut Chart<'a, 'b>,
    fit: &FitSummary,
    r: &Ranges,
) -> Result<(), ChartError> {
    let band: Vec<_> = fit
        .band
        .iter()
        .filter(|b| b.x.is_finite() && b.lower.is_finite() && b.upper.is_finite())
        .filter(|b| b.x >= r.x0 && b.x <= r.x1)
        .collect();
    if band.len() < 2 {
        return Ok(());
    }
    let mut poly: Vec<(f64, f64)> = band.iter().map(|b| (b.x, r.cy(b.upper))).collect();
    poly.extend(band.iter().rev().map(|b| (b.x, r.cy(b.lower))));
    let style = BAND.mix(0.45).filled();
    chart
        .draw_series(std::iter::once(Polygon::new(poly, style)))
        .map_err(draw_err)?
        .label(format!("{} % confidence band", fmt_pct(fit.level)))
        .legend(move |(x, y)| Rectangle::new([(x, y - 6), (x + 20, y + 6)], style));
    Ok(())
}

fn draw_curve<'a, 'b: 'a>(
    chart: &mut Chart<'a, 'b>,
    fit: &FitSummary,
    r: &Ranges,
) -> Result<(), ChartError> {
    let pts: Vec<(f64, f64)> = fit
        .curve
        .iter()
        .filter(|p| p.x.is_finite() && p.y.is_finite() && p.x >= r.x0 && p.x <= r.x1)
        .map(|p| (p.x, r.cy(p.y)))
        .collect();
    if pts.len() < 2 {
        return Ok(());
    }
    let style = CURVE.stroke_width(3);
    chart
        .draw_series(LineSeries::new(pts, style))
        .map_err(draw_err)?
        .label(format!("fitted model: {}", chart_text(&fit.model_id)))
        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], style));
    Ok(())
}

fn draw_criterion<'a, 'b: 'a>(
    chart: &mut Chart<'a, 'b>,
    fit: &FitSummary,
    r: &Ranges,
) -> Result<(), ChartError> {
    let Some(t) = fit.threshold.filter(|t| t.is_finite()) else {
        return Ok(());
    };
    let style = CRITERION.stroke_width(2);
    chart
        .draw_series(DashedLineSeries::new(
            vec![(r.x0, t), (r.x1, t)],
            9,
            6,
            style,
        ))
        .map_err(draw_err)?
        .label(format!("replacement criterion {}", fmt_sig(t, 3)))
        .legend(move |(x, y)| {
            EmptyElement::at((x, y))
                + PathElement::new(vec![(0, 0), (7, 0)], style)
                + PathElement::new(vec![(12, 0), (20, 0)], style)
        });
    Ok(())
}

fn draw_points<'a, 'b: 'a>(
    chart: &mut Chart<'a, 'b>,
    fit: &FitSummary,
    r: &Ranges,
) -> Result<(), ChartError> {
    let inside = |x: f64, y: f64| x.is_finite() && y.is_finite() && x >= r.x0 && x <= r.x1;
    let exact: Vec<(f64, f64)> = fit
        .observed
        .iter()
        .filter(|p| !p.censored && inside(p.x, p.y))
        .map(|p| (p.x, r.cy(p.y)))
        .collect();
    let censored: Vec<(f64, f64)> = fit
        .observed
        .iter()
        .filter(|p| p.censored && inside(p.x, p.y))
        .map(|p| (p.x, r.cy(p.y)))
        .collect();
    if !exact.is_empty() {
        let style = MEASURED.filled();
        chart
            .draw_series(exact.into_iter().map(|c| Circle::new(c, 5, style)))
            .map_err(draw_err)?
            .label("measured")
            .legend(move |(x, y)| Circle::new((x + 10, y), 5, style));
    }
    if !censored.is_empty() {
        let style = MEASURED.stroke_width(2);
        let tri = |x: i32, y: i32| vec![(x, y - 7), (x + 6, y + 4), (x - 6, y + 4), (x, y - 7)];
        chart
            .draw_series(
                censored
                    .into_iter()
                    .map(move |c| EmptyElement::at(c) + PathElement::new(tri(0, 0), style)),
            )
            .map_err(draw_err)?
            .label("censored (saturated, lower bound)")
            .legend(move |(x, y)| PathElement::new(tri(x + 10, y), style));
    }
    Ok(())
}

fn draw_forecast<'a, 'b: 'a>(
    chart: &mut Chart<'a, 'b>,
    fit: &FitSummary,
    r: &Ranges,
) -> Result<(), ChartError> {
    let (Some(f), Some(t)) = (
        fit.forecast.as_ref(),
        fit.threshold.filter(|t| t.is_finite()),
    ) else {
        return Ok(());
    };
    if !matches!(
        f.status,
        ForecastStatus::Ahead | ForecastStatus::UnboundedInterval
    ) {
        return Ok(());
    }
    let Some(xs) = f.x.filter(|x| x.is_finite()) else {
        return Ok(());
    };
    let style = FORECAST.stroke_width(3);
    let lo = f.lower.filter(|v| v.is_finite()).map_or(r.x0, |v| r.cx(v));
    let hi = f.upper.filter(|v| v.is_finite()).map_or(r.x1, |v| r.cx(v));
    let cut_lo = f.lower.is_none_or(|v| !v.is_finite() || v < r.x0);
    let cut_hi = f.upper.is_none_or(|v| !v.is_finite() || v > r.x1);
    let xs_c = r.cx(xs);
    let interval_label = format!(
        "forecast {} ({} %: {} to {})",
        fmt_sig(xs, 3),
        fmt_pct(f.confidence),
        f.lower.map_or("unbounded".to_string(), |v| fmt_sig(v, 3)),
        f.upper.map_or("unbounded".to_string(), |v| fmt_sig(v, 3)),
    );
    // The interval as a bar on the criterion line with end caps; an open end (cut by the
    // plot edge or unbounded) gets no cap.
    let mut parts: Vec<PathElement<(f64, f64)>> =
        vec![PathElement::new(vec![(lo, t), (hi, t)], style)];
    let cap = (r.y1 - r.y0) * 0.025;
    if !cut_lo {
        parts.push(PathElement::new(vec![(lo, t - cap), (lo, t + cap)], style));
    }
    if !cut_hi {
        parts.push(PathElement::new(vec![(hi, t - cap), (hi, t + cap)], style));
    }
    chart
        .draw_series(parts)
        .map_err(draw_err)?
        .label(interval_label)
        .legend(move |(x, y)| {
            EmptyElement::at((x, y))
                + PathElement::new(vec![(0, 0), (20, 0)], style)
                + PathElement::new(vec![(0, -4), (0, 4)], style)
                + PathElement::new(vec![(20, -4), (20, 4)], style)
        });
    // A drop line from the crossing to the x axis, and the crossing marked.
    chart
        .draw_series(DashedLineSeries::new(
            vec![(xs_c, t), (xs_c, r.y0)],
            5,
            4,
            FORECAST.stroke_width(1),
        ))
        .map_err(draw_err)?;
    chart
        .draw_series(std::iter::once(
            EmptyElement::at((xs_c, t))
                + Polygon::new(vec![(0, -7), (7, 0), (0, 7), (-7, 0)], FORECAST.filled()),
        ))
        .map_err(draw_err)?;
    Ok(())
}

/// TON per cycle as bars: shows whether each reuse still pays its way.
pub fn ton_svg(cycles: &[CycleLine], title: &str) -> Result<String, ChartError> {
    let bars: Vec<(f64, f64)> = cycles
        .iter()
        .filter_map(|c| c.ton.map(|t| (f64::from(c.cycle_no), t)))
        .filter(|(_, t)| t.is_finite())
        .collect();
    let x_hi = finite_max(bars.iter().map(|b| b.0)).ok_or(ChartError::NoData)?;
    let x_lo = finite_min(bars.iter().map(|b| b.0)).unwrap_or(1.0);
    let t_hi = finite_max(bars.iter().map(|b| b.1)).unwrap_or(1.0).max(0.0);
    let t_lo = finite_min(bars.iter().map(|b| b.1)).unwrap_or(0.0).min(0.0);
    let y1 = t_hi + 0.1 * (t_hi - t_lo).max(1e-9);
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (CHART_SIZE.0, 320)).into_drawing_area();
        root.fill(&WHITE).map_err(draw_err)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(chart_text(title), ("sans-serif", 17))
            .margin(14)
            .x_label_area_size(44)
            .y_label_area_size(70)
            .build_cartesian_2d((x_lo - 0.6)..(x_hi + 0.6), t_lo..y1)
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .x_desc("cycle number")
            .y_desc("TON (mol product / mol metal)")
            .x_label_formatter(&|x| tick(*x))
            .y_label_formatter(&|y| tick(*y))
            .max_light_lines(2)
            .light_line_style(GRID)
            .axis_desc_style(("sans-serif", 14))
            .label_style(("sans-serif", 12))
            .draw()
            .map_err(draw_err)?;
        chart
            .draw_series(bars.iter().map(|&(x, t)| {
                Rectangle::new([(x - 0.35, 0.0), (x + 0.35, t)], MEASURED.mix(0.8).filled())
            }))
            .map_err(draw_err)?;
        root.present().map_err(draw_err)?;
    }
    Ok(buf)
}

/// A small activity sparkline for the site overview, written by hand: it has no text, so
/// nothing in it needs escaping, and it stays a few hundred bytes per lot.
pub fn sparkline_svg(values: &[f64], threshold: Option<f64>) -> String {
    const W: f64 = 140.0;
    const H: f64 = 32.0;
    const PAD: f64 = 3.0;
    let pts: Vec<(usize, f64)> = values
        .iter()
        .copied()
        .enumerate()
        .filter(|(_, v)| v.is_finite())
        .collect();
    let mut svg = format!(
        "<svg class=\"spark\" xmlns=\"http://www.w3.org/2000/svg\" width=\"{W}\" height=\"{H}\" \
         viewBox=\"0 0 {W} {H}\" role=\"img\" aria-label=\"activity per cycle\">"
    );
    let lo = finite_min(pts.iter().map(|p| p.1).chain(threshold))
        .unwrap_or(0.0)
        .min(0.0);
    let hi = finite_max(pts.iter().map(|p| p.1).chain(threshold)).unwrap_or(1.0);
    let span = (hi - lo).max(1e-12);
    let n = values.len().max(2) - 1;
    let sx = |i: usize| PAD + (W - 2.0 * PAD) * i as f64 / n as f64;
    let sy = |v: f64| H - PAD - (H - 2.0 * PAD) * (v - lo) / span;
    if let Some(t) = threshold.filter(|t| t.is_finite()) {
        let _ = write!(
            svg,
            "<line x1=\"{PAD}\" x2=\"{}\" y1=\"{y:.2}\" y2=\"{y:.2}\" stroke=\"#aa1428\" \
             stroke-width=\"1\" stroke-dasharray=\"3 2\"/>",
            W - PAD,
            y = sy(t)
        );
    }
    if !pts.is_empty() {
        let line: Vec<String> = pts
            .iter()
            .map(|&(i, v)| format!("{:.2},{:.2}", sx(i), sy(v)))
            .collect();
        let _ = write!(
            svg,
            "<polyline fill=\"none\" stroke=\"#1f4e8c\" stroke-width=\"1.5\" points=\"{}\"/>",
            line.join(" ")
        );
        if let Some(&(i, v)) = pts.last() {
            let _ = write!(
                svg,
                "<circle cx=\"{:.2}\" cy=\"{:.2}\" r=\"2.5\" fill=\"#1f4e8c\"/>",
                sx(i),
                sy(v)
            );
        }
    }
    svg.push_str("</svg>");
    svg
}
