//! Why a command failed, with the kind of each failure kept to the end: the library's typed
//! errors travel unchanged to `main`, which prints them and exits with [`Failure::exit_code`].

use crate::analysis::{Problem, Setting};
use crate::config::ConfigError;
use crate::csvload::CsvError;
use crate::demo::DemoError;
use crate::report::PeriodError;
use crate::units::UnknownTimeZone;
use std::path::PathBuf;

/// A failed command. Variants above `Store` are the user's to fix (exit code 2); the rest are
/// failures while running (exit code 1). Each prints as its source prints, once.
#[derive(Debug, thiserror::Error)]
pub enum Failure {
    /// Flags that cannot be used as given.
    #[error("{0}")]
    Usage(#[from] Usage),
    #[error("{0}")]
    Config(#[from] ConfigError),
    /// A loop setting refused by the analysis core, named by the `analyze` flag that set it.
    #[error("{}", .0.message(analyze_flag))]
    Setting(#[source] Problem),
    /// An input file named on the command line cannot be opened.
    #[error("cannot open {}: {source}", path.display())]
    Open {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{}: {source}", path.display())]
    Csv {
        path: PathBuf,
        #[source]
        source: CsvError,
    },
    #[error("{0}")]
    TimeZone(#[from] UnknownTimeZone),
    #[error("{0}")]
    Period(#[from] PeriodError),
    /// The store named on the command line cannot be opened.
    #[error("{0}")]
    StoreOpen(#[source] crate::store::Error),
    #[error("{0}")]
    Demo(#[from] DemoError),
    /// A store operation failed after the store was opened.
    #[error("{0}")]
    Store(#[from] crate::store::Error),
    #[error("{0}")]
    Report(#[from] crate::report::ReportError),
    #[error("{0}")]
    Json(#[from] serde_json::Error),
    #[error("{0}")]
    Io(#[from] std::io::Error),
    /// Anything else that went wrong while running, with the context of each step.
    #[error("{0:#}")]
    Runtime(#[from] anyhow::Error),
}

impl Failure {
    /// 2 for a problem with the input, the configuration or the command line that the user can
    /// fix; 1 for a failure while running.
    pub fn exit_code(&self) -> u8 {
        match self {
            Failure::Usage(_)
            | Failure::Config(_)
            | Failure::Setting(_)
            | Failure::Open { .. }
            | Failure::Csv { .. }
            | Failure::TimeZone(_)
            | Failure::Period(_)
            | Failure::StoreOpen(_) => 2,
            Failure::Demo(e) if e.is_setup() => 2,
            Failure::Demo(_)
            | Failure::Store(_)
            | Failure::Report(_)
            | Failure::Json(_)
            | Failure::Io(_)
            | Failure::Runtime(_) => 1,
        }
    }

    /// Output piped into a program that closed early (`| head`): not an error.
    pub fn is_broken_pipe(&self) -> bool {
        let broken = |e: &std::io::Error| e.kind() == std::io::ErrorKind::BrokenPipe;
        std::iter::successors(Some(self as &dyn std::error::Error), |e| e.source())
            .any(|e| e.downcast_ref::<std::io::Error>().is_some_and(broken))
    }
}

/// A problem with the flags themselves, found before anything runs.
#[derive(Debug, thiserror::Error)]
pub enum Usage {
    #[error("say where the store is: --db FILE or --config FILE")]
    NoStore,
    #[error(
        "the spec's settling time is needed: give --settle-within-s SECONDS, or --config FILE \
         --loop TAG"
    )]
    NoSpecTime,
    #[error("give the configuration file")]
    NoConfigFile,
    #[error("several formats need --out DIR (one file each)")]
    SeveralFormatsNeedOut,
    #[error("{} is there but is not a folder", .0.display())]
    NotAFolder(PathBuf),
    #[error("no alert waiting for acknowledgement with id {0}")]
    NoOpenAlert(i64),
    #[error("no alert with id {0} (headroom alerts --all lists every alert)")]
    NoAlert(i64),
    #[error("say who acknowledges: --by NAME (neither USER nor LOGNAME is set)")]
    NoAcknowledger,
    #[error(
        "cannot read {flag} {given:?}: give RFC 3339 (2026-11-23T08:00:00Z) or an age such as \
         90m, 24h, 7d"
    )]
    Time { flag: &'static str, given: String },
    /// A flag's value the library refused, with its reason, e.g. `--time-zone: unknown time
    /// zone …`.
    #[error("{flag}: {source}")]
    Refused {
        flag: &'static str,
        #[source]
        source: Box<dyn std::error::Error + Send + Sync>,
    },
    /// A flag's value outside what it can mean, e.g. `--speed must be between 1 … (got 0)`.
    #[error("{flag} {requirement} (got {got})")]
    Flag {
        flag: &'static str,
        requirement: String,
        got: String,
    },
}

/// A setting's name as `analyze` takes it: its flag, or its key in the config file where no
/// flag sets it.
pub fn analyze_flag(setting: Setting) -> &'static str {
    match setting {
        Setting::SettleBandPct => "--settle-band-pct",
        Setting::SettleWithinS => "--settle-within-s",
        Setting::MaxOvershootPct => "--max-overshoot-pct",
        Setting::OpMin => "--op-min",
        Setting::OpMax => "--op-max",
        Setting::SpDeadband => "--sp-deadband",
        Setting::MaxGapS => "--max-gap-s",
        Setting::SettleBand => "--settle-band",
        Setting::HoldBand => "--hold-band",
        Setting::RecoverWithinS => "--recover-within-s",
        Setting::PvRange => "--pv-range",
        Setting::ControllerGain => "--current-gain",
        Setting::ControllerIntegral => "--current-integral",
        Setting::ControllerDerivative => "--current-derivative",
        Setting::ActuatorRating => "--actuator-rating",
        other => other.key(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn input_problems_are_exit_code_2_and_runtime_failures_1() {
        let problem = crate::analysis::LoopSetup::new("x", crate::analysis::Spec::within(-1.0))
            .validate()
            .unwrap_err();
        let setting = Failure::Setting(problem);
        assert_eq!(setting.exit_code(), 2);
        assert!(
            setting.to_string().starts_with("--settle-within-s "),
            "{setting}"
        );
        assert_eq!(Failure::from(Usage::NoStore).exit_code(), 2);
        let tz = crate::units::time_zone("Mars/Olympus").unwrap_err();
        assert_eq!(Failure::from(tz).exit_code(), 2);
        let io = std::io::Error::other("disk gone");
        assert_eq!(Failure::from(io).exit_code(), 1);
        let runtime = Failure::from(anyhow::anyhow!("inner").context("outer"));
        assert_eq!(runtime.exit_code(), 1);
        assert_eq!(format!("{runtime:#}"), "outer: inner");
    }

    #[test]
    fn a_closed_pipe_is_recognised_through_context() {
        let pipe = || std::io::Error::from(std::io::ErrorKind::BrokenPipe);
        assert!(Failure::from(pipe()).is_broken_pipe());
        let wrapped = anyhow::Error::new(pipe()).context("writing the table");
        assert!(Failure::from(wrapped).is_broken_pipe());
        // The demo writes its summary through its own error type.
        let demo = DemoError::Run(anyhow::Error::new(pipe()).context("writing the summary"));
        assert!(Failure::from(demo).is_broken_pipe());
        assert!(!Failure::from(Usage::NoStore).is_broken_pipe());
    }
}
