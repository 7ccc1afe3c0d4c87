//! The file as written: private structs that mirror the TOML, so that serde reports syntax, type
//! and unknown-key errors at their line before any validation runs. Everything here is unchecked;
//! the [`super::Checker`] turns it into the public settings.

use crate::analysis::controller::ControllerSetup;
use crate::analysis::{ActuatorRating, Spec};
use crate::modbus::registers::{DataType, Order, Table};
use serde::Deserialize;
use serde::de::IgnoredAny;
use std::collections::BTreeMap;
use std::path::PathBuf;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawConfig {
    pub store: Option<RawStore>,
    pub mqtt: Option<RawMqtt>,
    #[serde(default)]
    pub modbus: BTreeMap<String, RawDevice>,
    #[serde(default)]
    pub loops: BTreeMap<String, RawLoop>,
    pub report: Option<RawReport>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawStore {
    pub path: Option<PathBuf>,
    pub raw_retention_days: Option<i64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawMqtt {
    pub url: String,
    pub client_id: String,
    pub username: Option<String>,
    /// Only here to be refused with a better message than "unknown field".
    pub password: Option<IgnoredAny>,
    pub password_file: Option<PathBuf>,
    pub password_env: Option<String>,
    pub ca_file: Option<PathBuf>,
    pub keep_alive_s: Option<i64>,
    pub alert_topic: String,
    pub status_topic: Option<String>,
    pub max_payload_bytes: Option<i64>,
    pub max_future_s: Option<i64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawLoop {
    #[serde(default)]
    pub description: String,
    #[serde(default)]
    pub pv_unit: String,
    #[serde(default = "default_op_unit")]
    pub op_unit: String,
    pub op_min: f64,
    pub op_max: f64,
    /// The core's own spec type, read as is; its numbers are checked with the rest of the setup.
    pub spec: Spec,
    #[serde(default)]
    pub analysis: AnalysisConfig,
    pub expected_period_s: Option<f64>,
    pub stale_after_periods: Option<f64>,
    pub sp: Option<RawSource>,
    pub pv: Option<RawSource>,
    pub op: Option<RawSource>,
    pub mode: Option<RawSource>,
    /// The core's own types, read as they are and checked with the rest of the setup.
    pub controller: Option<ControllerSetup>,
    pub actuator: Option<ActuatorRating>,
}

fn default_op_unit() -> String {
    "%".into()
}

/// A signal's source as written. One struct for every kind: the kind is told by which keys are
/// present (`device` makes it a Modbus source, else it is an MQTT source).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawSource {
    pub topic: Option<String>,
    pub format: Option<RawFormat>,
    pub value_field: Option<String>,
    pub time_field: Option<String>,
    pub auto_values: Option<Vec<String>>,
    // Modbus keys (see [`RawSource::register_keys`]); serde cannot flatten under
    // deny_unknown_fields.
    pub device: Option<String>,
    pub table: Option<Table>,
    pub address: Option<i64>,
    pub data_type: Option<DataType>,
    pub order: Option<Order>,
    pub scale: Option<f64>,
    pub offset: Option<f64>,
    pub raw_range: Option<[f64; 2]>,
    pub eng_range: Option<[f64; 2]>,
}

impl RawSource {
    /// The register keys that are present, for "does not apply" messages.
    pub(super) fn register_keys(&self) -> Vec<&'static str> {
        [
            ("device", self.device.is_some()),
            ("table", self.table.is_some()),
            ("address", self.address.is_some()),
            ("data_type", self.data_type.is_some()),
            ("order", self.order.is_some()),
            ("scale", self.scale.is_some()),
            ("offset", self.offset.is_some()),
            ("raw_range", self.raw_range.is_some()),
            ("eng_range", self.eng_range.is_some()),
        ]
        .into_iter()
        .filter_map(|(k, g)| g.then_some(k))
        .collect()
    }
}

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(rename_all = "lowercase")]
pub(super) enum RawFormat {
    Number,
    Json,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawReport {
    pub weekday: String,
    pub time: String,
    #[serde(default = "default_report_zone")]
    pub time_zone: String,
    pub folder: PathBuf,
    #[serde(default = "default_report_formats")]
    pub formats: Vec<String>,
}

fn default_report_zone() -> String {
    "UTC".into()
}

fn default_report_formats() -> Vec<String> {
    vec!["html".into(), "md".into(), "json".into()]
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

/// `[modbus.<name>]` as written.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawDevice {
    pub address: String,
    pub unit_id: Option<i64>,
    pub poll_period_s: f64,
    pub timeout_s: Option<f64>,
    pub max_registers_per_request: Option<i64>,
    pub max_gap: Option<i64>,
}
