//! `tuneward fit`: fit a calibration to a point file and report on it.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use super::profiles::{CalibrationSet, ProfileMap};
use super::report::{self, Report};
use super::{
    accept_candidates, candidates_path, read_candidates, read_points_csv, CalibrationError,
    FitOptions, ModelKind, Point, DEFAULT_POLY_DEGREE,
};
use crate::config::Config;

/// Fit a calibration (frequency to motor steps) to measured points and
/// report how well it holds.
///
/// POINTS is a CSV file with a header row: frequency in Hz, motor steps, and
/// optionally `profile` and `weight` columns. Lines starting with `#` are
/// comments. Candidate points learned from touch-ups are read from
/// `<stem>.candidates.csv` beside it and shown marked with `*`.
///
/// Exit status: 0 when a calibration was fitted (warnings included), 2 on
/// any error, with the file, line and column named on standard error.
#[derive(Debug, Clone, clap::Args)]
pub struct FitArgs {
    /// The points file (CSV: hz,steps[,profile][,weight]).
    pub points: PathBuf,
    /// Model to fit; `auto` picks by leave-one-out error.
    #[arg(long, value_enum, default_value = "auto")]
    pub model: ModelKind,
    /// Polynomial degree for `--model poly`.
    #[arg(long, default_value_t = DEFAULT_POLY_DEGREE)]
    pub degree: usize,
    /// Print the result as JSON instead of the text report.
    #[arg(long)]
    pub json: bool,
    /// Also draw points, curve and residuals into this SVG file.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
    /// Station config: its bands and `[antenna]` make the report per band and
    /// give residuals as a share of the loop's bandwidth.
    #[arg(long, value_name = "FILE.toml")]
    pub config: Option<PathBuf>,
    /// Move the candidate points into the points file (atomically) before
    /// fitting, and clear the candidates file.
    #[arg(long)]
    pub accept: bool,
}

#[derive(Debug, thiserror::Error)]
enum FitFailure {
    #[error(transparent)]
    Calibration(#[from] CalibrationError),
    #[error(transparent)]
    Config(#[from] Box<crate::config::ConfigError>),
    #[error("{path}: no points without a profile; the report covers the base points (leave the `profile` column empty for them)")]
    NoBase { path: PathBuf },
    #[error("cannot write to standard output: {0}")]
    Stdout(std::io::Error),
}

/// Runs `tuneward fit`; prints the report (or JSON) and returns the exit code:
/// 0 on success, 2 on any error (with the message on standard error).
pub fn run_fit(args: FitArgs) -> ExitCode {
    match fit_command(&args) {
        Ok(out) => {
            let mut stdout = std::io::stdout().lock();
            match stdout
                .write_all(out.as_bytes())
                .and_then(|_| stdout.flush())
            {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("tuneward fit: {}", FitFailure::Stdout(e));
                    ExitCode::from(2)
                }
            }
        }
        Err(e) => {
            eprintln!("tuneward fit: {e}");
            ExitCode::from(2)
        }
    }
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

fn fit_command(args: &FitArgs) -> Result<String, FitFailure> {
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
