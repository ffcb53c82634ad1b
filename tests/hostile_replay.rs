//! Hostile input through the real binary: captures with RF-style corruption
//! (bursts of 0xFF and 0x00, bit flips, doubled preambles, truncated frames,
//! absurd lengths, non-ASCII in the text family) and malformed capture lines
//! up to a 10 MB line without a newline. The replay keeps going, counts what
//! it rejected by reason, and moves only on frequencies the rig really
//! reported.
//!
//! The fixtures are generated here, deterministically, into a temporary
//! folder: an invented evening written by `scenario::Script`, corrupted by a
//! seeded generator.

use std::collections::BTreeSet;
use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::time::Duration;

use serde_json::Value;
use tuneward::capture::CaptureWriter;
use tuneward::rig::{Dialect, Direction, Family};
use tuneward::scenario::{Happening, Scenario, Script};
use tuneward::station::DialectWire;

const RIG: u8 = 0x94;

/// The demo station, speaking `protocol`.
fn config(dir: &Path, protocol: &str) -> PathBuf {
    let demo =
        fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo.toml")).unwrap();
    let text = demo.replace(
        "protocol = \"binary-bcd\"",
        &format!("protocol = \"{protocol}\""),
    );
    assert!(text.contains(protocol));
    let path = dir.join(format!("{protocol}.toml"));
    fs::write(&path, text).unwrap();
    path
}

/// An invented half hour: dwells, overs, a sweep, band changes; the rig
/// repeats its frequency every second. No noise: the corruption is added
/// separately so the clean run can be compared.
fn evening() -> Scenario {
    let sec = Duration::from_secs;
    let ms = Duration::from_millis;
    let s = &mut Script::new(11, 7_074_000);
    s.repeat_every(Some(sec(1)));
    s.wait(sec(20)).overs(3, sec(13), sec(17));
    s.sweep(7_130_000, 1_000, ms(50)).wait(sec(40));
    s.overs(2, sec(30), sec(20));
    s.jump(14_200_000).wait(sec(30)).overs(4, sec(8), sec(10));
    s.jump(10_120_000).wait(sec(60));
    s.sweep(10_135_000, 500, ms(40)).wait(sec(45));
    s.jump(7_074_000).wait(sec(90));
    s.clone().finish()
}

fn real_frequencies(sc: &Scenario) -> BTreeSet<u64> {
    sc.steps
        .iter()
        .filter_map(|(_, h)| match h {
            Happening::Report { hz } => Some(*hz),
            _ => None,
        })
        .collect()
}

type Chunks = Vec<(Duration, Direction, Vec<u8>)>;

/// The evening's chunks with corruption added between and around them.
/// Every real frame is still sent whole; corrupted copies and junk come
/// after it, at the same time.
fn corrupt(chunks: &Chunks, dialect: &Dialect, seed: u64) -> Chunks {
    let mut rng = fastrand::Rng::with_seed(seed);
    let text = dialect.family() == Family::Text;
    let mut out = Vec::new();
    for (t, dir, frame) in chunks {
        let mut frame_out = frame.clone();
        // A doubled preamble before a real frame (binary): the frame must
        // still decode.
        if !text && rng.u32(0..20) == 0 {
            frame_out.splice(0..0, [0xFE, 0xFE]);
        }
        out.push((*t, *dir, frame_out));
        if rng.u32(0..3) != 0 {
            continue;
        }
        let junk: Vec<u8> = match rng.u32(0..8) {
            0 => vec![0xFF; rng.usize(1..=64)],
            1 => vec![0x00; rng.usize(1..=64)],
            // A frame cut short.
            2 => frame.get(..rng.usize(1..frame.len())).unwrap().to_vec(),
            // An absurd length: a frame start and hundreds of bytes with no
            // end (binary), or a command with hundreds of digits (text).
            3 => {
                let mut v = frame.get(..2).unwrap().to_vec();
                let filler = if text { b'7' } else { 0x11 };
                v.extend(std::iter::repeat_n(filler, rng.usize(100..=600)));
                if text {
                    v.push(b';');
                }
                v
            }
            // A copy with one bit flipped outside the digits (where a flip
            // can be detected), or in the text family a non-ASCII byte.
            4 => {
                let mut v = frame.clone();
                let at = if text {
                    rng.usize(0..2)
                } else {
                    let head = rng.usize(0..5);
                    if rng.bool() {
                        head
                    } else {
                        v.len() - 1
                    }
                };
                v[at] ^= 1 << rng.u8(0..8);
                if text {
                    v[at] |= 0x80;
                }
                v
            }
            // Random bytes; in the text family all non-ASCII.
            5 => (0..rng.usize(1..=48))
                .map(|_| if text { rng.u8(0x80..) } else { rng.u8(..) })
                .collect(),
            // Doubled preambles with nothing after them (binary); doubled
            // command letters (text).
            6 => {
                if text {
                    let mut v = frame.get(..2).unwrap().to_vec();
                    v.extend_from_slice(frame);
                    v
                } else {
                    vec![0xFE; rng.usize(2..=8)]
                }
            }
            _ => {
                if text {
                    "Ää€;".as_bytes().to_vec()
                } else {
                    vec![0xFE, 0xFE, RIG, 0x00, 0xFD]
                }
            }
        };
        // Junk must end where a real frame can start again: in the text
        // family an unterminated stretch would swallow the next report.
        let mut junk = junk;
        if text && junk.last() != Some(&b';') {
            junk.push(b';');
        }
        out.push((*t, *dir, junk));
    }
    out
}

/// Writes chunks as capture lines of at most 48 bytes.
fn write_capture(path: &Path, chunks: &Chunks) {
    let f = fs::File::create(path).unwrap();
    let mut w = CaptureWriter::new(std::io::BufWriter::new(f));
    w.comment("invented evening with generated line corruption")
        .unwrap();
    for (t, dir, bytes) in chunks {
        for piece in bytes.chunks(48) {
            w.write_record(*t, *dir, piece).unwrap();
        }
    }
    w.flush().unwrap();
}

fn tuneward(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_tuneward"))
        .args(args)
        .output()
        .unwrap()
}

fn json_lines(out: &Output) -> Vec<Value> {
    String::from_utf8(out.stdout.clone())
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect()
}

fn replay_json(capture: &Path, config: &Path, extra: &[&str]) -> (Output, Vec<Value>) {
    let mut args = vec![
        "replay",
        capture.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
        "--json",
    ];
    args.extend_from_slice(extra);
    let out = tuneward(&args);
    let lines = if out.status.success() {
        json_lines(&out)
    } else {
        Vec::new()
    };
    (out, lines)
}

fn of_kind<'a>(lines: &'a [Value], kind: &str) -> Vec<&'a Value> {
    lines.iter().filter(|l| l["kind"] == kind).collect()
}

fn summary(lines: &[Value]) -> &Value {
    let last = lines.last().expect("a timeline");
    assert_eq!(last["kind"], "summary");
    last
}

fn final_rest(lines: &[Value]) -> i64 {
    of_kind(lines, "arrive")
        .last()
        .and_then(|a| a["steps"].as_i64())
        .expect("the tuner came to rest at least once")
}

/// The corrupted evening against the clean one, in one family.
fn hostile_family(protocol: &str, expect_reasons: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let config = config(dir.path(), protocol);
    let dialect = Dialect::builtin(protocol).unwrap();
    let sc = evening();
    let clean = sc.chunks(&DialectWire {
        dialect: &dialect,
        address: RIG,
    });
    let real = real_frequencies(&sc);

    let clean_path = dir.path().join("clean.cap");
    write_capture(&clean_path, &clean);
    let (out, clean_lines) = replay_json(&clean_path, &config, &[]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(summary(&clean_lines)["rejected"], 0);

    for seed in [1, 2, 3] {
        let hostile = corrupt(&clean, &dialect, seed);
        let path = dir.path().join(format!("hostile-{seed}.cap"));
        write_capture(&path, &hostile);
        let (out, lines) = replay_json(&path, &config, &[]);
        assert!(
            out.status.success(),
            "{protocol} seed {seed}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let s = summary(&lines);
        assert_eq!(s["violations"], 0);
        assert_eq!(s["bad_lines"], 0);
        // Kept going: reports kept being decoded to the end.
        // (A copy with a flipped address bit is still a report of a real
        // frequency, from another rig address: it counts as a frame.)
        assert!(
            s["frames"].as_u64() >= summary(&clean_lines)["frames"].as_u64(),
            "{protocol} seed {seed}: every real report still decoded"
        );
        // Rejects counted by reason, and the counts add up.
        let rejects = s["rejects"].as_object().unwrap();
        let total: u64 = rejects.values().map(|v| v.as_u64().unwrap()).sum();
        assert_eq!(total, s["rejected"].as_u64().unwrap());
        assert_eq!(total as usize, of_kind(&lines, "reject").len());
        for reason in expect_reasons {
            assert!(
                rejects.get(*reason).is_some_and(|n| n.as_u64() > Some(0)),
                "{protocol} seed {seed}: no `{reason}` reject in {rejects:?}"
            );
        }
        // Moves only on real reports.
        for entry in of_kind(&lines, "settle")
            .into_iter()
            .chain(of_kind(&lines, "move"))
        {
            let hz = entry["hz"].as_u64().unwrap();
            assert!(real.contains(&hz), "{protocol} seed {seed}: {entry}");
        }
        // The same decisions as without the corruption: every real frame
        // arrived whole and in time.
        let moves = |l: &[Value]| -> Vec<(Value, Value, Value)> {
            of_kind(l, "move")
                .into_iter()
                .map(|m| (m["t"].clone(), m["to"].clone(), m["hz"].clone()))
                .collect()
        };
        assert_eq!(moves(&lines), moves(&clean_lines), "{protocol} seed {seed}");
        assert_eq!(final_rest(&lines), final_rest(&clean_lines));
    }
}

#[test]
fn binary_family_survives_line_corruption() {
    hostile_family("binary-bcd", &["garbage", "overlong"]);
}

#[test]
fn text_family_survives_line_corruption_and_non_ascii() {
    hostile_family("text-semicolon", &["garbage", "overlong", "bad-length"]);
}

/// Lines of 32 bytes each from `bytes`, 10 ms apart.
fn bytes_as_rx_lines(path: &Path, bytes: &[u8]) {
    let chunks: Chunks = bytes
        .chunks(32)
        .enumerate()
        .map(|(i, c)| {
            (
                Duration::from_millis(10 * i as u64),
                Direction::Rx,
                c.to_vec(),
            )
        })
        .collect();
    write_capture(path, &chunks);
}

#[test]
fn a_megabyte_of_hostile_bytes_moves_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = fastrand::Rng::with_seed(7);
    const MB: usize = 1 << 20;
    let random: Vec<u8> = (0..MB).map(|_| rng.u8(..)).collect();
    let non_ascii: Vec<u8> = (0..MB).map(|_| rng.u8(0x80..)).collect();
    // Preambles and digits without an end: the longest a frame can stay open.
    let preambles: Vec<u8> = [0xFE, 0xFE, RIG, 0x00]
        .into_iter()
        .chain(std::iter::repeat(0x99))
        .take(MB)
        .collect();
    let digits: Vec<u8> = b"FA"
        .iter()
        .copied()
        .chain(std::iter::repeat(b'1'))
        .take(MB)
        .collect();
    let cases: [(&str, &[u8]); 6] = [
        ("random", &random),
        ("ff", &[0xFF; MB]),
        ("zero", &[0x00; MB]),
        ("non-ascii", &non_ascii),
        ("preambles", &preambles),
        ("digits", &digits),
    ];
    for protocol in ["binary-bcd", "text-semicolon"] {
        let config = config(dir.path(), protocol);
        for (name, bytes) in cases {
            let path = dir.path().join(format!("{name}.cap"));
            bytes_as_rx_lines(&path, bytes);
            let (out, lines) = replay_json(&path, &config, &[]);
            assert!(
                out.status.success(),
                "{protocol} {name}: {}",
                String::from_utf8_lossy(&out.stderr)
            );
            let s = summary(&lines);
            assert_eq!(s["moves"], 0, "{protocol} {name}");
            assert!(of_kind(&lines, "move").is_empty());
            assert_eq!(s["violations"], 0);
            // No byte is rejected twice; bytes that can never start a frame
            // are all rejected (none sits in a buffer at the end). Random
            // bytes may also hold well-formed frames that are not reports.
            let rejected_bytes: u64 = of_kind(&lines, "reject")
                .iter()
                .map(|r| r["bytes"].as_u64().unwrap())
                .sum();
            assert!(s["rejected"].as_u64().unwrap() > 0, "{protocol} {name}");
            assert!(rejected_bytes <= MB as u64, "{protocol} {name}");
            if name == "ff" || name == "zero" {
                assert_eq!(rejected_bytes, MB as u64, "{protocol} {name}");
            }
        }
    }
}

/// The clean evening with malformed capture lines spliced in, one of them a
/// 10 MB line without a newline until its end.
fn capture_with_bad_lines(path: &Path, clean: &Path) -> usize {
    let text = fs::read_to_string(clean).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    let mut f = std::io::BufWriter::new(fs::File::create(path).unwrap());
    let bad: [&[u8]; 8] = [
        b"12,5 rx FE",
        b"13 up FE",
        b"14 rx ZZ",
        b"15 rx",
        b"\xff\xfe rx 00",
        b"0.5 rx 00",
        b"  16 rx 00",
        b"17 rx FE  FD",
    ];
    let mut inserted = 0;
    for (i, l) in lines.iter().enumerate() {
        // Times before the first record would not be "decreasing".
        if i > 20 && i % 61 == 0 {
            if inserted == 3 {
                // The huge line: hex-like text, 10 MB, no newline until the end.
                let chunk = b"FE ".repeat(1 << 16);
                let mut written = 0;
                while written < 10_000_000 {
                    f.write_all(&chunk).unwrap();
                    written += chunk.len();
                }
                f.write_all(b"\n").unwrap();
            } else {
                f.write_all(bad[inserted % bad.len()]).unwrap();
                f.write_all(b"\n").unwrap();
            }
            inserted += 1;
        }
        writeln!(f, "{l}").unwrap();
    }
    f.flush().unwrap();
    inserted
}

#[test]
fn bad_capture_lines_stop_the_replay_unless_skipped() {
    let dir = tempfile::tempdir().unwrap();
    let config = config(dir.path(), "binary-bcd");
    let dialect = Dialect::builtin("binary-bcd").unwrap();
    let clean = evening().chunks(&DialectWire {
        dialect: &dialect,
        address: RIG,
    });
    let clean_path = dir.path().join("clean.cap");
    write_capture(&clean_path, &clean);
    let path = dir.path().join("bad-lines.cap");
    let inserted = capture_with_bad_lines(&path, &clean_path);
    assert!(inserted >= 8, "{inserted}");

    // By default the first bad line is an error naming file and line.
    let (out, _) = replay_json(&path, &config, &[]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("bad-lines.cap, line "), "{err}");
    assert!(err.contains("expected"), "{err}");

    let (clean_out, clean_lines) = replay_json(&clean_path, &config, &[]);
    assert!(clean_out.status.success());
    let (out, lines) = replay_json(&path, &config, &["--skip-bad-lines"]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{err}");
    let s = summary(&lines);
    assert_eq!(s["bad_lines"].as_u64(), Some(inserted as u64));
    // One warning a bad line, each naming the file, the line, what was
    // expected and what was found; the 10 MB line is described, not echoed.
    let warnings: Vec<&str> = err.lines().collect();
    assert_eq!(warnings.len(), inserted, "{err}");
    for w in &warnings {
        assert!(w.starts_with("tuneward: warning: "), "{w}");
        assert!(w.contains("bad-lines.cap, line "), "{w}");
        assert!(w.contains("expected ") && w.contains(", found "), "{w}");
        assert!(w.len() < 300, "a warning of {} bytes", w.len());
    }
    assert!(err.contains("found a line of 1"), "{err}");
    assert!(err.contains("no earlier than"), "{err}");
    // Past the bad lines the replay is the clean one.
    let decisions = |l: &[Value]| -> Vec<Value> {
        l.iter()
            .filter(|e| e["kind"] == "move" || e["kind"] == "hold")
            .cloned()
            .collect()
    };
    assert_eq!(decisions(&lines), decisions(&clean_lines));
    assert_eq!(s["frames"], summary(&clean_lines)["frames"]);
    assert_eq!(summary(&clean_lines)["bad_lines"], 0);
}
