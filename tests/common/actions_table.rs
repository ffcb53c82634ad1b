//! The shared table of operator actions (`fixtures/control/actions.toml`):
//! its types and its reading. Plain serde, no IO beyond reading the text
//! in, so the core's unit tests include this very file
//! (`src/follow/command_tests.rs`, by `#[path]`) and the end-to-end tests
//! use it through `tests/common`: one table, one reading of it.

use serde::Deserialize;

/// The table's text, built into the test.
pub const TEXT: &str = include_str!(concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/fixtures/control/actions.toml"
));

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Table {
    pub station: TableStation,
    #[serde(rename = "step")]
    pub steps: Vec<Step>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TableStation {
    pub start_steps: i64,
    pub min_steps: i64,
    pub max_steps: i64,
    pub base_points: Vec<(u64, i64)>,
    pub wet_points: Vec<(u64, i64)>,
    pub band: TableBand,
    pub presets: Vec<TablePreset>,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TableBand {
    pub name: String,
    pub low_hz: u64,
    pub high_hz: u64,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TablePreset {
    pub name: String,
    #[serde(default)]
    pub hz: Option<u64>,
    #[serde(default)]
    pub steps: Option<i64>,
}

/// What the rig says in a step.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RigSays {
    Frequency,
    Transmit,
    Receive,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Step {
    /// A request line of the control protocol.
    #[serde(default)]
    pub ask: Option<String>,
    #[serde(default)]
    pub rig: Option<RigSays>,
    #[serde(default)]
    pub rig_hz: Option<u64>,
    #[serde(default)]
    pub outcome: Option<String>,
    #[serde(default)]
    pub waits_for: Option<String>,
    #[serde(default)]
    pub refused: Option<String>,
    /// The one GOTO the controller is sent after this step (none if absent).
    #[serde(default)]
    pub moves_to: Option<i64>,
}

impl Step {
    /// A one-line name for failure messages.
    pub fn label(&self, i: usize) -> String {
        match (&self.ask, self.rig) {
            (Some(a), _) => format!("step {i}: {a}"),
            (None, Some(r)) => format!("step {i}: rig {r:?} {:?}", self.rig_hz),
            (None, None) => format!("step {i}: (empty)"),
        }
    }
}

/// The table, read and checked for shape (each step is an ask or a rig
/// event, and an ask has its expected outcome).
pub fn table() -> Table {
    let t: Table = toml::from_str(TEXT).unwrap_or_else(|e| panic!("actions.toml: {e}"));
    for (i, s) in t.steps.iter().enumerate() {
        assert!(
            s.ask.is_some() != s.rig.is_some(),
            "{}: an ask or a rig event",
            s.label(i)
        );
        assert_eq!(
            s.ask.is_some(),
            s.outcome.is_some(),
            "{}: an ask needs its outcome",
            s.label(i)
        );
        assert_eq!(
            s.rig == Some(RigSays::Frequency),
            s.rig_hz.is_some(),
            "{}: rig_hz goes with rig = \"frequency\"",
            s.label(i)
        );
    }
    t
}
