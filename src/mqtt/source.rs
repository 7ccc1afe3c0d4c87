//! The MQTT source: one task owns the broker connection. It subscribes (again after every
//! connection that did not resume the session), decodes each message into samples, hands them to
//! the writer, and acknowledges a QoS 1 message only when the writer reports its samples
//! committed — so a crash loses nothing the broker has not kept. It also publishes the daemon's
//! own alert and status messages; it never publishes anywhere else.

use super::decode::{self, Limits};
use super::routes::{PayloadFormat, TopicMap};
use crate::source::{Ingest, RateLimitedLog};
use rumqttc::{AsyncClient, ConnectReturnCode, Event, MqttOptions, Packet, QoS, Transport};
use std::collections::VecDeque;
use std::sync::Arc;
use std::time::Duration;
use tokio::sync::{mpsc, watch};

/// Requests queued between this task's client handle and its event loop. The task only ever
/// uses the non-blocking `try_` calls on it, keeping what does not fit for the next turn, so a
/// full queue delays acknowledgements but never deadlocks the task that drains it.
const REQUEST_QUEUE: usize = 1_000;

/// Reconnection waits: from 0.2 s, doubling, at most 5 s; back to 0.2 s after a connection.
const BACKOFF_FIRST: Duration = Duration::from_millis(200);
const BACKOFF_MAX: Duration = Duration::from_secs(5);

/// MQTT's largest packet (remaining length, bytes): the most a broker can deliver.
const MAX_MQTT_PACKET: usize = 268_435_455;

/// A connection that lasted this long resets the back-off.
const STABLE_AFTER: Duration = Duration::from_secs(10);

/// How long shutdown waits for the last acknowledgements to leave before disconnecting anyway.
const SHUTDOWN_FLUSH: Duration = Duration::from_secs(3);

/// Messages from the writer to the MQTT task.
#[derive(Debug)]
pub enum Outbound {
    /// Acknowledge this message: its samples are committed.
    Ack(rumqttc::Publish),
    /// Publish on one of the daemon's own topics.
    Publish { topic: String, payload: Vec<u8> },
}

/// Why the password could not be read again (the caller's own error, kept whole).
pub type PasswordError = Box<dyn std::error::Error + Send + Sync>;

/// Reads the current password; on an error the connection is retried with the password it had.
pub type PasswordReader = Arc<dyn Fn() -> Result<Option<String>, PasswordError> + Send + Sync>;

/// Everything needed to connect and subscribe, resolved from the configuration.
#[derive(Clone)]
pub struct MqttParams {
    pub host: String,
    pub port: u16,
    /// TLS client configuration for `mqtts://`; `None` for plain TCP.
    pub tls: Option<Arc<rustls::ClientConfig>>,
    pub client_id: String,
    pub username: Option<String>,
    pub password: Option<String>,
    /// Reads the password again (from its file or variable), after the broker refused it.
    pub password_reader: Option<PasswordReader>,
    pub keep_alive: Duration,
    pub subscriptions: Vec<String>,
    pub limits: Limits,
    pub topics: Arc<TopicMap>,
}

impl std::fmt::Debug for MqttParams {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("MqttParams")
            .field("host", &self.host)
            .field("port", &self.port)
            .field("tls", &self.tls.is_some())
            .field("client_id", &self.client_id)
            .field("username", &self.username)
            .field("password", &self.password.as_ref().map(|_| "***"))
            .finish_non_exhaustive()
    }
}

fn options(p: &MqttParams) -> MqttOptions {
    let mut o = MqttOptions::new(&p.client_id, &p.host, p.port);
    o.set_keep_alive(p.keep_alive.max(Duration::from_secs(1)));
    // A persistent session: the broker keeps our subscriptions and queues QoS 1 messages while
    // we are away, and redelivers what we had not acknowledged.
    o.set_clean_session(false);
    o.set_manual_acks(true);
    // Read any packet the broker can deliver. MQTT 3.1.1 cannot tell the broker a limit, so a
    // smaller one here would not keep big messages away: reading one would fail and drop the
    // connection, the broker would redeliver it on every reconnect, and nothing behind it would
    // ever arrive. Read whole, it is refused by `max_payload_bytes` (`oversized_payload`) and
    // acknowledged like any bad input. Capping memory is the broker's `max_packet_size`.
    o.set_max_packet_size(MAX_MQTT_PACKET, 256 * 1024);
    if let (Some(u), Some(pw)) = (&p.username, &p.password) {
        o.set_credentials(u, pw);
    } else if let Some(u) = &p.username {
        o.set_credentials(u, "");
    }
    if let Some(tls) = &p.tls {
        o.set_transport(Transport::tls_with_config(
            rumqttc::TlsConfiguration::Rustls(tls.clone()),
        ));
    }
    o
}

/// Runs the MQTT source until `stop` turns true and the writer has finished (its outbound
/// sender dropped), then sends the last acknowledgements and disconnects.
pub async fn run(
    params: MqttParams,
    ingest: mpsc::Sender<Ingest>,
    mut outbound: mpsc::Receiver<Outbound>,
    mut stop: watch::Receiver<bool>,
) {
    let (client, mut eventloop) = AsyncClient::new(options(&params), REQUEST_QUEUE);
    let mut link = Link::new(params, client, ingest);
    loop {
        link.hand_over_pending();
        if link.done() {
            break;
        }
        tokio::select! {
            ev = eventloop.poll() => match ev {
                Ok(Event::Incoming(Packet::ConnAck(ack))) => link.connected(&ack),
                Ok(Event::Incoming(Packet::SubAck(s))) => link.subscribed(&s),
                Ok(Event::Incoming(Packet::Publish(p))) => link.received(p, &mut outbound).await,
                Ok(_) => {}
                Err(e) => {
                    if link.flush_deadline.is_some() {
                        break;
                    }
                    link.lost(&e, &mut eventloop.mqtt_options).await;
                }
            },
            out = outbound.recv(), if !link.writer_done => link.take(out),
            _ = stop.changed(), if link.ingest.is_some() => {
                if *stop.borrow() {
                    // Stop taking new messages; the writer drains what it has and finishes.
                    link.ingest = None;
                }
            }
        }
    }
    tracing::info!("MQTT source stopped");
}

/// The MQTT task's state between events.
struct Link {
    params: MqttParams,
    client: AsyncClient,
    /// Where decoded messages go; `None` once stopping (new messages are left unacknowledged).
    ingest: Option<mpsc::Sender<Ingest>>,
    /// Acknowledgements and publishes the client's queue had no room for yet.
    pending: VecDeque<Outbound>,
    backoff: Duration,
    errors: RateLimitedLog,
    connected_at: Option<tokio::time::Instant>,
    /// Whether this run's subscriptions have been confirmed. A resumed session holds the
    /// filters of the run that created it, not necessarily this config's (a loop may have been
    /// added), so every run subscribes once even when the broker resumes the session.
    has_subscribed: bool,
    /// The writer has handed over its last acknowledgement.
    writer_done: bool,
    /// Set once disconnecting: the task ends at this time at the latest.
    flush_deadline: Option<tokio::time::Instant>,
    filters: Vec<rumqttc::SubscribeFilter>,
}

impl Link {
    fn new(params: MqttParams, client: AsyncClient, ingest: mpsc::Sender<Ingest>) -> Link {
        let filters = params
            .subscriptions
            .iter()
            .map(|f| rumqttc::SubscribeFilter::new(f.clone(), QoS::AtLeastOnce))
            .collect();
        Link {
            params,
            client,
            ingest: Some(ingest),
            pending: VecDeque::new(),
            backoff: BACKOFF_FIRST,
            errors: RateLimitedLog::new(Duration::from_secs(30)),
            connected_at: None,
            has_subscribed: false,
            writer_done: false,
            flush_deadline: None,
            filters,
        }
    }

    /// Hands queued acknowledgements and publishes to the client without blocking.
    fn hand_over_pending(&mut self) {
        while let Some(out) = self.pending.pop_front() {
            let sent = match &out {
                Outbound::Ack(p) => self.client.try_ack(p).is_ok(),
                Outbound::Publish { topic, payload } => self
                    .client
                    .try_publish(topic.as_str(), QoS::AtLeastOnce, false, payload.clone())
                    .is_ok(),
            };
            if !sent {
                self.pending.push_front(out);
                break;
            }
        }
    }

    /// Once the writer is done and everything is handed over, disconnects; true when the task
    /// should end (the disconnect's grace time is over).
    fn done(&mut self) -> bool {
        if self.writer_done && self.pending.is_empty() && self.flush_deadline.is_none() {
            let _ = self.client.try_disconnect();
            self.flush_deadline = Some(tokio::time::Instant::now() + SHUTDOWN_FLUSH);
        }
        self.flush_deadline
            .is_some_and(|d| tokio::time::Instant::now() >= d)
    }

    /// Something from the writer: an acknowledgement or a publish, or the end of its messages.
    fn take(&mut self, out: Option<Outbound>) {
        match out {
            Some(o) => self.pending.push_back(o),
            None => self.writer_done = true,
        }
    }

    fn connected(&mut self, ack: &rumqttc::ConnAck) {
        self.connected_at = Some(tokio::time::Instant::now());
        tracing::info!(
            host = %self.params.host, port = self.params.port,
            session_present = ack.session_present,
            "connected to the MQTT broker"
        );
        if (!ack.session_present || !self.has_subscribed) && !self.filters.is_empty() {
            // A new session has no subscriptions, and a resumed one may lack this config's:
            // make them (again).
            if let Err(e) = self.client.try_subscribe_many(self.filters.clone()) {
                tracing::error!(error = %e, "could not queue the subscriptions");
            }
        }
    }

    fn subscribed(&mut self, s: &rumqttc::SubAck) {
        let refused = s
            .return_codes
            .iter()
            .filter(|c| matches!(c, rumqttc::SubscribeReasonCode::Failure))
            .count();
        self.has_subscribed = true;
        if refused > 0 {
            tracing::error!(
                refused,
                "the broker refused some subscriptions; check its access rules"
            );
        } else {
            tracing::info!(filters = self.filters.len(), "subscribed");
        }
    }

    /// A message from the broker: decoded and handed to the writer, which acknowledges it once
    /// its samples are committed. A message refused is acknowledged here (and counted).
    async fn received(&mut self, p: rumqttc::Publish, outbound: &mut mpsc::Receiver<Outbound>) {
        let Some(tx) = self.ingest.clone() else {
            // Stopping: leave it unacknowledged; the broker redelivers it next time.
            return;
        };
        if p.retain
            && matches!(
                self.params.topics.lookup(&p.topic),
                Some((_, _, PayloadFormat::Number))
            )
        {
            // A retained value replayed at subscription carries no time of its own: stamped
            // with its arrival it would be a sample that never happened.
            self.pending.push_back(Outbound::Ack(p));
            return;
        }
        let msg = self.decode(p);
        self.forward(&tx, msg, outbound).await;
    }

    fn decode(&mut self, p: rumqttc::Publish) -> Ingest {
        let received_ms = jiff::Timestamp::now().as_millisecond();
        let params = &self.params;
        match decode::decode(
            &p.topic,
            &p.payload,
            received_ms,
            &params.topics,
            &params.limits,
        ) {
            Ok(samples) => Ingest::Samples {
                samples,
                ack: Some(p),
            },
            Err(rejection) => {
                let msg = Ingest::Rejected {
                    reason: rejection.reason(),
                    source: p.topic.clone(),
                    detail: rejection.to_string(),
                };
                // A malformed message never becomes valid: acknowledge it so the broker does
                // not redeliver it forever. It is counted, not lost.
                self.pending.push_back(Outbound::Ack(p));
                msg
            }
        }
    }

    /// Waits for room in the writer's queue: that is the backpressure, while the writer is busy
    /// the broker holds the rest. Meanwhile keeps taking the writer's acknowledgements, or the
    /// writer (waiting to hand them over) and this task would wait on each other forever.
    async fn forward(
        &mut self,
        tx: &mpsc::Sender<Ingest>,
        msg: Ingest,
        outbound: &mut mpsc::Receiver<Outbound>,
    ) {
        let mut msg = Some(msg);
        while let Some(m) = msg.take() {
            tokio::select! {
                permit = tx.reserve() => match permit {
                    Ok(permit) => permit.send(m),
                    Err(_) => self.ingest = None,
                },
                out = outbound.recv(), if !self.writer_done => {
                    self.take(out);
                    msg = Some(m);
                }
            }
        }
    }

    /// The connection failed or dropped: logs it, reads the password again after a refusal,
    /// and waits the back-off before the event loop reconnects.
    async fn lost(&mut self, e: &rumqttc::ConnectionError, options: &mut MqttOptions) {
        // The back-off starts over only after a connection that lasted: a link that drops
        // right after connecting (two clients sharing our id, a broker that closes on us) must
        // not reconnect at full speed.
        let connected_at = self.connected_at.take();
        if connected_at.is_some_and(|t| t.elapsed() >= STABLE_AFTER) {
            self.backoff = BACKOFF_FIRST;
        }
        let was_connected = connected_at.is_some();
        if let Some(suppressed) = self.errors.allow() {
            if was_connected {
                tracing::warn!(error = %e, suppressed, "lost the MQTT connection; reconnecting");
            } else {
                let hint = auth_hint(e);
                tracing::warn!(error = %e, suppressed, retry_in = ?self.backoff, "{hint}");
            }
        }
        if is_auth_refusal(e)
            && let Some(read) = &self.params.password_reader
        {
            // The password may have been corrected or rotated: read it again.
            if let (Some(user), Ok(Some(pw))) = (&self.params.username, read()) {
                options.set_credentials(user, pw);
            }
        }
        tokio::time::sleep(self.backoff).await;
        self.backoff = (self.backoff * 2).min(BACKOFF_MAX);
    }
}

fn is_auth_refusal(e: &rumqttc::ConnectionError) -> bool {
    matches!(
        e,
        rumqttc::ConnectionError::ConnectionRefused(
            ConnectReturnCode::NotAuthorized | ConnectReturnCode::BadUserNamePassword,
        )
    )
}

/// A hint for people reading the log, by kind of connection error.
fn auth_hint(e: &rumqttc::ConnectionError) -> &'static str {
    match e {
        rumqttc::ConnectionError::ConnectionRefused(
            ConnectReturnCode::NotAuthorized | ConnectReturnCode::BadUserNamePassword,
        ) => {
            "the MQTT broker refused the credentials; check the username and the password file or variable"
        }
        rumqttc::ConnectionError::ConnectionRefused(_) => "the MQTT broker refused the connection",
        rumqttc::ConnectionError::Io(_) => "cannot reach the MQTT broker; retrying",
        rumqttc::ConnectionError::Tls(_) => {
            "the TLS handshake with the MQTT broker failed; check ca_file and that the broker's \
             certificate names this host; retrying"
        }
        _ => "MQTT connection error; retrying",
    }
}
