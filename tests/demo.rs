//! `wallflux demo` as a user runs it: its embedded broker serves zone
//! states within seconds to any MQTT client, and Ctrl-C ends it with exit 0.

mod common;

use std::process::Stdio;
use std::time::Duration;

use common::mqtt::{free_port, subscribe, wait_for};
use common::*;

#[test]
fn demo_publishes_zone_states_and_stops_cleanly() {
    let port = free_port();
    let mut demo = bin()
        .args([
            "demo",
            "--broker-port",
            &port.to_string(),
            "--speed",
            "2000",
        ])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let rx = subscribe(port, "wallflux/demo-works/shuttle-1/#");
    let z = wait_for(
        &rx,
        Duration::from_secs(30),
        "a side-wall zone state",
        |m| {
            m.topic == "wallflux/demo-works/shuttle-1/zone/side-wall/state"
                && m.json["hot_face_c"].is_number()
        },
    );
    assert_eq!(z.json["model"], "transient");
    // The simulated kiln starts cold: the estimated hot face is near the
    // first set-point of the demo firing (20 °C, rising at 60 °C/h).
    let hot = z.json["hot_face_c"].as_f64().unwrap();
    assert!((0.0..300.0).contains(&hot), "{hot}");
    wait_for(
        &rx,
        Duration::from_secs(30),
        "the door under the quadratic model",
        |m| {
            m.topic == "wallflux/demo-works/shuttle-1/zone/door/state"
                && m.json["model"] == "quadratic"
        },
    );
    // SAFETY: kill(2) on our own child's pid.
    unsafe {
        libc::kill(demo.id() as libc::pid_t, libc::SIGINT);
    }
    assert_eq!(demo.wait().unwrap().code(), Some(0));
}
