//! The MQTT edge (rumqttc): one task owns the event loop and only polls it;
//! a second task moves messages from the engine's queue into the client.
//! Persistent session (fixed client id, `clean_session = false`) so QoS 1
//! messages queued during an outage survive the reconnect; last will
//! `offline`; `online` republished on every connection; `offline` published
//! before a clean disconnect (the will fires only on an abrupt drop).
//!
//! # The command path
//! `{root}/cmd` is subscribed at QoS 0: a command is live, so the broker
//! neither keeps one for the daemon while it is away nor sends one again
//! (a command sent while the daemon is down is not applied later; its
//! sender sees no reply and sends it again). A message up to
//! [`MAX_INCOMING_BYTES`] that is larger than a command can be is read and
//! dropped; a larger one makes the client drop the connection, and the
//! next connection starts a fresh session, so that the broker forgets
//! whatever it still held for the old one instead of sending it again (a
//! broker configured with a packet limit, as in deploy/mosquitto, keeps
//! such a message from arriving at all). A command larger than
//! [`MAX_COMMAND_BYTES`] and a retained one (a command must not re-apply itself at every connection)
//! are dropped and counted. The subscription and `online` are put at the
//! head of the client's own queue at every connection, so no backlog can
//! keep them out; messages move from the engine's queue into the client
//! only while the broker is connected, so during an outage they wait (and
//! are counted) in the engine's queue, and the client's request channel
//! never fills.

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;
use std::time::Duration;

use rumqttc::mqttbytes::v4::{Publish, Subscribe};
use rumqttc::{
    AsyncClient, ConnectionError, Event, LastWill, MqttOptions, Outgoing, Packet, QoS, Request,
    StateError, TlsConfiguration, Transport,
};
use serde::Serialize;
use tokio::sync::{mpsc, watch, Notify};
use tracing::{info, warn};

use super::fold::Fold;
use super::queue::Queue;
use crate::app::clock::Clock;
use crate::config::{MqttSettings, PasswordSource};
use crate::monitor::command::MAX_COMMAND_BYTES;
use crate::time::Timestamp;

/// Largest packet sent; a zone state with 16 probes is about 4 KiB, so this
/// leaves a wide margin (an oversized publish would kill the link).
pub const MAX_PACKET_BYTES: usize = 256 * 1024;
/// Largest packet taken from the broker. Far over any command: whatever
/// arrives up to this size is read and dropped without touching the
/// connection; only a larger one resets it (see the module doc).
pub const MAX_INCOMING_BYTES: usize = 16 * 1024 * 1024;
/// Capacity of rumqttc's request channel.
const REQUEST_CAPACITY: usize = 64;
/// The QoS of the `cmd` subscription: at most once (see the module doc).
const CMD_QOS: QoS = QoS::AtMostOnce;
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
    /// Commands not handed to the engine (its queue full, or larger than a
    /// command can be).
    pub commands_dropped: AtomicU64,
    /// Retained messages on `cmd`, ignored.
    pub commands_retained: AtomicU64,
    /// Messages over the client's packet limit (each reset the connection
    /// once).
    pub oversize_packets: AtomicU64,
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

/// `e` in words for the log: a refused connection says why, in the
/// config's terms (rumqttc's own text would print a Rust spelling).
fn describe(e: &ConnectionError) -> String {
    use rumqttc::ConnectReturnCode as C;
    match e {
        ConnectionError::ConnectionRefused(code) => match code {
            C::BadUserNamePassword => {
                "the broker refused the connection: bad user name or password (mqtt.username and its password)".into()
            }
            C::NotAuthorized => {
                "the broker refused the connection: not authorised (the broker's account and access control)".into()
            }
            C::BadClientId => {
                "the broker refused the connection: client id not accepted (mqtt.client_id)".into()
            }
            C::RefusedProtocolVersion => {
                "the broker refused the connection: it does not speak MQTT 3.1.1".into()
            }
            C::ServiceUnavailable | C::Success => {
                "the broker refused the connection: service unavailable".into()
            }
        },
        e => super::tls::describe(e).unwrap_or_else(|| e.to_string()),
    }
}

/// The size of the packet, when `e` is the client refusing one over its
/// limit.
fn oversize(e: &ConnectionError) -> Option<usize> {
    match e {
        ConnectionError::MqttState(StateError::Deserialization(
            rumqttc::mqttbytes::Error::PayloadSizeLimitExceeded(n),
        )) => Some(*n),
        _ => None,
    }
}

/// The broker account's password from where `src` says, read once at
/// start. A password file others can read gets a warning naming the fix;
/// the password itself never reaches a log line or an error.
pub fn read_password(src: &PasswordSource) -> anyhow::Result<String> {
    let path = match src {
        PasswordSource::File(p) => p.clone(),
        PasswordSource::Credential(name) => {
            let dir = std::env::var_os("CREDENTIALS_DIRECTORY").ok_or_else(|| {
                anyhow::anyhow!(
                    "mqtt.password_credential = {name:?} needs $CREDENTIALS_DIRECTORY (LoadCredential={name}:… in the systemd unit)"
                )
            })?;
            std::path::Path::new(&dir).join(name)
        }
    };
    let text = std::fs::read_to_string(&path).map_err(|e| {
        anyhow::anyhow!("cannot read the MQTT password from {}: {e}", path.display())
    })?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        if let Ok(m) = std::fs::metadata(&path) {
            if m.permissions().mode() & 0o077 != 0 {
                warn!(file = %path.display(), "the MQTT password file can be read by others: chmod 600 it (owned by the service's user)");
            }
        }
    }
    let password = text.trim_end_matches(['\n', '\r']).to_string();
    if password.is_empty() {
        anyhow::bail!("the MQTT password file {} is empty", path.display());
    }
    Ok(password)
}

/// The broker to connect to, the password of its account (read by
/// [`read_password`]) and the TLS client configuration (built by
/// [`super::tls::client_config`]; none: plain TCP).
pub struct BrokerAccess {
    pub cfg: MqttSettings,
    pub password: Option<String>,
    pub tls: Option<Arc<rustls::ClientConfig>>,
}

/// Runs the MQTT link until `shutdown` turns true, then flushes the queue,
/// publishes `offline` and disconnects cleanly (bounded by a few seconds).
pub async fn run(
    broker: BrokerAccess,
    root: String,
    queue: Arc<Queue>,
    health: Arc<LinkHealth>,
    clock: Clock,
    commands: mpsc::Sender<Vec<u8>>,
    mut shutdown: watch::Receiver<bool>,
) {
    let BrokerAccess { cfg, password, tls } = broker;
    let status_topic = format!("{root}/status");
    let cmd_topic = format!("{root}/cmd");
    let mut opts = MqttOptions::new(cfg.client_id.clone(), cfg.host.clone(), cfg.port);
    // Validated at load time: keep-alive ≥ 1 s and a non-empty client id
    // (rumqttc panics otherwise).
    opts.set_keep_alive(Duration::from_secs(cfg.keep_alive_s.max(1)));
    opts.set_clean_session(false);
    if let (Some(c), Some(p)) = (&cfg.credentials, password) {
        opts.set_credentials(c.username.clone(), p);
    }
    opts.set_max_packet_size(MAX_INCOMING_BYTES, MAX_PACKET_BYTES);
    if let Some(tls) = tls {
        opts.set_transport(Transport::tls_with_config(TlsConfiguration::Rustls(tls)));
    }
    opts.set_last_will(LastWill::new(
        status_topic.clone(),
        will_payload(),
        QoS::AtLeastOnce,
        true,
    ));
    let (client, mut eventloop) = AsyncClient::new(opts, REQUEST_CAPACITY);
    let (up_tx, up_rx) = watch::channel(false);

    let sender = {
        let client = client.clone();
        let queue = queue.clone();
        let health = health.clone();
        let mut up = up_rx;
        tokio::spawn(async move {
            loop {
                // Only while connected: during an outage the messages wait
                // in the engine's queue, which counts and bounds them.
                if up.wait_for(|&u| u).await.is_err() {
                    break;
                }
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
    let mut lost_lines = Fold::default();
    let mut ignored_lines = Fold::default();
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
                    // Persistent again after a fresh session.
                    eventloop.mqtt_options.set_clean_session(false);
                    // Ahead of anything queued: the subscription (a new
                    // session may not know it), then `online`, so that a
                    // client that waits for `online` finds commands heard.
                    let mut online = Publish::new(status_topic.as_str(), QoS::AtLeastOnce,
                        status_payload("online", clock.now()));
                    online.retain = true;
                    eventloop.pending.push_front(Request::Publish(online));
                    eventloop.pending.push_front(Request::Subscribe(Subscribe::new(cmd_topic.as_str(), CMD_QOS)));
                    let _ = up_tx.send(true);
                }
                Ok(Event::Incoming(Packet::Publish(p))) if p.topic == cmd_topic => {
                    if p.retain {
                        health.commands_retained.fetch_add(1, Ordering::Relaxed);
                        if let Some(folded) = ignored_lines.admit(std::time::Instant::now()) {
                            warn!(topic = %cmd_topic, bytes = p.payload.len(), folded,
                                "retained message on the command topic ignored: a command must not apply itself at every connection (clear it with an empty retained message)");
                        }
                    } else if p.payload.len() > MAX_COMMAND_BYTES * 4 || commands.try_send(p.payload.to_vec()).is_err() {
                        health.commands_dropped.fetch_add(1, Ordering::Relaxed);
                        if let Some(folded) = ignored_lines.admit(std::time::Instant::now()) {
                            warn!(topic = %cmd_topic, bytes = p.payload.len(), folded,
                                "command dropped: larger than a command can be, or too many at once");
                        }
                    }
                }
                Ok(_) => {}
                Err(e) => {
                    let was_up = health.connected.swap(false, Ordering::Relaxed);
                    let _ = up_tx.send(false);
                    health.failed_attempts.fetch_add(1, Ordering::Relaxed);
                    failures_since_up += 1;
                    let now = tokio::time::Instant::now();
                    if let Some(bytes) = oversize(&e) {
                        health.oversize_packets.fetch_add(1, Ordering::Relaxed);
                        warn!(broker = %target, bytes, limit = MAX_INCOMING_BYTES,
                            "a message from the broker is over the packet limit: dropped; reconnecting with a fresh session, so the broker does not send it again (messages still in flight to the broker may be lost)");
                        eventloop.mqtt_options.set_clean_session(true);
                        last_reminder = Some(now);
                    } else if was_up {
                        if let Some(folded) = lost_lines.admit(now.into_std()) {
                            warn!(broker = %target, error = %describe(&e), folded, "MQTT broker lost; reconnecting with backoff (states are queued, latest kept)");
                        }
                        last_reminder = Some(now);
                    } else if last_reminder.is_none_or(|t| now.duration_since(t) >= REMIND_EVERY) {
                        warn!(broker = %target, error = %describe(&e), attempts = failures_since_up, "MQTT broker unreachable; retrying");
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
