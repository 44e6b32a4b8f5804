//! The MQTT edge (rumqttc): one task owns the event loop and only polls it;
//! a second task moves messages from the engine's queue into the client.
//! Persistent session (fixed client id, `clean_session = false`) so QoS 1
//! messages queued during an outage survive the reconnect; last will
//! `offline`; `online` republished on every connection; `offline` published
//! before a clean disconnect (the will fires only on an abrupt drop).

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;
use std::time::Duration;

use rumqttc::{AsyncClient, Event, LastWill, MqttOptions, Outgoing, Packet, QoS};
use serde::Serialize;
use tokio::sync::{mpsc, watch, Notify};
use tracing::{info, warn};

use super::queue::Queue;
use crate::app::clock::Clock;
use crate::config::MqttSettings;
use crate::monitor::command::MAX_COMMAND_BYTES;
use crate::time::Timestamp;

/// Largest packet either way; a zone state with 16 probes is about 4 KiB,
/// so this leaves a wide margin (an oversized publish would kill the link).
pub const MAX_PACKET_BYTES: usize = 256 * 1024;
/// Capacity of rumqttc's request channel.
const REQUEST_CAPACITY: usize = 64;
/// Longest wait between reconnection attempts.
const MAX_BACKOFF: Duration = Duration::from_secs(30);
/// While the broker stays away, a reminder this often.
const REMIND_EVERY: Duration = Duration::from_secs(300);

/// Link state shared with the status report and the tests.
#[derive(Debug, Default)]
pub struct LinkHealth {
    pub connected: AtomicBool,
    pub connections: AtomicU64,
    pub failed_attempts: AtomicU64,
    pub published: AtomicU64,
    /// Commands not handed to the engine (its queue full, or absurdly large).
    pub commands_dropped: AtomicU64,
    /// Signalled on every connection: a new session may have lost the
    /// retained alarm states.
    pub reconnected: Notify,
}

#[derive(Serialize)]
struct StatusPayload<'a> {
    schema: &'static str,
    state: &'a str,
    /// Absent in the last will: the broker sends it when the link dies, a
    /// time we cannot know when registering it.
    #[serde(skip_serializing_if = "Option::is_none")]
    time: Option<Timestamp>,
    #[serde(skip_serializing_if = "Option::is_none")]
    reason: Option<&'static str>,
    version: &'static str,
}

/// The `{root}/status` payload for `state` ("online" / "offline").
pub fn status_payload(state: &str, time: Timestamp) -> Vec<u8> {
    serde_json::to_vec(&StatusPayload {
        schema: "wallflux.status/1",
        state,
        time: Some(time),
        reason: None,
        version: env!("CARGO_PKG_VERSION"),
    })
    .unwrap_or_default()
}

/// The last will: `offline`, without a time, with the reason.
fn will_payload() -> Vec<u8> {
    serde_json::to_vec(&StatusPayload {
        schema: "wallflux.status/1",
        state: "offline",
        time: None,
        reason: Some("connection lost (last will)"),
        version: env!("CARGO_PKG_VERSION"),
    })
    .unwrap_or_default()
}

/// Runs the MQTT link until `shutdown` turns true, then flushes the queue,
/// publishes `offline` and disconnects cleanly (bounded by a few seconds).
pub async fn run(
    cfg: MqttSettings,
    root: String,
    queue: Arc<Queue>,
    health: Arc<LinkHealth>,
    clock: Clock,
    commands: mpsc::Sender<Vec<u8>>,
    mut shutdown: watch::Receiver<bool>,
) {
    let status_topic = format!("{root}/status");
    let cmd_topic = format!("{root}/cmd");
    let mut opts = MqttOptions::new(cfg.client_id.clone(), cfg.host.clone(), cfg.port);
    // Validated at load time: keep-alive ≥ 1 s and a non-empty client id
    // (rumqttc panics otherwise).
    opts.set_keep_alive(Duration::from_secs(cfg.keep_alive_s.max(1)));
    opts.set_clean_session(false);
    opts.set_max_packet_size(MAX_PACKET_BYTES, MAX_PACKET_BYTES);
    opts.set_last_will(LastWill::new(
        status_topic.clone(),
        will_payload(),
        QoS::AtLeastOnce,
        true,
    ));
    let (client, mut eventloop) = AsyncClient::new(opts, REQUEST_CAPACITY);

    let sender = {
        let client = client.clone();
        let queue = queue.clone();
        let health = health.clone();
        tokio::spawn(async move {
            loop {
                let m = queue.pop().await;
                let retain = m.retain();
                if client
                    .publish(m.topic, QoS::AtLeastOnce, retain, m.payload)
                    .await
                    .is_err()
                {
                    break;
                }
                health.published.fetch_add(1, Ordering::Relaxed);
            }
        })
    };

    let mut backoff = Duration::from_millis(250);
    let mut last_reminder: Option<tokio::time::Instant> = None;
    let mut failures_since_up: u64 = 0;
    let target = format!("{}:{}", cfg.host, cfg.port);
    loop {
        tokio::select! {
            ev = eventloop.poll() => match ev {
                Ok(Event::Incoming(Packet::ConnAck(ack))) => {
                    health.connected.store(true, Ordering::Relaxed);
                    health.connections.fetch_add(1, Ordering::Relaxed);
                    health.reconnected.notify_one();
                    info!(broker = %target, session_present = ack.session_present,
                        after_failed_attempts = failures_since_up, "MQTT broker connected");
                    failures_since_up = 0;
                    last_reminder = None;
                    backoff = Duration::from_millis(250);
                    let _ = client.try_publish(status_topic.clone(), QoS::AtLeastOnce, true,
                        status_payload("online", clock.now()));
                    // A new session may not know our subscription: ask again.
                    let _ = client.try_subscribe(cmd_topic.clone(), QoS::AtLeastOnce);
                }
                Ok(Event::Incoming(Packet::Publish(p))) if p.topic == cmd_topic => {
                    if p.payload.len() > MAX_COMMAND_BYTES * 4 || commands.try_send(p.payload.to_vec()).is_err() {
                        health.commands_dropped.fetch_add(1, Ordering::Relaxed);
                    }
                }
                Ok(_) => {}
                Err(e) => {
                    let was_up = health.connected.swap(false, Ordering::Relaxed);
                    health.failed_attempts.fetch_add(1, Ordering::Relaxed);
                    failures_since_up += 1;
                    let now = tokio::time::Instant::now();
                    if was_up {
                        warn!(broker = %target, error = %e, "MQTT broker lost; reconnecting with backoff (states are queued, latest kept)");
                        last_reminder = Some(now);
                    } else if last_reminder.is_none_or(|t| now.duration_since(t) >= REMIND_EVERY) {
                        warn!(broker = %target, error = %e, attempts = failures_since_up, "MQTT broker unreachable; retrying");
                        last_reminder = Some(now);
                    }
                    tokio::select! {
                        _ = tokio::time::sleep(backoff) => {}
                        _ = shutdown.changed() => {}
                    }
                    backoff = (backoff * 2).min(MAX_BACKOFF);
                    if *shutdown.borrow() { break; }
                }
            },
            _ = shutdown.changed() => { if *shutdown.borrow() { break; } }
        }
    }

    // Clean shutdown: whatever is still queued, then `offline`, then
    // DISCONNECT. The publishes await channel space that only polling frees,
    // so both run together, bounded in time.
    sender.abort();
    if health.connected.load(Ordering::Relaxed) {
        let flush = async {
            while let Some(m) = queue.try_pop() {
                let retain = m.retain();
                if client
                    .publish(m.topic, QoS::AtLeastOnce, retain, m.payload)
                    .await
                    .is_err()
                {
                    break;
                }
            }
            let _ = client
                .publish(
                    status_topic,
                    QoS::AtLeastOnce,
                    true,
                    status_payload("offline", clock.now()),
                )
                .await;
            let _ = client.disconnect().await;
        };
        let drain = async {
            loop {
                match eventloop.poll().await {
                    Ok(Event::Outgoing(Outgoing::Disconnect)) | Err(_) => break,
                    Ok(_) => {}
                }
            }
        };
        let both = async {
            tokio::join!(flush, drain);
        };
        if tokio::time::timeout(Duration::from_secs(5), both)
            .await
            .is_err()
        {
            warn!("MQTT disconnect did not complete within 5 s");
        } else {
            info!("MQTT status offline published; disconnected");
        }
    } else {
        warn!(
            queued = queue.len(),
            "stopping while the broker is unreachable: queued states are not delivered"
        );
    }
    health.connected.store(false, Ordering::Relaxed);
}
