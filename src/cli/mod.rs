//! The command line, and nothing else: each subcommand's clap flags (their `///` lines are the
//! help text) and its handler, one file each, turning flags into the library's plain options
//! and the library's typed errors into a [`Failure`] with its exit code. No library module
//! imports from here.

mod alerts;
mod analyze;
mod bench;
mod check_config;
mod controller_flags;
mod csv_flags;
mod demo;
mod episodes;
mod error;
mod export;
mod loops;
mod report;
mod run;
mod store;
mod time;

pub use analyze::AnalyzeArgs;
pub use error::{Failure, Usage, analyze_flag};

use clap::{Parser, Subcommand};
use std::io::Write;

/// headroom: tells whether a control loop that misses its spec needs retuning, or whether its
/// actuator makes the spec impossible.
#[derive(Debug, Parser)]
#[command(name = "headroom", version, about, long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Analyse a CSV export of one loop offline: score every setpoint change, identify the
    /// process, and tell tuning-limited from actuator-limited.
    Analyze(Box<AnalyzeArgs>),
    /// Measure this machine: analysis speed beside the reference libraries, in one run.
    Bench(bench::BenchArgs),
    /// Run the daemon: collect SP, PV and OP, store them, score every setpoint change live, and
    /// raise alerts. Stops gracefully on Ctrl-C or SIGTERM.
    Run(run::RunArgs),
    /// The showcase: a simulated pilot plant, an embedded MQTT broker and the daemon, in
    /// accelerated time; ends with a summary per loop. Nothing needs to be installed.
    Demo(demo::DemoArgs),
    /// Validate a configuration file and print what it would watch.
    CheckConfig(check_config::CheckConfigArgs),
    /// Each loop's status: last samples, last episode, model, alerts not yet acknowledged.
    Loops(store::StoreArgs),
    /// Scored setpoint changes from the store.
    Episodes(episodes::EpisodesArgs),
    /// Alerts from the store (active and returned; --all for every one); `alerts ack ID`
    /// acknowledges one.
    Alerts(alerts::AlertsArgs),
    /// Write a loop's stored samples as a CSV export that `analyze` reads.
    Export(export::ExportArgs),
    /// The weekly loop-health summary of a period from the store: HTML, Markdown or JSON.
    Report(report::ReportArgs),
}

/// Runs the command, writing its output to `out`.
pub fn dispatch(command: &Command, out: &mut dyn Write) -> Result<(), Failure> {
    match command {
        Command::Analyze(args) => analyze::analyze(args, out),
        Command::Bench(args) => bench::bench(args, out),
        Command::CheckConfig(args) => check_config::check_config(args, out),
        Command::Run(args) => run::run(args),
        Command::Demo(args) => demo::demo(args, out),
        Command::Loops(args) => block_on(loops::loops(args, out)),
        Command::Episodes(args) => block_on(episodes::episodes(args, out)),
        Command::Alerts(args) => block_on(alerts::alerts(args, out)),
        Command::Export(args) => block_on(export::export(args, out)),
        Command::Report(args) => block_on(report::report(args, out)),
    }
}

/// Runs an async command on a multi-threaded runtime.
fn block_on(command: impl Future<Output = Result<(), Failure>>) -> Result<(), Failure> {
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?;
    runtime.block_on(command)
}

/// A flag value parser that accepts exactly `names` (listed in the help and in the error for
/// any other text) and turns a name into its value with `parse`.
fn names_parser<T: Clone + Send + Sync + 'static>(
    names: impl IntoIterator<Item = &'static str>,
    parse: fn(&str) -> Option<T>,
) -> impl clap::builder::TypedValueParser<Value = T> {
    use clap::builder::TypedValueParser;
    clap::builder::PossibleValuesParser::new(names)
        .map(move |name| parse(&name).expect("one of the listed names"))
}

/// A tracing filter from RUST_LOG, or `default` when it is unset.
fn log_filter(default: &str) -> tracing_subscriber::EnvFilter {
    tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(default))
}
