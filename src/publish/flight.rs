//! What the link has handed to the MQTT client and not yet seen
//! acknowledged, so that an event leaves the spool only on its PUBACK.
//!
//! rumqttc gives a publish its packet id only when it writes it
//! (`Outgoing::Publish(pkid)`), and says nothing else about which publish
//! that was. So every publish goes through one door, in order: [`hand`]
//! records a tag for it (a spooled event's sequence number, or the state
//! message itself) in `handed`, under the same lock that the request
//! enters the client's channel, and the event loop takes the oldest tag
//! when the client reports the next packet id. The PUBACK of that id then
//! names the event that is safely with the broker.
//!
//! When the connection drops, the client would send what it still holds
//! again at reconnection, in the order of packet ids, which after a wrap
//! is not the order sent. Instead the link takes all of it back
//! ([`Flight::take_back`]): states go back to the queue (unless a newer one
//! for the topic waits), spooled events are read again from the spool from
//! the oldest unacknowledged one, as backfill. Nothing of ours is left in
//! the client across a reconnection, so the tags always match.

use std::collections::{HashMap, VecDeque};
use std::sync::atomic::Ordering;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use tracing::warn;

use super::mqtt::LinkHealth;
use super::queue::{Message, Queue};
use super::wire::{Props, WireClient};
use crate::store::Store;

/// Publishes handed to the client and not yet acknowledged, at most: far
/// below the client's own in-flight limit (100) and its channel (64), so
/// that neither ever fills.
pub const WINDOW: usize = 32;
/// Backfill from the spool goes at most this fast, events per second,
/// beside the live data.
pub const BACKFILL_PER_S: f64 = 50.0;
/// Acknowledged events are deleted from the spool in batches of this many,
/// or this long after the first of a batch.
pub const ACK_BATCH: usize = 32;
pub const ACK_DELAY: Duration = Duration::from_millis(200);

/// One publish handed to the client.
#[derive(Debug)]
pub enum Tag {
    /// A state (or an event held in memory while the store is down).
    Message(Message),
    /// A spooled event, by its sequence number.
    Event(i64),
    /// Our own status message: nothing to do on its PUBACK.
    Status,
}

/// What the link has handed out; shared by the sender and the event loop.
#[derive(Debug, Default)]
pub struct Flight {
    /// Handed to the client, not yet given a packet id: (order, tag).
    handed: VecDeque<(u64, Tag)>,
    /// Written, waiting for its PUBACK: by packet id.
    inflight: HashMap<u16, (u64, Tag)>,
    /// The order number of the next publish handed.
    next: u64,
    /// The highest spooled sequence number handed in this connection.
    cursor: i64,
    /// Spooled events up to this one have been handed before (in this run
    /// or an earlier one): sent again, they are backfill.
    resend_upto: i64,
    /// Acknowledged events not yet deleted from the spool, and since when.
    acked: Vec<i64>,
    acked_since: Option<Instant>,
    /// When the last backfill event was handed (for its pace).
    last_backfill: Option<Instant>,
}

/// What [`hand`] did.
#[derive(Debug, PartialEq, Eq)]
pub enum Handed {
    One,
    /// Nothing to send (or the link is down).
    Nothing,
    /// The window is full: wait for a PUBACK.
    Full,
    /// Backfill waits for its pace.
    Wait(Duration),
    /// The client is gone.
    Closed,
}

impl Flight {
    /// A flight for a spool whose events up to `last_seq` were written
    /// before this start: those are backfill when they go.
    pub fn new(last_seq: i64) -> Self {
        Flight {
            resend_upto: last_seq,
            ..Flight::default()
        }
    }

    pub fn in_window(&self) -> usize {
        self.handed.len() + self.inflight.len()
    }

    /// The client wrote a publish with packet id `pkid`.
    pub fn written(&mut self, pkid: u16) {
        if pkid == 0 || self.inflight.contains_key(&pkid) {
            return;
        }
        match self.handed.pop_front() {
            Some(t) => {
                self.inflight.insert(pkid, t);
            }
            None => warn!(pkid, "a publish went out that the link did not hand over"),
        }
    }

    /// The broker acknowledged `pkid`; true if it was one of ours.
    pub fn acked(&mut self, pkid: u16) -> bool {
        match self.inflight.remove(&pkid) {
            Some((_, Tag::Event(seq))) => {
                self.acked.push(seq);
                self.acked_since.get_or_insert_with(Instant::now);
                true
            }
            Some(_) => true,
            None => false,
        }
    }

    /// At a clean stop: backfill no longer waits for its pace.
    pub fn hurry(&mut self) {
        self.last_backfill = None;
    }

    /// Our status message is handed to the client ahead of everything
    /// (put at the head of its queue at a connection).
    pub fn status_first(&mut self) {
        let n = self.next;
        self.next += 1;
        self.handed.push_front((n, Tag::Status));
    }

    /// Our status message is handed to the client after what is handed.
    pub fn status_last(&mut self) {
        let n = self.next;
        self.next += 1;
        self.handed.push_back((n, Tag::Status));
    }

    /// The acknowledged events to delete now, if a batch is due (`force`:
    /// whatever there is).
    pub fn acks_due(&mut self, force: bool) -> Vec<i64> {
        let due = force
            || self.acked.len() >= ACK_BATCH
            || self.acked_since.is_some_and(|t| t.elapsed() >= ACK_DELAY);
        if due && !self.acked.is_empty() {
            self.acked_since = None;
            std::mem::take(&mut self.acked)
        } else {
            Vec::new()
        }
    }

    /// How long until a batch of acknowledgements is due, if one waits.
    pub fn acks_wait(&self) -> Option<Duration> {
        self.acked_since
            .map(|t| ACK_DELAY.saturating_sub(t.elapsed()))
    }

    /// The connection dropped: everything handed and not acknowledged
    /// comes back. States return to `queue` in their order; spooled
    /// events will be read again from the oldest of them.
    pub fn take_back(&mut self, queue: &Queue) {
        let mut lost: Vec<(u64, Tag)> = self.handed.drain(..).collect();
        lost.extend(self.inflight.drain().map(|(_, t)| t));
        lost.sort_by_key(|(n, _)| *n);
        let mut first_event: Option<i64> = None;
        for (_, t) in lost.into_iter().rev() {
            match t {
                Tag::Message(m) => queue.requeue(m),
                Tag::Event(seq) => first_event = Some(first_event.map_or(seq, |f| f.min(seq))),
                Tag::Status => {}
            }
        }
        self.resend_upto = self.resend_upto.max(self.cursor);
        if let Some(f) = first_event {
            self.cursor = self.cursor.min(f - 1);
        }
    }
}

/// Hands the next message to the client, if the link is up and the window
/// has room: the next live spooled event or the next state, whichever the
/// monitor gave first; else the next spooled event as backfill (at its
/// pace). The tag is recorded under the same lock as the request
/// enters the client's channel (see the module doc).
pub fn hand(
    flight: &Mutex<Flight>,
    up: bool,
    client: &WireClient,
    queue: &Queue,
    store: Option<&Arc<Mutex<Store>>>,
    health: &LinkHealth,
) -> Handed {
    let mut f = flight.lock().unwrap_or_else(|e| e.into_inner());
    if !up {
        return Handed::Nothing;
    }
    if f.in_window() >= WINDOW {
        return Handed::Full;
    }
    // The monitor's order between live events and states (a state names
    // the last event before it), then backfill at its pace.
    let row = match store {
        Some(store) => {
            let s = store.lock().unwrap_or_else(|e| e.into_inner());
            // Acknowledged but not yet deleted: never read again.
            let mut after = f.cursor;
            loop {
                match s.next_after(after) {
                    Ok(Some(r)) if f.acked.contains(&r.seq) => after = r.seq,
                    Ok(r) => break r,
                    Err(e) => {
                        warn!(error = %e, "cannot read the spool; retrying");
                        break None;
                    }
                }
            }
        }
        None => None,
    };
    let row = row.map(|r| {
        let backfill = r.offline || r.seq <= f.resend_upto;
        (r, backfill)
    });
    let pace = Duration::from_secs_f64(1.0 / BACKFILL_PER_S);
    let paced = f.last_backfill.map(|t| t.elapsed()).filter(|e| *e < pace);
    match row {
        Some((r, false)) if queue.head_after().is_none_or(|a| a >= r.seq) => {
            hand_event(&mut f, client, r, false, health)
        }
        _ if !queue.is_empty() => match queue.try_pop() {
            Some(m) => {
                let sent =
                    client.try_publish(m.topic.clone(), m.retain(), m.payload.clone(), &m.props);
                match sent {
                    Ok(()) => {
                        let n = f.next;
                        f.next += 1;
                        f.handed.push_back((n, Tag::Message(m)));
                        Handed::One
                    }
                    Err(_) => {
                        queue.requeue(m);
                        Handed::Closed
                    }
                }
            }
            None => Handed::Nothing,
        },
        Some((r, false)) => hand_event(&mut f, client, r, false, health),
        Some((_, true)) if paced.is_some() => Handed::Wait(pace - paced.unwrap_or_default()),
        Some((r, true)) => hand_event(&mut f, client, r, true, health),
        None => Handed::Nothing,
    }
}

fn hand_event(
    f: &mut Flight,
    client: &WireClient,
    row: crate::store::Spooled,
    backfill: bool,
    health: &LinkHealth,
) -> Handed {
    let payload = if backfill {
        with_backfill(&row.payload)
    } else {
        row.payload
    };
    let props = Props {
        correlation: row.correlation,
        ..Props::default()
    };
    match client.try_publish(row.topic, false, payload, &props) {
        Ok(()) => {
            let n = f.next;
            f.next += 1;
            f.cursor = row.seq;
            f.handed.push_back((n, Tag::Event(row.seq)));
            if backfill {
                f.last_backfill = Some(Instant::now());
                health.backfilled.fetch_add(1, Ordering::Relaxed);
            }
            Handed::One
        }
        Err(_) => Handed::Closed,
    }
}

/// `payload` (a JSON object) with `"backfill":true` in front.
pub fn with_backfill(payload: &[u8]) -> Vec<u8> {
    match payload.iter().position(|b| !b.is_ascii_whitespace()) {
        Some(i) if payload[i] == b'{' => {
            let rest = &payload[i + 1..];
            let empty = rest.iter().all(|b| b.is_ascii_whitespace() || *b == b'}');
            let mut out = Vec::with_capacity(payload.len() + 17);
            out.extend_from_slice(b"{\"backfill\":true");
            if !empty {
                out.push(b',');
            }
            out.extend_from_slice(rest);
            out
        }
        _ => payload.to_vec(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::publish::queue::Kind;

    #[test]
    fn backfill_is_marked_in_the_payload() {
        let v: serde_json::Value =
            serde_json::from_slice(&with_backfill(br#"{"type":"alarm","seq":3}"#)).unwrap();
        assert_eq!(v["backfill"], true);
        assert_eq!(v["seq"], 3);
        assert_eq!(with_backfill(b"{}"), br#"{"backfill":true}"#);
    }

    fn state(topic: &str, n: u8) -> Tag {
        Tag::Message(Message {
            topic: topic.into(),
            payload: vec![n],
            kind: Kind::ZoneState,
            after: 0,
            props: Default::default(),
        })
    }

    /// A real client whose event loop is not polled: what `hand` gives it
    /// waits in its request channel, in order.
    fn client() -> (WireClient, rumqttc::EventLoop) {
        let (c, ev) = rumqttc::AsyncClient::new(rumqttc::MqttOptions::new("t", "127.0.0.1", 1), 64);
        (WireClient::V4(c), ev)
    }

    fn store(name: &str) -> Arc<Mutex<Store>> {
        let d = std::env::temp_dir().join(format!("wallflux-flight-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        let (s, _) = Store::open(&d, crate::config::StoreSettings::default()).unwrap();
        Arc::new(Mutex::new(s))
    }

    fn t(s: f64) -> crate::time::Timestamp {
        crate::time::Timestamp::from_epoch_s(1.78e9 + s)
    }

    #[test]
    fn live_events_and_states_go_in_the_monitor_s_order() {
        let (client, _ev) = client();
        let store = store("order");
        let q = Queue::new(8);
        let health = LinkHealth::default();
        let flight = Mutex::new(Flight::new(0));
        // The monitor gave: state A, event 1, state B (after event 1).
        let seq = {
            let mut s = store.lock().unwrap();
            let seq = s.spool(t(0.0), "r/events", b"{\"n\":1}", false).unwrap();
            s.commit().unwrap();
            seq
        };
        let mut a = match state("z/a", 1) {
            Tag::Message(m) => m,
            _ => unreachable!(),
        };
        a.after = 0;
        let mut b = a.clone();
        b.topic = "z/b".into();
        b.after = seq;
        q.push(a);
        q.push(b);
        let mut order = Vec::new();
        while hand(&flight, true, &client, &q, Some(&store), &health) == Handed::One {
            let f = flight.lock().unwrap();
            order.push(match &f.handed.back().unwrap().1 {
                Tag::Message(m) => m.topic.clone(),
                Tag::Event(s) => format!("event {s}"),
                Tag::Status => "status".into(),
            });
        }
        assert_eq!(
            order,
            ["z/a".to_string(), format!("event {seq}"), "z/b".to_string()]
        );
    }

    #[test]
    fn backfill_waits_for_its_pace_and_live_states_do_not() {
        let (client, _ev) = client();
        let store = store("pace");
        {
            let mut s = store.lock().unwrap();
            for i in 0..3 {
                s.spool(t(i as f64), "r/events", b"{}", true).unwrap();
            }
            s.commit().unwrap();
        }
        let q = Queue::new(8);
        let health = LinkHealth::default();
        let flight = Mutex::new(Flight::new(0));
        assert_eq!(
            hand(&flight, true, &client, &q, Some(&store), &health),
            Handed::One
        );
        let gap = Duration::from_secs_f64(1.0 / BACKFILL_PER_S);
        match hand(&flight, true, &client, &q, Some(&store), &health) {
            Handed::Wait(d) => assert!(d > Duration::ZERO && d <= gap, "{d:?}"),
            other => panic!("{other:?}"),
        }
        // A state meanwhile goes at once.
        if let Tag::Message(m) = state("z/a", 1) {
            q.push(m);
        }
        assert_eq!(
            hand(&flight, true, &client, &q, Some(&store), &health),
            Handed::One
        );
        std::thread::sleep(gap);
        assert_eq!(
            hand(&flight, true, &client, &q, Some(&store), &health),
            Handed::One
        );
        assert_eq!(health.backfilled.load(Ordering::Relaxed), 2);
        // Down: nothing handed; the window bounds what is out.
        assert_eq!(
            hand(&flight, false, &client, &q, Some(&store), &health),
            Handed::Nothing
        );
    }

    #[test]
    fn the_window_bounds_what_is_handed_out() {
        let (client, _ev) = client();
        let q = Queue::new(2 * WINDOW);
        let health = LinkHealth::default();
        let flight = Mutex::new(Flight::new(0));
        for i in 0..(WINDOW + 5) {
            if let Tag::Message(m) = state(&format!("z/{i}"), 0) {
                q.push(m);
            }
        }
        let mut handed = 0;
        while hand(&flight, true, &client, &q, None, &health) == Handed::One {
            handed += 1;
        }
        assert_eq!(handed, WINDOW);
        assert_eq!(
            hand(&flight, true, &client, &q, None, &health),
            Handed::Full
        );
        flight.lock().unwrap().written(1);
        assert!(flight.lock().unwrap().acked(1));
        assert_eq!(hand(&flight, true, &client, &q, None, &health), Handed::One);
    }

    #[test]
    fn packet_ids_name_what_was_handed_in_order_and_a_drop_takes_all_back() {
        let q = Queue::new(8);
        let mut f = Flight::new(0);
        for t in [
            state("z/a", 1),
            Tag::Event(10),
            Tag::Event(11),
            state("z/b", 2),
        ] {
            let n = f.next;
            f.next += 1;
            f.handed.push_back((n, t));
        }
        f.cursor = 11;
        f.written(7);
        f.written(8);
        f.written(7); // written again: not a new publish
        assert!(f.acked(8));
        assert_eq!(f.acks_due(true), vec![10]);
        f.written(9);
        assert!(!f.acked(42));
        // The link drops with z/a and event 11 in flight, z/b not written.
        f.take_back(&q);
        assert_eq!(f.in_window(), 0);
        assert_eq!(f.cursor, 10, "event 11 is read again");
        assert_eq!(f.resend_upto, 11, "and is backfill when it goes");
        let back: Vec<_> = std::iter::from_fn(|| q.try_pop())
            .map(|m| m.topic)
            .collect();
        assert_eq!(back, ["z/a", "z/b"]);
    }
}
