//! Host tools around `nav-core`: the log format, the simulator, the runner,
//! trace diffs, campaigns, generated worlds and their scorecard, plots and
//! rig-log import.

pub mod campaign;
pub mod diff;
pub mod import;
pub mod log;
pub mod plot;
pub mod record;
pub mod report;
pub mod run;
pub mod scorecard;
pub mod sim;
