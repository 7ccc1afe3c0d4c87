//! A simulated Modbus TCP device for tests and the demo.
//!
//! It serves the four tables from a shared [`RegisterMap`] on 127.0.0.1, records the function code
//! of every request it receives (so a test can prove the monitor only reads), and can be told to
//! misbehave ([`Fault`]). It answers writes too, like a real controller would: the recorder can
//! only prove that no write was sent if a write would have been accepted and seen.
//!
//! The server task ends when the [`SimDevice`] is dropped; its open connections end with it.

use crate::modbus::registers::{DataType, Order, RegisterError, Source, Table, encode};
use std::future::{Ready, ready};
use std::io;
use std::net::{Ipv4Addr, SocketAddr};
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, MutexGuard};
use std::task::{Context, Poll};
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::net::{TcpListener, TcpStream};
use tokio::task::JoinHandle;
use tokio_modbus::server::Service;
use tokio_modbus::server::tcp::Server;
use tokio_modbus::{ExceptionCode, Request, Response};

/// How the device misbehaves, from the next request on, until it is set back to `None`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Fault {
    /// Answer normally.
    #[default]
    None,
    /// Take every request and never answer; the connection stays open.
    Stall,
    /// Close the connection on receiving a request, without answering.
    DropConnection,
    /// Answer every request with this exception (for example `IllegalDataAddress` or
    /// `ServerDeviceBusy`).
    Exception(ExceptionCode),
}

/// The four tables. A read or write beyond a table's length answers "illegal data address"
/// (exception 02, Modbus V1.1b3 §7).
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct RegisterMap {
    pub coils: Vec<bool>,
    pub discrete_inputs: Vec<bool>,
    pub input_registers: Vec<u16>,
    pub holding_registers: Vec<u16>,
}

impl RegisterMap {
    /// All four tables with `len` zeroed elements each.
    pub fn new(len: usize) -> RegisterMap {
        RegisterMap {
            coils: vec![false; len],
            discrete_inputs: vec![false; len],
            input_registers: vec![0; len],
            holding_registers: vec![0; len],
        }
    }

    /// Stores `value` (engineering units) where `source` reads it, as a device would hold it:
    /// the raw value the source's scaling turns back into `value`, integer types rounded and
    /// kept in range. A bit source is set when `value` is not 0. Out of the map: nothing is
    /// stored.
    pub fn put(&mut self, source: &Source, value: f64) {
        let start = usize::from(source.address.get());
        if let Some(bits) = self.bits_mut(source.table) {
            if let Some(b) = bits.get_mut(start) {
                *b = value != 0.0;
            }
            return;
        }
        let raw = source.scaling.raw_for(value);
        let raw = match source.data_type {
            DataType::U16 => raw.round().clamp(0.0, f64::from(u16::MAX)),
            DataType::I16 => raw.round().clamp(f64::from(i16::MIN), f64::from(i16::MAX)),
            DataType::U32 => raw.round().clamp(0.0, f64::from(u32::MAX)),
            DataType::I32 => raw.round().clamp(f64::from(i32::MIN), f64::from(i32::MAX)),
            _ => raw,
        };
        let (Ok(words), Some(table)) = (
            encode(raw, source.data_type, source.order),
            self.words_mut(source.table),
        ) else {
            return;
        };
        if let Some(slot) = table.get_mut(start..start + words.len()) {
            slot.copy_from_slice(&words);
        }
    }

    pub(crate) fn words_mut(&mut self, table: Table) -> Option<&mut Vec<u16>> {
        match table {
            Table::InputRegisters => Some(&mut self.input_registers),
            Table::HoldingRegisters => Some(&mut self.holding_registers),
            Table::Coils | Table::DiscreteInputs => None,
        }
    }

    pub(crate) fn bits_mut(&mut self, table: Table) -> Option<&mut Vec<bool>> {
        match table {
            Table::Coils => Some(&mut self.coils),
            Table::DiscreteInputs => Some(&mut self.discrete_inputs),
            Table::InputRegisters | Table::HoldingRegisters => None,
        }
    }

    /// Answers one request against the map.
    fn answer(&mut self, request: Request<'_>) -> Result<Response, ExceptionCode> {
        match request {
            Request::ReadCoils(a, n) => read(&self.coils, a, n).map(Response::ReadCoils),
            Request::ReadDiscreteInputs(a, n) => {
                read(&self.discrete_inputs, a, n).map(Response::ReadDiscreteInputs)
            }
            Request::ReadHoldingRegisters(a, n) => {
                read(&self.holding_registers, a, n).map(Response::ReadHoldingRegisters)
            }
            Request::ReadInputRegisters(a, n) => {
                read(&self.input_registers, a, n).map(Response::ReadInputRegisters)
            }
            Request::WriteSingleCoil(a, v) => {
                write(&mut self.coils, a, &[v])?;
                Ok(Response::WriteSingleCoil(a, v))
            }
            Request::WriteMultipleCoils(a, v) => {
                write(self.coils.as_mut_slice(), a, &v[..])?;
                Ok(Response::WriteMultipleCoils(a, v.len() as u16))
            }
            Request::WriteSingleRegister(a, v) => {
                write(&mut self.holding_registers, a, &[v])?;
                Ok(Response::WriteSingleRegister(a, v))
            }
            Request::WriteMultipleRegisters(a, v) => {
                write(self.holding_registers.as_mut_slice(), a, &v[..])?;
                Ok(Response::WriteMultipleRegisters(a, v.len() as u16))
            }
            _ => Err(ExceptionCode::IllegalFunction),
        }
    }
}

fn range(len: usize, address: u16, count: usize) -> Result<std::ops::Range<usize>, ExceptionCode> {
    let start = usize::from(address);
    let end = start + count;
    if count == 0 || end > len {
        return Err(ExceptionCode::IllegalDataAddress);
    }
    Ok(start..end)
}

fn read<T: Copy>(table: &[T], address: u16, count: u16) -> Result<Vec<T>, ExceptionCode> {
    Ok(table[range(table.len(), address, usize::from(count))?].to_vec())
}

fn write<T: Copy>(table: &mut [T], address: u16, values: &[T]) -> Result<(), ExceptionCode> {
    let r = range(table.len(), address, values.len())?;
    table[r].copy_from_slice(values);
    Ok(())
}

/// State shared by the handle and every connection.
#[derive(Debug, Default)]
struct Shared {
    map: Mutex<RegisterMap>,
    fault: Mutex<Fault>,
    function_codes: Mutex<Vec<u8>>,
}

/// Locks a mutex, carrying on past a panicked holder (the data is plain values, always valid).
fn lock<T>(m: &Mutex<T>) -> MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}

/// The per-connection service. `hang_up` is shared with the connection's stream.
struct Handler {
    shared: Arc<Shared>,
    hang_up: Arc<AtomicBool>,
}

impl Service for Handler {
    type Request = Request<'static>;
    // `None` sends no answer at all (used for the stall and drop faults).
    type Response = Option<Response>;
    type Exception = ExceptionCode;
    type Future = Ready<Result<Option<Response>, ExceptionCode>>;

    fn call(&self, request: Request<'static>) -> Self::Future {
        lock(&self.shared.function_codes).push(request.function_code().value());
        let fault = *lock(&self.shared.fault);
        ready(match fault {
            Fault::None => lock(&self.shared.map).answer(request).map(Some),
            Fault::Stall => Ok(None),
            Fault::DropConnection => {
                self.hang_up.store(true, Ordering::SeqCst);
                Ok(None)
            }
            Fault::Exception(code) => Err(code),
        })
    }
}

/// The connection's stream. Once `hang_up` is set, reading reports end of stream, so the server
/// ends the connection and closes the socket. The server reads again right after a request that
/// got no answer, so no wake-up is needed.
struct HangUpStream {
    inner: TcpStream,
    hang_up: Arc<AtomicBool>,
}

impl AsyncRead for HangUpStream {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        if self.hang_up.load(Ordering::SeqCst) {
            return Poll::Ready(Ok(()));
        }
        Pin::new(&mut self.inner).poll_read(cx, buf)
    }
}

impl AsyncWrite for HangUpStream {
    fn poll_write(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        Pin::new(&mut self.inner).poll_write(cx, buf)
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_flush(cx)
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_shutdown(cx)
    }
}

/// A running simulated device. Dropping it stops the server and closes its connections.
#[derive(Debug)]
pub struct SimDevice {
    addr: SocketAddr,
    shared: Arc<Shared>,
    task: JoinHandle<()>,
}

impl SimDevice {
    /// Starts serving `map` on 127.0.0.1:`port` (0 for a free port chosen by the system; see
    /// [`SimDevice::addr`]). Must be called inside a Tokio runtime.
    pub async fn start(port: u16, map: RegisterMap) -> io::Result<SimDevice> {
        let listener = TcpListener::bind((Ipv4Addr::LOCALHOST, port)).await?;
        let addr = listener.local_addr()?;
        let shared = Arc::new(Shared {
            map: Mutex::new(map),
            ..Shared::default()
        });
        let for_server = Arc::clone(&shared);
        let task = tokio::spawn(async move {
            let server = Server::new(listener);
            let on_connected = |stream: TcpStream, _peer: SocketAddr| {
                let shared = Arc::clone(&for_server);
                async move {
                    let hang_up = Arc::new(AtomicBool::new(false));
                    let handler = Handler {
                        shared,
                        hang_up: Arc::clone(&hang_up),
                    };
                    let stream = HangUpStream {
                        inner: stream,
                        hang_up,
                    };
                    Ok(Some((handler, stream)))
                }
            };
            // A connection's error (for example a client that vanished) ends only that
            // connection; the server keeps listening.
            let _ = server.serve(&on_connected, |_err| {}).await;
        });
        Ok(SimDevice { addr, shared, task })
    }

    /// The address the device listens on.
    pub fn addr(&self) -> SocketAddr {
        self.addr
    }

    /// Every function code received so far, in order (including requests answered with a fault).
    pub fn function_codes(&self) -> Vec<u8> {
        lock(&self.shared.function_codes).clone()
    }

    /// Changes how the device answers from the next request on.
    pub fn set_fault(&self, fault: Fault) {
        *lock(&self.shared.fault) = fault;
    }

    /// Runs `f` on the register map (for direct reads and writes by a test or a simulated loop).
    pub fn with_map<R>(&self, f: impl FnOnce(&mut RegisterMap) -> R) -> R {
        f(&mut lock(&self.shared.map))
    }

    /// Stores `words` in a register table from `address`.
    ///
    /// # Panics
    ///
    /// If `table` is a bit table or the words run past the table's end (a mistake in the test).
    pub fn set_registers(&self, table: Table, address: u16, words: &[u16]) {
        self.with_map(|m| {
            let t = m
                .words_mut(table)
                .expect("set_registers needs a register table");
            let start = usize::from(address);
            t[start..start + words.len()].copy_from_slice(words);
        });
    }

    /// Sets one bit of a bit table. Panics like [`SimDevice::set_registers`].
    pub fn set_bit(&self, table: Table, address: u16, value: bool) {
        self.with_map(|m| {
            m.bits_mut(table).expect("set_bit needs a bit table")[usize::from(address)] = value;
        });
    }

    /// Stores `value` as `data_type` in `order` from `address` of a register table.
    pub fn set_value(
        &self,
        table: Table,
        address: u16,
        value: f64,
        data_type: DataType,
        order: Order,
    ) -> Result<(), RegisterError> {
        let words = encode(value, data_type, order)?;
        self.set_registers(table, address, &words);
        Ok(())
    }

    /// Stores an f32 in two registers of `table` from `address`, in `order`.
    pub fn set_f32(&self, table: Table, address: u16, value: f32, order: Order) {
        let words = encode(f64::from(value), DataType::F32, order)
            .expect("every f32 has a single-precision encoding");
        self.set_registers(table, address, &words);
    }
}

impl Drop for SimDevice {
    fn drop(&mut self) {
        // Aborting the server drops its cancellation guard, which ends every connection task.
        self.task.abort();
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;
    use tokio_modbus::client::{Context as Client, Reader, Writer, tcp};

    const PATIENCE: Duration = Duration::from_secs(10);

    async fn client(dev: &SimDevice) -> Client {
        tcp::connect(dev.addr()).await.unwrap()
    }

    #[tokio::test]
    async fn serves_the_specification_example_over_fc3_and_fc4() {
        let dev = SimDevice::start(0, RegisterMap::new(200)).await.unwrap();
        // Modbus V1.1b3 §6.3: registers 108-110 (PDU addresses 107-109) hold 555, 0, 100.
        dev.set_registers(Table::HoldingRegisters, 107, &[0x022B, 0x0000, 0x0064]);
        // Modbus V1.1b3 §6.4: input register 9 (PDU address 8) holds 10.
        dev.set_registers(Table::InputRegisters, 8, &[0x000A]);
        let mut ctx = client(&dev).await;
        let hr = ctx.read_holding_registers(107, 3).await.unwrap().unwrap();
        assert_eq!(hr, vec![555, 0, 100]);
        let ir = ctx.read_input_registers(8, 1).await.unwrap().unwrap();
        assert_eq!(ir, vec![10]);
        assert_eq!(dev.function_codes(), vec![3, 4]);
    }

    #[tokio::test]
    async fn f32_in_every_order_reads_back() {
        let dev = SimDevice::start(0, RegisterMap::new(16)).await.unwrap();
        let mut ctx = client(&dev).await;
        for (k, order) in Order::ALL.into_iter().enumerate() {
            let a = 2 * k as u16;
            dev.set_f32(Table::InputRegisters, a, 123.456, order);
            let words = ctx.read_input_registers(a, 2).await.unwrap().unwrap();
            // REFERENCES.md 7c: 123.456f = 0x42F6E979 → ABCD [0x42F6, 0xE979].
            if order == Order::Abcd {
                assert_eq!(words, vec![0x42F6, 0xE979]);
            }
            assert_eq!(
                crate::modbus::registers::decode(&words, DataType::F32, order),
                f64::from(123.456_f32)
            );
        }
    }

    #[tokio::test]
    async fn bits_are_served() {
        let dev = SimDevice::start(0, RegisterMap::new(8)).await.unwrap();
        dev.set_bit(Table::Coils, 3, true);
        dev.set_bit(Table::DiscreteInputs, 0, true);
        let mut ctx = client(&dev).await;
        let coils = ctx.read_coils(2, 2).await.unwrap().unwrap();
        assert_eq!(coils, vec![false, true]);
        let di = ctx.read_discrete_inputs(0, 1).await.unwrap().unwrap();
        assert_eq!(di, vec![true]);
        assert_eq!(dev.function_codes(), vec![1, 2]);
    }

    #[tokio::test]
    async fn reading_past_the_map_is_an_illegal_data_address() {
        let dev = SimDevice::start(0, RegisterMap::new(10)).await.unwrap();
        let mut ctx = client(&dev).await;
        let r = ctx.read_holding_registers(9, 2).await.unwrap();
        assert_eq!(r, Err(ExceptionCode::IllegalDataAddress));
        // The connection is still usable afterwards.
        assert_eq!(ctx.read_holding_registers(9, 1).await.unwrap(), Ok(vec![0]));
    }

    #[tokio::test]
    async fn injected_exceptions_are_answered() {
        let dev = SimDevice::start(0, RegisterMap::new(10)).await.unwrap();
        let mut ctx = client(&dev).await;
        dev.set_fault(Fault::Exception(ExceptionCode::ServerDeviceBusy));
        assert_eq!(
            ctx.read_input_registers(0, 1).await.unwrap(),
            Err(ExceptionCode::ServerDeviceBusy)
        );
        dev.set_fault(Fault::Exception(ExceptionCode::IllegalDataAddress));
        assert_eq!(
            ctx.read_holding_registers(0, 1).await.unwrap(),
            Err(ExceptionCode::IllegalDataAddress)
        );
        dev.set_fault(Fault::None);
        assert_eq!(ctx.read_holding_registers(0, 1).await.unwrap(), Ok(vec![0]));
        assert_eq!(dev.function_codes(), vec![4, 3, 3]);
    }

    #[tokio::test]
    async fn a_stalled_device_is_ended_only_by_the_callers_timeout() {
        let dev = SimDevice::start(0, RegisterMap::new(10)).await.unwrap();
        let mut ctx = client(&dev).await;
        dev.set_fault(Fault::Stall);
        // The client has no timeout of its own (STACK-NOTES.md, tokio-modbus): only the wrapper
        // ends the call.
        let r = tokio::time::timeout(Duration::from_millis(200), ctx.read_holding_registers(0, 1))
            .await;
        assert!(r.is_err(), "expected the wrapper's timeout, got {r:?}");
        // The device did receive the request; it just never answered.
        assert_eq!(dev.function_codes(), vec![3]);
        // After a timeout the connection is dropped and a fresh one works once the fault clears.
        drop(ctx);
        dev.set_fault(Fault::None);
        let mut ctx = client(&dev).await;
        let r = tokio::time::timeout(PATIENCE, ctx.read_holding_registers(0, 1)).await;
        assert_eq!(r.unwrap().unwrap(), Ok(vec![0]));
    }

    #[tokio::test]
    async fn a_dropped_connection_is_an_io_error() {
        let dev = SimDevice::start(0, RegisterMap::new(10)).await.unwrap();
        let mut ctx = client(&dev).await;
        dev.set_fault(Fault::DropConnection);
        let r = tokio::time::timeout(PATIENCE, ctx.read_holding_registers(0, 1))
            .await
            .expect("a dropped connection must end the call, not stall it");
        assert!(matches!(r, Err(tokio_modbus::Error::Transport(_))), "{r:?}");
        dev.set_fault(Fault::None);
        let mut ctx = client(&dev).await;
        assert_eq!(ctx.read_holding_registers(0, 1).await.unwrap(), Ok(vec![0]));
    }

    #[tokio::test]
    async fn the_recorder_sees_exactly_the_requests_made() {
        let dev = SimDevice::start(0, RegisterMap::new(20)).await.unwrap();
        let mut ctx = client(&dev).await;
        assert!(dev.function_codes().is_empty());
        ctx.read_holding_registers(0, 2).await.unwrap().unwrap();
        ctx.read_input_registers(0, 2).await.unwrap().unwrap();
        ctx.read_coils(0, 1).await.unwrap().unwrap();
        ctx.read_discrete_inputs(0, 1).await.unwrap().unwrap();
        ctx.read_holding_registers(4, 1).await.unwrap().unwrap();
        assert_eq!(dev.function_codes(), vec![3, 4, 1, 2, 3]);
        // A write is seen too (and applied), which is what makes an empty write list meaningful.
        ctx.write_single_register(5, 7).await.unwrap().unwrap();
        ctx.write_multiple_registers(6, &[8, 9])
            .await
            .unwrap()
            .unwrap();
        ctx.write_single_coil(1, true).await.unwrap().unwrap();
        assert_eq!(dev.function_codes(), vec![3, 4, 1, 2, 3, 6, 16, 5]);
        assert_eq!(
            dev.with_map(|m| m.holding_registers[5..8].to_vec()),
            vec![7, 8, 9]
        );
    }

    #[tokio::test]
    async fn dropping_the_device_stops_it() {
        let dev = SimDevice::start(0, RegisterMap::new(4)).await.unwrap();
        let mut ctx = client(&dev).await;
        assert_eq!(ctx.read_holding_registers(0, 1).await.unwrap(), Ok(vec![0]));
        drop(dev);
        // The open connection ends rather than hanging.
        let r = tokio::time::timeout(PATIENCE, ctx.read_holding_registers(0, 1))
            .await
            .expect("the connection must end when the device is dropped");
        assert!(r.is_err(), "{r:?}");
    }
}
