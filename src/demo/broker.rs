//! The demo's MQTT broker: rumqttd, in this process, on a loopback port.
//!
//! rumqttd has no shutdown: `Broker::start` blocks its thread for good and spawns threads of its
//! own, so the broker lives until the process exits. That suits the demo, which is one process
//! that ends when the demo does (and it is why the demo is a command, not a library call that
//! tests repeat in one process). rumqttd cannot listen on port 0 nor report the port it bound,
//! so a free port is found first by binding and dropping a listener (a small race, acceptable
//! on a loopback demo), and the broker is then polled until it accepts connections.

use std::collections::HashMap;
use std::net::{Ipv4Addr, SocketAddr, TcpListener, TcpStream};
use std::time::{Duration, Instant};

/// How long the broker may take to accept its first connection.
const START_TIMEOUT: Duration = Duration::from_secs(10);

/// Why the broker could not start.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum BrokerError {
    #[error(
        "MQTT port {port} on 127.0.0.1 is in use; choose another with --mqtt-port, or 0 for any free port"
    )]
    PortInUse { port: u16 },
    #[error("cannot find a free loopback port for the MQTT broker: {0}")]
    NoFreePort(std::io::Error),
    #[error("the embedded MQTT broker cannot start: {0}")]
    Start(String),
    #[error(
        "the embedded MQTT broker did not accept connections on 127.0.0.1:{port} within {secs} s"
    )]
    NotListening { port: u16, secs: u64 },
}

/// A running embedded broker.
#[derive(Debug, Clone, Copy)]
pub struct EmbeddedBroker {
    pub addr: SocketAddr,
}

/// Starts the broker on 127.0.0.1:`port` (0: any free port) and waits until it accepts
/// connections.
pub fn start(port: u16) -> Result<EmbeddedBroker, BrokerError> {
    let port = match port {
        0 => TcpListener::bind((Ipv4Addr::LOCALHOST, 0))
            .and_then(|l| l.local_addr())
            .map_err(BrokerError::NoFreePort)?
            .port(),
        p => {
            // rumqttd only logs a failed bind from its own thread; find out here instead.
            TcpListener::bind((Ipv4Addr::LOCALHOST, p))
                .map_err(|_| BrokerError::PortInUse { port: p })?;
            p
        }
    };
    let addr = SocketAddr::from((Ipv4Addr::LOCALHOST, port));
    let config = config(addr);
    std::thread::Builder::new()
        .name("demo-broker".into())
        .spawn(move || {
            let mut broker = rumqttd::Broker::new(config);
            if let Err(e) = broker.start() {
                tracing::error!(error = %e, "the embedded MQTT broker stopped");
            }
        })
        .map_err(|e| BrokerError::Start(e.to_string()))?;
    let deadline = Instant::now() + START_TIMEOUT;
    while TcpStream::connect_timeout(&addr, Duration::from_millis(200)).is_err() {
        if Instant::now() >= deadline {
            return Err(BrokerError::NotListening {
                port,
                secs: START_TIMEOUT.as_secs(),
            });
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    Ok(EmbeddedBroker { addr })
}

/// The broker's settings, built in code (no file is read).
fn config(addr: SocketAddr) -> rumqttd::Config {
    let connections = rumqttd::ConnectionSettings {
        connection_timeout_ms: 5_000,
        // The plant's batches are a few kilobytes; the daemon refuses more than 64 KiB anyway.
        max_payload_size: 256 * 1024,
        // The daemon acknowledges after each commit (every 100 ms), so several hundred messages
        // can be in flight to it at a time.
        max_inflight_count: 1_000,
        auth: None,
        external_auth: None,
        dynamic_filters: true,
    };
    let server = rumqttd::ServerSettings {
        name: "heronreach-v4".into(),
        listen: addr,
        tls: None,
        next_connection_delay_ms: 1,
        connections,
    };
    rumqttd::Config {
        id: 0,
        v4: Some(HashMap::from([("1".to_string(), server)])),
        router: rumqttd::RouterConfig {
            max_connections: 64,
            max_outgoing_packet_count: 1_000,
            // The router keeps recent messages in memory in segments; 4 × 4 MiB holds many
            // seconds of the plant's traffic, far more than the daemon ever lags behind (the
            // plant waits when the daemon falls behind, see `demo::MAX_LAG_SAMPLES`).
            max_segment_size: 4 << 20,
            max_segment_count: 4,
            ..Default::default()
        },
        ..Default::default()
    }
}
