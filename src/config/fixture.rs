//! Config text for tests, built from one set of pieces so that each test file states only what
//! its case is about: the broker section and the head of a loop section (OP 0 to 100, a sample
//! period and a spec time) are written here once. The two plants most config tests edit with
//! `str::replace` are built here too; their line numbers are what the tests' `file:line:`
//! assertions count, so append to them rather than insert.

use super::{Config, ConfigError};
use std::path::Path;
use std::sync::LazyLock;

/// `[mqtt]` for a broker at `url`, with the tests' client id and alert topic.
pub(crate) fn mqtt_section(url: &str) -> String {
    format!(
        "[mqtt]\nurl = \"{url}\"\nclient_id = \"headroom-test\"\n\
         alert_topic = \"headroom/test/alerts\"\n"
    )
}

/// The head of `[loops.<tag>]`: OP 0 to 100, a sample every `period_s` (as written, e.g.
/// `"1.0"`), and a spec of settling within `settle_within_s`. Source lines follow it.
pub(crate) fn loop_head(tag: &str, period_s: &str, settle_within_s: u32) -> String {
    format!(
        "[loops.{tag}]\nop_min = 0\nop_max = 100\nexpected_period_s = {period_s}\n\
         spec = {{ settle_within_s = {settle_within_s} }}\n"
    )
}

/// A file: `lead` (the sections before the loops), then each loop as (tag, period, spec time,
/// source lines), its head written by [`loop_head`].
pub(crate) fn file(lead: &str, loops: &[(&str, &str, u32, &str)]) -> String {
    let mut text = lead.to_owned();
    for (tag, period_s, settle_within_s, sources) in loops {
        text.push_str(&loop_head(tag, period_s, *settle_within_s));
        text.push_str(sources);
    }
    text
}

/// One loop section with no sources and a spec written as its own table: what
/// `analyze --config` needs and nothing more.
pub(crate) const GOOD: &str = r#"
[loops.TIC-101]
description = "Reactor jacket temperature"
op_min = 0.0
op_max = 100.0
[loops.TIC-101.spec]
settle_within_s = 900
max_overshoot_pct = 10
"#;

/// A small watched plant: broker, store and two loops with every kind of MQTT source.
pub(crate) static PLANT: LazyLock<String> = LazyLock::new(|| {
    let broker = r#"
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

"#;
    let tic = r#"sp = { topic = "plant/r1/TIC-101/sp", format = "number" }
pv = { topic = "plant/r1/TIC-101/pv", format = "json", time_field = "ts" }
op = { topic = "plant/r1/TIC-101/op", format = "number" }
mode = { topic = "plant/r1/TIC-101/mode", format = "number", auto_values = ["AUTO", "CAS", "1"] }

"#;
    let fic = r#"sp = { topic = "plant/feed/FIC-201/sp", format = "number" }
pv = { topic = "plant/feed/FIC-201/pv", format = "number" }
op = { topic = "plant/feed/FIC-201/op", format = "number" }
"#;
    file(
        broker,
        &[("TIC-101", "1.0", 900, tic), ("FIC-201", "0.5", 60, fic)],
    )
});

/// A skid of the invented Wrenmoor pilot plant: one loop read only over Modbus, one mixing an
/// MQTT setpoint with Modbus PV and OP.
pub(crate) static SKID: LazyLock<String> = LazyLock::new(|| {
    let devices = r#"
[modbus.skid-b]
address = "127.0.0.1:1502"
poll_period_s = 0.5
timeout_s = 0.25
max_gap = 4

[modbus.dosing]
address = "10.0.4.22"
unit_id = 7
poll_period_s = 2

"#;
    let lic = r#"sp = { device = "skid-b", table = "holding_registers", address = 100, data_type = "f32" }
pv = { device = "skid-b", table = "holding_registers", address = 102, data_type = "f32", order = "CDAB" }
op = { device = "skid-b", table = "holding_registers", address = 110, data_type = "u16", raw_range = [0, 27648], eng_range = [0, 100] }
mode = { device = "skid-b", table = "discrete_inputs", address = 3 }

"#;
    let fic = r#"sp = { topic = "wrenmoor/dosing/FIC-402/sp", format = "number" }
pv = { device = "dosing", table = "input_registers", address = 0, data_type = "i16", scale = 0.1 }
op = { device = "dosing", table = "input_registers", address = 1, data_type = "i16", scale = 0.1, offset = -5 }
"#;
    let lead = format!("\n{}{devices}", mqtt_section("mqtt://127.0.0.1:1883"));
    file(
        &lead,
        &[("LIC-301", "0.5", 120, lic), ("FIC-402", "2", 30, fic)],
    )
});

/// `text` read as the file `plant.toml`.
pub(crate) fn parse(text: &str) -> Result<Config, ConfigError> {
    Config::parse(text, Path::new("plant.toml"))
}

/// Why `text`, read as the file `file`, is refused; panics when it is accepted.
pub(crate) fn refusal_in(text: &str, file: &str) -> String {
    match Config::parse(text, Path::new(file)) {
        Ok(_) => panic!("expected the config to be refused"),
        Err(e) => e.to_string(),
    }
}

/// Why `text`, read as `plant.toml`, is refused.
pub(crate) fn problems(text: &str) -> String {
    refusal_in(text, "plant.toml")
}

#[test]
fn the_plants_are_the_files_the_tests_count_lines_in() {
    // The lines the tests' `file:line:` assertions point at.
    let line = |text: &str, n: usize| text.lines().nth(n - 1).unwrap_or_default().to_owned();
    assert_eq!(line(&PLANT, 24), "[loops.FIC-201]");
    assert!(line(&PLANT, 31).starts_with("op = "), "{}", *PLANT);
    assert!(
        line(&SKID, 24).starts_with("pv = { device = \"skid-b\""),
        "{}",
        *SKID
    );
    assert!(line(&SKID, 26).starts_with("mode = "), "{}", *SKID);
}
