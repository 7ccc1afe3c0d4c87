//! Modbus TCP as a read-only source of loop signals.
//!
//! - [`registers`]: where a value lives (table, 0-based protocol address) and how its registers
//!   decode (data type, word and byte order, scaling). Pure.
//! - [`plan`]: groups a device's sources into the fewest read requests. Pure.
//! - [`poll`]: sends one plan's requests, each under a timeout; only read function codes exist in
//!   its API.
//! - [`source`]: one task per device that polls its plan every period and hands the values to
//!   the writer.
//! - [`sim`]: simulated devices and a simulated loop served from their registers.

pub mod plan;
pub mod poll;
pub mod registers;
pub mod sim;
pub mod source;
