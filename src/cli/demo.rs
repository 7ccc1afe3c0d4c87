//! `headroom demo`: its flags, checked here, and its log file.

use super::time::parse_span;
use super::{Failure, Usage};
use crate::demo::{self, DemoOptions};
use anyhow::Context;
use clap::Args;
use std::path::{Path, PathBuf};

#[derive(Debug, Clone, Args)]
pub struct DemoArgs {
    /// Simulated time to run, e.g. 7d, 36h, 90m.
    #[arg(long, default_value = "7d", value_name = "SPAN")]
    pub duration: String,
    /// Simulated seconds per wall-clock second.
    #[arg(long, default_value_t = demo::DEFAULT_SPEED, value_name = "FACTOR")]
    pub speed: f64,
    /// Folder for the demo's files (configuration, SQLite store, log); created when missing.
    /// The demo's own files in it are replaced.
    #[arg(long, default_value = "headroom-demo", value_name = "DIR")]
    pub out: PathBuf,
    /// After the summary, keep the broker, the simulated device, the plant (now in real time)
    /// and the daemon running until Ctrl-C, to watch with any MQTT client.
    #[arg(long)]
    pub keep_running: bool,
    /// Port of the embedded MQTT broker on 127.0.0.1 (0: any free port).
    #[arg(long, default_value_t = 0, value_name = "PORT")]
    pub mqtt_port: u16,
    /// Port of the simulated Modbus device on 127.0.0.1 (0: any free port).
    #[arg(long, default_value_t = 0, value_name = "PORT")]
    pub modbus_port: u16,
}

impl DemoArgs {
    /// The demo's options, every number checked against the demo's limits.
    pub fn options(&self) -> Result<DemoOptions, Usage> {
        let duration_s = parse_span(&self.duration).ok_or_else(|| Usage::Flag {
            flag: "--duration",
            requirement: "must be a span such as 7d, 36h, 90m or 3600s".into(),
            got: self.duration.clone(),
        })?;
        if !demo::DURATION_S.contains(&duration_s) {
            return Err(Usage::Flag {
                flag: "--duration",
                requirement: "must be between 1h and 60d".into(),
                got: self.duration.clone(),
            });
        }
        if !demo::SPEED.contains(&self.speed) {
            return Err(Usage::Flag {
                flag: "--speed",
                requirement: format!(
                    "must be between {} (real time) and {}",
                    demo::SPEED.start(),
                    demo::SPEED.end()
                ),
                got: self.speed.to_string(),
            });
        }
        Ok(DemoOptions {
            duration_s,
            speed: self.speed,
            out: self.out.clone(),
            keep_running: self.keep_running,
            mqtt_port: self.mqtt_port,
            modbus_port: self.modbus_port,
        })
    }
}

pub fn demo(args: &DemoArgs, out: &mut dyn std::io::Write) -> Result<(), Failure> {
    let options = args.options()?;
    init_logging(&options.out)?;
    super::block_on(async { Ok(demo::run(&options, out).await?) })
}

/// The demo draws a status line on the terminal, so its logs go to a file in its folder,
/// filtered by RUST_LOG (default `info`). The embedded broker logs benign events (a client's
/// probe, a closed connection) as errors, so it is silenced unless RUST_LOG names it.
fn init_logging(dir: &Path) -> anyhow::Result<()> {
    std::fs::create_dir_all(dir).with_context(|| format!("cannot create {}", dir.display()))?;
    let path = dir.join(demo::LOG_FILE);
    let file = std::fs::File::create(&path)
        .with_context(|| format!("cannot create the log file {}", path.display()))?;
    tracing_subscriber::fmt()
        .with_env_filter(super::log_filter("info,rumqttd=off"))
        .with_ansi(false)
        .with_writer(std::sync::Mutex::new(file))
        .init();
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::Parser;

    fn options(flags: &[&str]) -> Result<DemoOptions, Usage> {
        let cli = super::super::Cli::try_parse_from([&["headroom", "demo"], flags].concat())
            .expect("flags parse");
        match cli.command {
            super::super::Command::Demo(args) => args.options(),
            other => panic!("not the demo: {other:?}"),
        }
    }

    #[test]
    fn the_defaults_are_a_week_at_the_default_speed() {
        let o = options(&[]).unwrap();
        assert_eq!(o.duration_s, 7.0 * 86_400.0);
        assert_eq!(o.speed, demo::DEFAULT_SPEED);
    }

    #[test]
    fn numbers_outside_the_demo_limits_are_named_by_their_flag() {
        for (flags, named) in [
            (
                &["--duration", "30m"][..],
                "--duration must be between 1h and 60d (got 30m)",
            ),
            (&["--duration=-1d"], "--duration must be a span"),
            (&["--duration", "61d"], "--duration must be between"),
            (
                &["--speed=nan"],
                "--speed must be between 1 (real time) and 100000 (got NaN)",
            ),
            (&["--speed=inf"], "--speed must be between"),
            (&["--speed", "0.5"], "--speed must be between"),
        ] {
            let e = options(flags).unwrap_err().to_string();
            assert!(e.starts_with(named), "{flags:?}: {e}");
        }
    }
}
