//! `config/example.toml` lists every key the config accepts, so that it
//! cannot fall behind the config types.
//!
//! The keys the types accept are read from serde itself: a config with one
//! unknown key in a table is refused (`deny_unknown_fields`) with a message
//! that lists every field that table accepts. The example's keys are those
//! set in it plus those shown commented out (`# key = value`), which must
//! parse too.

use std::collections::BTreeSet;
use std::path::Path;

use tuneward::config::Config;

const PROBE: &str = "zz_not_a_key";

fn example() -> String {
    std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("config/example.toml"))
        .unwrap()
}

/// The example with every commented-out `# key = value` line restored.
fn uncommented(text: &str) -> String {
    text.lines()
        .map(|line| {
            let Some(rest) = line.strip_prefix('#') else {
                return line.to_string();
            };
            let rest = rest.trim_start();
            let key_like = rest
                .split_once('=')
                .map(|(k, v)| {
                    let k = k.trim();
                    !k.is_empty()
                        && k.chars().all(|c| c.is_ascii_lowercase() || c == '_' || c.is_ascii_digit())
                        && !v.trim().is_empty()
                })
                .unwrap_or(false)
                // Prose that happens to hold an `=` is no assignment.
                && toml::from_str::<toml::Table>(rest).is_ok();
            if key_like {
                rest.to_string()
            } else {
                line.to_string()
            }
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// The fields serde names as accepted when `text` (which sets [`PROBE`])
/// is parsed.
fn accepted(text: &str) -> BTreeSet<String> {
    let err = Config::parse(text, Path::new("probe.toml"))
        .err()
        .unwrap_or_else(|| panic!("`{PROBE}` was accepted in:\n{text}"))
        .to_string();
    assert!(err.contains(PROBE), "not an unknown-field error: {err}");
    let (_, expected) = err
        .split_once("expected ")
        .unwrap_or_else(|| panic!("no list of fields in: {err}"));
    expected
        .split('`')
        .skip(1)
        .step_by(2)
        .map(str::to_string)
        .collect()
}

/// Dotted keys of a TOML value: tables and arrays of tables are walked
/// (`band.name`, `calibration.points.hz`).
fn keys_of(prefix: &str, value: &toml::Value, into: &mut BTreeSet<String>) {
    match value {
        toml::Value::Table(t) => {
            for (k, v) in t {
                let key = if prefix.is_empty() {
                    k.clone()
                } else {
                    format!("{prefix}.{k}")
                };
                into.insert(key.clone());
                keys_of(&key, v, into);
            }
        }
        toml::Value::Array(items) => {
            for item in items.iter().filter(|i| i.is_table()) {
                keys_of(prefix, item, into);
            }
        }
        _ => {}
    }
}

/// Every key the config types accept, by probing each table serde names.
/// A table is probed as `[name]`, or as `[[name]]` when it is an array of
/// tables; an array of inline tables inside a table (`points`) as
/// `key = [{ … }]`.
fn accepted_keys(example: &toml::Value) -> BTreeSet<String> {
    let mut all = BTreeSet::new();
    for top in accepted(&format!("{PROBE} = 1\n")) {
        all.insert(top.clone());
        let as_table = format!("[{top}]\n{PROBE} = 1\n");
        let fields = match Config::parse(&as_table, Path::new("probe.toml")) {
            Err(e) if e.to_string().contains(PROBE) => accepted(&as_table),
            _ => accepted(&format!("[[{top}]]\n{PROBE} = 1\n")),
        };
        for field in fields {
            let key = format!("{top}.{field}");
            all.insert(key.clone());
            // Nested inline tables, where the example shows them.
            let nested = example
                .get(&top)
                .and_then(|t| t.get(&field))
                .and_then(|v| v.as_array())
                .is_some_and(|a| a.iter().any(|i| i.is_table()));
            if nested {
                for sub in accepted(&format!("[{top}]\n{field} = [{{ {PROBE} = 1 }}]\n")) {
                    all.insert(format!("{key}.{sub}"));
                }
            }
            // A single inline table (`home = { … }`).
            let inline = example
                .get(&top)
                .and_then(|t| t.get(&field))
                .is_some_and(|v| v.is_table());
            if inline {
                for sub in accepted(&format!("[{top}]\n{field} = {{ {PROBE} = 1 }}\n")) {
                    all.insert(format!("{key}.{sub}"));
                }
            }
        }
    }
    all
}

#[test]
fn the_example_lists_every_key_the_config_accepts() {
    let text = uncommented(&example());
    // Everything the example shows, commented or not, is a real key of the
    // right type (deny_unknown_fields refuses anything else).
    Config::parse(&text, Path::new("config/example.toml (uncommented)"))
        .unwrap_or_else(|e| panic!("{e}"));
    let value: toml::Value = toml::from_str(&text).unwrap();
    let mut shown = BTreeSet::new();
    keys_of("", &value, &mut shown);
    let accepted = accepted_keys(&value);
    let missing: Vec<&String> = accepted.difference(&shown).collect();
    assert!(
        missing.is_empty(),
        "config/example.toml does not show these keys: {missing:?}"
    );
    let unknown: Vec<&String> = shown.difference(&accepted).collect();
    assert!(
        unknown.is_empty(),
        "keys the config does not accept: {unknown:?}"
    );
    // The probe itself sees what it should: a sample of known keys.
    for key in [
        "rig.protocol",
        "tuner.link",
        "band.guard_hz",
        "calibration.profile",
        "calibration.points.weight",
        "inhibit.unprotected_ok",
    ] {
        assert!(
            accepted.contains(key),
            "{key} not found by probing: {accepted:?}"
        );
    }
}

#[test]
fn a_key_left_out_of_the_example_is_noticed() {
    // The comparison fails when the example lacks a key: drop `profile`.
    let text = uncommented(&example()).replace("profile = \"wet\"\n", "");
    let value: toml::Value = toml::from_str(&text).unwrap();
    let mut shown = BTreeSet::new();
    keys_of("", &value, &mut shown);
    assert!(!shown.contains("calibration.profile"));
    assert!(accepted_keys(&value).contains("calibration.profile"));
}
