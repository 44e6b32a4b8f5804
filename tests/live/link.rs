//! The command path against a real broker, tried the way a plant network
//! tries it: messages far over any command's size, a retained command, an
//! outage long enough to queue more messages than the MQTT client's own
//! request channel holds. After each, a command must still be answered.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use crate::common::feeder::Feeder;
use crate::common::mqtt::{
    free_port, now_rfc3339, publish, stamped, subscribe, try_publish, try_publish_as, wait_for,
    Broker, Msg,
};
use crate::common::*;
use wallflux::publish::mqtt::{MAX_BACKOFF, REMIND_EVERY};
use wallflux::sim::pty::Pty;

const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
const ROOT: &str = "wf/test-plant/k1";

/// A wall at steady state: 900 °C hot face, linear to 80 °C at the shell.
fn feeder(pty: Pty) -> Feeder {
    feeder_with(pty, Arc::new(AtomicBool::new(false)))
}

/// The steady wall, its first probe (834.4 °C) lifted to [`HOT_C`] while
/// `hot` is set: over the 850 °C of [`HOT_ALARM`].
fn feeder_with(pty: Pty, hot: Arc<AtomicBool>) -> Feeder {
    Feeder::start(
        pty,
        DEPTHS_MM.len(),
        Arc::new(move |i, _| {
            Some(if i == 0 && hot.load(Ordering::Relaxed) {
                HOT_C
            } else {
                900.0 - 820.0 * DEPTHS_MM[i] / 250.0
            })
        }),
    )
}

/// What the hot first probe reads.
const HOT_C: f64 = 870.0;
/// An alarm on the first probe, for tests that need alarm events: append
/// it to a configuration and set the rig's `hot`.
const HOT_ALARM: &str = "\n[[alarm]]\nname = \"p0-hot\"\nchannel = \"p0\"\nquantity = \"celsius\"\nkind = \"high\"\nsetpoint = 850.0\ndeadband = 5.0\non_delay_s = 0.0\npriority = \"medium\"\n";

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
    /// Lifts the first probe to [`HOT_C`] while set.
    hot: Arc<AtomicBool>,
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
        let hot = Arc::new(AtomicBool::new(false));
        Rig {
            port,
            broker,
            rx,
            cfg,
            _feed: feeder_with(pty, hot.clone()),
            hot,
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
    outage_then_a_command("link-outage", Duration::from_secs(20));
}

/// Two minutes without the broker: the reconnection backoff reaches its
/// longest wait (30 s) and stays there for several attempts; after the
/// outage, `online` again and commands answered.
#[test]
fn commands_are_answered_after_a_two_minute_outage() {
    outage_then_a_command("link-outage-2min", Duration::from_secs(120));
}

/// Ten minutes without the broker: about twenty attempts at the longest
/// backoff and the reminders of an outage that lasts (every 5 min); after
/// it, `online` again and commands answered. Too long for the normal
/// suite; run it with
/// `cargo test --release --test live -- --ignored link::`.
#[test]
#[ignore = "ten minutes: cargo test --release --test live -- --ignored link::"]
fn commands_are_answered_after_a_ten_minute_outage() {
    outage_then_a_command("link-outage-10min", Duration::from_secs(600));
}

/// The broker stopped for `outage` while the daemon runs, then started
/// again: the daemon connects again by itself (one more "connected"), says
/// the loss once and reminds of it at most once per [`REMIND_EVERY`],
/// and a command is answered.
fn outage_then_a_command(name: &str, outage: Duration) {
    let mut rig = Rig::new(name, |t| t);
    let daemon = rig.daemon("d.log");
    answered(rig.port, &rig.rx, "before", Duration::from_secs(10));
    rig.broker.stop();
    // The outage itself: its length is the condition under test.
    let down = Instant::now();
    std::thread::sleep(outage);
    rig.broker.restart();
    wait_for(&rig.rx, Duration::from_secs(60), "online again", |m| {
        m.topic == format!("{ROOT}/status") && m.json["state"] == "online"
    });
    let outage_s = down.elapsed().as_secs();
    assert!(outage_s >= outage.as_secs());
    answered(rig.port, &rig.rx, "after", Duration::from_secs(20));
    stop_daemon(daemon);
    let text = rig.log("d.log");
    assert_eq!(count(&text, "MQTT broker connected"), 2, "{text}");
    assert_eq!(count(&text, "MQTT broker lost"), 1, "{text}");
    // A reminder comes with the first attempt at least REMIND_EVERY after
    // the last line about the outage, and attempts come at least every
    // MAX_BACKOFF: so there are at most outage / REMIND_EVERY of them, and
    // at least one for each full REMIND_EVERY + MAX_BACKOFF.
    let reminders = count(&text, "MQTT broker unreachable; retrying") as u64;
    let (every, backoff) = (REMIND_EVERY.as_secs(), MAX_BACKOFF.as_secs());
    assert!(
        reminders <= outage_s / every,
        "{reminders} reminders:\n{text}"
    );
    assert!(
        reminders >= outage.as_secs() / (every + backoff),
        "{reminders} reminders:\n{text}"
    );
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

/// An alarm command answered `ok`, and the daemon SIGKILLed the moment the
/// reply arrives, twenty times: the change is in `alarms.json` every time
/// (the `ok` comes only once it is on disk), and the restarted daemon
/// publishes the alarm state with it. The commands alternate between
/// taking the alarm out of service and putting it back, so each one
/// changes the file.
#[test]
fn a_kill_right_after_ok_never_loses_the_change() {
    const ROUNDS: usize = 20;
    let rig = Rig::new("link-kill-ok", |t| t);
    let (port, rx, state) = (rig.port, &rig.rx, rig.state());
    let alarm = "wall-shell-touch";
    let alarm_topic = format!("{ROOT}/alarm/{alarm}");
    let mut daemon = rig.daemon("d0.log");
    for round in 0..ROUNDS {
        let oos = round % 2 == 0;
        let action = if oos { "out_of_service" } else { "in_service" };
        let id = format!("k-{round}");
        let cmd =
            format!(r#"{{"id":"{id}","action":"{action}","alarm":"{alarm}","by":"op-test"}}"#);
        // Sent once: a lost command would show as no reply, a failure.
        publish(port, &format!("{ROOT}/cmd"), &stamped(cmd.as_bytes()));
        let reply = wait_for(rx, Duration::from_secs(10), "the reply", |m| {
            m.topic == format!("{ROOT}/cmd/reply") && m.json["id"] == id.as_str()
        });
        let _ = daemon.kill();
        let _ = daemon.wait();
        assert_eq!(reply.json["ok"], true, "round {round}: {}", reply.json);

        let saved: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(state.join("alarms.json")).unwrap())
                .unwrap();
        assert_eq!(
            saved[alarm]["out_of_service"], oos,
            "round {round}, killed after the ok of {action}: {saved}"
        );
        assert_eq!(saved[alarm]["last_user"], "op-test", "{saved}");

        // The restarted daemon says so too (its own alarm states come
        // after its `online`, before anything an earlier daemon sent).
        let log = format!("d{}.log", round + 1);
        daemon = rig.daemon(&log);
        let st = wait_for(rx, Duration::from_secs(10), "the alarm state", |m| {
            m.topic == alarm_topic
        });
        assert_eq!(
            st.json["out_of_service"], oos,
            "round {round}: after the restart: {}",
            st.json
        );
        let text = rig.log(&log);
        assert!(
            !text.contains("moved aside") && !text.contains("unreadable"),
            "{text}"
        );
    }
    stop_daemon(daemon);
}

/// Publishes the `n` payloads `payload(0..n)` on `topic` at QoS 0 as fast
/// as one client can write them; returns once all are written.
fn flood(port: u16, topic: &str, n: usize, payload: impl Fn(usize) -> Vec<u8>) {
    let mut opts = rumqttc::MqttOptions::new(
        format!("test-flood-{port}-{}", std::process::id()),
        "127.0.0.1",
        port,
    );
    opts.set_keep_alive(Duration::from_secs(30));
    let (client, mut conn) = rumqttc::Client::new(opts, 1024);
    let writer = std::thread::spawn(move || {
        let mut written = 0;
        for ev in conn.iter() {
            match ev {
                Ok(rumqttc::Event::Outgoing(rumqttc::Outgoing::Publish(_))) => {
                    written += 1;
                    if written == n {
                        break;
                    }
                }
                Ok(_) => {}
                Err(e) => panic!("the flood's connection failed after {written}: {e}"),
            }
        }
    });
    for i in 0..n {
        client
            .publish(topic, rumqttc::QoS::AtMostOnce, false, payload(i))
            .unwrap();
    }
    writer.join().unwrap();
    let _ = client.disconnect();
}

/// What the flood test counts of the messages it receives.
#[derive(Default)]
struct Seen {
    reply_topic: String,
    events_topic: String,
    /// Replies to the flood's commands (all refused).
    refused: u64,
    first_reply: Option<Instant>,
    alarm_events: Vec<serde_json::Value>,
}

impl Seen {
    fn take(&mut self, m: &Msg) {
        let flood_id = m.json["id"]
            .as_str()
            .is_none_or(|id| id.starts_with("f-") && id != "f-last");
        if m.topic == self.reply_topic && flood_id {
            let code = m.json["code"].as_str().unwrap_or_default();
            assert!(["not_json", "not_allowed"].contains(&code), "{}", m.json);
            self.refused += 1;
            self.first_reply.get_or_insert_with(Instant::now);
        } else if m.topic == self.events_topic
            && m.json["alarm"] == "p0-hot"
            && m.json["type"] == "alarm"
        {
            self.alarm_events.push(m.json.clone());
        }
    }
}

/// The `folded=N` of a log line.
fn folded(line: &str) -> Option<u64> {
    let at = line.find("folded=")? + "folded=".len();
    let digits: String = line[at..]
        .chars()
        .take_while(char::is_ascii_digit)
        .collect();
    digits.parse().ok()
}

/// 20 000 refused commands (half not JSON, half from a sender not
/// allowed) as fast as a client sends them, with an alarm raised and
/// cleared during the flood: the log grows by a few lines, not by one a
/// command (each kind of refusal at most one line per fold window); the
/// line that ends the window counts every refusal folded into it; the
/// alarm's lines are all there; the daemon stays up and answers a valid
/// command right after the flood.
#[test]
fn a_command_flood_keeps_the_log_bounded_and_the_daemon_answering() {
    use wallflux::publish::fold::FOLD_WINDOW;
    const FLOOD: usize = 20_000;
    // The longest line the flood can make (a refused command, a command
    // dropped at the link, an alarm change) is about 300 bytes; 1 KiB is
    // the bound per line.
    const LINE_MAX: usize = 1024;
    let policy = "[commands]\nallowed_by = [\"op-anna\"]\n\n[log]";
    let rig = Rig::new("link-flood", |t| {
        // No zone summaries after the first: the log holds only what the
        // test makes.
        t.replace("[log]", policy)
            .replace("summary_every = 1", "summary_every = 100000")
            + HOT_ALARM
    });
    let (port, rx) = (rig.port, &rig.rx);
    let mut daemon = rig.daemon("d.log");
    let reply_topic = format!("{ROOT}/cmd/reply");
    // The daemon's first lines are written by now; what follows is the
    // flood's.
    std::thread::sleep(Duration::from_secs(2));
    let before = rig.log("d.log").len();

    let started = Instant::now();
    let sender = std::thread::spawn(move || {
        flood(port, &format!("{ROOT}/cmd"), FLOOD, |i| {
            if i % 2 == 0 {
                format!(r#"{{"id":"f-{i}","action":"ack","#).into_bytes()
            } else {
                stamped(
                    format!(r#"{{"id":"f-{i}","action":"ack","alarm":"p0-hot","by":"mallory"}}"#)
                        .as_bytes(),
                )
            }
        })
    });
    // The alarm raised in the flood, cleared once its event is out.
    rig.hot.store(true, Ordering::Relaxed);
    let mut seen = Seen {
        reply_topic: reply_topic.clone(),
        events_topic: format!("{ROOT}/events"),
        ..Seen::default()
    };
    let deadline = Instant::now() + Duration::from_secs(60);
    while seen.alarm_events.is_empty() {
        let m = rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .expect("no alarm event during the flood");
        seen.take(&m);
    }
    rig.hot.store(false, Ordering::Relaxed);
    sender.join().unwrap();
    let flood_s = started.elapsed().as_secs_f64();

    // A valid command right after: answered (resent as a SCADA client
    // would, since a command is delivered at most once; flood replies that
    // still come meanwhile are counted).
    let valid = r#"{"id":"v-1","action":"shelve","alarm":"p0-hot","by":"op-anna","minutes":30}"#;
    let deadline = Instant::now() + Duration::from_secs(60);
    let mut resend = Instant::now();
    let reply = loop {
        if Instant::now() >= resend {
            publish(port, &format!("{ROOT}/cmd"), &stamped(valid.as_bytes()));
            resend = Instant::now() + Duration::from_secs(5);
        }
        assert!(Instant::now() < deadline, "no reply to the valid command");
        let Ok(m) = rx.recv_timeout(Duration::from_millis(200)) else {
            continue;
        };
        if m.topic == reply_topic && m.json["id"] == "v-1" {
            break m.json;
        }
        seen.take(&m);
    };
    assert_eq!(reply["ok"], true, "{reply}");
    assert!(matches!(daemon.try_wait(), Ok(None)), "the daemon died");
    let refused = seen.refused;
    assert!(refused > 0, "no refusal reached the daemon");

    // The line that ends the fold window counts the refusals folded into
    // it. A refusal is either written or folded into the next line
    // written, so the lines and their counts add up to every refusal
    // answered, the last one's after the window included.
    let first = seen.first_reply.unwrap();
    std::thread::sleep(
        (first + FOLD_WINDOW + Duration::from_secs(1)).saturating_duration_since(Instant::now()),
    );
    let last = r#"{"id":"f-last","action":"ack","alarm":"p0-hot","by":"mallory"}"#;
    publish(port, &format!("{ROOT}/cmd"), &stamped(last.as_bytes()));
    let deadline = Instant::now() + Duration::from_secs(20);
    loop {
        let m = rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .expect("no reply to f-last");
        if m.topic == reply_topic && m.json["id"] == "f-last" {
            break;
        }
        seen.take(&m);
    }
    let refused = seen.refused;
    stop_daemon(daemon);
    let text = rig.log("d.log");
    let grown = text.len() - before;
    let lines: Vec<&str> = text[before..].lines().collect();
    let refusal_lines: Vec<&&str> = lines
        .iter()
        .filter(|l| l.contains("command refused"))
        .collect();
    let final_line = refusal_lines
        .last()
        .filter(|l| l.contains("id=f-last"))
        .unwrap_or_else(|| panic!("the refusal after the window is not the last line:\n{text}"));
    assert!(folded(final_line).unwrap() > 0, "{final_line}");
    let accounted: u64 = refusal_lines
        .iter()
        .map(|l| folded(l).unwrap_or_else(|| panic!("no count: {l}")) + 1)
        .sum();
    assert_eq!(
        accounted,
        refused + 1,
        "{refused} flood refusals answered, the lines say otherwise:\n{}",
        refusal_lines
            .iter()
            .map(|l| **l)
            .collect::<Vec<_>>()
            .join("\n")
    );

    // Each kind of line a flood repeats (a refused command; a command
    // dropped at the link, its queue full) at most once per window over
    // the time the test ran, plus at most 16 lines that are not the
    // flood's: the probe's step held back and let through, the alarm raised
    // and cleared, the valid command and its alarm change, the zone's
    // shell-touch alarm, the shutdown.
    let windows = (started.elapsed().as_secs_f64() / FOLD_WINDOW.as_secs_f64()).ceil() as usize + 1;
    let dropped_lines = lines
        .iter()
        .filter(|l| l.contains("command dropped"))
        .count();
    assert!(refusal_lines.len() <= windows, "{}", lines.join("\n"));
    assert!(dropped_lines <= windows, "{}", lines.join("\n"));
    let other_lines = 16;
    let bound = (2 * windows + other_lines) * LINE_MAX;
    assert!(
        grown <= bound,
        "the log grew by {grown} bytes (bound {bound}) in a flood of {FLOOD} commands over {flood_s:.1} s:\n{}",
        &text[before..]
    );
    // The alarm's lines are all in the log: raised and cleared.
    let alarm_lines: Vec<&&str> = lines
        .iter()
        .filter(|l| l.contains("alarm=p0-hot") && !l.contains("command"))
        .collect();
    assert!(
        alarm_lines.iter().any(|l| l.contains("alarm: ")),
        "no activation line:\n{}",
        lines.join("\n")
    );
    assert!(
        alarm_lines.iter().any(|l| l.contains("cause=\"returned\"")),
        "no return line:\n{}",
        lines.join("\n")
    );
}

/// How the full-disk test makes the state directory full.
enum Filler {
    /// A small tmpfs of the test's own mounted on the state directory
    /// (needs root): filled by a file written until the file system says
    /// ENOSPC, freed by removing it; unmounted when dropped.
    Tmpfs {
        mount: std::path::PathBuf,
        file: std::path::PathBuf,
    },
    /// Where no mount is allowed: the daemon's file size limit
    /// (RLIMIT_FSIZE) lowered to a few bytes, so every write past them
    /// fails (EFBIG, SIGXFSZ ignored), and raised again to free it.
    Rlimit { pid: Option<libc::pid_t> },
}

impl Filler {
    /// A tmpfs of `size` on `dir`, or the file size limit when mounting is
    /// not allowed (or `WALLFLUX_TEST_FULL=rlimit` asks for it).
    fn new(dir: &std::path::Path, size: &str) -> Filler {
        std::fs::create_dir_all(dir).unwrap();
        if std::env::var("WALLFLUX_TEST_FULL").as_deref() != Ok("rlimit") {
            let mounted = std::process::Command::new("mount")
                .args(["-t", "tmpfs", "-o", &format!("size={size}"), "tmpfs"])
                .arg(dir)
                .stderr(std::process::Stdio::null())
                .status()
                .is_ok_and(|s| s.success());
            if mounted {
                return Filler::Tmpfs {
                    mount: dir.to_path_buf(),
                    file: dir.join("filler"),
                };
            }
        }
        eprintln!("no tmpfs (not root?): the state directory is made full by RLIMIT_FSIZE");
        Filler::Rlimit { pid: None }
    }

    /// Starts the daemon as this filler needs it: with the file size limit,
    /// its log through a pipe (the limit would stop a log file too) and
    /// SIGXFSZ ignored, so that a write past the limit is an error.
    fn start(&mut self, cfg: &std::path::Path, log: &std::path::Path) -> Daemon {
        let Filler::Rlimit { pid } = self else {
            return start_daemon(cfg, log);
        };
        use std::os::unix::process::CommandExt;
        let mut cmd = bin();
        cmd.args(["run", "--config", cfg.to_str().unwrap()])
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::piped());
        // SAFETY: signal(2) is async-signal-safe; nothing else runs between
        // fork and exec.
        unsafe {
            cmd.pre_exec(|| {
                libc::signal(libc::SIGXFSZ, libc::SIG_IGN);
                Ok(())
            });
        }
        let mut child = cmd.spawn().unwrap();
        let mut stderr = child.stderr.take().unwrap();
        let mut file = std::fs::File::create(log).unwrap();
        std::thread::spawn(move || std::io::copy(&mut stderr, &mut file));
        *pid = Some(child.id() as libc::pid_t);
        Daemon(child)
    }

    fn fill(&self) {
        match self {
            Filler::Tmpfs { file, .. } => {
                use std::io::Write;
                let mut f = std::fs::File::create(file).unwrap();
                let chunk = vec![0x5a_u8; 64 * 1024];
                loop {
                    match f.write_all(&chunk) {
                        Ok(()) => {}
                        Err(e) if e.raw_os_error() == Some(libc::ENOSPC) => break,
                        Err(e) => panic!("filling the tmpfs: {e}"),
                    }
                }
                // The last pages too (a write smaller than a chunk).
                while f.write(&chunk[..512]).is_ok_and(|n| n > 0) {}
            }
            Filler::Rlimit { pid } => set_fsize(pid.unwrap(), 64),
        }
    }

    fn free(&self) {
        match self {
            Filler::Tmpfs { file, .. } => std::fs::remove_file(file).unwrap(),
            Filler::Rlimit { pid } => set_fsize(pid.unwrap(), libc::RLIM_INFINITY),
        }
    }
}

impl Drop for Filler {
    fn drop(&mut self) {
        if let Filler::Tmpfs { mount, .. } = self {
            let ok = std::process::Command::new("umount")
                .arg(&*mount)
                .status()
                .is_ok_and(|s| s.success());
            if !ok {
                // Still busy (a daemon not yet reaped): detach it.
                let _ = std::process::Command::new("umount")
                    .arg("-l")
                    .arg(&*mount)
                    .status();
            }
        }
    }
}

/// Sets the soft file size limit of process `pid` (the hard one stays).
fn set_fsize(pid: libc::pid_t, bytes: libc::rlim_t) {
    let mut old = libc::rlimit {
        rlim_cur: 0,
        rlim_max: 0,
    };
    // SAFETY: prlimit(2) on our own child, with valid pointers.
    let r = unsafe { libc::prlimit(pid, libc::RLIMIT_FSIZE, std::ptr::null(), &mut old) };
    assert_eq!(r, 0, "prlimit: {}", std::io::Error::last_os_error());
    let new = libc::rlimit {
        rlim_cur: bytes.min(old.rlim_max),
        rlim_max: old.rlim_max,
    };
    // SAFETY: as above.
    let r = unsafe { libc::prlimit(pid, libc::RLIMIT_FSIZE, &new, std::ptr::null_mut()) };
    assert_eq!(r, 0, "prlimit: {}", std::io::Error::last_os_error());
}

/// A full state directory (ENOSPC, not a missing one): an accepted command
/// is answered `not_persisted`; `state-not-saved` is raised and stays
/// raised while the directory is full; alarm events still reach the
/// subscriber (they wait in memory when the database cannot take them);
/// once space is freed the alarm clears, a command is answered `ok` and
/// its change is in `alarms.json`.
#[test]
fn a_full_state_directory_is_said_and_loses_no_event() {
    let rig = Rig::new("link-full", |t| t + HOT_ALARM);
    let (port, rx, state) = (rig.port, &rig.rx, rig.state());
    // Before the daemon, so that it is dropped (unmounted) after it.
    let mut filler = Filler::new(&state, "16m");
    let started = now_rfc3339();
    let mut daemon = filler.start(&rig.cfg, &rig.dir.join("d.log"));
    wait_for(rx, Duration::from_secs(20), "online", |m| {
        m.topic == format!("{ROOT}/status")
            && m.json["state"] == "online"
            && m.json["time"]
                .as_str()
                .is_some_and(|t| t > started.as_str())
    });
    let alarm = "wall-shell-touch";
    let cmd = |id: &str, action: &str| {
        format!(r#"{{"id":"{id}","action":"{action}","alarm":"{alarm}","by":"op-test"}}"#)
    };
    let (reply, _) = send(port, rx, "c-1", &cmd("c-1", "out_of_service"));
    assert_eq!(reply["ok"], true, "{reply}");

    filler.fill();
    let topic = format!("{ROOT}/alarm/state-not-saved");
    let (reply, audit) = send(port, rx, "c-2", &cmd("c-2", "in_service"));
    assert_eq!(reply["code"], "not_persisted", "{reply}");
    assert_eq!(audit["code"], "not_persisted", "{audit}");
    // Raised (perhaps before the reply: the energy totals are saved every
    // interval), and not cleared while the directory is full, while an
    // alarm raised and cleared on the probe reaches the subscriber.
    let mut raised = false;
    let mut events = Vec::new();
    rig.hot.store(true, Ordering::Relaxed);
    let deadline = Instant::now() + Duration::from_secs(30);
    while !raised || events.len() < 2 {
        let m = rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .unwrap_or_else(|_| panic!("raised: {raised}, events: {events:?}"));
        if m.topic == topic {
            assert_eq!(
                m.json["active"], true,
                "cleared while the directory is full: {}",
                m.json
            );
            raised = true;
        } else if m.topic == format!("{ROOT}/events") && m.json["alarm"] == "p0-hot" {
            events.push(m.json["to"].clone());
            // Raised: now let it clear.
            rig.hot.store(false, Ordering::Relaxed);
        }
    }
    // A while longer full: the alarm stays raised through several rounds
    // of saves.
    let until = Instant::now() + Duration::from_secs(3);
    while let Ok(m) = rx.recv_timeout(until.saturating_duration_since(Instant::now())) {
        if m.topic == topic {
            assert_eq!(m.json["active"], true, "cleared while full: {}", m.json);
        }
    }
    assert!(matches!(daemon.try_wait(), Ok(None)), "the daemon died");

    filler.free();
    wait_for(
        rx,
        Duration::from_secs(20),
        "state-not-saved cleared",
        |m| m.topic == topic && m.json["active"] == false,
    );
    // Cleared only once everything is on disk: the change that was
    // answered not_persisted too.
    let saved: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(state.join("alarms.json")).unwrap()).unwrap();
    assert_eq!(saved[alarm]["out_of_service"], false, "{saved}");
    let (reply, _) = send(port, rx, "c-3", &cmd("c-3", "out_of_service"));
    assert_eq!(reply["ok"], true, "{reply}");
    let saved: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(state.join("alarms.json")).unwrap()).unwrap();
    assert_eq!(saved[alarm]["out_of_service"], true, "{saved}");
    stop_daemon(daemon);
    let text = rig.log("d.log");
    assert!(!text.contains("panicked"), "{text}");
    // One outage of the directory, said as one: raised once, each kind of
    // failure said once (the database's at most once a fold window: it
    // can fail and work by turns while the disk is full).
    assert_eq!(
        count(&text, "ALARM: The state directory cannot be written"),
        1,
        "{text}"
    );
    for line in [
        "cannot save the alarm states",
        "cannot save the energy totals",
        "cannot write to the local database",
        "the local database takes writes again",
        "cannot delete acknowledged events",
    ] {
        assert!(count(&text, line) <= 1, "{line}:\n{text}");
    }
}

/// An alarm's retained state goes out before its event (a subscriber that
/// sees the event finds the state already changed), for every one of
/// many transitions: the alarm on the first probe raised and cleared
/// thirty times while the zone's and channels' states stream beside it.
#[test]
fn an_alarm_state_always_goes_before_its_event() {
    const TRANSITIONS: usize = 30;
    let rig = Rig::new("link-order", |t| t + HOT_ALARM);
    let daemon = rig.daemon("d.log");
    let state_topic = format!("{ROOT}/alarm/p0-hot");
    let events_topic = format!("{ROOT}/events");
    let mut state_seq = 0;
    let mut events = 0;
    let deadline = Instant::now() + Duration::from_secs(60);
    while events < TRANSITIONS {
        let m = rig
            .rx
            .recv_timeout(deadline.saturating_duration_since(Instant::now()))
            .unwrap_or_else(|_| panic!("only {events} events"));
        if m.topic == state_topic {
            state_seq = m.json["seq"].as_u64().unwrap_or(0).max(state_seq);
        } else if m.topic == events_topic
            && m.json["alarm"] == "p0-hot"
            && m.json["type"] == "alarm"
        {
            let seq = m.json["seq"].as_u64().unwrap();
            assert!(
                state_seq >= seq,
                "event {seq} came before its alarm state (last state seq {state_seq}): {}",
                m.json
            );
            events += 1;
            // Each transition once its event is out: the next one.
            rig.hot.fetch_xor(true, Ordering::Relaxed);
        } else if events == 0 && m.topic == format!("{ROOT}/zone/wall/state") {
            rig.hot.store(true, Ordering::Relaxed);
        }
    }
    stop_daemon(daemon);
}
