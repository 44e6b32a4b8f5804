//! Alarms end to end through the real binary and a real broker: a tuned
//! built-in shell-touch alarm raised by a rising shell (with a trend alert
//! first), its event, an acknowledgement over MQTT with its reply, malformed
//! commands refused, a broken shell thermocouple that raises its diagnostic
//! alarm and suppresses the process alarm, return to normal, and alarm
//! state that survives a restart.

use std::sync::{Arc, Mutex};
use std::time::Duration;

use crate::common::feeder::Feeder;
use crate::common::mqtt::{free_port, publish_command, subscribe, wait_all, wait_for, Broker, Msg};
use crate::common::*;
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";

/// The wall: hot face 900 °C, linear profile to the shell temperature
/// (steady slab without source). The shell moves towards `target_c` at
/// `RATE_C_PER_S` (no step: a step would rightly be held back as a spike).
#[derive(Clone, Copy)]
struct Scene {
    from_c: f64,
    target_c: f64,
    since_s: f64,
    shell_probe_open: bool,
}

const RATE_C_PER_S: f64 = 4.0;

impl Scene {
    fn shell_c(&self, t: f64) -> f64 {
        let d = self.target_c - self.from_c;
        self.from_c + d.signum() * d.abs().min(RATE_C_PER_S * (t - self.since_s).max(0.0))
    }
}

/// Sends the shell towards `target_c` from where it is now.
fn head_for(scene: &Mutex<Scene>, t0: std::time::Instant, target_c: f64) {
    let t = t0.elapsed().as_secs_f64();
    let mut s = scene.lock().unwrap();
    *s = Scene {
        from_c: s.shell_c(t),
        target_c,
        since_s: t,
        shell_probe_open: s.shell_probe_open,
    };
}

fn values(scene: Arc<Mutex<Scene>>) -> crate::common::feeder::Values {
    Arc::new(move |i, t| {
        let s = *scene.lock().unwrap();
        if i == 3 && s.shell_probe_open {
            return None;
        }
        Some(900.0 - (900.0 - s.shell_c(t)) * DEPTHS_MM[i] / 250.0)
    })
}

fn alarm(m: &Msg, name: &str, state: &str) -> bool {
    m.topic == format!("{ROOT}/alarm/{name}") && m.json["state"] == state
}

fn reply(rx: &std::sync::mpsc::Receiver<Msg>, id: Option<&str>) -> serde_json::Value {
    let want = id.map_or(serde_json::Value::Null, |s| {
        serde_json::Value::String(s.into())
    });
    wait_for(rx, Duration::from_secs(10), "command reply", |m| {
        m.topic == format!("{ROOT}/cmd/reply") && m.json["id"] == want
    })
    .json
}

#[test]
fn alarm_life_cycle_end_to_end() {
    let dir = temp_dir("alarms");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/#"));
    let pty = Pty::open().unwrap();
    let mut cfg = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0);
    // Tune two built-in alarms: the shell-touch limit and no delays, so the
    // test runs in seconds.
    cfg += r#"
[[alarm]]
name = "wall-shell-touch"
setpoint = 350.0
deadband = 5.0
on_delay_s = 0.0
message = "Shell too hot to touch"

[[alarm]]
name = "p3-fault"
on_delay_s = 0.0
"#;
    let cfg = write(&dir, "wallflux.toml", &cfg);
    let check = run(&["check", "--config", cfg.to_str().unwrap()]);
    assert_eq!(
        check.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&check.stderr)
    );

    let scene = Arc::new(Mutex::new(Scene {
        from_c: 300.0,
        target_c: 300.0,
        since_s: 0.0,
        shell_probe_open: false,
    }));
    let t0 = std::time::Instant::now();
    let _feed = Feeder::start(pty, DEPTHS_MM.len(), values(scene.clone()));
    let log = dir.join("daemon.log");
    let daemon = start_daemon(&cfg, &log);

    let normal = wait_for(&rx, Duration::from_secs(20), "shell-touch normal", |m| {
        alarm(m, "wall-shell-touch", "normal")
    });
    assert_eq!(normal.json["setpoint"], 350.0);
    assert_eq!(normal.json["unit"], "°C");
    assert_eq!(normal.json["priority"], "high");
    assert!(normal.retained || normal.json["builtin"] == true);

    // The shell rises at 4 °C/s from 300 °C: a trend alert before the limit,
    // then the alarm.
    head_for(&scene, t0, 400.0);
    let trend = wait_for(&rx, Duration::from_secs(20), "trend alert", |m| {
        m.topic == format!("{ROOT}/events") && m.json["type"] == "trend"
    });
    assert_eq!(trend.json["alarm"], "wall-shell-touch");
    assert_eq!(trend.json["limit"], 350.0);
    let rate = trend.json["rate_per_h"].as_f64().unwrap();
    let true_rate = RATE_C_PER_S * 3600.0;
    assert!(
        (rate - true_rate).abs() < 0.1 * true_rate,
        "trend rate {rate} °C/h (true {true_rate})"
    );
    assert!(trend.json["value"].as_f64().unwrap() < 350.0);

    // The retained state goes out just before the event.
    let st = wait_for(&rx, Duration::from_secs(20), "unacknowledged state", |m| {
        alarm(m, "wall-shell-touch", "unacknowledged")
    });
    assert_eq!(st.json["active"], true);
    assert_eq!(st.json["message"], "Shell too hot to touch");
    let ev = wait_for(&rx, Duration::from_secs(5), "activation event", |m| {
        m.topic == format!("{ROOT}/events")
            && m.json["type"] == "alarm"
            && m.json["cause"] == "activated"
    });
    assert_eq!(ev.json["alarm"], "wall-shell-touch");
    assert_eq!(ev.json["to"], "unacknowledged");
    assert!(ev.json["value"].as_f64().unwrap() >= 350.0);
    let event_id = ev.json["event_id"].as_str().unwrap().to_string();

    // Malformed commands: refused with a reason, the daemon carries on.
    publish_command(port, &format!("{ROOT}/cmd"), b"this is not json");
    let r = reply(&rx, None);
    assert_eq!(r["ok"], false);
    publish_command(
        port,
        &format!("{ROOT}/cmd"),
        br#"{"id":"c0","action":"ack","alarm":"no-such-alarm","by":"op-anna"}"#,
    );
    let r = reply(&rx, Some("c0"));
    assert_eq!(r["ok"], false);
    assert!(
        r["error"].as_str().unwrap().contains("no-such-alarm"),
        "{r}"
    );
    publish_command(
        port,
        &format!("{ROOT}/cmd"),
        br#"{"id":"c1","action":"explode","alarm":"wall-shell-touch","by":"op-anna"}"#,
    );
    assert_eq!(reply(&rx, Some("c1"))["ok"], false);
    let huge = format!(
        r#"{{"id":"c2","action":"ack","alarm":"wall-shell-touch","by":"{}"}}"#,
        "x".repeat(5000)
    );
    publish_command(port, &format!("{ROOT}/cmd"), huge.as_bytes());
    assert_eq!(reply(&rx, None)["ok"], false);

    // Acknowledge over MQTT.
    publish_command(
        port,
        &format!("{ROOT}/cmd"),
        br#"{"id":"c3","action":"ack","alarm":"wall-shell-touch","by":"op-anna"}"#,
    );
    let r = reply(&rx, Some("c3"));
    assert_eq!(r["ok"], true, "{r}");
    let st = wait_for(&rx, Duration::from_secs(10), "acknowledged", |m| {
        alarm(m, "wall-shell-touch", "acknowledged")
    });
    assert_eq!(st.json["last_user"], "op-anna");
    // A second ack has nothing to acknowledge.
    publish_command(
        port,
        &format!("{ROOT}/cmd"),
        br#"{"id":"c4","action":"ack","alarm":"wall-shell-touch","by":"op-anna"}"#,
    );
    assert_eq!(reply(&rx, Some("c4"))["ok"], false);

    // The shell thermocouple opens: its diagnostic alarm, and the shell
    // alarm suppressed (it no longer rests on a measurement at the shell).
    scene.lock().unwrap().shell_probe_open = true;
    wait_all(
        &rx,
        Duration::from_secs(15),
        "p3-fault active, shell-touch suppressed",
        &[&|m| alarm(m, "p3-fault", "unacknowledged"), &|m| {
            alarm(m, "wall-shell-touch", "suppressed")
        }],
    );
    scene.lock().unwrap().shell_probe_open = false;
    wait_all(
        &rx,
        Duration::from_secs(15),
        "p3-fault returned, shell-touch back",
        &[&|m| alarm(m, "p3-fault", "rtn_unacknowledged"), &|m| {
            alarm(m, "wall-shell-touch", "acknowledged")
        }],
    );

    // Back below the limit minus the deadband: normal.
    head_for(&scene, t0, 300.0);
    wait_for(&rx, Duration::from_secs(15), "normal", |m| {
        alarm(m, "wall-shell-touch", "normal")
    });

    // Hot again, not acknowledged; restart: still unacknowledged, not
    // announced anew (same activation, sequence continues).
    head_for(&scene, t0, 400.0);
    let again = wait_for(&rx, Duration::from_secs(15), "second activation", |m| {
        alarm(m, "wall-shell-touch", "unacknowledged")
    });
    let seq_before = again.json["seq"].as_u64().unwrap();
    assert_ne!(again.json["event_id"].as_str().unwrap(), event_id);
    stop_daemon(daemon);
    let saved: serde_json::Value = {
        let text = std::fs::read_to_string(&cfg).unwrap();
        let state_dir = text
            .lines()
            .find_map(|l| l.strip_prefix("state_dir = "))
            .unwrap()
            .trim_matches('"')
            .to_string();
        serde_json::from_slice(
            &std::fs::read(std::path::Path::new(&state_dir).join("alarms.json")).unwrap(),
        )
        .unwrap()
    };
    assert_eq!(saved["wall-shell-touch"]["active"], true);
    assert_eq!(saved["wall-shell-touch"]["acknowledged"], false);

    let daemon = start_daemon(&cfg, &dir.join("daemon2.log"));
    let after = wait_for(&rx, Duration::from_secs(20), "state after restart", |m| {
        alarm(m, "wall-shell-touch", "unacknowledged") && m.json["seq"].as_u64() == Some(seq_before)
    });
    assert_eq!(after.json["active"], true);
    // No new activation event after the restart.
    let news: Vec<Msg> = rx.try_iter().collect();
    assert!(
        !news
            .iter()
            .any(|m| m.topic == format!("{ROOT}/events") && m.json["cause"] == "activated"),
        "re-announced after restart"
    );
    stop_daemon(daemon);
    let text = std::fs::read_to_string(&log).unwrap();
    assert!(text.contains("trend:"), "{text}");
    assert!(
        text.contains("operator command") && text.contains("op-anna"),
        "{text}"
    );
}
