//! SVG plot of a fit: points and curves above, residuals in Hz and in steps
//! below.
//!
//! Without a station ([`PlotContext::default`]) it shows the base points,
//! the fitted curve and the residuals. With one (built by the caller from a
//! station's settings: this module knows nothing of config files) it also
//! shades the bands, draws the travel limits, each profile's points and
//! curve, and the loop's 1.5:1 half-window around zero on the Hz residual
//! panel: a point inside it is one where the fitted curve would tune the
//! loop to within SWR 1.5.

use std::path::Path;
use std::sync::Arc;

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;

use super::outlier::group_digits;
use super::report::Report;
use super::{Calibration, CalibrationError, StepMap};

/// A band to shade: name and edges in Hz.
#[derive(Debug, Clone, PartialEq)]
pub struct PlotBand {
    pub name: String,
    pub low_hz: f64,
    pub high_hz: f64,
}

/// A profile's own points and its map (its own fit or the base plus an
/// offset).
#[derive(Clone)]
pub struct ProfileCurve {
    pub name: String,
    /// `(hz, steps)` as measured.
    pub points: Vec<(f64, f64)>,
    pub map: Arc<dyn StepMap>,
}

/// The station around a fit, in plain numbers.
#[derive(Default)]
pub struct PlotContext {
    pub bands: Vec<PlotBand>,
    /// Travel limits in steps (min, max).
    pub limits: Option<(f64, f64)>,
    pub profiles: Vec<ProfileCurve>,
    /// Half the loop's 1.5:1 SWR bandwidth at a frequency, in Hz, where the
    /// loop is described.
    pub half_window_hz: Option<Box<dyn Fn(f64) -> Option<f64>>>,
}

// Our own palette: the base in deep teal, profiles in warm and muted tones.
const BASE: RGBColor = RGBColor(0, 112, 122);
const PROFILE_COLOURS: [RGBColor; 4] = [
    RGBColor(204, 120, 0),
    RGBColor(122, 62, 160),
    RGBColor(96, 128, 24),
    RGBColor(186, 48, 92),
];
const BAND_FILL: RGBColor = RGBColor(226, 236, 246);
const BAND_TEXT: RGBColor = RGBColor(70, 92, 120);
const LIMIT: RGBColor = RGBColor(170, 30, 30);
const WINDOW_FILL: RGBColor = RGBColor(214, 238, 214);
const CANDIDATE: RGBColor = RGBColor(40, 40, 40);

/// The title's wording for the leave-one-out error.
pub const LOO_TITLE: &str = "leave-one-out error";

/// Why a plot could not be drawn.
#[derive(Debug, thiserror::Error)]
pub enum PlotError {
    /// Nothing with a finite value to draw.
    #[error("expected {expected} to plot, found none")]
    Nothing { expected: &'static str },
    /// The drawing library refused.
    #[error("cannot draw the plot: {0}")]
    Draw(#[from] DrawingAreaErrorKind<std::io::Error>),
}

fn plot_error(path: &Path, e: PlotError) -> CalibrationError {
    CalibrationError::Write {
        path: path.to_path_buf(),
        source: std::io::Error::other(e),
    }
}

fn padded(lo: f64, hi: f64) -> (f64, f64) {
    let span = (hi - lo).abs();
    let pad = if span > 0.0 {
        span * 0.08
    } else {
        lo.abs().max(1.0) * 0.01
    };
    (lo - pad, hi + pad)
}

/// Decimals that tell ticks about a tenth of `span` apart (0 for a span of
/// ten or more: whole numbers print as whole numbers).
fn decimals_for(span: f64) -> usize {
    let step = span.abs() / 10.0;
    if !(step.is_finite() && step > 0.0) || step >= 1.0 {
        0
    } else {
        (-step.log10()).ceil().clamp(0.0, 6.0) as usize
    }
}

/// A tick label: grouped whole numbers (`25 000`, never `25000.0`), or the
/// fewest decimals the axis needs.
pub fn tick_label(v: f64, decimals: usize) -> String {
    if !v.is_finite() {
        return String::new();
    }
    if decimals == 0 {
        let r = v.round();
        // -0 prints as 0.
        group_digits(if r == 0.0 { 0 } else { r as i64 })
    } else {
        let s = format!("{v:.decimals$}");
        if s.trim_start_matches('-')
            .chars()
            .all(|c| c == '0' || c == '.')
        {
            format!("{:.decimals$}", 0.0)
        } else {
            s
        }
    }
}

fn slope(map: &dyn StepMap, hz: f64) -> f64 {
    let d = (hz.abs() * 1e-6).max(1e-3);
    (map.steps_at(hz + d) - map.steps_at(hz - d)) / (2.0 * d)
}

/// Residual steps → Hz through the local slope of `map`.
fn to_hz(map: &dyn StepMap, hz: f64, residual_steps: f64) -> f64 {
    let s = slope(map, hz);
    if s != 0.0 && s.is_finite() {
        residual_steps / s
    } else {
        f64::NAN
    }
}

#[derive(Clone, Copy)]
enum Marker {
    Circle,
    Triangle,
    Square,
    Diamond,
}

const PROFILE_MARKERS: [Marker; 3] = [Marker::Triangle, Marker::Square, Marker::Diamond];

fn draw_markers(
    chart: &mut Chart<'_, '_>,
    points: &[(f64, f64)],
    kind: Marker,
    colour: RGBColor,
) -> DrawResult {
    let style = colour.filled();
    let at = points.iter().copied();
    match kind {
        Marker::Circle => chart.draw_series(at.map(|p| Circle::new(p, 4, style)))?,
        Marker::Triangle => chart.draw_series(at.map(|p| TriangleMarker::new(p, 6, style)))?,
        Marker::Square => chart.draw_series(
            at.map(|p| EmptyElement::at(p) + Rectangle::new([(-4, -4), (4, 4)], style)),
        )?,
        Marker::Diamond => chart.draw_series(at.map(|p| {
            EmptyElement::at(p) + Polygon::new(vec![(0, -5), (5, 0), (0, 5), (-5, 0)], style)
        }))?,
    };
    Ok(())
}

/// The legend's picture of a marker: its outline as a polygon (a circle
/// as an octagon), on a short stroke of the series' colour.
fn legend_outline(kind: Marker) -> Vec<(i32, i32)> {
    match kind {
        Marker::Circle => vec![
            (-2, -4),
            (2, -4),
            (4, -2),
            (4, 2),
            (2, 4),
            (-2, 4),
            (-4, 2),
            (-4, -2),
        ],
        Marker::Triangle => vec![(0, -6), (5, 3), (-5, 3)],
        Marker::Square => vec![(-4, -4), (4, -4), (4, 4), (-4, 4)],
        Marker::Diamond => vec![(0, -5), (5, 0), (0, 5), (-5, 0)],
    }
}

/// One series to draw: a legend name, its colour and marker, its points
/// (hz, steps, residual steps, residual Hz) and its curve.
struct Series {
    name: String,
    colour: RGBColor,
    marker: Marker,
    points: Vec<(f64, f64, f64, f64)>,
    curve: Vec<(f64, f64)>,
}

fn finite_range(values: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
    (lo <= hi).then_some((lo, hi))
}

/// Writes the plot of `report` (fitted by `cal`) to `path` as SVG, with the
/// station drawn from `ctx`.
pub fn write_svg(
    path: &Path,
    cal: &Calibration,
    report: &Report,
    ctx: &PlotContext,
) -> Result<(), CalibrationError> {
    let svg = render_svg(cal, report, ctx).map_err(|e| plot_error(path, e))?;
    std::fs::write(path, svg).map_err(|source| CalibrationError::Write {
        path: path.to_path_buf(),
        source,
    })
}

/// The plot as SVG text.
pub fn render_svg(
    cal: &Calibration,
    report: &Report,
    ctx: &PlotContext,
) -> Result<String, PlotError> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (960, 1040)).into_drawing_area();
        draw(&root, cal, report, ctx)?;
        root.present()?;
    }
    Ok(svg)
}

type Area<'s> = DrawingArea<SVGBackend<'s>, Shift>;
type DrawResult =
    Result<(), DrawingAreaErrorKind<<SVGBackend<'static> as DrawingBackend>::ErrorType>>;

fn draw(
    root: &Area<'_>,
    cal: &Calibration,
    report: &Report,
    ctx: &PlotContext,
) -> Result<(), PlotError> {
    let err = PlotError::Draw;
    // The x range covers the points, the candidates and the bands.
    let point_hz = report
        .rows
        .iter()
        .chain(&report.candidates)
        .map(|r| r.hz)
        .chain(
            ctx.profiles
                .iter()
                .flat_map(|p| p.points.iter().map(|q| q.0)),
        );
    let band_hz = ctx.bands.iter().flat_map(|b| [b.low_hz, b.high_hz]);
    let (fmin, fmax) = finite_range(point_hz.chain(band_hz)).ok_or(PlotError::Nothing {
        expected: "points or bands",
    })?;
    let (x0, x1) = padded(fmin / 1e6, fmax / 1e6);
    let sample = |map: &dyn StepMap| -> Vec<(f64, f64)> {
        (0..=400)
            .map(|i| {
                let mhz = x0 + (x1 - x0) * i as f64 / 400.0;
                (mhz, map.steps_at(mhz * 1e6))
            })
            .filter(|(_, s)| s.is_finite())
            .collect()
    };

    let mut series = vec![Series {
        name: "base: measured and fitted".to_string(),
        colour: BASE,
        marker: Marker::Circle,
        points: report
            .rows
            .iter()
            .map(|r| (r.hz, r.steps, r.residual_steps, r.residual_hz))
            .collect(),
        curve: sample(cal),
    }];
    for (i, p) in ctx.profiles.iter().enumerate() {
        let map = p.map.as_ref();
        series.push(Series {
            name: format!("profile {}", p.name),
            colour: PROFILE_COLOURS[i % PROFILE_COLOURS.len()],
            marker: PROFILE_MARKERS[i % PROFILE_MARKERS.len()],
            points: p
                .points
                .iter()
                .map(|&(hz, steps)| {
                    let r = steps - map.steps_at(hz);
                    (hz, steps, r, to_hz(map, hz, r))
                })
                .collect(),
            curve: sample(map),
        });
    }

    // Steps: the points and curves (the curves only over the points'
    // span, so that an extrapolation far out cannot squash the chart), and
    // the limits when they are near enough to be read on the same scale.
    let (pmin, pmax) = finite_range(
        report
            .rows
            .iter()
            .chain(&report.candidates)
            .map(|r| r.steps)
            .chain(series.iter().flat_map(|s| s.points.iter().map(|p| p.1))),
    )
    .ok_or(PlotError::Nothing {
        expected: "finite step counts",
    })?;
    let in_span = |mhz: f64| mhz * 1e6 >= fmin && mhz * 1e6 <= fmax;
    let (cmin, cmax) = finite_range(
        series
            .iter()
            .flat_map(|s| s.curve.iter().filter(|c| in_span(c.0)).map(|c| c.1))
            .chain([pmin, pmax]),
    )
    .unwrap_or((pmin, pmax));
    let span = (cmax - cmin).max(1.0);
    let limits_shown = ctx
        .limits
        .filter(|(lo, hi)| lo.is_finite() && hi.is_finite() && lo < hi)
        .filter(|(lo, hi)| cmin - lo <= 3.0 * span && hi - cmax <= 3.0 * span);
    let (y0, y1) = match limits_shown {
        Some((lo, hi)) => padded(lo.min(cmin), hi.max(cmax)),
        None => padded(cmin, cmax),
    };

    let (top, rest) = root.split_vertically(540);
    let (middle, bottom) = rest.split_vertically(280);

    let loo = report
        .loo_rms
        .map_or("n/a (too few points)".to_string(), |v| {
            format!("{v:.2} steps")
        });
    let mut chart = ChartBuilder::on(&top)
        .caption(
            format!(
                "calibration: {} ({}), {LOO_TITLE} {loo}",
                report.model, report.structure
            ),
            ("sans-serif", 20),
        )
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(80)
        .build_cartesian_2d(x0..x1, y0..y1)
        .map_err(err)?;
    let xdec = decimals_for(x1 - x0);
    let ydec = decimals_for(y1 - y0);
    chart
        .configure_mesh()
        .x_desc("frequency (MHz)")
        .y_desc("motor position (steps)")
        .x_label_formatter(&|v| tick_label(*v, xdec))
        .y_label_formatter(&|v| tick_label(*v, ydec))
        .draw()
        .map_err(err)?;
    shade_bands(
        &mut chart,
        &ctx.bands,
        (y0, y1),
        Some(y0 + (y1 - y0) * 0.05),
    )
    .map_err(err)?;
    if let Some((lo, hi)) = limits_shown {
        for (v, which) in [(lo, "min"), (hi, "max")] {
            chart
                .draw_series(DashedLineSeries::new(
                    vec![(x0, v), (x1, v)],
                    8,
                    5,
                    LIMIT.stroke_width(2),
                ))
                .map_err(err)?;
            chart
                .draw_series([Text::new(
                    format!("travel limit {which} {}", tick_label(v, 0)),
                    (x0, v),
                    ("sans-serif", 13).into_font().color(&LIMIT),
                )])
                .map_err(err)?;
        }
        chart
            .draw_series(LineSeries::new(std::iter::empty(), LIMIT.stroke_width(2)))
            .map_err(err)?
            .label("travel limits")
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], LIMIT.stroke_width(2)));
    } else if let Some((lo, hi)) = ctx.limits {
        chart
            .draw_series(LineSeries::new(std::iter::empty(), LIMIT.stroke_width(2)))
            .map_err(err)?
            .label(format!(
                "travel limits {} to {} (off the chart)",
                tick_label(lo, 0),
                tick_label(hi, 0)
            ))
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], LIMIT.stroke_width(2)));
    }
    for s in &series {
        let colour = s.colour;
        // Clipped to the chart: beyond it a curve would run along the edge.
        let visible = s.curve.iter().copied().filter(|c| c.1 >= y0 && c.1 <= y1);
        chart
            .draw_series(LineSeries::new(visible, colour.stroke_width(2)))
            .map_err(err)?
            .label(s.name.clone())
            .legend(move |(x, y)| {
                EmptyElement::at((x + 8, y))
                    + PathElement::new(vec![(-8, 0), (8, 0)], colour.stroke_width(2))
                    + Polygon::new(legend_outline(s.marker), colour.filled())
            });
        let at: Vec<(f64, f64)> = s.points.iter().map(|p| (p.0 / 1e6, p.1)).collect();
        draw_markers(&mut chart, &at, s.marker, colour).map_err(err)?;
    }
    if !report.candidates.is_empty() {
        chart
            .draw_series(
                report
                    .candidates
                    .iter()
                    .map(|r| Cross::new((r.hz / 1e6, r.steps), 5, CANDIDATE.stroke_width(2))),
            )
            .map_err(err)?
            .label("candidate (not fitted)")
            .legend(|(x, y)| Cross::new((x + 8, y), 5, CANDIDATE.stroke_width(2)));
    }
    if let Some(o) = &report.outlier {
        chart
            .draw_series([Circle::new(
                (o.hz / 1e6, o.measured),
                9,
                LIMIT.stroke_width(2),
            )])
            .map_err(err)?
            .label(format!("likely wrong: {:.3} MHz", o.hz / 1e6))
            .legend(|(x, y)| Circle::new((x + 8, y), 6, LIMIT.stroke_width(2)));
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperRight)
        .background_style(WHITE.mix(0.85))
        .border_style(BLACK)
        .draw()
        .map_err(err)?;

    residual_hz_panel(&middle, &series, report, ctx, (x0, x1)).map_err(err)?;
    residual_steps_panel(&bottom, &series, report, ctx, (x0, x1)).map_err(err)?;
    Ok(())
}

type Chart<'c, 's> = ChartContext<'c, SVGBackend<'s>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

fn shade_bands(
    chart: &mut Chart<'_, '_>,
    bands: &[PlotBand],
    (y0, y1): (f64, f64),
    label_at: Option<f64>,
) -> DrawResult {
    chart.draw_series(bands.iter().map(|b| {
        Rectangle::new(
            [(b.low_hz / 1e6, y0), (b.high_hz / 1e6, y1)],
            BAND_FILL.filled(),
        )
    }))?;
    if let Some(y) = label_at {
        chart.draw_series(bands.iter().map(|b| {
            Text::new(
                format!("band {}", b.name),
                (b.low_hz / 1e6, y),
                ("sans-serif", 13).into_font().color(&BAND_TEXT),
            )
        }))?;
    }
    Ok(())
}

fn residual_hz_panel(
    area: &Area<'_>,
    series: &[Series],
    report: &Report,
    ctx: &PlotContext,
    (x0, x1): (f64, f64),
) -> DrawResult {
    let window: Vec<(f64, f64)> = match &ctx.half_window_hz {
        Some(f) => (0..=200)
            .filter_map(|i| {
                let mhz = x0 + (x1 - x0) * i as f64 / 200.0;
                f(mhz * 1e6)
                    .filter(|w| w.is_finite() && *w > 0.0)
                    .map(|w| (mhz, w))
            })
            .collect(),
        None => Vec::new(),
    };
    // A point named as wrong is drawn at the edge rather than setting the
    // scale: everything else stays readable.
    let outlier_hz = report.outlier.as_ref().map(|o| o.hz);
    let is_outlier = |hz: f64| outlier_hz == Some(hz);
    let rmax = series
        .iter()
        .flat_map(|s| s.points.iter())
        .filter(|p| !is_outlier(p.0))
        .map(|p| p.3.abs())
        .chain(window.iter().map(|w| w.1))
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max)
        .max(1.0)
        * 1.2;
    let mut res = ChartBuilder::on(area)
        .caption(
            "residuals in Hz (through the curve's local slope)",
            ("sans-serif", 16),
        )
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(80)
        .build_cartesian_2d(x0..x1, -rmax..rmax)?;
    let xdec = decimals_for(x1 - x0);
    let ydec = decimals_for(2.0 * rmax);
    res.configure_mesh()
        .x_desc("frequency (MHz)")
        .y_desc("residual (Hz)")
        .x_label_formatter(&|v| tick_label(*v, xdec))
        .y_label_formatter(&|v| tick_label(*v, ydec))
        .draw()?;
    shade_bands(&mut res, &ctx.bands, (-rmax, rmax), None)?;
    if !window.is_empty() {
        let mut outline: Vec<(f64, f64)> = window.clone();
        outline.extend(window.iter().rev().map(|(x, w)| (*x, -w)));
        res.draw_series([Polygon::new(outline, WINDOW_FILL.mix(0.8).filled())])?
            .label("1.5:1 half-window (SWR 1.5 inside)")
            .legend(|(x, y)| Rectangle::new([(x, y - 5), (x + 16, y + 5)], WINDOW_FILL.filled()));
        res.draw_series(LineSeries::new(window.iter().copied(), GREEN.mix(0.6)))?;
        res.draw_series(LineSeries::new(
            window.iter().map(|(x, w)| (*x, -w)),
            GREEN.mix(0.6),
        ))?;
    }
    res.draw_series(LineSeries::new(vec![(x0, 0.0), (x1, 0.0)], BLACK))?;
    for s in series {
        let at: Vec<(f64, f64)> = s
            .points
            .iter()
            .filter(|p| p.3.is_finite())
            .map(|p| (p.0 / 1e6, p.3.clamp(-rmax, rmax)))
            .collect();
        draw_markers(&mut res, &at, s.marker, s.colour)?;
    }
    if let Some(o) = &report.outlier {
        let hz = report.rows.get(o.index).map_or(f64::NAN, |r| r.residual_hz);
        if hz.is_finite() && hz.abs() > rmax {
            let edge = rmax.copysign(hz) * 0.85;
            res.draw_series([Text::new(
                format!("{:.3} MHz off scale ({} Hz)", o.hz / 1e6, tick_label(hz, 0)),
                (o.hz / 1e6, edge),
                ("sans-serif", 13).into_font().color(&LIMIT),
            )])?;
        }
    }
    if !window.is_empty() {
        res.configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .draw()?;
    }
    Ok(())
}

fn residual_steps_panel(
    area: &Area<'_>,
    series: &[Series],
    report: &Report,
    ctx: &PlotContext,
    (x0, x1): (f64, f64),
) -> DrawResult {
    let rmax = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.2))
        .chain(report.candidates.iter().map(|r| r.residual_steps))
        .filter(|v| v.is_finite())
        .fold(0.0, |a: f64, v| a.max(v.abs()))
        .max(1e-3)
        * 1.2;
    let mut res = ChartBuilder::on(area)
        .caption("residuals in steps (measured - fitted)", ("sans-serif", 16))
        .margin(12)
        .x_label_area_size(36)
        .y_label_area_size(80)
        .build_cartesian_2d(x0..x1, -rmax..rmax)?;
    let xdec = decimals_for(x1 - x0);
    let ydec = decimals_for(2.0 * rmax);
    res.configure_mesh()
        .x_desc("frequency (MHz)")
        .y_desc("residual (steps)")
        .x_label_formatter(&|v| tick_label(*v, xdec))
        .y_label_formatter(&|v| tick_label(*v, ydec))
        .draw()?;
    shade_bands(&mut res, &ctx.bands, (-rmax, rmax), None)?;
    res.draw_series(LineSeries::new(vec![(x0, 0.0), (x1, 0.0)], BLACK))?;
    for s in series {
        let at: Vec<(f64, f64)> = s
            .points
            .iter()
            .filter(|p| p.2.is_finite())
            .map(|p| (p.0 / 1e6, p.2))
            .collect();
        draw_markers(&mut res, &at, s.marker, s.colour)?;
    }
    res.draw_series(
        report
            .candidates
            .iter()
            .filter(|r| r.residual_steps.is_finite())
            .map(|r| Cross::new((r.hz / 1e6, r.residual_steps), 5, CANDIDATE.stroke_width(2))),
    )?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_whole_where_the_axis_is() {
        assert_eq!(tick_label(25000.0, decimals_for(8000.0)), "25 000");
        assert_eq!(tick_label(-0.2, 0), "0");
        assert_eq!(tick_label(7.25, decimals_for(11.0)), "7");
        assert_eq!(tick_label(7.25, decimals_for(0.5)), "7.25");
        assert_eq!(tick_label(-0.0001, 2), "0.00");
        assert_eq!(decimals_for(0.04), 3);
    }
}
