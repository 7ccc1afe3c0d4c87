//! Modbus TCP as a read-only source of loop signals.
//!
//! - [`registers`]: where a value lives (table, 0-based protocol address) and how its registers
//!   decode (data type, word and byte order, scaling). Pure.
//! - [`plan`]: groups a device's sources into the fewest read requests. Pure.
//! - [`poll`]: sends one plan's requests, each under a timeout; only read function codes exist in
//!   its API.
//! - [`device`]: a simulated device (a tokio-modbus server on 127.0.0.1) that records every
//!   function code it receives and can stall, drop the connection or answer with exceptions.
//! - [`simloop`]: a simulated loop (process, PI controller, saturating actuator) served from a
//!   device's registers on accelerated time.

pub mod device;
pub mod plan;
pub mod poll;
pub mod registers;
pub mod simloop;
