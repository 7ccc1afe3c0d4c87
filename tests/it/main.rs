//! The one integration-test binary. Each module tests one capability through the public API or the
//! built `headroom` binary; shared helpers live in `helpers`.

mod cli;
mod corpus;
mod demo;
mod example_data;
mod helpers;
mod mode_rule;
mod reference_python;
mod scenarios;

// The daemon against a real Mosquitto: the harness, then one module per behaviour.
mod broker;
mod clients;
mod harness;
mod plant;

mod daemon_broker_restart;
mod daemon_config_change;
mod daemon_credentials;
mod daemon_end_to_end;
mod daemon_malformed;
mod daemon_modbus;
mod daemon_overload;
mod daemon_shutdown;
mod daemon_sigkill;
mod daemon_stale;
mod daemon_tls;
mod queries;
mod report;
