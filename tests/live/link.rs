//! The command path against a real broker, tried the way a plant network
//! tries it: messages far over any command's size, a retained command, an
//! outage long enough to queue more messages than the MQTT client's own
//! request channel holds. After each, a command must still be answered.

use std::time::{Duration, Instant};

use crate::common::feeder::Feeder;
use crate::common::mqtt::{
    free_port, now_rfc3339, publish, stamped, subscribe, try_publish, try_publish_as, wait_for,
    Broker, Msg,
};
use crate::common::*;
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";

/// A wall at steady state: 900 °C hot face, linear to 80 °C at the shell.
fn feeder(pty: Pty) -> Feeder {
    Feeder::start(
        pty,
        DEPTHS_MM.len(),
        std::sync::Arc::new(|i, _| Some(900.0 - 820.0 * DEPTHS_MM[i] / 250.0)),
    )
}

/// One test's surroundings: a broker, a subscriber to the whole root, a
/// steady wall on a pseudo-terminal, and a configuration for it (edited
/// by the test, its state directory the test's own), ready to start
/// daemons on.
struct Rig {
    dir: std::path::PathBuf,
    port: u16,
    broker: Broker,
    rx: std::sync::mpsc::Receiver<Msg>,
    cfg: std::path::PathBuf,
    _feed: Feeder,
}

impl Rig {
    fn new(name: &str, edit: impl FnOnce(String) -> String) -> Rig {
        let dir = temp_dir(name);
        let port = free_port();
        let broker = Broker::start(port, &dir);
        let rx = subscribe(port, &format!("{ROOT}/#"));
        let pty = Pty::open().unwrap();
        let text = with_state_dir(
            one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0),
            &dir.join("state"),
        );
        let text = edit(text);
        let cfg = write(&dir, "w.toml", &text);
        Rig {
            port,
            broker,
            rx,
            cfg,
            _feed: feeder(pty),
            dir,
        }
    }

    /// Starts a daemon logging to `log` and waits for its own `online`
    /// (stamped after its start: not one an earlier daemon sent).
    fn daemon(&self, log: &str) -> Daemon {
        let started = now_rfc3339();
        let daemon = start_daemon(&self.cfg, &self.dir.join(log));
        wait_for(&self.rx, Duration::from_secs(20), "online", |m| {
            m.topic == format!("{ROOT}/status")
                && m.json["state"] == "online"
                && m.json["time"]
                    .as_str()
                    .is_some_and(|t| t > started.as_str())
        });
        daemon
    }

    fn state(&self) -> std::path::PathBuf {
        self.dir.join("state")
    }

    fn log(&self, log: &str) -> String {
        std::fs::read_to_string(self.dir.join(log)).unwrap()
    }
}

/// `text` with its `state_dir` set to `dir`.
fn with_state_dir(text: String, dir: &std::path::Path) -> String {
    text.lines()
        .map(|l| match l {
            l if l.starts_with("state_dir = ") => format!("state_dir = \"{}\"", dir.display()),
            l => l.to_string(),
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// Sends a command that names no configured alarm until its reply comes
/// (`ok: false`, `unknown_alarm`), every 2 s as a SCADA client would (a
/// command is delivered at most once): proof that the command path works.
fn answered(port: u16, rx: &std::sync::mpsc::Receiver<Msg>, id: &str, within: Duration) {
    let cmd = format!(r#"{{"id":"{id}","action":"ack","alarm":"no-such-alarm","by":"op-test"}}"#);
    let deadline = Instant::now() + within;
    while Instant::now() < deadline {
        // A broker that just dropped a client for an oversize packet may
        // refuse its next connection for a moment: that is a retry too.
        let _ = try_publish(
            port,
            &format!("{ROOT}/cmd"),
            &stamped(cmd.as_bytes()),
            false,
        );
        let resend = Instant::now() + Duration::from_secs(2);
        while let Ok(m) = rx.recv_timeout(resend.saturating_duration_since(Instant::now())) {
            if m.topic == format!("{ROOT}/cmd/reply") && m.json["id"] == id {
                assert_eq!(m.json["code"], "unknown_alarm", "{}", m.json);
                return;
            }
        }
    }
    panic!("no reply to {id} within {within:?}");
}

fn count(text: &str, needle: &str) -> usize {
    text.matches(needle).count()
}

/// 1 MiB and 10 MiB on `cmd`: dropped (by the broker, or read and dropped
/// by the daemon without a reconnect); 20 MiB, over what the daemon reads:
/// one reconnect with a fresh session, never a reconnect loop. After each,
/// commands are answered.
#[test]
fn huge_messages_on_the_command_topic_do_not_silence_it() {
    let rig = Rig::new("link-huge", |t| t);
    let (port, rx) = (rig.port, &rig.rx);
    let daemon = rig.daemon("d.log");
    answered(port, rx, "before", Duration::from_secs(10));
    // The embedded broker refuses packets over 256 KiB itself; mosquitto
    // as the tests run it takes them and passes them on.
    let cmd = format!("{ROOT}/cmd");
    let mut passed_on = Vec::new();
    for n in [1usize << 20, 10 << 20] {
        passed_on.push(try_publish(port, &cmd, &vec![b'{'; n], false).is_ok());
    }
    answered(port, rx, "after-10", Duration::from_secs(20));
    let text = rig.log("d.log");
    assert_eq!(count(&text, "MQTT broker connected"), 1, "{text}");
    let huge = try_publish(port, &cmd, &vec![b'{'; 20 << 20], false).is_ok();
    answered(port, rx, "after-20", Duration::from_secs(30));
    // Given time to loop, it does not.
    std::thread::sleep(Duration::from_secs(3));
    answered(port, rx, "later", Duration::from_secs(10));
    let text = rig.log("d.log");
    assert_eq!(
        count(&text, "MQTT broker connected"),
        1 + usize::from(huge),
        "{passed_on:?} {huge}:\n{text}"
    );
    assert_eq!(
        count(&text, "over the packet limit"),
        usize::from(huge),
        "{text}"
    );
    stop_daemon(daemon);
}

/// A command left retained on `cmd` is not applied when the daemon
/// subscribes: it is logged as ignored, and gets no reply.
#[test]
fn a_retained_command_is_ignored() {
    let rig = Rig::new("link-retained", |t| t);
    let (port, rx) = (rig.port, &rig.rx);
    let retained = br#"{"id":"stale-1","action":"ack","alarm":"no-such-alarm","by":"op-old"}"#;
    try_publish(port, &format!("{ROOT}/cmd"), &stamped(retained), true).unwrap();
    // The retained message arrives right after the subscription, so before
    // the reply to a command sent once the daemon is online.
    let daemon = rig.daemon("d.log");
    let cmd = br#"{"id":"fresh-1","action":"ack","alarm":"no-such-alarm","by":"op-test"}"#;
    publish(port, &format!("{ROOT}/cmd"), &stamped(cmd));
    let first_reply = wait_for(rx, Duration::from_secs(10), "a reply", |m| {
        m.topic == format!("{ROOT}/cmd/reply")
    });
    assert_eq!(
        first_reply.json["id"], "fresh-1",
        "the retained command was answered"
    );
    let text = rig.log("d.log");
    assert_eq!(
        count(&text, "retained message on the command topic ignored"),
        1,
        "{text}"
    );
    stop_daemon(daemon);
}

/// An outage during which more messages queue than the MQTT client's
/// request channel holds (64: a zone state and four channel states a
/// second for 20 s): after it, `online` again and commands answered.
#[test]
fn commands_are_answered_after_a_long_outage() {
    let mut rig = Rig::new("link-outage", |t| t);
    let daemon = rig.daemon("d.log");
    answered(rig.port, &rig.rx, "before", Duration::from_secs(10));
    rig.broker.stop();
    // The outage itself: its length is the condition under test.
    let down = Instant::now();
    std::thread::sleep(Duration::from_secs(20));
    rig.broker.restart();
    wait_for(&rig.rx, Duration::from_secs(60), "online again", |m| {
        m.topic == format!("{ROOT}/status") && m.json["state"] == "online"
    });
    assert!(down.elapsed() >= Duration::from_secs(20));
    answered(rig.port, &rig.rx, "after", Duration::from_secs(20));
    stop_daemon(daemon);
}

/// Sends `cmd` and returns its reply and its audit event (`{root}/events`,
/// `wallflux.command/1`).
fn send(
    port: u16,
    rx: &std::sync::mpsc::Receiver<Msg>,
    id: &str,
    cmd: &str,
) -> (serde_json::Value, serde_json::Value) {
    publish(port, &format!("{ROOT}/cmd"), &stamped(cmd.as_bytes()));
    let mut reply = None;
    let mut audit = None;
    let deadline = Instant::now() + Duration::from_secs(10);
    while reply.is_none() || audit.is_none() {
        let m = rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .unwrap_or_else(|_| panic!("no reply and audit event for {id}"));
        if m.json["id"] != id {
            continue;
        }
        if m.topic == format!("{ROOT}/cmd/reply") {
            reply = Some(m.json);
        } else if m.topic == format!("{ROOT}/events") && m.json["schema"] == "wallflux.command/1" {
            audit = Some(m.json);
        }
    }
    (reply.unwrap(), audit.unwrap())
}

/// `[commands]`: a sender not listed, a disabled action, a shelve too long
/// and a command an hour old are refused, each with its code and an audit
/// event naming the sender; an accepted shelve is on disk before its `ok`;
/// with the state directory gone, the reply says the change is not saved
/// and the built-in `state-not-saved` alarm is raised, then cleared once
/// saving works again.
#[test]
fn the_command_policy_and_an_ok_that_means_on_disk() {
    let policy = "[commands]\nenabled = [\"ack\", \"shelve\", \"unshelve\"]\nallowed_by = [\"op-anna\"]\nmax_shelve_min = 60\nmax_command_age_s = 120\n\n[log]";
    let rig = Rig::new("link-policy", |t| t.replace("[log]", policy));
    let (port, rx, state) = (rig.port, &rig.rx, rig.state());
    let daemon = rig.daemon("d.log");
    let alarm = "wall-shell-touch";
    let refused = [
        (
            "c-mallory",
            format!(
                r#"{{"id":"c-mallory","action":"shelve","alarm":"{alarm}","by":"mallory","minutes":30}}"#
            ),
            "not_allowed",
        ),
        (
            "c-oos",
            format!(
                r#"{{"id":"c-oos","action":"out_of_service","alarm":"{alarm}","by":"op-anna"}}"#
            ),
            "action_disabled",
        ),
        (
            "c-long",
            format!(
                r#"{{"id":"c-long","action":"shelve","alarm":"{alarm}","by":"op-anna","minutes":90}}"#
            ),
            "shelve_too_long",
        ),
        (
            "c-old",
            format!(
                r#"{{"id":"c-old","action":"shelve","alarm":"{alarm}","by":"op-anna","minutes":30,"time":"2000-01-01T00:00:00Z"}}"#
            ),
            "stale",
        ),
    ];
    for (id, cmd, code) in &refused {
        let (reply, audit) = send(port, rx, id, cmd);
        assert_eq!(
            (reply["ok"].as_bool(), reply["code"].as_str()),
            (Some(false), Some(*code)),
            "{reply}"
        );
        assert_eq!(audit["ok"], false, "{audit}");
        assert_eq!(audit["code"], *code, "{audit}");
        assert_eq!(audit["type"], "command");
    }
    let (_, audit) = send(port, rx, "c-mallory", &refused[0].1);
    assert_eq!(audit["by"], "mallory");

    // Accepted: on disk when the reply comes.
    let (reply, audit) = send(
        port,
        rx,
        "c-shelve",
        &format!(
            r#"{{"id":"c-shelve","action":"shelve","alarm":"{alarm}","by":"op-anna","minutes":30}}"#
        ),
    );
    assert_eq!(reply["ok"], true, "{reply}");
    assert_eq!(
        (audit["ok"].as_bool(), audit["minutes"].as_f64()),
        (Some(true), Some(30.0))
    );
    let saved: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(state.join("alarms.json")).unwrap()).unwrap();
    assert!(saved[alarm]["shelved_until"].is_number(), "{saved}");
    assert_eq!(saved[alarm]["last_user"], "op-anna", "{saved}");

    // The state directory replaced by a file: applied, not saved, and said.
    std::fs::remove_dir_all(&state).unwrap();
    std::fs::write(&state, b"not a directory").unwrap();
    let (reply, audit) = send(
        port,
        rx,
        "c-unshelve",
        &format!(r#"{{"id":"c-unshelve","action":"unshelve","alarm":"{alarm}","by":"op-anna"}}"#),
    );
    assert_eq!(reply["code"], "not_persisted", "{reply}");
    assert!(
        reply["error"]
            .as_str()
            .unwrap()
            .contains("will not survive a restart"),
        "{reply}"
    );
    assert_eq!(audit["code"], "not_persisted");
    // ... and its built-in alarm says so until a save works again (a new
    // subscriber gets its retained state, whenever it was raised).
    let topic = format!("{ROOT}/alarm/state-not-saved");
    let alarm_rx = subscribe(port, &topic);
    let raised = |m: &Msg| m.topic == topic && m.json["active"] == true;
    wait_for(
        &alarm_rx,
        Duration::from_secs(10),
        "state-not-saved raised",
        raised,
    );
    std::fs::remove_file(&state).unwrap();
    let cleared = |m: &Msg| m.topic == topic && m.json["active"] == false;
    wait_for(
        &alarm_rx,
        Duration::from_secs(10),
        "state-not-saved cleared",
        cleared,
    );
    stop_daemon(daemon);
}

/// The example broker configuration and access list of `deploy/mosquitto`
/// on a real mosquitto, with the daemon's account: the daemon connects
/// with its password and publishes; a client without credentials is
/// refused; a command from the watch-only account is not delivered, one
/// from the SCADA account is answered. (mosquitto only: the embedded
/// broker has no accounts.)
#[test]
fn the_example_broker_access_list_lets_only_scada_command() {
    if Broker::kind() != "mosquitto" {
        eprintln!("skipped: needs WALLFLUX_TEST_BROKER=mosquitto (CI runs it)");
        return;
    }
    let dir = temp_dir("link-acl");
    let port = free_port();
    let root_dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("deploy/mosquitto");
    let passwd = dir.join("wallflux.passwd");
    for (i, (user, pass)) in [
        ("wallflux-kiln-3", "d-secret-1"),
        ("scada-1", "s-secret-2"),
        ("viewer", "v-secret-3"),
    ]
    .iter()
    .enumerate()
    {
        let mut c = std::process::Command::new("mosquitto_passwd");
        if i == 0 {
            c.arg("-c");
        }
        let ok = c
            .arg("-b")
            .arg(&passwd)
            .arg(user)
            .arg(pass)
            .status()
            .unwrap();
        assert!(ok.success());
    }
    let acl = std::fs::read_to_string(root_dir.join("wallflux.acl"))
        .unwrap()
        .replace("wallflux/example-plant/kiln-3", ROOT)
        .replace("wallflux/", "wf/");
    std::fs::write(dir.join("wallflux.acl"), acl).unwrap();
    let conf = std::fs::read_to_string(root_dir.join("wallflux.conf"))
        .unwrap()
        .replace(
            "/etc/mosquitto/wallflux.passwd",
            &passwd.display().to_string(),
        )
        .replace(
            "/etc/mosquitto/wallflux.acl",
            &dir.join("wallflux.acl").display().to_string(),
        )
        .replace(
            "listener 1883 127.0.0.1",
            &format!("listener {port} 127.0.0.1"),
        );
    assert!(conf.contains(&format!("listener {port}")) && conf.contains("allow_anonymous false"));
    let _broker = Broker::mosquitto_with(port, &dir, &conf);

    let scada = Some(("scada-1", "s-secret-2"));
    let rx = crate::common::mqtt::subscribe_as(port, &format!("{ROOT}/#"), scada);
    let pty = Pty::open().unwrap();
    std::fs::write(dir.join("mqtt-password"), "d-secret-1\n").unwrap();
    let text = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0).replace(
        "topic_root = \"wf\"",
        &format!(
            "topic_root = \"wf\"\nusername = \"wallflux-kiln-3\"\npassword_file = \"{}\"\nallow_plaintext_credentials = true",
            dir.join("mqtt-password").display()
        ),
    );
    let cfg = write(&dir, "w.toml", &text);
    let _feed = feeder(pty);
    let log = dir.join("d.log");
    let daemon = start_daemon(&cfg, &log);
    wait_for(
        &rx,
        Duration::from_secs(20),
        "a zone state from the daemon",
        |m| m.topic == format!("{ROOT}/zone/wall/state"),
    );
    // No account, or a wrong password: refused.
    let cmd_topic = format!("{ROOT}/cmd");
    let cmd = stamped(br#"{"id":"c-anon","action":"ack","alarm":"x","by":"op"}"#);
    assert!(try_publish_as(port, &cmd_topic, &cmd, false, None).is_err());
    assert!(try_publish_as(port, &cmd_topic, &cmd, false, Some(("scada-1", "wrong"))).is_err());
    // The watch-only account's command is not delivered: no reply, while
    // the SCADA account's, sent after it, is answered.
    let cmd = stamped(br#"{"id":"c-viewer","action":"ack","alarm":"x","by":"op"}"#);
    try_publish_as(
        port,
        &cmd_topic,
        &cmd,
        false,
        Some(("viewer", "v-secret-3")),
    )
    .unwrap();
    let cmd = stamped(br#"{"id":"c-scada","action":"ack","alarm":"x","by":"op"}"#);
    try_publish_as(port, &cmd_topic, &cmd, false, scada).unwrap();
    let r = wait_for(&rx, Duration::from_secs(10), "a reply", |m| {
        m.topic == format!("{ROOT}/cmd/reply")
    });
    assert_eq!(r.json["id"], "c-scada", "{}", r.json);
    stop_daemon(daemon);
    let text = std::fs::read_to_string(&log).unwrap();
    for secret in ["d-secret-1", "s-secret-2", "v-secret-3"] {
        assert!(!text.contains(secret), "a password in the log:\n{text}");
    }
}

/// State files are checked on load: an alarm entry that does not read
/// costs only itself (the others keep their flags), and energy totals that
/// parse but cannot be true are moved aside.
#[test]
fn state_files_are_checked_entry_by_entry() {
    let rig = Rig::new("link-state", |t| t);
    let (port, rx, state) = (rig.port, &rig.rx, rig.state());
    let daemon = rig.daemon("d1.log");
    let (reply, _) = send(
        port,
        rx,
        "c-oos",
        r#"{"id":"c-oos","action":"out_of_service","alarm":"wall-shell-touch","by":"op-anna"}"#,
    );
    assert_eq!(reply["ok"], true, "{reply}");
    stop_daemon(daemon);

    let alarms = state.join("alarms.json");
    let mut saved: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&alarms).unwrap()).unwrap();
    assert!(saved["p0-fault"].is_object(), "{saved}");
    saved["p0-fault"] = serde_json::json!("garbage");
    std::fs::write(&alarms, saved.to_string()).unwrap();
    // Energy books as a run without the database would leave them in a
    // file (which then comes first), impossible ones.
    let energy = state.join("energy.json");
    let mut totals = saved_energy(&state);
    totals["day"] = serde_json::json!(106_751_991_167i64);
    std::fs::write(&energy, totals.to_string()).unwrap();

    let daemon = rig.daemon("d2.log");
    let st = wait_for(
        rx,
        Duration::from_secs(20),
        "the alarm state after the restart",
        |m| m.topic == format!("{ROOT}/alarm/wall-shell-touch"),
    );
    assert_eq!(st.json["out_of_service"], true, "{}", st.json);
    stop_daemon(daemon);
    let text = rig.log("d2.log");
    assert!(
        text.contains("unreadable entries left out") && text.contains("p0-fault"),
        "{text}"
    );
    assert!(text.contains("energy totals are nonsense"), "{text}");
    assert!(state.join("energy.json.bad").exists());
}
