//! The cold junction through the real serial path: the binary reads a
//! pseudo-terminal and publishes to a real broker. The box sends one
//! thermocouple as raw EMF (type K, its terminals at 25 °C measured by a
//! `type = "terminal"` sensor on input 5) and three as °C. The terminal
//! sensor opens: the millivolt channel turns `invalid` with the junction's
//! failure as its reason, its thermocouple-fault alarm goes off with that
//! reason, the zone degrades; the sensor returns and so does the channel.
//!
//! Also: the daemon starts on an `energy.json` of the earlier layout (net
//! books with a firing larger than the total) and says so in its log.
//!
//! Wall: steady slab without source, k 1.5 W/(m·K), hot face 900 °C, shell
//! 300 °C at 250 mm (T = 900 − 600 d / 250). The EMF sent for the 20 mm
//! probe is E(852 °C) − E(25 °C) (NIST ITS-90 type K), so compensation with
//! the terminal reading gives back 852 °C.

use std::io::Write;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use crate::common::mqtt::{free_port, subscribe, wait_for, Broker};
use crate::common::*;
use wallflux::acquire::line::{encode_frame, Unit, Value, MAX_LINE_BYTES};
use wallflux::physics::thermocouple::{emf_mv, TcType};
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";
const TERMINALS_C: f64 = 25.0;

fn wall_c(i: usize) -> f64 {
    900.0 - 600.0 * DEPTHS_MM[i] / 250.0
}

/// The box: a frame every 100 ms; the terminal sensor `open` while
/// `terminal_open` is set.
fn feed(
    mut pty: Pty,
    terminal_open: Arc<AtomicBool>,
    stop: Arc<AtomicBool>,
) -> std::thread::JoinHandle<()> {
    std::thread::spawn(move || {
        let mut seq = 0u32;
        let mut line = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();
        let mv = emf_mv(TcType::K, wall_c(0)).unwrap() - emf_mv(TcType::K, TERMINALS_C).unwrap();
        while !stop.load(Ordering::Relaxed) {
            let mut v: heapless::Vec<(u8, Value), 8> = heapless::Vec::new();
            let c = |x: f64| Value::Reading {
                value: x,
                unit: Unit::Celsius,
            };
            let readings = [
                (
                    1,
                    Value::Reading {
                        value: mv,
                        unit: Unit::Millivolts,
                    },
                ),
                (2, c(wall_c(1))),
                (3, c(wall_c(2))),
                (4, c(wall_c(3))),
                (
                    5,
                    if terminal_open.load(Ordering::Relaxed) {
                        Value::Open
                    } else {
                        c(TERMINALS_C)
                    },
                ),
            ];
            for r in readings {
                v.push(r).expect("5 readings fit");
            }
            line.clear();
            if encode_frame(seq, &v, None, &mut line).is_ok() {
                let _ = pty.master.write_all(line.as_bytes());
            }
            seq = seq.wrapping_add(1);
            std::thread::sleep(Duration::from_millis(100));
        }
    })
}

#[test]
fn terminal_sensor_failure_over_the_serial_line() {
    let dir = temp_dir("cj-live");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/#"));
    let pty = Pty::open().unwrap();
    let cfg = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0)
        .replace("silence_s = 5\n", "silence_s = 5\ncj_channel = \"terminals\"\n")
        .replace(
            "name = \"p0\"\nsource = \"box\"\ninput = 1\ntype = \"K\"\n",
            "name = \"p0\"\nsource = \"box\"\ninput = 1\ntype = \"K\"\nsignal = \"millivolts\"\n",
        )
        .replace(
            "[[zone]]",
            "[[channel]]\nname = \"terminals\"\nsource = \"box\"\ninput = 5\ntype = \"terminal\"\n\n[[alarm]]\nname = \"p0-fault\"\non_delay_s = 0.0\n\n[[zone]]",
        );
    assert!(cfg.contains("signal = \"millivolts\""), "{cfg}");
    let state_dir = cfg
        .lines()
        .find_map(|l| l.strip_prefix("state_dir = "))
        .unwrap()
        .trim_matches('"')
        .to_string();
    let _ = std::fs::remove_dir_all(&state_dir);
    std::fs::create_dir_all(&state_dir).unwrap();
    // The earlier layout: no `format`, net books, a firing under way that is
    // larger than the total.
    std::fs::write(
        std::path::Path::new(&state_dir).join("energy.json"),
        br#"{"day":1,"today_kwh":0.0,"yesterday_kwh":0.0,"total_kwh":4.0,"firing_started":1700000000.0,"firing_kwh":9.0,"last_firing_kwh":null,"last_firing_hours":null}"#,
    )
    .unwrap();
    let cfg = write(&dir, "wallflux.toml", &cfg);
    let check = run(&["check", "--config", cfg.to_str().unwrap()]);
    assert_eq!(
        check.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&check.stderr)
    );

    let terminal_open = Arc::new(AtomicBool::new(false));
    let stop = Arc::new(AtomicBool::new(false));
    let feeder = feed(pty, terminal_open.clone(), stop.clone());
    let log = dir.join("daemon.log");
    let daemon = start_daemon(&cfg, &log);
    let channel = |name: &'static str, status: &'static str| {
        move |m: &crate::common::mqtt::Msg| {
            m.topic == format!("{ROOT}/channel/{name}") && m.json["status"] == status
        }
    };

    let p0 = wait_for(&rx, Duration::from_secs(20), "p0 ok", channel("p0", "ok"));
    let t = p0.json["celsius"].as_f64().unwrap();
    assert!((t - 852.0).abs() < 0.1, "compensated {t} °C vs 852");
    let term = wait_for(
        &rx,
        Duration::from_secs(10),
        "terminals ok",
        channel("terminals", "ok"),
    );
    assert_eq!(term.json["type"], "terminal");
    let kiln = wait_for(&rx, Duration::from_secs(10), "kiln state", |m| {
        m.topic == format!("{ROOT}/kiln/state")
    });
    let total = kiln.json["energy_total_kwh"].as_f64().unwrap();
    let firing = kiln.json["energy_firing_kwh"].as_f64().unwrap();
    assert!(
        firing <= total && total >= 9.0,
        "firing {firing} total {total}"
    );
    assert_eq!(kiln.json["operation"], "periodic");

    // The terminal sensor opens.
    terminal_open.store(true, Ordering::Relaxed);
    let p0 = wait_for(
        &rx,
        Duration::from_secs(10),
        "p0 invalid",
        channel("p0", "invalid"),
    );
    let reason = p0.json["reason"].as_str().unwrap();
    assert!(
        reason.contains("cold-junction (terminal) sensor open"),
        "{reason}"
    );
    assert!(p0.json["celsius"].is_null());
    wait_for(
        &rx,
        Duration::from_secs(10),
        "terminals open",
        channel("terminals", "open"),
    );
    let alarm = wait_for(&rx, Duration::from_secs(15), "p0-fault", |m| {
        m.topic == format!("{ROOT}/alarm/p0-fault") && m.json["state"] == "unacknowledged"
    });
    assert_eq!(alarm.json["reason"], reason, "{}", alarm.json);
    let ev = wait_for(&rx, Duration::from_secs(5), "p0-fault event", |m| {
        m.topic == format!("{ROOT}/events")
            && m.json["alarm"] == "p0-fault"
            && m.json["cause"] == "activated"
    });
    assert_eq!(ev.json["reason"], reason);
    let zone = wait_for(&rx, Duration::from_secs(10), "zone on three probes", |m| {
        m.topic == format!("{ROOT}/zone/wall/state") && m.json["probes_used"] == 3
    });
    assert_ne!(zone.json["status"], "ok");

    // Back: compensated again.
    terminal_open.store(false, Ordering::Relaxed);
    let p0 = wait_for(
        &rx,
        Duration::from_secs(10),
        "p0 ok again",
        channel("p0", "ok"),
    );
    assert!((p0.json["celsius"].as_f64().unwrap() - 852.0).abs() < 0.1);

    stop_daemon(daemon);
    stop.store(true, Ordering::Relaxed);
    let _ = feeder.join();
    let text = std::fs::read_to_string(&log).unwrap();
    assert!(
        text.contains("energy totals from an earlier version"),
        "{text}"
    );
    let saved = saved_energy(std::path::Path::new(&state_dir));
    assert!(
        !std::path::Path::new(&state_dir)
            .join("energy.json")
            .exists(),
        "the file of the earlier version gives way to the database"
    );
    assert_eq!(saved["format"], 2);
    assert!(saved["firing_kwh"].as_f64().unwrap() <= saved["total_kwh"].as_f64().unwrap());
}
