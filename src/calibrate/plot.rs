//! SVG plot of a fit: points and curve above, residuals below.

use std::path::Path;

use plotters::prelude::*;

use super::report::Report;
use super::{Calibration, CalibrationError, StepMap};

fn plot_error(path: &Path, e: impl std::fmt::Display) -> CalibrationError {
    CalibrationError::Write {
        path: path.to_path_buf(),
        source: std::io::Error::other(e.to_string()),
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

/// Writes the plot of `report` (fitted by `cal`) to `path` as SVG.
pub fn write_svg(path: &Path, cal: &Calibration, report: &Report) -> Result<(), CalibrationError> {
    let all: Vec<&super::report::PointRow> =
        report.rows.iter().chain(report.candidates.iter()).collect();
    let fmin = all.iter().map(|r| r.hz).fold(f64::INFINITY, f64::min);
    let fmax = all.iter().map(|r| r.hz).fold(f64::NEG_INFINITY, f64::max);
    if !(fmin.is_finite() && fmax.is_finite()) {
        return Err(plot_error(path, "no points to plot"));
    }
    let (x0, x1) = padded(fmin / 1e6, fmax / 1e6);
    let curve: Vec<(f64, f64)> = (0..=400)
        .map(|i| {
            let mhz = x0 + (x1 - x0) * i as f64 / 400.0;
            (mhz, cal.steps_at(mhz * 1e6))
        })
        .filter(|(_, s)| s.is_finite())
        .collect();
    let smin = all
        .iter()
        .map(|r| r.steps)
        .chain(curve.iter().map(|c| c.1))
        .fold(f64::INFINITY, f64::min);
    let smax = all
        .iter()
        .map(|r| r.steps)
        .chain(curve.iter().map(|c| c.1))
        .fold(f64::NEG_INFINITY, f64::max);
    let (y0, y1) = padded(smin, smax);
    let rmax = all
        .iter()
        .map(|r| r.residual_steps.abs())
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max)
        .max(1e-3)
        * 1.2;

    let root = SVGBackend::new(path, (900, 720)).into_drawing_area();
    root.fill(&WHITE).map_err(|e| plot_error(path, e))?;
    let (upper, lower) = root.split_vertically(480);

    let mut chart = ChartBuilder::on(&upper)
        .caption(
            format!("calibration: {} ({})", report.model, report.structure),
            ("sans-serif", 20),
        )
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(70)
        .build_cartesian_2d(x0..x1, y0..y1)
        .map_err(|e| plot_error(path, e))?;
    chart
        .configure_mesh()
        .x_desc("frequency (MHz)")
        .y_desc("motor position (steps)")
        .draw()
        .map_err(|e| plot_error(path, e))?;
    chart
        .draw_series(LineSeries::new(curve.iter().copied(), BLUE.stroke_width(2)))
        .map_err(|e| plot_error(path, e))?
        .label("fitted")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], BLUE));
    chart
        .draw_series(
            report
                .rows
                .iter()
                .map(|r| Circle::new((r.hz / 1e6, r.steps), 4, RED.filled())),
        )
        .map_err(|e| plot_error(path, e))?
        .label("measured")
        .legend(|(x, y)| Circle::new((x + 8, y), 4, RED.filled()));
    if !report.candidates.is_empty() {
        chart
            .draw_series(
                report
                    .candidates
                    .iter()
                    .map(|r| Cross::new((r.hz / 1e6, r.steps), 5, BLACK.stroke_width(2))),
            )
            .map_err(|e| plot_error(path, e))?
            .label("candidate (not fitted)")
            .legend(|(x, y)| Cross::new((x + 8, y), 5, BLACK));
    }
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.8))
        .border_style(BLACK)
        .draw()
        .map_err(|e| plot_error(path, e))?;

    let mut res = ChartBuilder::on(&lower)
        .caption("residuals (measured - fitted)", ("sans-serif", 16))
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(70)
        .build_cartesian_2d(x0..x1, -rmax..rmax)
        .map_err(|e| plot_error(path, e))?;
    res.configure_mesh()
        .x_desc("frequency (MHz)")
        .y_desc("residual (steps)")
        .draw()
        .map_err(|e| plot_error(path, e))?;
    res.draw_series(LineSeries::new(vec![(x0, 0.0), (x1, 0.0)], BLACK))
        .map_err(|e| plot_error(path, e))?;
    res.draw_series(
        report
            .rows
            .iter()
            .filter(|r| r.residual_steps.is_finite())
            .map(|r| Circle::new((r.hz / 1e6, r.residual_steps), 4, RED.filled())),
    )
    .map_err(|e| plot_error(path, e))?;
    res.draw_series(
        report
            .candidates
            .iter()
            .filter(|r| r.residual_steps.is_finite())
            .map(|r| Cross::new((r.hz / 1e6, r.residual_steps), 5, BLACK.stroke_width(2))),
    )
    .map_err(|e| plot_error(path, e))?;
    root.present().map_err(|e| plot_error(path, e))?;
    Ok(())
}
