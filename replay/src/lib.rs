//! Host tools around `nav-core`: the log format, the simulator, the runner,
//! trace diffs, campaigns, plots and rig-log import.

pub mod record;
pub mod sim;
