//! `tuneward bench-follow` through the real binary: the promised columns,
//! the naive policy moving more than ours, and a located error for a
//! station that does not describe its loop.

use std::path::Path;
use std::process::Command;

fn tuneward(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_tuneward"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .unwrap()
}

#[test]
fn json_report_has_the_promised_columns_and_the_naive_policy_moves_more() {
    let out = tuneward(&["bench-follow", "--evenings", "2", "--hours", "1", "--json"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["evenings"], 2);
    let rows = v["rows"].as_array().unwrap();
    let policies: Vec<&str> = rows.iter().map(|r| r["policy"].as_str().unwrap()).collect();
    assert_eq!(policies, ["follow", "naive", "optimum"]);
    for r in rows {
        for column in [
            "moves",
            "travel_steps",
            "transmit_s",
            "inhibited_s",
            "swr_1_5_pct",
            "swr_2_pct",
            "over_1_5_s",
            "worst_swr",
        ] {
            assert!(r.get(column).is_some(), "{column} missing in {r}");
        }
        let pct = r["swr_1_5_pct"].as_f64().unwrap();
        assert!((0.0..=100.0).contains(&pct), "{r}");
        assert!(r["swr_2_pct"].as_f64().unwrap() >= pct);
    }
    let moves = |i: usize| rows[i]["moves"].as_u64().unwrap();
    assert!(
        moves(1) > moves(0),
        "naive {} vs ours {}",
        moves(1),
        moves(0)
    );
    assert!(
        moves(2) <= moves(0),
        "optimum {} vs ours {}",
        moves(2),
        moves(0)
    );
    assert!(moves(2) > 0);
}

#[test]
fn table_names_its_columns_and_the_target() {
    let out = tuneward(&["bench-follow", "--evenings", "1", "--hours", "0.5"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    let header = text.lines().nth(1).unwrap();
    for column in ["policy", "moves", "travel_steps", "swr<=1.5", "swr<=2"] {
        assert!(header.contains(column), "{header}");
    }
    for policy in ["follow", "naive", "optimum"] {
        assert!(text.lines().any(|l| l.starts_with(policy)), "{text}");
    }
    assert!(text.contains("target: 100% with at most 1.3x"), "{text}");
    // The dwells that fell short are named (or their absence said).
    assert!(
        text.contains("follow: no dwell fell short of 1.5:1 on the air")
            || text.contains("follow fell short of 1.5:1 on the air in"),
        "{text}"
    );
}

#[test]
fn a_station_without_a_described_loop_is_refused_with_the_key() {
    // The example config with its [antenna] keys taken out.
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(root.join("config/example.toml")).unwrap();
    let kept: Vec<&str> = text
        .lines()
        .filter(|l| {
            !["loop_diameter_m", "conductor_diameter_m"]
                .iter()
                .any(|k| l.starts_with(k))
        })
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let station = dir.path().join("no-loop.toml");
    std::fs::write(&station, kept.join("\n")).unwrap();
    let out = tuneward(&[
        "bench-follow",
        "--config",
        station.to_str().unwrap(),
        "--hours",
        "0.1",
    ]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("no-loop.toml"), "{err}");
    assert!(err.contains("antenna"), "{err}");
    assert!(err.contains("expected") && err.contains("found"), "{err}");
}

/// Issue 10's targets hold on the stations we ship, not only on the
/// quality station: on the judging seeds (nothing was tuned on them), every
/// family, the example and the demo configs each keep the loop within
/// 1.5:1 all the time on the air at the transmit frequency, with at most
/// 1.3 times the offline optimum's moves, no motion while any source says
/// the rig transmits and no leg outside an inhibit window. The SWR comes
/// from the matched-resonator formula (`antenna::swr_at`, which names its
/// source); the 1.3 bound is the issue's own.
#[test]
fn the_shipped_stations_stay_within_1_5_to_1_on_the_judging_seeds() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    for config in ["config/example.toml", "config/demo.toml"] {
        let out = tuneward(&[
            "bench-follow",
            "--config",
            root.join(config).to_str().unwrap(),
            "--family",
            "all",
            "--first-seed",
            "101",
            "--json",
        ]);
        assert!(
            out.status.success(),
            "{config}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        let rows = v["rows"].as_array().unwrap();
        let row = |name: &str| {
            rows.iter()
                .find(|r| r["policy"] == name)
                .unwrap_or_else(|| panic!("{config}: no {name} row in {v}"))
        };
        let (ours, optimum) = (row("follow"), row("optimum"));
        assert_eq!(
            ours["swr_1_5_pct"].as_f64(),
            Some(100.0),
            "{config}: {ours}"
        );
        assert_eq!(
            v["short_dwells"].as_array().map(Vec::len),
            Some(0),
            "{config}: {v}"
        );
        assert_eq!(ours["violations"], 0, "{config}: {ours}");
        assert_eq!(
            ours["moved_keyed_s"].as_f64(),
            Some(0.0),
            "{config}: {ours}"
        );
        let moves = |r: &serde_json::Value| r["moves"].as_f64().unwrap();
        assert!(
            moves(ours) <= 1.3 * moves(optimum),
            "{config}: {} moves against the optimum's {}",
            moves(ours),
            moves(optimum)
        );
        assert_eq!(v["families"].as_array().map(Vec::len), Some(4), "{config}");
    }
}

/// The rig family is how the reports travel, not what the operator did:
/// the bundled quality station measured with its rig speaking the block
/// family (each report an answer to a read the writer puts before it)
/// scores as with its own binary-family rig. The block family reports in
/// 10 Hz units (its published table, recalled), the binary one in 1 Hz,
/// so a report may be up to 9 Hz lower: a target a step or so apart, and
/// for the naive policy (a move per differing report) two reports that
/// became equal. What our policy decides and how well the loop is tuned
/// are the same.
#[test]
fn the_block_family_scores_as_the_binary_family_on_the_same_evenings() {
    let dir = tempfile::tempdir().unwrap();
    let here = Path::new(env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(here.join("fixtures/quality/station.toml")).unwrap();
    assert!(
        text.contains("protocol = \"binary-bcd\""),
        "the fixture changed"
    );
    let block = dir.path().join("station.toml");
    std::fs::write(
        &block,
        text.replace("protocol = \"binary-bcd\"", "protocol = \"block-5\""),
    )
    .unwrap();
    let run = |config: &Path| -> serde_json::Value {
        let out = tuneward(&[
            "bench-follow",
            "--evenings",
            "1",
            "--hours",
            "1",
            "--json",
            "--config",
            config.to_str().unwrap(),
        ]);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        serde_json::from_slice(&out.stdout).unwrap()
    };
    let binary = run(&here.join("fixtures/quality/station.toml"));
    let blocks = run(&block);
    let (b, k) = (&binary["rows"][0], &blocks["rows"][0]);
    assert_eq!(k["policy"], "follow");
    for same in [
        "moves",
        "swr_1_5_pct",
        "swr_2_pct",
        "violations",
        "jump_calls",
        "sweep_calls",
    ] {
        assert_eq!(k[same], b[same], "{same}: block {k}\nbinary {b}");
    }
    assert!(k["moves"].as_u64().unwrap() > 0, "{k}");
    let travel = |r: &serde_json::Value| r["travel_steps"].as_f64().unwrap();
    assert!(
        (travel(k) - travel(b)).abs() <= travel(b) * 1e-4,
        "travel: block {k}\nbinary {b}"
    );
    let naive = |r: &serde_json::Value| r["rows"][1]["moves"].as_f64().unwrap();
    assert!((naive(&blocks) - naive(&binary)).abs() <= naive(&binary) * 0.01);
    // The optimum knows the evening, not the wire: identical.
    assert_eq!(blocks["rows"][2], binary["rows"][2]);
}

#[test]
fn the_split_and_programs_families_are_chosen_by_name_and_judged() {
    let out = tuneward(&[
        "bench-follow",
        "--family",
        "split",
        "--family",
        "programs",
        "--evenings",
        "1",
        "--hours",
        "1",
        "--json",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let families: Vec<&str> = v["families"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["family"].as_str().unwrap())
        .collect();
    assert_eq!(families, ["split", "programs"]);
    for f in v["families"].as_array().unwrap() {
        let follow = &f["rows"][0];
        assert_eq!(follow["policy"], "follow");
        // Nothing moved while the rig was on the air or a program's
        // transmit command was in force; nothing above 1.5:1 on the air.
        assert_eq!(follow["moved_keyed_s"], 0.0, "{f}");
        assert_eq!(follow["violations"], 0, "{f}");
        assert_eq!(follow["over_1_5_s"], 0.0, "{f}");
    }
    let bad = tuneward(&["bench-follow", "--family", "pileup"]);
    assert!(!bad.status.success());
    let err = String::from_utf8_lossy(&bad.stderr);
    assert!(
        err.contains("expected classic, spotting, split, programs or all, found \"pileup\""),
        "{err}"
    );
}
