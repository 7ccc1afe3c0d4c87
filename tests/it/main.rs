//! The one integration-test binary. Each module tests one capability through the public API or the
//! built `headroom` binary; the helpers shared with any other test binary live in
//! `tests/common/`.

#[path = "../common/mod.rs"]
mod common;

mod alerts_ack;
mod architecture;
mod cli;
mod cli_flags;
mod corpus;
mod demo;
mod example_data;
mod historian;
mod mode_rule;
mod reference_python;
mod regulation_corpus;
mod regulation_reference;
mod retune_corpus;
mod scenarios;
mod trust;

// The daemon against a real Mosquitto (harness in `common`), one module per behaviour.
mod daemon_broker_restart;
mod daemon_config_change;
mod daemon_credentials;
mod daemon_end_to_end;
mod daemon_malformed;
mod daemon_modbus;
mod daemon_overload;
mod daemon_regulation;
mod daemon_shutdown;
mod daemon_sigkill;
mod daemon_stale;
mod daemon_tls;
mod queries;
mod report;
mod report_evidence;
mod report_regulation;
