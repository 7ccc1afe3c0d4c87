//! Helpers shared by the integration tests, kept in one place so that every test binary can
//! include them (`#[path = "../common/mod.rs"] mod common;`, with `#[allow(dead_code)]` in a
//! binary that uses only some of them):
//!
//! - here: the built `headroom` binary, running it, and free loopback ports;
//! - `broker`: a real Mosquitto per test, on its own loopback port;
//! - `clients`: a QoS 1 publisher and a spy on what the broker delivers;
//! - `daemon`: `headroom run` as a child process with its workspace, config and store;
//! - `plant`: simulated loop data as a controller gateway publishes it;
//! - `sim`: simulated runs as analysis input and as stored samples;
//! - `degrade`: a recorded run as historians degrade it (coarse, compressed, quantised, frozen,
//!   clipped);
//! - `truth`: the fastest settling a simulated plant allows, by brute force on the plant.

pub mod broker;
pub mod clients;
pub mod daemon;
pub mod degrade;
pub mod plant;
pub mod sim;
pub mod truth;

use std::net::{Ipv4Addr, TcpListener};
use std::path::PathBuf;
use std::process::{Command, Output};

/// The `headroom` binary that Cargo built for this test run.
pub fn headroom_bin() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_headroom"))
}

/// Runs `headroom` with `args` and waits for it.
pub fn run_headroom(args: &[&str]) -> Output {
    Command::new(headroom_bin()).args(args).output().unwrap()
}

/// Runs `headroom` with `args`; fails the test with its standard error unless it succeeds.
pub fn run_headroom_ok(args: &[&str]) -> Output {
    let out = run_headroom(args);
    assert!(
        out.status.success(),
        "headroom {args:?} failed ({}):\n{}",
        out.status,
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

/// Runs `headroom` with `args`: its exit code (-1 when killed by a signal), standard output
/// and standard error.
pub fn run_headroom_text(args: &[&str]) -> (i32, String, String) {
    let out = run_headroom(args);
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// A port on 127.0.0.1 that was free a moment ago. Another process can take it before the
/// caller binds it; a caller that binds it itself (the broker) notices that and tries another.
pub fn free_port() -> u16 {
    TcpListener::bind((Ipv4Addr::LOCALHOST, 0))
        .and_then(|l| l.local_addr())
        .expect("a free port on 127.0.0.1")
        .port()
}

/// Whether nothing listens on `port` of 127.0.0.1.
pub fn port_is_free(port: u16) -> bool {
    TcpListener::bind((Ipv4Addr::LOCALHOST, port)).is_ok()
}
