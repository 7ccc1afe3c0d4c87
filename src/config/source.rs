//! A signal's source (`sp = { ... }` and its siblings in a loop's section): the checked types
//! ([`Source`]: an MQTT topic filter with a [`PayloadFormat`], or registers of a Modbus device;
//! [`ModeSource`] with its automatic values), and the checks of one source as written.

use super::error::Checker;
use super::raw::{RawFormat, RawSource};
use crate::analysis::AutoValues;
use crate::modbus::registers::{self, Address, DataType, Scaling, Table};
use crate::modbus::source::ModbusDevice;
use crate::mqtt::topic;
use crate::mqtt::{JsonFields, PayloadFormat};
use crate::sample::Signal;
use std::collections::BTreeMap;

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

/// A signal read from registers (or bits) of a device.
#[derive(Debug, Clone, PartialEq)]
pub struct ModbusSource {
    /// The device's name under `[modbus]`.
    pub device: String,
    pub register: registers::Source,
}

/// The mode signal's source and which of its values mean the loop is in automatic.
#[derive(Debug, Clone, PartialEq)]
pub struct ModeSource {
    pub source: Source,
    pub auto_values: AutoValues,
}

/// What a source's checks need to know of the rest of the file.
#[derive(Clone, Copy)]
pub(super) struct Context<'a> {
    /// Whether the file has an `[mqtt]` section.
    pub have_mqtt: bool,
    /// The configured Modbus devices.
    pub devices: &'a BTreeMap<String, ModbusDevice>,
}

impl Checker<'_> {
    /// A signal's source, and the mode's automatic values when given.
    pub(super) fn source(
        &mut self,
        tag: &str,
        signal: Signal,
        raw: RawSource,
        cx: Context<'_>,
    ) -> (Source, Option<AutoValues>) {
        let auto_values = self.auto_values(tag, signal, raw.auto_values.as_deref());
        let name = signal.as_str();
        let mqtt_keys = [
            ("topic", raw.topic.is_some()),
            ("format", raw.format.is_some()),
            ("value_field", raw.value_field.is_some()),
            ("time_field", raw.time_field.is_some()),
        ];
        if raw.device.is_some() {
            for (key, _) in mqtt_keys.into_iter().filter(|(_, given)| *given) {
                self.problem(
                    &["loops", tag, name, key],
                    "a Modbus source (one with `device`) takes no MQTT keys",
                );
            }
            let source = self.modbus_source(tag, signal, &raw, cx.devices);
            return (source, auto_values);
        }
        for key in raw.register_keys() {
            self.problem(
                &["loops", tag, name, key],
                "only applies to a Modbus source: add `device = \"<name>\"` naming a \
                 [modbus.<name>] device, or remove it",
            );
        }
        let topic = self.topic_filter(tag, name, raw.topic, cx.have_mqtt);
        let format = self.payload_format(tag, name, raw.format, raw.value_field, raw.time_field);
        (Source::Mqtt(MqttSource { topic, format }), auto_values)
    }

    /// The mode's automatic values; refused on any other signal.
    fn auto_values(
        &mut self,
        tag: &str,
        signal: Signal,
        raw: Option<&[String]>,
    ) -> Option<AutoValues> {
        let keys = ["loops", tag, signal.as_str(), "auto_values"];
        let v = raw?;
        if signal != Signal::Mode {
            self.problem(&keys, "auto_values only applies to the mode signal");
            return None;
        }
        if v.is_empty() || v.iter().any(|x| x.trim().is_empty()) {
            self.problem(
                &keys,
                "list at least one value, none of them blank (e.g. [\"AUTO\", \"CAS\"])",
            );
        }
        Some(AutoValues::new(v))
    }

    /// An MQTT source's topic filter: present, valid, and with a broker to read it from.
    fn topic_filter(
        &mut self,
        tag: &str,
        name: &str,
        topic: Option<String>,
        have_mqtt: bool,
    ) -> String {
        let Some(topic) = topic else {
            self.problem(
                &["loops", tag, name],
                "a source needs `topic` (an MQTT topic filter) or `device` (a Modbus device)",
            );
            return String::new();
        };
        let at = ["loops", tag, name, "topic"];
        if !topic.is_empty() {
            if let Some(m) = topic::filter_problem(&topic) {
                self.problem(&at, m);
            } else if !have_mqtt {
                self.problem(
                    &at,
                    "an MQTT source needs an [mqtt] section naming the broker",
                );
            }
        }
        topic
    }

    /// An MQTT source's payload format, with the JSON field names.
    fn payload_format(
        &mut self,
        tag: &str,
        name: &str,
        format: Option<RawFormat>,
        value_field: Option<String>,
        time_field: Option<String>,
    ) -> PayloadFormat {
        let at = |key: &'static str| ["loops", tag, name, key];
        match format {
            None => {
                self.problem(
                    &["loops", tag, name],
                    "a source needs `format`: \"number\" (plain text) or \"json\"",
                );
                PayloadFormat::Number
            }
            Some(RawFormat::Number) => {
                for (key, given) in [
                    ("value_field", value_field.is_some()),
                    ("time_field", time_field.is_some()),
                ] {
                    if given {
                        self.problem(&at(key), "only applies to format = \"json\"");
                    }
                }
                PayloadFormat::Number
            }
            Some(RawFormat::Json) => {
                let value_field = value_field.unwrap_or_else(|| "value".into());
                let time_field = time_field.unwrap_or_else(|| "time".into());
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
        }
    }

    /// A register source; `devices` are the configured device names.
    fn modbus_source(
        &mut self,
        tag: &str,
        signal: Signal,
        raw: &RawSource,
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
        let (table, address, data_type) = self.register_place(tag, name, raw);
        if raw.order.is_some() && data_type == DataType::Bool {
            self.problem(&at("order"), "a bit has no word or byte order");
        }
        let order = raw.order.unwrap_or_default();
        let scaling = self.scaling(tag, name, raw);
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
        raw: &RawSource,
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
    fn scaling(&mut self, tag: &str, name: &str, raw: &RawSource) -> Scaling {
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
}

#[cfg(test)]
mod tests {
    use crate::config::fixture::{PLANT, SKID, problems, refusal_in};

    fn skid_problems(text: &str) -> String {
        refusal_in(text, "skid.toml")
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
            let err = skid_problems(&SKID.replacen(from, to, 1));
            assert!(err.contains(expected), "{to}:\n{err}");
            assert!(err.contains("skid.toml:"), "{err}");
        }
    }

    #[test]
    fn an_unknown_table_or_order_is_a_located_error() {
        let err = skid_problems(&SKID.replace("\"discrete_inputs\"", "\"discrete\""));
        assert!(err.starts_with("skid.toml:26:"), "{err}");
        assert!(err.contains("discrete_inputs"), "{err}");
        let err = skid_problems(&SKID.replace("\"CDAB\"", "\"DCAB\""));
        assert!(err.starts_with("skid.toml:24:"), "{err}");
    }
}
