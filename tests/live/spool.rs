//! The spool against a real broker: the daemon cut off from it by a relay
//! (the broker and the test's subscriber stay up), alarm events raised
//! during the outage, the daemon killed, the spool bounded; what the
//! subscriber then receives, and what `wallflux export` gives.

use std::collections::BTreeMap;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use crate::common::feeder::Feeder;
use crate::common::mqtt::{free_port, subscribe, try_publish, wait_for, Broker, Msg};
use crate::common::proxy::Proxy;
use crate::common::*;
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";
/// The first probe reads 834.4 °C on the steady wall; `hot` lifts it to
/// 870 °C, over the alarm's 850 °C.
const HOT_C: f64 = 870.0;

/// A broker, a relay to it for the daemon, a subscriber to the whole root
/// on the broker itself, a steady wall whose first probe the test heats,
/// and a configuration with an alarm on that probe.
struct Rig {
    dir: std::path::PathBuf,
    broker: Broker,
    proxy: Proxy,
    rx: std::sync::mpsc::Receiver<Msg>,
    cfg: std::path::PathBuf,
    hot: Arc<AtomicBool>,
    _feed: Feeder,
}

impl Rig {
    fn new(name: &str, store: &str) -> Rig {
        Self::speaking(name, store, "3.1.1")
    }

    /// [`Rig::new`] with the daemon speaking MQTT `protocol`.
    fn speaking(name: &str, store: &str, protocol: &str) -> Rig {
        let dir = temp_dir(name);
        let port = free_port();
        let broker = Broker::start(port, &dir);
        let proxy = Proxy::start(port);
        let rx = subscribe(port, &format!("{ROOT}/#"));
        let pty = Pty::open().unwrap();
        let mut text = one_zone_config(&pty.path, proxy.port, 1.5, 250.0, &DEPTHS_MM, 1.0)
            .lines()
            .map(|l| match l {
                l if l.starts_with("state_dir = ") => {
                    format!("state_dir = \"{}\"", dir.join("state").display())
                }
                l => l.to_string(),
            })
            .collect::<Vec<_>>()
            .join("\n")
            .replace(
                "topic_root = \"wf\"",
                &format!("topic_root = \"wf\"\nprotocol = \"{protocol}\""),
            );
        text += &format!(
            "\n[[alarm]]\nname = \"p0-hot\"\nchannel = \"p0\"\nquantity = \"celsius\"\nkind = \"high\"\nsetpoint = 850.0\ndeadband = 5.0\non_delay_s = 0.0\npriority = \"medium\"\n\n{store}\n"
        );
        let cfg = write(&dir, "w.toml", &text);
        let hot = Arc::new(AtomicBool::new(false));
        let h = hot.clone();
        let feed = Feeder::start(
            pty,
            DEPTHS_MM.len(),
            Arc::new(move |i, _| {
                Some(if i == 0 && h.load(Ordering::Relaxed) {
                    HOT_C
                } else {
                    900.0 - 820.0 * DEPTHS_MM[i] / 250.0
                })
            }),
        );
        Rig {
            dir,
            broker,
            proxy,
            rx,
            cfg,
            hot,
            _feed: feed,
        }
    }

    fn daemon(&self, log: &str) -> Daemon {
        let started = crate::common::mqtt::now_rfc3339();
        let d = start_daemon(&self.cfg, &self.dir.join(log));
        wait_for(&self.rx, Duration::from_secs(30), "online", |m| {
            m.topic == format!("{ROOT}/status")
                && m.json["state"] == "online"
                && m.json["time"]
                    .as_str()
                    .is_some_and(|t| t > started.as_str())
        });
        d
    }

    /// The alarm events of `p0-hot` in the history, as `export` gives them.
    fn exported(&self) -> Vec<serde_json::Value> {
        let out = bin()
            .args([
                "export",
                "--config",
                self.cfg.to_str().unwrap(),
                "--kind",
                "event",
            ])
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8(out.stdout)
            .unwrap()
            .lines()
            .map(|l| serde_json::from_str::<serde_json::Value>(l).unwrap())
            .filter(is_p0_event)
            .collect()
    }

    /// Heats and cools the probe until the history holds `n` more events
    /// of its alarm than `before`; those events.
    fn raise_events(&self, before: usize, n: usize) -> Vec<serde_json::Value> {
        let deadline = Instant::now() + Duration::from_secs(120);
        loop {
            let got = self.exported();
            if got.len() >= before + n {
                return got[before..].to_vec();
            }
            assert!(Instant::now() < deadline, "only {} events", got.len());
            self.hot.fetch_xor(true, Ordering::Relaxed);
            // A few scans at each level (the probe is read ten times a
            // second).
            std::thread::sleep(Duration::from_millis(800));
        }
    }

    /// The subscriber's copies of `events`, as many as there are, in the
    /// order they arrive (other messages skipped).
    fn receive(&self, events: &[serde_json::Value]) -> Vec<serde_json::Value> {
        let keys: Vec<String> = events.iter().map(key).collect();
        let mut got = Vec::new();
        let deadline = Instant::now() + Duration::from_secs(30);
        while got.len() < keys.len() {
            let m = self
                .rx
                .recv_timeout(deadline.saturating_duration_since(Instant::now()))
                .unwrap_or_else(|_| panic!("received {} of {} events", got.len(), keys.len()));
            if m.topic == format!("{ROOT}/events") && keys.contains(&key(&m.json)) {
                got.push(m.json);
            }
        }
        got
    }

    /// The rows still in the spool (read from the database itself).
    fn spooled(&self) -> i64 {
        let conn = rusqlite::Connection::open_with_flags(
            self.dir.join("state").join("store.db"),
            rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY,
        )
        .unwrap();
        conn.query_row("SELECT count(*) FROM outbox", [], |r| r.get(0))
            .unwrap()
    }
}

fn is_p0_event(v: &serde_json::Value) -> bool {
    v["type"] == "alarm" && v["alarm"] == "p0-hot"
}

/// An event's identity: its id, sequence number and time.
fn key(v: &serde_json::Value) -> String {
    format!("{}#{}@{}", v["event_id"], v["seq"], v["time"])
}

fn kill(mut d: Daemon) {
    let _ = d.kill();
    let _ = d.wait();
}

/// Waits until the spool is empty: everything the broker acknowledged.
fn drained(rig: &Rig) {
    let deadline = Instant::now() + Duration::from_secs(30);
    while rig.spooled() > 0 {
        assert!(
            Instant::now() < deadline,
            "the spool still holds {}",
            rig.spooled()
        );
        std::thread::sleep(Duration::from_millis(200));
    }
}

/// Alarm events raised while the broker is out of reach, the daemon then
/// killed (SIGKILL) before it is back: after a restart the subscriber gets
/// every one of them, once, in order, with its original time and marked
/// as backfill; events while connected go at once, unmarked; the spool is
/// empty once the broker has acknowledged them all; and `export` gives
/// exactly the events the subscriber received.
#[test]
fn events_of_an_outage_survive_a_kill_and_arrive_once_in_order() {
    outage_and_kill(Rig::new("spool-outage", ""));
}

/// The same over MQTT 5 (mosquitto: the embedded broker speaks 3.1.1).
#[test]
fn over_mqtt_5_too_events_of_an_outage_survive_a_kill() {
    if Broker::kind() != "mosquitto" {
        eprintln!("skipped: needs WALLFLUX_TEST_BROKER=mosquitto (CI runs it)");
        return;
    }
    outage_and_kill(Rig::speaking("spool-outage-5", "", "5"));
}

fn outage_and_kill(rig: Rig) {
    let d = rig.daemon("d1.log");
    let live = rig.raise_events(0, 2);
    for e in &live {
        let m = wait_for(&rig.rx, Duration::from_secs(10), "a live event", |m| {
            m.topic == format!("{ROOT}/events") && key(&m.json) == key(e)
        });
        assert_eq!(m.json.get("backfill"), None, "{}", m.json);
    }
    drained(&rig);

    rig.proxy.down();
    let offline = rig.raise_events(live.len(), 4);
    kill(d);
    assert!(rig.spooled() >= offline.len() as i64);
    rig.hot.store(false, Ordering::Relaxed);
    rig.proxy.up();
    let d = rig.daemon("d2.log");

    // Every outage event, in order, once.
    let offline_keys: Vec<String> = offline.iter().map(key).collect();
    let got = rig.receive(&offline);
    for (g, e) in got.iter().zip(&offline) {
        assert_eq!(key(g), key(e), "in order, with their original time");
        assert_eq!(g["backfill"], true, "{g}");
    }
    drained(&rig);
    // Nothing sent twice: the stream after the backlog holds none of it.
    let later: Vec<Msg> = std::iter::from_fn(|| rig.rx.recv_timeout(Duration::from_secs(2)).ok())
        .take(200)
        .collect();
    assert!(
        later.iter().all(|m| !offline_keys.contains(&key(&m.json))),
        "an outage event arrived twice"
    );
    let log = std::fs::read_to_string(rig.dir.join("d2.log")).unwrap();
    assert!(log.contains("local database opened"), "{log}");
    stop_daemon(d);

    // The history holds what the subscriber was sent, no more, no less
    // (with any event raised after the restart, as the probe cooled).
    let all: Vec<String> = rig.exported().iter().map(key).collect();
    let after: Vec<String> = later
        .iter()
        .filter(|m| m.topic == format!("{ROOT}/events") && is_p0_event(&m.json))
        .map(|m| key(&m.json))
        .collect();
    let sent: Vec<String> = live.iter().chain(&offline).map(key).chain(after).collect();
    assert_eq!(all, sent);
}

/// A spool of 10 kB over an outage that raises more than that: the oldest
/// events go, the rest arrive in order, and an `events_dropped` event says
/// how many went and that the history still holds them.
#[test]
fn a_full_spool_drops_the_oldest_events_and_says_so() {
    let rig = Rig::new("spool-bound", "[store]\nspool_max_mb = 0.01");
    let d = rig.daemon("d.log");
    drained(&rig);
    rig.proxy.down();
    // An alarm event is about 700 bytes on disk: 30 of them are twice the
    // bound.
    let offline = rig.raise_events(0, 30);
    rig.hot.store(false, Ordering::Relaxed);
    rig.proxy.up();

    let keys: Vec<String> = offline.iter().map(key).collect();
    let mut first_zone: Option<serde_json::Value> = None;
    let mut notice = None;
    let mut got: Vec<serde_json::Value> = Vec::new();
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        let dropped = notice.as_ref().map_or(0, |n: &serde_json::Value| {
            n["count"].as_u64().unwrap() as usize
        });
        if notice.is_some() && got.len() + dropped >= offline.len() {
            break;
        }
        let m = rig
            .rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .unwrap_or_else(|_| panic!("got {} events, notice {notice:?}", got.len()));
        if m.topic == format!("{ROOT}/zone/wall/state") && first_zone.is_none() {
            first_zone = Some(m.json.clone());
        }
        if m.topic != format!("{ROOT}/events") {
            continue;
        }
        if m.json["type"] == "events_dropped" {
            assert_eq!(m.json["bound"], "spool_max_mb");
            assert_eq!(m.json["in_history"], true);
            // More than one notice would add up; one is what this outage
            // makes at most per round, so sum them.
            let prev = notice.take();
            let mut n = m.json.clone();
            if let Some(p) = prev {
                n["count"] =
                    (p["count"].as_u64().unwrap() + m.json["count"].as_u64().unwrap()).into();
            }
            notice = Some(n);
        } else if is_p0_event(&m.json) && keys.contains(&key(&m.json)) {
            got.push(m.json);
        }
    }
    let notice = notice.unwrap();
    let dropped = notice["count"].as_u64().unwrap() as usize;
    assert!(
        dropped > 0 && !got.is_empty(),
        "dropped {dropped}, kept {}",
        got.len()
    );
    // The newest survived, in order: the received events are the tail of
    // the outage's events (those raised after the last drop may follow).
    let tail: Vec<String> = got.iter().map(key).collect();
    assert_eq!(tail, keys[dropped..dropped + tail.len()].to_vec());
    assert!(got.iter().all(|g| g["backfill"] == true));
    // The first zone state after the outage is the newest one, not one
    // queued at its start (states wait latest-wins; the older ones are in
    // the history).
    let zone = first_zone.expect("a zone state after the outage");
    let last_event = offline.last().unwrap()["time"]
        .as_str()
        .unwrap()
        .to_string();
    assert!(
        zone["time"].as_str().unwrap() >= last_event.as_str(),
        "zone state of {} after events up to {last_event}",
        zone["time"]
    );
    // And the history still holds every one of them.
    let all: Vec<String> = rig.exported().iter().map(key).collect();
    assert!(keys.iter().all(|k| all.contains(k)));
    stop_daemon(d);
}

/// SIGKILL at random moments while the alarm flips several times a second
/// and the broker is connected: the database always opens again (never
/// moved aside), and every event in the history reached the subscriber;
/// an event arrives twice only if its first copy came within the last
/// moments before a kill (its PUBACK in, its deletion not yet on disk).
#[test]
fn kills_under_event_traffic_lose_nothing_and_repeat_only_the_last_moment() {
    let rig = Rig::new("spool-kills", "");
    let stop = Arc::new(AtomicBool::new(false));
    let flipper = {
        let hot = rig.hot.clone();
        let stop = stop.clone();
        std::thread::spawn(move || {
            while !stop.load(Ordering::Relaxed) {
                hot.fetch_xor(true, Ordering::Relaxed);
                std::thread::sleep(Duration::from_millis(350));
            }
        })
    };
    let mut seen: BTreeMap<String, Vec<Instant>> = BTreeMap::new();
    let mut kills: Vec<Instant> = Vec::new();
    let collect = |seen: &mut BTreeMap<String, Vec<Instant>>, for_: Duration| {
        let until = Instant::now() + for_;
        while let Ok(m) = rig
            .rx
            .recv_timeout(until.saturating_duration_since(Instant::now()))
        {
            if m.topic == format!("{ROOT}/events") && is_p0_event(&m.json) {
                seen.entry(key(&m.json)).or_default().push(Instant::now());
            }
        }
    };
    // A simple generator of "random" moments: the test must not depend on
    // a seed it cannot show, so the spread is fixed and wide.
    let pauses_ms = [2300u64, 4100, 2900, 5300, 3700];
    for (i, pause) in pauses_ms.iter().enumerate() {
        let d = rig.daemon(&format!("k{i}.log"));
        collect(&mut seen, Duration::from_millis(*pause));
        kill(d);
        kills.push(Instant::now());
        // What was on its way when it died.
        collect(&mut seen, Duration::from_millis(500));
        let log = std::fs::read_to_string(rig.dir.join(format!("k{i}.log"))).unwrap();
        assert!(!log.contains("moved aside"), "{log}");
    }
    stop.store(true, Ordering::Relaxed);
    flipper.join().unwrap();
    let d = rig.daemon("last.log");
    drained(&rig);
    collect(&mut seen, Duration::from_secs(2));
    stop_daemon(d);
    let log = std::fs::read_to_string(rig.dir.join("last.log")).unwrap();
    assert!(!log.contains("moved aside"), "{log}");

    let history = rig.exported();
    assert!(history.len() >= 10, "only {} events raised", history.len());
    for e in &history {
        let k = key(e);
        let at = seen.get(&k).unwrap_or_else(|| panic!("{k} never arrived"));
        if at.len() > 1 {
            // The first copy came just before a kill.
            let first = at[0];
            assert!(
                kills
                    .iter()
                    .any(|&kill| kill >= first && kill - first < Duration::from_secs(2)),
                "{k} arrived {} times, not just before a kill",
                at.len()
            );
        }
    }
}

/// The outage of the broker itself (stopped, not the relay: the test's
/// subscriber loses it too), alarm events raised meanwhile, the daemon
/// SIGKILLed before the broker is back; the broker restarted (empty: no
/// session, nothing retained) and the subscriber subscribed again (a probe
/// message proves it) before the daemon restarts: every outage event
/// arrives once, in order, with its original time, marked as backfill.
#[test]
fn events_of_a_broker_stop_survive_a_kill_and_arrive_once_in_order() {
    let mut rig = Rig::new("spool-broker-stop", "");
    let d = rig.daemon("d1.log");
    drained(&rig);
    rig.broker.stop();
    let offline = rig.raise_events(0, 4);
    kill(d);
    assert!(rig.spooled() >= offline.len() as i64);
    rig.hot.store(false, Ordering::Relaxed);
    rig.broker.restart();

    // The subscriber is back on the new broker, subscribed again: a probe
    // sent until it comes round.
    let probe = format!("{ROOT}/probe");
    let deadline = Instant::now() + Duration::from_secs(30);
    'probe: for n in 0.. {
        assert!(
            Instant::now() < deadline,
            "the subscriber did not come back"
        );
        let _ = try_publish(
            rig.broker.port,
            &probe,
            format!(r#"{{"probe":{n}}}"#).as_bytes(),
            false,
        );
        let until = Instant::now() + Duration::from_millis(500);
        while let Ok(m) = rig
            .rx
            .recv_timeout(until.saturating_duration_since(Instant::now()))
        {
            if m.topic == probe {
                break 'probe;
            }
        }
    }
    let d = rig.daemon("d2.log");

    let keys: Vec<String> = offline.iter().map(key).collect();
    let got = rig.receive(&offline);
    for (g, e) in got.iter().zip(&offline) {
        assert_eq!(key(g), key(e), "in order, with their original time");
        assert_eq!(g["time"], e["time"]);
        assert_eq!(g["backfill"], true, "{g}");
    }
    drained(&rig);
    let later: Vec<Msg> = std::iter::from_fn(|| rig.rx.recv_timeout(Duration::from_secs(2)).ok())
        .take(200)
        .collect();
    assert!(
        later.iter().all(|m| !keys.contains(&key(&m.json))),
        "an outage event arrived twice"
    );
    stop_daemon(d);
}

/// SIGTERM while the broker is out of reach, with events in the spool: a
/// clean stop within its few seconds (exit 0), the log saying the spooled
/// events wait for the next start, and the next start delivering them.
#[test]
fn a_clean_stop_during_an_outage_keeps_the_spool_for_the_next_start() {
    let rig = Rig::new("spool-term", "");
    let d = rig.daemon("d1.log");
    drained(&rig);
    rig.proxy.down();
    let offline = rig.raise_events(0, 3);
    rig.hot.store(false, Ordering::Relaxed);
    stop_daemon(d); // asserts exit 0
    let log = std::fs::read_to_string(rig.dir.join("d1.log")).unwrap();
    assert!(
        log.contains("the spooled events go at the next start"),
        "{log}"
    );
    // Nothing waited out its own time limit on the way down.
    assert!(
        !log.contains("did not stop in time") && !log.contains("did not complete"),
        "{log}"
    );
    assert!(rig.spooled() >= offline.len() as i64);
    rig.proxy.up();
    let d = rig.daemon("d2.log");
    let keys: Vec<String> = offline.iter().map(key).collect();
    let got = rig.receive(&offline);
    assert!(got.iter().all(|g| g["backfill"] == true), "{got:?}");
    assert_eq!(got.iter().map(key).collect::<Vec<_>>(), keys);
    stop_daemon(d);
}
