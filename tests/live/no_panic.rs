//! No command line path ends in a panic (exit 101) or a crash: every
//! subcommand with bad and edge inputs exits with a code of its own and says
//! something useful; a closed stdout ends `check` and `tc` quietly (exit 0)
//! and `analyze` with one line (exit 1). `run`, `demo` and `broker` keep
//! running: they get a bounded life, then SIGINT (then SIGKILL), and what
//! they printed is checked for a panic. Nothing here asserts a duration.

use std::process::{ExitStatus, Output, Stdio};
use std::time::{Duration, Instant};

use crate::common::mqtt::free_port;
use crate::common::*;

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

/// Runs to the end; asserts no panic, and that a failure says why.
fn ends_well(args: &[&str]) -> Output {
    let o = run(args);
    let err = text(&o.stderr);
    assert!(
        o.status.code().is_some(),
        "{args:?}: killed by a signal: {err}"
    );
    assert_ne!(o.status.code(), Some(101), "{args:?}: {err}");
    assert!(!err.contains("panicked"), "{args:?}: {err}");
    if o.status.code() != Some(0) {
        assert!(!err.trim().is_empty(), "{args:?}: failed without a word");
    }
    o
}

/// Runs with stdout a pipe whose reader is already gone.
fn closed_stdout(args: &[&str]) -> Output {
    let (reader, writer) = std::io::pipe().unwrap();
    drop(reader);
    bin()
        .args(args)
        .stdout(Stdio::from(writer))
        .stderr(Stdio::piped())
        .output()
        .unwrap()
}

/// A long-running command: at most `life`, then SIGINT, then SIGKILL.
/// Returns its status if it ended by itself or on SIGINT, and its stderr.
fn bounded(args: &[&str], life: Duration) -> (Option<ExitStatus>, String) {
    let dir = temp_dir("no-panic-bounded");
    let log = dir.join(format!("{}.log", args[0]));
    let mut child = bin()
        .args(args)
        .stdout(Stdio::null())
        .stderr(std::fs::File::create(&log).unwrap())
        .spawn()
        .unwrap();
    let wait = |child: &mut std::process::Child, d: Duration| {
        let end = Instant::now() + d;
        loop {
            if let Some(s) = child.try_wait().unwrap() {
                return Some(s);
            }
            if Instant::now() > end {
                return None;
            }
            std::thread::sleep(Duration::from_millis(50));
        }
    };
    let mut status = wait(&mut child, life);
    if status.is_none() {
        // SAFETY: kill(2) on our own child's pid.
        unsafe {
            libc::kill(child.id() as libc::pid_t, libc::SIGINT);
        }
        status = wait(&mut child, Duration::from_secs(15));
    }
    if status.is_none() {
        let _ = child.kill();
        let _ = child.wait();
    }
    let err = std::fs::read_to_string(&log).unwrap_or_default();
    if let Some(s) = status {
        assert_ne!(s.code(), Some(101), "{args:?}: {err}");
        assert!(s.code().is_some(), "{args:?}: ended by a signal: {err}");
    }
    assert!(!err.contains("panicked"), "{args:?}: {err}");
    (status, err)
}

fn good_config(dir: &std::path::Path, mqtt_port: u16) -> (String, std::path::PathBuf) {
    let text = one_zone_config(
        "/dev/null",
        mqtt_port,
        1.5,
        250.0,
        &[20.0, 100.0, 180.0, 250.0],
        1.0,
    );
    let path = write(dir, "good.toml", &text);
    (text, path)
}

const SAMPLES: &str = "time,channel,value\n\
    2026-01-01T00:00:00Z,p0,400\n2026-01-01T00:00:00Z,p1,300\n2026-01-01T00:00:00Z,p2,200\n2026-01-01T00:00:00Z,p3,100\n\
    2026-01-01T00:00:05Z,p0,400\n2026-01-01T00:00:05Z,p1,300\n2026-01-01T00:00:05Z,p2,200\n2026-01-01T00:00:05Z,p3,100\n\
    2026-01-01T00:00:30Z,p0,401\n2026-01-01T00:00:30Z,p1,300\n2026-01-01T00:00:30Z,p2,200\n2026-01-01T00:00:30Z,p3,100\n";

#[test]
fn closed_stdout_ends_quietly() {
    let dir = temp_dir("no-panic-pipe");
    let (_, cfg) = good_config(&dir, 1883);
    let cfg = cfg.to_str().unwrap();
    for args in [
        vec!["check", "--config", cfg],
        vec!["tc", "--type", "K", "--celsius", "500"],
        vec!["tc", "--type", "K", "--mv", "20.644", "--json"],
    ] {
        let o = closed_stdout(&args);
        assert_eq!(o.status.code(), Some(0), "{args:?}: {}", text(&o.stderr));
        assert!(o.stderr.is_empty(), "{args:?}: {}", text(&o.stderr));
    }
    let samples = write(&dir, "s.csv", SAMPLES);
    let o = closed_stdout(&[
        "analyze",
        "--config",
        cfg,
        "--samples",
        samples.to_str().unwrap(),
    ]);
    let err = text(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("broken pipe"), "{err}");
}

#[test]
fn usage_and_global_options() {
    for args in [
        &[][..],
        &["--help"],
        &["--version"],
        &["frobnicate"],
        &["check"],
        &["check", "--config"],
        &["--log-format", "xml", "tc", "--type", "K", "--celsius", "1"],
        &["--log-level", "[[[", "tc", "--type", "K", "--celsius", "1"],
        &[
            "--log-level",
            "wallflux=trace,,=",
            "tc",
            "--type",
            "K",
            "--celsius",
            "1",
        ],
        &["demo", "--speed", "1e-300"],
        &["demo", "--speed", "0"],
        &["demo", "--speed", "-5"],
        &["demo", "--speed", "nan"],
        &["demo", "--speed", "inf"],
        &["demo", "--speed", "1e300"],
        &["demo", "--speed", "fast"],
        &["demo", "--broker-port", "70000"],
        &["demo", "--config", "/nonexistent.toml"],
        &["run", "--config", "/nonexistent.toml"],
        &["broker", "--port", "-1"],
    ] {
        let o = ends_well(args);
        let code = o.status.code();
        match args.first().copied() {
            None | Some("frobnicate") => assert_eq!(code, Some(2), "{args:?}"),
            Some("--help" | "--version") => assert_eq!(code, Some(0)),
            Some("demo" | "run" | "broker" | "check") => assert_eq!(code, Some(2), "{args:?}"),
            _ => {}
        }
    }
    let o = ends_well(&["demo", "--speed", "1e-300"]);
    assert!(
        text(&o.stderr).contains("0.01 to 100000"),
        "{}",
        text(&o.stderr)
    );
}

#[test]
fn tc_edge_values() {
    for t in ["K", "k", "", "KK", "Z", "terminal", "B", "R"] {
        for v in [
            "nan", "inf", "-inf", "1e308", "-1e308", "-273.15", "-300", "0", "2000",
        ] {
            ends_well(&["tc", "--type", t, "--celsius", v]);
            ends_well(&["tc", "--type", t, "--mv", v, "--json"]);
            ends_well(&["tc", "--type", t, "--mv", "1.0", "--cj-c", v]);
        }
    }
    let o = ends_well(&["tc", "--type", "K", "--celsius", "nan"]);
    assert_eq!(o.status.code(), Some(2));
    // A huge number is written short, not as 309 digits.
    let o = ends_well(&["tc", "--type", "K", "--mv", "1.0", "--cj-c", "1e308"]);
    let err = text(&o.stderr);
    assert_eq!(o.status.code(), Some(2));
    assert!(
        err.contains("cold junction at 1e308 °C") && err.len() < 200,
        "{err}"
    );
    ends_well(&["tc", "--type", "K"]);
    ends_well(&["tc", "--type", "K", "--celsius", "1", "--mv", "1"]);
    ends_well(&["tc", "--type", "K", "--celsius", "1", "--cj-c", "1"]);
}

/// Every numeric key of a one-zone file set to an edge value: `check`
/// accepts or refuses it without a panic, and what it accepts also goes
/// through `analyze` without one.
#[test]
fn check_and_analyze_with_edge_values_in_every_numeric_key() {
    let dir = temp_dir("no-panic-keys");
    let (good, _) = good_config(&dir, 1883);
    let samples = write(&dir, "s.csv", SAMPLES);
    let numeric: Vec<usize> = good
        .lines()
        .enumerate()
        .filter(|(_, l)| {
            l.split_once(" = ")
                .is_some_and(|(_, v)| v.trim().parse::<f64>().is_ok())
        })
        .map(|(i, _)| i)
        .collect();
    assert!(numeric.len() >= 8, "{numeric:?}");
    let mut accepted = 0;
    for &i in &numeric {
        for v in [
            "nan", "inf", "-inf", "1e308", "-1e308", "0", "-1", "1e-300", "4e9",
        ] {
            let text: String = good
                .lines()
                .enumerate()
                .map(|(j, l)| {
                    if j == i {
                        format!("{} = {v}\n", l.split_once(" = ").unwrap().0)
                    } else {
                        format!("{l}\n")
                    }
                })
                .collect();
            let cfg = write(&dir, "edge.toml", &text);
            let cfg = cfg.to_str().unwrap();
            let o = ends_well(&["check", "--config", cfg]);
            let code = o.status.code();
            assert!(matches!(code, Some(0 | 2)), "{text}");
            if code == Some(2) {
                // Refused with the key's line.
                assert!(
                    text_has_line(&o, i + 1),
                    "line {}: {}",
                    i + 1,
                    self::text(&o.stderr)
                );
            } else {
                accepted += 1;
                ends_well(&[
                    "analyze",
                    "--config",
                    cfg,
                    "--samples",
                    samples.to_str().unwrap(),
                ]);
            }
        }
    }
    assert!(accepted > 0);
}

fn text_has_line(o: &Output, line: usize) -> bool {
    text(&o.stderr).contains(&format!("edge.toml:{line}:"))
}

#[test]
fn check_bad_files() {
    let dir = temp_dir("no-panic-files");
    let (good, _) = good_config(&dir, 1883);
    let deep = format!("x = {}{}\n", "[".repeat(5000), "]".repeat(5000));
    let deep_table = format!("{good}\n{}\n", "a.".repeat(3000) + "b = 1");
    let garbage: Vec<u8> = (0..4096u32)
        .map(|i| (i.wrapping_mul(2_654_435_761) >> 13) as u8)
        .collect();
    let cases: Vec<(&str, Vec<u8>)> = vec![
        ("empty.toml", vec![]),
        ("garbage.toml", garbage),
        ("deep.toml", deep.into_bytes()),
        ("deep-table.toml", deep_table.into_bytes()),
        ("nul.toml", b"[site]\nplant = \"a\0b\"\n".to_vec()),
        (
            "bom.toml",
            [b"\xef\xbb\xbf".as_slice(), good.as_bytes()].concat(),
        ),
        (
            "zone-empty.toml",
            format!("{good}\n[[zone]]\n").into_bytes(),
        ),
        (
            "types.toml",
            good.replace("area_m2 = 10.0", "area_m2 = \"ten\"")
                .into_bytes(),
        ),
        (
            "probes-one-depth.toml",
            good.replace("depth_mm = 100", "depth_mm = 20")
                .replace("depth_mm = 180", "depth_mm = 20")
                .replace("depth_mm = 250", "depth_mm = 20")
                .into_bytes(),
        ),
    ];
    for (name, bytes) in cases {
        let p = dir.join(name);
        std::fs::write(&p, bytes).unwrap();
        let o = ends_well(&["check", "--config", p.to_str().unwrap()]);
        // A byte-order mark in front of a good file is harmless.
        let expect = if name == "bom.toml" { 0 } else { 2 };
        assert_eq!(o.status.code(), Some(expect), "{name}: {}", text(&o.stderr));
    }
    let d = dir.to_str().unwrap();
    assert_eq!(ends_well(&["check", "--config", d]).status.code(), Some(2));
}

#[test]
fn analyze_bad_samples() {
    let dir = temp_dir("no-panic-samples");
    let (_, cfg) = good_config(&dir, 1883);
    let cfg = cfg.to_str().unwrap();
    let rows = [
        "",
        "time,channel,value\n",
        "time,channel\n1,p0\n",
        "time,channel,value\n99999999999999999999,p0,100\n99999999999999999999,p1,90\n",
        "time,channel,value\n-62167219200,p0,100\n-62167219200,p1,90\n",
        "time,channel,value\n9999-12-31T23:59:59Z,p0,100\n9999-12-31T23:59:59Z,p1,90\n",
        "time,channel,value\n2026-01-01T00:00:00Z,p0,nan\n2026-01-01T00:00:00Z,p1,inf\n2026-01-01T00:00:01Z,p2,1e308\n2026-01-01T00:00:02Z,p3,-1e308\n",
        "time,channel,value\n2026-01-01T00:00:10Z,p0,100\n2026-01-01T00:00:00Z,p0,100\n",
        "time,channel,value\n2026-01-01T00:00:00Z,p0,open\n2026-01-01T00:00:00Z,box.cj,1e308\n2026-01-01T00:00:00Z,,\n,,\n\u{feff},x,y\n",
        "\u{0}\u{1}\u{2}garbage\n",
    ];
    for (i, r) in rows.iter().enumerate() {
        let s = write(&dir, &format!("s{i}.csv"), r);
        ends_well(&["analyze", "--config", cfg, "--samples", s.to_str().unwrap()]);
    }
    ends_well(&["analyze", "--config", cfg, "--samples", "/nonexistent.csv"]);
    ends_well(&[
        "analyze",
        "--config",
        cfg,
        "--samples",
        dir.to_str().unwrap(),
    ]);
}

/// The long-running commands, each for a bounded life.
#[test]
fn long_running_commands_do_not_panic() {
    let dir = temp_dir("no-panic-long");
    // An MQTT port where nothing listens: the daemon keeps retrying.
    let (_, cfg) = good_config(&dir, free_port());
    let cfg = cfg.to_str().unwrap();
    let (status, err) = bounded(&["run", "--config", cfg], Duration::from_secs(3));
    if let Some(s) = status {
        assert!(matches!(s.code(), Some(0 | 1)), "{err}");
    }
    let port = free_port().to_string();
    let (status, err) = bounded(
        &["demo", "--broker-port", &port, "--speed", "100000"],
        Duration::from_secs(5),
    );
    if let Some(s) = status {
        assert_eq!(s.code(), Some(0), "{err}");
    }
    let port = free_port().to_string();
    bounded(&["broker", "--port", &port], Duration::from_secs(1));
}
