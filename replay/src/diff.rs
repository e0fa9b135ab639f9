//! Compare two decision traces in JSON Lines, field by field.
//!
//! A trace is one JSON object per line (blank lines are skipped). The two
//! traces are paired line by line (step 0 is the first object of each).
//! Each object is flattened to dotted paths: nested object keys join with
//! `.`, array elements get `[i]`; empty objects and arrays are values of
//! their own (`{}`, `[]`). Nothing here knows the navigator's types.
//!
//! Two values at a path are equal when:
//! - both are numbers, at least one written as a float, and
//!   `|a - b| <= abs_tol` or `|a - b| <= rel_tol * max(|a|, |b|)`
//!   (with both tolerances 0, exactly equal);
//! - both are integers and equal (tolerances do not apply to integers:
//!   counters, indices and codes must match);
//! - otherwise, equal JSON values (strings, booleans, null, `{}`, `[]`).
//!
//! A path present in one object and absent from the other differs.
//!
//! The verdict maps to exit codes for scripts: [`Verdict::Same`] 0,
//! [`Verdict::Different`] 1, [`Verdict::Error`] 2.

use std::collections::BTreeMap;
use std::io::BufRead;
use std::path::Path;

use serde::Serialize;
use serde_json::Value;

/// Float tolerance. Both zero (the default) means exact comparison.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize)]
pub struct Tolerance {
    /// Absolute tolerance, in the field's own unit.
    pub abs: f64,
    /// Relative tolerance, as a fraction of the larger magnitude.
    pub rel: f64,
}

/// How to compare.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct DiffOptions {
    /// Float tolerance.
    pub tolerance: Tolerance,
    /// Most fields listed for the first diverging step.
    pub max_fields_listed: usize,
}

impl Default for DiffOptions {
    /// Exact, 50 fields listed.
    fn default() -> Self {
        Self {
            tolerance: Tolerance::default(),
            max_fields_listed: 50,
        }
    }
}

/// The three answers a script can act on.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Verdict {
    /// No step differs and both traces have the same number of steps.
    Same,
    /// Some step differs, or one trace is longer.
    Different,
    /// A trace could not be read or parsed.
    Error,
}

impl Verdict {
    /// Exit status: 0 same, 1 different, 2 error.
    #[must_use]
    pub fn exit_code(self) -> u8 {
        match self {
            Self::Same => 0,
            Self::Different => 1,
            Self::Error => 2,
        }
    }

    /// The verdict of a comparison's result.
    #[must_use]
    pub fn of(result: &Result<DiffReport, DiffError>) -> Self {
        match result {
            Ok(r) => r.verdict(),
            Err(_) => Self::Error,
        }
    }
}

/// One field that differs at one step.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FieldDiff {
    /// Dotted path of the field.
    pub path: String,
    /// Value in trace A (`None`: the field is absent).
    pub a: Option<Value>,
    /// Value in trace B (`None`: the field is absent).
    pub b: Option<Value>,
    /// `|a - b|` when both are numbers.
    pub abs_diff: Option<f64>,
    /// `|a - b| / max(|a|, |b|)` when both are numbers (0 when both are 0).
    pub rel_diff: Option<f64>,
}

/// The first step where the traces diverge.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StepDiff {
    /// Step index, 0-based.
    pub step: u64,
    /// Line of the step in trace A, 1-based.
    pub line_a: u64,
    /// Line of the step in trace B, 1-based.
    pub line_b: u64,
    /// Fields that differ (at most `max_fields_listed`), in path order.
    pub fields: Vec<FieldDiff>,
    /// How many fields differ in all.
    pub fields_differing: usize,
}

/// One field across the whole comparison.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct FieldSummary {
    /// Steps where the field differs.
    pub steps: u64,
    /// First such step.
    pub first_step: u64,
    /// Largest absolute difference seen (numbers only).
    pub max_abs_diff: Option<f64>,
    /// Largest relative difference seen (numbers only).
    pub max_rel_diff: Option<f64>,
}

/// What [`diff_traces`] found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DiffReport {
    /// Name of trace A.
    pub a: String,
    /// Name of trace B.
    pub b: String,
    /// Tolerance used.
    pub tolerance: Tolerance,
    /// Steps present in both traces.
    pub steps_compared: u64,
    /// Of those, steps with at least one differing field.
    pub diverging_steps: u64,
    /// The first diverging step.
    pub first: Option<StepDiff>,
    /// Steps in A past the end of B (missing from B).
    pub missing_in_b: u64,
    /// Steps in B past the end of A (extra in B).
    pub extra_in_b: u64,
    /// Line of the first unpaired step (in whichever trace is longer).
    pub first_unpaired_line: Option<u64>,
    /// Every field that differed somewhere, by path.
    pub fields: BTreeMap<String, FieldSummary>,
}

impl DiffReport {
    /// Same or different.
    #[must_use]
    pub fn verdict(&self) -> Verdict {
        if self.diverging_steps == 0 && self.missing_in_b == 0 && self.extra_in_b == 0 {
            Verdict::Same
        } else {
            Verdict::Different
        }
    }
}

/// Why a trace could not be compared.
#[derive(Debug)]
pub enum DiffError {
    /// Reading failed.
    Io {
        /// The trace.
        file: String,
        /// Line being read, 1-based.
        line: u64,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A line is not JSON.
    Json {
        /// The trace.
        file: String,
        /// Line, 1-based.
        line: u64,
        /// Column within the line, 1-based.
        column: u64,
        /// The parser's message.
        message: String,
    },
    /// A line is JSON but not an object.
    NotObject {
        /// The trace.
        file: String,
        /// Line, 1-based.
        line: u64,
    },
}

impl std::fmt::Display for DiffError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Io { file, line, source } => write!(f, "{file}:{line}: cannot read: {source}"),
            Self::Json {
                file,
                line,
                column,
                message,
            } => write!(f, "{file}:{line}:{column}: not JSON: {message}"),
            Self::NotObject { file, line } => {
                write!(f, "{file}:{line}: a trace line must be a JSON object")
            }
        }
    }
}

impl std::error::Error for DiffError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Io { source, .. } => Some(source),
            _ => None,
        }
    }
}

/// A flattened step: dotted path to value.
type Flat = BTreeMap<String, Value>;

/// Reads one trace, one object at a time.
struct Trace<R: BufRead> {
    src: R,
    name: String,
    line: u64,
    text: String,
}

impl<R: BufRead> Trace<R> {
    /// The next object with its line number, flattened.
    fn next(&mut self) -> Result<Option<(u64, Flat)>, DiffError> {
        loop {
            self.text.clear();
            self.line += 1;
            let n = self
                .src
                .read_line(&mut self.text)
                .map_err(|source| DiffError::Io {
                    file: self.name.clone(),
                    line: self.line,
                    source,
                })?;
            if n == 0 {
                return Ok(None);
            }
            if self.text.trim().is_empty() {
                continue;
            }
            let text = self.text.trim_end_matches(['\n', '\r']);
            let v: Value = serde_json::from_str(text).map_err(|e| {
                let full = e.to_string();
                // The position is ours to give (file:line:column); drop
                // the parser's own "at line 1 column N".
                let message = full
                    .rfind(" at line ")
                    .map_or(full.as_str(), |at| &full[..at])
                    .to_owned();
                DiffError::Json {
                    file: self.name.clone(),
                    line: self.line,
                    column: e.column() as u64,
                    message,
                }
            })?;
            let Value::Object(obj) = v else {
                return Err(DiffError::NotObject {
                    file: self.name.clone(),
                    line: self.line,
                });
            };
            let mut flat = BTreeMap::new();
            flatten_object(&obj, "", &mut flat);
            return Ok(Some((self.line, flat)));
        }
    }
}

fn join(prefix: &str, key: &str) -> String {
    if prefix.is_empty() {
        key.to_owned()
    } else {
        format!("{prefix}.{key}")
    }
}

fn flatten_object(
    obj: &serde_json::Map<String, Value>,
    prefix: &str,
    out: &mut BTreeMap<String, Value>,
) {
    for (k, v) in obj {
        flatten_value(v, join(prefix, k), out);
    }
}

fn flatten_value(v: &Value, path: String, out: &mut BTreeMap<String, Value>) {
    match v {
        Value::Object(o) if !o.is_empty() => flatten_object(o, &path, out),
        Value::Array(a) if !a.is_empty() => {
            for (i, x) in a.iter().enumerate() {
                flatten_value(x, format!("{path}[{i}]"), out);
            }
        }
        other => {
            out.insert(path, other.clone());
        }
    }
}

fn is_integer(n: &serde_json::Number) -> bool {
    n.is_i64() || n.is_u64()
}

/// Compare two values; `None` if equal, else the numeric differences.
fn compare(a: &Value, b: &Value, tol: Tolerance) -> Option<(Option<f64>, Option<f64>)> {
    if let (Value::Number(x), Value::Number(y)) = (a, b) {
        let (fx, fy) = (
            x.as_f64().unwrap_or(f64::NAN),
            y.as_f64().unwrap_or(f64::NAN),
        );
        let abs = (fx - fy).abs();
        let scale = fx.abs().max(fy.abs());
        let rel = if scale == 0.0 { 0.0 } else { abs / scale };
        let equal = if is_integer(x) && is_integer(y) {
            x == y
        } else {
            fx == fy || abs <= tol.abs || abs <= tol.rel * scale
        };
        return (!equal).then_some((Some(abs), Some(rel)));
    }
    (a != b).then_some((None, None))
}

fn diff_step(
    a: &BTreeMap<String, Value>,
    b: &BTreeMap<String, Value>,
    tol: Tolerance,
) -> Vec<FieldDiff> {
    let mut out = Vec::new();
    let mut ia = a.iter().peekable();
    let mut ib = b.iter().peekable();
    loop {
        let next = match (ia.peek(), ib.peek()) {
            (None, None) => break,
            (Some((ka, _)), Some((kb, _))) => ka.cmp(kb),
            (Some(_), None) => std::cmp::Ordering::Less,
            (None, Some(_)) => std::cmp::Ordering::Greater,
        };
        match next {
            std::cmp::Ordering::Less => {
                if let Some((k, v)) = ia.next() {
                    out.push(FieldDiff {
                        path: k.clone(),
                        a: Some(v.clone()),
                        b: None,
                        abs_diff: None,
                        rel_diff: None,
                    });
                }
            }
            std::cmp::Ordering::Greater => {
                if let Some((k, v)) = ib.next() {
                    out.push(FieldDiff {
                        path: k.clone(),
                        a: None,
                        b: Some(v.clone()),
                        abs_diff: None,
                        rel_diff: None,
                    });
                }
            }
            std::cmp::Ordering::Equal => {
                if let (Some((k, va)), Some((_, vb))) = (ia.next(), ib.next())
                    && let Some((abs_diff, rel_diff)) = compare(va, vb, tol)
                {
                    out.push(FieldDiff {
                        path: k.clone(),
                        a: Some(va.clone()),
                        b: Some(vb.clone()),
                        abs_diff,
                        rel_diff,
                    });
                }
            }
        }
    }
    out
}

fn max_opt(a: Option<f64>, b: Option<f64>) -> Option<f64> {
    match (a, b) {
        (Some(x), Some(y)) => Some(x.max(y)),
        (x, None) => x,
        (None, y) => y,
    }
}

/// Compare two traces read from `a` and `b` (named for messages).
/// Streams both: memory holds one step of each plus the per-field summary.
///
/// # Errors
/// [`DiffError`] naming the trace, line and column at fault.
pub fn diff_traces<A: BufRead, B: BufRead>(
    a: A,
    name_a: &str,
    b: B,
    name_b: &str,
    opts: &DiffOptions,
) -> Result<DiffReport, DiffError> {
    let mut ta = Trace {
        src: a,
        name: name_a.to_owned(),
        line: 0,
        text: String::new(),
    };
    let mut tb = Trace {
        src: b,
        name: name_b.to_owned(),
        line: 0,
        text: String::new(),
    };
    let mut report = DiffReport {
        a: name_a.to_owned(),
        b: name_b.to_owned(),
        tolerance: opts.tolerance,
        steps_compared: 0,
        diverging_steps: 0,
        first: None,
        missing_in_b: 0,
        extra_in_b: 0,
        first_unpaired_line: None,
        fields: BTreeMap::new(),
    };
    loop {
        let (sa, sb) = (ta.next()?, tb.next()?);
        match (sa, sb) {
            (None, None) => break,
            (Some((la, _)), None) => {
                report.missing_in_b += 1;
                report.first_unpaired_line.get_or_insert(la);
            }
            (None, Some((lb, _))) => {
                report.extra_in_b += 1;
                report.first_unpaired_line.get_or_insert(lb);
            }
            (Some((la, fa)), Some((lb, fb))) => {
                let step = report.steps_compared;
                report.steps_compared += 1;
                let diffs = diff_step(&fa, &fb, opts.tolerance);
                if diffs.is_empty() {
                    continue;
                }
                report.diverging_steps += 1;
                for d in &diffs {
                    let s = report.fields.entry(d.path.clone()).or_insert(FieldSummary {
                        steps: 0,
                        first_step: step,
                        max_abs_diff: None,
                        max_rel_diff: None,
                    });
                    s.steps += 1;
                    s.max_abs_diff = max_opt(s.max_abs_diff, d.abs_diff);
                    s.max_rel_diff = max_opt(s.max_rel_diff, d.rel_diff);
                }
                if report.first.is_none() {
                    let fields_differing = diffs.len();
                    let mut fields = diffs;
                    fields.truncate(opts.max_fields_listed);
                    report.first = Some(StepDiff {
                        step,
                        line_a: la,
                        line_b: lb,
                        fields,
                        fields_differing,
                    });
                }
            }
        }
    }
    Ok(report)
}

/// Compare two trace files.
///
/// # Errors
/// As [`diff_traces`]; a file that cannot be opened is [`DiffError::Io`]
/// at line 0.
pub fn diff_files(a: &Path, b: &Path, opts: &DiffOptions) -> Result<DiffReport, DiffError> {
    let open = |p: &Path| {
        std::fs::File::open(p)
            .map(std::io::BufReader::new)
            .map_err(|source| DiffError::Io {
                file: p.display().to_string(),
                line: 0,
                source,
            })
    };
    let (fa, fb) = (open(a)?, open(b)?);
    diff_traces(
        fa,
        &a.display().to_string(),
        fb,
        &b.display().to_string(),
        opts,
    )
}

fn show(v: Option<&Value>) -> String {
    v.map_or_else(|| "(absent)".to_owned(), Value::to_string)
}

impl std::fmt::Display for DiffReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.verdict() {
            Verdict::Same => writeln!(
                f,
                "same: {} steps compared ({} and {})",
                self.steps_compared, self.a, self.b
            )?,
            _ => writeln!(
                f,
                "different: {} of {} steps diverge ({} and {})",
                self.diverging_steps, self.steps_compared, self.a, self.b
            )?,
        }
        if let Some(s) = &self.first {
            writeln!(
                f,
                "first divergence at step {} ({} line {}, {} line {}), {} fields:",
                s.step, self.a, s.line_a, self.b, s.line_b, s.fields_differing
            )?;
            for d in &s.fields {
                write!(
                    f,
                    "  {}: {} vs {}",
                    d.path,
                    show(d.a.as_ref()),
                    show(d.b.as_ref())
                )?;
                if let (Some(abs), Some(rel)) = (d.abs_diff, d.rel_diff) {
                    write!(f, " (abs {abs:.3e}, rel {rel:.3e})")?;
                }
                writeln!(f)?;
            }
            if s.fields.len() < s.fields_differing {
                writeln!(f, "  ... {} more", s.fields_differing - s.fields.len())?;
            }
        }
        if !self.fields.is_empty() {
            writeln!(
                f,
                "fields that diverge (steps, first step, max abs, max rel):"
            )?;
            for (path, s) in &self.fields {
                write!(f, "  {path}: {} steps from step {}", s.steps, s.first_step)?;
                if let (Some(abs), Some(rel)) = (s.max_abs_diff, s.max_rel_diff) {
                    write!(f, ", {abs:.3e}, {rel:.3e}")?;
                }
                writeln!(f)?;
            }
        }
        if self.missing_in_b > 0 {
            writeln!(
                f,
                "{} has {} steps more than {} (from line {})",
                self.a,
                self.missing_in_b,
                self.b,
                self.first_unpaired_line.unwrap_or(0)
            )?;
        }
        if self.extra_in_b > 0 {
            writeln!(
                f,
                "{} has {} steps more than {} (from line {})",
                self.b,
                self.extra_in_b,
                self.a,
                self.first_unpaired_line.unwrap_or(0)
            )?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(a: &str, b: &str, tol: Tolerance) -> Result<DiffReport, DiffError> {
        diff_traces(
            a.as_bytes(),
            "a",
            b.as_bytes(),
            "b",
            &DiffOptions {
                tolerance: tol,
                ..DiffOptions::default()
            },
        )
    }

    const A: &str = r#"{"t": 0.0, "cmd": {"heading_rad": 0.5, "speed": 0.2}, "mode": "follow", "n": 3}
{"t": 0.1, "cmd": {"heading_rad": 0.5, "speed": 0.2}, "mode": "follow", "n": 3}

{"t": 0.2, "cmd": {"heading_rad": 0.5, "speed": 0.2}, "mode": "follow", "n": 3, "why": [1, 2]}
"#;

    #[test]
    fn identical_traces_are_same() {
        let r = run(A, A, Tolerance::default()).unwrap();
        assert_eq!(r.verdict(), Verdict::Same);
        assert_eq!(r.steps_compared, 3);
        assert_eq!(Verdict::Same.exit_code(), 0);
    }

    #[test]
    fn first_divergence_names_fields_lines_and_sizes() {
        let b = A
            .replace(
                r#""t": 0.1, "cmd": {"heading_rad": 0.5"#,
                r#""t": 0.1, "cmd": {"heading_rad": 0.75"#,
            )
            .replace(r#""why": [1, 2]"#, r#""why": [1, 2, 4]"#)
            .replace("\n\n", "\n");
        let r = run(A, &b, Tolerance::default()).unwrap();
        assert_eq!(r.verdict(), Verdict::Different);
        assert_eq!(Verdict::of(&Ok(r.clone())).exit_code(), 1);
        assert_eq!(r.diverging_steps, 2);
        let first = r.first.as_ref().unwrap();
        assert_eq!((first.step, first.line_a, first.line_b), (1, 2, 2));
        assert_eq!(first.fields.len(), 1);
        let d = &first.fields[0];
        assert_eq!(d.path, "cmd.heading_rad");
        assert_eq!(d.abs_diff, Some(0.25));
        assert_eq!(d.rel_diff, Some(0.25 / 0.75));
        // The array grew: the new element is absent in A. Step 2 sits on
        // line 4 of A (after a blank line) and line 3 of B.
        let s = &r.fields["why[2]"];
        assert_eq!((s.steps, s.first_step), (1, 2));
        assert_eq!(r.fields.len(), 2);
    }

    #[test]
    fn tolerance_applies_to_floats_only() {
        let a = "{\"x\": 1.0, \"k\": 10}\n";
        let b = "{\"x\": 1.001, \"k\": 11}\n";
        let r = run(
            a,
            b,
            Tolerance {
                abs: 0.01,
                rel: 0.0,
            },
        )
        .unwrap();
        assert_eq!(r.verdict(), Verdict::Different);
        assert_eq!(r.fields.keys().collect::<Vec<_>>(), ["k"]);
        let r = run(
            a,
            "{\"x\": 1.001, \"k\": 10}\n",
            Tolerance {
                abs: 0.0,
                rel: 2e-3,
            },
        );
        assert_eq!(r.unwrap().verdict(), Verdict::Same);
        let r = run(
            a,
            "{\"x\": 1.001, \"k\": 10}\n",
            Tolerance {
                abs: 0.0,
                rel: 5e-4,
            },
        );
        assert_eq!(r.unwrap().verdict(), Verdict::Different);
    }

    #[test]
    fn types_and_absent_fields_differ() {
        let r = run(
            "{\"a\": null, \"b\": 1}\n",
            "{\"a\": 0, \"c\": 1}\n",
            Tolerance::default(),
        )
        .unwrap();
        let f = &r.first.unwrap().fields;
        let paths: Vec<&str> = f.iter().map(|d| d.path.as_str()).collect();
        assert_eq!(paths, ["a", "b", "c"]);
        assert_eq!(f[1].b, None);
        assert_eq!(f[2].a, None);
    }

    #[test]
    fn length_mismatch_is_different() {
        let two = "{\"a\": 1}\n{\"a\": 1}\n";
        let r = run(two, "{\"a\": 1}\n", Tolerance::default()).unwrap();
        assert_eq!((r.missing_in_b, r.extra_in_b), (1, 0));
        assert_eq!(r.first_unpaired_line, Some(2));
        assert_eq!(r.verdict(), Verdict::Different);
        let r = run("", two, Tolerance::default()).unwrap();
        assert_eq!((r.missing_in_b, r.extra_in_b), (0, 2));
    }

    #[test]
    fn malformed_json_names_file_line_and_column() {
        let bad = "{\"a\": 1}\n{\"a\": 1,, }\n";
        let e = run("{\"a\": 1}\n{\"a\": 1}\n", bad, Tolerance::default()).unwrap_err();
        match &e {
            DiffError::Json {
                file, line, column, ..
            } => assert_eq!((file.as_str(), *line, *column), ("b", 2, 9)),
            other => panic!("{other}"),
        }
        assert!(e.to_string().starts_with("b:2:9: not JSON"));
        assert_eq!(Verdict::of(&Err(e)).exit_code(), 2);
        // A line cut short: the column is the end of that line.
        let e = run("{\"t\":\n", "{}\n", Tolerance::default()).unwrap_err();
        assert!(e.to_string().starts_with("a:1:5: not JSON: EOF"), "{e}");
        assert!(!e.to_string().contains("at line"), "{e}");
        let e = run("[1, 2]\n", "{}\n", Tolerance::default()).unwrap_err();
        assert!(matches!(e, DiffError::NotObject { line: 1, .. }));
    }
}
