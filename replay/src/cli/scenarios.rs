//! `replay scenarios`: list the built-in demos.

use super::out::Out;
use std::process::ExitCode;

/// List the built-in demo scenarios.
pub fn exec(out: &mut Out) -> ExitCode {
    for (key, text) in replay::sim::demos::DEMOS {
        let desc = replay::sim::scenario::Scenario::from_toml_str(text)
            .map(|s| s.description)
            .unwrap_or_default();
        out.line(format_args!("demo:{key:<18} {desc}"));
    }
    ExitCode::SUCCESS
}
