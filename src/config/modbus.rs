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
use super::loops::{LoopConfig, tag_problem};
use super::raw::RawDevice;
use super::source::Source;
use crate::modbus::plan::{self, Limits, Span};
use crate::modbus::registers::{self, Table};
use crate::modbus::source::ModbusDevice;
use crate::sample::Signal;
use std::collections::BTreeMap;
use std::time::Duration;

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
    use crate::modbus::registers::{Address, DataType, Order};
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
            text.contains("4 signals read in 3 requests per poll"),
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
