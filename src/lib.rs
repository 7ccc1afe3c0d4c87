//! headroom: watches control loops and tells, with evidence, whether a loop that misses its spec
//! needs retuning or whether its actuator makes the spec impossible.
//!
//! The analysis core ([`analysis`]) is pure and synchronous; everything else is an edge around it.

pub mod alerts;
pub mod analysis;
pub mod bench;
pub mod cli;
pub mod config;
pub mod csvload;
pub mod daemon;
pub mod demo;
pub mod modbus;
pub mod mqtt;
pub mod render;
pub mod report;
pub mod sample;
pub mod source;
pub mod store;
pub mod summary_format;
pub mod units;
