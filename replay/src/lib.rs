//! Host tools around `nav-core`: the log format, the simulator, the runner,
//! trace diffs, campaigns, plots and rig-log import.

pub mod diff;
pub mod import;
pub mod log;
pub mod record;

pub mod campaign;
pub mod plot;
