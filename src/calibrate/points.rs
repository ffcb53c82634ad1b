//! Point files: reading, candidate points, and accepting candidates.
//!
//! A point file is CSV with a header row. Lines starting with `#` are
//! comments, blank lines are skipped. The first column is the frequency in
//! Hz, the second the motor position in steps (their header names are free,
//! `hz,steps` is usual; any finite number is read, the physics model
//! refuses frequencies at or below zero); further columns must be named `profile` (a word such
//! as `dry` or `wet`; empty for the base profile) or `weight` (a positive
//! number; empty means 1). Any other column is refused, so that a typo does
//! not silently drop information.
//!
//! Candidates (positions the operator nudged to and stayed at) are kept in a
//! separate file beside the points file, `<stem>.candidates.csv`, in the same
//! format, until `tuneward fit --accept` moves them into the points file.

use std::fs::{self, File, OpenOptions};
use std::io::Write;
use std::path::{Path, PathBuf};

use super::{CalibrationError, CsvProblem, Point};

/// Parses point-file text; `path` names the file in errors.
pub fn parse_points_csv(text: &str, path: &Path) -> Result<Vec<Point>, CalibrationError> {
    let err = |line: usize, column: &str, expected: &str, found: &str| {
        CalibrationError::Csv(Box::new(CsvProblem {
            path: path.to_path_buf(),
            line,
            column: column.to_string(),
            expected: expected.to_string(),
            found: found.to_string(),
        }))
    };
    let mut header: Option<Vec<String>> = None;
    let mut points = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let line_no = i + 1;
        let line = raw.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let fields: Vec<&str> = line.split(',').map(str::trim).collect();
        let Some(names) = &header else {
            if fields.len() < 2 {
                return Err(err(
                    line_no,
                    "header",
                    "a header row with at least two columns (e.g. `hz,steps`)",
                    line,
                ));
            }
            if fields.first().is_some_and(|f| f.parse::<f64>().is_ok()) {
                return Err(err(
                    line_no,
                    "header",
                    "a header row naming the columns (e.g. `hz,steps`) before the numbers",
                    line,
                ));
            }
            let mut names = Vec::new();
            for (c, name) in fields.iter().enumerate() {
                let lower = name.to_ascii_lowercase();
                if c >= 2 {
                    if lower != "profile" && lower != "weight" {
                        return Err(err(
                            line_no,
                            &format!("column {}", c + 1),
                            "`profile` or `weight` (the first two columns are Hz and steps)",
                            name,
                        ));
                    }
                    if names.contains(&lower) {
                        return Err(err(
                            line_no,
                            &format!("column {}", c + 1),
                            "each column named once",
                            &format!("`{name}` a second time"),
                        ));
                    }
                }
                names.push(lower);
            }
            header = Some(names);
            continue;
        };
        if fields.len() > names.len() {
            return Err(err(
                line_no,
                &format!("column {}", names.len() + 1),
                &format!("{} columns as in the header", names.len()),
                &format!("{} columns", fields.len()),
            ));
        }
        let hz_name = names.first().map_or("hz", String::as_str);
        let steps_name = names.get(1).map_or("steps", String::as_str);
        let col = |c: usize, name: &str| format!("column {} ({name})", c + 1);
        let hz_text = fields.first().copied().unwrap_or("");
        let hz: f64 = match hz_text.parse::<f64>() {
            Ok(v) if v.is_finite() => v,
            _ => {
                return Err(err(
                    line_no,
                    &col(0, hz_name),
                    "a frequency in Hz (a number)",
                    if hz_text.is_empty() {
                        "nothing"
                    } else {
                        hz_text
                    },
                ))
            }
        };
        let steps_text = fields.get(1).copied().unwrap_or("");
        let steps: f64 = match steps_text.parse::<f64>() {
            Ok(v) if v.is_finite() => v,
            _ => {
                return Err(err(
                    line_no,
                    &col(1, steps_name),
                    "a motor position in steps (a number)",
                    if steps_text.is_empty() {
                        "nothing"
                    } else {
                        steps_text
                    },
                ))
            }
        };
        let mut point = Point::new(hz, steps);
        for (c, name) in names.iter().enumerate().skip(2) {
            let value = fields.get(c).copied().unwrap_or("");
            if value.is_empty() {
                continue;
            }
            if name == "weight" {
                match value.parse::<f64>() {
                    Ok(w) if w.is_finite() && w > 0.0 => point.weight = w,
                    _ => {
                        return Err(err(
                            line_no,
                            &col(c, name),
                            "a positive weight (or nothing for 1)",
                            value,
                        ))
                    }
                }
            } else {
                if !valid_profile_name(value) {
                    return Err(err(
                        line_no,
                        &col(c, name),
                        "a profile name of letters, digits, `-` or `_` (or nothing for the base)",
                        value,
                    ));
                }
                point.profile = Some(value.to_string());
            }
        }
        points.push(point);
    }
    if header.is_none() {
        return Err(err(
            text.lines().count().max(1),
            "header",
            "a header row (e.g. `hz,steps`) and points",
            "no header",
        ));
    }
    Ok(points)
}

/// A profile name: letters, digits, `-`, `_`.
pub fn valid_profile_name(name: &str) -> bool {
    !name.is_empty()
        && name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
}

/// Reads a point file.
pub fn read_points_csv(path: &Path) -> Result<Vec<Point>, CalibrationError> {
    let text = fs::read_to_string(path).map_err(|source| CalibrationError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    parse_points_csv(&text, path)
}

/// The candidates file that belongs to a points file:
/// `loop.csv` → `loop.candidates.csv`, in the same folder.
pub fn candidates_path(points: &Path) -> PathBuf {
    let stem = points
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "points".to_string());
    points.with_file_name(format!("{stem}.candidates.csv"))
}

/// Reads the candidates file; a missing file is no candidates.
pub fn read_candidates(path: &Path) -> Result<Vec<Point>, CalibrationError> {
    match fs::read_to_string(path) {
        Ok(text) => parse_points_csv(&text, path),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(Vec::new()),
        Err(source) => Err(CalibrationError::Io {
            path: path.to_path_buf(),
            source,
        }),
    }
}

/// `hz,steps,profile` line for a point (no weight column: candidates weigh 1).
fn candidate_line(p: &Point) -> String {
    format!(
        "{},{},{}\n",
        fmt_num(p.hz),
        fmt_num(p.steps),
        p.profile.as_deref().unwrap_or("")
    )
}

fn fmt_num(v: f64) -> String {
    if v.fract() == 0.0 && v.abs() < 1e15 {
        format!("{}", v as i64)
    } else {
        format!("{v}")
    }
}

fn check_point(p: &Point, path: &Path) -> Result<(), CalibrationError> {
    let bad = |detail: String| CalibrationError::Write {
        path: path.to_path_buf(),
        source: std::io::Error::new(std::io::ErrorKind::InvalidInput, detail),
    };
    if !(p.hz.is_finite() && p.hz > 0.0 && p.steps.is_finite()) {
        return Err(bad(format!(
            "refusing to store a candidate with hz = {}, steps = {}",
            p.hz, p.steps
        )));
    }
    if let Some(name) = &p.profile {
        if !valid_profile_name(name) {
            return Err(bad(format!("refusing profile name `{name}`")));
        }
    }
    Ok(())
}

/// Appends one candidate point to a candidates file (created with a header
/// if missing), after a `# ` comment line saying how it was found, if
/// `note` is given (a comment, so the file stays a point file). The lines
/// are written with one `write` on an append-mode file and synced, so a
/// crash leaves either all of them or none.
pub fn append_candidate(
    path: &Path,
    point: &Point,
    note: Option<&str>,
) -> Result<(), CalibrationError> {
    check_point(point, path)?;
    let werr = |source| CalibrationError::Write {
        path: path.to_path_buf(),
        source,
    };
    let mut file = OpenOptions::new()
        .create(true)
        .append(true)
        .open(path)
        .map_err(werr)?;
    let empty = file.metadata().map_err(werr)?.len() == 0;
    let mut text = String::new();
    if empty {
        text.push_str("hz,steps,profile\n");
    }
    if let Some(note) = note {
        // One line, printable: a comment cannot end early or hide a point.
        let clean: String = note
            .chars()
            .map(|c| if c.is_control() { ' ' } else { c })
            .collect();
        text.push_str(&format!("# {clean}\n"));
    }
    text.push_str(&candidate_line(point));
    file.write_all(text.as_bytes()).map_err(werr)?;
    file.sync_all().map_err(werr)?;
    Ok(())
}

/// Replaces `path` with `contents` atomically: a temporary file in the same
/// folder is written and synced, renamed over the target, and the folder is
/// synced so the rename itself survives a power cut.
pub fn write_atomic(path: &Path, contents: &str) -> Result<(), CalibrationError> {
    let werr = |source| CalibrationError::Write {
        path: path.to_path_buf(),
        source,
    };
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "points".to_string());
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let result = (|| {
        let mut f = OpenOptions::new().write(true).create_new(true).open(&tmp)?;
        f.write_all(contents.as_bytes())?;
        f.sync_all()?;
        drop(f);
        fs::rename(&tmp, path)?;
        File::open(&dir)?.sync_all()
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    result.map_err(werr)
}

/// Moves the candidates into the points file: the points file is rewritten
/// atomically with the candidates appended (keeping its comments and lines;
/// a `profile` column is added if a candidate needs one), then the
/// candidates file is removed. Returns how many points were accepted.
pub fn accept_candidates(points_path: &Path) -> Result<usize, CalibrationError> {
    let cand_path = candidates_path(points_path);
    let candidates = read_candidates(&cand_path)?;
    if candidates.is_empty() {
        return Ok(0);
    }
    let text = fs::read_to_string(points_path).map_err(|source| CalibrationError::Io {
        path: points_path.to_path_buf(),
        source,
    })?;
    // Validates the points file before touching it.
    parse_points_csv(&text, points_path)?;
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    let header_idx = lines
        .iter()
        .position(|l| !l.trim().is_empty() && !l.trim().starts_with('#'));
    let Some(header_idx) = header_idx else {
        return Err(CalibrationError::Csv(Box::new(CsvProblem {
            path: points_path.to_path_buf(),
            line: 1,
            column: "header".to_string(),
            expected: "a header row".to_string(),
            found: "none".to_string(),
        })));
    };
    let names: Vec<String> = lines
        .get(header_idx)
        .map(|h| {
            h.split(',')
                .map(|s| s.trim().to_ascii_lowercase())
                .collect()
        })
        .unwrap_or_default();
    let mut profile_col = names.iter().position(|n| n == "profile");
    let needs_profile = candidates.iter().any(|c| c.profile.is_some());
    if profile_col.is_none() && needs_profile {
        // Add the column: header gets `,profile`, data lines an empty field
        // (padded to the header width first).
        let width = names.len();
        for (i, line) in lines.iter_mut().enumerate().skip(header_idx) {
            let t = line.trim();
            if t.is_empty() || t.starts_with('#') {
                continue;
            }
            if i == header_idx {
                line.push_str(",profile");
            } else {
                let have = t.split(',').count();
                let pad = ",".repeat(width.saturating_sub(have) + 1);
                *line = format!("{t}{pad}");
            }
        }
        profile_col = Some(width);
    }
    let width = names.len() + usize::from(profile_col == Some(names.len()));
    for c in &candidates {
        let mut fields = vec![String::new(); width];
        if let Some(f) = fields.get_mut(0) {
            *f = fmt_num(c.hz);
        }
        if let Some(f) = fields.get_mut(1) {
            *f = fmt_num(c.steps);
        }
        if let (Some(pc), Some(p)) = (profile_col, &c.profile) {
            if let Some(f) = fields.get_mut(pc) {
                f.clone_from(p);
            }
        }
        lines.push(fields.join(","));
    }
    let mut out = lines.join("\n");
    out.push('\n');
    // The result must read back; refuse to write anything that does not.
    parse_points_csv(&out, points_path)?;
    write_atomic(points_path, &out)?;
    fs::remove_file(&cand_path).map_err(|source| CalibrationError::Write {
        path: cand_path.clone(),
        source,
    })?;
    if let Some(dir) = cand_path.parent().filter(|d| !d.as_os_str().is_empty()) {
        if let Ok(d) = File::open(dir) {
            let _ = d.sync_all();
        }
    }
    Ok(candidates.len())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<Vec<Point>, CalibrationError> {
        parse_points_csv(text, Path::new("pts.csv"))
    }

    #[test]
    fn reads_header_comments_and_optional_columns() {
        let pts = parse(
            "# measured 2026-11-03\nhz,steps,profile,weight\n7000000,4000\n\n7100000,3900,wet,2\n",
        )
        .unwrap();
        assert_eq!(pts.len(), 2);
        assert_eq!(pts[0], Point::new(7e6, 4000.0));
        assert_eq!(pts[1].profile.as_deref(), Some("wet"));
        assert_eq!(pts[1].weight, 2.0);
    }

    #[test]
    fn errors_name_file_line_column_expected_and_found() {
        let msg = parse("hz,steps\n7000000,4000\n7100000,lots\n")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("pts.csv:3"), "{msg}");
        assert!(msg.contains("column 2 (steps)"), "{msg}");
        assert!(msg.contains("lots"), "{msg}");
        assert!(msg.contains("expected"), "{msg}");

        let msg = parse("7000000,4000\n").unwrap_err().to_string();
        assert!(msg.contains("header"), "{msg}");

        let msg = parse("hz,steps,colour\n").unwrap_err().to_string();
        assert!(msg.contains("column 3") && msg.contains("colour"), "{msg}");

        let msg = parse("hz,steps\n7e6x,3\n").unwrap_err().to_string();
        assert!(
            msg.contains("column 1 (hz)") && msg.contains("7e6x"),
            "{msg}"
        );

        let msg = parse("hz,steps\n5,3,4\n").unwrap_err().to_string();
        assert!(msg.contains(":2") && msg.contains("3 columns"), "{msg}");

        let msg = parse("hz,steps,weight\n5,3,0\n").unwrap_err().to_string();
        assert!(msg.contains("weight"), "{msg}");

        let msg = parse("hz,steps,profile\n5,3,we t\n")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("we t"), "{msg}");

        assert!(parse("").is_err());
        assert!(parse("hz,steps\nNaN,3\n").is_err());
        assert!(parse("hz,steps\n5,inf\n").is_err());
    }

    #[test]
    fn candidates_file_sits_beside_points() {
        assert_eq!(
            candidates_path(Path::new("/s/loop.csv")),
            PathBuf::from("/s/loop.candidates.csv")
        );
        assert_eq!(
            candidates_path(Path::new("loop")),
            PathBuf::from("loop.candidates.csv")
        );
    }
}
