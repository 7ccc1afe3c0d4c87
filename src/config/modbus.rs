//! The Modbus part of the configuration: devices (`[modbus.<name>]`) and register sources of
//! loop signals (`pv = { device = "...", table = "...", address = ... }`).
//!
//! ```toml
//! [modbus.skid-b]
//! address = "10.0.4.21:502"      # host:port; the port defaults to 502
//! unit_id = 1                    # 0-255, default 1
//! poll_period_s = 1.0            # how often the device is read
//! timeout_s = 0.5                # per request; default 1 s
//! max_registers_per_request = 60 # 1-125, default 125
//! max_gap = 4                    # unused registers a request may read to bridge two sources
//!
//! [loops.LIC-301]
//! pv = { device = "skid-b", table = "input_registers", address = 20, data_type = "f32", order = "CDAB" }
//! op = { device = "skid-b", table = "holding_registers", address = 7, data_type = "u16",
//!        raw_range = [0, 27648], eng_range = [0, 100] }
//! mode = { device = "skid-b", table = "discrete_inputs", address = 3 }
//! ```
//!
//! Addresses are 0-based protocol addresses (see [`crate::modbus::registers`]): holding register
//! 40108 in a manual's reference notation is `table = "holding_registers", address = 107`.

use super::error::Checker;
use super::loops::{LoopConfig, Source, tag_problem};
use crate::modbus::plan::{self, Limits, Span};
use crate::modbus::registers::{self, Address, DataType, Order, Scaling, Table};
use crate::sample::Signal;
use serde::Deserialize;
use std::collections::BTreeMap;
use std::time::Duration;

/// One Modbus TCP device the daemon polls.
#[derive(Debug, Clone, PartialEq)]
pub struct ModbusDevice {
    /// `host:port` as written (a port is always present after validation).
    pub address: String,
    pub unit_id: u8,
    pub poll_period: Duration,
    /// Longest wait for one request's answer (and for the connection to open).
    pub timeout: Duration,
    /// Request size limits and the gap that may be bridged.
    pub limits: Limits,
}

/// A signal read from registers (or bits) of a device.
#[derive(Debug, Clone, PartialEq)]
pub struct ModbusSource {
    /// The device's name under `[modbus]`.
    pub device: String,
    pub register: registers::Source,
}

/// Modbus TCP's registered port (Modbus Messaging on TCP/IP Implementation Guide V1.0b, §4.1).
pub const DEFAULT_PORT: u16 = 502;
/// Unit id when none is given: 1, which most TCP devices and gateways answer to (common practice).
const DEFAULT_UNIT_ID: u8 = 1;
const DEFAULT_TIMEOUT_S: f64 = 1.0;
/// Below this a poll period is a typing mistake, not a plan.
const MIN_POLL_PERIOD_S: f64 = 0.001;
/// Longest poll period: a day.
const MAX_POLL_PERIOD_S: f64 = 86_400.0;
/// Longest wait for one answer: a device slower than a minute is not answering.
const MAX_TIMEOUT_S: f64 = 60.0;

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct RawDevice {
    address: String,
    unit_id: Option<i64>,
    poll_period_s: f64,
    timeout_s: Option<f64>,
    max_registers_per_request: Option<i64>,
    max_gap: Option<i64>,
}

/// The register keys of a signal's source, as written (flattened into the source's table).
#[derive(Debug, Default, Deserialize)]
pub(super) struct RawRegister {
    pub(super) device: Option<String>,
    pub(super) table: Option<Table>,
    pub(super) address: Option<i64>,
    pub(super) data_type: Option<DataType>,
    pub(super) order: Option<Order>,
    pub(super) scale: Option<f64>,
    pub(super) offset: Option<f64>,
    pub(super) raw_range: Option<[f64; 2]>,
    pub(super) eng_range: Option<[f64; 2]>,
}

impl RawRegister {
    /// The register keys that are present, for "does not apply" messages.
    pub(super) fn given(&self) -> Vec<&'static str> {
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

impl Checker<'_> {
    pub(super) fn modbus_devices(
        &mut self,
        raw: BTreeMap<String, RawDevice>,
    ) -> BTreeMap<String, ModbusDevice> {
        raw.into_iter()
            .map(|(name, d)| {
                let d = self.device(&name, d);
                (name, d)
            })
            .collect()
    }

    fn device(&mut self, name: &str, raw: RawDevice) -> ModbusDevice {
        let at = |key: &'static str| ["modbus", name, key];
        if let Some(m) = tag_problem(name) {
            self.problem(&["modbus", name], m.replace("loop tag", "device name"));
        }
        let address = match parse_device_address(&raw.address) {
            Ok(a) => a,
            Err(e) => {
                self.problem(&at("address"), e.to_string());
                raw.address.clone()
            }
        };
        let unit_id = raw.unit_id.unwrap_or(i64::from(DEFAULT_UNIT_ID));
        self.within(
            &at("unit_id"),
            unit_id,
            0..=255,
            "must be a whole number from 0 to 255",
        );
        let period = self.seconds(&at("poll_period_s"), raw.poll_period_s, MAX_POLL_PERIOD_S);
        let timeout = self.seconds(
            &at("timeout_s"),
            raw.timeout_s.unwrap_or(DEFAULT_TIMEOUT_S),
            MAX_TIMEOUT_S,
        );
        // The protocol's own limit per register request: the default request size, and the
        // largest gap worth bridging.
        let most = Table::HoldingRegisters.protocol_max();
        let max_registers = raw.max_registers_per_request.unwrap_or(i64::from(most));
        let max_gap = raw.max_gap.unwrap_or(0);
        self.within(
            &at("max_gap"),
            max_gap,
            0..=i64::from(most),
            format_args!("must be a whole number of registers from 0 to {most}"),
        );
        // A count that does not fit is refused by `Limits::new` like any other out of range.
        let limits = Limits::new(
            u16::try_from(max_registers).unwrap_or(0),
            Table::Coils.protocol_max(),
            u16::try_from(max_gap).unwrap_or(0),
        )
        .unwrap_or_else(|e| {
            self.problem(
                &at("max_registers_per_request"),
                format!("{e} (got {max_registers})"),
            );
            Limits::default()
        });
        ModbusDevice {
            address,
            unit_id: u8::try_from(unit_id).unwrap_or(DEFAULT_UNIT_ID),
            poll_period: period,
            timeout,
            limits,
        }
    }

    /// A duration in seconds from [`MIN_POLL_PERIOD_S`] to `max` (a problem at `keys` when it is
    /// not), clamped into that range.
    fn seconds(&mut self, keys: &[&str], value: f64, max: f64) -> Duration {
        self.within(
            keys,
            value,
            MIN_POLL_PERIOD_S..=max,
            format_args!("must be a number of seconds from {MIN_POLL_PERIOD_S} to {max}"),
        );
        let clamped = if value.is_nan() {
            MIN_POLL_PERIOD_S
        } else {
            value.clamp(MIN_POLL_PERIOD_S, max)
        };
        Duration::from_secs_f64(clamped)
    }

    /// A register source; `devices` are the configured device names.
    pub(super) fn modbus_source(
        &mut self,
        tag: &str,
        signal: Signal,
        raw: RawRegister,
        devices: &BTreeMap<String, ModbusDevice>,
    ) -> Source {
        let name = signal.as_str();
        let at = |key: &'static str| ["loops", tag, name, key];
        let device = raw.device.clone().unwrap_or_default();
        if !devices.contains_key(&device) {
            let known = if devices.is_empty() {
                "no [modbus.<name>] device is configured".to_owned()
            } else {
                format!(
                    "devices: {}",
                    devices.keys().cloned().collect::<Vec<_>>().join(", ")
                )
            };
            self.problem(
                &at("device"),
                format!("no Modbus device named \"{device}\" ({known})"),
            );
        }
        let (table, address, data_type) = self.register_place(tag, name, &raw);
        if raw.order.is_some() && data_type == DataType::Bool {
            self.problem(&at("order"), "a bit has no word or byte order");
        }
        let order = raw.order.unwrap_or_default();
        let scaling = self.scaling(tag, name, &raw);
        let register = registers::Source::new(table, address, data_type, order, scaling)
            .unwrap_or_else(|e| {
                let key = if matches!(e, registers::RegisterError::TypeNotInTable { .. }) {
                    "data_type"
                } else {
                    "address"
                };
                self.problem(&at(key), e.to_string());
                registers::Source {
                    table,
                    address: Address::new(0),
                    data_type: if table.is_bits() {
                        DataType::Bool
                    } else {
                        DataType::U16
                    },
                    order,
                    scaling,
                }
            });
        Source::Modbus(ModbusSource { device, register })
    }

    /// Where a register source reads, and what: its table, address and data type (a bit when
    /// the table holds bits and no type is given).
    fn register_place(
        &mut self,
        tag: &str,
        name: &str,
        raw: &RawRegister,
    ) -> (Table, Address, DataType) {
        let table = raw.table.unwrap_or_else(|| {
            self.problem(
                &["loops", tag, name],
                "a Modbus source needs `table`: \"holding_registers\", \"input_registers\", \
                 \"coils\" or \"discrete_inputs\"",
            );
            Table::HoldingRegisters
        });
        let address = match raw.address.map(Address::parse) {
            Some(Ok(a)) => a,
            Some(Err(e)) => {
                self.problem(&["loops", tag, name, "address"], e.to_string());
                Address::new(0)
            }
            None => {
                self.problem(
                    &["loops", tag, name],
                    "a Modbus source needs `address`: the 0-based protocol address (holding \
                     register 40001 in reference notation is address 0)",
                );
                Address::new(0)
            }
        };
        let data_type = match raw.data_type {
            Some(t) => t,
            None if table.is_bits() => DataType::Bool,
            None => {
                self.problem(
                    &["loops", tag, name],
                    "a register source needs `data_type`: u16, i16, u32, i32, f32 or f64",
                );
                DataType::F32
            }
        };
        (table, address, data_type)
    }

    /// A register source's scaling: scale and offset, or a raw range onto an engineering range,
    /// or none.
    fn scaling(&mut self, tag: &str, name: &str, raw: &RawRegister) -> Scaling {
        let at = |key: &'static str| ["loops", tag, name, key];
        let linear = raw.scale.is_some() || raw.offset.is_some();
        let ranged = raw.raw_range.is_some() || raw.eng_range.is_some();
        let scaling = match (linear, raw.raw_range, raw.eng_range) {
            (true, _, _) if ranged => {
                self.problem(
                    &at("raw_range"),
                    "give either scale/offset or raw_range/eng_range, not both",
                );
                Ok(Scaling::IDENTITY)
            }
            (true, _, _) => Scaling::linear(raw.scale.unwrap_or(1.0), raw.offset.unwrap_or(0.0)),
            (false, Some([r0, r1]), Some([e0, e1])) => Scaling::range(r0, r1, e0, e1),
            (false, Some(_), None) => {
                self.problem(&at("raw_range"), "raw_range needs eng_range too");
                Ok(Scaling::IDENTITY)
            }
            (false, None, Some(_)) => {
                self.problem(&at("eng_range"), "eng_range needs raw_range too");
                Ok(Scaling::IDENTITY)
            }
            (false, None, None) => Ok(Scaling::IDENTITY),
        };
        scaling.unwrap_or_else(|e| {
            let key = if linear { "scale" } else { "raw_range" };
            self.problem(&at(key), e.to_string());
            Scaling::IDENTITY
        })
    }

    /// Checks across loops: sources that overlap on one device, sources a device's request limit
    /// cannot hold, and devices nothing reads from.
    pub(super) fn modbus_usage(
        &mut self,
        loops: &BTreeMap<String, LoopConfig>,
        devices: &BTreeMap<String, ModbusDevice>,
    ) {
        for (name, device) in devices {
            let users = device_sources(loops, name);
            if users.is_empty() {
                self.problem(
                    &["modbus", name],
                    "no loop signal reads from this device: remove it, or name it in a source's \
                     `device`",
                );
                continue;
            }
            for (i, (tag_b, sig_b, b)) in users.iter().enumerate() {
                let span_b = span(b);
                for (tag_a, sig_a, a) in &users[..i] {
                    if overlaps(&span(a), &span_b) {
                        self.problem(
                            &["loops", tag_b, sig_b.as_str(), "address"],
                            format!(
                                "{} of device {name} overlaps {} of loops.{tag_a}.{sig_a}: one \
                                 register cannot hold two signals",
                                span_b,
                                span(a)
                            ),
                        );
                    }
                }
                let limit = device.limits.max_for(b.table);
                if b.count() > limit {
                    self.problem(
                        &["loops", tag_b, sig_b.as_str(), "data_type"],
                        format!(
                            "{} takes {} registers but device {name} allows only {limit} per \
                             request (max_registers_per_request)",
                            b.data_type,
                            b.count()
                        ),
                    );
                }
            }
        }
    }
}

/// The sources reading from one device: (loop tag, signal, register), in loop and signal order.
pub fn device_sources<'a>(
    loops: &'a BTreeMap<String, LoopConfig>,
    device: &str,
) -> Vec<(&'a str, Signal, &'a registers::Source)> {
    loops
        .iter()
        .flat_map(|(tag, l)| {
            l.sources().filter_map(move |(signal, s)| match s {
                Source::Modbus(m) if m.device == device => {
                    Some((tag.as_str(), signal, &m.register))
                }
                _ => None,
            })
        })
        .collect()
}

/// The elements a register source occupies.
pub fn span(s: &registers::Source) -> Span {
    Span {
        table: s.table,
        address: s.address,
        count: s.count(),
    }
}

fn overlaps(a: &Span, b: &Span) -> bool {
    let end = |s: &Span| u32::from(s.address.get()) + u32::from(s.count);
    a.table == b.table && u32::from(a.address.get()) < end(b) && u32::from(b.address.get()) < end(a)
}

/// Why a device address is unusable.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
enum AddressError {
    #[error(
        "expected host:port, such as \"10.0.4.21:502\" or \"plc-7.plant.example:502\" (got \"{0}\")"
    )]
    NotHostPort(String),
    #[error("the port must be 1-65535 (got \"{0}\")")]
    Port(String),
}

/// Checks `host[:port]` (an IPv6 host in brackets) and returns it with the port.
fn parse_device_address(text: &str) -> Result<String, AddressError> {
    let bad = || AddressError::NotHostPort(text.into());
    let (host, port) = if let Some(rest) = text.strip_prefix('[') {
        let (host, after) = rest.split_once(']').ok_or_else(bad)?;
        match after {
            "" => (host, None),
            p => (host, Some(p.strip_prefix(':').ok_or_else(bad)?)),
        }
    } else {
        match text.rsplit_once(':') {
            Some((h, _)) if h.contains(':') => return Err(bad()),
            Some((h, p)) => (h, Some(p)),
            None => (text, None),
        }
    };
    if host.is_empty() || host.chars().any(|c| c.is_whitespace() || c == '/') {
        return Err(bad());
    }
    let port = match port {
        None => DEFAULT_PORT,
        Some(p) => match p.parse::<u16>() {
            Ok(p) if p > 0 => p,
            _ => return Err(AddressError::Port(p.into())),
        },
    };
    if text.starts_with('[') {
        Ok(format!("[{host}]:{port}"))
    } else {
        Ok(format!("{host}:{port}"))
    }
}

/// `plan::plan` for a device's sources, in [`device_sources`] order.
pub fn device_plan(
    loops: &BTreeMap<String, LoopConfig>,
    name: &str,
    device: &ModbusDevice,
) -> Result<plan::Plan, plan::PlanError> {
    let spans: Vec<Span> = device_sources(loops, name)
        .into_iter()
        .map(|(_, _, r)| span(r))
        .collect();
    plan::plan(&spans, device.limits)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Config;
    use crate::config::fixture::{SKID, refusal_in};
    use std::path::Path;

    fn problems(text: &str) -> String {
        refusal_in(text, "skid.toml")
    }

    #[test]
    fn a_modbus_plant_is_read_into_devices_and_register_sources() {
        let cfg = Config::parse(&SKID, Path::new("skid.toml")).unwrap_or_else(|e| panic!("{e}"));
        let skid = &cfg.modbus["skid-b"];
        assert_eq!(skid.address, "127.0.0.1:1502");
        assert_eq!(skid.unit_id, 1);
        assert_eq!(skid.poll_period, Duration::from_millis(500));
        assert_eq!(skid.timeout, Duration::from_millis(250));
        let dosing = &cfg.modbus["dosing"];
        assert_eq!(dosing.address, "10.0.4.22:502");
        assert_eq!(
            (dosing.unit_id, dosing.timeout),
            (7, Duration::from_secs(1))
        );

        let lic = &cfg.loops["LIC-301"];
        let pv = lic.pv.as_ref().unwrap().as_modbus().unwrap();
        assert_eq!(pv.device, "skid-b");
        assert_eq!(pv.register.order, Order::Cdab);
        let op = lic.op.as_ref().unwrap().as_modbus().unwrap();
        // 13824 of 27648 raw counts is half of 0-100 %.
        assert_eq!(op.register.scaling.apply(13824.0), 50.0);
        let mode = lic.mode.as_ref().unwrap();
        assert_eq!(
            mode.source.as_modbus().unwrap().register.data_type,
            DataType::Bool
        );

        let fic = &cfg.loops["FIC-402"];
        assert!(fic.sp.as_ref().unwrap().as_mqtt().is_some());
        let op = fic.op.as_ref().unwrap().as_modbus().unwrap();
        assert_eq!(op.register.scaling.apply(250.0), 20.0);
        // Only the MQTT setpoint is subscribed to.
        assert_eq!(cfg.subscriptions(), ["wrenmoor/dosing/FIC-402/sp"]);

        // Discrete input 3; holding 100-103 and 110 bridged by max_gap 4? 104-109 is 6, so no.
        let p = device_plan(&cfg.loops, "skid-b", skid).unwrap();
        assert_eq!(p.requests.len(), 3, "{:?}", p.requests);
        let p = device_plan(&cfg.loops, "dosing", dosing).unwrap();
        assert_eq!(p.requests.len(), 1);

        let text = cfg.describe(Path::new("skid.toml"));
        assert!(
            text.contains("Modbus device skid-b: 127.0.0.1:1502 unit 1"),
            "{text}"
        );
        assert!(
            text.contains("4 signal(s) read in 3 request(s) per poll"),
            "{text}"
        );
        assert!(
            text.contains("pv    modbus  skid-b holding registers 102-103  f32 CDAB"),
            "{text}"
        );
        assert!(text.contains("raw 0..27648 → 0..100"), "{text}");
    }

    #[test]
    fn overlapping_registers_on_one_device_are_refused_naming_both() {
        let bad = SKID.replace(
            "address = 102, data_type = \"f32\", order",
            "address = 101, data_type = \"f32\", order",
        );
        let err = problems(&bad);
        assert!(
            err.contains(
                "skid.toml:24:66: loops.LIC-301.pv.address: holding registers 101-102 of device \
                 skid-b overlaps holding registers 100-101 of loops.LIC-301.sp"
            ),
            "{err}"
        );
    }

    #[test]
    fn wrong_register_definitions_are_refused_with_their_keys() {
        let cases = [
            (
                "device = \"dosing\", table = \"input_registers\", address = 0",
                "device = \"dosin\", table = \"input_registers\", address = 0",
                "FIC-402.pv.device: no Modbus device named \"dosin\" (devices: dosing, skid-b)",
            ),
            (
                "table = \"discrete_inputs\", address = 3",
                "table = \"discrete_inputs\", address = 3, data_type = \"f32\"",
                "LIC-301.mode.data_type: data type f32 cannot be read from discrete inputs",
            ),
            (
                "address = 100, data_type",
                "address = 400101, data_type",
                "LIC-301.sp.address: address 400101 is out of range: expected a 0-based \
                 protocol address",
            ),
            (
                "address = 110, data_type = \"u16\"",
                "address = 65535, data_type = \"u32\"",
                "LIC-301.op.address: 2 registers starting at address 65535 run past",
            ),
            (
                "scale = 0.1 }",
                "scale = 0.1, raw_range = [0, 1], eng_range = [0, 2] }",
                "FIC-402.pv.raw_range: give either scale/offset or raw_range/eng_range",
            ),
            (
                "scale = 0.1 }",
                "scale = 0 }",
                "FIC-402.pv.scale: scaling: scale 0",
            ),
            (
                "eng_range = [0, 100] }",
                "eng_range = [0, 100], topic = \"x/y\" }",
                "LIC-301.op.topic: a Modbus source (one with `device`) takes no MQTT keys",
            ),
            (
                "format = \"number\" }",
                "format = \"number\", address = 4 }",
                "FIC-402.sp.address: only applies to a Modbus source",
            ),
            (
                "unit_id = 7",
                "unit_id = 300",
                "modbus.dosing.unit_id: must be a whole number from 0 to 255",
            ),
            (
                "poll_period_s = 2",
                "poll_period_s = 0",
                "modbus.dosing.poll_period_s: must be a number of seconds",
            ),
            (
                "address = \"10.0.4.22\"",
                "address = \"10.0.4.22:0\"",
                "modbus.dosing.address: the port must be 1-65535",
            ),
            (
                "max_gap = 4",
                "max_gap = 4\nmax_registers_per_request = 200",
                "modbus.skid-b.max_registers_per_request: max registers per request must be 1-125",
            ),
            (
                "max_gap = 4",
                "max_registers_per_request = 1",
                "LIC-301.sp.data_type: f32 takes 2 registers but device skid-b allows only 1",
            ),
            (
                "[modbus.dosing]",
                "[modbus.spare]\naddress = \"10.0.4.23\"\npoll_period_s = 1\n[modbus.dosing]",
                "modbus.spare: no loop signal reads from this device",
            ),
        ];
        for (from, to, expected) in cases {
            assert!(SKID.contains(from), "{from}");
            let err = problems(&SKID.replacen(from, to, 1));
            assert!(err.contains(expected), "{to}:\n{err}");
            assert!(err.contains("skid.toml:"), "{err}");
        }
    }

    #[test]
    fn an_unknown_table_or_order_is_a_located_error() {
        let err = problems(&SKID.replace("\"discrete_inputs\"", "\"discrete\""));
        assert!(err.starts_with("skid.toml:26:"), "{err}");
        assert!(err.contains("discrete_inputs"), "{err}");
        let err = problems(&SKID.replace("\"CDAB\"", "\"DCAB\""));
        assert!(err.starts_with("skid.toml:24:"), "{err}");
    }

    #[test]
    fn periods_that_are_not_numbers_are_refused_with_their_keys() {
        let text = SKID
            .replace("poll_period_s = 0.5", "poll_period_s = nan")
            .replace("timeout_s = 0.25", "timeout_s = inf");
        let err = problems(&text);
        assert!(
            err.contains(
                "modbus.skid-b.poll_period_s: must be a number of seconds from 0.001 to 86400 \
                 (got NaN)"
            ),
            "{err}"
        );
        assert!(
            err.contains("modbus.skid-b.timeout_s: must be a number of seconds from 0.001 to 60"),
            "{err}"
        );
    }

    #[test]
    fn device_addresses_get_a_port() {
        assert_eq!(parse_device_address("10.0.4.21").unwrap(), "10.0.4.21:502");
        assert_eq!(
            parse_device_address("plc-7.example:1502").unwrap(),
            "plc-7.example:1502"
        );
        assert_eq!(parse_device_address("[::1]:5020").unwrap(), "[::1]:5020");
        assert_eq!(parse_device_address("[::1]").unwrap(), "[::1]:502");
        for bad in ["", ":502", "host:0", "host:70000", "::1", "a b:1", "[::1]x"] {
            assert!(parse_device_address(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn spans_overlap_only_within_one_table() {
        let s = |table, a, count| Span {
            table,
            address: Address::new(a),
            count,
        };
        let hr = Table::HoldingRegisters;
        assert!(overlaps(&s(hr, 100, 2), &s(hr, 101, 2)));
        assert!(!overlaps(&s(hr, 100, 2), &s(hr, 102, 2)));
        assert!(!overlaps(&s(hr, 100, 2), &s(Table::InputRegisters, 100, 2)));
        assert!(overlaps(&s(hr, 65534, 2), &s(hr, 65535, 1)));
    }
}
