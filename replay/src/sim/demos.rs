//! Built-in demo scenarios, all invented for this project.
//!
//! | key | name | what it exercises |
//! |---|---|---|
//! | `saltpetre-drift` | Saltpetre Drift | slow air ventilation maze in an old mine: many branches, a loop, blind ends, two exits |
//! | `hollow-kettle` | Hollow Kettle | a steam fumarole: choked throat, supersonic flow above it, a normal shock |
//! | `wrens-slot` | Wren's Slot | a trap: the strongest branch is too narrow for the robot |

use super::scenario::{Scenario, ScenarioError};

/// `(key, TOML text)` of every demo.
pub const DEMOS: [(&str, &str); 3] = [
    (
        "saltpetre-drift",
        include_str!("demos/saltpetre_drift.toml"),
    ),
    ("hollow-kettle", include_str!("demos/hollow_kettle.toml")),
    ("wrens-slot", include_str!("demos/wrens_slot.toml")),
];

/// The TOML text of demo `key`.
#[must_use]
pub fn demo_text(key: &str) -> Option<&'static str> {
    DEMOS.iter().find(|(k, _)| *k == key).map(|(_, t)| *t)
}

/// Demo `key`, parsed. `None` when there is no such demo.
///
/// # Errors
/// Never for the built-in texts (a test checks all of them).
pub fn demo(key: &str) -> Option<Result<Scenario, ScenarioError>> {
    demo_text(key).map(Scenario::from_toml_str)
}
