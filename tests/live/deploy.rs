//! The systemd side: the unit file's directives (and `systemd-analyze
//! verify` where it is installed), and the daemon's readiness, watchdog and
//! stopping messages caught on a notify socket the test makes itself.

use std::os::unix::net::UnixDatagram;
use std::process::Stdio;
use std::time::{Duration, Instant};

use crate::common::mqtt::free_port;
use crate::common::*;

const UNIT: &str = include_str!("../../deploy/wallflux.service");

/// The value(s) of `key` in the unit file (uncommented lines).
fn directive<'a>(key: &str) -> Vec<&'a str> {
    UNIT.lines()
        .filter_map(|l| l.strip_prefix(key)?.strip_prefix('='))
        .collect()
}

#[test]
fn the_unit_is_hardened_supervised_and_verifies() {
    for (key, want) in [
        ("Type", "notify"),
        ("WatchdogSec", "30"),
        ("Restart", "on-failure"),
        ("RestartPreventExitStatus", "2"),
        ("DynamicUser", "yes"),
        ("SupplementaryGroups", "dialout"),
        ("StateDirectory", "wallflux"),
        ("ConfigurationDirectory", "wallflux"),
        ("UMask", "0077"),
        ("NoNewPrivileges", "yes"),
        ("ProtectSystem", "strict"),
        ("ProtectHome", "yes"),
        ("PrivateTmp", "yes"),
        ("ProtectKernelTunables", "yes"),
        ("ProtectKernelModules", "yes"),
        ("ProtectKernelLogs", "yes"),
        ("ProtectControlGroups", "yes"),
        ("ProtectClock", "yes"),
        ("RestrictAddressFamilies", "AF_UNIX AF_INET AF_INET6"),
        ("RestrictNamespaces", "yes"),
        ("LockPersonality", "yes"),
        ("MemoryDenyWriteExecute", "yes"),
        ("SystemCallFilter", "@system-service"),
        ("CapabilityBoundingSet", ""),
        ("DevicePolicy", "closed"),
    ] {
        assert_eq!(directive(key), [want], "{key}");
    }
    // Serial devices allowed; the device list hidden never.
    let allowed = directive("DeviceAllow");
    assert!(
        allowed.contains(&"char-ttyUSB rw") && allowed.contains(&"char-ttyACM rw"),
        "{allowed:?}"
    );
    assert!(directive("PrivateDevices").is_empty());
    // The credential for a broker password, named as the docs name it.
    assert!(UNIT.contains("LoadCredential=mqtt-password:/etc/wallflux/mqtt-password"));
    assert!(directive("After")[0].contains("time-sync.target"));

    // systemd's own check, on the unit pointed at the built binary.
    if std::process::Command::new("systemd-analyze")
        .arg("--version")
        .output()
        .is_err()
    {
        eprintln!("systemd-analyze not installed: its check skipped");
        return;
    }
    let dir = temp_dir("deploy-verify");
    let unit = UNIT.replace("/usr/local/bin/wallflux", env!("CARGO_BIN_EXE_wallflux"));
    let path = write(&dir, "wallflux.service", &unit);
    let out = std::process::Command::new("systemd-analyze")
        .arg("verify")
        .arg(&path)
        .output()
        .unwrap();
    let said =
        String::from_utf8_lossy(&out.stderr).into_owned() + &String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success() && said.trim().is_empty(), "{said}");
}

#[test]
fn readiness_watchdog_and_stopping_reach_systemd() {
    let dir = temp_dir("deploy-notify");
    let socket_path = dir.join("notify.sock");
    let socket = UnixDatagram::bind(&socket_path).unwrap();
    socket
        .set_read_timeout(Some(Duration::from_millis(200)))
        .unwrap();
    let pty = wallflux::sim::pty::Pty::open().unwrap();
    let port = free_port(); // no broker: readiness does not wait for one
    let cfg = write(
        &dir,
        "w.toml",
        &one_zone_config(&pty.path, port, 1.5, 250.0, &[20.0, 100.0, 250.0], 1.0),
    );
    let child = bin()
        .args(["run", "--config", cfg.to_str().unwrap()])
        .env("NOTIFY_SOCKET", &socket_path)
        // 1 s: fed every 0.5 s.
        .env("WATCHDOG_USEC", "1000000")
        .stdout(Stdio::null())
        .stderr(std::fs::File::create(dir.join("d.log")).unwrap())
        .spawn()
        .unwrap();
    let daemon = Daemon(child);
    let mut got: Vec<String> = Vec::new();
    let recv_until = |got: &mut Vec<String>, done: &dyn Fn(&[String]) -> bool, what: &str| {
        let deadline = Instant::now() + Duration::from_secs(20);
        let mut buf = [0u8; 512];
        while !done(got) {
            assert!(Instant::now() < deadline, "{what}: got {got:?}");
            if let Ok(n) = socket.recv(&mut buf) {
                got.push(String::from_utf8_lossy(&buf[..n]).into_owned());
            }
        }
    };
    recv_until(
        &mut got,
        &|g| g.iter().any(|m| m.contains("READY=1")),
        "READY=1",
    );
    assert!(
        got[0].contains("READY=1") && got[0].contains("STATUS=monitoring"),
        "{got:?}"
    );
    recv_until(
        &mut got,
        &|g| g.iter().filter(|m| m.trim() == "WATCHDOG=1").count() >= 3,
        "WATCHDOG=1 three times",
    );
    stop_daemon(daemon);
    let mut buf = [0u8; 512];
    let mut stopping = false;
    while let Ok(n) = socket.recv(&mut buf) {
        stopping |= String::from_utf8_lossy(&buf[..n]).contains("STOPPING=1");
    }
    assert!(stopping, "STOPPING=1 at a clean stop");
}

/// SIGHUP checks the configuration file again and says so, keeping the
/// running configuration; the daemon is not ended by it (and a SIGTERM
/// after still stops it cleanly).
#[test]
fn a_hangup_checks_the_file_and_keeps_running() {
    let dir = temp_dir("deploy-hup");
    let pty = wallflux::sim::pty::Pty::open().unwrap();
    let port = free_port();
    let good = one_zone_config(&pty.path, port, 1.5, 250.0, &[20.0, 100.0, 250.0], 1.0);
    let cfg = write(&dir, "w.toml", &good);
    let log = dir.join("d.log");
    let daemon = start_daemon(&cfg, &log);
    let wait_log = |needle: &str| {
        let deadline = Instant::now() + Duration::from_secs(20);
        loop {
            let text = std::fs::read_to_string(&log).unwrap_or_default();
            if text.contains(needle) {
                return text;
            }
            assert!(
                Instant::now() < deadline,
                "{needle:?} not in the log: {text}"
            );
            std::thread::sleep(Duration::from_millis(50));
        }
    };
    wait_log("wallflux started");
    let hup = |d: &Daemon| {
        // SAFETY: kill(2) on our own child's pid.
        unsafe { libc::kill(d.id() as libc::pid_t, libc::SIGHUP) };
    };
    std::fs::write(&cfg, good.replace("area_m2 = 10.0", "area_m2 = -3.0")).unwrap();
    hup(&daemon);
    let text = wait_log("SIGHUP: the configuration file is not valid");
    assert!(text.contains("zone[0].area_m2"), "{text}");
    std::fs::write(&cfg, &good).unwrap();
    hup(&daemon);
    wait_log("SIGHUP: the configuration file is valid");
    stop_daemon(daemon);
}
