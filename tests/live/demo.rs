//! `wallflux demo` as a user runs it: its embedded broker serves zone
//! states within seconds to any MQTT client, and Ctrl-C ends it with exit 0;
//! `demo --config` simulates the configured kiln, each zone at its own
//! set-point, with no silent source at a high speed.

use std::io::{BufRead, BufReader};
use std::process::Stdio;
use std::time::{Duration, Instant};

use crate::common::mqtt::{free_port, subscribe, wait_for};
use crate::common::*;

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
    interrupt(&demo);
    assert_eq!(demo.wait().unwrap().code(), Some(0));
}

/// A kiln of the test's own for `demo --config`: a zone with a long name
/// fired to 1100 °C and a door fired to 550 °C, one box whose silence limit
/// (30 s) is shorter than the demo's usual 10 s scan would allow at speed.
fn two_setpoint_config(port: u16) -> String {
    let mut s = format!(
        r#"
[site]
plant = "test-plant"
kiln = "k2"

[mqtt]
host = "127.0.0.1"
port = {port}
client_id = "wallflux-demo-test-{port}"
topic_root = "wf"

[[source]]
name = "box"
kind = "line"
port = "/dev/null"
silence_s = 30

[[material]]
name = "ifb"
conductivity_w_mk = [[200.0, 0.24], [600.0, 0.29], [1000.0, 0.35], [1400.0, 0.44]]
density_kg_m3 = 780.0
specific_heat_j_kgk = 1000.0
"#
    );
    let zones = [
        ("north-sidewall-lower-course-by-the-burners", 1100.0, 1),
        ("door", 550.0, 11),
    ];
    for (name, setpoint, first_input) in zones {
        let depths = [20, 80, 150, 230];
        let mut probes = String::new();
        for (i, d) in depths.iter().enumerate() {
            s += &format!(
                "[[channel]]\nname = \"{name}-{d}\"\nsource = \"box\"\ninput = {}\ntype = \"K\"\n\n",
                first_input + i
            );
            probes += &format!("  {{ channel = \"{name}-{d}\", depth_mm = {d} }},\n");
        }
        s += &format!(
            r#"[[zone]]
name = "{name}"
area_m2 = 3.0
model = "transient"
interval_s = 60
orientation = "vertical"
height_m = 2.0
emissivity = 0.8
ambient_c = 20
firing_setpoint_c = {setpoint}
layers = [{{ material = "ifb", thickness_mm = 230 }}]
probes = [
{probes}]

"#
        );
    }
    s
}

/// One zone line of the demo's table: where its columns start, and its
/// numbers.
struct TableLine {
    zone: String,
    setpoint_col: usize,
    hot_face_col: usize,
    setpoint_c: f64,
    hot_face_c: Option<f64>,
}

fn number_after(line: &str, label: &str) -> Option<f64> {
    let rest = &line[line.find(label)? + label.len()..];
    rest.split_whitespace().next()?.parse().ok()
}

fn table_line(line: &str) -> Option<TableLine> {
    let char_col = |label: &str| line.find(label).map(|b| line[..b].chars().count());
    Some(TableLine {
        zone: line.split_whitespace().next()?.to_string(),
        setpoint_col: char_col("set-point")?,
        hot_face_col: char_col("hot face")?,
        setpoint_c: number_after(line, "set-point")?,
        hot_face_c: number_after(line, "hot face"),
    })
}

#[test]
fn demo_of_a_configured_kiln_follows_its_setpoints_with_no_silent_source() {
    let port = free_port();
    let dir = temp_dir("demo-config");
    let config = write(&dir, "kiln.toml", &two_setpoint_config(port));
    let alarms = subscribe(port, "wf/test-plant/k2/alarm/#");
    let mut demo = bin()
        .args(["demo", "--config"])
        .arg(&config)
        .args(["--broker-port", &port.to_string(), "--speed", "2880"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let stderr = demo.stderr.take().unwrap();
    let log = std::thread::spawn(move || std::io::read_to_string(stderr).unwrap_or_default());
    let stdout = BufReader::new(demo.stdout.take().unwrap());
    let (lines_tx, lines) = std::sync::mpsc::channel();
    std::thread::spawn(move || {
        for l in stdout.lines().map_while(Result::ok) {
            if lines_tx.send(l).is_err() {
                return;
            }
        }
    });

    // Read the table until the block printed at 6 h of the firing (a
    // bounded wait; at the nominal speed that is 7.5 s).
    let deadline = Instant::now() + Duration::from_secs(120);
    let mut blocks: Vec<(f64, Vec<TableLine>)> = Vec::new();
    while blocks.last().is_none_or(|(t, b)| *t < 6.0 || b.len() < 2) {
        let left = deadline.saturating_duration_since(Instant::now());
        let line = lines
            .recv_timeout(left)
            .expect("the demo's table reaches 6 h of the firing");
        if let Some(t) = line.strip_prefix("t=") {
            let t_h = t.trim().trim_end_matches('h').trim().parse().unwrap();
            blocks.push((t_h, Vec::new()));
        } else if let (Some(row), Some((_, block))) = (table_line(&line), blocks.last_mut()) {
            block.push(row);
        }
    }
    interrupt(&demo);
    assert_eq!(demo.wait().unwrap().code(), Some(0));
    let log = log.join().unwrap();

    // Columns line up under the long zone name, in every block.
    for (t, block) in &blocks {
        assert!(block.len() <= 2, "t = {t} h");
        for row in block {
            assert_eq!(
                (row.setpoint_col, row.hot_face_col),
                (block[0].setpoint_col, block[0].hot_face_col),
                "t = {t} h: {}",
                row.zone
            );
        }
    }
    // Each zone follows its own firing. At 6 h the demo firing has risen
    // 380 K of its 1220 K, so the set-points read 20 + 380 × 1080/1220
    // = 356.4 °C and 20 + 380 × 530/1220 = 185.1 °C; the estimated hot faces
    // are within 10 % of them, and the rises above 20 °C stand in the ratio
    // of the configured set-points (1080/530 = 2.04), within 10 %.
    let (t, last) = blocks.last().unwrap();
    let (long, door) = (&last[0], &last[1]);
    assert_eq!(long.zone, "north-sidewall-lower-course-by-the-burners");
    assert_eq!(door.zone, "door");
    let rise = |t_h: f64, f: f64| 20.0 + f * (400.0 + 100.0 * (t_h - 6.0) - 20.0);
    assert!(
        (long.setpoint_c - rise(*t, 1080.0 / 1220.0)).abs() < 0.15,
        "{t} h: {}",
        long.setpoint_c
    );
    assert!(
        (door.setpoint_c - rise(*t, 530.0 / 1220.0)).abs() < 0.15,
        "{t} h: {}",
        door.setpoint_c
    );
    for row in [long, door] {
        let hot = row.hot_face_c.expect("a hot-face estimate");
        assert!(
            (hot / row.setpoint_c - 1.0).abs() < 0.10,
            "{}: hot face {hot} vs set-point {}",
            row.zone,
            row.setpoint_c
        );
    }
    let ratio = (long.hot_face_c.unwrap() - 20.0) / (door.hot_face_c.unwrap() - 20.0);
    assert!(
        (ratio / (1080.0 / 530.0) - 1.0).abs() < 0.10,
        "ratio {ratio}"
    );

    // The box was never silent: no log line names its alarm, which was
    // published (retained, at start) and only ever in the normal state.
    assert!(
        !log.lines().any(|l| l.contains("box-silent")),
        "{}",
        log.lines()
            .filter(|l| l.contains("box-silent"))
            .collect::<Vec<_>>()
            .join("\n")
    );
    let silent: Vec<_> = alarms
        .try_iter()
        .filter(|m| m.topic.ends_with("/alarm/box-silent"))
        .collect();
    assert!(
        !silent.is_empty(),
        "the box-silent alarm state was published"
    );
    for m in &silent {
        assert_eq!(m.json["state"], "normal", "{}", m.json);
    }
}

/// Ctrl-C to the demo.
fn interrupt(child: &std::process::Child) {
    // SAFETY: kill(2) on our own child's pid.
    unsafe {
        libc::kill(child.id() as libc::pid_t, libc::SIGINT);
    }
}
