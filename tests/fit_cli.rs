//! `tuneward fit` as a user runs it: the real binary on fixture files.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use tuneward::calibrate::{append_candidate, candidates_path, read_points_csv, Point};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn run(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_tuneward"))
        .arg("fit")
        .args(args)
        .output()
        .expect("run tuneward")
}

fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn json(args: &[&str]) -> serde_json::Value {
    let o = run(args);
    assert!(o.status.success(), "{}", stderr(&o));
    serde_json::from_slice(&o.stdout).expect("valid JSON")
}

fn digits(estimate: f64, certified: f64) -> f64 {
    let e = ((estimate - certified) / certified).abs();
    if e == 0.0 {
        16.0
    } else {
        -e.log10()
    }
}

/// NIST StRD Norris through the binary: certified B0, B1, residual SD and
/// R² (fixture header) to at least 9 digits, and the exact JSON shape.
#[test]
fn json_contract_and_nist_norris() {
    let path = root().join("fixtures/nist/norris.csv");
    let v = json(&[
        path.to_str().unwrap(),
        "--model",
        "poly",
        "--degree",
        "1",
        "--json",
    ]);
    let obj = v.as_object().unwrap();
    let mut keys: Vec<&str> = obj.keys().map(String::as_str).collect();
    keys.sort();
    assert_eq!(
        keys,
        [
            "coefficients",
            "model",
            "points",
            "r_squared",
            "residual_sd"
        ]
    );
    assert_eq!(v["model"], "poly");
    let c: Vec<f64> = v["coefficients"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect();
    assert!(digits(c[0], -0.262323073774029) >= 9.0, "{c:?}");
    assert!(digits(c[1], 1.00211681802045) >= 9.0, "{c:?}");
    assert!(digits(v["residual_sd"].as_f64().unwrap(), 0.884796396144373) >= 9.0);
    assert!(digits(v["r_squared"].as_f64().unwrap(), 0.999993745883712) >= 9.0);
    let points = v["points"].as_array().unwrap();
    assert_eq!(points.len(), 36);
    for p in points {
        let mut k: Vec<&str> = p.as_object().unwrap().keys().map(String::as_str).collect();
        k.sort();
        assert_eq!(
            k,
            ["fitted", "hz", "residual_hz", "residual_steps", "steps"]
        );
        let (steps, fitted, rs, rh) = (
            p["steps"].as_f64().unwrap(),
            p["fitted"].as_f64().unwrap(),
            p["residual_steps"].as_f64().unwrap(),
            p["residual_hz"].as_f64().unwrap(),
        );
        assert!((steps - fitted - rs).abs() < 1e-9);
        // Through the local slope, which for a line is B1 everywhere.
        assert!((rh * c[1] - rs).abs() < 1e-9);
    }
}

/// NIST StRD Pontius through the binary: raw-unit coefficients of x^i.
#[test]
fn nist_pontius_through_binary() {
    let path = root().join("fixtures/nist/pontius.csv");
    let v = json(&[
        path.to_str().unwrap(),
        "--model",
        "poly",
        "--degree",
        "2",
        "--json",
    ]);
    let c: Vec<f64> = v["coefficients"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect();
    for (got, want) in c.iter().zip([
        0.673565789473684E-03,
        0.732059160401003E-06,
        -0.316081871345029E-14,
    ]) {
        assert!(digits(*got, want) >= 9.0, "{got} vs {want}");
    }
}

/// NIST StRD Wampler5 (degree 5, huge residuals) through the binary:
/// certified coefficients all 1 (dataset page, fixture header).
#[test]
fn nist_wampler5_through_binary() {
    let path = root().join("fixtures/nist/wampler5.csv");
    let v = json(&[
        path.to_str().unwrap(),
        "--model",
        "poly",
        "--degree",
        "5",
        "--json",
    ]);
    for c in v["coefficients"].as_array().unwrap() {
        assert!(digits(c.as_f64().unwrap(), 1.0) >= 9.0, "{c}");
    }
    assert!(digits(v["residual_sd"].as_f64().unwrap(), 23601450.2379268) >= 9.0);
}

#[test]
fn text_report_with_config_bands_profiles_and_plot() {
    let dir = tempfile::tempdir().unwrap();
    let svg = dir.path().join("fit.svg");
    let o = run(&[
        root()
            .join("fixtures/calibration/loop.csv")
            .to_str()
            .unwrap(),
        "--config",
        root()
            .join("fixtures/calibration/station.toml")
            .to_str()
            .unwrap(),
        "--plot",
        svg.to_str().unwrap(),
    ]);
    let out = stdout(&o);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(out.contains("model: physics"), "{out}");
    assert!(out.contains("leave-one-out"), "{out}");
    assert!(out.contains("band 40m: 4 point(s)"), "{out}");
    assert!(out.contains("band 30m: 3 point(s)"), "{out}");
    // 17m has no points: a warning names it.
    assert!(out.contains("warning: 17m: only 0 point(s)"), "{out}");
    assert!(out.contains("profile wet: base -1"), "{out}");
    assert!(out.contains("of 1.5 BW"), "{out}");
    let plot = std::fs::read_to_string(&svg).unwrap();
    assert!(plot.starts_with("<svg"), "{}", &plot[..60.min(plot.len())]);
    for label in [
        "frequency (MHz)",
        "motor position (steps)",
        "residual (steps)",
    ] {
        assert!(plot.contains(label), "{label}");
    }
}

#[test]
fn bad_input_is_a_located_error_not_a_panic() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("bad.csv");
    std::fs::write(&bad, "hz,steps\n7000000,4000\n7100000,about 3900\n").unwrap();
    let o = run(&[bad.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    let err = stderr(&o);
    assert!(err.contains("bad.csv:3"), "{err}");
    assert!(err.contains("column 2 (steps)"), "{err}");
    assert!(err.contains("about 3900"), "{err}");
    assert!(!err.contains("panicked"), "{err}");

    let o = run(&[dir.path().join("missing.csv").to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("missing.csv"));

    // Too few points for the degree asked.
    std::fs::write(&bad, "hz,steps\n7000000,4000\n7100000,3900\n").unwrap();
    let o = run(&[bad.to_str().unwrap(), "--model", "poly", "--degree", "3"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("needs at least 4"), "{}", stderr(&o));

    // Binary junk.
    std::fs::write(&bad, [0xff, 0xfe, 0x00, 0x41]).unwrap();
    let o = run(&[bad.to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(2));
    assert!(!stderr(&o).contains("panicked"));
}

fn copy_points(dir: &Path) -> PathBuf {
    let p = dir.join("loop.csv");
    std::fs::copy(root().join("fixtures/calibration/loop.csv"), &p).unwrap();
    p
}

#[test]
fn candidates_are_shown_marked_and_accepted_atomically() {
    let dir = tempfile::tempdir().unwrap();
    let points = copy_points(dir.path());
    let before = read_points_csv(&points).unwrap();
    let cands = candidates_path(&points);
    assert_eq!(cands, dir.path().join("loop.candidates.csv"));
    append_candidate(&cands, &Point::new(7_150_000.0, 7296.0)).unwrap();
    append_candidate(
        &cands,
        &Point::new(7_150_000.0, 7282.0).with_profile(Some("wet")),
    )
    .unwrap();

    let o = run(&[points.to_str().unwrap()]);
    let out = stdout(&o);
    assert!(o.status.success(), "{}", stderr(&o));
    let marked: Vec<&str> = out.lines().filter(|l| l.starts_with('*')).collect();
    assert_eq!(marked.len(), 1, "{out}");
    assert!(marked[0].contains("7150000"), "{out}");
    assert!(
        out.contains("1 candidate point(s) for named profiles"),
        "{out}"
    );
    // Not part of the fit until accepted.
    assert_eq!(read_points_csv(&points).unwrap(), before);

    let o = run(&[points.to_str().unwrap(), "--accept"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stdout(&o).contains("accepted 2 candidate point(s)"));
    let after = read_points_csv(&points).unwrap();
    assert_eq!(after.len(), before.len() + 2);
    assert_eq!(after[after.len() - 2], Point::new(7_150_000.0, 7296.0));
    assert_eq!(after[after.len() - 1].profile.as_deref(), Some("wet"));
    assert!(!cands.exists());
    // Comments survive; no temporary files are left behind.
    let text = std::fs::read_to_string(&points).unwrap();
    assert!(text.starts_with("# Demo point set"));
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(names, vec!["loop.csv".to_string()]);
}

#[test]
fn accept_adds_a_profile_column_when_needed() {
    let dir = tempfile::tempdir().unwrap();
    let points = dir.path().join("p.csv");
    std::fs::write(&points, "hz,steps\n7000000,4000\n7300000,3600\n").unwrap();
    let cands = candidates_path(&points);
    append_candidate(&cands, &Point::new(7.1e6, 3800.0).with_profile(Some("wet"))).unwrap();
    tuneward::calibrate::accept_candidates(&points).unwrap();
    let text = std::fs::read_to_string(&points).unwrap();
    assert_eq!(
        text,
        "hz,steps,profile\n7000000,4000,\n7300000,3600,\n7100000,3800,wet\n"
    );
}

#[test]
fn help_reads_like_documentation() {
    let o = run(&["--help"]);
    let out = stdout(&o);
    for word in [
        "--model",
        "--degree",
        "--json",
        "--plot",
        "--accept",
        "candidates",
    ] {
        assert!(out.contains(word), "{word}: {out}");
    }
}
