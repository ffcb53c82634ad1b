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
    append_candidate(&cands, &Point::new(7_150_000.0, 7296.0), None).unwrap();
    // A noise-peak candidate says how it was found, on a comment line.
    append_candidate(
        &cands,
        &Point::new(7_150_000.0, 7282.0).with_profile(Some("wet")),
        Some("noise peak: half-width 3.1 steps\nhidden"),
    )
    .unwrap();
    let text = std::fs::read_to_string(&cands).unwrap();
    assert!(
        text.contains("# noise peak: half-width 3.1 steps hidden\n7150000,7282,wet\n"),
        "{text}"
    );

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
    append_candidate(
        &cands,
        &Point::new(7.1e6, 3800.0).with_profile(Some("wet")),
        None,
    )
    .unwrap();
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

/// The typo'd point set: 14.2 MHz typed as 2448 for 24448 (a dropped
/// digit), in a copy of the invented station beside its config.
fn typo_station(dir: &Path) -> (PathBuf, PathBuf) {
    let text = std::fs::read_to_string(root().join("fixtures/calibration/typo.csv")).unwrap();
    assert!(text.contains("\n14200000,24448,\n"));
    let points = dir.join("typo.csv");
    std::fs::write(
        &points,
        text.replace("\n14200000,24448,\n", "\n14200000,2448,\n"),
    )
    .unwrap();
    let config = dir.join("station.toml");
    std::fs::copy(
        root().join("fixtures/calibration/typo-station.toml"),
        &config,
    )
    .unwrap();
    (points, config)
}

#[test]
fn a_typed_wrong_point_is_named_and_a_clean_set_names_none() {
    let dir = tempfile::tempdir().unwrap();
    let (points, config) = typo_station(dir.path());
    let o = run(&[
        points.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let out = stdout(&o);
    let named: Vec<&str> = out
        .lines()
        .filter(|l| l.starts_with("likely wrong:"))
        .collect();
    assert_eq!(named.len(), 1, "{out}");
    assert!(
        named[0].contains("measured 2448 steps at 14.200 MHz: expected about 24 450"),
        "{out}"
    );
    assert!(named[0].contains("a typing error (for 24 448)?"), "{out}");
    // The other points' warnings are one line, not one each.
    let warnings = out.lines().filter(|l| l.starts_with("warning:")).count();
    assert!(warnings <= 2, "{out}");
    assert!(out.contains("10 more points over 25%"), "{out}");

    let v = json(&[points.to_str().unwrap(), "--json"]);
    let o = &v["outlier"];
    assert_eq!(o["hz"], 14_200_000.0);
    assert_eq!(o["measured"], 2448.0);
    assert_eq!(o["likely_typed_for"], 24448);
    assert_eq!(
        v["points"][o["index"].as_u64().unwrap() as usize]["steps"],
        2448.0
    );
    // Independently of the rule: the other points alone predict 14.2 MHz
    // within a few steps of the true reading.
    let expected = o["expected"].as_f64().unwrap();
    assert!((expected - 24448.0).abs() < 10.0, "{expected}");

    // The same station with the reading right: nobody is named.
    let clean = root().join("fixtures/calibration/typo.csv");
    let out = stdout(&run(&[clean.to_str().unwrap()]));
    assert!(!out.contains("likely wrong"), "{out}");
    let v = json(&[clean.to_str().unwrap(), "--json"]);
    assert!(v.get("outlier").is_none(), "{v}");
}

fn svg_texts(svg: &str) -> Vec<String> {
    let doc = roxmltree::Document::parse(svg).expect("the plot is well-formed XML");
    doc.descendants()
        .filter(|n| n.has_tag_name("text"))
        .map(|n| n.text().unwrap_or("").trim().to_string())
        .collect()
}

#[test]
fn the_plot_shows_the_station() {
    let dir = tempfile::tempdir().unwrap();
    let svg = dir.path().join("fit.svg");
    let points = root().join("fixtures/calibration/typo.csv");
    let config = root().join("fixtures/calibration/typo-station.toml");
    let o = run(&[
        points.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
        "--plot",
        svg.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = std::fs::read_to_string(&svg).unwrap();
    let texts = svg_texts(&text);
    let has = |want: &str| texts.iter().any(|t| t.contains(want));
    for want in [
        "band 40m",
        "band 20m",
        "band 15m",
        "travel limit min 0",
        "travel limit max 120 000",
        "travel limits",
        "base: measured and fitted",
        "profile wet",
        "1.5:1 half-window",
        "residual (Hz)",
        "residual (steps)",
        "100 000",
    ] {
        assert!(has(want), "{want} not among {texts:?}");
    }
    let title = texts
        .iter()
        .find(|t| t.starts_with("calibration:"))
        .expect("a title");
    assert!(title.contains("physics"), "{title}");
    assert!(title.contains("leave-one-out error 1.73 steps"), "{title}");
    // The tolerance band is a filled polygon of its own colour.
    let doc = roxmltree::Document::parse(&text).unwrap();
    assert!(
        doc.descendants().any(|n| n.has_tag_name("polygon")
            && n.attribute("fill") == Some("#D6EED6")
            && n.attribute("points")
                .is_some_and(|p| p.split(' ').count() > 100)),
        "no tolerance band polygon"
    );
    // Whole-number axes print whole numbers.
    assert!(!texts.iter().any(|t| t.ends_with("000.0")), "{texts:?}");
    // Without --config: no station drawn.
    let bare = dir.path().join("bare.svg");
    let o = run(&[points.to_str().unwrap(), "--plot", bare.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let bare_texts = svg_texts(&std::fs::read_to_string(&bare).unwrap());
    assert!(
        !bare_texts.iter().any(|t| t.contains("band ")),
        "{bare_texts:?}"
    );
    assert!(!bare_texts.iter().any(|t| t.contains("half-window")));

    // Rendered (resvg, pure Rust; text needs fonts and is left out): the
    // band shading is there as pixels of its colour, and the bare plot
    // has none.
    let count = |svg: &str, rgb: [u8; 3]| -> usize {
        let tree = resvg::usvg::Tree::from_str(svg, &resvg::usvg::Options::default()).unwrap();
        let size = tree.size().to_int_size();
        let mut pixmap = resvg::tiny_skia::Pixmap::new(size.width(), size.height()).unwrap();
        resvg::render(
            &tree,
            resvg::tiny_skia::Transform::default(),
            &mut pixmap.as_mut(),
        );
        pixmap
            .pixels()
            .iter()
            .filter(|p| {
                let c = p.demultiply();
                [c.red(), c.green(), c.blue()] == rgb
            })
            .count()
    };
    let band_fill = [226, 236, 246];
    assert!(count(&text, band_fill) > 10_000, "band shading");
    assert_eq!(
        count(&std::fs::read_to_string(&bare).unwrap(), band_fill),
        0
    );
}

#[test]
fn fit_with_config_uses_the_stations_model_and_says_how_it_gets_there() {
    let dir = tempfile::tempdir().unwrap();
    let points = copy_points(dir.path());
    let config = dir.path().join("station.toml");
    let text = std::fs::read_to_string(root().join("fixtures/calibration/station.toml")).unwrap();
    std::fs::write(
        &config,
        text.replace("model = \"physics\"", "model = \"interpolate\""),
    )
    .unwrap();

    let o = run(&[
        points.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let out = stdout(&o);
    assert!(out.starts_with("model: interpolate"), "{out}");
    assert!(
        out.contains("station: fitted with interpolate, the model `run` uses"),
        "{out}"
    );
    assert!(out.contains("`[calibration] file = "), "{out}");
    assert!(out.contains("is this points file"), "{out}");
    assert!(out.contains("`--accept`"), "{out}");

    let o = run(&[
        points.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
        "--model",
        "physics",
    ]);
    let out = stdout(&o);
    assert!(out.starts_with("model: physics"), "{out}");
    assert!(
        out.contains("fitted with physics as asked; `run` uses interpolate"),
        "{out}"
    );
    // Without a config nothing is said about a station; the model is auto.
    let out = stdout(&run(&[points.to_str().unwrap()]));
    assert!(!out.contains("station:"), "{out}");
    assert!(out.contains("why:   auto:"), "{out}");

    // Another points file than the station's: said so, with what to do.
    let other = dir.path().join("other.csv");
    std::fs::copy(&points, &other).unwrap();
    let v = json(&[
        other.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
        "--json",
    ]);
    let lines: Vec<&str> = v["station"]
        .as_array()
        .unwrap()
        .iter()
        .map(|l| l.as_str().unwrap())
        .collect();
    assert!(
        lines
            .iter()
            .any(|l| l.contains("not from") && l.contains("other.csv")),
        "{lines:?}"
    );
}

#[test]
fn a_closed_pipe_ends_quietly() {
    // The reading end is closed before tuneward writes: its write fails
    // with a broken pipe every time.
    let (reader, writer) = std::io::pipe().unwrap();
    drop(reader);
    let o = Command::new(env!("CARGO_BIN_EXE_tuneward"))
        .arg("fit")
        .arg(root().join("fixtures/calibration/loop.csv"))
        .stdout(writer)
        .stderr(std::process::Stdio::piped())
        .output()
        .unwrap();
    assert_eq!(stderr(&o), "");
    assert_eq!(o.status.code(), Some(0));
}
