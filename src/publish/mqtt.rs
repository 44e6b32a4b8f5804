//! The MQTT edge (rumqttc): one task owns the event loop and only polls it;
//! a second task hands messages to the client: live events from the spool
//! (`store`) and states from the engine's queue in the monitor's order,
//! then backfill from the spool at a bounded pace. `flight` matches each
//! PUBACK to what was handed, so an event leaves the spool only once the
//! broker has it. Persistent session (fixed client id, `clean_session =
//! false`); last will `offline`; `online` republished on every connection;
//! `offline` published before a clean disconnect (the will fires only on an
//! abrupt drop). When the connection drops, everything handed and not
//! acknowledged comes back to the link and is sent again after the
//! reconnection (at least once: a subscriber may see an event twice, with
//! the same `event_id` and `seq`).
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
use std::sync::{Arc, Mutex};
use std::time::Duration;

use serde::Serialize;
use tokio::sync::{mpsc, watch, Notify};
use tracing::{info, warn};

use super::flight::{hand, Flight, Handed};
use super::fold::Fold;
use super::queue::Queue;
use super::wire::{Connect, Props, Wire, WireEvent};
use crate::app::clock::Clock;
use crate::config::{MqttSettings, PasswordSource};
use crate::monitor::command::MAX_COMMAND_BYTES;
use crate::store::Store;
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
/// Longest wait between reconnection attempts.
pub const MAX_BACKOFF: Duration = Duration::from_secs(30);
/// While the broker stays away, a reminder this often.
pub const REMIND_EVERY: Duration = Duration::from_secs(300);

/// Link state shared with the status report and the tests.
#[derive(Debug, Default)]
pub struct LinkHealth {
    pub connected: AtomicBool,
    pub connections: AtomicU64,
    pub failed_attempts: AtomicU64,
    /// Publishes the broker acknowledged.
    pub published: AtomicU64,
    /// Events sent late from the spool, marked `"backfill": true`.
    pub backfilled: AtomicU64,
    /// Commands not handed to the engine (its queue full, or larger than a
    /// command can be).
    pub commands_dropped: AtomicU64,
    /// Retained messages on `cmd`, ignored.
    pub commands_retained: AtomicU64,
    /// Messages over the client's packet limit (each reset the connection
    /// once).
    pub oversize_packets: AtomicU64,
    /// MQTT 5: messages the broker acknowledged with a refusal.
    pub refused_by_broker: AtomicU64,
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

/// A command as it came from the broker.
#[derive(Debug)]
pub struct Incoming {
    pub payload: Vec<u8>,
    /// MQTT 5: where the sender wants its reply, and the correlation data
    /// to give back.
    pub respond_to: Option<(String, Vec<u8>)>,
}

/// Where the engine's messages wait for the link: states (and events,
/// when the local database cannot take them) in the queue, events in the
/// spool.
#[derive(Clone)]
pub struct Outbound {
    pub queue: Arc<Queue>,
    pub store: Option<Arc<Mutex<Store>>>,
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
    outbound: Outbound,
    health: Arc<LinkHealth>,
    clock: Clock,
    commands: mpsc::Sender<Incoming>,
    mut shutdown: watch::Receiver<bool>,
) {
    let BrokerAccess { cfg, password, tls } = broker;
    let queue = outbound.queue.clone();
    let status_topic = format!("{root}/status");
    let cmd_topic = format!("{root}/cmd");
    let (client, mut wire) = Wire::new(Connect {
        cfg: &cfg,
        password,
        tls,
        will_topic: &status_topic,
        will_payload: will_payload(),
        max_incoming: MAX_INCOMING_BYTES,
        max_outgoing: MAX_PACKET_BYTES,
        request_capacity: REQUEST_CAPACITY,
    });
    let (up_tx, up_rx) = watch::channel(false);
    let store = outbound.store.clone();
    let last_seq = store
        .as_ref()
        .and_then(|s| s.lock().unwrap_or_else(|e| e.into_inner()).last_seq().ok())
        .unwrap_or(0);
    let flight = Arc::new(Mutex::new(Flight::new(last_seq)));
    let delete_lines = Arc::new(Mutex::new(Fold::default()));

    let sender = {
        let client = client.clone();
        let queue = queue.clone();
        let health = health.clone();
        let flight = flight.clone();
        let store = store.clone();
        let delete_lines = delete_lines.clone();
        let mut up = up_rx;
        tokio::spawn(async move {
            loop {
                // Only while connected: during an outage states wait in
                // the engine's queue (latest per topic), events in the
                // spool.
                if up.wait_for(|&u| u).await.is_err() {
                    break;
                }
                let woken = queue.notified();
                tokio::pin!(woken);
                woken.as_mut().enable();
                delete_acked(&flight, store.as_ref(), false, &delete_lines);
                let is_up = *up.borrow();
                let wait = match hand(&flight, is_up, &client, &queue, store.as_ref(), &health) {
                    Handed::One => continue,
                    Handed::Closed => break,
                    Handed::Wait(d) => Some(d),
                    Handed::Nothing | Handed::Full => None,
                };
                let acks = flight.lock().unwrap_or_else(|e| e.into_inner()).acks_wait();
                let nap = match (wait, acks) {
                    (Some(a), Some(b)) => a.min(b),
                    (a, b) => a.or(b).unwrap_or(IDLE_RECHECK),
                };
                tokio::select! {
                    _ = &mut woken => {}
                    _ = tokio::time::sleep(nap) => {}
                    _ = up.changed() => {}
                }
            }
        })
    };

    let mut backoff = Duration::from_millis(250);
    let mut last_reminder: Option<tokio::time::Instant> = None;
    let mut failures_since_up: u64 = 0;
    let mut lost_lines = Fold::default();
    let mut ignored_lines = Fold::default();
    let mut refused_lines = Fold::default();
    let target = format!("{}:{}", cfg.host, cfg.port);
    loop {
        tokio::select! {
            ev = wire.poll() => match ev {
                Ok(WireEvent::Connected { session_present }) => {
                    health.connected.store(true, Ordering::Relaxed);
                    health.connections.fetch_add(1, Ordering::Relaxed);
                    health.reconnected.notify_one();
                    info!(broker = %target, session_present, protocol = cfg.protocol.name(),
                        after_failed_attempts = failures_since_up, "MQTT broker connected");
                    failures_since_up = 0;
                    last_reminder = None;
                    backoff = Duration::from_millis(250);
                    // Ahead of anything: the subscription (a new session
                    // may not know it), then `online`, so that a client
                    // that waits for `online` finds commands heard.
                    flight.lock().unwrap_or_else(|e| e.into_inner()).status_first();
                    wire.connected(&cmd_topic, &status_topic, status_payload("online", clock.now()));
                    let _ = up_tx.send(true);
                }
                Ok(WireEvent::Written(pkid)) => {
                    flight.lock().unwrap_or_else(|e| e.into_inner()).written(pkid);
                }
                Ok(WireEvent::Acked { pkid, refused }) => {
                    acked(&flight, pkid, refused, &health, &mut refused_lines);
                    queue.wake();
                }
                Ok(WireEvent::Message { topic, retain, payload, respond_to }) if topic == cmd_topic => {
                    if retain {
                        health.commands_retained.fetch_add(1, Ordering::Relaxed);
                        if let Some(folded) = ignored_lines.admit(std::time::Instant::now()) {
                            warn!(topic = %cmd_topic, bytes = payload.len(), folded,
                                "retained message on the command topic ignored: a command must not apply itself at every connection (clear it with an empty retained message)");
                        }
                    } else if payload.len() > MAX_COMMAND_BYTES * 4
                        || commands.try_send(Incoming { payload: payload.to_vec(), respond_to }).is_err()
                    {
                        health.commands_dropped.fetch_add(1, Ordering::Relaxed);
                        if let Some(folded) = ignored_lines.admit(std::time::Instant::now()) {
                            warn!(topic = %cmd_topic, bytes = payload.len(), folded,
                                "command dropped: larger than a command can be, or too many at once");
                        }
                    }
                }
                Ok(_) => {}
                Err(e) => {
                    let was_up = health.connected.swap(false, Ordering::Relaxed);
                    let _ = up_tx.send(false);
                    take_all_back(&mut wire, &flight, &queue, &health, &mut refused_lines);
                    health.failed_attempts.fetch_add(1, Ordering::Relaxed);
                    failures_since_up += 1;
                    let now = tokio::time::Instant::now();
                    if let Some(bytes) = e.oversize() {
                        health.oversize_packets.fetch_add(1, Ordering::Relaxed);
                        warn!(broker = %target, bytes, limit = MAX_INCOMING_BYTES,
                            "a message from the broker is over the packet limit: dropped; reconnecting with a fresh session, so the broker does not send it again");
                        wire.fresh_session();
                        last_reminder = Some(now);
                    } else if was_up {
                        if let Some(folded) = lost_lines.admit(now.into_std()) {
                            warn!(broker = %target, error = %e.describe(), folded, "MQTT broker lost; reconnecting with backoff (events kept in the spool, states queued, latest kept)");
                        }
                        last_reminder = Some(now);
                    } else if last_reminder.is_none_or(|t| now.duration_since(t) >= REMIND_EVERY) {
                        warn!(broker = %target, error = %e.describe(), attempts = failures_since_up, "MQTT broker unreachable; retrying");
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

    // Clean shutdown: what is queued and spooled goes out while the broker
    // takes it (bounded in time), then `offline`, then DISCONNECT. Events
    // not acknowledged by then stay in the spool for the next start.
    sender.abort();
    let _ = sender.await;
    if health.connected.load(Ordering::Relaxed) {
        let deadline = tokio::time::Instant::now() + FLUSH_FOR;
        let mut offline_sent = false;
        let mut disconnected = false;
        while tokio::time::Instant::now() < deadline {
            let mut idle = false;
            if !offline_sent {
                loop {
                    match hand(&flight, true, &client, &queue, store.as_ref(), &health) {
                        Handed::One => {}
                        // At shutdown backfill goes as fast as the window.
                        Handed::Wait(_) => {
                            flight.lock().unwrap_or_else(|e| e.into_inner()).hurry();
                        }
                        Handed::Nothing => {
                            idle = true;
                            break;
                        }
                        Handed::Full | Handed::Closed => break,
                    }
                }
            }
            let in_window = flight.lock().unwrap_or_else(|e| e.into_inner()).in_window();
            if idle && in_window == 0 && !offline_sent {
                flight
                    .lock()
                    .unwrap_or_else(|e| e.into_inner())
                    .status_last();
                let _ = client.try_publish(
                    status_topic.clone(),
                    true,
                    status_payload("offline", clock.now()),
                    &Props::default(),
                );
                let _ = client.try_disconnect();
                offline_sent = true;
            }
            match tokio::time::timeout_at(deadline, wire.poll()).await {
                Ok(Ok(WireEvent::Written(pkid))) => {
                    flight
                        .lock()
                        .unwrap_or_else(|e| e.into_inner())
                        .written(pkid);
                }
                Ok(Ok(WireEvent::Acked { pkid, refused })) => {
                    acked(&flight, pkid, refused, &health, &mut refused_lines);
                }
                Ok(Ok(WireEvent::Disconnected)) => {
                    disconnected = true;
                    break;
                }
                Ok(Ok(_)) => {}
                Ok(Err(_)) | Err(_) => break,
            }
        }
        delete_acked(&flight, store.as_ref(), true, &delete_lines);
        if disconnected {
            info!("MQTT status offline published; disconnected");
        } else {
            warn!(
                "MQTT disconnect did not complete within {} s",
                FLUSH_FOR.as_secs()
            );
        }
    } else {
        delete_acked(&flight, store.as_ref(), true, &delete_lines);
        let spooled = store.as_ref().map_or(0, |s| {
            s.lock().unwrap_or_else(|e| e.into_inner()).stats().events
        });
        warn!(
            queued_states = queue.len(),
            spooled_events = spooled,
            "stopping while the broker is unreachable: the queued states are not delivered; the spooled events go at the next start"
        );
    }
    health.connected.store(false, Ordering::Relaxed);
}

/// How long a clean stop waits for the broker to take what is left.
const FLUSH_FOR: Duration = Duration::from_secs(5);
/// The sender looks again this often even when nothing woke it.
const IDLE_RECHECK: Duration = Duration::from_secs(1);

/// The connection dropped: what the client still held of ours comes back
/// to the link (see `flight`), so that nothing of it is sent again out of
/// order or attributed to the wrong packet id.
fn take_all_back(
    wire: &mut Wire,
    flight: &Mutex<Flight>,
    queue: &Queue,
    health: &LinkHealth,
    refused_lines: &mut Fold,
) {
    let mut f = flight.lock().unwrap_or_else(|e| e.into_inner());
    // What happened on the old connection and was not yet reported.
    for ev in wire.take_back() {
        match ev {
            WireEvent::Written(pkid) => f.written(pkid),
            WireEvent::Acked { pkid, refused } => {
                acked_locked(&mut f, pkid, refused, health, refused_lines)
            }
            _ => {}
        }
    }
    f.take_back(queue);
}

/// A PUBACK: the publish it names is with the broker (or, MQTT 5, was
/// refused by it: an event refused is not sent again, since the broker
/// would refuse it again; said in the log, folded).
fn acked(
    flight: &Mutex<Flight>,
    pkid: u16,
    refused: Option<String>,
    health: &LinkHealth,
    lines: &mut Fold,
) {
    let mut f = flight.lock().unwrap_or_else(|e| e.into_inner());
    acked_locked(&mut f, pkid, refused, health, lines);
}

fn acked_locked(
    f: &mut Flight,
    pkid: u16,
    refused: Option<String>,
    health: &LinkHealth,
    lines: &mut Fold,
) {
    if !f.acked(pkid) {
        return;
    }
    match refused {
        None => {
            health.published.fetch_add(1, Ordering::Relaxed);
        }
        Some(why) => {
            health.refused_by_broker.fetch_add(1, Ordering::Relaxed);
            if let Some(folded) = lines.admit(std::time::Instant::now()) {
                warn!(reason = %why, folded, "the broker refused a message (not sent again): check its access list for this daemon's topics");
            }
        }
    }
}

/// Deletes the acknowledged events from the spool when a batch is due; a
/// failure is said at most once per fold window of `lines` (a full disk
/// can fail every batch).
fn delete_acked(
    flight: &Mutex<Flight>,
    store: Option<&Arc<Mutex<Store>>>,
    force: bool,
    lines: &Mutex<Fold>,
) {
    let Some(store) = store else { return };
    let due = flight
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .acks_due(force);
    if due.is_empty() {
        return;
    }
    let res = store
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .delete_acked(&due);
    if let Err(e) = res {
        // They stay in the spool and go again (at least once).
        let mut lines = lines.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(folded) = lines.admit(std::time::Instant::now()) {
            warn!(error = %e, events = due.len(), folded, "cannot delete acknowledged events from the spool: they will be sent again at the next start");
        }
    }
}
