//! The bounded hand-over between the engine and the MQTT task.
//!
//! The engine must never wait on the broker, so `push` never blocks. Retained
//! state (zone, channel) is coalesced per topic, since only the latest value
//! of a retained topic matters; when the queue is still full, the oldest
//! droppable message goes and is counted. Status messages are never dropped.

use std::collections::VecDeque;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;

use tokio::sync::Notify;

/// What a message is, for the drop policy.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// Retained zone state: latest wins; droppable.
    ZoneState,
    /// Retained channel reading: latest wins; droppable.
    Channel,
    /// Retained service status: never dropped.
    Status,
    /// Retained alarm state: latest wins; never dropped.
    Alarm,
    /// Alarm transition, trend alert or command reply (not retained):
    /// never coalesced, never dropped while fewer than `MAX_EVENTS` wait.
    Event,
}

impl Kind {
    fn droppable(self) -> bool {
        matches!(self, Kind::ZoneState | Kind::Channel)
    }
    fn coalesced(self) -> bool {
        matches!(self, Kind::ZoneState | Kind::Channel | Kind::Alarm)
    }
}

/// Events held at most in memory, when the local database cannot take them
/// (see `store`); beyond, the oldest is lost and counted.
pub const MAX_EVENTS: usize = 10_000;

#[derive(Debug, Clone, PartialEq)]
pub struct Message {
    pub topic: String,
    pub payload: Vec<u8>,
    pub kind: Kind,
    /// The spool's sequence number of the last event the monitor gave
    /// before this message (0: none): the link sends that event first, so
    /// the monitor's order holds across the queue and the spool.
    pub after: i64,
    /// MQTT 5 properties (expiry of a retained measurement, the
    /// correlation data of a reply).
    pub props: super::wire::Props,
}

impl Message {
    /// Every kind but events is retained.
    pub fn retain(&self) -> bool {
        self.kind != Kind::Event
    }
}

/// Counters of the queue, shared with the status report.
#[derive(Debug, Default)]
pub struct QueueCounters {
    /// Messages replaced by a newer one for the same topic before sending.
    pub coalesced: AtomicU64,
    /// Zone states dropped because the queue was full.
    pub dropped_zone_states: AtomicU64,
    /// Channel readings dropped because the queue was full.
    pub dropped_channels: AtomicU64,
    /// Events lost because more than `MAX_EVENTS` waited.
    pub lost_events: AtomicU64,
}

pub struct Queue {
    // A std Mutex, not a tokio one: nothing awaits while it is held.
    inner: Mutex<VecDeque<Message>>,
    capacity: usize,
    notify: Notify,
    pub counters: QueueCounters,
}

impl Queue {
    pub fn new(capacity: usize) -> Self {
        Queue {
            inner: Mutex::new(VecDeque::with_capacity(capacity)),
            capacity: capacity.max(1),
            notify: Notify::new(),
            counters: QueueCounters::default(),
        }
    }

    /// Queues a message without blocking (see the module doc for the policy).
    pub fn push(&self, msg: Message) {
        {
            let mut q = self.inner.lock().unwrap_or_else(|e| e.into_inner());
            if msg.kind == Kind::Event
                && q.iter().filter(|m| m.kind == Kind::Event).count() >= MAX_EVENTS
            {
                if let Some(i) = q.iter().position(|m| m.kind == Kind::Event) {
                    q.remove(i);
                    self.counters.lost_events.fetch_add(1, Ordering::Relaxed);
                }
            }
            if msg.kind.coalesced() {
                if let Some(old) = q.iter_mut().find(|m| m.topic == msg.topic) {
                    *old = msg;
                    self.counters.coalesced.fetch_add(1, Ordering::Relaxed);
                    drop(q);
                    self.notify.notify_one();
                    return;
                }
            }
            if q.len() >= self.capacity {
                match q.iter().position(|m| m.kind.droppable()) {
                    Some(i) => {
                        if let Some(old) = q.remove(i) {
                            self.count_drop(old.kind);
                        }
                    }
                    None if msg.kind.droppable() => {
                        self.count_drop(msg.kind);
                        return;
                    }
                    None => {}
                }
            }
            q.push_back(msg);
        }
        self.notify.notify_one();
    }

    fn count_drop(&self, kind: Kind) {
        let c = match kind {
            Kind::ZoneState => &self.counters.dropped_zone_states,
            Kind::Channel => &self.counters.dropped_channels,
            Kind::Status | Kind::Alarm | Kind::Event => return,
        };
        c.fetch_add(1, Ordering::Relaxed);
    }

    /// Waits for and takes the oldest message.
    pub async fn pop(&self) -> Message {
        loop {
            let notified = self.notify.notified();
            if let Some(m) = self.try_pop() {
                return m;
            }
            notified.await;
        }
    }

    /// The `after` of the message that would be taken next.
    pub fn head_after(&self) -> Option<i64> {
        self.inner
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .front()
            .map(|m| m.after)
    }

    /// Puts back a message the link handed out but could not deliver (the
    /// connection dropped before its PUBACK): at the head, so order holds,
    /// unless a newer message for the same retained topic is already
    /// queued (latest wins).
    pub fn requeue(&self, msg: Message) {
        {
            let mut q = self.inner.lock().unwrap_or_else(|e| e.into_inner());
            if msg.kind.coalesced() && q.iter().any(|m| m.topic == msg.topic) {
                self.counters.coalesced.fetch_add(1, Ordering::Relaxed);
                return;
            }
            q.push_front(msg);
        }
        self.notify.notify_one();
    }

    /// Wakes the link's sender: something else it sends from (the spool)
    /// has news, or room opened in its window.
    pub fn wake(&self) {
        self.notify.notify_one();
    }

    /// What [`wake`](Self::wake) and [`push`](Self::push) signal.
    pub fn notified(&self) -> tokio::sync::futures::Notified<'_> {
        self.notify.notified()
    }

    pub fn try_pop(&self) -> Option<Message> {
        self.inner
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .pop_front()
    }

    pub fn len(&self) -> usize {
        self.inner.lock().unwrap_or_else(|e| e.into_inner()).len()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn msg(topic: &str, kind: Kind, n: u8) -> Message {
        Message {
            topic: topic.into(),
            payload: vec![n],
            kind,
            after: 0,
            props: Default::default(),
        }
    }

    #[test]
    fn same_topic_keeps_latest() {
        let q = Queue::new(4);
        q.push(msg("z/a", Kind::ZoneState, 1));
        q.push(msg("z/a", Kind::ZoneState, 2));
        assert_eq!(q.len(), 1);
        assert_eq!(q.try_pop().unwrap().payload, vec![2]);
        assert_eq!(q.counters.coalesced.load(Ordering::Relaxed), 1);
    }

    #[test]
    fn full_queue_drops_oldest_state_never_status() {
        let q = Queue::new(3);
        q.push(msg("status", Kind::Status, 0));
        q.push(msg("z/a", Kind::ZoneState, 1));
        q.push(msg("z/b", Kind::ZoneState, 2));
        q.push(msg("z/c", Kind::ZoneState, 3));
        assert_eq!(q.len(), 3);
        assert_eq!(q.counters.dropped_zone_states.load(Ordering::Relaxed), 1);
        let topics: Vec<_> = std::iter::from_fn(|| q.try_pop())
            .map(|m| m.topic)
            .collect();
        assert_eq!(topics, ["status", "z/b", "z/c"]);
    }

    #[test]
    fn a_requeued_state_yields_to_a_newer_one_and_an_event_goes_first() {
        let q = Queue::new(8);
        q.push(msg("z/a", Kind::ZoneState, 2));
        q.requeue(msg("z/a", Kind::ZoneState, 1));
        q.requeue(msg("events", Kind::Event, 7));
        let got: Vec<_> = std::iter::from_fn(|| q.try_pop())
            .map(|m| (m.topic, m.payload[0]))
            .collect();
        assert_eq!(got, [("events".to_string(), 7), ("z/a".to_string(), 2)]);
    }

    #[test]
    fn events_are_kept_in_order_beyond_capacity() {
        let q = Queue::new(2);
        for n in 0..5 {
            q.push(msg("events", Kind::Event, n));
        }
        q.push(msg("z/a", Kind::ZoneState, 9));
        let got: Vec<_> = std::iter::from_fn(|| q.try_pop())
            .map(|m| (m.kind, m.payload[0]))
            .collect();
        // Five events, none coalesced or dropped; the zone state is dropped
        // (the queue is over capacity with undroppable messages).
        assert_eq!(got.len(), 5, "{got:?}");
        assert!(got
            .iter()
            .enumerate()
            .all(|(i, (k, n))| *k == Kind::Event && *n as usize == i));
        assert_eq!(q.counters.dropped_zone_states.load(Ordering::Relaxed), 1);
    }
}
