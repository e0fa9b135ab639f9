//! Turn a CSV rig log into an Upcurrent log, through a mapping file.
//!
//! # The CSV
//! A subset of RFC 4180: comma-separated, first non-comment line is the
//! header of column names, fields may be double-quoted (a quote inside is
//! doubled, quoted fields may span lines), LF or CRLF line ends. Lines
//! starting with `#` before the header are comments; blank lines are
//! skipped. An empty cell is a missing value; `NaN` is a value (kept, so
//! `inspect` counts it).
//!
//! # The mapping file (TOML)
//! ```toml
//! [time]                      # required
//! column = "t_ms"
//! unit = "ms"                 # s | ms | us | ns  (or `scale` = seconds per raw unit)
//! offset_s = 0.0              # optional, added after scaling
//!
//! [ports]                     # optional: port pressures, port 0 first
//! columns = ["p0", "p1", "p2", "p3", "p4", "p5", "p6"]
//! unit = "kPa"                # Pa | kPa | mbar | bar | psi
//! reference = "absolute"      # absolute | gauge (then `ambient_pa` is required)
//!
//! [pose]                      # optional: all seven cells present, or none
//! position = ["x_mm", "y_mm", "z_mm"]
//! length_unit = "mm"          # m | cm | mm | in | ft
//! orientation_wxyz = ["qw", "qx", "qy", "qz"]
//! position_sigma_m = 0.005
//! attitude_sigma_rad = 0.01
//!
//! [joints]                    # optional: one pitch and one yaw column per joint
//! pitch = ["j0_pitch", "j1_pitch"]
//! yaw = ["j0_yaw", "j1_yaw"]
//! angle_unit = "deg"          # rad | deg
//!
//! [temperature]               # optional: total temperature at the head
//! column = "t0_c"
//! unit = "degC"               # K | degC
//!
//! [contacts]                  # optional
//! force_unit = "N"            # N | lbf | kgf
//! min_force_n = 0.05          # smaller forces are no contact
//! [[contacts.sensor]]         # one force column per sensor
//! module = 1
//! sensor = 0
//! force = "f1_0"
//! [[contacts.triple]]         # module, sensor and force columns per slot
//! module = "c0_module"
//! sensor = "c0_sensor"
//! force = "c0_force"
//!
//! [notes]                     # optional: a non-empty cell becomes a note event
//! column = "remark"
//!
//! [rig]                       # required: what the log header says
//! frame_period_s = 0.01
//! gas = { gamma = 1.4, r_j_per_kg_k = 287.05 }
//! navigator = { }             # optional, any table: the navigator settings
//! [rig.robot]                 # a `RobotSpec`
//! # ...
//!
//! [provenance]                # optional free-form strings, copied to the header
//! rig = "bench 2"
//! ```
//! Port pressures are written as absolute pascals; a missing port cell in a
//! row whose other ports are present becomes NaN (the navigator's port
//! health sees it). A pose or joint set with some cells missing is an
//! error. Errors name the CSV line, data row and column at fault, or the
//! mapping file line.

use std::collections::BTreeMap;
use std::io::{BufRead, Write};
use std::path::Path;

use serde::{Deserialize, Serialize};
use toml::Spanned;

use crate::log::{Event, EventRecord, LogError, LogHeader, LogWriter};
use crate::record::{
    ContactRecord, FrameRecord, GasSpec, JointRecord, PoseRecord, ProbeLayoutSpec, RobotSpec,
};

/// Unit conversion factors to SI, each with its source.
pub mod units {
    /// Pa per kPa: SI prefix kilo = 10^3 (NIST SP 811, 2008, Table 5).
    pub const PA_PER_KPA: f64 = 1e3;
    /// Pa per bar: 1 bar = 0.1 MPa = 10^5 Pa exactly (NIST SP 811, 2008,
    /// Table 8).
    pub const PA_PER_BAR: f64 = 1e5;
    /// Pa per mbar: 10^-3 bar (from [`PA_PER_BAR`]).
    pub const PA_PER_MBAR: f64 = 100.0;
    /// N per lbf: avoirdupois pound 0.453 592 37 kg times standard gravity
    /// 9.806 65 m/s^2, both exact by definition; NIST SP 811 (2008)
    /// Appendix B.8 prints 4.448 222 E+00 (recalled from memory).
    pub const N_PER_LBF: f64 = 0.453_592_37 * 9.806_65;
    /// m per inch: 0.0254 exactly (NIST SP 811, 2008, Appendix B.8).
    pub const M_PER_IN: f64 = 0.0254;
    /// m per foot: 0.3048 exactly (NIST SP 811, 2008, Appendix B.8).
    pub const M_PER_FT: f64 = 0.3048;
    /// Pa per psi (lbf/in^2), from the exact definitions above; NIST SP 811
    /// (2008) Appendix B.8 prints 6.894 757 E+03 (recalled from memory).
    pub const PA_PER_PSI: f64 = N_PER_LBF / (M_PER_IN * M_PER_IN);
    /// N per kgf: standard gravity 9.806 65 m/s^2, exact (NIST SP 811,
    /// 2008, Appendix B.8).
    pub const N_PER_KGF: f64 = 9.806_65;
    /// K at 0 degC: T/K = t/degC + 273.15 exactly (NIST SP 811, 2008,
    /// section 4.2.1.1).
    pub const K_AT_0_DEGC: f64 = 273.15;
}

/// Why an import failed.
#[derive(Debug)]
pub enum ImportError {
    /// A file could not be opened, read or written.
    Io {
        /// The file.
        file: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The mapping file is wrong.
    Mapping {
        /// The mapping file.
        file: String,
        /// Line at fault, 1-based, when known.
        line: Option<u64>,
        /// What is wrong.
        message: String,
    },
    /// A CSV cell or line is wrong.
    Csv {
        /// The CSV file.
        file: String,
        /// Physical line, 1-based.
        line: u64,
        /// Data row, 1-based (0: the header row).
        row: u64,
        /// Column name and 1-based position, when one column is at fault.
        column: Option<(String, usize)>,
        /// What is wrong.
        message: String,
    },
    /// Writing the log failed.
    Log(LogError),
}

impl std::fmt::Display for ImportError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Io { file, source } => write!(f, "{file}: {source}"),
            Self::Mapping {
                file,
                line: Some(l),
                message,
            } => write!(f, "{file}:{l}: {message}"),
            Self::Mapping {
                file,
                line: None,
                message,
            } => write!(f, "{file}: {message}"),
            Self::Csv {
                file,
                line,
                row,
                column,
                message,
            } => {
                write!(f, "{file}:{line}: row {row}")?;
                if let Some((name, pos)) = column {
                    write!(f, ", column \"{name}\" (#{pos})")?;
                }
                write!(f, ": {message}")
            }
            Self::Log(e) => write!(f, "writing the log: {e}"),
        }
    }
}

impl std::error::Error for ImportError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Io { source, .. } => Some(source),
            Self::Log(e) => Some(e),
            _ => None,
        }
    }
}

impl From<LogError> for ImportError {
    fn from(e: LogError) -> Self {
        Self::Log(e)
    }
}

// ---- mapping file, as written ----

type Col = Spanned<String>;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMapping {
    time: RawTime,
    ports: Option<RawPorts>,
    pose: Option<RawPose>,
    joints: Option<RawJoints>,
    temperature: Option<RawTemperature>,
    contacts: Option<RawContacts>,
    notes: Option<RawNotes>,
    rig: RawRig,
    #[serde(default)]
    provenance: BTreeMap<String, String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTime {
    column: Col,
    unit: Option<Spanned<String>>,
    scale: Option<Spanned<f64>>,
    offset_s: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawPorts {
    columns: Spanned<Vec<Col>>,
    unit: Spanned<String>,
    reference: Option<Spanned<String>>,
    ambient_pa: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawPose {
    position: Spanned<Vec<Col>>,
    length_unit: Option<Spanned<String>>,
    orientation_wxyz: Spanned<Vec<Col>>,
    position_sigma_m: f64,
    attitude_sigma_rad: f64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawJoints {
    pitch: Spanned<Vec<Col>>,
    yaw: Spanned<Vec<Col>>,
    angle_unit: Option<Spanned<String>>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTemperature {
    column: Col,
    unit: Spanned<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawContacts {
    force_unit: Option<Spanned<String>>,
    min_force_n: Option<f64>,
    #[serde(default)]
    sensor: Vec<Spanned<RawSensorColumn>>,
    #[serde(default)]
    triple: Vec<RawTriple>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSensorColumn {
    module: u16,
    sensor: u16,
    force: Col,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTriple {
    module: Col,
    sensor: Col,
    force: Col,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawNotes {
    column: Col,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawRig {
    frame_period_s: Option<f64>,
    gas: GasSpec,
    robot: RobotSpec,
    navigator: Option<toml::Value>,
}

// ---- mapping, resolved ----

/// A column named by the mapping, with the mapping line that names it.
#[derive(Debug, Clone, PartialEq, Eq)]
struct ColRef {
    name: String,
    line: u64,
}

#[derive(Debug, Clone, PartialEq)]
struct PortsMap {
    cols: Vec<ColRef>,
    pa_per_unit: f64,
    ambient_pa: f64,
}

#[derive(Debug, Clone, PartialEq)]
struct PoseMap {
    position: Vec<ColRef>,
    m_per_unit: f64,
    orientation: Vec<ColRef>,
    position_sigma_m: f64,
    attitude_sigma_rad: f64,
}

#[derive(Debug, Clone, PartialEq)]
struct JointsMap {
    pitch: Vec<ColRef>,
    yaw: Vec<ColRef>,
    rad_per_unit: f64,
}

#[derive(Debug, Clone, PartialEq)]
struct SensorColumn {
    module: u16,
    sensor: u16,
    force: ColRef,
}

#[derive(Debug, Clone, PartialEq)]
struct Triple {
    module: ColRef,
    sensor: ColRef,
    force: ColRef,
}

#[derive(Debug, Clone, PartialEq)]
struct ContactsMap {
    n_per_unit: f64,
    min_force_n: f64,
    sensors: Vec<SensorColumn>,
    triples: Vec<Triple>,
}

/// A checked mapping file: which CSV columns feed which channels, in which
/// units, and the log header to write.
#[derive(Debug, Clone, PartialEq)]
pub struct Mapping {
    file: String,
    header: LogHeader,
    time: ColRef,
    s_per_unit: f64,
    offset_s: f64,
    ports: Option<PortsMap>,
    pose: Option<PoseMap>,
    joints: Option<JointsMap>,
    temperature: Option<(ColRef, f64)>,
    contacts: Option<ContactsMap>,
    notes: Option<ColRef>,
}

fn line_of(text: &str, at: usize) -> u64 {
    let upto = text.get(..at).unwrap_or(text);
    upto.bytes().filter(|&b| b == b'\n').count() as u64 + 1
}

struct Ctx<'a> {
    text: &'a str,
    file: &'a str,
}

impl Ctx<'_> {
    fn err(&self, span: Option<std::ops::Range<usize>>, message: String) -> ImportError {
        ImportError::Mapping {
            file: self.file.to_owned(),
            line: span.map(|s| line_of(self.text, s.start)),
            message,
        }
    }

    fn col(&self, c: &Col) -> ColRef {
        ColRef {
            name: c.get_ref().clone(),
            line: line_of(self.text, c.span().start),
        }
    }

    fn cols(
        &self,
        cs: &Spanned<Vec<Col>>,
        want: Option<usize>,
        what: &str,
    ) -> Result<Vec<ColRef>, ImportError> {
        if let Some(n) = want
            && cs.get_ref().len() != n
        {
            return Err(self.err(
                Some(cs.span()),
                format!(
                    "{what} needs {n} columns, the mapping names {}",
                    cs.get_ref().len()
                ),
            ));
        }
        Ok(cs.get_ref().iter().map(|c| self.col(c)).collect())
    }

    /// Look a unit up in a table of (symbol, factor).
    fn unit(
        &self,
        u: Option<&Spanned<String>>,
        table: &[(&str, f64)],
        default: f64,
        what: &str,
    ) -> Result<f64, ImportError> {
        let Some(u) = u else {
            return Ok(default);
        };
        table
            .iter()
            .find(|(sym, _)| *sym == u.get_ref().as_str())
            .map(|(_, f)| *f)
            .ok_or_else(|| {
                let known: Vec<&str> = table.iter().map(|(s, _)| *s).collect();
                self.err(
                    Some(u.span()),
                    format!(
                        "unknown {what} unit \"{}\" (known: {})",
                        u.get_ref(),
                        known.join(", ")
                    ),
                )
            })
    }
}

const TIME_UNITS: [(&str, f64); 4] = [("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("ns", 1e-9)];
const PRESSURE_UNITS: [(&str, f64); 5] = [
    ("Pa", 1.0),
    ("kPa", units::PA_PER_KPA),
    ("mbar", units::PA_PER_MBAR),
    ("bar", units::PA_PER_BAR),
    ("psi", units::PA_PER_PSI),
];
const LENGTH_UNITS: [(&str, f64); 5] = [
    ("m", 1.0),
    ("cm", 1e-2),
    ("mm", 1e-3),
    ("in", units::M_PER_IN),
    ("ft", units::M_PER_FT),
];
const ANGLE_UNITS: [(&str, f64); 2] = [("rad", 1.0), ("deg", std::f64::consts::PI / 180.0)];
const FORCE_UNITS: [(&str, f64); 3] = [
    ("N", 1.0),
    ("lbf", units::N_PER_LBF),
    ("kgf", units::N_PER_KGF),
];

fn port_count(layout: &ProbeLayoutSpec) -> usize {
    match layout {
        ProbeLayoutSpec::FivePort { .. } => 5,
        ProbeLayoutSpec::SevenPort { .. } => 7,
        ProbeLayoutSpec::Custom { normals } => normals.len(),
    }
}

impl Mapping {
    /// Parse and check a mapping file's text (`file` names it in errors).
    ///
    /// # Errors
    /// [`ImportError::Mapping`] with the line at fault: TOML syntax, unknown
    /// keys, unknown units, column counts that do not match the robot,
    /// contact sensors the robot does not have.
    pub fn parse(text: &str, file: &str) -> Result<Self, ImportError> {
        let cx = Ctx { text, file };
        let raw: RawMapping =
            toml::from_str(text).map_err(|e| cx.err(e.span(), e.message().to_owned()))?;
        let robot = &raw.rig.robot;

        let s_per_unit = match (&raw.time.scale, &raw.time.unit) {
            (Some(s), None) if *s.get_ref() > 0.0 && s.get_ref().is_finite() => *s.get_ref(),
            (Some(s), None) => {
                return Err(cx.err(Some(s.span()), "time scale must be positive".to_owned()));
            }
            (Some(s), Some(_)) => {
                return Err(cx.err(
                    Some(s.span()),
                    "give time `unit` or `scale`, not both".to_owned(),
                ));
            }
            (None, u) => cx.unit(u.as_ref(), &TIME_UNITS, 1.0, "time")?,
        };

        let ports = match &raw.ports {
            None => None,
            Some(p) => {
                let n = port_count(&robot.probe.layout);
                let cols = cx.cols(&p.columns, Some(n), "the probe layout")?;
                let pa_per_unit = cx.unit(Some(&p.unit), &PRESSURE_UNITS, 1.0, "pressure")?;
                let ambient_pa = match p
                    .reference
                    .as_ref()
                    .map(|r| (r.get_ref().as_str(), r.span()))
                {
                    None | Some(("absolute", _)) => 0.0,
                    Some(("gauge", span)) => p.ambient_pa.ok_or_else(|| {
                        cx.err(Some(span), "gauge pressures need `ambient_pa`".to_owned())
                    })?,
                    Some((other, span)) => {
                        return Err(cx.err(
                            Some(span),
                            format!("reference \"{other}\": use \"absolute\" or \"gauge\""),
                        ));
                    }
                };
                Some(PortsMap {
                    cols,
                    pa_per_unit,
                    ambient_pa,
                })
            }
        };

        let pose = match &raw.pose {
            None => None,
            Some(p) => Some(PoseMap {
                position: cx.cols(&p.position, Some(3), "a position")?,
                m_per_unit: cx.unit(p.length_unit.as_ref(), &LENGTH_UNITS, 1.0, "length")?,
                orientation: cx.cols(&p.orientation_wxyz, Some(4), "a quaternion")?,
                position_sigma_m: p.position_sigma_m,
                attitude_sigma_rad: p.attitude_sigma_rad,
            }),
        };

        let joints = match &raw.joints {
            None => None,
            Some(j) => {
                let n = robot.modules.len().saturating_sub(1);
                Some(JointsMap {
                    pitch: cx.cols(&j.pitch, Some(n), "the module chain's joints")?,
                    yaw: cx.cols(&j.yaw, Some(n), "the module chain's joints")?,
                    rad_per_unit: cx.unit(j.angle_unit.as_ref(), &ANGLE_UNITS, 1.0, "angle")?,
                })
            }
        };

        let temperature = match &raw.temperature {
            None => None,
            Some(t) => {
                let offset = match t.unit.get_ref().as_str() {
                    "K" => 0.0,
                    "degC" => units::K_AT_0_DEGC,
                    other => {
                        return Err(cx.err(
                            Some(t.unit.span()),
                            format!("unknown temperature unit \"{other}\" (known: K, degC)"),
                        ));
                    }
                };
                Some((cx.col(&t.column), offset))
            }
        };

        let contacts = match &raw.contacts {
            None => None,
            Some(c) => {
                let mut sensors = Vec::new();
                for s in &c.sensor {
                    let v = s.get_ref();
                    let known = robot
                        .modules
                        .get(usize::from(v.module))
                        .is_some_and(|m| usize::from(v.sensor) < m.sensors.len());
                    if !known {
                        return Err(cx.err(
                            Some(s.span()),
                            format!(
                                "the robot has no contact sensor {} on module {}",
                                v.sensor, v.module
                            ),
                        ));
                    }
                    sensors.push(SensorColumn {
                        module: v.module,
                        sensor: v.sensor,
                        force: cx.col(&v.force),
                    });
                }
                let triples = c
                    .triple
                    .iter()
                    .map(|t| Triple {
                        module: cx.col(&t.module),
                        sensor: cx.col(&t.sensor),
                        force: cx.col(&t.force),
                    })
                    .collect();
                Some(ContactsMap {
                    n_per_unit: cx.unit(c.force_unit.as_ref(), &FORCE_UNITS, 1.0, "force")?,
                    min_force_n: c.min_force_n.unwrap_or(0.0),
                    sensors,
                    triples,
                })
            }
        };

        let mut header = LogHeader::new(raw.rig.robot.clone(), raw.rig.gas);
        header.frame_period_s = raw.rig.frame_period_s;
        if let Some(nav) = &raw.rig.navigator {
            header.navigator_config = serde_json::to_value(nav)
                .map_err(|e| cx.err(None, format!("rig.navigator: {e}")))?;
        }
        header.provenance = raw.provenance.clone();
        header
            .provenance
            .insert("mapping".to_owned(), file.to_owned());

        Ok(Self {
            file: file.to_owned(),
            header,
            time: cx.col(&raw.time.column),
            s_per_unit,
            offset_s: raw.time.offset_s.unwrap_or(0.0),
            ports,
            pose,
            joints,
            temperature,
            contacts,
            notes: raw.notes.as_ref().map(|n| cx.col(&n.column)),
        })
    }

    /// Read and check a mapping file.
    ///
    /// # Errors
    /// [`ImportError::Io`], or as [`Mapping::parse`].
    pub fn load(path: &Path) -> Result<Self, ImportError> {
        let file = path.display().to_string();
        let text = std::fs::read_to_string(path).map_err(|source| ImportError::Io {
            file: file.clone(),
            source,
        })?;
        Self::parse(&text, &file)
    }

    /// The log header this mapping writes (before the importer adds the
    /// CSV's name to the provenance).
    #[must_use]
    pub fn header(&self) -> &LogHeader {
        &self.header
    }
}

// ---- CSV ----

/// One CSV record: its fields and the physical line it starts on.
struct CsvReader<R: BufRead> {
    src: R,
    file: String,
    line: u64,
    text: String,
}

impl<R: BufRead> CsvReader<R> {
    fn err(&self, line: u64, row: u64, message: String) -> ImportError {
        ImportError::Csv {
            file: self.file.clone(),
            line,
            row,
            column: None,
            message,
        }
    }

    fn read_line(&mut self) -> Result<bool, ImportError> {
        self.text.clear();
        let n = self
            .src
            .read_line(&mut self.text)
            .map_err(|source| ImportError::Io {
                file: self.file.clone(),
                source,
            })?;
        if n > 0 {
            self.line += 1;
        }
        Ok(n > 0)
    }

    /// The next record (skipping blank lines, and `#` lines when
    /// `comments`), as (first line, fields).
    fn next(
        &mut self,
        row: u64,
        comments: bool,
        fields: &mut Vec<String>,
    ) -> Result<Option<u64>, ImportError> {
        loop {
            if !self.read_line()? {
                return Ok(None);
            }
            let t = self.text.trim_end_matches(['\n', '\r']);
            if t.trim().is_empty() || (comments && t.starts_with('#')) {
                continue;
            }
            break;
        }
        let start = self.line;
        fields.clear();
        let mut field = String::new();
        let mut in_quotes = false;
        let mut after_quote = false;
        let mut at_field_start = true;
        loop {
            let line = std::mem::take(&mut self.text);
            let mut chars = line.chars().peekable();
            while let Some(c) = chars.next() {
                if in_quotes {
                    if c == '"' {
                        if chars.peek() == Some(&'"') {
                            chars.next();
                            field.push('"');
                        } else {
                            in_quotes = false;
                            after_quote = true;
                        }
                    } else {
                        field.push(c);
                    }
                    continue;
                }
                match c {
                    ',' => {
                        fields.push(std::mem::take(&mut field));
                        after_quote = false;
                        at_field_start = true;
                        continue;
                    }
                    '\r' | '\n' => continue,
                    '"' if at_field_start => in_quotes = true,
                    _ if after_quote => {
                        return Err(self.err(
                            self.line,
                            row,
                            format!("text after a closing quote in field {}", fields.len() + 1),
                        ));
                    }
                    '"' => {
                        return Err(self.err(
                            self.line,
                            row,
                            format!(
                                "quote inside an unquoted field {} (quote the whole field)",
                                fields.len() + 1
                            ),
                        ));
                    }
                    _ => field.push(c),
                }
                at_field_start = false;
            }
            self.text = line;
            if !in_quotes {
                break;
            }
            // A quoted field goes on over the line end.
            field.push('\n');
            if !self.read_line()? {
                return Err(self.err(start, row, "quoted field not closed".to_owned()));
            }
        }
        fields.push(field);
        Ok(Some(start))
    }
}

// ---- import ----

/// What an import did.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ImportSummary {
    /// Data rows read.
    pub rows: u64,
    /// Frames written (one per row).
    pub frames: u64,
    /// Note events written.
    pub notes: u64,
    /// Rows with no port pressures.
    pub rows_without_ports: u64,
    /// Port cells missing in rows that had other ports (written as NaN).
    pub missing_port_cells: u64,
    /// Rows with no pose.
    pub rows_without_pose: u64,
    /// Rows with no joint angles.
    pub rows_without_joints: u64,
    /// Contacts written.
    pub contacts: u64,
    /// First time, s.
    pub first_time_s: Option<f64>,
    /// Last time, s.
    pub last_time_s: Option<f64>,
    /// Log size, bytes.
    pub bytes: u64,
    /// Cells holding NaN (kept as values; `inspect` counts them).
    pub nan_cells: u64,
    /// Cells holding an infinite value (kept as values, like NaN).
    pub infinite_cells: u64,
    /// Where the first NaN or infinite cell is: CSV line (1-based) and
    /// column name.
    pub first_non_finite: Option<(u64, String)>,
}

/// A mapped column bound to its position in the CSV.
#[derive(Debug, Clone, Copy)]
struct Bound {
    idx: usize,
}

struct Row<'a> {
    file: &'a str,
    names: &'a [String],
    fields: &'a [String],
    line: u64,
    row: u64,
    /// NaN and infinite cells read so far in this row, and the first
    /// column (0-based) holding one.
    non_finite: std::cell::Cell<(u64, u64, Option<usize>)>,
}

impl Row<'_> {
    fn err(&self, b: Bound, message: String) -> ImportError {
        ImportError::Csv {
            file: self.file.to_owned(),
            line: self.line,
            row: self.row,
            column: Some((self.names[b.idx].clone(), b.idx + 1)),
            message,
        }
    }

    fn cell(&self, b: Bound) -> &str {
        self.fields[b.idx].trim()
    }

    /// A number, or `None` for an empty cell.
    fn num(&self, b: Bound) -> Result<Option<f64>, ImportError> {
        let s = self.cell(b);
        if s.is_empty() {
            return Ok(None);
        }
        let v = s
            .parse::<f64>()
            .map_err(|_| self.err(b, format!("\"{s}\" is not a number")))?;
        if !v.is_finite() {
            let (nan, inf, first) = self.non_finite.get();
            self.non_finite.set((
                nan + u64::from(v.is_nan()),
                inf + u64::from(v.is_infinite()),
                first.or(Some(b.idx)),
            ));
        }
        Ok(Some(v))
    }

    fn index(&self, b: Bound) -> Result<Option<u16>, ImportError> {
        let s = self.cell(b);
        if s.is_empty() {
            return Ok(None);
        }
        s.parse::<u16>()
            .map(Some)
            .map_err(|_| self.err(b, format!("\"{s}\" is not an index (0 to 65535)")))
    }

    /// All present (values), all missing (`None`), or an error at the first
    /// missing cell.
    fn all_or_none(&self, bs: &[Bound], what: &str) -> Result<Option<Vec<f64>>, ImportError> {
        let vals = bs
            .iter()
            .map(|&b| self.num(b))
            .collect::<Result<Vec<_>, _>>()?;
        if vals.iter().all(Option::is_none) {
            return Ok(None);
        }
        if let Some(i) = vals.iter().position(Option::is_none) {
            return Err(self.err(bs[i], format!("{what} is partly missing")));
        }
        Ok(Some(vals.into_iter().flatten().collect()))
    }
}

/// A writer that counts what goes through it.
struct Counted<W: Write> {
    out: W,
    bytes: u64,
}

impl<W: Write> Write for Counted<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let n = self.out.write(buf)?;
        self.bytes += n as u64;
        Ok(n)
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.out.flush()
    }
}

impl<W: Write> std::fmt::Debug for Counted<W> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "Counted({} bytes)", self.bytes)
    }
}

/// Import a CSV rig log read from `csv` (named `csv_name` in errors and in
/// the header's provenance) through `mapping`, writing the log to `out`.
///
/// # Errors
/// [`ImportError`] naming the CSV line, row and column, or the mapping
/// line, at fault; or a log write error.
pub fn import_csv<R: BufRead, W: Write>(
    csv: R,
    csv_name: &str,
    mapping: &Mapping,
    out: W,
) -> Result<ImportSummary, ImportError> {
    let mut reader = CsvReader {
        src: csv,
        file: csv_name.to_owned(),
        line: 0,
        text: String::new(),
    };
    let mut names = Vec::new();
    let Some(header_line) = reader.next(0, true, &mut names)? else {
        // Lines count from 1: an empty file fails at its first line.
        return Err(reader.err(reader.line.max(1), 0, "no header row".to_owned()));
    };
    for n in &mut names {
        *n = n.trim().to_owned();
    }
    for (i, n) in names.iter().enumerate() {
        if names[..i].contains(n) {
            return Err(ImportError::Csv {
                file: csv_name.to_owned(),
                line: header_line,
                row: 0,
                column: Some((n.clone(), i + 1)),
                message: "column name appears twice".to_owned(),
            });
        }
    }
    let bind = |c: &ColRef| -> Result<Bound, ImportError> {
        names
            .iter()
            .position(|n| *n == c.name)
            .map(|idx| Bound { idx })
            .ok_or_else(|| ImportError::Mapping {
                file: mapping.file.clone(),
                line: Some(c.line),
                message: format!(
                    "column \"{}\" is not in the header of {csv_name} (line {header_line})",
                    c.name
                ),
            })
    };
    let bind_all = |cs: &[ColRef]| cs.iter().map(bind).collect::<Result<Vec<_>, _>>();
    let time = bind(&mapping.time)?;
    let ports = match &mapping.ports {
        Some(p) => Some((bind_all(&p.cols)?, p)),
        None => None,
    };
    let pose = match &mapping.pose {
        Some(p) => Some((bind_all(&p.position)?, bind_all(&p.orientation)?, p)),
        None => None,
    };
    let joints = match &mapping.joints {
        Some(j) => Some((bind_all(&j.pitch)?, bind_all(&j.yaw)?, j)),
        None => None,
    };
    let temperature = match &mapping.temperature {
        Some((c, off)) => Some((bind(c)?, *off)),
        None => None,
    };
    let contacts = match &mapping.contacts {
        Some(c) => {
            let sensors = c
                .sensors
                .iter()
                .map(|s| Ok((bind(&s.force)?, s.module, s.sensor)))
                .collect::<Result<Vec<_>, ImportError>>()?;
            let triples = c
                .triples
                .iter()
                .map(|t| Ok((bind(&t.module)?, bind(&t.sensor)?, bind(&t.force)?)))
                .collect::<Result<Vec<_>, ImportError>>()?;
            Some((sensors, triples, c))
        }
        None => None,
    };
    let notes = mapping.notes.as_ref().map(bind).transpose()?;

    let mut header = mapping.header.clone();
    header
        .provenance
        .insert("source_csv".to_owned(), csv_name.to_owned());
    header
        .provenance
        .insert("made_by".to_owned(), "replay import".to_owned());
    let robot = header.robot.clone();
    let mut w = LogWriter::new(Counted { out, bytes: 0 }, &header)?;
    let mut sum = ImportSummary {
        rows: 0,
        frames: 0,
        notes: 0,
        rows_without_ports: 0,
        missing_port_cells: 0,
        rows_without_pose: 0,
        rows_without_joints: 0,
        contacts: 0,
        first_time_s: None,
        last_time_s: None,
        bytes: 0,
        nan_cells: 0,
        infinite_cells: 0,
        first_non_finite: None,
    };
    let mut fields = Vec::new();
    loop {
        let row_no = sum.rows + 1;
        let Some(line) = reader.next(row_no, false, &mut fields)? else {
            break;
        };
        sum.rows = row_no;
        if fields.len() != names.len() {
            return Err(reader.err(
                line,
                row_no,
                format!("{} fields, the header has {}", fields.len(), names.len()),
            ));
        }
        let row = Row {
            file: csv_name,
            names: &names,
            fields: &fields,
            line,
            row: row_no,
            non_finite: std::cell::Cell::new((0, 0, None)),
        };
        let raw_t = row
            .num(time)?
            .ok_or_else(|| row.err(time, "time is missing".to_owned()))?;
        let time_s = raw_t * mapping.s_per_unit + mapping.offset_s;
        if !time_s.is_finite() {
            return Err(row.err(time, "time is not finite".to_owned()));
        }
        let mut frame = FrameRecord {
            time_s,
            pose: None,
            joints: None,
            port_pressures_pa: None,
            total_temperature_k: None,
            contacts: Vec::new(),
            contacts_reported: true,
        };
        if let Some((bs, p)) = &ports {
            let vals = bs
                .iter()
                .map(|&b| row.num(b))
                .collect::<Result<Vec<_>, _>>()?;
            if vals.iter().all(Option::is_none) {
                sum.rows_without_ports += 1;
            } else {
                sum.missing_port_cells += vals.iter().filter(|v| v.is_none()).count() as u64;
                frame.port_pressures_pa = Some(
                    vals.iter()
                        .map(|v| v.map_or(f64::NAN, |x| x * p.pa_per_unit + p.ambient_pa))
                        .collect(),
                );
            }
        }
        if let Some((pos, ori, p)) = &pose {
            let all: Vec<Bound> = pos.iter().chain(ori.iter()).copied().collect();
            match row.all_or_none(&all, "the pose")? {
                None => sum.rows_without_pose += 1,
                Some(v) => {
                    frame.pose = Some(PoseRecord {
                        position_m: [
                            v[0] * p.m_per_unit,
                            v[1] * p.m_per_unit,
                            v[2] * p.m_per_unit,
                        ],
                        orientation_wxyz: [v[3], v[4], v[5], v[6]],
                        position_sigma_m: p.position_sigma_m,
                        attitude_sigma_rad: p.attitude_sigma_rad,
                    });
                }
            }
        }
        if let Some((pitch, yaw, j)) = &joints {
            let all: Vec<Bound> = pitch.iter().chain(yaw.iter()).copied().collect();
            match row.all_or_none(&all, "the joint set")? {
                None => sum.rows_without_joints += 1,
                Some(v) => {
                    let n = pitch.len();
                    frame.joints = Some(
                        (0..n)
                            .map(|k| JointRecord {
                                pitch_rad: v[k] * j.rad_per_unit,
                                yaw_rad: v[n + k] * j.rad_per_unit,
                            })
                            .collect(),
                    );
                }
            }
        }
        if let Some((b, off)) = temperature {
            frame.total_temperature_k = row.num(b)?.map(|t| t + off);
        }
        if let Some((sensors, triples, c)) = &contacts {
            for &(b, module, sensor) in sensors {
                if let Some(f) = row.num(b)? {
                    let force_n = f * c.n_per_unit;
                    if force_n >= c.min_force_n {
                        frame.contacts.push(ContactRecord {
                            module,
                            sensor,
                            force_n,
                            normal_module: None,
                        });
                    }
                }
            }
            for &(bm, bs, bf) in triples {
                let (m, s, f) = (row.index(bm)?, row.index(bs)?, row.num(bf)?);
                let (module, sensor, f) = match (m, s, f) {
                    (None, None, None) => continue,
                    (Some(m), Some(s), Some(f)) => (m, s, f),
                    _ => {
                        let at = [(m.is_none(), bm), (s.is_none(), bs), (f.is_none(), bf)]
                            .into_iter()
                            .find(|(missing, _)| *missing)
                            .map_or(bf, |(_, b)| b);
                        return Err(row.err(at, "contact is partly missing".to_owned()));
                    }
                };
                let known = robot
                    .modules
                    .get(usize::from(module))
                    .is_some_and(|md| usize::from(sensor) < md.sensors.len());
                if !known {
                    return Err(row.err(
                        bs,
                        format!("the robot has no contact sensor {sensor} on module {module}"),
                    ));
                }
                let force_n = f * c.n_per_unit;
                if force_n >= c.min_force_n {
                    frame.contacts.push(ContactRecord {
                        module,
                        sensor,
                        force_n,
                        normal_module: None,
                    });
                }
            }
        }
        if let Some(b) = notes {
            let text = row.cell(b);
            if !text.is_empty() {
                w.write_event(&EventRecord {
                    time_s,
                    event: Event::Note {
                        text: text.to_owned(),
                    },
                })?;
                sum.notes += 1;
            }
        }
        let (nan, inf, first) = row.non_finite.get();
        sum.nan_cells += nan;
        sum.infinite_cells += inf;
        if sum.first_non_finite.is_none()
            && let Some(c) = first
        {
            sum.first_non_finite = Some((line, names.get(c).cloned().unwrap_or_default()));
        }
        sum.contacts += frame.contacts.len() as u64;
        sum.first_time_s.get_or_insert(time_s);
        sum.last_time_s = Some(time_s);
        w.write_frame(&frame)?;
        sum.frames += 1;
    }
    if sum.rows == 0 {
        return Err(ImportError::Csv {
            file: csv_name.to_owned(),
            line: header_line,
            row: 0,
            column: None,
            message: "a header and no data rows: nothing to import".to_owned(),
        });
    }
    let counted = w.finish("imported")?;
    sum.bytes = counted.bytes;
    Ok(sum)
}

/// Import `csv` through the mapping file `map`, writing the log to `out`.
///
/// # Errors
/// As [`import_csv`], plus [`ImportError::Io`] for the files.
pub fn import_files(csv: &Path, map: &Path, out: &Path) -> Result<ImportSummary, ImportError> {
    let mapping = Mapping::load(map)?;
    let csv_name = csv.display().to_string();
    let input = std::fs::File::open(csv).map_err(|source| ImportError::Io {
        file: csv_name.clone(),
        source,
    })?;
    let out_name = out.display().to_string();
    let file = std::fs::File::create(out).map_err(|source| ImportError::Io {
        file: out_name.clone(),
        source,
    })?;
    let result = import_csv(
        std::io::BufReader::new(input),
        &csv_name,
        &mapping,
        std::io::BufWriter::new(file),
    );
    if result.is_err() {
        // A log cut short by the error is no import: leave no file behind
        // that looks like one.
        let _ = std::fs::remove_file(out);
    }
    result
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::log::{LogReader, ReadOptions, Record, inspect};

    fn fixture(name: &str) -> String {
        let p = Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../fixtures/rig")
            .join(name);
        std::fs::read_to_string(p).unwrap()
    }

    fn import(csv: &str, map: &str) -> Result<(ImportSummary, Vec<u8>), ImportError> {
        let mapping = Mapping::parse(map, "demo_rig.toml")?;
        let mut out = Vec::new();
        let sum = import_csv(csv.as_bytes(), "demo_rig.csv", &mapping, &mut out)?;
        Ok((sum, out))
    }

    /// 1-based line of the first line containing `needle`.
    fn line_with(text: &str, needle: &str) -> u64 {
        text.lines().position(|l| l.contains(needle)).unwrap() as u64 + 1
    }

    #[test]
    fn conversion_factors_match_the_published_values() {
        // NIST SP 811 (2008) Appendix B.8 prints psi -> Pa as 6.894 757 E+03
        // and lbf -> N as 4.448 222 E+00 (recalled from memory), to 7
        // significant figures.
        assert!((units::PA_PER_PSI - 6.894_757e3).abs() < 0.000_5);
        assert!((units::N_PER_LBF - 4.448_222).abs() < 0.000_000_5);
    }

    #[test]
    fn demo_rig_fixture_imports() {
        let (csv, map) = (fixture("demo_rig.csv"), fixture("demo_rig.toml"));
        let (sum, bytes) = import(&csv, &map).unwrap();
        assert_eq!((sum.rows, sum.frames, sum.notes), (10, 10, 6));
        assert_eq!((sum.rows_without_ports, sum.missing_port_cells), (1, 1));
        assert_eq!(sum.rows_without_pose, 1);
        assert_eq!(sum.rows_without_joints, 0);
        // Contacts: two force columns and one triple, forces under 0.05 N
        // dropped (counted by hand from the CSV).
        assert_eq!(sum.contacts, 12);
        assert_eq!(sum.bytes, bytes.len() as u64);

        let mut r = LogReader::open(bytes.as_slice(), ReadOptions::default()).unwrap();
        assert_eq!(r.header().robot.modules.len(), 3);
        assert_eq!(r.header().provenance["source_csv"], "demo_rig.csv");
        assert_eq!(
            r.header().navigator_config["note"],
            "no navigator settings recorded on the bench"
        );
        let mut frames = Vec::new();
        let mut notes = Vec::new();
        while let Some(rec) = r.next_record().unwrap() {
            match rec {
                Record::Frame(f) => frames.push(f),
                Record::Event(e) => notes.push(e),
                Record::End(_) => {}
            }
        }
        assert_eq!(frames.len(), 10);
        let f0 = &frames[0];
        assert!((f0.port_pressures_pa.as_ref().unwrap()[0] - 101_375.0).abs() < 1e-6);
        assert!((f0.total_temperature_k.unwrap() - 294.65).abs() < 1e-9);
        assert!((frames[3].time_s - 0.03).abs() < 1e-15);
        assert!(frames[3].port_pressures_pa.as_ref().unwrap()[3].is_nan());
        assert!(frames[4].pose.is_none());
        assert!(frames[5].port_pressures_pa.is_none());
        let p1 = frames[1].pose.unwrap();
        assert!((p1.position_m[0] - 0.0005).abs() < 1e-15);
        let j = &frames[1].joints.as_ref().unwrap()[0];
        assert!((j.yaw_rad - 1.0_f64.to_radians()).abs() < 1e-15);
        assert_eq!(frames[2].contacts.len(), 2);
        assert_eq!(
            (frames[2].contacts[1].module, frames[2].contacts[1].sensor),
            (1, 3)
        );
        assert_eq!(frames[7].contacts.len(), 1, "0.04 N is under the threshold");
        let texts: Vec<&str> = notes
            .iter()
            .map(|e| match &e.event {
                Event::Note { text } => text.as_str(),
                _ => "",
            })
            .collect();
        assert_eq!(texts[1], "port 3 dropped out, see bench notes");
        assert_eq!(texts[3], "ports off: \"zero\" cal");

        let rep = inspect(bytes.as_slice(), ReadOptions::default()).unwrap();
        assert!(rep.is_clean());
        assert_eq!(rep.health.nan_port_values, 1);
        assert!((rep.time.largest_gap_s.unwrap() - 0.02).abs() < 1e-12);
        assert_eq!(rep.health.contacts_unknown_sensor, 0);
    }

    #[test]
    fn bad_cell_names_line_row_and_column() {
        let (csv, map) = (fixture("demo_rig.csv"), fixture("demo_rig.toml"));
        let bad = csv.replace("70,101.379", "70,10l.379");
        let line = line_with(&bad, "10l.379");
        match import(&bad, &map).unwrap_err() {
            ImportError::Csv {
                line: l,
                row,
                column,
                message,
                ..
            } => {
                assert_eq!(l, line);
                assert_eq!(row, 8, "eighth data row");
                assert_eq!(column, Some(("p0".to_owned(), 2)));
                assert!(message.contains("10l.379"));
            }
            other => panic!("{other}"),
        }
    }

    #[test]
    fn partial_pose_and_short_rows_are_errors() {
        let (csv, map) = (fixture("demo_rig.csv"), fixture("demo_rig.toml"));
        let bad = csv.replace(",,,,,,,,0.0,3.0,0.0,-2.0", ",,,,,,1,,0.0,3.0,0.0,-2.0");
        match import(&bad, &map).unwrap_err() {
            ImportError::Csv { row, column, .. } => {
                assert_eq!(row, 5);
                assert_eq!(column, Some(("x_mm".to_owned(), 9)));
            }
            other => panic!("{other}"),
        }
        let bad = csv.replace(",after a 20 ms hole", "");
        match import(&bad, &map).unwrap_err() {
            ImportError::Csv { row, message, .. } => {
                assert_eq!(row, 9);
                assert!(
                    message.contains("25 fields, the header has 26"),
                    "{message}"
                );
            }
            other => panic!("{other}"),
        }
        let bad = csv.replace(",end\n", ",\"end\n");
        let e = import(&bad, &map).unwrap_err();
        assert!(e.to_string().contains("quoted field not closed"), "{e}");
    }

    #[test]
    fn mapping_errors_name_the_mapping_line() {
        let (csv, map) = (fixture("demo_rig.csv"), fixture("demo_rig.toml"));
        let cases = [
            (
                map.replace("\"p6\"]", "\"p9\"]"),
                "\"p9\"",
                "not in the header",
            ),
            (
                map.replace("unit = \"kPa\"", "unit = \"hPa\""),
                "hPa",
                "unknown pressure unit",
            ),
            (
                map.replace(", \"p6\"]", "]"),
                "columns = [\"p0\"",
                "needs 7 columns",
            ),
            (
                map.replace("column = \"t_ms\"", "colum = \"t_ms\""),
                "colum =",
                "unknown field",
            ),
            (
                map.replace("unit = \"degC\"", "unit = degC"),
                "unit = degC",
                "",
            ),
            (
                map.replace("angle_unit = \"deg\"", "angle_unit = \"grad\""),
                "grad",
                "unknown angle",
            ),
        ];
        for (text, needle, message_part) in cases {
            let line = line_with(&text, needle);
            match import(&csv, &text).unwrap_err() {
                ImportError::Mapping {
                    line: l, message, ..
                } => {
                    assert_eq!(l, Some(line), "{needle}: {message}");
                    assert!(message.contains(message_part), "{needle}: {message}");
                }
                other => panic!("{needle}: {other}"),
            }
        }
        // A contact sensor the robot does not have: the line is inside
        // that [[contacts.sensor]] table.
        let text = map.replace("module = 2\nsensor = 2", "module = 5\nsensor = 2");
        match import(&csv, &text).unwrap_err() {
            ImportError::Mapping {
                line: Some(l),
                message,
                ..
            } => {
                let at = line_with(&text, "module = 5");
                assert!((at - 1..=at + 2).contains(&l), "line {l}, table at {at}");
                assert!(message.contains("no contact sensor 2 on module 5"));
            }
            other => panic!("{other}"),
        }
    }

    #[test]
    fn infinite_cells_are_flagged_like_nan() {
        let (csv, map) = (fixture("demo_rig.csv"), fixture("demo_rig.toml"));
        let (clean, _) = import(&csv, &map).unwrap();
        assert_eq!((clean.nan_cells, clean.infinite_cells), (0, 0));
        assert_eq!(clean.first_non_finite, None);
        let bad = csv
            .replacen("70,101.379", "70,inf", 1)
            .replacen("101.375", "NaN", 1);
        let first = line_with(&bad, "NaN");
        let (sum, bytes) = import(&bad, &map).unwrap();
        assert_eq!((sum.nan_cells, sum.infinite_cells), (1, 1));
        assert_eq!(sum.first_non_finite.as_ref().map(|f| f.0), Some(first));
        let rep = inspect(bytes.as_slice(), ReadOptions::default()).unwrap();
        assert_eq!(rep.health.infinite_values, 1);
    }

    #[test]
    fn a_header_only_csv_is_an_error() {
        let (csv, map) = (fixture("demo_rig.csv"), fixture("demo_rig.toml"));
        let header_only: String = csv
            .lines()
            .take_while(|l| l.starts_with('#'))
            .chain(csv.lines().find(|l| !l.starts_with('#')))
            .map(|l| format!("{l}\n"))
            .collect();
        let e = import(&header_only, &map).unwrap_err().to_string();
        assert!(e.contains("no data rows"), "{e}");
    }
}
