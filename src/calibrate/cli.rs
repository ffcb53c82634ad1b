//! `tuneward fit`: fit a calibration to a point file and report on it.

use std::path::{Path, PathBuf};

use super::profiles::{CalibrationSet, ProfileMap};
use super::report::{self, Report};
use super::{
    accept_candidates, candidates_path, read_candidates, read_points_csv, CalibrationError,
    FitOptions, ModelKind, Point,
};
use crate::config::Config;

/// What `tuneward fit` is asked to do: fit a calibration (frequency to
/// motor steps) to measured points and report how well it holds.
///
/// `points` is a CSV file with a header row: frequency in Hz, motor steps,
/// and optionally `profile` and `weight` columns. Lines starting with `#`
/// are comments. Candidate points learned from touch-ups are read from
/// `<stem>.candidates.csv` beside it and shown marked with `*`.
#[derive(Debug, Clone)]
pub struct FitCommandOptions {
    /// The points file (CSV: hz,steps[,profile][,weight]).
    pub points: PathBuf,
    /// Model to fit; `auto` picks by leave-one-out error.
    pub model: ModelKind,
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
    #[error(transparent)]
    Config(#[from] Box<crate::config::ConfigError>),
    #[error("{path}: no points without a profile; the report covers the base points (leave the `profile` column empty for them)")]
    NoBase { path: PathBuf },
    #[error("cannot write to standard output: {0}")]
    Stdout(std::io::Error),
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
/// Notes (accepted candidates) go to standard error with `--json`.
pub fn fit_command(args: &FitCommandOptions) -> Result<String, FitFailure> {
    let config = args
        .config
        .as_deref()
        .map(Config::load)
        .transpose()
        .map_err(Box::new)?;
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
    let options = FitOptions {
        kind: args.model,
        degree: args.degree,
    };
    let set = CalibrationSet::fit_with(options, &points)?;
    let Some(base) = set.base() else {
        return Err(FitFailure::NoBase {
            path: args.points.clone(),
        });
    };
    let antenna = config.as_ref().map(|c| &c.antenna);
    let bands = config.as_ref().map_or(&[][..], |c| &c.bands[..]);
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
    if let Some(plot) = &args.plot {
        super::plot::write_svg(plot, base, &rep)?;
    }
    if args.json {
        let mut s = serde_json::to_string_pretty(&rep.to_json())
            .unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"));
        s.push('\n');
        if !notes.is_empty() {
            eprint!("{notes}");
        }
        Ok(s)
    } else {
        Ok(format!("{notes}{}", rep.to_text()))
    }
}
