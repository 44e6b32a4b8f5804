//! `[mqtt] protocol = "5"` against mosquitto (the embedded broker speaks
//! 3.1.1 only): retained measurements carry their message expiry, a
//! command's reply goes to its response topic with its correlation data,
//! events still go to `events`.

use std::sync::mpsc;
use std::time::{Duration, Instant};

use rumqttc::v5::mqttbytes::v5::{Packet, PublishProperties};
use rumqttc::v5::mqttbytes::QoS;
use rumqttc::v5::{Client, Event, MqttOptions};

use crate::common::feeder::Feeder;
use crate::common::mqtt::{free_port, now_rfc3339, Broker};
use crate::common::*;
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";

/// One message as an MQTT 5 subscriber sees it.
struct Msg5 {
    topic: String,
    json: serde_json::Value,
    props: Option<PublishProperties>,
}

/// An MQTT 5 client subscribed to `filters`; it also publishes.
fn client5(port: u16, name: &str, filters: &[&str]) -> (Client, mpsc::Receiver<Msg5>) {
    let mut opts = MqttOptions::new(format!("t5-{name}-{port}"), "127.0.0.1", port);
    opts.set_keep_alive(Duration::from_secs(5));
    let (client, mut conn) = Client::new(opts, 16);
    let (tx, rx) = mpsc::channel();
    let filters: Vec<String> = filters.iter().map(|f| f.to_string()).collect();
    let c = client.clone();
    std::thread::spawn(move || {
        for ev in conn.iter() {
            match ev {
                Ok(Event::Incoming(Packet::ConnAck(_))) => {
                    for f in &filters {
                        let _ = c.try_subscribe(f.clone(), QoS::AtLeastOnce);
                    }
                }
                Ok(Event::Incoming(Packet::Publish(p))) => {
                    let msg = Msg5 {
                        topic: String::from_utf8_lossy(&p.topic).into_owned(),
                        json: serde_json::from_slice(&p.payload).unwrap_or_default(),
                        props: p.properties,
                    };
                    if tx.send(msg).is_err() {
                        return;
                    }
                }
                Ok(_) => {}
                Err(_) => std::thread::sleep(Duration::from_millis(200)),
            }
        }
    });
    (client, rx)
}

fn wait5(rx: &mpsc::Receiver<Msg5>, what: &str, pred: impl Fn(&Msg5) -> bool) -> Msg5 {
    let deadline = Instant::now() + Duration::from_secs(20);
    loop {
        match rx.recv_timeout(deadline.saturating_duration_since(Instant::now())) {
            Ok(m) if pred(&m) => return m,
            Ok(_) => {}
            Err(_) => panic!("no message within 20 s: {what}"),
        }
    }
}

#[test]
fn over_mqtt_5_states_expire_and_replies_go_to_the_response_topic() {
    if Broker::kind() != "mosquitto" {
        eprintln!("skipped: needs WALLFLUX_TEST_BROKER=mosquitto (CI runs it)");
        return;
    }
    let dir = temp_dir("mqtt5");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let pty = Pty::open().unwrap();
    let cfg = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0).replace(
        "topic_root = \"wf\"",
        "topic_root = \"wf\"\nprotocol = \"5\"",
    );
    let cfg = write(&dir, "w.toml", &cfg);
    let _feed = Feeder::start(
        pty,
        DEPTHS_MM.len(),
        std::sync::Arc::new(|i, _| Some(900.0 - 820.0 * DEPTHS_MM[i] / 250.0)),
    );
    let (scada, rx) = client5(port, "scada", &[&format!("{ROOT}/#"), "scada/replies/#"]);
    let started = now_rfc3339();
    let daemon = start_daemon(&cfg, &dir.join("d.log"));
    wait5(&rx, "online", |m| {
        m.topic == format!("{ROOT}/status")
            && m.json["state"] == "online"
            && m.json["time"]
                .as_str()
                .is_some_and(|t| t > started.as_str())
    });

    // A zone state: retained, expiring three zone intervals after it was
    // sent, but no less than 180 s (the test's zone cycles every second);
    // the status report (sent at start) does not expire.
    let (mut zone, mut report) = (None, None);
    let deadline = Instant::now() + Duration::from_secs(20);
    while zone.is_none() || report.is_none() {
        let m = rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .expect("a zone state and the status report");
        if m.topic == format!("{ROOT}/zone/wall/state") {
            zone = Some(m);
        } else if m.topic == format!("{ROOT}/status") && m.json.get("sources").is_some() {
            report = Some(m);
        }
    }
    let z = zone.unwrap();
    let expiry = z.props.as_ref().and_then(|p| p.message_expiry_interval);
    assert!(
        expiry.is_some_and(|e| (170..=180).contains(&e)),
        "expiry {expiry:?}"
    );
    assert_eq!(z.json["zone"], "wall");
    assert_eq!(
        report
            .unwrap()
            .props
            .as_ref()
            .and_then(|p| p.message_expiry_interval),
        None
    );

    // A command with a response topic and correlation data: its reply goes
    // there, with the same correlation data; its audit event to `events`.
    let cmd = format!(
        r#"{{"id":"r5","action":"ack","alarm":"no-such-alarm","by":"op-5","time":"{}"}}"#,
        now_rfc3339()
    );
    let props = PublishProperties {
        response_topic: Some("scada/replies/k1".into()),
        correlation_data: Some(bytes::Bytes::from_static(b"corr-5531")),
        ..Default::default()
    };
    let deadline = Instant::now() + Duration::from_secs(20);
    let reply = loop {
        // At most once on `cmd`: sent again until answered.
        scada
            .publish_with_properties(
                format!("{ROOT}/cmd"),
                QoS::AtLeastOnce,
                false,
                cmd.clone().into_bytes(),
                props.clone(),
            )
            .unwrap();
        let resend = Instant::now() + Duration::from_secs(2);
        let mut found = None;
        while let Ok(m) = rx.recv_timeout(resend.saturating_duration_since(Instant::now())) {
            assert_ne!(
                m.topic,
                format!("{ROOT}/cmd/reply"),
                "the reply went to the default topic"
            );
            if m.topic == "scada/replies/k1" {
                found = Some(m);
                break;
            }
        }
        if let Some(m) = found {
            break m;
        }
        assert!(Instant::now() < deadline, "no reply on the response topic");
    };
    assert_eq!(reply.json["id"], "r5");
    assert_eq!(reply.json["ok"], false);
    assert_eq!(reply.json["code"], "unknown_alarm");
    assert_eq!(
        reply
            .props
            .as_ref()
            .and_then(|p| p.correlation_data.as_deref()),
        Some(&b"corr-5531"[..])
    );
    let audit = wait5(&rx, "the audit event", |m| {
        m.topic == format!("{ROOT}/events") && m.json["id"] == "r5"
    });
    assert_eq!(audit.json["by"], "op-5");
    stop_daemon(daemon);
}
