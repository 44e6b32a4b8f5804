//! Commissioning a lining baseline over MQTT, through the real binary and a
//! real broker: a zone set to `baseline_start = "command"` learns nothing
//! until started; `baseline_start`, `baseline_stop` and `baseline_reset`
//! are answered on `{root}/cmd/reply`, logged with their user, shown on the
//! zone state (`lining_baseline`) and kept across a restart in
//! `baselines.json`.
//!
//! The wall: one slab, k 1.5 W/(m·K), 250 mm, hot face 900 °C read by its
//! own thermocouple, shell 300 °C, linear profile (steady, no source):
//! q = 1.5 × 600 / 0.25 = 3600 W/m², R = 600 / 3600 = 0.1667 m²K/W. Learned
//! on that wall and compared with the same wall, the change is 0 %.

use std::sync::Arc;
use std::time::Duration;

use crate::common::feeder::Feeder;
use crate::common::mqtt::{free_port, publish_command, subscribe, wait_for, Broker, Msg};
use crate::common::*;
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";

fn command(
    port: u16,
    rx: &std::sync::mpsc::Receiver<Msg>,
    id: &str,
    action: &str,
    zone: &str,
) -> serde_json::Value {
    let payload = format!(r#"{{"id":"{id}","action":"{action}","zone":"{zone}","by":"eng-rosa"}}"#);
    publish_command(port, &format!("{ROOT}/cmd"), payload.as_bytes());
    wait_for(rx, Duration::from_secs(10), "command reply", |m| {
        m.topic == format!("{ROOT}/cmd/reply") && m.json["id"] == id
    })
    .json
}

fn zone_baseline(rx: &std::sync::mpsc::Receiver<Msg>, state: &str) -> serde_json::Value {
    wait_for(rx, Duration::from_secs(20), state, |m| {
        m.topic == format!("{ROOT}/zone/wall/state") && m.json["lining_baseline"]["state"] == state
    })
    .json
}

#[test]
fn baseline_commissioning_over_mqtt() {
    let dir = temp_dir("baseline-cmd");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/#"));
    let pty = Pty::open().unwrap();
    let cfg = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0)
        .replace(
            "[[zone]]",
            "[[channel]]\nname = \"hf\"\nsource = \"box\"\ninput = 5\ntype = \"K\"\n\n[[zone]]",
        )
        .replace(
            "model = \"quadratic\"",
            "model = \"layered\"\nhot_face_channel = \"hf\"\nbaseline_start = \"command\"",
        );
    let cfg = write(&dir, "wallflux.toml", &cfg);
    let check = run(&["check", "--config", cfg.to_str().unwrap()]);
    assert_eq!(
        check.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&check.stderr)
    );
    let _feed = Feeder::start(
        pty,
        DEPTHS_MM.len() + 1,
        Arc::new(|i, _| {
            Some(if i == 4 {
                900.0
            } else {
                900.0 - 600.0 * DEPTHS_MM[i] / 250.0
            })
        }),
    );
    let log = dir.join("daemon.log");
    let daemon = start_daemon(&cfg, &log);

    // A fresh `command` zone: nothing learning, nothing compared.
    let z = zone_baseline(&rx, "none");
    assert!(z["resistance_change_pct"].is_null(), "{z}");
    assert!(
        (z["thermal_resistance_m2k_w"].as_f64().unwrap() - 600.0 / 3600.0).abs() < 1e-3,
        "{z}"
    );
    let r = command(port, &rx, "b0", "baseline_stop", "wall");
    assert_eq!(
        (r["ok"].as_bool(), r["code"].as_str()),
        (Some(false), Some("baseline_not_learning")),
        "{r}"
    );
    let r = command(port, &rx, "b1", "baseline_start", "no-such-zone");
    assert_eq!(r["code"], "unknown_zone", "{r}");

    let r = command(port, &rx, "b2", "baseline_start", "wall");
    assert_eq!(r["ok"], true, "{r}");
    let z = zone_baseline(&rx, "learning");
    let started = z["lining_baseline"]["started"]
        .as_str()
        .unwrap()
        .to_string();
    assert!(z["lining_baseline"]["due"].is_string(), "{z}");
    assert!(z["resistance_change_pct"].is_null());
    let r = command(port, &rx, "b3", "baseline_start", "wall");
    assert_eq!(r["code"], "baseline_already_learning", "{r}");

    // Ten consistent states make the 900 °C bin a reference; until then a
    // stop is refused as not ready.
    wait_for(&rx, Duration::from_secs(30), "a reference bin", |m| {
        m.topic == format!("{ROOT}/zone/wall/state")
            && m.json["lining_baseline"]["reference_bins"] == 1
    });
    let r = command(port, &rx, "b4", "baseline_stop", "wall");
    assert_eq!(r["ok"], true, "{r}");
    let z = zone_baseline(&rx, "learned");
    assert_eq!(z["lining_baseline"]["started"], started.as_str());
    assert!(z["lining_baseline"]["ended"].is_string(), "{z}");
    let change = z["resistance_change_pct"].as_f64().unwrap();
    assert!(change.abs() < 0.1, "same wall, {change} %");
    let r = command(port, &rx, "b5", "baseline_start", "wall");
    assert_eq!(r["code"], "baseline_already_learned", "{r}");

    // A restart keeps the learned baseline (baselines.json).
    stop_daemon(daemon);
    let daemon = start_daemon(&cfg, &dir.join("daemon2.log"));
    let z = zone_baseline(&rx, "learned");
    assert_eq!(z["lining_baseline"]["started"], started.as_str());
    assert!(z["resistance_change_pct"].as_f64().unwrap().abs() < 0.1);

    // After a reline: reset, and the zone waits for a new start.
    let r = command(port, &rx, "b6", "baseline_reset", "wall");
    assert_eq!(r["ok"], true, "{r}");
    let z = zone_baseline(&rx, "none");
    assert!(z["resistance_change_pct"].is_null());
    assert_eq!(z["lining_baseline"]["reference_bins"], 0);
    stop_daemon(daemon);

    let text = std::fs::read_to_string(&log).unwrap();
    for want in [
        "baseline_start",
        "baseline_stop",
        "eng-rosa",
        "operator command refused",
    ] {
        assert!(text.contains(want), "{want} not in the log:\n{text}");
    }
    let text2 = std::fs::read_to_string(dir.join("daemon2.log")).unwrap();
    assert!(
        text2.contains("baseline_reset") && text2.contains("lining baselines restored"),
        "{text2}"
    );
}
