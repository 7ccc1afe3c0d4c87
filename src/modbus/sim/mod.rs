//! Simulated Modbus equipment, for tests, the demo and the benchmark; never used by `run`.
//!
//! - [`device`]: a simulated device (a tokio-modbus server on 127.0.0.1) that records every
//!   function code it receives and can stall, drop the connection or answer with exceptions.
//! - [`served_loop`]: a simulated loop (process, PI controller, saturating actuator) served from
//!   a device's registers on accelerated time.

pub mod device;
pub mod served_loop;
