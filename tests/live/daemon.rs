//! The daemon end to end through the real binary: a pseudo-terminal as its
//! serial port, a real MQTT broker, a subscriber that checks the published
//! numbers; garbage on the line, an open thermocouple, the broker stopped and
//! restarted, SIGTERM. `WALLFLUX_TEST_BROKER=mosquitto` runs it against
//! mosquitto (as CI does); otherwise the embedded broker is used.

use std::io::Write;
use std::sync::atomic::{AtomicBool, AtomicU8, Ordering};
use std::sync::Arc;
use std::time::Duration;

use crate::common::mqtt::{free_port, subscribe, wait_for, Broker};
use crate::common::*;
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
    let lost = std::time::Instant::now();
    while !log_text().contains("MQTT broker lost") {
        assert!(
            lost.elapsed() < Duration::from_secs(20),
            "no broker-lost line in the log:\n{}",
            log_text()
        );
        std::thread::sleep(Duration::from_millis(50));
    }
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
    let saved = saved_energy(std::path::Path::new(state_dir));
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

/// The hot face of the replay scenario at `t` s after the feed began: 700 °C,
/// 900 °C from 4 s to 9 s (the shell passes the 350 °C touch limit), then
/// 700 °C again, with a slow drift so that the rates are not zero.
fn scenario_hot_face_c(t: f64) -> f64 {
    let base = if (4.0..9.0).contains(&t) {
        900.0
    } else {
        700.0
    };
    base + 3.0 * t
}

/// What the daemon published on `topic` (`zone/wall/state`, `kiln/state`,
/// `events`), in order.
fn published<'a>(msgs: &'a [crate::common::mqtt::Msg], topic: &str) -> Vec<&'a serde_json::Value> {
    let topic = format!("wf/test-plant/k1/{topic}");
    msgs.iter()
        .filter(|m| m.topic == topic && !m.retained)
        .map(|m| &m.json)
        .collect()
}

/// `analyze` equals live: the scans the daemon handled (its own recording,
/// `run --record`) replayed by `analyze --outputs all` give the very zone
/// states, kiln states and alarm events the daemon published over MQTT,
/// field for field. The scenario moves the hot face (a linear slab,
/// 2000 K/m: shell = hot face − 500 K) across the shell-touch limit and
/// back, so that there are spikes held back, an activation and a return.
#[test]
fn analyze_replays_what_the_daemon_published() {
    let dir = temp_dir("daemon-replay");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, "wf/test-plant/k1/#");
    let pty = Pty::open().unwrap();
    let mut cfg = one_zone_config(&pty.path, port, K, 250.0, &DEPTHS_MM, 1.0);
    cfg += "\n[[alarm]]\nname = \"wall-shell-touch\"\nsetpoint = 350.0\ndeadband = 5.0\non_delay_s = 0.0\n";
    let cfg = write(&dir, "wallflux.toml", &cfg);
    let recording = dir.join("recording.csv");
    let mut daemon = bin()
        .args(["run", "--config", cfg.to_str().unwrap(), "--record"])
        .arg(&recording)
        .stdout(std::process::Stdio::null())
        .stderr(std::fs::File::create(dir.join("daemon.log")).unwrap())
        .spawn()
        .unwrap();
    wait_for(&rx, Duration::from_secs(20), "status online", |m| {
        m.topic == "wf/test-plant/k1/status" && m.json["state"] == "online"
    });
    let mut master = pty.master;
    let begun = std::time::Instant::now();
    let mut line = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();
    for seq in 0u32.. {
        let t = begun.elapsed().as_secs_f64();
        if t > 13.0 {
            break;
        }
        let hot = scenario_hot_face_c(t);
        let mut values: heapless::Vec<(u8, Value), 64> = heapless::Vec::new();
        for (i, d) in DEPTHS_MM.iter().enumerate() {
            let v = Value::Reading {
                value: ((hot - 2000.0 * d / 1000.0) * 100.0).round() / 100.0,
                unit: Unit::Celsius,
            };
            values.push((i as u8 + 1, v)).unwrap();
        }
        line.clear();
        encode_frame(seq, &values, None, &mut line).unwrap();
        master.write_all(line.as_bytes()).unwrap();
        std::thread::sleep(Duration::from_millis(100));
    }
    // SIGTERM: everything queued is published before `offline`.
    // SAFETY: kill(2) on our own child's pid.
    unsafe {
        libc::kill(daemon.id() as libc::pid_t, libc::SIGTERM);
    }
    let mut live = Vec::new();
    loop {
        let m = rx
            .recv_timeout(Duration::from_secs(20))
            .expect("status offline");
        let offline = m.topic == "wf/test-plant/k1/status" && m.json["state"] == "offline";
        live.push(m);
        if offline {
            break;
        }
    }
    assert_eq!(daemon.wait().unwrap().code(), Some(0));

    let o = run(&[
        "analyze",
        "--config",
        cfg.to_str().unwrap(),
        "--samples",
        recording.to_str().unwrap(),
        "--outputs",
        "all",
    ]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let replay: Vec<serde_json::Value> = String::from_utf8_lossy(&o.stdout)
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let of_kind = |kind: &str| -> Vec<&serde_json::Value> {
        replay
            .iter()
            .filter(|l| l["kind"] == kind)
            .map(|l| &l["output"])
            .collect()
    };
    // The last recorded scan: after it the daemon ran on without readings
    // (and the replay closes its partial interval), so the comparison ends
    // there.
    let text = std::fs::read_to_string(&recording).unwrap();
    let last_s: f64 = text
        .lines()
        .last()
        .and_then(|l| l.split(',').next())
        .and_then(|t| t.parse().ok())
        .unwrap();
    // Times are published to the millisecond: the replay's last, partial
    // state at `last_s` may read up to 0.5 ms earlier.
    let before_end = |v: &&serde_json::Value| {
        let t = wallflux::time::Timestamp::parse(v["time"].as_str().unwrap()).unwrap();
        t.epoch_s() < last_s - 0.002
    };
    let alarm_events = |v: Vec<&serde_json::Value>| -> Vec<serde_json::Value> {
        v.into_iter()
            .filter(|e| e["type"] == "alarm")
            .filter(before_end)
            .cloned()
            .collect()
    };
    for (topic, kind) in [
        ("zone/wall/state", "zone_state"),
        ("kiln/state", "kiln_state"),
    ] {
        let want: Vec<_> = published(&live, topic)
            .into_iter()
            .filter(before_end)
            .collect();
        let got: Vec<_> = of_kind(kind).into_iter().filter(before_end).collect();
        assert!(want.len() >= 10, "{topic}: {} live states", want.len());
        let times = |v: &[&serde_json::Value]| -> Vec<String> {
            v.iter().map(|s| s["time"].to_string()).collect()
        };
        assert_eq!(
            times(&got),
            times(&want),
            "{topic}: the replay's times and the live ones"
        );
        for (g, w) in got.iter().zip(&want) {
            assert_eq!(g, w, "{topic}");
        }
    }
    let want = alarm_events(published(&live, "events"));
    let got = alarm_events(of_kind("alarm_event"));
    let touch: Vec<_> = want
        .iter()
        .filter(|e| e["alarm"] == "wall-shell-touch")
        .map(|e| e["cause"].as_str().unwrap())
        .collect();
    assert_eq!(touch, ["activated", "returned"], "{want:?}");
    assert_eq!(got, want);
}
