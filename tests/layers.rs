//! The layer rule, checked on the source: the pure layers (follow core,
//! calibration, rig decoders and dialects, the tuner's line protocol,
//! simulator and ramp, the journal format, loop physics, the inhibit lines,
//! capture and timeline files, device paths) and the virtual-time replay
//! import no `tokio`, no `clap` and nothing of the layers above them
//! (`crate::config`, `crate::station`, `crate::service`). Settings reach them
//! as plain types from `src/station/settings.rs`.
//!
//! What is read: every `.rs` file under `src/follow/`, `src/calibrate/` and
//! `src/rig/` (pure decoding; the port IO is in `src/port/`, not read), and
//! the single files in [`PURE_FILES`].
//! Comments, literals and `#[cfg(test)]` items are left out (a unit test may
//! run on tokio's test clock).

use std::path::{Path, PathBuf};

/// Folders whose every source file is pure.
const PURE_DIRS: &[&str] = &["src/follow", "src/calibrate", "src/rig"];

/// Single pure files.
const PURE_FILES: &[&str] = &[
    "src/tuner/line.rs",
    "src/tuner/sim.rs",
    "src/tuner/ramp.rs",
    "src/journal.rs",
    "src/antenna.rs",
    "src/inhibit.rs",
    "src/sense.rs",
    "src/capture.rs",
    "src/timeline.rs",
    "src/devices.rs",
    "src/error.rs",
    "src/replay.rs",
    "src/sim/meters.rs",
    "src/control/protocol.rs",
];

/// The drivers (IO and timers: the live service, the recorder, the replay,
/// the port IO, the controller link and sim-tuner, the sim-rig driver) take
/// the parts the station layer made; they may not reach up to it.
const DRIVER_DIRS: &[&str] = &["src/port"];
const DRIVER_FILES: &[&str] = &[
    "src/control/mqtt.rs",
    "src/service.rs",
    "src/recorder.rs",
    "src/replay.rs",
    "src/sim/driver.rs",
    "src/tuner/client.rs",
    "src/tuner/server.rs",
    "src/control/socket.rs",
    "src/control/web.rs",
];

/// The serial library (used synchronously, to drive RTS/DTR and read the
/// sense line's status inputs) is allowed only where the inhibit's modem
/// line and the sense input are opened, and in the device helper both use.
const SERIAL_ALLOWED: &[&str] = &["src/inhibit.rs", "src/sense.rs", "src/devices.rs"];

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let entries = std::fs::read_dir(dir).unwrap_or_else(|e| panic!("{}: {e}", dir.display()));
    for entry in entries {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

fn pure_files() -> Vec<PathBuf> {
    let root = root();
    let mut files = Vec::new();
    for dir in PURE_DIRS {
        let mut found = Vec::new();
        rust_files(&root.join(dir), &mut found);
        assert!(
            !found.is_empty(),
            "{dir}: expected source files, found none"
        );
        files.extend(found);
    }
    for f in PURE_FILES {
        let p = root.join(f);
        assert!(p.is_file(), "{f}: listed as a pure file but not found");
        files.push(p);
    }
    files.sort();
    files
}

/// The code of a source file: comments and the contents of string and
/// character literals left out (a `"//"` in a literal hides nothing, a word
/// in a message counts for nothing), and every `#[cfg(test)]` item left
/// out.
fn code_of(text: &str) -> String {
    without_test_items(&without_comments(text))
}

/// Leaves out each `#[cfg(test)]` item: through its matching closing brace,
/// or through its `;` for an item without a body.
fn without_test_items(code: &str) -> String {
    let mut out = String::with_capacity(code.len());
    let mut rest = code;
    while let Some(i) = rest.find("#[cfg(test)]") {
        out.push_str(&rest[..i]);
        let item = &rest[i..];
        let brace = item.find('{');
        let semi = item.find(';');
        let end = match (brace, semi) {
            (Some(b), s) if s.is_none_or(|s| b < s) => {
                let mut depth = 0usize;
                item[b..]
                    .char_indices()
                    .find(|(_, c)| {
                        match c {
                            '{' => depth += 1,
                            '}' => depth -= 1,
                            _ => {}
                        }
                        depth == 0
                    })
                    .map_or(item.len(), |(j, _)| b + j + 1)
            }
            (_, Some(s)) => s + 1,
            _ => item.len(),
        };
        rest = &item[end..];
    }
    out.push_str(rest);
    out
}

fn without_comments(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    let mut chars = text.chars().peekable();
    let mut in_string = false;
    let mut block = 0usize;
    while let Some(c) = chars.next() {
        if block > 0 {
            if c == '*' && chars.peek() == Some(&'/') {
                chars.next();
                block -= 1;
            } else if c == '/' && chars.peek() == Some(&'*') {
                chars.next();
                block += 1;
            }
            continue;
        }
        if in_string {
            if c == '\\' {
                chars.next();
            } else if c == '"' {
                in_string = false;
                out.push(c);
            }
            continue;
        }
        match c {
            '"' => {
                in_string = true;
                out.push(c);
            }
            // A character literal ('"', '\\'', '/'); a lifetime stays.
            '\'' => {
                let mut ahead = chars.clone();
                match (ahead.next(), ahead.next()) {
                    (Some('\\'), _) => {
                        chars.next();
                        chars.next();
                        for n in chars.by_ref() {
                            if n == '\'' {
                                break;
                            }
                        }
                    }
                    (Some(_), Some('\'')) => {
                        chars.next();
                        chars.next();
                    }
                    _ => out.push(c),
                }
            }
            '/' if chars.peek() == Some(&'/') => {
                for n in chars.by_ref() {
                    if n == '\n' {
                        out.push('\n');
                        break;
                    }
                }
            }
            '/' if chars.peek() == Some(&'*') => {
                chars.next();
                block = 1;
            }
            _ => out.push(c),
        }
    }
    out
}

fn is_ident(c: char) -> bool {
    c.is_alphanumeric() || c == '_'
}

/// Whether `word` occurs in `code` as a whole identifier (`tokio` is not in
/// `tokio_serial`).
fn has_word(code: &str, word: &str) -> bool {
    code.match_indices(word).any(|(i, _)| {
        let before = code[..i].chars().next_back();
        let after = code[i + word.len()..].chars().next();
        !before.is_some_and(is_ident) && !after.is_some_and(is_ident)
    })
}

/// The upper layers `code` names through `crate::`: a path such as
/// `crate::config::Config` or a grouped `use crate::{follow, config::X}`.
fn upper_layers_named(code: &str) -> Vec<&'static str> {
    let squeezed: String = code.chars().filter(|c| !c.is_whitespace()).collect();
    let mut named = Vec::new();
    for layer in ["config", "station", "service"] {
        let direct = has_word(code, &format!("crate::{layer}"));
        let grouped = squeezed.match_indices("crate::{").any(|(i, _)| {
            let rest = &squeezed[i + "crate::{".len()..];
            // The group up to its closing brace (nested groups included).
            let mut depth = 1usize;
            let end = rest
                .char_indices()
                .find(|(_, c)| {
                    match c {
                        '{' => depth += 1,
                        '}' => depth -= 1,
                        _ => {}
                    }
                    depth == 0
                })
                .map_or(rest.len(), |(j, _)| j);
            let group = &rest[..end];
            group
                .split([',', '{'])
                .any(|part| part == layer || part.starts_with(&format!("{layer}::")))
        });
        if direct || grouped {
            named.push(layer);
        }
    }
    named
}

/// Everything wrong with one file's code, as messages.
fn violations(rel: &str, code: &str) -> Vec<String> {
    let mut found = Vec::new();
    if has_word(code, "tokio") {
        found.push(format!(
            "{rel}: expected no `tokio` in a pure layer, found it"
        ));
    }
    if has_word(code, "tokio_serial") && !SERIAL_ALLOWED.contains(&rel) {
        found.push(format!(
            "{rel}: expected no serial port library in a pure layer, found `tokio_serial`"
        ));
    }
    if has_word(code, "clap") {
        found.push(format!(
            "{rel}: expected no `clap` in a pure layer, found it"
        ));
    }
    for layer in upper_layers_named(code) {
        found.push(format!(
            "{rel}: expected no import of an upper layer, found `crate::{layer}`"
        ));
    }
    found
}

#[test]
fn pure_layers_import_no_runtime_cli_or_config() {
    let root = root();
    let mut all = Vec::new();
    for path in pure_files() {
        let text = std::fs::read_to_string(&path).unwrap();
        let rel = path
            .strip_prefix(&root)
            .unwrap()
            .to_string_lossy()
            .replace('\\', "/");
        all.extend(violations(&rel, &code_of(&text)));
    }
    assert!(all.is_empty(), "layer rule broken:\n{}", all.join("\n"));
}

/// The driver files, as paths relative to the crate.
fn driver_files() -> Vec<String> {
    let root = root();
    let mut files = Vec::new();
    for dir in DRIVER_DIRS {
        rust_files(&root.join(dir), &mut files);
    }
    assert!(
        !files.is_empty(),
        "src/port: expected source files, found none"
    );
    for f in DRIVER_FILES {
        let p = root.join(f);
        assert!(p.is_file(), "{f}: listed as a driver but not found");
        files.push(p);
    }
    let mut rel: Vec<String> = files
        .iter()
        .map(|p| {
            p.strip_prefix(&root)
                .unwrap()
                .to_string_lossy()
                .replace('\\', "/")
        })
        .collect();
    rel.sort();
    rel
}

/// What is wrong with one driver file's code: an import of the station
/// layer or the config (a driver takes their parts, it does not load them).
fn driver_violations(rel: &str, code: &str) -> Vec<String> {
    upper_layers_named(code)
        .into_iter()
        .filter(|layer| *layer != "service")
        .map(|layer| {
            format!("{rel}: expected a driver to take its parts from the station layer, found `crate::{layer}`")
        })
        .collect()
}

#[test]
fn drivers_do_not_reach_up_to_the_station_or_the_config() {
    let root = root();
    let mut all = Vec::new();
    for rel in driver_files() {
        let text = std::fs::read_to_string(root.join(&rel)).unwrap();
        all.extend(driver_violations(&rel, &code_of(&text)));
    }
    assert!(all.is_empty(), "layer rule broken:\n{}", all.join("\n"));
}

#[test]
fn the_driver_checker_sees_the_station_and_the_config_but_not_a_sibling_driver() {
    let v = driver_violations("src/x.rs", &code_of("use crate::station::Station;\n"));
    assert_eq!(v.len(), 1, "{v:?}");
    assert!(v[0].contains("crate::station"), "{v:?}");
    let v = driver_violations(
        "src/x.rs",
        &code_of("fn f() { let _ = crate::config::Config::load; }\n"),
    );
    assert_eq!(v.len(), 1, "{v:?}");
    assert!(v[0].contains("crate::config"), "{v:?}");
    let fine = "use crate::service::RigSource;\n// crate::station::rig_source\n";
    assert!(driver_violations("src/x.rs", &code_of(fine)).is_empty());
    let listed = driver_files();
    for must in ["src/service.rs", "src/recorder.rs", "src/port/link.rs"] {
        assert!(listed.iter().any(|f| f == must), "{must} is not read");
    }
}

#[test]
fn the_files_read_include_the_decoders_and_leave_out_the_port_io() {
    let root = root();
    let files = pure_files();
    for must in [
        "src/follow/policy.rs",
        "src/rig/binary.rs",
        "src/rig/text.rs",
        "src/calibrate/report.rs",
        "src/tuner/line.rs",
    ] {
        if root.join(must).exists() {
            assert!(files.contains(&root.join(must)), "{must} is not read");
        }
    }
    assert!(
        !files.iter().any(|f| f.starts_with(root.join("src/port"))),
        "the port IO is read as pure"
    );
}

#[test]
fn the_checker_sees_each_kind_of_reaching_up() {
    // Each snippet breaks the rule once; the checker must say so.
    let cases = [
        ("use tokio::sync::mpsc;\n", "`tokio`"),
        ("fn f() { tokio::spawn(async {}); }\n", "`tokio`"),
        ("#[derive(clap::Args)]\nstruct A;\n", "`clap`"),
        ("use crate::config::Config;\n", "crate::config"),
        (
            "use crate::{follow::Policy, config::Approach};\n",
            "crate::config",
        ),
        (
            "use crate::{\n    station,\n    follow,\n};\n",
            "crate::station",
        ),
        ("fn f(s: &crate::service::Service) {}\n", "crate::service"),
        ("use tokio_serial::SerialPort;\n", "tokio_serial"),
    ];
    let cases = cases.into_iter().chain([(
        "#[cfg(test)]\nmod tests { use tokio::test; }\nuse crate::config::Config;\n",
        "crate::config",
    )]);
    for (code, what) in cases {
        let v = violations("src/x.rs", &code_of(code));
        assert_eq!(v.len(), 1, "{code:?}: {v:?}");
        assert!(v[0].contains(what), "{code:?}: {v:?}");
    }
    // And leaves alone what only looks alike.
    let fine = [
        "// use tokio::sync::mpsc;\nfn f() {}\n",
        "/* crate::config */ fn f() {}\n",
        "use crate::follow::{Band, Policy};\nuse crate::configure::X;\n",
        "const S: &str = \"see // tokio docs\"; fn f() {}\n",
        "fn f() {}\n#[cfg(test)]\nmod tests { #[tokio::test] async fn t() {} }\n",
        "const Q: char = '\"'; fn f<'a>(x: &'a str) {} // tokio\n",
    ];
    for code in fine {
        let v = violations("src/x.rs", &code_of(code));
        assert!(v.is_empty(), "{code:?}: {v:?}");
    }
}
