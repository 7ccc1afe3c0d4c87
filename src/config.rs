//! The TOML configuration: where samples are stored, which MQTT broker they come from, which
//! loops to watch, where each loop's signals are published, and each loop's actuator range and
//! spec.
//!
//! ```toml
//! [store]
//! path = "headroom.db"              # relative to the config file's folder
//! raw_retention_days = 30
//!
//! [mqtt]
//! url = "mqtts://broker.example:8883"
//! client_id = "headroom-site"
//! username = "headroom"
//! password_file = "/etc/headroom/mqtt-password"
//! alert_topic = "headroom/site/alerts"
//!
//! [loops.TIC-101]
//! op_min = 0
//! op_max = 100
//! expected_period_s = 1.0
//! spec = { settle_within_s = 900 }
//! sp = { topic = "site/TIC-101/sp", format = "number" }
//! pv = { topic = "site/TIC-101/pv", format = "json" }
//! op = { topic = "site/TIC-101/op", format = "number" }
//! ```
//!
//! config/headroom.toml documents every key. How a file is read:
//!
//! - **Two stages.** The file is deserialized into private `Raw*` structs that mirror the TOML,
//!   then validated into the public types ([`Config`], [`LoopConfig`], [`MqttSettings`], [`Source`]
//!   ...), which hold only checked values, so the daemon never re-checks a topic or a range.
//! - **Errors are located.** TOML syntax and type errors, and unknown keys (a typo never falls back
//!   silently to a default), stop at the first one, as `file:line:column: message`. Validation
//!   then collects every problem it finds, each as `file:line:column: key: message` (the position
//!   of the key, or of the nearest enclosing table when the key is missing), and refuses the file
//!   if there is any. The file is parsed a second time, into toml's spanned document tree, only to
//!   find those positions.
//! - **Topics.** Every signal topic filter must be valid MQTT; no two sources may share a topic,
//!   and no two filters may overlap (match a common topic), because one message would then feed
//!   two signals and picking one would be a guess. The message names both sources and a topic
//!   they both match. Signal filters may not match the topics headroom publishes on either.
//! - **Secrets** never sit in the file: an inline `password` is refused, the password is read from
//!   a file or the environment when the daemon connects ([`MqttSettings::password`]), and it is
//!   printed as `***`.
//! - **Sources.** A signal's [`Source`] is an MQTT topic and payload format, or registers of a
//!   Modbus TCP device (`[modbus.<name>]`, see [`modbus`]); one loop may mix both. Register
//!   sources that overlap on one device are refused, like overlapping topic filters.

use crate::analysis::{self, AnalysisOptions, AutoValues, LoopSetup, OpRange, Setting, Spec};
use crate::mqtt::topic;
use crate::sample::Signal;
use serde::Deserialize;
use serde::de::IgnoredAny;
use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Duration;

pub mod modbus;
pub use modbus::{ModbusDevice, ModbusSource};

/// A problem with a configuration file, located as precisely as the file allows.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ConfigError {
    #[error("cannot read config file {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    /// TOML syntax, a wrong type, a missing required key or an unknown key.
    #[error("{path}:{line}:{column}: {message}")]
    Invalid {
        path: PathBuf,
        line: usize,
        column: usize,
        message: String,
    },
    /// Everything validation found wrong, one problem per line.
    #[error("{}", problem_lines(path, problems))]
    Problems {
        path: PathBuf,
        problems: Vec<Problem>,
    },
    #[error("{path}: loop {tag}: {problem}")]
    Loop {
        path: PathBuf,
        tag: String,
        #[source]
        problem: analysis::Problem,
    },
    #[error("{path}: no loop tagged {tag} (loops in this file: {known})")]
    UnknownLoop {
        path: PathBuf,
        tag: String,
        known: String,
    },
    /// The MQTT password could not be read from where the config says it is.
    #[error("MQTT password from {origin}: {message}")]
    Password { origin: String, message: String },
}

/// One validation problem: the dotted key it concerns, where that is in the file, and why.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Problem {
    /// The key, written as in TOML, e.g. `loops.TIC-101.sp.topic`.
    pub key: String,
    /// 1-based line and column of the key (or of its value), or of the nearest enclosing table
    /// that is in the file; `None` only when not even that is.
    pub position: Option<(usize, usize)>,
    pub message: String,
}

fn problem_lines(path: &Path, problems: &[Problem]) -> String {
    let mut out = String::new();
    for (i, p) in problems.iter().enumerate() {
        if i > 0 {
            out.push('\n');
        }
        let _ = match p.position {
            Some((line, column)) => write!(
                out,
                "{}:{line}:{column}: {}: {}",
                path.display(),
                p.key,
                p.message
            ),
            None => write!(out, "{}: {}: {}", path.display(), p.key, p.message),
        };
    }
    out
}

/// The whole file, validated.
#[derive(Debug, Clone, PartialEq)]
pub struct Config {
    pub store: StoreSettings,
    /// The broker; `None` when the file has no `[mqtt]` section (which is fine for a file used
    /// only by `analyze --config`).
    pub mqtt: Option<MqttSettings>,
    /// Loops by tag.
    pub loops: BTreeMap<String, LoopConfig>,
    /// Modbus TCP devices by name (`[modbus.<name>]`).
    pub modbus: BTreeMap<String, ModbusDevice>,
    /// When and where the daemon writes the weekly loop-health summary; `None`: it does not.
    pub report: Option<ReportSettings>,
}

/// `[store]`: the SQLite file and how long raw samples are kept.
#[derive(Debug, Clone, PartialEq)]
pub struct StoreSettings {
    /// As written in the file; see [`Config::store_path`] for the path to open.
    pub path: PathBuf,
    /// Raw samples older than this many days are pruned, except inside scored episode windows.
    pub raw_retention_days: u32,
}

impl Default for StoreSettings {
    fn default() -> Self {
        StoreSettings {
            path: PathBuf::from(DEFAULT_STORE_PATH),
            raw_retention_days: DEFAULT_RAW_RETENTION_DAYS,
        }
    }
}

const DEFAULT_STORE_PATH: &str = "headroom.db";
const DEFAULT_RAW_RETENTION_DAYS: u32 = 30;
/// A century: anything longer is a typo, not a retention policy.
const MAX_RAW_RETENTION_DAYS: i64 = 36_500;

/// `[mqtt]`: the broker connection and what headroom publishes.
#[derive(Debug, Clone, PartialEq)]
pub struct MqttSettings {
    /// The URL as written, for messages.
    pub url: String,
    /// Host name or IP address (an IPv6 address without its brackets).
    pub host: String,
    /// The URL's port, or 1883 for `mqtt://` and 8883 for `mqtts://`.
    pub port: u16,
    /// Whether the URL is `mqtts://` (TLS).
    pub tls: bool,
    /// Unique per broker and stable across restarts: the broker keeps the persistent session
    /// (and the QoS 1 messages queued for it) under this id.
    pub client_id: String,
    pub username: Option<String>,
    /// Where the password is read from when connecting; never the password itself.
    pub password_from: Option<PasswordSource>,
    /// CA certificate(s) in PEM for a broker with a private CA (mqtts only), resolved against the
    /// config file's folder when relative.
    pub ca_file: Option<PathBuf>,
    pub keep_alive_s: u16,
    /// Where alerts are published.
    pub alert_topic: String,
    /// Where status is published, if anywhere. With `alert_topic`, the only topics headroom
    /// ever publishes on.
    pub status_topic: Option<String>,
    /// Larger payloads are rejected unread (`oversized_payload`).
    pub max_payload_bytes: usize,
    /// Samples timestamped more than this far ahead of their receipt are rejected
    /// (`future_timestamp`).
    pub max_future_s: u32,
}

const DEFAULT_KEEP_ALIVE_S: i64 = 30;
const DEFAULT_MAX_PAYLOAD_BYTES: i64 = 65_536;
/// MQTT's own limit on a packet's remaining length.
const MAX_MAX_PAYLOAD_BYTES: i64 = 268_435_455;
const DEFAULT_MAX_FUTURE_S: i64 = 300;
/// A day: a sample further ahead than that is a clock problem, whatever the site's tolerance.
const MAX_MAX_FUTURE_S: i64 = 86_400;

/// Where the MQTT password comes from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PasswordSource {
    /// The first line of this file (resolved against the config file's folder when relative).
    File(PathBuf),
    /// This environment variable.
    Env(String),
}

/// A password. Its `Debug` and `Display` print `***`, so it cannot leak into logs by accident;
/// [`Secret::expose`] is the one way to the text.
#[derive(Clone, PartialEq, Eq)]
pub struct Secret(String);

impl Secret {
    pub fn new(text: impl Into<String>) -> Secret {
        Secret(text.into())
    }

    /// The secret text, for handing to the MQTT client and nothing else.
    pub fn expose(&self) -> &str {
        &self.0
    }
}

impl std::fmt::Debug for Secret {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("***")
    }
}

impl std::fmt::Display for Secret {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("***")
    }
}

impl MqttSettings {
    /// The password, read now from its file or environment variable (so a rotated password is
    /// picked up at the next connection); `None` when the config names no password source.
    ///
    /// From a file, the password is its first line without the line ending. A missing or
    /// unreadable file, an unset variable, or an empty password is an error; no message ever
    /// contains the password.
    pub fn password(&self) -> Result<Option<Secret>, ConfigError> {
        match &self.password_from {
            None => Ok(None),
            Some(PasswordSource::File(path)) => {
                let origin = format!("file {}", path.display());
                let text = std::fs::read_to_string(path).map_err(|e| ConfigError::Password {
                    origin: origin.clone(),
                    message: e.to_string(),
                })?;
                match text.lines().next() {
                    Some(line) if !line.is_empty() => Ok(Some(Secret::new(line))),
                    _ => Err(ConfigError::Password {
                        origin,
                        message: "the first line is empty".into(),
                    }),
                }
            }
            Some(PasswordSource::Env(name)) => {
                let origin = format!("environment variable {name}");
                match std::env::var(name) {
                    Ok(v) if !v.is_empty() => Ok(Some(Secret::new(v))),
                    Ok(_) => Err(ConfigError::Password {
                        origin,
                        message: "it is empty".into(),
                    }),
                    Err(std::env::VarError::NotPresent) => Err(ConfigError::Password {
                        origin,
                        message: "it is not set".into(),
                    }),
                    Err(std::env::VarError::NotUnicode(_)) => Err(ConfigError::Password {
                        origin,
                        message: "it is not valid UTF-8".into(),
                    }),
                }
            }
        }
    }

    pub fn keep_alive(&self) -> Duration {
        Duration::from_secs(u64::from(self.keep_alive_s))
    }

    pub fn max_future_ms(&self) -> i64 {
        i64::from(self.max_future_s) * 1000
    }
}

/// One loop.
#[derive(Debug, Clone, PartialEq)]
pub struct LoopConfig {
    /// Free text for people: what the loop controls and with what.
    pub description: String,
    /// Engineering unit of the PV, for display (e.g. "°C").
    pub pv_unit: String,
    /// Engineering unit of the OP, for display (usually "%").
    pub op_unit: String,
    pub op_min: f64,
    pub op_max: f64,
    pub spec: SpecConfig,
    pub analysis: AnalysisConfig,
    /// How often each signal should arrive (s). Required for a watched loop; also the analysis's
    /// sample period for its default hold and gap limits.
    pub expected_period_s: Option<f64>,
    /// A signal with no sample for this many expected periods is stale.
    pub stale_after_periods: f64,
    pub sp: Option<Source>,
    pub pv: Option<Source>,
    pub op: Option<Source>,
    pub mode: Option<ModeSource>,
}

const DEFAULT_STALE_AFTER_PERIODS: f64 = 10.0;

#[derive(Debug, Clone, Copy, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SpecConfig {
    #[serde(default = "default_band")]
    pub settle_band_pct: f64,
    pub settle_within_s: f64,
    pub max_overshoot_pct: Option<f64>,
}

fn default_band() -> f64 {
    Spec::DEFAULT_SETTLE_BAND_PCT
}

/// Optional analysis settings per loop; anything left out is derived from the data.
#[derive(Debug, Clone, Copy, Default, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AnalysisConfig {
    pub sp_deadband: Option<f64>,
    pub sp_hold_s: Option<f64>,
    pub max_gap_s: Option<f64>,
    pub upgrade_ratio_limit: Option<f64>,
}

/// Where one signal's samples come from.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum Source {
    /// Messages on an MQTT topic filter.
    Mqtt(MqttSource),
    /// Registers (or bits) of a Modbus TCP device, read by polling.
    Modbus(ModbusSource),
}

impl Source {
    /// The MQTT source, if this is one.
    pub fn as_mqtt(&self) -> Option<&MqttSource> {
        match self {
            Source::Mqtt(m) => Some(m),
            Source::Modbus(_) => None,
        }
    }

    /// The Modbus source, if this is one.
    pub fn as_modbus(&self) -> Option<&ModbusSource> {
        match self {
            Source::Modbus(m) => Some(m),
            Source::Mqtt(_) => None,
        }
    }
}

/// An MQTT topic filter (`+` and `#` allowed) and how its payloads are written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MqttSource {
    pub topic: String,
    pub format: PayloadFormat,
}

/// How a payload is written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PayloadFormat {
    /// Plain text holding one number, whitespace around it allowed (`21.5`). For a mode signal,
    /// plain text holding a number or a word (`AUTO`).
    Number,
    /// A JSON object holding the value and optionally its time, or an array of such objects.
    Json(JsonFields),
}

/// The field names of a JSON payload.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct JsonFields {
    /// The value's field (default `value`).
    pub value_field: String,
    /// The timestamp's field (default `time`): an RFC 3339 string or epoch milliseconds. A
    /// message without it is timed by its receipt.
    pub time_field: String,
}

/// The mode signal's source and which of its values mean the loop is in automatic.
#[derive(Debug, Clone, PartialEq)]
pub struct ModeSource {
    pub source: Source,
    pub auto_values: AutoValues,
}

impl LoopConfig {
    /// The source of one signal.
    pub fn source(&self, signal: Signal) -> Option<&Source> {
        match signal {
            Signal::Sp => self.sp.as_ref(),
            Signal::Pv => self.pv.as_ref(),
            Signal::Op => self.op.as_ref(),
            Signal::Mode => self.mode.as_ref().map(|m| &m.source),
        }
    }

    /// The signals that have a source, in the order sp, pv, op, mode.
    pub fn sources(&self) -> impl Iterator<Item = (Signal, &Source)> {
        Signal::ALL
            .into_iter()
            .filter_map(|s| self.source(s).map(|src| (s, src)))
    }

    /// Whether the daemon watches this loop (validation makes that mean: sp, pv and op sources).
    pub fn is_watched(&self) -> bool {
        self.sources().next().is_some()
    }

    /// How long a signal may go without a sample before it is stale, when the loop has an
    /// expected period.
    pub fn stale_after(&self) -> Option<Duration> {
        self.expected_period_s
            .map(|p| Duration::from_secs_f64(p * self.stale_after_periods))
    }

    /// Turns the loop's section into an analysis setup, checking the spec's values.
    pub fn setup(&self, tag: &str) -> Result<LoopSetup, analysis::Problem> {
        let op = OpRange {
            min: self.op_min,
            max: self.op_max,
        };
        let setup = setup_as_written(tag, op, &self.spec, &self.analysis, self.expected_period_s);
        setup.validate()?;
        Ok(setup)
    }
}

/// A loop's analysis setup as written, before the core's validation.
fn setup_as_written(
    tag: &str,
    op: OpRange,
    spec: &SpecConfig,
    analysis: &AnalysisConfig,
    expected_period_s: Option<f64>,
) -> LoopSetup {
    let mut options = AnalysisOptions {
        sp_deadband: analysis.sp_deadband,
        sp_hold_s: analysis.sp_hold_s,
        max_gap_s: analysis.max_gap_s,
        expected_period_s,
        ..AnalysisOptions::default()
    };
    if let Some(r) = analysis.upgrade_ratio_limit {
        options.upgrade_ratio_limit = r;
    }
    LoopSetup {
        tag: tag.to_owned(),
        op,
        spec: Spec {
            settle_band_pct: spec.settle_band_pct,
            settle_within_s: spec.settle_within_s,
            max_overshoot_pct: spec.max_overshoot_pct,
        },
        options,
    }
}

// ---- The file as written -------------------------------------------------------------------

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawConfig {
    store: Option<RawStore>,
    mqtt: Option<RawMqtt>,
    #[serde(default)]
    modbus: BTreeMap<String, modbus::RawDevice>,
    #[serde(default)]
    loops: BTreeMap<String, RawLoop>,
    report: Option<RawReport>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawStore {
    path: Option<PathBuf>,
    raw_retention_days: Option<i64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawMqtt {
    url: String,
    client_id: String,
    username: Option<String>,
    /// Only here to be refused with a better message than "unknown field".
    password: Option<IgnoredAny>,
    password_file: Option<PathBuf>,
    password_env: Option<String>,
    ca_file: Option<PathBuf>,
    keep_alive_s: Option<i64>,
    alert_topic: String,
    status_topic: Option<String>,
    max_payload_bytes: Option<i64>,
    max_future_s: Option<i64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawLoop {
    #[serde(default)]
    description: String,
    #[serde(default)]
    pv_unit: String,
    #[serde(default = "default_op_unit")]
    op_unit: String,
    op_min: f64,
    op_max: f64,
    spec: SpecConfig,
    #[serde(default)]
    analysis: AnalysisConfig,
    expected_period_s: Option<f64>,
    stale_after_periods: Option<f64>,
    sp: Option<RawSource>,
    pv: Option<RawSource>,
    op: Option<RawSource>,
    mode: Option<RawSource>,
}

fn default_op_unit() -> String {
    "%".into()
}

/// A signal's source as written. One struct for every kind: the kind is told by which keys are
/// present (`device` makes it a Modbus source, else it is an MQTT source).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSource {
    topic: Option<String>,
    format: Option<RawFormat>,
    value_field: Option<String>,
    time_field: Option<String>,
    auto_values: Option<Vec<String>>,
    // Modbus keys (see `modbus::RawRegister`); serde cannot flatten under deny_unknown_fields.
    device: Option<String>,
    table: Option<crate::modbus::registers::Table>,
    address: Option<i64>,
    data_type: Option<crate::modbus::registers::DataType>,
    order: Option<crate::modbus::registers::Order>,
    scale: Option<f64>,
    offset: Option<f64>,
    raw_range: Option<[f64; 2]>,
    eng_range: Option<[f64; 2]>,
}

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(rename_all = "lowercase")]
enum RawFormat {
    Number,
    Json,
}

// ---- Loading and validation ----------------------------------------------------------------

impl Config {
    /// Reads and validates a config file.
    pub fn load(path: &Path) -> Result<Config, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
            path: path.to_owned(),
            source,
        })?;
        Config::parse(&text, path)
    }

    /// Parses and validates config text. `path` names the file in messages, and relative
    /// `password_file` and `ca_file` paths are resolved against its folder.
    pub fn parse(text: &str, path: &Path) -> Result<Config, ConfigError> {
        let raw: RawConfig = toml::from_str(text).map_err(|e| {
            let (line, column) = e.span().map(|s| line_col(text, s.start)).unwrap_or((0, 0));
            ConfigError::Invalid {
                path: path.to_owned(),
                line,
                column,
                message: e.message().to_string(),
            }
        })?;
        let mut checker = Checker {
            text,
            // It parsed once, so it parses again; `ok()` only spares an unreachable panic.
            doc: toml::de::DeTable::parse(text).ok(),
            dir: path.parent().unwrap_or(Path::new("")),
            problems: Vec::new(),
        };
        let cfg = checker.config(raw);
        if checker.problems.is_empty() {
            Ok(cfg)
        } else {
            let mut problems = checker.problems;
            // In file order; problems without a position last. The sort is stable, so problems
            // at one place keep the order they were found in.
            problems.sort_by_key(|p| p.position.map_or((usize::MAX, 0), |p| p));
            Err(ConfigError::Problems {
                path: path.to_owned(),
                problems,
            })
        }
    }

    /// The analysis setup of one loop, or an error listing the loops that exist.
    pub fn loop_setup(&self, tag: &str, path: &Path) -> Result<LoopSetup, ConfigError> {
        let l = self
            .loops
            .get(tag)
            .ok_or_else(|| ConfigError::UnknownLoop {
                path: path.to_owned(),
                tag: tag.to_owned(),
                known: self.loops.keys().cloned().collect::<Vec<_>>().join(", "),
            })?;
        l.setup(tag).map_err(|problem| ConfigError::Loop {
            path: path.to_owned(),
            tag: tag.to_owned(),
            problem,
        })
    }

    /// The SQLite file to open: `store.path`, relative to the config file's folder when it is
    /// relative.
    pub fn store_path(&self, config_path: &Path) -> PathBuf {
        relative_to(
            config_path.parent().unwrap_or(Path::new("")),
            &self.store.path,
        )
    }

    /// The distinct MQTT topic filters of all sources, sorted: what the daemon subscribes to.
    pub fn subscriptions(&self) -> Vec<String> {
        let set: BTreeSet<&str> = self
            .loops
            .values()
            .flat_map(|l| l.sources())
            .filter_map(|(_, s)| s.as_mqtt())
            .map(|m| m.topic.as_str())
            .collect();
        set.into_iter().map(str::to_owned).collect()
    }

    /// What `headroom check-config` prints: the store, the broker, every loop with its signals,
    /// topics, formats and spec, and the broker settings the daemon relies on.
    pub fn describe(&self, config_path: &Path) -> String {
        let mut o = String::new();
        // Writing to a String cannot fail.
        let _ = self.write_description(config_path, &mut o);
        o
    }

    fn write_description(&self, config_path: &Path, o: &mut String) -> std::fmt::Result {
        writeln!(o, "Config {}: valid.", config_path.display())?;
        writeln!(
            o,
            "Store: {} (raw samples kept {} days, longer inside scored episode windows)",
            self.store_path(config_path).display(),
            self.store.raw_retention_days
        )?;
        match &self.mqtt {
            None if self.modbus.is_empty() => writeln!(
                o,
                "MQTT: no [mqtt] section, and no [modbus] device; the daemon has nothing to read."
            )?,
            None => writeln!(o, "MQTT: no [mqtt] section.")?,
            Some(m) => {
                let tls = if m.tls {
                    match &m.ca_file {
                        Some(ca) => format!("TLS, CA {}", ca.display()),
                        None => "TLS, system CAs".into(),
                    }
                } else {
                    "plain TCP, no TLS".into()
                };
                if m.host.contains(':') {
                    writeln!(o, "MQTT broker: [{}]:{} ({tls})", m.host, m.port)?;
                } else {
                    writeln!(o, "MQTT broker: {}:{} ({tls})", m.host, m.port)?;
                }
                let login = match (&m.username, &m.password_from) {
                    (None, _) => "no username".to_owned(),
                    (Some(u), None) => format!("user {u}, no password"),
                    (Some(u), Some(PasswordSource::File(p))) => {
                        format!("user {u}, password from file {}", p.display())
                    }
                    (Some(u), Some(PasswordSource::Env(v))) => {
                        format!("user {u}, password from environment variable {v}")
                    }
                };
                writeln!(o, "  client id {}; {login}", m.client_id)?;
                writeln!(
                    o,
                    "  keep-alive {} s; payloads up to {} bytes; samples up to {} s ahead of \
                     their receipt accepted",
                    m.keep_alive_s, m.max_payload_bytes, m.max_future_s
                )?;
                write!(o, "  publishes alerts on {}", m.alert_topic)?;
                match &m.status_topic {
                    Some(s) => writeln!(o, ", status on {s}")?,
                    None => writeln!(o, "; no status topic")?,
                }
                let subs = self.subscriptions();
                writeln!(o, "  subscribes with QoS 1 to {} topic filters", subs.len())?;
            }
        }
        for (name, d) in &self.modbus {
            let l = d.limits;
            writeln!(
                o,
                "Modbus device {name}: {} unit {}, polled every {} s, {} s timeout per request, \
                 up to {} registers per request, gaps of up to {} bridged",
                d.address,
                d.unit_id,
                d.poll_period.as_secs_f64(),
                d.timeout.as_secs_f64(),
                l.max_for(crate::modbus::registers::Table::HoldingRegisters),
                l.max_gap()
            )?;
            match modbus::device_plan(&self.loops, name, d) {
                Ok(p) => writeln!(
                    o,
                    "  {} signal(s) read in {} request(s) per poll, read function codes only",
                    p.placements.len(),
                    p.requests.len()
                )?,
                Err(e) => writeln!(o, "  cannot plan the requests: {e}")?,
            }
        }
        let watched = self.loops.values().filter(|l| l.is_watched()).count();
        writeln!(o, "Loops: {} ({watched} watched)", self.loops.len())?;
        for (tag, l) in &self.loops {
            write!(o, "  {tag}")?;
            if !l.description.is_empty() {
                write!(o, ": {}", l.description)?;
            }
            writeln!(o)?;
            let unit = if l.pv_unit.is_empty() {
                String::new()
            } else {
                format!(" ({})", l.pv_unit)
            };
            write!(
                o,
                "    OP {} to {} {}; spec: PV{unit} within ±{} % of each setpoint change by {} s",
                l.op_min, l.op_max, l.op_unit, l.spec.settle_band_pct, l.spec.settle_within_s
            )?;
            match l.spec.max_overshoot_pct {
                Some(p) => writeln!(o, ", overshoot at most {p} %")?,
                None => writeln!(o, ", no overshoot limit")?,
            }
            if !l.is_watched() {
                writeln!(
                    o,
                    "    not watched (no sources): for `analyze --config` only"
                )?;
                continue;
            }
            if let (Some(p), Some(stale)) = (l.expected_period_s, l.stale_after()) {
                writeln!(
                    o,
                    "    a sample of each signal every {p} s; stale after {} periods ({} s)",
                    l.stale_after_periods,
                    stale.as_secs_f64()
                )?;
            }
            let width = l
                .sources()
                .filter_map(|(_, s)| s.as_mqtt())
                .map(|m| m.topic.chars().count())
                .max()
                .unwrap_or(0);
            for (signal, source) in l.sources() {
                match source {
                    Source::Mqtt(m) => {
                        let format = match &m.format {
                            PayloadFormat::Number if signal == Signal::Mode => {
                                "plain text".to_owned()
                            }
                            PayloadFormat::Number => "plain number".to_owned(),
                            PayloadFormat::Json(j) => format!(
                                "json, value \"{}\", time \"{}\"",
                                j.value_field, j.time_field
                            ),
                        };
                        writeln!(
                            o,
                            "    {:<4}  mqtt  {:<width$}  {format}",
                            signal.as_str(),
                            m.topic
                        )?;
                    }
                    Source::Modbus(m) => {
                        let r = &m.register;
                        let mut how = r.data_type.to_string();
                        if r.count() > 1 {
                            write!(how, " {}", r.order)?;
                        }
                        match r.scaling {
                            crate::modbus::registers::Scaling::Linear { scale, offset }
                                if scale != 1.0 || offset != 0.0 =>
                            {
                                write!(how, ", value × {scale} + {offset}")?
                            }
                            crate::modbus::registers::Scaling::Range {
                                raw_lo,
                                raw_hi,
                                eng_lo,
                                eng_hi,
                            } => write!(how, ", raw {raw_lo}..{raw_hi} → {eng_lo}..{eng_hi}")?,
                            _ => {}
                        }
                        writeln!(
                            o,
                            "    {:<4}  modbus  {} {}  {how}",
                            signal.as_str(),
                            m.device,
                            modbus::span(r)
                        )?;
                    }
                }
            }
            if let Some(mode) = &l.mode {
                writeln!(
                    o,
                    "    automatic when the mode is {}",
                    mode.auto_values.describe()
                )?;
            }
        }
        if let Some(r) = &self.report {
            writeln!(
                o,
                "Weekly summary: every {:?} at {} ({}), {} into {}",
                r.weekday,
                r.time.strftime("%H:%M"),
                r.time_zone,
                r.formats.join(", "),
                r.folder.display()
            )?;
        }
        if !self.modbus.is_empty() {
            o.push_str("Modbus samples are timed by their poll.\n");
        }
        if self.mqtt.is_some() {
            o.push_str(
                "MQTT samples are timed by the JSON time field when there is one, else by their \
                 arrival.\n",
            );
            o.push_str(BROKER_NOTES);
        }
        Ok(())
    }
}

/// What the daemon needs from the broker, printed by `check-config`.
const BROKER_NOTES: &str = "\
Broker settings this daemon relies on:
  - Delivery is QoS 1 to a persistent session (clean session off, the client id above): the
    broker keeps messages while headroom is down, and headroom acknowledges each one only after
    its sample is committed. Publishers should publish with QoS 1 too; a subscription never
    raises the QoS a message was published with.
  - The client id must be unique on the broker: a second client with the same id takes the
    session over.
  - With Mosquitto, set `max_queued_messages 0` (no limit) or a large number, and a generous
    `max_inflight_messages`: with the defaults a broker silently drops QoS 1 messages for a
    subscriber that falls behind, and nothing tells headroom they existed.
  - The broker account needs read access to the subscribed filters and write access to the
    alert and status topics only.
";

/// Collects problems while turning the raw file into checked settings.
struct Checker<'a> {
    text: &'a str,
    doc: Option<toml::Spanned<toml::de::DeTable<'a>>>,
    /// The config file's folder, for relative paths.
    dir: &'a Path,
    problems: Vec<Problem>,
}

impl Checker<'_> {
    fn problem(&mut self, keys: &[&str], message: impl Into<String>) {
        self.problems.push(Problem {
            key: key_path(keys),
            position: self.position(keys),
            message: message.into(),
        });
    }

    /// The line and column of a key, or of the nearest enclosing table present in the file. For
    /// a key holding a plain value, that is the value; for a table, the key itself.
    fn position(&self, keys: &[&str]) -> Option<(usize, usize)> {
        let mut table = self.doc.as_ref()?.get_ref();
        let mut found = None;
        for (i, k) in keys.iter().enumerate() {
            let Some((key, value)) = table.get_key_value(*k) else {
                break;
            };
            let value_ref = value.get_ref();
            let span = if i + 1 == keys.len() && !value_ref.is_table() {
                value.span()
            } else {
                key.span()
            };
            found = Some(line_col(self.text, span.start));
            match value_ref.as_table() {
                Some(t) => table = t,
                None => break,
            }
        }
        found
    }

    fn config(&mut self, raw: RawConfig) -> Config {
        let store = raw.store.map(|s| self.store(s)).unwrap_or_default();
        let mqtt = raw.mqtt.map(|m| self.mqtt(m));
        let modbus = self.modbus_devices(raw.modbus);
        let mut loops = BTreeMap::new();
        for (tag, l) in raw.loops {
            let l = self.a_loop(&tag, l, mqtt.is_some(), &modbus);
            loops.insert(tag, l);
        }
        self.topics(&loops, mqtt.as_ref());
        self.modbus_usage(&loops, &modbus);
        let report = raw.report.map(|r| self.report(r));
        Config {
            store,
            mqtt,
            loops,
            modbus,
            report,
        }
    }

    fn store(&mut self, raw: RawStore) -> StoreSettings {
        let path = raw
            .path
            .unwrap_or_else(|| PathBuf::from(DEFAULT_STORE_PATH));
        if path.as_os_str().is_empty() {
            self.problem(&["store", "path"], "the store path cannot be empty");
        }
        let days = raw
            .raw_retention_days
            .unwrap_or(i64::from(DEFAULT_RAW_RETENTION_DAYS));
        if !(1..=MAX_RAW_RETENTION_DAYS).contains(&days) {
            self.problem(
                &["store", "raw_retention_days"],
                format!(
                    "must be a whole number of days from 1 to {MAX_RAW_RETENTION_DAYS} (got {days})"
                ),
            );
        }
        StoreSettings {
            path,
            raw_retention_days: u32::try_from(days).unwrap_or(DEFAULT_RAW_RETENTION_DAYS),
        }
    }

    fn mqtt(&mut self, raw: RawMqtt) -> MqttSettings {
        let (host, port, tls) = match parse_broker_url(&raw.url) {
            Ok(b) => b,
            Err(message) => {
                self.problem(&["mqtt", "url"], message);
                (String::new(), 0, false)
            }
        };
        if let Some(message) = client_id_problem(&raw.client_id) {
            self.problem(&["mqtt", "client_id"], message);
        }
        if let Some(u) = &raw.username
            && (u.is_empty() || u.contains('\0'))
        {
            self.problem(
                &["mqtt", "username"],
                "the username cannot be empty or hold NUL",
            );
        }
        if raw.password.is_some() {
            self.problem(
                &["mqtt", "password"],
                "a password is never written in the config file: put it in a file readable only \
                 by headroom and name it with password_file (its first line is the password), \
                 or name an environment variable with password_env",
            );
        }
        let password_from = match (&raw.password_file, &raw.password_env) {
            (Some(_), Some(_)) => {
                self.problem(
                    &["mqtt", "password_env"],
                    "give either password_file or password_env, not both",
                );
                None
            }
            (Some(f), None) => {
                if f.as_os_str().is_empty() {
                    self.problem(&["mqtt", "password_file"], "the path cannot be empty");
                }
                Some(PasswordSource::File(relative_to(self.dir, f)))
            }
            (None, Some(v)) => {
                if v.is_empty() || v.contains(['=', '\0']) {
                    self.problem(
                        &["mqtt", "password_env"],
                        "must be the name of an environment variable (not empty, no `=`)",
                    );
                }
                Some(PasswordSource::Env(v.clone()))
            }
            (None, None) => None,
        };
        if password_from.is_some() && raw.username.is_none() {
            let key = if raw.password_file.is_some() {
                "password_file"
            } else {
                "password_env"
            };
            self.problem(
                &["mqtt", key],
                "MQTT sends a password only with a username: set username too",
            );
        }
        let ca_file = raw.ca_file.as_ref().map(|f| relative_to(self.dir, f));
        if ca_file.is_some() && !tls && !host.is_empty() {
            self.problem(
                &["mqtt", "ca_file"],
                "a CA file only applies to TLS: use an mqtts:// url, or remove ca_file",
            );
        }
        let keep_alive = raw.keep_alive_s.unwrap_or(DEFAULT_KEEP_ALIVE_S);
        if !(1..=i64::from(u16::MAX)).contains(&keep_alive) {
            self.problem(
                &["mqtt", "keep_alive_s"],
                format!(
                    "must be a whole number of seconds from 1 to {} (got {keep_alive})",
                    u16::MAX
                ),
            );
        }
        if let Some(m) = topic::publish_topic_problem(&raw.alert_topic) {
            self.problem(&["mqtt", "alert_topic"], m);
        }
        if let Some(s) = &raw.status_topic {
            if let Some(m) = topic::publish_topic_problem(s) {
                self.problem(&["mqtt", "status_topic"], m);
            } else if *s == raw.alert_topic {
                self.problem(
                    &["mqtt", "status_topic"],
                    "must differ from alert_topic, so that readers can tell status from alerts",
                );
            }
        }
        let max_payload = raw.max_payload_bytes.unwrap_or(DEFAULT_MAX_PAYLOAD_BYTES);
        if !(1..=MAX_MAX_PAYLOAD_BYTES).contains(&max_payload) {
            self.problem(
                &["mqtt", "max_payload_bytes"],
                format!("must be from 1 to {MAX_MAX_PAYLOAD_BYTES} bytes (got {max_payload})"),
            );
        }
        let max_future = raw.max_future_s.unwrap_or(DEFAULT_MAX_FUTURE_S);
        if !(0..=MAX_MAX_FUTURE_S).contains(&max_future) {
            self.problem(
                &["mqtt", "max_future_s"],
                format!(
                    "must be a whole number of seconds from 0 to {MAX_MAX_FUTURE_S} (got \
                     {max_future})"
                ),
            );
        }
        MqttSettings {
            url: raw.url,
            host,
            port,
            tls,
            client_id: raw.client_id,
            username: raw.username,
            password_from,
            ca_file,
            keep_alive_s: u16::try_from(keep_alive).unwrap_or(30),
            alert_topic: raw.alert_topic,
            status_topic: raw.status_topic,
            max_payload_bytes: usize::try_from(max_payload).unwrap_or(65_536),
            max_future_s: u32::try_from(max_future).unwrap_or(300),
        }
    }

    fn a_loop(
        &mut self,
        tag: &str,
        raw: RawLoop,
        have_mqtt: bool,
        devices: &BTreeMap<String, ModbusDevice>,
    ) -> LoopConfig {
        let at = |key: &'static str| ["loops", tag, key];
        if let Some(m) = tag_problem(tag) {
            self.problem(&["loops", tag], m);
        }
        let op = OpRange {
            min: raw.op_min,
            max: raw.op_max,
        };
        let written = setup_as_written(tag, op, &raw.spec, &raw.analysis, raw.expected_period_s);
        for p in written.problems() {
            let section = match p.setting {
                Setting::SettleBandPct | Setting::SettleWithinS | Setting::MaxOvershootPct => {
                    Some("spec")
                }
                Setting::SpDeadband
                | Setting::SpHoldS
                | Setting::MaxGapS
                | Setting::UpgradeRatioLimit => Some("analysis"),
                Setting::OpMin | Setting::OpMax | Setting::ExpectedPeriodS => None,
            };
            // An inverted range is reported at op_max, the end usually mistyped.
            let key = match p.other {
                Some((other, _)) => other.key(),
                None => p.setting.key(),
            };
            let keys: Vec<&str> = ["loops", tag]
                .into_iter()
                .chain(section)
                .chain([key])
                .collect();
            self.problem(&keys, p.to_string());
        }
        let stale_after_periods = raw
            .stale_after_periods
            .unwrap_or(DEFAULT_STALE_AFTER_PERIODS);
        if !(stale_after_periods.is_finite() && stale_after_periods >= 1.0) {
            self.problem(
                &at("stale_after_periods"),
                format!("must be a number of periods, 1 or more (got {stale_after_periods})"),
            );
        }

        let mut source = |signal: Signal, raw: Option<RawSource>| {
            raw.map(|r| self.source(tag, signal, r, have_mqtt, devices))
        };
        let sp = source(Signal::Sp, raw.sp).map(|(s, _)| s);
        let pv = source(Signal::Pv, raw.pv).map(|(s, _)| s);
        let op = source(Signal::Op, raw.op).map(|(s, _)| s);
        let mode = source(Signal::Mode, raw.mode).map(|(source, auto_values)| ModeSource {
            source,
            auto_values: auto_values.unwrap_or_default(),
        });

        let present: Vec<&str> = [
            ("sp", sp.is_some()),
            ("pv", pv.is_some()),
            ("op", op.is_some()),
            ("mode", mode.is_some()),
        ]
        .into_iter()
        .filter_map(|(k, p)| p.then_some(k))
        .collect();
        if !present.is_empty() {
            for (key, missing) in [
                ("sp", sp.is_none()),
                ("pv", pv.is_none()),
                ("op", op.is_none()),
            ] {
                if missing {
                    self.problem(
                        &["loops", tag, key],
                        format!(
                            "the loop has a source for {} but none for {key}: a watched loop \
                             needs sp, pv and op",
                            present.join(", ")
                        ),
                    );
                }
            }
            if raw.expected_period_s.is_none() {
                self.problem(
                    &at("expected_period_s"),
                    "a watched loop needs expected_period_s: how often each signal should \
                     arrive, in seconds",
                );
            }
        }

        LoopConfig {
            description: raw.description,
            pv_unit: raw.pv_unit,
            op_unit: raw.op_unit,
            op_min: raw.op_min,
            op_max: raw.op_max,
            spec: raw.spec,
            analysis: raw.analysis,
            expected_period_s: raw.expected_period_s,
            stale_after_periods,
            sp,
            pv,
            op,
            mode,
        }
    }

    /// A signal's source, and the mode's automatic values when given.
    fn source(
        &mut self,
        tag: &str,
        signal: Signal,
        raw: RawSource,
        have_mqtt: bool,
        devices: &BTreeMap<String, ModbusDevice>,
    ) -> (Source, Option<AutoValues>) {
        let name = signal.as_str();
        let at = |key: &'static str| ["loops", tag, name, key];
        let auto_values = match (&raw.auto_values, signal) {
            (None, _) => None,
            (Some(_), s) if s != Signal::Mode => {
                self.problem(
                    &at("auto_values"),
                    "auto_values only applies to the mode signal",
                );
                None
            }
            (Some(v), _) => {
                if v.is_empty() || v.iter().any(|x| x.trim().is_empty()) {
                    self.problem(
                        &at("auto_values"),
                        "list at least one value, none of them blank (e.g. [\"AUTO\", \"CAS\"])",
                    );
                }
                Some(AutoValues::new(v))
            }
        };
        let register = modbus::RawRegister {
            device: raw.device,
            table: raw.table,
            address: raw.address,
            data_type: raw.data_type,
            order: raw.order,
            scale: raw.scale,
            offset: raw.offset,
            raw_range: raw.raw_range,
            eng_range: raw.eng_range,
        };
        if register.device.is_some() {
            for (key, given) in [
                ("topic", raw.topic.is_some()),
                ("format", raw.format.is_some()),
                ("value_field", raw.value_field.is_some()),
                ("time_field", raw.time_field.is_some()),
            ] {
                if given {
                    self.problem(
                        &at(key),
                        "a Modbus source (one with `device`) takes no MQTT keys",
                    );
                }
            }
            let source = self.modbus_source(tag, signal, register, devices);
            return (source, auto_values);
        }
        for key in register.given() {
            self.problem(
                &["loops", tag, name, key],
                "only applies to a Modbus source: add `device = \"<name>\"` naming a \
                 [modbus.<name>] device, or remove it",
            );
        }
        let topic = raw.topic.unwrap_or_else(|| {
            self.problem(
                &["loops", tag, name],
                "a source needs `topic` (an MQTT topic filter) or `device` (a Modbus device)",
            );
            String::new()
        });
        if !topic.is_empty() {
            if let Some(m) = topic::filter_problem(&topic) {
                self.problem(&at("topic"), m);
            } else if !have_mqtt {
                self.problem(
                    &at("topic"),
                    "an MQTT source needs an [mqtt] section naming the broker",
                );
            }
        }
        let format = match raw.format {
            None => {
                self.problem(
                    &["loops", tag, name],
                    "a source needs `format`: \"number\" (plain text) or \"json\"",
                );
                PayloadFormat::Number
            }
            Some(RawFormat::Number) => {
                for (key, given) in [
                    ("value_field", raw.value_field.is_some()),
                    ("time_field", raw.time_field.is_some()),
                ] {
                    if given {
                        self.problem(&at(key), "only applies to format = \"json\"");
                    }
                }
                PayloadFormat::Number
            }
            Some(RawFormat::Json) => {
                let value_field = raw.value_field.unwrap_or_else(|| "value".into());
                let time_field = raw.time_field.unwrap_or_else(|| "time".into());
                if value_field.is_empty() {
                    self.problem(&at("value_field"), "cannot be empty");
                }
                if time_field.is_empty() {
                    self.problem(&at("time_field"), "cannot be empty");
                }
                if value_field == time_field {
                    self.problem(
                        &at("time_field"),
                        format!("must differ from value_field (both are \"{value_field}\")"),
                    );
                }
                PayloadFormat::Json(JsonFields {
                    value_field,
                    time_field,
                })
            }
        };
        (Source::Mqtt(MqttSource { topic, format }), auto_values)
    }

    /// Topic clashes across loops: a topic used twice, filters that overlap, and filters that
    /// would catch headroom's own alerts or status.
    fn topics(&mut self, loops: &BTreeMap<String, LoopConfig>, mqtt: Option<&MqttSettings>) {
        // Only valid filters take part; invalid ones have their own problem already.
        let filters: Vec<(&str, &str, &str)> = loops
            .iter()
            .flat_map(|(tag, l)| {
                l.sources().filter_map(move |(signal, s)| {
                    s.as_mqtt()
                        .map(|m| (tag.as_str(), signal.as_str(), m.topic.as_str()))
                })
            })
            .filter(|(_, _, f)| !f.is_empty() && topic::filter_problem(f).is_none())
            .collect();
        let mut clashes = Vec::new();
        let mut exact: HashMap<&str, usize> = HashMap::new();
        let wild = |f: &str| f.contains(['+', '#']);
        for (i, &(_, _, f)) in filters.iter().enumerate() {
            if !wild(f) {
                if let Some(&j) = exact.get(f) {
                    clashes.push((j, i, None));
                } else {
                    exact.insert(f, i);
                }
            }
        }
        // Two exact topics overlap only when equal, which the map above found; every pair with
        // a wildcard on either side is checked here.
        for i in 0..filters.len() {
            for j in i + 1..filters.len() {
                let (a, b) = (filters[i].2, filters[j].2);
                if (wild(a) || wild(b))
                    && let Some(example) = topic::overlap(a, b)
                {
                    clashes.push((i, j, Some(example)));
                }
            }
        }
        for (i, j, example) in clashes {
            let (tag_a, sig_a, a) = filters[i];
            let (tag_b, sig_b, b) = filters[j];
            let first = key_path(&["loops", tag_a, sig_a]);
            let message = match example {
                None => {
                    format!("topic {b} is also the topic of {first}: each topic feeds one signal")
                }
                Some(t) => format!(
                    "filter {b} and the filter {a} of {first} both match topics such as {t}, so \
                     one message would feed two signals: make the filters disjoint"
                ),
            };
            self.problem(&["loops", tag_b, sig_b, "topic"], message);
        }
        if let Some(m) = mqtt {
            let ours = std::iter::once(("alert_topic", &m.alert_topic))
                .chain(m.status_topic.iter().map(|s| ("status_topic", s)));
            for (key, own) in ours {
                for &(tag, sig, f) in &filters {
                    if topic::matches(f, own) {
                        self.problem(
                            &["loops", tag, sig, "topic"],
                            format!(
                                "filter {f} matches mqtt.{key} ({own}): headroom would read \
                                 its own messages as samples"
                            ),
                        );
                    }
                }
            }
        }
    }
}

/// Splits `mqtt://host[:port]` or `mqtts://host[:port]` (an optional trailing `/` allowed) into
/// host, port and whether it is TLS.
fn parse_broker_url(url: &str) -> Result<(String, u16, bool), String> {
    let (rest, tls) = if let Some(r) = url.strip_prefix("mqtts://") {
        (r, true)
    } else if let Some(r) = url.strip_prefix("mqtt://") {
        (r, false)
    } else {
        return Err(format!(
            "the url must start with mqtt:// or mqtts:// (got \"{url}\")"
        ));
    };
    let rest = rest.strip_suffix('/').unwrap_or(rest);
    if rest.contains('@') {
        return Err(
            "the url cannot hold credentials: use username with password_file or password_env"
                .into(),
        );
    }
    if rest.contains(['/', '?', '#']) {
        return Err(format!(
            "the url is only a scheme, a host and an optional port, as in \
             mqtts://broker.example:8883 (got \"{url}\")"
        ));
    }
    let (host, port) = if let Some(v6) = rest.strip_prefix('[') {
        let (host, after) = v6
            .split_once(']')
            .ok_or_else(|| format!("unclosed [ in the url \"{url}\""))?;
        match after {
            "" => (host, None),
            p if p.starts_with(':') => (host, Some(&p[1..])),
            _ => return Err(format!("unexpected text after ] in the url \"{url}\"")),
        }
    } else {
        match rest.rsplit_once(':') {
            Some((h, p)) => (h, Some(p)),
            None => (rest, None),
        }
    };
    if host.is_empty() || host.contains(|c: char| c.is_whitespace() || c.is_control()) {
        return Err(format!("the url has no valid host (got \"{url}\")"));
    }
    let port = match port {
        None => {
            if tls {
                8883
            } else {
                1883
            }
        }
        Some(p) => match p.parse::<u16>() {
            Ok(p) if p > 0 => p,
            _ => {
                return Err(format!(
                    "the port must be a number from 1 to 65535 (got \"{p}\")"
                ));
            }
        },
    };
    Ok((host.to_owned(), port, tls))
}

/// Why a client id is unusable. `+ # /` would make any topic built from it a filter or add
/// levels, and `$` would put it among the broker's own names; MQTT allows 23 characters for
/// sure and most brokers more, so only MQTT's own 65,535-byte limit is enforced.
fn client_id_problem(id: &str) -> Option<String> {
    if id.is_empty() {
        Some("the client id cannot be empty: the persistent session is kept under it".into())
    } else if let Some(c) = id.chars().find(|c| matches!(c, '+' | '#' | '/' | '$')) {
        Some(format!(
            "the client id cannot contain `{c}` (none of + # / $)"
        ))
    } else if id.contains(|c: char| c.is_whitespace() || c.is_control()) {
        Some("the client id cannot contain spaces or control characters".into())
    } else if id.len() > topic::MAX_TOPIC_BYTES {
        Some(format!(
            "the client id can be at most {} bytes",
            topic::MAX_TOPIC_BYTES
        ))
    } else {
        None
    }
}

/// Why a loop tag is unusable. Tags name loops in the store, in alerts and in messages, and
/// may become levels of topics headroom publishes, so they stay short and free of spaces and
/// MQTT's `/ + #`.
fn tag_problem(tag: &str) -> Option<String> {
    const MAX_TAG_CHARS: usize = 64;
    if tag.is_empty() {
        Some("a loop tag cannot be empty".into())
    } else if tag.chars().count() > MAX_TAG_CHARS {
        Some(format!(
            "a loop tag can be at most {MAX_TAG_CHARS} characters"
        ))
    } else if tag
        .chars()
        .any(|c| c.is_whitespace() || c.is_control() || matches!(c, '/' | '+' | '#'))
    {
        Some("a loop tag cannot contain spaces, control characters, or any of / + #".into())
    } else {
        None
    }
}

/// `path` as is when absolute, else under `dir`.
fn relative_to(dir: &Path, path: &Path) -> PathBuf {
    if path.is_absolute() {
        path.to_owned()
    } else {
        dir.join(path)
    }
}

/// Dotted TOML key, quoting the parts that are not bare keys.
fn key_path(keys: &[&str]) -> String {
    let bare = |k: &str| {
        !k.is_empty()
            && k.chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
    };
    keys.iter()
        .map(|k| {
            if bare(k) {
                (*k).to_owned()
            } else {
                format!("{k:?}")
            }
        })
        .collect::<Vec<_>>()
        .join(".")
}

/// 1-based line and column of a byte offset.
fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let before = &text[..offset.min(text.len())];
    let line = before.matches('\n').count() + 1;
    let column = before
        .rfind('\n')
        .map_or(before.len(), |p| before.len() - p - 1)
        + 1;
    (line, column)
}

// ---- [report]: the scheduled weekly summary -------------------------------------------------

/// `[report]`: when the daemon generates the weekly loop-health summary, and where it goes.
/// Each run covers the last complete ISO 8601 week (Monday 00:00 to Monday 00:00 in
/// `time_zone`); the summary is kept in the store and written to `folder`.
#[derive(Debug, Clone, PartialEq)]
pub struct ReportSettings {
    pub weekday: jiff::civil::Weekday,
    /// Local time of day in `time_zone`.
    pub time: jiff::civil::Time,
    /// An IANA name such as `Europe/London`, checked to exist when the file is read.
    pub time_zone: String,
    /// Resolved against the config file's folder when relative.
    pub folder: PathBuf,
    /// `html`, `md`, `json`; at least one, no repeats.
    pub formats: Vec<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawReport {
    weekday: String,
    time: String,
    #[serde(default = "default_report_zone")]
    time_zone: String,
    folder: PathBuf,
    #[serde(default = "default_report_formats")]
    formats: Vec<String>,
}

fn default_report_zone() -> String {
    "UTC".into()
}

fn default_report_formats() -> Vec<String> {
    vec!["html".into(), "md".into(), "json".into()]
}

impl Checker<'_> {
    fn report(&mut self, raw: RawReport) -> ReportSettings {
        use jiff::civil::{Time, Weekday};
        let days = [
            ("monday", Weekday::Monday),
            ("tuesday", Weekday::Tuesday),
            ("wednesday", Weekday::Wednesday),
            ("thursday", Weekday::Thursday),
            ("friday", Weekday::Friday),
            ("saturday", Weekday::Saturday),
            ("sunday", Weekday::Sunday),
        ];
        let weekday = days
            .iter()
            .find(|(n, _)| n.eq_ignore_ascii_case(raw.weekday.trim()))
            .map(|(_, d)| *d);
        if weekday.is_none() {
            self.problem(
                &["report", "weekday"],
                format!(
                    "{:?} is not a weekday: write monday ... sunday",
                    raw.weekday
                ),
            );
        }
        let time = raw.time.parse::<Time>().ok();
        if time.is_none() {
            self.problem(
                &["report", "time"],
                format!(
                    "{:?} is not a time of day: write 24-hour HH:MM, e.g. \"07:00\"",
                    raw.time
                ),
            );
        }
        if let Err(e) = crate::units::time_zone(&raw.time_zone) {
            self.problem(&["report", "time_zone"], e.to_string());
        }
        if raw.folder.as_os_str().is_empty() {
            self.problem(&["report", "folder"], "the report folder cannot be empty");
        }
        let mut formats = Vec::new();
        for f in &raw.formats {
            if !["html", "md", "json"].contains(&f.as_str()) {
                self.problem(
                    &["report", "formats"],
                    format!("unknown format {f:?}: use \"html\", \"md\" or \"json\""),
                );
            } else if formats.contains(f) {
                self.problem(&["report", "formats"], format!("{f:?} is listed twice"));
            } else {
                formats.push(f.clone());
            }
        }
        if raw.formats.is_empty() {
            self.problem(&["report", "formats"], "list at least one format");
        }
        ReportSettings {
            weekday: weekday.unwrap_or(Weekday::Monday),
            time: time.unwrap_or(Time::midnight()),
            time_zone: raw.time_zone,
            folder: relative_to(self.dir, &raw.folder),
            formats,
        }
    }
}

#[cfg(test)]
mod report_tests {
    use super::*;

    const LOOP: &str =
        "[loops.TIC-101]\nop_min = 0\nop_max = 100\nspec = { settle_within_s = 900 }\n";

    #[test]
    fn a_report_section_is_read_with_its_defaults() {
        let text = format!(
            "{LOOP}[report]\nweekday = \"Monday\"\ntime = \"07:30\"\nfolder = \"reports\"\n"
        );
        let c = Config::parse(&text, Path::new("/etc/headroom/plant.toml")).unwrap();
        let r = c.report.unwrap();
        assert_eq!(r.weekday, jiff::civil::Weekday::Monday);
        assert_eq!(r.time, jiff::civil::time(7, 30, 0, 0));
        assert_eq!(r.time_zone, "UTC");
        assert_eq!(r.folder, PathBuf::from("/etc/headroom/reports"));
        assert_eq!(r.formats, ["html", "md", "json"]);
    }

    #[test]
    fn report_mistakes_are_named_with_their_line_and_key() {
        let text = format!(
            "{LOOP}[report]\nweekday = \"Moonday\"\ntime = \"7 o'clock\"\ntime_zone = \"Mars/Olympus\"\nfolder = \"r\"\nformats = [\"pdf\"]\n"
        );
        let e = Config::parse(&text, Path::new("plant.toml"))
            .unwrap_err()
            .to_string();
        for expected in [
            "plant.toml:6:11: report.weekday: \"Moonday\" is not a weekday",
            "plant.toml:7:8: report.time:",
            "plant.toml:8:13: report.time_zone: unknown time zone \"Mars/Olympus\"",
            "report.formats: unknown format \"pdf\"",
        ] {
            assert!(e.contains(expected), "missing {expected:?} in:\n{e}");
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = r#"
[loops.TIC-101]
description = "Reactor jacket temperature"
op_min = 0.0
op_max = 100.0
[loops.TIC-101.spec]
settle_within_s = 900
max_overshoot_pct = 10
"#;

    /// A small watched plant: broker, store and two loops with every kind of source.
    const PLANT: &str = r#"
[store]
path = "data/headroom.db"
raw_retention_days = 14

[mqtt]
url = "mqtts://broker.plant.example"
client_id = "headroom-test"
username = "headroom"
password_file = "secrets/mqtt-password"
alert_topic = "headroom/test/alerts"
status_topic = "headroom/test/status"

[loops.TIC-101]
op_min = 0
op_max = 100
expected_period_s = 1.0
spec = { settle_within_s = 900 }
sp = { topic = "plant/r1/TIC-101/sp", format = "number" }
pv = { topic = "plant/r1/TIC-101/pv", format = "json", time_field = "ts" }
op = { topic = "plant/r1/TIC-101/op", format = "number" }
mode = { topic = "plant/r1/TIC-101/mode", format = "number", auto_values = ["AUTO", "CAS", "1"] }

[loops.FIC-201]
op_min = 0
op_max = 100
expected_period_s = 0.5
spec = { settle_within_s = 60 }
sp = { topic = "plant/feed/FIC-201/sp", format = "number" }
pv = { topic = "plant/feed/FIC-201/pv", format = "number" }
op = { topic = "plant/feed/FIC-201/op", format = "number" }
"#;

    fn parse(text: &str) -> Result<Config, String> {
        Config::parse(text, Path::new("plant.toml")).map_err(|e| e.to_string())
    }

    fn problems(text: &str) -> String {
        match parse(text) {
            Ok(_) => panic!("expected the config to be refused"),
            Err(e) => e,
        }
    }

    #[test]
    fn a_valid_loop_becomes_an_analysis_setup() {
        let cfg = Config::parse(GOOD, Path::new("x.toml")).unwrap();
        let s = cfg.loop_setup("TIC-101", Path::new("x.toml")).unwrap();
        assert_eq!(s.spec.settle_band_pct, 2.0);
        assert_eq!(s.spec.settle_within_s, 900.0);
        assert_eq!(s.op.max, 100.0);
        assert!(cfg.mqtt.is_none());
        assert!(!cfg.loops["TIC-101"].is_watched());
    }

    #[test]
    fn a_misspelt_key_is_an_error_naming_file_line_and_key() {
        let bad = GOOD.replace("max_overshoot_pct", "max_overshot_pct");
        let err = Config::parse(&bad, Path::new("plant.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.starts_with("plant.toml:8:"), "{err}");
        assert!(err.contains("max_overshot_pct"), "{err}");
    }

    #[test]
    fn an_inverted_op_range_is_refused_with_the_loop_tag() {
        let bad = GOOD.replace("op_max = 100.0", "op_max = -5.0");
        let err = Config::parse(&bad, Path::new("p.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("TIC-101") && err.contains("op_min"), "{err}");
        assert!(err.starts_with("p.toml:5:"), "{err}");
    }

    #[test]
    fn an_unknown_loop_lists_the_known_ones() {
        let cfg = Config::parse(GOOD, Path::new("p.toml")).unwrap();
        let err = cfg
            .loop_setup("FIC-9", Path::new("p.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("FIC-9") && err.contains("TIC-101"), "{err}");
    }

    #[test]
    fn a_spec_time_of_zero_is_refused() {
        let bad = GOOD.replace("settle_within_s = 900", "settle_within_s = 0");
        let err = Config::parse(&bad, Path::new("p.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("settle_within_s"), "{err}");
        assert!(err.starts_with("p.toml:7:"), "{err}");
    }

    #[test]
    fn the_example_config_is_valid_and_keeps_the_tic_101_spec() {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/headroom.toml");
        let cfg = Config::load(&path).unwrap_or_else(|e| panic!("{e}"));
        let tic = &cfg.loops["TIC-101"];
        assert_eq!((tic.op_min, tic.op_max), (0.0, 100.0));
        assert_eq!(tic.spec.settle_band_pct, 2.0);
        assert_eq!(tic.spec.settle_within_s, 900.0);
        assert_eq!(tic.spec.max_overshoot_pct, Some(10.0));
        assert!(cfg.loops.len() >= 4, "{:?}", cfg.loops.keys());
        assert!(cfg.loops.values().all(LoopConfig::is_watched));
        let mqtt = cfg.mqtt.as_ref().unwrap();
        assert!(matches!(mqtt.password_from, Some(PasswordSource::File(_))));
        // Every MQTT source on its own topic; skid B's loop read over Modbus in two requests
        // (the coil, and holding registers 100-103 with 110 apart).
        let mqtt_sources = cfg
            .loops
            .values()
            .flat_map(|l| l.sources())
            .filter(|(_, s)| s.as_mqtt().is_some())
            .count();
        assert_eq!(cfg.subscriptions().len(), mqtt_sources);
        let skid = &cfg.modbus["skid-b"];
        let plan = modbus::device_plan(&cfg.loops, "skid-b", skid).unwrap();
        assert_eq!(plan.requests.len(), 3, "{:?}", plan.requests);
    }

    #[test]
    fn a_watched_plant_is_read_into_checked_settings() {
        let cfg = parse(PLANT).unwrap();
        let m = cfg.mqtt.as_ref().unwrap();
        assert_eq!(
            (m.host.as_str(), m.port, m.tls),
            ("broker.plant.example", 8883, true)
        );
        assert_eq!(m.keep_alive_s, 30);
        assert_eq!(m.max_payload_bytes, 65_536);
        assert_eq!(m.max_future_ms(), 300_000);
        assert_eq!(
            m.password_from,
            Some(PasswordSource::File(PathBuf::from("secrets/mqtt-password")))
        );
        assert_eq!(cfg.store.raw_retention_days, 14);
        let tic = &cfg.loops["TIC-101"];
        assert_eq!(tic.stale_after(), Some(Duration::from_secs(10)));
        let pv = tic.pv.as_ref().unwrap().as_mqtt().unwrap();
        assert_eq!(
            pv.format,
            PayloadFormat::Json(JsonFields {
                value_field: "value".into(),
                time_field: "ts".into()
            })
        );
        let mode = tic.mode.as_ref().unwrap();
        assert!(mode.auto_values.is_auto_text("cas"));
        assert!(mode.auto_values.is_auto_number(1.0));
        assert!(!mode.auto_values.is_auto_number(2.0));
        // The loop's period feeds the analysis too.
        let setup = cfg.loop_setup("TIC-101", Path::new("p.toml")).unwrap();
        assert_eq!(setup.options.expected_period_s, Some(1.0));
    }

    #[test]
    fn subscriptions_are_the_distinct_filters_sorted() {
        let cfg = parse(PLANT).unwrap();
        let subs = cfg.subscriptions();
        assert_eq!(subs.len(), 7);
        assert_eq!(subs[0], "plant/feed/FIC-201/op");
        assert!(subs.windows(2).all(|w| w[0] < w[1]), "{subs:?}");
    }

    #[test]
    fn the_store_path_is_relative_to_the_config_folder() {
        let cfg = parse(PLANT).unwrap();
        assert_eq!(
            cfg.store_path(Path::new("/etc/headroom/headroom.toml")),
            PathBuf::from("/etc/headroom/data/headroom.db")
        );
        let abs = parse(&PLANT.replace("data/headroom.db", "/var/lib/headroom/h.db")).unwrap();
        assert_eq!(
            abs.store_path(Path::new("/etc/headroom/headroom.toml")),
            PathBuf::from("/var/lib/headroom/h.db")
        );
        // Without a [store] section: headroom.db beside the config.
        let cfg = parse(GOOD).unwrap();
        assert_eq!(
            cfg.store_path(Path::new("conf/x.toml")),
            PathBuf::from("conf/headroom.db")
        );
        assert_eq!(cfg.store.raw_retention_days, 30);
    }

    #[test]
    fn relative_secret_and_ca_paths_are_resolved_against_the_config_folder() {
        let text = PLANT.replace(
            "username = \"headroom\"",
            "username = \"headroom\"\nca_file = \"ca.pem\"",
        );
        let cfg = Config::parse(&text, Path::new("/etc/headroom/headroom.toml")).unwrap();
        let m = cfg.mqtt.unwrap();
        assert_eq!(m.ca_file, Some(PathBuf::from("/etc/headroom/ca.pem")));
        assert_eq!(
            m.password_from,
            Some(PasswordSource::File(PathBuf::from(
                "/etc/headroom/secrets/mqtt-password"
            )))
        );
    }

    #[test]
    fn an_inline_password_is_refused_pointing_to_file_or_env() {
        let text = PLANT.replace(
            "password_file = \"secrets/mqtt-password\"",
            "password = \"hunter2\"",
        );
        let err = problems(&text);
        assert!(err.starts_with("plant.toml:10:"), "{err}");
        assert!(err.contains("mqtt.password:"), "{err}");
        assert!(
            err.contains("password_file") && err.contains("password_env"),
            "{err}"
        );
        assert!(!err.contains("hunter2"), "{err}");
    }

    #[test]
    fn the_password_is_read_from_the_first_line_of_its_file_when_asked() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("pw"), "s3cret word\nsecond line\n").unwrap();
        let cfg_path = dir.path().join("headroom.toml");
        let text = PLANT.replace("secrets/mqtt-password", "pw");
        let cfg = Config::parse(&text, &cfg_path).unwrap();
        let m = cfg.mqtt.unwrap();
        let secret = m.password().unwrap().unwrap();
        assert_eq!(secret.expose(), "s3cret word");
        // Read at call time: a rotated password is seen at the next call.
        std::fs::write(dir.path().join("pw"), "rotated\r\n").unwrap();
        assert_eq!(m.password().unwrap().unwrap().expose(), "rotated");
        std::fs::write(dir.path().join("pw"), "\nx").unwrap();
        let err = m.password().unwrap_err().to_string();
        assert!(err.contains("empty"), "{err}");
        std::fs::remove_file(dir.path().join("pw")).unwrap();
        let err = m.password().unwrap_err().to_string();
        assert!(err.contains("pw"), "{err}");
    }

    #[test]
    fn the_password_can_come_from_the_environment() {
        // PATH is set wherever tests run; no test changes the environment.
        let text = PLANT.replace(
            "password_file = \"secrets/mqtt-password\"",
            "password_env = \"PATH\"",
        );
        let m = parse(&text).unwrap().mqtt.unwrap();
        assert_eq!(
            m.password().unwrap().unwrap().expose(),
            std::env::var("PATH").unwrap()
        );
        let text = PLANT.replace(
            "password_file = \"secrets/mqtt-password\"",
            "password_env = \"HEADROOM_TEST_VARIABLE_THAT_IS_NEVER_SET\"",
        );
        let err = parse(&text).unwrap().mqtt.unwrap().password().unwrap_err();
        assert!(err.to_string().contains("not set"), "{err}");
        // No password source, no password.
        let text = PLANT.replace("password_file = \"secrets/mqtt-password\"\n", "");
        assert!(
            parse(&text)
                .unwrap()
                .mqtt
                .unwrap()
                .password()
                .unwrap()
                .is_none()
        );
    }

    #[test]
    fn a_secret_prints_as_stars() {
        let s = Secret::new("hunter2");
        assert_eq!(format!("{s}"), "***");
        assert_eq!(format!("{s:?}"), "***");
        assert_eq!(format!("{:?}", Some(s)), "Some(***)");
    }

    #[test]
    fn password_sources_need_a_username_and_only_one_of_them() {
        let text = PLANT.replace("username = \"headroom\"\n", "");
        let err = problems(&text);
        assert!(
            err.contains("mqtt.password_file") && err.contains("username"),
            "{err}"
        );
        let text = PLANT.replace(
            "password_file",
            "password_env = \"HEADROOM_PW\"\npassword_file",
        );
        let err = problems(&text);
        assert!(err.contains("not both"), "{err}");
    }

    #[test]
    fn the_url_must_be_mqtt_or_mqtts_with_an_optional_port() {
        let url = |u: &str| parse_broker_url(u);
        assert_eq!(
            url("mqtt://127.0.0.1"),
            Ok(("127.0.0.1".into(), 1883, false))
        );
        assert_eq!(
            url("mqtts://b.example"),
            Ok(("b.example".into(), 8883, true))
        );
        assert_eq!(
            url("mqtt://b.example:2883/"),
            Ok(("b.example".into(), 2883, false))
        );
        assert_eq!(url("mqtts://[::1]:9883"), Ok(("::1".into(), 9883, true)));
        assert_eq!(url("mqtt://[fe80::1]"), Ok(("fe80::1".into(), 1883, false)));
        for bad in [
            "http://b.example",
            "tcp://b.example:1883",
            "b.example:1883",
            "mqtt://",
            "mqtt://:1883",
            "mqtt://b.example:0",
            "mqtt://b.example:99999",
            "mqtt://b.example:port",
            "mqtt://b.example/some/path",
            "mqtt://user:pw@b.example",
            "mqtt://[::1",
        ] {
            assert!(url(bad).is_err(), "{bad}");
        }
        let err = problems(&PLANT.replace("mqtts://broker.plant.example", "ws://broker"));
        assert!(err.starts_with("plant.toml:7:7: mqtt.url:"), "{err}");
        assert!(err.contains("mqtt:// or mqtts://"), "{err}");
    }

    #[test]
    fn client_ids_with_wildcards_slashes_or_dollars_are_refused() {
        for c in ["+", "#", "/", "$"] {
            let text = PLANT.replace("headroom-test", &format!("headroom{c}test"));
            let err = problems(&text);
            assert!(err.starts_with("plant.toml:8:"), "{err}");
            assert!(err.contains("mqtt.client_id"), "{err}");
        }
        let err = problems(&PLANT.replace("headroom-test", ""));
        assert!(err.contains("cannot be empty"), "{err}");
        let err = problems(&PLANT.replace("headroom-test", "headroom test"));
        assert!(err.contains("spaces"), "{err}");
    }

    #[test]
    fn a_ca_file_without_tls_is_refused() {
        let text = PLANT
            .replace("mqtts://", "mqtt://")
            .replace("username", "ca_file = \"ca.pem\"\nusername");
        let err = problems(&text);
        assert!(
            err.contains("mqtt.ca_file") && err.contains("mqtts://"),
            "{err}"
        );
    }

    #[test]
    fn published_topics_are_checked() {
        let err = problems(&PLANT.replace("headroom/test/alerts", "headroom/+/alerts"));
        assert!(err.contains("mqtt.alert_topic"), "{err}");
        let err = problems(&PLANT.replace("headroom/test/status", "headroom/test/alerts"));
        assert!(err.contains("mqtt.status_topic"), "{err}");
    }

    #[test]
    fn a_signal_filter_that_catches_our_own_alerts_is_refused() {
        let text = PLANT.replace("plant/feed/FIC-201/op", "headroom/#");
        let err = problems(&text);
        assert!(err.contains("loops.FIC-201.op.topic"), "{err}");
        assert!(
            err.contains("mqtt.alert_topic") && err.contains("mqtt.status_topic"),
            "{err}"
        );
    }

    #[test]
    fn a_topic_used_by_two_sources_is_refused_naming_both() {
        let text = PLANT.replace("plant/feed/FIC-201/pv", "plant/r1/TIC-101/pv");
        let err = problems(&text);
        assert!(err.contains("loops.TIC-101.pv.topic"), "{err}");
        assert!(err.contains("loops.FIC-201.pv"), "{err}");
        assert!(err.contains("plant/r1/TIC-101/pv"), "{err}");
        assert_eq!(err.lines().count(), 1, "{err}");
    }

    #[test]
    fn overlapping_filters_are_refused_with_a_topic_both_match() {
        let text = PLANT.replace("plant/feed/FIC-201/op", "plant/+/TIC-101/pv");
        let err = problems(&text);
        assert!(err.contains("loops.TIC-101.pv.topic"), "{err}");
        assert!(err.contains("plant/r1/TIC-101/pv"), "{err}");
        assert!(err.contains("two signals"), "{err}");
        // A wildcard that shares no topic with the others is fine.
        let text = PLANT.replace("plant/feed/FIC-201/op", "plant/feed/+/op");
        parse(&text).unwrap();
    }

    #[test]
    fn invalid_filters_are_refused_at_their_line() {
        let err = problems(&PLANT.replace("plant/feed/FIC-201/op", "plant/feed/#/op"));
        assert!(err.starts_with("plant.toml:31:"), "{err}");
        assert!(err.contains("loops.FIC-201.op.topic"), "{err}");
    }

    #[test]
    fn a_loop_with_pv_but_no_op_is_refused() {
        let text = PLANT.replace(
            "op = { topic = \"plant/feed/FIC-201/op\", format = \"number\" }\n",
            "",
        );
        let err = problems(&text);
        assert!(err.contains("loops.FIC-201.op:"), "{err}");
        assert!(err.contains("sp, pv but none for op"), "{err}");
        // Located at the loop, since the key itself is missing.
        assert!(err.starts_with("plant.toml:24:"), "{err}");
    }

    #[test]
    fn periods_must_be_positive_and_given_for_watched_loops() {
        for p in ["0", "-1.0", "nan"] {
            let text = PLANT.replace(
                "expected_period_s = 0.5",
                &format!("expected_period_s = {p}"),
            );
            let err = problems(&text);
            assert!(
                err.contains("loops.FIC-201.expected_period_s"),
                "{p}: {err}"
            );
        }
        let err = problems(&PLANT.replace("expected_period_s = 0.5\n", ""));
        assert!(
            err.contains("loops.FIC-201.expected_period_s") && err.contains("needs"),
            "{err}"
        );
        let text = PLANT.replace(
            "expected_period_s = 0.5",
            "expected_period_s = 0.5\nstale_after_periods = 0.5",
        );
        let err = problems(&text);
        assert!(err.contains("stale_after_periods"), "{err}");
    }

    #[test]
    fn a_source_needs_a_topic_and_a_format() {
        let err = problems(&PLANT.replace(
            "{ topic = \"plant/feed/FIC-201/sp\", format = \"number\" }",
            "{ format = \"number\" }",
        ));
        assert!(
            err.contains("loops.FIC-201.sp:") && err.contains("topic"),
            "{err}"
        );
        let err = problems(&PLANT.replace(
            "{ topic = \"plant/feed/FIC-201/sp\", format = \"number\" }",
            "{ topic = \"plant/feed/FIC-201/sp\" }",
        ));
        assert!(
            err.contains("loops.FIC-201.sp:") && err.contains("format"),
            "{err}"
        );
        let err = problems(&PLANT.replace("format = \"json\"", "format = \"xml\""));
        assert!(
            err.starts_with("plant.toml:20:") && err.contains("xml"),
            "{err}"
        );
    }

    #[test]
    fn keys_that_do_not_apply_to_a_source_are_refused() {
        let err = problems(&PLANT.replace(
            "sp = { topic = \"plant/feed/FIC-201/sp\", format = \"number\" }",
            "sp = { topic = \"plant/feed/FIC-201/sp\", format = \"number\", value_field = \"v\" }",
        ));
        assert!(err.contains("loops.FIC-201.sp.value_field"), "{err}");
        let err = problems(&PLANT.replace(
            "sp = { topic = \"plant/feed/FIC-201/sp\", format = \"number\" }",
            "sp = { topic = \"plant/feed/FIC-201/sp\", format = \"number\", \
             auto_values = [\"AUTO\"] }",
        ));
        assert!(err.contains("loops.FIC-201.sp.auto_values"), "{err}");
        let err = problems(&PLANT.replace("time_field = \"ts\"", "time_field = \"value\""));
        assert!(err.contains("loops.TIC-101.pv.time_field"), "{err}");
    }

    #[test]
    fn mqtt_sources_need_an_mqtt_section() {
        let start = PLANT.find("[mqtt]").unwrap();
        let end = PLANT.find("[loops.TIC-101]").unwrap();
        let text = format!("{}{}", &PLANT[..start], &PLANT[end..]);
        let err = problems(&text);
        assert!(err.contains("[mqtt]"), "{err}");
    }

    #[test]
    fn every_problem_is_reported_at_once_in_file_order() {
        let text = PLANT
            .replace("headroom-test", "a/b")
            .replace("expected_period_s = 0.5", "expected_period_s = -1")
            .replace("raw_retention_days = 14", "raw_retention_days = 0");
        let err = problems(&text);
        let lines: Vec<&str> = err.lines().collect();
        assert_eq!(lines.len(), 3, "{err}");
        assert!(lines[0].starts_with("plant.toml:4:") && lines[0].contains("raw_retention_days"));
        assert!(lines[1].starts_with("plant.toml:8:") && lines[1].contains("client_id"));
        assert!(lines[2].starts_with("plant.toml:27:") && lines[2].contains("expected_period_s"));
    }

    #[test]
    fn out_of_range_broker_numbers_are_refused() {
        for (key, value) in [
            ("keep_alive_s", "0"),
            ("keep_alive_s", "70000"),
            ("max_payload_bytes", "0"),
            ("max_future_s", "-1"),
            ("max_future_s", "100000"),
        ] {
            let text = PLANT.replace("username", &format!("{key} = {value}\nusername"));
            let err = problems(&text);
            assert!(err.contains(&format!("mqtt.{key}")), "{key}={value}: {err}");
        }
    }

    #[test]
    fn loop_tags_with_spaces_or_topic_characters_are_refused() {
        let err = problems(
            &GOOD
                .replace("[loops.TIC-101]", "[loops.\"TIC 101\"]")
                .replace("[loops.TIC-101.spec]", "[loops.\"TIC 101\".spec]"),
        );
        assert!(err.contains("loops.\"TIC 101\""), "{err}");
        assert!(err.starts_with("plant.toml:2:"), "{err}");
    }

    #[test]
    fn auto_values_match_words_ignoring_case_and_numbers_by_the_list() {
        let words = AutoValues::new(&["Auto", "CAS"]);
        assert!(words.is_auto_text("AUTO") && words.is_auto_text(" cas "));
        assert!(!words.is_auto_text("MAN"));
        // Only words listed: any non-zero number is automatic.
        assert!(words.is_auto_number(2.0) && words.is_auto_text("1"));
        assert!(!words.is_auto_number(0.0) && !words.is_auto_text("0"));
        // Numbers listed: exactly those.
        let enumeration = AutoValues::new(&["1", "2"]);
        assert!(enumeration.is_auto_number(2.0) && enumeration.is_auto_text("1.0"));
        assert!(!enumeration.is_auto_number(3.0));
        assert_eq!(
            words.describe(),
            "Auto, CAS (any case) or any non-zero number"
        );
        assert_eq!(enumeration.describe(), "one of 1, 2");
        let default = AutoValues::default();
        assert!(default.is_auto_text("auto") && default.is_auto_text("True"));
        assert!(default.is_auto_number(1.0) && !default.is_auto_text("manual"));
    }

    #[test]
    fn describe_lists_loops_signals_topics_and_the_broker_settings_needed() {
        let cfg = parse(PLANT).unwrap();
        let d = cfg.describe(Path::new("/etc/headroom/headroom.toml"));
        for want in [
            "/etc/headroom/data/headroom.db",
            "broker.plant.example:8883",
            "client id headroom-test",
            "password from file",
            "TIC-101",
            "FIC-201",
            "plant/r1/TIC-101/pv",
            "json, value \"value\", time \"ts\"",
            "by 900 s",
            "AUTO, CAS (any case) or one of 1",
            "QoS 1",
            "max_queued_messages 0",
            "max_inflight_messages",
        ] {
            assert!(d.contains(want), "missing {want:?} in:\n{d}");
        }
        let d = parse(GOOD).unwrap().describe(Path::new("x.toml"));
        assert!(d.contains("not watched"), "{d}");
        assert!(!d.contains("max_queued_messages"), "{d}");
    }
}
