//! MQTT clients the daemon tests use around the daemon: a QoS 1 publisher that counts what the
//! broker acknowledged, and a spy that records what the broker delivers.

use rumqttc::{
    AsyncClient, Event, MqttOptions, Outgoing, Packet, QoS, TlsConfiguration, Transport,
};
use std::collections::{HashMap, VecDeque};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// A message to publish: topic and payload.
pub type Message = (String, Vec<u8>);

/// How a [`publish`] call behaves.
#[derive(Debug, Clone)]
pub struct PublishOptions {
    pub client_id: String,
    pub credentials: Option<(String, String)>,
    /// Publishes awaiting their PUBACK at once.
    pub window: usize,
    /// At most this many messages per second; `None`: as fast as the broker takes them.
    pub per_second: Option<f64>,
    /// Stop trying after this long; what is unacknowledged by then stays so.
    pub deadline: Duration,
    /// Counts acknowledged messages as they come, for a test that acts mid-stream.
    pub progress: Option<Arc<AtomicUsize>>,
    /// Connect over TLS with this client configuration (the port must be a TLS listener).
    pub tls: Option<Arc<rustls::ClientConfig>>,
}

impl PublishOptions {
    pub fn new(client_id: impl Into<String>) -> PublishOptions {
        PublishOptions {
            client_id: client_id.into(),
            credentials: None,
            window: 100,
            per_second: None,
            deadline: Duration::from_secs(120),
            progress: None,
            tls: None,
        }
    }
}

/// Which messages the broker acknowledged (PUBACK), by index into the published list.
#[derive(Debug, Clone)]
pub struct Published {
    pub acked: Vec<bool>,
    /// Connections made (more than one means the publisher rode out a broker restart).
    pub connections: usize,
}

impl Published {
    pub fn acked_count(&self) -> usize {
        self.acked.iter().filter(|a| **a).count()
    }
}

/// Publishes every message with QoS 1 and returns which ones the broker acknowledged.
///
/// It rides out broker restarts: when the connection drops, every message not yet acknowledged
/// goes back to the front of the queue and is sent again on a new connection, until all are
/// acknowledged or the deadline passes. A message sent twice may reach the broker twice; that
/// is what QoS 1 means, and the store's key makes it harmless.
///
/// Each connection gets a fresh client and event loop, so no event or pending packet of a dead
/// connection can be mistaken for one of the new connection (rumqttc keeps both across its own
/// reconnects, and its packet ids wrap at the inflight window).
pub async fn publish(port: u16, messages: &[Message], o: PublishOptions) -> Published {
    let n = messages.len();
    let start = tokio::time::Instant::now();
    let deadline = start + o.deadline;
    let mut acked = vec![false; n];
    let mut remaining = n;
    // Messages to send again after a lost connection (not paced), and the next never-sent one.
    let mut retry: VecDeque<usize> = VecDeque::new();
    let mut next_fresh = 0usize;
    let due = |k: usize| {
        o.per_second
            .map(|r| start + Duration::from_secs_f64(k as f64 / r))
    };
    let mut connections = 0;
    let window = o.window.clamp(1, u16::MAX as usize - 1);

    'connection: while remaining > 0 && tokio::time::Instant::now() < deadline {
        let mut opts = MqttOptions::new(&o.client_id, "127.0.0.1", port);
        opts.set_keep_alive(Duration::from_secs(5));
        opts.set_clean_session(true);
        opts.set_inflight(window as u16);
        opts.set_max_packet_size(1 << 20, 1 << 20);
        if let Some((u, p)) = &o.credentials {
            opts.set_credentials(u, p);
        }
        if let Some(tls) = &o.tls {
            opts.set_transport(Transport::tls_with_config(TlsConfiguration::Rustls(
                tls.clone(),
            )));
        }
        let (client, mut eventloop) = AsyncClient::new(opts, window + 10);
        let mut connected = false;
        // Handed to the client, waiting for the event loop to give them a packet id.
        let mut handed: VecDeque<usize> = VecDeque::new();
        // Sent, by packet id, waiting for their PUBACK.
        let mut inflight: HashMap<u16, usize> = HashMap::new();

        loop {
            if remaining == 0 {
                break 'connection;
            }
            let mut wake = None;
            while connected && handed.len() + inflight.len() < window {
                let (i, fresh) = if let Some(i) = retry.pop_front() {
                    (i, false)
                } else if next_fresh < n {
                    if let Some(at) = due(next_fresh).filter(|at| *at > tokio::time::Instant::now())
                    {
                        wake = Some(at);
                        break;
                    }
                    next_fresh += 1;
                    (next_fresh - 1, true)
                } else {
                    break;
                };
                let (topic, payload) = &messages[i];
                if client
                    .try_publish(topic.as_str(), QoS::AtLeastOnce, false, payload.clone())
                    .is_err()
                {
                    if fresh {
                        next_fresh -= 1;
                    } else {
                        retry.push_front(i);
                    }
                    break;
                }
                handed.push_back(i);
            }
            let event = tokio::select! {
                e = eventloop.poll() => e,
                _ = tokio::time::sleep_until(deadline) => break 'connection,
                _ = sleep_until_opt(wake) => continue,
            };
            match event {
                Ok(Event::Incoming(Packet::ConnAck(_))) => {
                    connected = true;
                    connections += 1;
                }
                Ok(Event::Outgoing(Outgoing::Publish(pkid))) => {
                    let i = handed
                        .pop_front()
                        .expect("a publish went out that this publisher did not hand over");
                    inflight.insert(pkid, i);
                }
                Ok(Event::Incoming(Packet::PubAck(ack))) => {
                    if let Some(i) = inflight.remove(&ack.pkid)
                        && !acked[i]
                    {
                        acked[i] = true;
                        remaining -= 1;
                        if let Some(p) = &o.progress {
                            p.fetch_add(1, Ordering::Relaxed);
                        }
                    }
                }
                Ok(_) => {}
                Err(_) => {
                    // Everything unacknowledged goes out again first, in its original order.
                    let mut again: Vec<usize> =
                        handed.drain(..).chain(inflight.into_values()).collect();
                    again.extend(retry.drain(..));
                    again.sort_unstable();
                    retry.extend(again);
                    tokio::time::sleep(Duration::from_millis(100)).await;
                    continue 'connection;
                }
            }
        }
    }
    Published { acked, connections }
}

/// [`publish`], then fails the test unless the broker acknowledged every message.
pub async fn publish_all(port: u16, messages: &[Message], o: PublishOptions) -> Published {
    let published = publish(port, messages, o).await;
    assert_eq!(
        published.acked_count(),
        messages.len(),
        "the broker acknowledged every message"
    );
    published
}

/// [`publish`] in a task of its own, for a test that acts while the messages go out.
pub fn spawn_publish(
    port: u16,
    messages: Vec<Message>,
    o: PublishOptions,
) -> tokio::task::JoinHandle<Published> {
    tokio::spawn(async move { publish(port, &messages, o).await })
}

async fn sleep_until_opt(at: Option<tokio::time::Instant>) {
    match at {
        Some(at) => tokio::time::sleep_until(at).await,
        None => std::future::pending().await,
    }
}

/// A received message.
#[derive(Debug, Clone)]
pub struct Received {
    pub topic: String,
    pub payload: Vec<u8>,
}

/// A subscriber that records everything the broker delivers to it. It stops when dropped.
pub struct Spy {
    received: Arc<Mutex<Vec<Received>>>,
    task: tokio::task::JoinHandle<()>,
}

impl Drop for Spy {
    fn drop(&mut self) {
        self.task.abort();
    }
}

/// How a spy connects.
#[derive(Debug, Clone)]
pub struct SpyOptions {
    pub client_id: String,
    /// Topic filters to subscribe to; empty to rely on an existing session's subscriptions.
    pub filters: Vec<String>,
    /// `false` resumes the session stored under `client_id` (such as the daemon's).
    pub clean_session: bool,
}

impl Spy {
    /// Connects, subscribes, and returns once the broker has confirmed the subscriptions (or,
    /// with no filters, once connected).
    pub async fn start(port: u16, o: SpyOptions) -> Spy {
        let mut opts = MqttOptions::new(&o.client_id, "127.0.0.1", port);
        opts.set_keep_alive(Duration::from_secs(5));
        opts.set_clean_session(o.clean_session);
        opts.set_max_packet_size(1 << 20, 1 << 20);
        let (client, mut eventloop) = AsyncClient::new(opts, 100);
        let received = Arc::new(Mutex::new(Vec::new()));
        let (ready_tx, ready_rx) = tokio::sync::oneshot::channel();
        let filters = o.filters.clone();
        let sink = received.clone();
        let task = tokio::spawn(async move {
            let mut ready = Some(ready_tx);
            loop {
                match eventloop.poll().await {
                    Ok(Event::Incoming(Packet::ConnAck(_))) => {
                        if filters.is_empty() {
                            if let Some(r) = ready.take() {
                                let _ = r.send(());
                            }
                        } else {
                            let subs = filters.iter().map(|f| {
                                rumqttc::SubscribeFilter::new(f.clone(), QoS::AtLeastOnce)
                            });
                            client
                                .try_subscribe_many(subs)
                                .expect("queue the spy's subscriptions");
                        }
                    }
                    Ok(Event::Incoming(Packet::SubAck(_))) => {
                        if let Some(r) = ready.take() {
                            let _ = r.send(());
                        }
                    }
                    Ok(Event::Incoming(Packet::Publish(p))) => {
                        sink.lock().unwrap().push(Received {
                            topic: p.topic.clone(),
                            payload: p.payload.to_vec(),
                        });
                    }
                    Ok(_) => {}
                    Err(_) => tokio::time::sleep(Duration::from_millis(100)).await,
                }
            }
        });
        tokio::time::timeout(Duration::from_secs(30), ready_rx)
            .await
            .expect("the spy could not subscribe within 30 s")
            .expect("the spy task ended");
        Spy { received, task }
    }

    /// Everything received so far.
    pub fn received(&self) -> Vec<Received> {
        self.received.lock().unwrap().clone()
    }
}
