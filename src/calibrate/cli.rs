//! `tuneward fit`: fit a calibration to a point file and report on it.

use std::path::{Path, PathBuf};

use super::plot::{PlotBand, PlotContext, ProfileCurve};
use super::profiles::{CalibrationSet, ProfileMap};
use super::report::{self, Report};
use super::{
    accept_candidates, candidates_path, read_candidates, read_points_csv, CalibrationError,
    FitOptions, ModelKind, Point,
};
use crate::antenna::{bandwidth_1_5_hz, BandSpan, LoopDescription};

/// What `tuneward fit` is asked to do: fit a calibration (frequency to
/// motor steps) to measured points and report how well it holds.
///
/// `points` is a CSV file with a header row: frequency in Hz, motor steps,
/// and optionally `profile` and `weight` columns. Lines starting with `#`
/// are comments. Candidate points learned from touch-ups are read from
/// `<stem>.candidates.csv` beside it and shown marked with `*`.
#[derive(Debug, Clone)]
pub struct FitCommandOptions {
    /// The points file (CSV: `hz,steps[,profile][,weight]`).
    pub points: PathBuf,
    /// Model to fit; `auto` picks by leave-one-out error. `None`: the
    /// station's `[calibration] model` with a config, else `auto`.
    pub model: Option<ModelKind>,
    /// Polynomial degree for `ModelKind::Poly`.
    pub degree: usize,
    /// The result as JSON instead of the text report.
    pub json: bool,
    /// Also draw points, curve and residuals into this SVG file.
    pub plot: Option<PathBuf>,
    /// Station config: its bands and `[antenna]` make the report per band
    /// and give residuals as a share of the loop's bandwidth.
    pub config: Option<PathBuf>,
    /// Move the candidate points into the points file (atomically) before
    /// fitting, and clear the candidates file.
    pub accept: bool,
}

/// Why `tuneward fit` failed.
#[derive(Debug, thiserror::Error)]
pub enum FitFailure {
    #[error(transparent)]
    Calibration(#[from] CalibrationError),
    #[error("{path}: no points without a profile; the report covers the base points (leave the `profile` column empty for them)")]
    NoBase { path: PathBuf },
    #[error("cannot write to standard output: {0}")]
    Stdout(std::io::Error),
}

/// What a station's config adds to a fit report: the loop, for residuals as
/// a share of its bandwidth, and the bands, for coverage per band; the
/// travel limits for the plot; the model `run` fits and the points file it
/// reads, so the report can say how a fit reaches the station.
#[derive(Debug, Clone)]
pub struct FitStation {
    pub antenna: LoopDescription,
    pub bands: Vec<BandSpan>,
    /// `tuner.min_steps`, `tuner.max_steps`.
    pub limits: Option<(i64, i64)>,
    /// `[calibration] model` and degree: what `run` fits.
    pub fit: FitOptions,
    /// `[calibration] file`, resolved; `None` with inline points.
    pub calibration_file: Option<PathBuf>,
}

/// The fitted base calibration's report for a point file, as the CLI computes
/// it (without config, candidates or profiles). The NIST checks run through
/// this.
pub fn fit_report(path: &Path, options: FitOptions) -> Result<Report, CalibrationError> {
    let points = read_points_csv(path)?;
    let set = CalibrationSet::fit_with(options, &points)?;
    let base = set.base().ok_or_else(|| CalibrationError::TooFewPoints {
        model: options.kind.name().to_string(),
        needed: 2,
        found: 0,
    })?;
    Ok(report::build(base, None, &[], &[]))
}

/// Runs `tuneward fit`: the report (or JSON) to print on standard output.
/// Notes (accepted candidates) go to standard error with `--json`. With
/// `--config`, the station layer reads the config and passes what it says
/// as `station`.
pub fn fit_command(
    args: &FitCommandOptions,
    station: Option<&FitStation>,
) -> Result<String, FitFailure> {
    let mut notes = String::new();
    if args.accept {
        let n = accept_candidates(&args.points)?;
        notes.push_str(&format!(
            "accepted {n} candidate point(s) into {}\n",
            args.points.display()
        ));
    }
    let points = read_points_csv(&args.points)?;
    let candidates = read_candidates(&candidates_path(&args.points))?;
    let options = fit_options(args, station);
    let set = CalibrationSet::fit_with(options, &points)?;
    let Some(base) = set.base() else {
        return Err(FitFailure::NoBase {
            path: args.points.clone(),
        });
    };
    let antenna = station.map(|c| &c.antenna);
    let bands = station.map_or(&[][..], |c| &c.bands[..]);
    let base_candidates: Vec<Point> = candidates
        .iter()
        .filter(|c| c.profile.is_none())
        .cloned()
        .collect();
    let mut rep = report::build(base, antenna, bands, &base_candidates);
    for name in set.profiles() {
        let line = match set.profile(&name) {
            Some(ProfileMap::Own(c)) => format!(
                "profile {name}: own fit, {} from {} points ({})",
                c.spec().label(),
                c.points().len(),
                c.note()
            ),
            Some(ProfileMap::Offset {
                offset_steps,
                points,
                ..
            }) => format!(
                "profile {name}: base {offset_steps:+.2} steps (offset from {points} point(s))"
            ),
            None => continue,
        };
        rep.profiles.push(line);
    }
    let other = candidates.len() - base_candidates.len();
    if other > 0 {
        rep.profiles.push(format!(
            "{other} candidate point(s) for named profiles are waiting in {}",
            candidates_path(&args.points).display()
        ));
    }
    let lines = station.map(|c| station_lines(args, c, options));
    if let Some(plot) = &args.plot {
        let ctx = station.map_or_else(PlotContext::default, |c| plot_context(c, &set, &points));
        super::plot::write_svg(plot, base, &rep, &ctx)?;
    }
    if args.json {
        let mut json = rep.to_json();
        if let (Some(lines), Some(obj)) = (&lines, json.as_object_mut()) {
            obj.insert("station".to_string(), serde_json::json!(lines));
        }
        let mut s = serde_json::to_string_pretty(&json)
            .unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"));
        s.push('\n');
        if !notes.is_empty() {
            eprint!("{notes}");
        }
        Ok(s)
    } else {
        let mut out = format!("{notes}{}", rep.to_text());
        for line in lines.iter().flatten() {
            out.push_str(&format!("station: {line}\n"));
        }
        Ok(out)
    }
}

/// `--model` when given; with a config, the station's own model and
/// degree (what `run` fits), so that the report is about the calibration
/// the station will use; else `auto`.
fn fit_options(args: &FitCommandOptions, station: Option<&FitStation>) -> FitOptions {
    match (args.model, station) {
        (Some(kind), _) => FitOptions {
            kind,
            degree: args.degree,
        },
        (None, Some(c)) => c.fit,
        (None, None) => FitOptions {
            kind: ModelKind::Auto,
            degree: args.degree,
        },
    }
}

/// What the station will use and how this fit reaches it.
fn station_lines(args: &FitCommandOptions, config: &FitStation, used: FitOptions) -> Vec<String> {
    let station = config.fit;
    let name = |o: FitOptions| match o.kind {
        ModelKind::Poly => format!("poly (degree {})", o.degree),
        k => k.name().to_string(),
    };
    let mut lines = Vec::new();
    if used == station {
        lines.push(format!(
            "fitted with {}, the model `run` uses (`[calibration] model`)",
            name(station)
        ));
    } else {
        lines.push(format!(
            "fitted with {} as asked; `run` uses {} (`[calibration] model`): set `model = \"{}\"` there to use this fit",
            name(used),
            name(station),
            used.kind.name()
        ));
    }
    let same_file = |a: &Path, b: &Path| match (a.canonicalize(), b.canonicalize()) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    };
    match &config.calibration_file {
        Some(file) if same_file(file, &args.points) => lines.push(format!(
            "`[calibration] file = {}` is this points file: `run` fits it when it starts, so a change here reaches the station at its next start; `--accept` moves candidate points into it first",
            file.display()
        )),
        Some(file) => lines.push(format!(
            "the station reads its points from `[calibration] file = {}`, not from {}: copy these points there or point `file` here for `run` to use them",
            file.display(),
            args.points.display()
        )),
        None => lines.push(format!(
            "the station uses its inline `[calibration] points`, not {}: set `[calibration] file = \"{}\"` (and remove `points`) for `run` to use this file",
            args.points.display(),
            args.points.display()
        )),
    }
    lines
}

/// The station's bands, limits, profiles and loop, as the plot takes them.
fn plot_context(config: &FitStation, set: &CalibrationSet, points: &[Point]) -> PlotContext {
    let profiles = set
        .profiles()
        .into_iter()
        .filter_map(|name| {
            let map = set.map(Some(&name)).ok()?;
            let own = points
                .iter()
                .filter(|p| p.profile.as_deref() == Some(name.as_str()))
                .map(|p| (p.hz, p.steps))
                .collect();
            Some(ProfileCurve {
                name,
                points: own,
                map,
            })
        })
        .collect();
    let antenna = config.antenna.clone();
    let described = crate::antenna::SmallLoop::from_config(&antenna).is_some();
    PlotContext {
        bands: config
            .bands
            .iter()
            .map(|b| PlotBand {
                name: b.name.clone(),
                low_hz: b.low_hz as f64,
                high_hz: b.high_hz as f64,
            })
            .collect(),
        limits: config.limits.map(|(lo, hi)| (lo as f64, hi as f64)),
        profiles,
        half_window_hz: described.then(|| {
            Box::new(move |hz: f64| bandwidth_1_5_hz(&antenna, hz).map(|bw| bw / 2.0))
                as Box<dyn Fn(f64) -> Option<f64>>
        }),
    }
}
