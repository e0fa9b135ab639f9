//! `replay diff`: compare two decision traces.

use super::out::Out;
use replay::diff::{DiffOptions, Tolerance, Verdict, diff_files};
use std::path::PathBuf;
use std::process::ExitCode;

/// Compare two decision traces (JSON Lines) field by field. Exit 0 if the
/// same, 1 if different, 2 on error.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Trace A (the reference).
    pub a: PathBuf,
    /// Trace B.
    pub b: PathBuf,
    /// Absolute tolerance for float fields.
    #[arg(long, value_name = "X", default_value_t = 0.0)]
    pub abs_tol: f64,
    /// Relative tolerance for float fields (fraction of the larger
    /// magnitude).
    #[arg(long, value_name = "Y", default_value_t = 0.0)]
    pub rel_tol: f64,
    /// Most fields listed for the first diverging step.
    #[arg(long, value_name = "N", default_value_t = 50)]
    pub fields: usize,
    /// Print the report as JSON.
    #[arg(long)]
    pub json: bool,
}

/// Run the command.
///
/// # Errors
/// When the report cannot be printed as JSON.
pub fn exec(a: Args, out: &mut Out) -> Result<ExitCode, String> {
    let opts = DiffOptions {
        tolerance: Tolerance {
            abs: a.abs_tol,
            rel: a.rel_tol,
        },
        max_fields_listed: a.fields,
    };
    let result = diff_files(&a.a, &a.b, &opts);
    let verdict = Verdict::of(&result);
    match &result {
        Ok(r) if a.json => out.json(r)?,
        Ok(r) => out.text(r),
        Err(e) => out.note("diff", e),
    }
    Ok(ExitCode::from(verdict.exit_code()))
}
