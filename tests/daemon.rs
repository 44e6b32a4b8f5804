//! The daemon end to end through the real binary: a pseudo-terminal as its
//! serial port, a real MQTT broker, a subscriber that checks the published
//! numbers; garbage on the line, an open thermocouple, the broker stopped and
//! restarted, SIGTERM. `WALLFLUX_TEST_BROKER=mosquitto` runs it against
//! mosquitto (as CI does); otherwise the embedded broker is used.

mod common;

use std::io::Write;
use std::sync::atomic::{AtomicBool, AtomicU8, Ordering};
use std::sync::Arc;
use std::time::Duration;

use common::mqtt::{free_port, subscribe, wait_for, Broker};
use common::*;
use wallflux::acquire::line::{encode_frame, Unit, Value, MAX_LINE_BYTES};
use wallflux::sim::pty::Pty;

/// A steady slab without source, constant k (Fourier's law, Incropera
/// ch. 3): T(x) = T0 − (q/k) x. With k = 1.5 W/mK, q = 3000 W/m², T0 = 900 °C,
/// L = 0.25 m: shell 400 °C.
const K: f64 = 1.5;
const Q: f64 = 3000.0;
const T0: f64 = 900.0;
const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];

fn temp(depth_mm: f64) -> f64 {
    T0 - Q / K * depth_mm / 1000.0
}

/// Input 2 sends `open` while `OPEN_PROBE` is set.
static MODE: AtomicU8 = AtomicU8::new(0);
const NORMAL: u8 = 0;
const OPEN_PROBE: u8 = 1;

fn feeder(mut pty: Pty, stop: Arc<AtomicBool>) -> std::thread::JoinHandle<()> {
    std::thread::spawn(move || {
        let mut seq = 0u32;
        let mut line = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();
        while !stop.load(Ordering::Relaxed) {
            let mut values: heapless::Vec<(u8, Value), 64> = heapless::Vec::new();
            for (i, d) in DEPTHS_MM.iter().enumerate() {
                let v = if i == 1 && MODE.load(Ordering::Relaxed) == OPEN_PROBE {
                    Value::Open
                } else {
                    Value::Reading {
                        value: (temp(*d) * 100.0).round() / 100.0,
                        unit: Unit::Celsius,
                    }
                };
                let _ = values.push((i as u8 + 1, v));
            }
            line.clear();
            encode_frame(seq, &values, None, &mut line).unwrap();
            let _ = pty.master.write_all(line.as_bytes());
            // Garbage between frames: noise, a bad checksum, an overlong line.
            match seq % 10 {
                3 => drop(pty.master.write_all(b"\x00\xffnoise on the line\r\n")),
                6 => drop(pty.master.write_all(b"#99 1=500.0C *0000\n")),
                8 => {
                    let long = vec![b'7'; 700];
                    let _ = pty.master.write_all(&long);
                    let _ = pty.master.write_all(b"\n");
                }
                _ => {}
            }
            seq = seq.wrapping_add(1);
            std::thread::sleep(Duration::from_millis(100));
        }
    })
}

fn assert_close(v: &serde_json::Value, key: &str, want: f64, rel: f64) {
    let got = v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key} missing in {v}"));
    assert!(
        ((got - want) / want).abs() <= rel,
        "{key} = {got}, want {want} ± {}%",
        rel * 100.0
    );
}

#[test]
fn daemon_end_to_end() {
    let dir = temp_dir("daemon");
    let port = free_port();
    let mut broker = Broker::start(port, &dir);
    let rx = subscribe(port, "wf/test-plant/k1/#");

    let pty = Pty::open().unwrap();
    let cfg = write(
        &dir,
        "wallflux.toml",
        &one_zone_config(&pty.path, port, K, 250.0, &DEPTHS_MM, 1.0),
    );
    let log = dir.join("daemon.log");
    let mut daemon = start_daemon(&cfg, &log);
    let stop = Arc::new(AtomicBool::new(false));
    let feed = feeder(pty, stop.clone());
    let log_text = || std::fs::read_to_string(&log).unwrap_or_default();

    let online = wait_for(&rx, Duration::from_secs(20), "status online", |m| {
        m.topic == "wf/test-plant/k1/status" && m.json["state"] == "online"
    });
    assert_eq!(online.json["schema"], "wallflux.status/1");

    // Zone state: the published numbers against the closed form, within
    // 0.5 % (the feeder rounds temperatures to 0.01 °C).
    let z = wait_for(&rx, Duration::from_secs(20), "an ok zone state", |m| {
        m.topic == "wf/test-plant/k1/zone/wall/state" && m.json["status"] == "ok"
    });
    let v = &z.json;
    assert_close(v, "flux_shell_w_m2", Q, 0.005);
    assert_close(v, "flux_hot_face_w_m2", Q, 0.005);
    assert_close(v, "heat_loss_w", Q * 10.0, 0.005);
    assert_close(v, "hot_face_c", T0, 0.005);
    assert_close(v, "shell_c", temp(250.0), 0.005);
    assert!(
        v["source_w_m3"].as_f64().unwrap().abs() < 0.005 * Q / 0.25,
        "{v}"
    );
    assert_eq!(v["probes"].as_array().unwrap().len(), 4);
    assert_close(&v["probes"][0], "measured_c", temp(20.0), 0.001);
    assert!(v["uncertainty"]["flux_shell_w_m2"].as_f64().unwrap() > 0.0);

    let kiln = wait_for(&rx, Duration::from_secs(20), "kiln state", |m| {
        m.topic == "wf/test-plant/k1/kiln/state"
    });
    assert_close(&kiln.json, "heat_loss_w", Q * 10.0, 0.005);
    assert_eq!(kiln.json["zones_reporting"], 1);
    assert!(kiln.json["energy_total_kwh"].as_f64().unwrap() > 0.0);

    let ch = wait_for(&rx, Duration::from_secs(20), "channel p0", |m| {
        m.topic == "wf/test-plant/k1/channel/p0" && m.json["status"] == "ok"
    });
    assert_close(&ch.json, "celsius", temp(20.0), 0.001);

    // An open thermocouple: flagged on its channel, excluded, zone degraded
    // but still exact with three probes.
    MODE.store(OPEN_PROBE, Ordering::Relaxed);
    wait_for(&rx, Duration::from_secs(20), "channel p1 open", |m| {
        m.topic == "wf/test-plant/k1/channel/p1" && m.json["status"] == "open"
    });
    let z = wait_for(&rx, Duration::from_secs(20), "a degraded zone state", |m| {
        m.topic == "wf/test-plant/k1/zone/wall/state" && m.json["status"] == "degraded"
    });
    assert_eq!(z.json["probes_used"], 3);
    assert_eq!(z.json["probes"][1]["status"], "open");
    assert_close(&z.json, "flux_shell_w_m2", Q, 0.005);
    MODE.store(NORMAL, Ordering::Relaxed);
    wait_for(&rx, Duration::from_secs(20), "zone ok again", |m| {
        m.topic == "wf/test-plant/k1/zone/wall/state" && m.json["status"] == "ok"
    });

    // The broker goes away and comes back: the daemon keeps running,
    // reconnects, says online again and resumes publishing.
    broker.stop();
    std::thread::sleep(Duration::from_millis(1500));
    assert!(
        daemon.try_wait().unwrap().is_none(),
        "daemon exited without a broker:\n{}",
        log_text()
    );
    broker.restart();
    wait_for(
        &rx,
        Duration::from_secs(40),
        "status online after the broker restart",
        |m| m.topic == "wf/test-plant/k1/status" && m.json["state"] == "online",
    );
    let z = wait_for(
        &rx,
        Duration::from_secs(20),
        "zone state after the restart",
        |m| m.topic == "wf/test-plant/k1/zone/wall/state" && m.json["status"] == "ok",
    );
    assert_close(&z.json, "flux_shell_w_m2", Q, 0.005);

    // A subscriber that arrives late gets the retained zone state at once.
    let late = subscribe(port, "wf/test-plant/k1/zone/+/state");
    let r = wait_for(
        &late,
        Duration::from_secs(10),
        "a retained zone state",
        |m| m.retained,
    );
    assert_close(&r.json, "flux_shell_w_m2", Q, 0.005);

    // SIGTERM: `offline` on the status topic and exit 0.
    // SAFETY: kill(2) on our own child's pid.
    unsafe {
        libc::kill(daemon.id() as libc::pid_t, libc::SIGTERM);
    }
    wait_for(&rx, Duration::from_secs(20), "status offline", |m| {
        m.topic == "wf/test-plant/k1/status" && m.json["state"] == "offline"
    });
    let status = daemon.wait().unwrap();
    stop.store(true, Ordering::Relaxed);
    let _ = feed.join();
    let text = log_text();
    assert_eq!(status.code(), Some(0), "{text}");
    // The energy totals were saved on the way out: a few seconds at 30 kW.
    let state_dir = std::fs::read_to_string(&cfg).unwrap();
    let state_dir = state_dir
        .lines()
        .find_map(|l| l.strip_prefix("state_dir = "))
        .unwrap()
        .trim_matches('"');
    let saved: serde_json::Value = serde_json::from_slice(
        &std::fs::read(std::path::Path::new(state_dir).join("energy.json")).unwrap(),
    )
    .unwrap();
    let kwh = saved["total_kwh"].as_f64().unwrap();
    assert!(kwh > 0.0 && kwh < 30.0 * 60.0 / 3600.0, "{kwh} kWh");
    // The garbage was seen and reported, rate-limited: far fewer warnings
    // than bad lines.
    assert!(text.contains("bad line"), "{text}");
    assert!(text.matches("bad line").count() < 10, "{text}");
    assert!(
        text.contains("broker lost") || text.contains("unreachable"),
        "{text}"
    );
}

/// A daemon that dies without a word (SIGKILL, a power cut): the broker
/// publishes its last will, `offline` with the reason and no time.
#[test]
fn abrupt_death_publishes_the_last_will() {
    let dir = temp_dir("daemon-will");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, "wf/test-plant/k1/status");
    let pty = Pty::open().unwrap();
    let cfg = write(
        &dir,
        "wallflux.toml",
        &one_zone_config(&pty.path, port, K, 250.0, &DEPTHS_MM, 1.0),
    );
    let mut daemon = start_daemon(&cfg, &dir.join("daemon.log"));
    wait_for(&rx, Duration::from_secs(20), "online", |m| {
        m.json["state"] == "online"
    });
    daemon.kill().unwrap();
    let _ = daemon.wait();
    let will = wait_for(&rx, Duration::from_secs(20), "last will", |m| {
        m.json["state"] == "offline"
    });
    assert!(
        will.json["reason"].as_str().unwrap().contains("last will"),
        "{}",
        will.json
    );
    assert!(will.json.get("time").is_none());
    drop(pty);
}
