//! A Modbus RTU bus on a pseudo-terminal, with a slave written here (its
//! frames built and checked with CRC-16/MODBUS by hand, independent of the
//! daemon's planner): a unit of signed 0.1 °C input registers whose every
//! fifth reply has a corrupted CRC, a unit of word-swapped f32 holding
//! registers, one that answers every request with exception 02, one that
//! never answers, and one that answers too late, with values no other
//! register holds. The daemon must read the good units exactly, count
//! every fault where it happened, never take the late reply for another
//! request, and publish a zone built on the bus like any other.

use std::io::{Read, Write};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use crate::common::mqtt::{free_port, subscribe, wait_for, Broker};
use crate::common::*;
use wallflux::sim::pty::Pty;

const ROOT: &str = "wf/test-plant/k1";
const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];

/// CRC-16/MODBUS, bit by bit as the serial line spec's appendix gives it
/// (written here again, not taken from the daemon).
fn crc(bytes: &[u8]) -> [u8; 2] {
    let mut c: u16 = 0xFFFF;
    for &b in bytes {
        c ^= b as u16;
        for _ in 0..8 {
            c = if c & 1 == 1 {
                (c >> 1) ^ 0xA001
            } else {
                c >> 1
            };
        }
    }
    c.to_le_bytes()
}

/// The steady wall's temperature at probe `i`, °C.
fn wall_c(i: usize) -> f64 {
    900.0 - 820.0 * DEPTHS_MM[i] / 250.0
}

/// Requests the slave saw, per unit.
#[derive(Default)]
struct Seen {
    unit3: AtomicU64,
    unit11: AtomicU64,
}

/// The slave: answers on the master side of `pty` until the test ends.
fn slave(pty: Pty, seen: Arc<Seen>) {
    slave_until(
        pty,
        seen,
        Arc::new(std::sync::atomic::AtomicBool::new(false)),
    );
}

/// [`slave`] until `unplug` turns true: then both ends of the pty close,
/// as when the adapter is pulled out.
fn slave_until(pty: Pty, seen: Arc<Seen>, unplug: Arc<std::sync::atomic::AtomicBool>) {
    let mut master = pty.master;
    std::thread::spawn(move || {
        let _keep = pty.slave;
        let mut req: Vec<u8> = Vec::new();
        let mut byte = [0u8; 1];
        let mut unit3_replies = 0u64;
        loop {
            match master.read(&mut byte) {
                Ok(1) => req.push(byte[0]),
                // The master side does not block: wait for the next byte.
                Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {
                    if unplug.load(Ordering::Relaxed) {
                        return;
                    }
                    std::thread::sleep(Duration::from_millis(1));
                    continue;
                }
                _ => return,
            }
            if req.len() < 8 {
                continue;
            }
            if crc(&req[..6]) != [req[6], req[7]] {
                req.remove(0); // resynchronise on the next byte
                continue;
            }
            let (unit, function) = (req[0], req[1]);
            let address = u16::from_be_bytes([req[2], req[3]]);
            let count = u16::from_be_bytes([req[4], req[5]]);
            req.clear();
            let regs: Vec<u16> = match (unit, function) {
                (3, 4) => {
                    seen.unit3.fetch_add(1, Ordering::Relaxed);
                    (address..address + count)
                        .map(|a| {
                            let v = (wall_c(a as usize % 4) * 10.0).round() as i16;
                            v as u16
                        })
                        .collect()
                }
                (5, 3) => {
                    // f32 low word first: 1234.5 at 0, -12.25 at 2.
                    let mut all = Vec::new();
                    for v in [1234.5f32, -12.25f32] {
                        let b = v.to_bits();
                        all.push((b & 0xFFFF) as u16);
                        all.push((b >> 16) as u16);
                    }
                    all[address as usize..(address + count) as usize].to_vec()
                }
                (7, f) => {
                    let mut ex = vec![7u8, f | 0x80, 0x02];
                    let c = crc(&ex);
                    ex.extend_from_slice(&c);
                    let _ = master.write_all(&ex);
                    continue;
                }
                (11, 4) => {
                    seen.unit11.fetch_add(1, Ordering::Relaxed);
                    // Too late: after the daemon's 100 ms timeout.
                    std::thread::sleep(Duration::from_millis(160));
                    vec![9999; count as usize]
                }
                // Unit 9 and anything else: silence.
                _ => continue,
            };
            let mut reply = vec![unit, function, (2 * regs.len()) as u8];
            for r in regs {
                reply.extend_from_slice(&r.to_be_bytes());
            }
            let mut c = crc(&reply);
            if unit == 3 {
                unit3_replies += 1;
                if unit3_replies.is_multiple_of(5) {
                    c[0] ^= 0x5A; // a damaged frame
                }
            }
            reply.extend_from_slice(&c);
            let _ = master.write_all(&reply);
        }
    });
}

fn config(pty: &str, port: u16, dir: &std::path::Path) -> String {
    config_of(pty, port, dir, true)
}

/// The bus's configuration; `faulty`: with the channels of the units that
/// fail (else unit 3's alone).
fn config_of(pty: &str, port: u16, dir: &std::path::Path, faulty: bool) -> String {
    let mut s = format!(
        r#"
state_dir = "{}"

[site]
plant = "test-plant"
kiln = "k1"

[mqtt]
host = "127.0.0.1"
port = {port}
client_id = "wallflux-test-{port}"
topic_root = "wf"

[[source]]
name = "bus"
kind = "modbus-rtu"
port = "{pty}"
baud = 19200
poll_ms = 500
timeout_ms = 100
retries = 1
silence_s = 10

[[material]]
name = "slab"
conductivity_w_mk = 1.5
density_kg_m3 = 2000.0
specific_heat_j_kgk = 1000.0
"#,
        dir.join("state").display()
    );
    for i in 0..4 {
        s += &format!(
            "\n[[channel]]\nname = \"p{i}\"\nsource = \"bus\"\nunit_id = 3\nfunction = \"input\"\naddress = {i}\ndata_type = \"i16\"\nscale = 0.1\nopen_values = [32767]\ntype = \"K\"\ntolerance = \"iec-class-1\"\n"
        );
    }
    for (name, unit, function, address, dt) in [
        ("f0", 5, "holding", 0, "f32"),
        ("f1", 5, "holding", 2, "f32"),
        ("x7", 7, "input", 0, "i16"),
        ("x9", 9, "input", 0, "i16"),
        ("late", 11, "input", 0, "i16"),
    ]
    .into_iter()
    .filter(|_| faulty)
    {
        let order = if dt == "f32" {
            "word_order = \"low_first\"\n"
        } else {
            ""
        };
        s += &format!(
            "\n[[channel]]\nname = \"{name}\"\nsource = \"bus\"\nunit_id = {unit}\nfunction = \"{function}\"\naddress = {address}\ndata_type = \"{dt}\"\n{order}type = \"K\"\n"
        );
    }
    s += "\n[[zone]]\nname = \"wall\"\narea_m2 = 10.0\nmodel = \"quadratic\"\ninterval_s = 1.0\nlayers = [{ material = \"slab\", thickness_mm = 250.0 }]\nprobes = [\n";
    for (i, d) in DEPTHS_MM.iter().enumerate() {
        s += &format!("  {{ channel = \"p{i}\", depth_mm = {d} }},\n");
    }
    s += "]\n";
    s
}

#[test]
fn a_bus_with_faulty_units_is_read_exactly_and_its_faults_counted() {
    let dir = temp_dir("modbus-bus");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/#"));
    let pty = Pty::open().unwrap();
    let cfg = write(&dir, "w.toml", &config(&pty.path, port, &dir));
    let check = run(&["check", "--config", cfg.to_str().unwrap()]);
    assert_eq!(
        check.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&check.stderr)
    );
    let seen = Arc::new(Seen::default());
    slave(pty, seen.clone());
    let t0 = Instant::now();
    let daemon = start_daemon(&cfg, &dir.join("d.log"));

    // Exact values from both good units, whatever the faults around them.
    let mut exact = std::collections::BTreeMap::new();
    let deadline = Instant::now() + Duration::from_secs(30);
    while exact.len() < 6 {
        let m = rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .unwrap_or_else(|_| panic!("channel readings: {exact:?}"));
        let Some(name) = m.topic.strip_prefix(&format!("{ROOT}/channel/")) else {
            continue;
        };
        if let Some(c) = m.json["celsius"].as_f64() {
            exact.insert(name.to_string(), c);
        }
        // The late unit's 999.9 must never show up anywhere.
        assert!(
            m.json["celsius"].as_f64() != Some(999.9),
            "a late reply was taken: {name} {}",
            m.json
        );
    }
    for i in 0..4 {
        let want = (wall_c(i) * 10.0).round() / 10.0;
        assert!(
            (exact[&format!("p{i}")] - want).abs() < 1e-9,
            "p{i}: {exact:?}"
        );
    }
    assert_eq!(exact["f0"], 1234.5);
    assert_eq!(exact["f1"], -12.25);

    // A zone built on the bus publishes like any other: hot face 900 °C
    // (the probes' quadratic fit of a linear wall).
    let z = wait_for(&rx, Duration::from_secs(20), "a zone state", |m| {
        m.topic == format!("{ROOT}/zone/wall/state") && m.json["hot_face_c"].is_number()
    });
    let hot = z.json["hot_face_c"].as_f64().unwrap();
    assert!((hot - 900.0).abs() < 0.5, "hot face {hot}");

    // Each unit has its own silent alarm: the one that never answers (and
    // the late one) raised after the bus's silence_s, the good ones not.
    let alarm = |name: &str| format!("{ROOT}/alarm/bus-unit-{name}-silent");
    let raised = wait_for(&rx, Duration::from_secs(30), "unit 9's silent alarm", |m| {
        m.topic == alarm("9") && m.json["active"] == true
    });
    assert_eq!(raised.json["quantity"], "unit_silent");
    assert_eq!(raised.json["source"], "bus");
    // (Its state is retained: a new subscriber gets it at once.)
    let rx3 = subscribe(port, &alarm("3"));
    let good = wait_for(
        &rx3,
        Duration::from_secs(20),
        "unit 3's silent alarm state",
        |m| m.topic == alarm("3"),
    );
    assert_eq!(good.json["active"], false, "{}", good.json);

    // The faults, each counted at its unit, in the status report.
    let st = wait_for(
        &rx,
        Duration::from_secs(70),
        "a status report with bus counters",
        |m| {
            m.topic == format!("{ROOT}/status")
                && m.json["sources"][0]["units"].is_array()
                && m.json["sources"][0]["units"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .any(|u| u["unit"] == 3 && u["crc_errors"].as_u64() > Some(0))
        },
    );
    let units = st.json["sources"][0]["units"].as_array().unwrap();
    let unit = |n: u64| {
        units
            .iter()
            .find(|u| u["unit"] == n)
            .unwrap_or_else(|| panic!("unit {n}: {units:?}"))
    };
    assert!(unit(3)["answers"].as_u64().unwrap() > 0);
    assert_eq!(unit(3)["silent"], false);
    assert!(
        unit(7)["exceptions"][0]["code"] == 2
            && unit(7)["exceptions"][0]["count"].as_u64() > Some(0),
        "{}",
        unit(7)
    );
    assert!(
        unit(9)["timeouts"].as_u64() > Some(0) && unit(9)["silent"] == true,
        "{}",
        unit(9)
    );
    assert_eq!(unit(9)["answers"], 0);
    assert!(unit(11)["timeouts"].as_u64() > Some(0), "{}", unit(11));
    assert_eq!(
        unit(11)["answers"],
        0,
        "the late unit's replies are never taken"
    );
    // The silent units are asked only now and then, so the healthy one
    // keeps its pace: at least half the polls the elapsed time allows
    // (every 500 ms; a generous bound on a busy test machine).
    let polls = t0.elapsed().as_secs_f64() / 0.5;
    let asked = seen.unit3.load(Ordering::Relaxed) as f64;
    assert!(
        asked >= 0.5 * polls,
        "unit 3 asked {asked} times in {polls:.0} polls"
    );
    assert!(
        (seen.unit11.load(Ordering::Relaxed) as f64) < 0.5 * polls,
        "the late unit is asked less once it is silent"
    );
    stop_daemon(daemon);
}

/// `wallflux probe-modbus` on the same slave: the registers raw and
/// decoded; an exception and a unit that never answers said in words, with
/// exit 1.
#[test]
fn probe_modbus_reads_a_unit_once() {
    let pty = Pty::open().unwrap();
    let path = pty.path.clone();
    slave(pty, Arc::new(Seen::default()));
    let probe = |args: &[&str]| {
        let mut all = vec![
            "probe-modbus",
            "--port",
            path.as_str(),
            "--baud",
            "19200",
            "--timeout-ms",
            "100",
        ];
        all.extend_from_slice(args);
        run(&all)
    };
    let ok = probe(&[
        "--unit",
        "3",
        "--address",
        "0",
        "--count",
        "4",
        "--data-type",
        "i16",
    ]);
    assert_eq!(
        ok.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&ok.stderr)
    );
    let out = String::from_utf8(ok.stdout).unwrap();
    // 834.4 °C and 572.0 °C (20 and 100 mm deep) as 0.1 °C registers:
    // 8344 = 0x2098, 5720 = 0x1658.
    assert!(out.contains("0x2098") && out.contains("8344"), "{out}");
    assert!(out.contains("0x1658") && out.contains("5720"), "{out}");
    let f = probe(&[
        "--unit",
        "5",
        "--function",
        "holding",
        "--count",
        "4",
        "--data-type",
        "f32",
        "--word-order",
        "low_first",
    ]);
    let out = String::from_utf8(f.stdout).unwrap();
    assert!(out.contains("1234.5") && out.contains("-12.25"), "{out}");
    let ex = probe(&["--unit", "7"]);
    assert_eq!(ex.status.code(), Some(1));
    let err = String::from_utf8_lossy(&ex.stderr);
    assert!(err.contains("exception 02 (illegal data address"), "{err}");
    let none = probe(&["--unit", "9"]);
    assert_eq!(none.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&none.stderr).contains("did not answer within 100 ms"));
}

/// The adapter pulled out and plugged back (its stable name a symlink, as
/// `/dev/serial/by-id/…` is, pointing at a new device): the bus is lost,
/// said once, reopened, and read again.
#[test]
fn a_bus_unplugged_and_plugged_back_is_read_again() {
    let dir = temp_dir("modbus-replug");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/channel/p0"));
    let link = dir.join("by-id-adapter");
    let first = Pty::open().unwrap();
    // Not inherited by the daemon: a copy of the master there would keep
    // the device alive after the unplug.
    for fd in [&first.master, &first.slave] {
        use std::os::fd::AsRawFd;
        // SAFETY: fcntl(2) on a descriptor this test owns.
        unsafe { libc::fcntl(fd.as_raw_fd(), libc::F_SETFD, libc::FD_CLOEXEC) };
    }
    std::os::unix::fs::symlink(&first.path, &link).unwrap();
    // Only the good unit: its four channels and the zone on them.
    let cfg = write(
        &dir,
        "w.toml",
        &config_of(link.to_str().unwrap(), port, &dir, false),
    );
    let unplug = Arc::new(std::sync::atomic::AtomicBool::new(false));
    slave_until(first, Arc::new(Seen::default()), unplug.clone());
    let log = dir.join("d.log");
    let daemon = start_daemon(&cfg, &log);
    let reading = |what: &str| {
        wait_for(&rx, Duration::from_secs(20), what, |m| {
            m.json["celsius"].is_number()
        })
    };
    reading("p0 before the unplug");

    unplug.store(true, Ordering::Relaxed);
    let deadline = Instant::now() + Duration::from_secs(20);
    while !std::fs::read_to_string(&log)
        .unwrap_or_default()
        .contains("Modbus bus lost")
    {
        assert!(Instant::now() < deadline, "the unplug was not noticed");
        std::thread::sleep(Duration::from_millis(50));
    }
    let second = Pty::open().unwrap();
    std::fs::remove_file(&link).unwrap();
    std::os::unix::fs::symlink(&second.path, &link).unwrap();
    slave(second, Arc::new(Seen::default()));
    let plugged = crate::common::mqtt::now_rfc3339();
    let m = wait_for(&rx, Duration::from_secs(40), "p0 after the replug", |m| {
        m.json["celsius"].is_number()
            && m.json["time"]
                .as_str()
                .is_some_and(|t| t > plugged.as_str())
    });
    assert!(
        (m.json["celsius"].as_f64().unwrap() - 834.4).abs() < 1e-9,
        "{}",
        m.json
    );
    stop_daemon(daemon);
    let text = std::fs::read_to_string(&log).unwrap();
    assert_eq!(text.matches("Modbus bus lost").count(), 1, "{text}");
    assert!(text.matches("Modbus bus open").count() >= 2, "{text}");
}
