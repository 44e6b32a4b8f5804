//! A real broker for the integration tests (the embedded one through
//! `wallflux broker`, or mosquitto when `WALLFLUX_TEST_BROKER=mosquitto`)
//! and a subscriber that collects what is published.

use std::net::TcpStream;
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use rumqttc::{Client, Event, MqttOptions, Packet, QoS};

pub fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

pub struct Broker {
    pub port: u16,
    child: Option<Child>,
    dir: std::path::PathBuf,
    /// A mosquitto configuration of the test's own.
    conf: Option<String>,
}

impl Broker {
    pub fn kind() -> String {
        std::env::var("WALLFLUX_TEST_BROKER").unwrap_or_else(|_| "embedded".into())
    }

    pub fn start(port: u16, dir: &std::path::Path) -> Broker {
        let mut b = Broker {
            port,
            child: None,
            dir: dir.to_path_buf(),
            conf: None,
        };
        b.restart();
        b
    }

    /// mosquitto with the configuration `conf` (its own listener line
    /// included).
    pub fn mosquitto_with(port: u16, dir: &std::path::Path, conf: &str) -> Broker {
        let mut b = Broker {
            port,
            child: None,
            dir: dir.to_path_buf(),
            conf: Some(conf.to_string()),
        };
        b.restart();
        b
    }

    /// Starts (again) on the same port and waits until it accepts.
    pub fn restart(&mut self) {
        let child = if Self::kind() == "mosquitto" || self.conf.is_some() {
            let conf = self.dir.join(format!("mosquitto-{}.conf", self.port));
            let text = self.conf.clone().unwrap_or_else(|| {
                format!("listener {} 127.0.0.1\nallow_anonymous true\n", self.port)
            });
            std::fs::write(&conf, text).unwrap();
            Command::new("mosquitto")
                .arg("-c")
                .arg(&conf)
                .stdout(Stdio::null())
                .stderr(Stdio::null())
                .spawn()
                .expect("mosquitto is installed (apt-get install mosquitto)")
        } else {
            Command::new(env!("CARGO_BIN_EXE_wallflux"))
                .args(["broker", "--port", &self.port.to_string()])
                .stdout(Stdio::null())
                .stderr(Stdio::null())
                .spawn()
                .unwrap()
        };
        self.child = Some(child);
        let deadline = Instant::now() + Duration::from_secs(20);
        while TcpStream::connect(("127.0.0.1", self.port)).is_err() {
            assert!(
                Instant::now() < deadline,
                "broker did not start on port {}",
                self.port
            );
            std::thread::sleep(Duration::from_millis(50));
        }
    }

    pub fn stop(&mut self) {
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
        }
    }
}

impl Drop for Broker {
    fn drop(&mut self) {
        self.stop();
    }
}

/// Subscribers made so far (for their client ids).
static SUBSCRIBERS: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);

/// One received message.
#[derive(Debug, Clone)]
pub struct Msg {
    pub topic: String,
    pub retained: bool,
    pub json: serde_json::Value,
}

/// Subscribes to `filter` and forwards every message; reconnects (and
/// subscribes again) when the broker goes away.
pub fn subscribe(port: u16, filter: &str) -> mpsc::Receiver<Msg> {
    subscribe_as(port, filter, None)
}

/// [`subscribe`] with a broker account (user, password).
pub fn subscribe_as(port: u16, filter: &str, account: Option<(&str, &str)>) -> mpsc::Receiver<Msg> {
    let (tx, rx) = mpsc::channel();
    let mut opts = MqttOptions::new(
        // Each subscriber its own id: a second one must not push out the first.
        format!(
            "test-sub-{port}-{}-{}",
            std::process::id(),
            SUBSCRIBERS.fetch_add(1, std::sync::atomic::Ordering::Relaxed)
        ),
        "127.0.0.1",
        port,
    );
    opts.set_keep_alive(Duration::from_secs(5));
    // Large enough for the oversize messages the link tests send.
    opts.set_max_packet_size(32 << 20, 32 << 20);
    if let Some((u, p)) = account {
        opts.set_credentials(u, p);
    }
    let (client, mut conn) = Client::new(opts, 16);
    let filter = filter.to_string();
    std::thread::spawn(move || {
        for ev in conn.iter() {
            match ev {
                Ok(Event::Incoming(Packet::ConnAck(_))) => {
                    let _ = client.try_subscribe(filter.clone(), QoS::AtLeastOnce);
                }
                Ok(Event::Incoming(Packet::Publish(p))) => {
                    let json =
                        serde_json::from_slice(&p.payload).unwrap_or(serde_json::Value::Null);
                    if tx
                        .send(Msg {
                            topic: p.topic.clone(),
                            retained: p.retain,
                            json,
                        })
                        .is_err()
                    {
                        return;
                    }
                }
                Ok(_) => {}
                Err(_) => std::thread::sleep(Duration::from_millis(200)),
            }
        }
    });
    rx
}

/// Waits (bounded) for a message that satisfies `pred`; the others are
/// dropped.
pub fn wait_for(
    rx: &mpsc::Receiver<Msg>,
    within: Duration,
    what: &str,
    pred: impl Fn(&Msg) -> bool,
) -> Msg {
    let deadline = Instant::now() + within;
    loop {
        let left = deadline.saturating_duration_since(Instant::now());
        match rx.recv_timeout(left) {
            Ok(m) if pred(&m) => return m,
            Ok(_) => {}
            Err(_) => panic!("no message within {within:?}: {what}"),
        }
    }
}

/// Publishes one message (QoS 1) and waits until the broker has it.
pub fn publish(port: u16, topic: &str, payload: &[u8]) {
    if let Err(e) = try_publish(port, topic, payload, false) {
        panic!("publish to {topic}: {e}");
    }
}

/// Publishes a command as a SCADA client sends it: a JSON object gets its
/// `time` (now) unless it has one; anything else goes as it is.
pub fn publish_command(port: u16, topic: &str, payload: &[u8]) {
    publish(port, topic, &stamped(payload));
}

/// The wall clock now, as the payloads spell a time (RFC 3339, ms).
pub fn now_rfc3339() -> String {
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap()
        .as_secs_f64();
    wallflux::time::Timestamp::from_epoch_s(now)
        .rfc3339()
        .to_string()
}

/// `payload` with `"time": now` added, when it is a JSON object without one.
pub fn stamped(payload: &[u8]) -> Vec<u8> {
    if payload.first() != Some(&b'{') || payload.windows(6).any(|w| w == b"\"time\"") {
        return payload.to_vec();
    }
    let time = now_rfc3339();
    let rest = &payload[1..];
    let empty = rest.iter().find(|b| !b.is_ascii_whitespace()) == Some(&b'}');
    let comma = if empty { "" } else { "," };
    let mut out = format!("{{\"time\":\"{time}\"{comma}").into_bytes();
    out.extend_from_slice(rest);
    out
}

/// Publishes one message (QoS 1, retained or not) and waits until the
/// broker has it; the broker's refusal (a packet over its limit: it drops
/// the connection) is the error.
pub fn try_publish(port: u16, topic: &str, payload: &[u8], retain: bool) -> Result<(), String> {
    try_publish_as(port, topic, payload, retain, None)
}

/// [`try_publish`] with a broker account (user, password).
pub fn try_publish_as(
    port: u16,
    topic: &str,
    payload: &[u8],
    retain: bool,
    account: Option<(&str, &str)>,
) -> Result<(), String> {
    let mut opts = MqttOptions::new(
        format!("test-pub-{port}-{}", std::process::id()),
        "127.0.0.1",
        port,
    );
    opts.set_max_packet_size(32 << 20, 32 << 20);
    if let Some((u, p)) = account {
        opts.set_credentials(u, p);
    }
    let (client, mut conn) = Client::new(opts, 16);
    client
        .publish(topic, QoS::AtLeastOnce, retain, payload.to_vec())
        .map_err(|e| e.to_string())?;
    let mut result = Err("the connection ended".to_string());
    for ev in conn.iter() {
        match ev {
            Ok(Event::Incoming(Packet::PubAck(_))) => {
                result = Ok(());
                break;
            }
            Ok(_) => {}
            Err(e) => {
                result = Err(e.to_string());
                break;
            }
        }
    }
    let _ = client.disconnect();
    result
}

/// Waits (bounded) until every predicate has matched some message, in any
/// order; returns the first match of each.
pub fn wait_all(
    rx: &mpsc::Receiver<Msg>,
    within: Duration,
    what: &str,
    preds: &[&dyn Fn(&Msg) -> bool],
) -> Vec<Msg> {
    let deadline = Instant::now() + within;
    let mut found: Vec<Option<Msg>> = vec![None; preds.len()];
    while found.iter().any(|f| f.is_none()) {
        let left = deadline.saturating_duration_since(Instant::now());
        match rx.recv_timeout(left) {
            Ok(m) => {
                for (i, p) in preds.iter().enumerate() {
                    if found[i].is_none() && p(&m) {
                        found[i] = Some(m.clone());
                    }
                }
            }
            Err(_) => panic!(
                "not all seen within {within:?}: {what} (seen: {:?})",
                found.iter().map(|f| f.is_some()).collect::<Vec<_>>()
            ),
        }
    }
    found.into_iter().flatten().collect()
}
