//! Scenario files: the demos parse, inconsistent worlds are refused with
//! line, column, element and reason.

use replay::sim::scenario::{Scenario, ScenarioErrorKind as K, line_column};
use replay::sim::{Sim, SimError, demos};

/// A small valid scenario; tests edit it line by line.
const BASE: &str = r#"[scenario]
name = "test drift"
seed = 5

[gas]
species = "air"
temperature_k = 290.0

[[node]]
id = "out"
position_m = [0.0, 0.0, 0.0]
kind = "exit"
ambient_pressure_pa = 101325.0

[[node]]
id = "mid"
position_m = [5.0, 0.0, 0.0]

[[node]]
id = "in"
position_m = [10.0, 0.0, 0.0]
kind = "source"
stagnation_pressure_pa = 101330.0

[[conduit]]
id = "a"
from = "out"
to = "mid"
radius_m = 0.4

[[conduit]]
id = "b"
from = "mid"
to = "in"
radius_m = 0.4

[robot]
speed_limit_m_per_s = 0.3
module_count = 3
module_length_m = 0.2
module_radius_m = 0.05

[robot.probe]
layout = "five_port"
head_radius_m = 0.03

[start]
position_m = [1.0, 0.0, 0.0]
"#;

fn err(src: &str) -> replay::sim::scenario::ScenarioError {
    Scenario::from_toml_str(src).unwrap_err()
}

/// Line (1-based) of the first occurrence of `needle` in `src`.
fn line_of(src: &str, needle: &str) -> usize {
    let off = src.find(needle).unwrap();
    line_column(src, off).0
}

#[test]
fn base_and_demos_parse() {
    let sc = Scenario::from_toml_str(BASE).unwrap();
    assert_eq!(sc.nodes.len(), 3);
    assert_eq!(sc.robot.modules.len(), 3);
    assert_eq!(sc.time_step_s, 0.01);
    for (key, _) in demos::DEMOS {
        let sc = demos::demo(key).unwrap().unwrap();
        assert!(!sc.name.is_empty());
        Sim::new(sc).unwrap();
    }
    assert!(matches!(
        Sim::from_demo("nope"),
        Err(SimError::UnknownDemo(_))
    ));
}

#[test]
fn line_column_counts_characters() {
    let s = "ab\ncdé f\n";
    assert_eq!(line_column(s, 0), (1, 1));
    assert_eq!(line_column(s, 3), (2, 1));
    // 'f' follows a two-byte character: column 5 in characters.
    assert_eq!(line_column(s, s.find('f').unwrap()), (2, 5));
}

#[test]
fn syntax_and_unknown_keys() {
    let bad = BASE.replace("seed = 5", "seed = ");
    let e = err(&bad);
    assert_eq!(e.kind, K::Syntax);
    assert_eq!(e.line, 3);
    let bad = BASE.replace(
        "radius_m = 0.4\n\n[[conduit]]",
        "radius_m = 0.4\nwidth = 2\n\n[[conduit]]",
    );
    let e = err(&bad);
    assert_eq!(e.kind, K::Syntax);
    assert_eq!(e.line, line_of(&bad, "width"));
    assert!(e.reason.contains("width"), "{e}");
}

#[test]
fn non_positive_radius_points_at_the_value() {
    let bad = BASE.replacen("radius_m = 0.4", "radius_m = -0.1", 1);
    let e = err(&bad);
    assert_eq!(e.kind, K::NonPositiveRadius);
    assert_eq!((e.line, e.column), (line_of(&bad, "radius_m = -0.1"), 12));
    assert_eq!(e.element, "conduit \"a\" radius_m");
    let bad = BASE.replacen(
        "radius_m = 0.4",
        "radius_profile = [[0.0, 0.4], [1.0, 0.0]]",
        1,
    );
    let e = err(&bad);
    assert_eq!(e.kind, K::NonPositiveRadius);
    assert!(e.element.contains("radius_profile[1]"), "{e}");
}

#[test]
fn unknown_and_duplicate_ids() {
    let bad = BASE.replacen("to = \"in\"", "to = \"inn\"", 1);
    let e = err(&bad);
    assert_eq!(e.kind, K::UnknownId);
    assert_eq!(e.line, line_of(&bad, "\"inn\""));
    let bad = BASE.replacen("id = \"mid\"", "id = \"out\"", 1);
    assert_eq!(err(&bad).kind, K::DuplicateId);
}

#[test]
fn disconnected_network() {
    // An extra node that no conduit reaches, among the node tables.
    let bad = BASE.replace(
        "[[conduit]]\nid = \"a\"",
        "[[node]]\nid = \"island\"\nposition_m = [50.0, 0.0, 0.0]\n\n[[conduit]]\nid = \"a\"",
    );
    let e = err(&bad);
    assert_eq!(e.kind, K::Disconnected, "{e}");
    assert_eq!(e.element, "node \"island\"");
    assert_eq!(e.line, line_of(&bad, "id = \"island\""));
}

#[test]
fn no_exit_and_no_source() {
    let bad = BASE.replace("kind = \"exit\"\nambient_pressure_pa = 101325.0", "");
    assert_eq!(err(&bad).kind, K::NoExit);
    let bad = BASE.replace("kind = \"source\"\nstagnation_pressure_pa = 101330.0", "");
    assert_eq!(err(&bad).kind, K::NoSource);
}

#[test]
fn start_outside_and_robot_too_wide() {
    let bad = BASE.replace(
        "position_m = [1.0, 0.0, 0.0]",
        "position_m = [1.0, 3.0, 0.0]",
    );
    let e = err(&bad);
    assert_eq!(e.kind, K::StartOutside);
    assert_eq!(e.line, line_of(&bad, "position_m = [1.0, 3.0"));
    assert_eq!(e.element, "start.position_m");
    let bad = BASE.replace("module_radius_m = 0.05", "module_radius_m = 0.45");
    let e = err(&bad);
    assert_eq!(e.kind, K::RobotTooWide);
    assert!(e.reason.contains("wider than conduit \"a\""), "{e}");
    // The head fits the radius but its skin would cut the wall off-centre.
    let bad = BASE.replace(
        "position_m = [1.0, 0.0, 0.0]",
        "position_m = [1.0, 0.38, 0.0]",
    );
    assert_eq!(err(&bad).kind, K::RobotTooWide);
}

#[test]
fn compressible_must_start_at_a_reservoir_with_one_throat() {
    let bad = BASE.replacen("radius_m = 0.4", "radius_m = 0.4\ncompressible = true", 1);
    let e = err(&bad);
    assert_eq!(e.kind, K::BadCompressible);
    assert_eq!(e.line, line_of(&bad, "compressible = true"));
    let bad = BASE.replace(
        "from = \"mid\"\nto = \"in\"\nradius_m = 0.4",
        "from = \"in\"\nto = \"mid\"\nradius_profile = [[0.0, 0.4], [0.3, 0.2], [0.6, 0.4], [1.0, 0.2]]\ncompressible = true",
    );
    let e = err(&bad);
    assert_eq!(e.kind, K::BadCompressible);
    assert!(e.reason.contains("second throat"), "{e}");
}

#[test]
fn faults_must_name_real_ports_and_sensors() {
    let bad = format!("{BASE}\n[[fault]]\nkind = \"port_blocked\"\nat_s = 1.0\nport = 5\n");
    let e = err(&bad);
    assert_eq!(e.kind, K::BadFault);
    assert_eq!(e.line, line_of(&bad, "port = 5"));
    let bad =
        format!("{BASE}\n[[fault]]\nkind = \"contact_dead\"\nat_s = 1.0\nmodule = 1\nsensor = 0\n");
    // The base robot has no sensor rings.
    assert_eq!(err(&bad).kind, K::BadFault);
    let bad = format!("{BASE}\n[[fault]]\nkind = \"melt\"\nat_s = 1.0\n");
    assert!(err(&bad).reason.contains("unknown fault"));
}

#[test]
fn display_names_line_column_element_reason() {
    let bad = BASE.replacen("radius_m = 0.4", "radius_m = 0.0", 1);
    let text = err(&bad).to_string();
    assert!(
        text.starts_with(&format!(
            "line {}, column 12: conduit \"a\" radius_m: ",
            line_of(&bad, "radius_m = 0.0")
        )),
        "{text}"
    );
}

/// A mass-flow source injects exactly its mass flow, which leaves through
/// the exit (mass balance through the junction).
#[test]
fn mass_flow_source() {
    let text = BASE.replace(
        "stagnation_pressure_pa = 101330.0",
        "mass_flow_kg_per_s = 0.5",
    );
    let sim = Sim::from_toml_str(&text).unwrap();
    let w = sim.world();
    for c in 0..2 {
        let m = w.mass_flow_kg_per_s(c);
        // Flow runs from the source at "in" toward the exit: negative along
        // each conduit's from -> to direction.
        assert!((m + 0.5).abs() < 1e-9 * 0.5, "conduit {c}: {m}");
    }
    let json = serde_json::to_string(&sim.outcome()).unwrap();
    assert!(json.contains("\"reached_source\":false"));
}
