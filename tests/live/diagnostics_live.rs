//! Channel diagnostics through the real serial path: the binary reads a
//! pseudo-terminal, publishes to a real broker. Each fault is injected into
//! a live zone: it is flagged on the channel topic, left out of the fit
//! (the zone degrades, its numbers stay within their uncertainty), and the
//! flag clears when the fault goes. The faults a zone judges from its
//! history (spike, outlier, stuck) are walked through in simulated time in
//! `tests/engine/diagnostics.rs`; here, those a single frame shows.
//!
//! Wall: steady slab without source, constant k (Fourier's law, Incropera
//! ch. 3): T(x) = 900 − (q/k) x with q = 3000 W/m², k = 1.5 W/mK.

use std::sync::{Arc, Mutex};
use std::time::Duration;

use crate::common::feeder::Feeder;
use crate::common::mqtt::{free_port, subscribe, wait_for, Broker, Msg};
use crate::common::*;
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 5] = [20.0, 70.0, 130.0, 190.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";
const Q: f64 = 3000.0;

#[derive(Clone, Copy, PartialEq)]
enum Fault {
    None,
    Open(usize),
    OutOfRange(usize),
    Silent(usize),
}

struct Scene {
    fault: Fault,
}

fn temp(i: usize, t: f64) -> f64 {
    let noise = 0.02 * (t * 1.7 + i as f64 * 2.3).sin();
    900.0 - Q / 1.5 * DEPTHS_MM[i] / 1000.0 + noise
}

fn values(scene: Arc<Mutex<Scene>>) -> crate::common::feeder::Values {
    Arc::new(move |i, t| {
        let v = temp(i, t);
        match scene.lock().unwrap().fault {
            Fault::Open(j) if j == i => None,
            Fault::OutOfRange(j) if j == i => Some(1500.0),
            Fault::Silent(j) if j == i => Some(f64::NAN),
            _ => Some(v),
        }
    })
}

fn channel(m: &Msg, i: usize, status: &str) -> bool {
    m.topic == format!("{ROOT}/channel/p{i}") && m.json["status"] == status
}

fn zone(m: &Msg, status: &str) -> bool {
    m.topic == format!("{ROOT}/zone/wall/state") && m.json["status"] == status
}

/// The zone's shell flux within 3σ of its own uncertainty of the truth.
fn within_uncertainty(m: &Msg) {
    let q = m.json["flux_shell_w_m2"].as_f64().unwrap();
    let s = m.json["uncertainty"]["flux_shell_w_m2"].as_f64().unwrap();
    assert!((q - Q).abs() <= 3.0 * s, "q_shell {q} vs {Q} ± 3×{s}");
}

#[test]
fn each_fault_is_flagged_excluded_and_cleared() {
    let dir = temp_dir("diag-live");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/#"));
    let pty = Pty::open().unwrap();
    let text = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0);
    let cfg = write(&dir, "w.toml", &text);
    let scene = Arc::new(Mutex::new(Scene { fault: Fault::None }));
    let _feed = Feeder::start(pty, DEPTHS_MM.len(), values(scene.clone()));
    let daemon = start_daemon(&cfg, &dir.join("d.log"));
    let long = Duration::from_secs(60);
    let set = |f: Fault| scene.lock().unwrap().fault = f;

    within_uncertainty(&wait_for(&rx, long, "zone ok", |m| zone(m, "ok")));

    // Open thermocouple.
    set(Fault::Open(1));
    wait_for(&rx, long, "p1 open", |m| channel(m, 1, "open"));
    let z = wait_for(&rx, long, "degraded", |m| {
        zone(m, "degraded") && m.json["probes"][1]["status"] == "open"
    });
    assert_eq!(z.json["probes_used"], 4);
    within_uncertainty(&z);
    set(Fault::None);
    wait_for(&rx, long, "p1 ok", |m| channel(m, 1, "ok"));

    // Outside the type's range (K ends at 1372 °C).
    set(Fault::OutOfRange(2));
    wait_for(&rx, long, "p2 out of range", |m| {
        channel(m, 2, "out_of_range")
    });
    within_uncertainty(&wait_for(&rx, long, "degraded", |m| zone(m, "degraded")));
    set(Fault::None);
    wait_for(&rx, long, "p2 ok", |m| channel(m, 2, "ok"));
    wait_for(&rx, long, "zone ok", |m| zone(m, "ok"));

    // Input 4 left out of the frames: stale after three intervals.
    set(Fault::Silent(4));
    wait_for(&rx, long, "p4 stale", |m| channel(m, 4, "stale"));
    set(Fault::None);
    wait_for(&rx, long, "p4 ok", |m| channel(m, 4, "ok"));

    stop_daemon(daemon);
}
