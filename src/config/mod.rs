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
//!
//! Where each concern lives:
//!
//! - here: [`Config`], [`Config::load`] / [`Config::parse`], [`Config::loop_setup`],
//!   [`Config::store_path`], [`Config::subscriptions`], and `[store]`;
//! - `error`: [`ConfigError`], [`Problem`] with its file position, and the checker that
//!   collects and locates problems;
//! - `raw`: the private structs that mirror the TOML (and [`AnalysisConfig`], read as is);
//! - `mqtt`: `[mqtt]` ([`MqttSettings`], [`Secret`], [`PasswordSource`]), broker URL and client
//!   id rules, and the topic checks across loops;
//! - `source`: a signal's source as checked ([`Source`], [`MqttSource`], [`ModbusSource`],
//!   [`ModeSource`]) and the checks of one source as written;
//! - `loops`: `[loops.<tag>]` ([`LoopConfig`]) and the loop tag rule;
//! - [`modbus`]: `[modbus.<name>]` devices (checked into the Modbus source's own
//!   [`ModbusDevice`]), and the register sources' use of them across loops;
//! - `report`: `[report]` ([`ReportSettings`]);
//! - `describe`: [`Config::describe`], what `check-config` prints;
//! - `fixture` (tests only): config text built from one set of pieces, for tests anywhere in
//!   the crate.

mod describe;
mod error;
#[cfg(test)]
pub(crate) mod fixture;
mod loops;
pub mod modbus;
mod mqtt;
mod raw;
mod report;
mod source;

pub use error::{ConfigError, Problem};
pub use loops::LoopConfig;
pub use mqtt::{MqttSettings, PasswordSource, Secret};
pub use raw::AnalysisConfig;
pub use report::ReportSettings;
pub use source::{ModbusSource, ModeSource, MqttSource, Source};

use crate::analysis::LoopSetup;
use crate::modbus::source::ModbusDevice;
use crate::mqtt::Route;
use crate::sample::Signal;
use error::Checker;
use raw::{RawConfig, RawStore};
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

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
        let raw: RawConfig = toml::from_str(text).map_err(|e| error::invalid(text, path, &e))?;
        let mut checker = Checker::new(text, path);
        let cfg = checker.config(raw);
        checker.finish(cfg, path)
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

    /// Every MQTT source as a route from its topic filter to its loop signal, in loop and signal
    /// order: what the daemon's topic map is built from.
    pub fn mqtt_routes(&self) -> Vec<Route> {
        let mut routes = Vec::new();
        for (tag, l) in &self.loops {
            let loop_tag: std::sync::Arc<str> = std::sync::Arc::from(tag.as_str());
            for (signal, source) in l.sources() {
                let Some(m) = source.as_mqtt() else { continue };
                routes.push(Route {
                    filter: m.topic.clone(),
                    loop_tag: loop_tag.clone(),
                    signal,
                    format: m.format.clone(),
                    auto_values: match (signal, &l.mode) {
                        (Signal::Mode, Some(mode)) => Some(mode.auto_values.clone()),
                        _ => None,
                    },
                });
            }
        }
        routes
    }
}

impl Checker<'_> {
    fn config(&mut self, raw: RawConfig) -> Config {
        let store = raw.store.map(|s| self.store(s)).unwrap_or_default();
        let mqtt = raw.mqtt.map(|m| self.mqtt(m));
        let modbus = self.modbus_devices(raw.modbus);
        let cx = source::Context {
            have_mqtt: mqtt.is_some(),
            devices: &modbus,
        };
        let mut loops = BTreeMap::new();
        for (tag, l) in raw.loops {
            let l = self.a_loop(&tag, l, cx);
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
        self.within(
            &["store", "raw_retention_days"],
            days,
            1..=MAX_RAW_RETENTION_DAYS,
            format_args!("must be a whole number of days from 1 to {MAX_RAW_RETENTION_DAYS}"),
        );
        StoreSettings {
            path,
            raw_retention_days: u32::try_from(days).unwrap_or(DEFAULT_RAW_RETENTION_DAYS),
        }
    }
}

/// `path` as is when absolute, else under `dir`.
pub(super) fn relative_to(dir: &Path, path: &Path) -> PathBuf {
    if path.is_absolute() {
        path.to_owned()
    } else {
        dir.join(path)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mqtt::{JsonFields, PayloadFormat};
    use fixture::{GOOD, PLANT, parse, problems};
    use std::time::Duration;

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
        let err = problems(&bad);
        assert!(err.starts_with("plant.toml:8:"), "{err}");
        assert!(err.contains("max_overshot_pct"), "{err}");
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
        let cfg = parse(&PLANT).unwrap();
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
        let cfg = parse(&PLANT).unwrap();
        let subs = cfg.subscriptions();
        assert_eq!(subs.len(), 7);
        assert_eq!(subs[0], "plant/feed/FIC-201/op");
        assert!(subs.windows(2).all(|w| w[0] < w[1]), "{subs:?}");
    }

    #[test]
    fn the_store_path_is_relative_to_the_config_folder() {
        let cfg = parse(&PLANT).unwrap();
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
}
