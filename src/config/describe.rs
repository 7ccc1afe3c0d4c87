//! What `headroom check-config` prints: the store, the broker, each Modbus device with its
//! request plan, every loop with its signals, topics, formats and spec, the report schedule,
//! and the broker settings the daemon relies on.

use super::Config;
use super::loops::LoopConfig;
use super::modbus;
use super::mqtt::{MqttSettings, PasswordSource};
use super::source::{ModbusSource, Source};
use crate::modbus::registers::{Scaling, Table};
use crate::modbus::source::ModbusDevice;
use crate::mqtt::PayloadFormat;
use crate::sample::Signal;
use std::fmt::{Result, Write as _};
use std::path::Path;

impl Config {
    /// What `headroom check-config` prints: the store, the broker, every loop with its signals,
    /// topics, formats and spec, and the broker settings the daemon relies on.
    pub fn describe(&self, config_path: &Path) -> String {
        let mut o = String::new();
        // Writing to a String cannot fail.
        let _ = self.write_description(config_path, &mut o);
        o
    }

    fn write_description(&self, config_path: &Path, o: &mut String) -> Result {
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
            Some(m) => write_broker(o, m, self.subscriptions().len())?,
        }
        for (name, d) in &self.modbus {
            write_device(o, &self.loops, name, d)?;
        }
        let watched = self.loops.values().filter(|l| l.is_watched()).count();
        writeln!(o, "Loops: {} ({watched} watched)", self.loops.len())?;
        for (tag, l) in &self.loops {
            write_loop(o, tag, l)?;
        }
        if let Some(r) = &self.report {
            writeln!(
                o,
                "Weekly summary: every {:?} at {} ({}), {} into {}",
                r.weekday,
                r.time.strftime("%H:%M"),
                r.time_zone,
                r.formats
                    .iter()
                    .map(|f| f.as_str())
                    .collect::<Vec<_>>()
                    .join(", "),
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

/// The broker: address and TLS, login, limits, what is published and subscribed.
fn write_broker(o: &mut String, m: &MqttSettings, subscriptions: usize) -> Result {
    let tls = match (m.tls, &m.ca_file) {
        (true, Some(ca)) => format!("TLS, CA {}", ca.display()),
        (true, None) => "TLS, system CAs".into(),
        (false, _) => "plain TCP, no TLS".into(),
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
        "  keep-alive {} s; payloads up to {} bytes; samples up to {} s ahead of their receipt \
         accepted",
        m.keep_alive_s, m.max_payload_bytes, m.max_future_s
    )?;
    write!(o, "  publishes alerts on {}", m.alert_topic)?;
    match &m.status_topic {
        Some(s) => writeln!(o, ", status on {s}")?,
        None => writeln!(o, "; no status topic")?,
    }
    writeln!(
        o,
        "  subscribes with QoS 1 to {subscriptions} topic filters"
    )
}

/// A Modbus device: where, how often, its limits, and the requests one poll takes.
fn write_device(
    o: &mut String,
    loops: &std::collections::BTreeMap<String, LoopConfig>,
    name: &str,
    d: &ModbusDevice,
) -> Result {
    let l = d.limits;
    writeln!(
        o,
        "Modbus device {name}: {} unit {}, polled every {} s, {} s timeout per request, up to {} \
         registers per request, gaps of up to {} bridged",
        d.address,
        d.unit_id,
        d.poll_period.as_secs_f64(),
        d.timeout.as_secs_f64(),
        l.max_for(Table::HoldingRegisters),
        l.max_gap()
    )?;
    match modbus::device_plan(loops, name, d) {
        Ok(p) => writeln!(
            o,
            "  {} read in {} per poll, read function codes only",
            crate::units::count(p.placements.len(), "signal", "signals"),
            crate::units::count(p.requests.len(), "request", "requests")
        ),
        Err(e) => writeln!(o, "  cannot plan the requests: {e}"),
    }
}

/// A loop: its description, OP range and spec, period, and each signal's source.
fn write_loop(o: &mut String, tag: &str, l: &LoopConfig) -> Result {
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
        "    OP {} to {} {}; spec: PV{unit} within {} by {}",
        l.op_min,
        l.op_max,
        l.op_unit,
        l.spec.band_words(&l.pv_unit),
        crate::units::human_duration(l.spec.settle_within_s)
    )?;
    match l.spec.max_overshoot_pct {
        Some(p) => writeln!(o, ", overshoot at most {p} %")?,
        None => writeln!(o, ", no overshoot limit")?,
    }
    writeln!(o, "    {}", l.spec.hold_words(&l.pv_unit))?;
    if let Some(c) = &l.controller {
        write!(
            o,
            "    controller: {} form, gain as {}, integral in {}",
            c.form.as_str(),
            c.gain_unit.as_str(),
            c.integral_unit.as_str()
        )?;
        match (c.gain, c.integral) {
            (Some(g), Some(i)) => writeln!(o, "; today gain {g}, integral {i}")?,
            (Some(g), None) => writeln!(o, "; today gain {g}, no integral action")?,
            _ => writeln!(o)?,
        }
    }
    if let Some(a) = &l.actuator {
        writeln!(
            o,
            "    actuator rated {} {} over its OP range",
            a.rating, a.unit
        )?;
    }
    if !l.is_watched() {
        return writeln!(
            o,
            "    not watched (no sources): for `analyze --config` only"
        );
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
            Source::Mqtt(m) => writeln!(
                o,
                "    {:<4}  mqtt  {:<width$}  {}",
                signal.as_str(),
                m.topic,
                format_words(signal, &m.format)
            )?,
            Source::Modbus(m) => write_register(o, signal, m)?,
        }
    }
    if let Some(mode) = &l.mode {
        writeln!(
            o,
            "    automatic when the mode is {}",
            mode.auto_values.describe()
        )?;
    }
    Ok(())
}

/// How an MQTT source's payload is written, in words.
fn format_words(signal: Signal, format: &PayloadFormat) -> String {
    match format {
        PayloadFormat::Number if signal == Signal::Mode => "plain text".to_owned(),
        PayloadFormat::Number => "plain number".to_owned(),
        PayloadFormat::Json(j) => format!(
            "json, value \"{}\", time \"{}\"",
            j.value_field, j.time_field
        ),
    }
}

/// A register source: device, span, data type, word order and scaling.
fn write_register(o: &mut String, signal: Signal, m: &ModbusSource) -> Result {
    let r = &m.register;
    let mut how = r.data_type.to_string();
    if r.count() > 1 {
        write!(how, " {}", r.order)?;
    }
    match r.scaling {
        Scaling::Linear { scale, offset } if scale != 1.0 || offset != 0.0 => {
            write!(how, ", value × {scale} + {offset}")?
        }
        Scaling::Range {
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
    )
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

#[cfg(test)]
mod tests {
    use crate::config::fixture::{GOOD, PLANT, parse};
    use std::path::Path;

    #[test]
    fn describe_lists_loops_signals_topics_and_the_broker_settings_needed() {
        let cfg = parse(&PLANT).unwrap();
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
            "by 15.0 min",
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
