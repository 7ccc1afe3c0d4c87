//! One poll of one device: send a plan's read requests in order, each under a timeout.
//!
//! This is the only place that sends requests to a plant device. It takes [`ReadRequest`]s, which
//! can only name a table, a start and a count, and sends each with its table's read function code
//! (1, 2, 3 or 4); nothing in this module's API can express a write.
//!
//! The tokio-modbus client has no timeout of its own, so every call is wrapped in
//! [`tokio::time::timeout`]. After a [`PollOutcome::Timeout`] or [`PollOutcome::Io`] the
//! connection must be dropped and opened again ([`PollOutcome::needs_reconnect`]): a reply that
//! arrives late would otherwise be taken for the answer to the next request.

use super::plan::ReadRequest;
use super::registers::Table;
use std::fmt;
use std::time::Duration;
use tokio_modbus::ExceptionCode;
use tokio_modbus::client::{Context, Reader};

/// What one poll produced. On a failure the poll stops at the failing request; `index` is its
/// position in the plan.
#[derive(Debug)]
pub enum PollOutcome {
    /// Every request answered: one vector per request, in plan order, each exactly the
    /// request's length (bits as 0 or 1).
    Ok(Vec<Vec<u16>>),
    /// No answer within the timeout.
    Timeout { index: usize, request: ReadRequest },
    /// The device answered with an exception (for example 02 illegal data address or 06 server
    /// device busy). The connection is still in step and may be reused.
    Exception {
        index: usize,
        request: ReadRequest,
        code: ExceptionCode,
    },
    /// The connection failed or the reply did not belong to the request.
    Io {
        index: usize,
        request: ReadRequest,
        error: tokio_modbus::Error,
    },
    /// The reply held a different number of values than asked for.
    WrongLength {
        index: usize,
        request: ReadRequest,
        got: usize,
    },
}

impl PollOutcome {
    /// True when the connection can no longer be trusted and must be opened again.
    pub fn needs_reconnect(&self) -> bool {
        matches!(
            self,
            PollOutcome::Timeout { .. } | PollOutcome::Io { .. } | PollOutcome::WrongLength { .. }
        )
    }
}

impl fmt::Display for PollOutcome {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            PollOutcome::Ok(v) => write!(
                f,
                "{} answered",
                crate::units::count(v.len(), "request", "requests")
            ),
            PollOutcome::Timeout { index, request } => {
                write!(f, "request {index} ({request}): no answer in time")
            }
            PollOutcome::Exception {
                index,
                request,
                code,
            } => write!(
                f,
                "request {index} ({request}): exception {:02X} ({code})",
                u8::from(*code)
            ),
            PollOutcome::Io {
                index,
                request,
                error,
            } => write!(f, "request {index} ({request}): {error}"),
            PollOutcome::WrongLength {
                index,
                request,
                got,
            } => write!(
                f,
                "request {index} ({request}): {} in the reply",
                crate::units::count(*got, "value", "values")
            ),
        }
    }
}

fn bits(v: Vec<bool>) -> Vec<u16> {
    v.into_iter().map(u16::from).collect()
}

/// Sends one read request; the table alone picks the read function code.
async fn read(ctx: &mut Context, r: &ReadRequest) -> tokio_modbus::Result<Vec<u16>> {
    let (a, n) = (r.start().get(), r.count());
    match r.table() {
        Table::Coils => ctx.read_coils(a, n).await.map(|x| x.map(bits)),
        Table::DiscreteInputs => ctx.read_discrete_inputs(a, n).await.map(|x| x.map(bits)),
        Table::HoldingRegisters => ctx.read_holding_registers(a, n).await,
        Table::InputRegisters => ctx.read_input_registers(a, n).await,
    }
}

/// Sends every request of `plan` in order, each under `timeout`, and stops at the first failure.
pub async fn poll_once(ctx: &mut Context, plan: &[ReadRequest], timeout: Duration) -> PollOutcome {
    let mut values = Vec::with_capacity(plan.len());
    for (index, request) in plan.iter().copied().enumerate() {
        match tokio::time::timeout(timeout, read(ctx, &request)).await {
            Err(_elapsed) => return PollOutcome::Timeout { index, request },
            Ok(Err(error)) => {
                return PollOutcome::Io {
                    index,
                    request,
                    error,
                };
            }
            Ok(Ok(Err(code))) => {
                return PollOutcome::Exception {
                    index,
                    request,
                    code,
                };
            }
            Ok(Ok(Ok(v))) if v.len() != usize::from(request.count()) => {
                return PollOutcome::WrongLength {
                    index,
                    request,
                    got: v.len(),
                };
            }
            Ok(Ok(Ok(v))) => values.push(v),
        }
    }
    PollOutcome::Ok(values)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::modbus::plan::{Limits, Span, plan};
    use crate::modbus::registers::{Address, DataType, Order, Scaling, Source};
    use crate::modbus::sim::device::{Fault, RegisterMap, SimDevice};
    use tokio_modbus::client::tcp;

    const PATIENCE: Duration = Duration::from_secs(10);

    fn source(table: Table, address: u16, data_type: DataType, order: Order) -> Source {
        Source::new(
            table,
            Address::new(address),
            data_type,
            order,
            Scaling::IDENTITY,
        )
        .unwrap()
    }

    fn spans(sources: &[Source]) -> Vec<Span> {
        sources
            .iter()
            .map(|s| Span {
                table: s.table,
                address: s.address,
                count: s.count(),
            })
            .collect()
    }

    #[tokio::test]
    async fn polls_a_plan_and_decodes_every_source() {
        let dev = SimDevice::start(0, RegisterMap::new(300)).await.unwrap();
        let sources = [
            source(Table::HoldingRegisters, 100, DataType::F32, Order::Abcd),
            source(Table::HoldingRegisters, 102, DataType::F32, Order::Cdab),
            source(Table::InputRegisters, 7, DataType::I16, Order::Abcd),
            source(Table::InputRegisters, 10, DataType::F64, Order::Dcba),
            source(Table::Coils, 3, DataType::Bool, Order::Abcd),
            source(Table::DiscreteInputs, 250, DataType::Bool, Order::Abcd),
        ];
        dev.set_f32(Table::HoldingRegisters, 100, 42.5, Order::Abcd);
        dev.set_f32(Table::HoldingRegisters, 102, -2.5, Order::Cdab);
        // i16 -1 = 0xFFFF (two's complement).
        dev.set_registers(Table::InputRegisters, 7, &[0xFFFF]);
        dev.set_value(
            Table::InputRegisters,
            10,
            123.456,
            DataType::F64,
            Order::Dcba,
        )
        .unwrap();
        dev.set_bit(Table::Coils, 3, true);
        dev.set_bit(Table::DiscreteInputs, 250, true);

        let p = plan(&spans(&sources), Limits::with_gap(4)).unwrap();
        // Coils, discrete inputs, input registers 7-13 (gap of 2), holding 100-103.
        assert_eq!(p.requests.len(), 4);

        let mut ctx = tcp::connect(dev.addr()).await.unwrap();
        let responses = match poll_once(&mut ctx, &p.requests, PATIENCE).await {
            PollOutcome::Ok(v) => v,
            other => panic!("{other}"),
        };
        let values: Vec<f64> = (0..sources.len())
            .map(|i| sources[i].value(p.slice(i, &responses)))
            .collect();
        assert_eq!(values, vec![42.5, -2.5, -1.0, 123.456, 1.0, 1.0]);
        assert_eq!(dev.function_codes(), vec![1, 2, 4, 3]);
    }

    #[tokio::test]
    async fn only_read_function_codes_reach_the_device() {
        let dev = SimDevice::start(0, RegisterMap::new(2100)).await.unwrap();
        let requests: Vec<ReadRequest> = Table::ALL
            .into_iter()
            .map(|t| ReadRequest::new(t, Address::new(0), t.protocol_max()).unwrap())
            .collect();
        let mut ctx = tcp::connect(dev.addr()).await.unwrap();
        for _ in 0..3 {
            let out = poll_once(&mut ctx, &requests, PATIENCE).await;
            assert!(
                matches!(out, PollOutcome::Ok(ref v) if v.len() == 4),
                "{out}"
            );
        }
        let codes = dev.function_codes();
        assert_eq!(codes, [1, 2, 4, 3].repeat(3));
        assert!(codes.iter().all(|c| (1..=4).contains(c)));
    }

    #[tokio::test]
    async fn an_exception_names_the_request() {
        let dev = SimDevice::start(0, RegisterMap::new(50)).await.unwrap();
        let requests = [
            ReadRequest::new(Table::HoldingRegisters, Address::new(0), 10).unwrap(),
            // Past the end of the 50-register map.
            ReadRequest::new(Table::HoldingRegisters, Address::new(45), 10).unwrap(),
            ReadRequest::new(Table::InputRegisters, Address::new(0), 1).unwrap(),
        ];
        let mut ctx = tcp::connect(dev.addr()).await.unwrap();
        let out = poll_once(&mut ctx, &requests, PATIENCE).await;
        match &out {
            PollOutcome::Exception {
                index: 1,
                request,
                code: ExceptionCode::IllegalDataAddress,
            } => assert_eq!(request.start().get(), 45),
            other => panic!("{other}"),
        }
        assert!(!out.needs_reconnect());
        assert_eq!(
            out.to_string(),
            "request 1 (FC3 holding registers 45-54): exception 02 (Illegal data address)"
        );
        // The poll stopped at the failure: the third request was never sent.
        assert_eq!(dev.function_codes(), vec![3, 3]);

        dev.set_fault(Fault::Exception(ExceptionCode::ServerDeviceBusy));
        let out = poll_once(&mut ctx, &requests[2..], PATIENCE).await;
        assert!(
            matches!(
                out,
                PollOutcome::Exception {
                    index: 0,
                    code: ExceptionCode::ServerDeviceBusy,
                    ..
                }
            ),
            "{out}"
        );
        assert!(out.to_string().contains("exception 06"), "{out}");
    }

    #[tokio::test]
    async fn a_stalled_device_times_out() {
        let dev = SimDevice::start(0, RegisterMap::new(10)).await.unwrap();
        let requests = [ReadRequest::new(Table::InputRegisters, Address::new(0), 2).unwrap()];
        let mut ctx = tcp::connect(dev.addr()).await.unwrap();
        dev.set_fault(Fault::Stall);
        let out = poll_once(&mut ctx, &requests, Duration::from_millis(200)).await;
        assert!(
            matches!(out, PollOutcome::Timeout { index: 0, .. }),
            "{out}"
        );
        assert!(out.needs_reconnect());
        // Reconnect once the device answers again.
        drop(ctx);
        dev.set_fault(Fault::None);
        let mut ctx = tcp::connect(dev.addr()).await.unwrap();
        let out = poll_once(&mut ctx, &requests, PATIENCE).await;
        assert!(matches!(out, PollOutcome::Ok(_)), "{out}");
    }

    #[tokio::test]
    async fn a_dropped_connection_is_io() {
        let dev = SimDevice::start(0, RegisterMap::new(10)).await.unwrap();
        let requests = [ReadRequest::new(Table::HoldingRegisters, Address::new(0), 2).unwrap()];
        let mut ctx = tcp::connect(dev.addr()).await.unwrap();
        dev.set_fault(Fault::DropConnection);
        let out = poll_once(&mut ctx, &requests, PATIENCE).await;
        assert!(matches!(out, PollOutcome::Io { index: 0, .. }), "{out}");
        assert!(out.needs_reconnect());
    }

    #[tokio::test]
    async fn an_empty_plan_sends_nothing() {
        let dev = SimDevice::start(0, RegisterMap::new(10)).await.unwrap();
        let mut ctx = tcp::connect(dev.addr()).await.unwrap();
        let out = poll_once(&mut ctx, &[], PATIENCE).await;
        assert!(
            matches!(out, PollOutcome::Ok(ref v) if v.is_empty()),
            "{out}"
        );
        assert!(dev.function_codes().is_empty());
    }
}
