//! Modbus polling: one `headroom run` child polls 100 simulated devices of 50 registers each
//! every second. Measured: the requests each poll cycle takes (beside one request per signal, the
//! plan without grouping), the child's CPU share of one core, the requests the devices actually
//! received, the timeouts, and — on one device polled back to back — the highest poll rate a
//! device sustains before a request times out.

use crate::config::Config;
use crate::modbus::plan::{Limits, Span, plan};
use crate::modbus::poll::{PollOutcome, poll_once};
use crate::modbus::registers::{Address, DataType, Order, Table};
use crate::modbus::sim::device::{RegisterMap, SimDevice};
use crate::store::Store;
use anyhow::Context;
use std::fmt::Write as _;
use std::io::Write;
use std::path::Path;
use std::time::{Duration, Instant};

const DEVICES: usize = 100;
/// Per device: 8 loops of SP, PV and OP as f32 (48 registers) and two u16 mode words.
const LOOPS_PER_DEVICE: usize = 8;
const REGISTERS: u16 = 50;

/// The config: every device at 127.0.0.1:`ports[i]`, polled every second.
fn config_text(db: &Path, ports: &[u16]) -> String {
    let mut t = format!("[store]\npath = {:?}\n\n", db.display().to_string());
    for (d, port) in ports.iter().enumerate() {
        let _ = writeln!(
            t,
            "[modbus.dev-{d:03}]\naddress = \"127.0.0.1:{port}\"\npoll_period_s = 1.0\ntimeout_s = 0.5\n"
        );
        for l in 0..LOOPS_PER_DEVICE {
            let tag = format!("TIC-{d:03}-{l}");
            let base = 6 * l;
            let _ = writeln!(
                t,
                "[loops.{tag}]\nop_min = 0\nop_max = 100\nexpected_period_s = 1.0\nspec = {{ settle_within_s = 600 }}"
            );
            for (signal, offset) in [("sp", 0), ("pv", 2), ("op", 4)] {
                let _ = writeln!(
                    t,
                    "{signal} = {{ device = \"dev-{d:03}\", table = \"holding_registers\", address = {}, data_type = \"f32\" }}",
                    base + offset
                );
            }
            if l < 2 {
                let _ = writeln!(
                    t,
                    "mode = {{ device = \"dev-{d:03}\", table = \"holding_registers\", address = {}, data_type = \"u16\" }}",
                    48 + l
                );
            }
            t.push('\n');
        }
    }
    t
}

/// A device's registers: each loop at 50 % setpoint with its PV near it, and the two mode words
/// set to automatic.
fn register_map() -> RegisterMap {
    let mut map = RegisterMap::new(usize::from(REGISTERS) + 14);
    for l in 0..LOOPS_PER_DEVICE {
        for (offset, value) in [(0, 50.0), (2, 49.5 + 0.1 * l as f64), (4, 31.0)] {
            let words = crate::modbus::registers::encode(value, DataType::F32, Order::Abcd)
                .expect("an f32 encodes");
            let at = 6 * l + offset;
            map.holding_registers[at..at + 2].copy_from_slice(&words);
        }
    }
    map.holding_registers[48] = 1;
    map.holding_registers[49] = 1;
    map
}

/// CPU seconds (user + system) a process has used, from /proc/<pid>/stat. Linux reports them in
/// clock ticks of USER_HZ, which is 100 on every mainstream Linux build (common practice).
fn cpu_seconds(pid: u32) -> Option<f64> {
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    // The command name may hold spaces; the fields after it are plain numbers.
    let rest = &stat[stat.rfind(')')? + 2..];
    let fields: Vec<&str> = rest.split_whitespace().collect();
    // utime and stime are fields 14 and 15 of the line, 12 and 13 after the name.
    let ticks: u64 = fields.get(11)?.parse::<u64>().ok()? + fields.get(12)?.parse::<u64>().ok()?;
    Some(ticks as f64 / 100.0)
}

/// Polls one device back to back for `for_how_long`: (polls per second, timeouts).
async fn fastest_poll(for_how_long: Duration) -> anyhow::Result<(f64, u64)> {
    let dev = SimDevice::start(0, register_map()).await?;
    let spans = [Span {
        table: Table::HoldingRegisters,
        address: Address::new(0),
        count: REGISTERS,
    }];
    let requests = plan(&spans, Limits::default())?.requests;
    let mut ctx = tokio_modbus::client::tcp::connect(dev.addr()).await?;
    let (mut polls, mut timeouts) = (0u64, 0u64);
    let t = Instant::now();
    while t.elapsed() < for_how_long {
        match poll_once(&mut ctx, &requests, Duration::from_millis(500)).await {
            PollOutcome::Ok(_) => polls += 1,
            PollOutcome::Timeout { .. } => {
                timeouts += 1;
                ctx = tokio_modbus::client::tcp::connect(dev.addr()).await?;
            }
            other => anyhow::bail!("the device failed: {other}"),
        }
    }
    Ok((polls as f64 / t.elapsed().as_secs_f64(), timeouts))
}

/// Runs the Modbus measurements and prints them.
pub fn run(dir: &Path, out: &mut dyn Write, quick: bool) -> anyhow::Result<()> {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?;
    rt.block_on(async {
        let mut devices = Vec::with_capacity(DEVICES);
        for _ in 0..DEVICES {
            devices.push(SimDevice::start(0, register_map()).await?);
        }
        let ports: Vec<u16> = devices.iter().map(|d| d.addr().port()).collect();
        let db = dir.join("modbus.db");
        let cfg_path = dir.join("modbus.toml");
        std::fs::write(&cfg_path, config_text(&db, &ports))?;
        let cfg = Config::load(&cfg_path)?;
        let (mut planned, mut signals) = (0, 0);
        for (name, d) in &cfg.modbus {
            let p = crate::config::modbus::device_plan(&cfg.loops, name, d)?;
            planned += p.requests.len();
            signals += p.placements.len();
        }
        writeln!(
            out,
            "Modbus polling: {DEVICES} simulated devices × {REGISTERS} registers ({signals} signals of {} loops) every 1 s, one `headroom run`",
            cfg.loops.len()
        )?;
        writeln!(
            out,
            "  requests per poll cycle            {planned:>8}   one request per signal would be {signals}; the minimum is one per device ({DEVICES})"
        )?;

        let (mut child, pid) = super::spawn_daemon(&cfg_path)?;
        // Let the daemon connect to every device and create its series first.
        tokio::time::sleep(Duration::from_secs(5)).await;
        let window = Duration::from_secs(if quick { 10 } else { 30 });
        let requests_before: usize = devices.iter().map(|d| d.function_codes().len()).sum();
        let cpu_before = cpu_seconds(pid).context("cannot read the daemon's CPU time")?;
        let t = Instant::now();
        tokio::time::sleep(window).await;
        let cpu = cpu_seconds(pid).context("cannot read the daemon's CPU time")? - cpu_before;
        let wall = t.elapsed().as_secs_f64();
        let requests: usize =
            devices.iter().map(|d| d.function_codes().len()).sum::<usize>() - requests_before;
        let rss = super::proc_status_mb(&pid.to_string(), "VmRSS:").unwrap_or(f64::NAN);
        let _ = child.start_kill();
        let _ = child.wait().await;
        let writes = devices
            .iter()
            .flat_map(|d| d.function_codes())
            .filter(|c| !(1..=4).contains(c))
            .count();
        let store = Store::open_read_only(&db).await?;
        let failures: u64 = store
            .rejections()
            .await?
            .iter()
            .filter(|r| r.reason.starts_with("modbus_"))
            .map(|r| r.count)
            .sum();
        let samples = store.sample_count().await?;
        store.close().await;
        writeln!(
            out,
            "  requests the devices received      {:>8.1} per second (over {wall:.0} s); write requests: {writes}",
            requests as f64 / wall
        )?;
        writeln!(
            out,
            "  daemon CPU                         {:>8.1} % of one core; RSS {rss:.0} MB; {samples} samples stored; failed polls: {failures}",
            100.0 * cpu / wall
        )?;
        let (rate, timeouts) = fastest_poll(Duration::from_secs(if quick { 2 } else { 5 })).await?;
        writeln!(
            out,
            "  one device polled back to back     {rate:>8.0} polls/s ({REGISTERS} registers each, {timeouts} timeouts at 0.5 s): the highest poll rate per device"
        )?;
        Ok(())
    })
}
