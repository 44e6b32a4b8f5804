//! The MQTT contract (docs/mqtt-topics.md) against real payloads: every
//! message the daemon publishes on a real broker, and every output of
//! `analyze --outputs all` over a simulated firing, validated against the
//! JSON Schemas of docs/schema/ (by topic and `schema` tag); every schema
//! and every alternative of one met by at least one real payload; broken
//! payloads refused; the command schema held against the daemon's own
//! answers.

use std::collections::{BTreeMap, BTreeSet};
use std::sync::mpsc::Receiver;
use std::sync::Arc;
use std::time::{Duration, Instant};

use serde_json::{json, Value};

use crate::common::feeder::Feeder;
use crate::common::mqtt::{free_port, publish_command, subscribe, Broker, Msg};
use crate::common::*;
use crate::schema::Schema;
use wallflux::sim::pty::Pty;

const ROOT: &str = "wf/test-plant/k1";
const DEPTHS_MM: [f64; 4] = [20.0, 100.0, 180.0, 250.0];
/// The built-in shell-touch alarm tuned below the feeder's shell (400 °C):
/// it is active from the first zone state on.
const TOUCH: &str = "\n[[alarm]]\nname = \"wall-shell-touch\"\nsetpoint = 350.0\ndeadband = 5.0\non_delay_s = 0.0\n";

/// What the test of each part exercises: together (see
/// [`every_schema_and_alternative_is_exercised_by_some_test`]) every
/// schema file and every alternative of a `oneOf` at the top of one.
const SPOOL_AND_WILL: [&str; 3] = [
    "spool.v1.json",
    "status.v1.json#/$defs/will",
    "status.v1.json#/$defs/announcement",
];
const LIVE: [&str; 13] = [
    "cmd.v1.json#/$defs/alarm_action",
    "cmd.v1.json#/$defs/shelve",
    "cmd.v1.json#/$defs/baseline",
    "cmd-reply.v1.json#/$defs/accepted",
    "cmd-reply.v1.json#/$defs/refused",
    "command.v1.json",
    "status.v1.json#/$defs/announcement",
    "status.v1.json#/$defs/report",
    "alarm.v1.json",
    "event.v1.json#/$defs/alarm",
    "channel.v1.json",
    "zone.v1.json",
    "kiln.v1.json",
];
const REPLAY: [&str; 6] = [
    "zone.v1.json",
    "kiln.v1.json",
    "channel.v1.json",
    "alarm.v1.json",
    "event.v1.json#/$defs/alarm",
    "event.v1.json#/$defs/trend",
];

/// The command refusals a sender can avoid by following `cmd.v1.json`
/// alone (the others need the daemon's state, clock or policy).
const PARSE_CODES: [&str; 10] = [
    "not_json",
    "not_an_object",
    "missing_field",
    "wrong_type",
    "empty_field",
    "too_long",
    "control_character",
    "unknown_action",
    "bad_minutes",
    "bad_time",
];

/// The schemas of docs/schema/, and what real payloads have met.
struct Contract {
    schemas: BTreeMap<String, Schema>,
    seen: BTreeSet<String>,
    checked: usize,
}

impl Contract {
    fn load() -> Contract {
        Contract {
            schemas: schema_files()
                .into_iter()
                .map(|f| (f.clone(), Schema::load(&f)))
                .collect(),
            seen: BTreeSet::new(),
            checked: 0,
        }
    }

    /// `v` must conform to `file`; its tag must name that file
    /// (`wallflux.zone/1` ↔ `zone.v1.json`), and a payload of a file
    /// without a tag must have none.
    fn check(&mut self, file: &str, v: &Value, what: &str) {
        let schema = self
            .schemas
            .get(file)
            .unwrap_or_else(|| panic!("{what}: no docs/schema/{file}"));
        let mut refs = BTreeSet::new();
        if let Err(e) = schema.validate(v, &mut refs) {
            panic!("{what}: {e}\n{v}");
        }
        match v.get("schema").and_then(Value::as_str) {
            Some(tag) => assert_eq!(file_of_tag(tag).as_deref(), Some(file), "{what}: {v}"),
            None => assert!(
                file.starts_with("cmd"),
                "{what}: a payload of {file} without its schema tag: {v}"
            ),
        }
        self.seen.insert(file.to_string());
        self.seen.extend(refs);
        self.checked += 1;
    }

    /// Does `file` refuse `v`?
    fn refuses(&self, file: &str, v: &Value) -> bool {
        !self.schemas[file].check(v, &mut BTreeSet::new()).is_empty()
    }

    fn assert_seen(&self, wanted: &[&str]) {
        let missing: Vec<&&str> = wanted.iter().filter(|w| !self.seen.contains(**w)).collect();
        assert!(
            missing.is_empty(),
            "no real payload met {missing:?} (seen: {:?})",
            self.seen
        );
    }
}

/// The schema files, by name.
fn schema_files() -> Vec<String> {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("docs/schema");
    let mut files: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    files.sort();
    files
}

/// `wallflux.{name}/{n}` → `{name}.v{n}.json`.
fn file_of_tag(tag: &str) -> Option<String> {
    let (name, version) = tag.strip_prefix("wallflux.")?.split_once('/')?;
    Some(format!("{name}.v{version}.json"))
}

/// The schema of a message on `topic`: by its topic, and on `events` by
/// its tag.
fn file_of_message(topic: &str, v: &Value) -> String {
    let rest = topic
        .strip_prefix(ROOT)
        .and_then(|r| r.strip_prefix('/'))
        .unwrap_or_else(|| panic!("a topic outside {ROOT}: {topic}"));
    let levels: Vec<&str> = rest.split('/').collect();
    match levels.as_slice() {
        ["status"] => "status.v1.json".into(),
        ["zone", _, "state"] => "zone.v1.json".into(),
        ["kiln", "state"] => "kiln.v1.json".into(),
        ["channel", _] => "channel.v1.json".into(),
        ["alarm", _] => "alarm.v1.json".into(),
        ["cmd", "reply"] => "cmd-reply.v1.json".into(),
        ["cmd"] => "cmd.v1.json".into(),
        ["events"] => v["schema"]
            .as_str()
            .and_then(file_of_tag)
            .unwrap_or_else(|| panic!("an event without a known tag: {v}")),
        _ => panic!("a topic the contract does not have: {topic}"),
    }
}

/// The schema of an `analyze --outputs all` line's output (None: the log
/// only).
fn file_of_kind(kind: &str) -> Option<&'static str> {
    Some(match kind {
        "zone_state" => "zone.v1.json",
        "kiln_state" => "kiln.v1.json",
        "channel_state" => "channel.v1.json",
        "alarm_state" => "alarm.v1.json",
        "alarm_event" | "trend_alert" => "event.v1.json",
        "command_reply" => "cmd-reply.v1.json",
        "status" => "status.v1.json",
        "channel_health" | "unknown_input" | "alarm_flood" => return None,
        other => panic!("an output kind the contract does not know: {other}"),
    })
}

/// Every message until `pred` matches one (kept too), within `within`.
fn collect_until(
    rx: &Receiver<Msg>,
    all: &mut Vec<Msg>,
    within: Duration,
    what: &str,
    pred: impl Fn(&Msg) -> bool,
) -> Msg {
    let deadline = Instant::now() + within;
    loop {
        let left = deadline.saturating_duration_since(Instant::now());
        let m = rx
            .recv_timeout(left)
            .unwrap_or_else(|_| panic!("no message within {within:?}: {what}"));
        all.push(m.clone());
        if pred(&m) {
            return m;
        }
    }
}

/// The feeder's wall: 900 °C at the hot face, 400 °C at the shell, linear.
fn feed(pty: Pty) -> Feeder {
    Feeder::start(
        pty,
        DEPTHS_MM.len(),
        Arc::new(|i, _| Some(900.0 - 500.0 * DEPTHS_MM[i] / 250.0)),
    )
}

/// A closed schema refuses each way of breaking a real payload: a field it
/// does not know, a word outside its list, a missing field, a wrong type.
fn assert_broken_copies_refused(c: &Contract, file: &str, real: &Value) {
    let mut extra = real.clone();
    extra["backfill"] = json!(true);
    extra["surprise"] = json!(1);
    let mut word = real.clone();
    word["schema"] = json!("wallflux.other/9");
    let mut missing = real.clone();
    missing.as_object_mut().unwrap().remove("time");
    let mut typed = real.clone();
    typed["time"] = json!(1_800_000_000);
    for (how, v) in [
        ("an unknown field", extra),
        ("another tag", word),
        ("no time", missing),
        ("a number for the time", typed),
    ] {
        assert!(c.refuses(file, &v), "{file} accepts {how}: {v}");
    }
    assert!(
        !c.refuses(file, real),
        "{file} refuses the real one: {real}"
    );
}

/// During an outage the spool's age bound drops the oldest events and
/// announces it once the broker is back; a daemon killed without a word
/// leaves its last will.
#[test]
fn spool_notices_backfill_and_the_last_will_match_their_schemas() {
    let dir = temp_dir("contract-spool");
    let port = free_port();
    let pty = Pty::open().unwrap();
    let mut cfg = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0);
    // 5.4 s: the alarm's activation event is dropped within seconds.
    cfg += TOUCH;
    cfg += "\n[store]\nspool_max_age_h = 0.0015\n";
    let cfg = write(&dir, "wallflux.toml", &cfg);
    let log = dir.join("daemon.log");
    let mut daemon = start_daemon(&cfg, &log);
    let _feed = feed(pty);
    let deadline = Instant::now() + Duration::from_secs(40);
    while !std::fs::read_to_string(&log)
        .unwrap_or_default()
        .contains("spool full")
    {
        assert!(
            Instant::now() < deadline,
            "no spool drop while the broker is away"
        );
        std::thread::sleep(Duration::from_millis(100));
    }
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/#"));
    let mut all = Vec::new();
    let notice = collect_until(
        &rx,
        &mut all,
        Duration::from_secs(45),
        "the spool notice",
        |m| m.json["type"] == "events_dropped",
    );
    assert_eq!(notice.topic, format!("{ROOT}/events"));
    assert!(!notice.retained);
    // `online` goes first at the connection, before the backfill.
    let online = |m: &Msg| {
        m.topic == format!("{ROOT}/status")
            && m.json["state"] == "online"
            && m.json.get("sources").is_none()
    };
    if !all.iter().any(online) {
        collect_until(&rx, &mut all, Duration::from_secs(20), "online", online);
    }
    daemon.kill().unwrap();
    let _ = daemon.wait();
    collect_until(
        &rx,
        &mut all,
        Duration::from_secs(20),
        "the last will",
        |m| m.topic == format!("{ROOT}/status") && m.json["state"] == "offline",
    );

    let mut c = Contract::load();
    for m in &all {
        c.check(&file_of_message(&m.topic, &m.json), &m.json, &m.topic);
    }
    c.assert_seen(&SPOOL_AND_WILL);
    assert_broken_copies_refused(&c, "spool.v1.json", &notice.json);
}

/// A live daemon on a real broker: its status, states and events, and the
/// answers to commands, each sent command held against `cmd.v1.json`: one
/// the schema refuses is refused by the daemon for the same reason (a
/// parse code), one it accepts never is.
#[test]
fn live_payloads_and_commands_match_their_schemas() {
    let dir = temp_dir("contract-live");
    let port = free_port();
    let _broker = Broker::start(port, &dir);
    let rx = subscribe(port, &format!("{ROOT}/#"));
    let pty = Pty::open().unwrap();
    let cfg = one_zone_config(&pty.path, port, 1.5, 250.0, &DEPTHS_MM, 1.0) + TOUCH;
    let cfg = write(&dir, "wallflux.toml", &cfg);
    let daemon = start_daemon(&cfg, &dir.join("daemon.log"));
    let _feed = feed(pty);
    let mut all = Vec::new();
    collect_until(
        &rx,
        &mut all,
        Duration::from_secs(30),
        "the shell-touch alarm active",
        |m| {
            m.topic == format!("{ROOT}/alarm/wall-shell-touch")
                && m.json["state"] == "unacknowledged"
        },
    );

    let alarm = "wall-shell-touch";
    let long_id = "i".repeat(65);
    let commands: Vec<(&str, Vec<u8>)> = vec![
        ("an ack", json!({"id": "c-ack", "action": "ack", "alarm": alarm, "by": "op-1"})),
        ("a shelve", json!({"id": "c-shelve", "action": "shelve", "alarm": alarm, "by": "op-1", "minutes": 30})),
        ("a key of the sender's own", json!({"id": "c-extra", "action": "unshelve", "alarm": alarm, "by": "op-1", "note": "end of shift"})),
        ("an unknown alarm", json!({"id": "c-unknown", "action": "ack", "alarm": "no-such-alarm", "by": "op-1"})),
        ("a zone without a baseline", json!({"id": "c-base", "action": "baseline_start", "zone": "wall", "by": "op-1"})),
        ("an unknown action", json!({"id": "c-fly", "action": "fly", "alarm": alarm, "by": "op-1"})),
        ("no by", json!({"id": "c-noby", "action": "ack", "alarm": alarm})),
        ("a shelve without minutes", json!({"id": "c-nomin", "action": "shelve", "alarm": alarm, "by": "op-1"})),
        ("zero minutes", json!({"id": "c-zero", "action": "shelve", "alarm": alarm, "by": "op-1", "minutes": 0})),
        ("minutes as text", json!({"id": "c-text", "action": "shelve", "alarm": alarm, "by": "op-1", "minutes": "30"})),
        ("a time in words", json!({"id": "c-when", "action": "ack", "alarm": alarm, "by": "op-1", "time": "yesterday"})),
        ("a right-to-left override", json!({"id": "c-bidi", "action": "ack", "alarm": alarm, "by": "op\u{202e}1"})),
        ("an id too long", json!({"id": long_id, "action": "ack", "alarm": alarm, "by": "op-1"})),
        ("an empty id", json!({"id": "", "action": "ack", "alarm": alarm, "by": "op-1"})),
    ]
    .into_iter()
    .map(|(what, v)| (what, v.to_string().into_bytes()))
    .chain([
        ("not JSON", b"shelve it please".to_vec()),
        ("an array", b"[1, 2]".to_vec()),
    ])
    .collect();

    let mut c = Contract::load();
    for (what, payload) in &commands {
        let sent = crate::common::mqtt::stamped(payload);
        publish_command(port, &format!("{ROOT}/cmd"), &sent);
        let reply = collect_until(&rx, &mut all, Duration::from_secs(10), what, |m| {
            m.topic == format!("{ROOT}/cmd/reply")
        })
        .json;
        let code = reply["code"].as_str();
        let parsed: Option<Value> = serde_json::from_slice(&sent).ok();
        match parsed.filter(|v| !c.refuses("cmd.v1.json", v)) {
            Some(v) => {
                c.check("cmd.v1.json", &v, what);
                assert!(
                    code.is_none_or(|k| !PARSE_CODES.contains(&k)),
                    "{what}: the schema takes it, the daemon refused it as {reply}"
                );
            }
            None => assert!(
                code.is_some_and(|k| PARSE_CODES.contains(&k)),
                "{what}: the schema refuses it, the daemon answered {reply}"
            ),
        }
    }
    for (id, ok) in [
        ("c-ack", true),
        ("c-shelve", true),
        ("c-extra", true),
        ("c-base", false),
    ] {
        let r = all
            .iter()
            .find(|m| m.topic.ends_with("/cmd/reply") && m.json["id"] == id)
            .unwrap();
        assert_eq!(r.json["ok"], ok, "{}", r.json);
    }
    // Every command's audit event, then the clean stop's `offline`.
    let audits = |all: &[Msg]| all.iter().filter(|m| m.json["type"] == "command").count();
    while audits(&all) < commands.len() {
        collect_until(
            &rx,
            &mut all,
            Duration::from_secs(10),
            "every audit event",
            |m| m.json["type"] == "command",
        );
    }
    stop_daemon(daemon);
    collect_until(&rx, &mut all, Duration::from_secs(20), "offline", |m| {
        m.topic == format!("{ROOT}/status") && m.json["state"] == "offline"
    });

    // The commands on `cmd` were each held against the schema above.
    for m in all.iter().filter(|m| !m.topic.ends_with("/cmd")) {
        c.check(&file_of_message(&m.topic, &m.json), &m.json, &m.topic);
    }
    c.assert_seen(&LIVE);
    let real = |pred: &dyn Fn(&Msg) -> bool| all.iter().find(|m| pred(m)).unwrap().json.clone();
    let zone = real(&|m| m.topic.ends_with("/zone/wall/state"));
    assert_broken_copies_refused(&c, "zone.v1.json", &zone);
    let audit = real(&|m| m.json["type"] == "command");
    assert_broken_copies_refused(&c, "command.v1.json", &audit);
    let event = real(&|m| m.json["type"] == "alarm");
    assert_broken_copies_refused(&c, "event.v1.json", &event);
    let mut seq_as_text = event.clone();
    seq_as_text["seq"] = json!("3");
    assert!(c.refuses("event.v1.json", &seq_as_text));
    let alarm_state = real(&|m| m.topic.ends_with("/alarm/wall-shell-touch"));
    assert_broken_copies_refused(&c, "alarm.v1.json", &alarm_state);
    let mut state_word = alarm_state.clone();
    state_word["state"] = json!("silenced");
    assert!(c.refuses("alarm.v1.json", &state_word));
}

/// A configuration of every zone model for the replay: a transient wall
/// with a contact resistance, a layered wall with a hot-face thermocouple
/// (lining baseline) and a transient fallback, a quadratic door; a price
/// for the cost fields, a calibration certificate long overdue.
const REPLAY_CONFIG: &str = r#"
[site]
plant = "test-plant"
kiln = "k1"
energy_price_per_kwh = 0.12
currency = "EUR"

[mqtt]
host = "127.0.0.1"
topic_root = "wf"

[[source]]
name = "box"
kind = "line"
port = "/dev/null"
silence_s = 300

[[channel]]
name = "side-25"
source = "box"
input = 1
type = "K"
calibration_date = "2020-01-01"
[[channel]]
name = "side-160"
source = "box"
input = 2
type = "K"
[[channel]]
name = "side-300"
source = "box"
input = 3
type = "K"
[[channel]]
name = "side-shell"
source = "box"
input = 4
type = "K"
[[channel]]
name = "back-hot"
source = "box"
input = 5
type = "B"
uncertainty_c = 2.0
[[channel]]
name = "back-60"
source = "box"
input = 6
type = "K"
[[channel]]
name = "back-150"
source = "box"
input = 7
type = "K"
[[channel]]
name = "back-260"
source = "box"
input = 8
type = "K"
[[channel]]
name = "back-shell"
source = "box"
input = 9
type = "K"
[[channel]]
name = "door-30"
source = "box"
input = 10
type = "K"
[[channel]]
name = "door-120"
source = "box"
input = 11
type = "K"
[[channel]]
name = "door-200"
source = "box"
input = 12
type = "K"
[[channel]]
name = "door-shell"
source = "box"
input = 13
type = "K"

[[material]]
name = "dense"
conductivity_w_mk = [[200.0, 1.00], [800.0, 1.12], [1300.0, 1.25]]
density_kg_m3 = 2100.0
specific_heat_j_kgk = 1000.0
max_service_c = 1450.0
[[material]]
name = "ifb"
conductivity_w_mk = [[200.0, 0.24], [600.0, 0.29], [1000.0, 0.35], [1400.0, 0.44]]
density_kg_m3 = 780.0
specific_heat_j_kgk = 1000.0
max_service_c = 1430.0

[[zone]]
name = "side"
area_m2 = 9.6
model = "transient"
interval_s = 60
firing_setpoint_c = 1240
layers = [
  { material = "dense", thickness_mm = 115, contact_m2k_w = 0.01 },
  { material = "ifb", thickness_mm = 230 },
]
probes = [
  { channel = "side-25", depth_mm = 25 },
  { channel = "side-160", depth_mm = 160 },
  { channel = "side-300", depth_mm = 300 },
  { channel = "side-shell", depth_mm = 345 },
]

[[zone]]
name = "back"
area_m2 = 6.0
model = "layered"
fallback = "transient"
interval_s = 60
firing_setpoint_c = 1240
hot_face_channel = "back-hot"
baseline_days = 0.1
layers = [
  { material = "dense", thickness_mm = 115 },
  { material = "ifb", thickness_mm = 230 },
]
probes = [
  { channel = "back-60", depth_mm = 60 },
  { channel = "back-150", depth_mm = 150 },
  { channel = "back-260", depth_mm = 260 },
  { channel = "back-shell", depth_mm = 345 },
]

[[zone]]
name = "door"
area_m2 = 4.2
model = "quadratic"
interval_s = 60
firing_setpoint_c = 1210
layers = [{ material = "ifb", thickness_mm = 280 }]
probes = [
  { channel = "door-30", depth_mm = 30 },
  { channel = "door-120", depth_mm = 120 },
  { channel = "door-200", depth_mm = 200 },
  { channel = "door-shell", depth_mm = 280 },
]
"#;

/// Every output of `analyze --outputs all` over a simulated firing of
/// [`REPLAY_CONFIG`] (the independent simulator's walls, a sample a minute):
/// zone states of every model and status, kiln states, channel states, the
/// built-in alarms' states and events as the shells warm, trend alerts.
#[test]
fn every_output_of_a_simulated_firing_matches_its_schema() {
    let dir = temp_dir("contract-replay");
    let settings = wallflux::config::parse(REPLAY_CONFIG, "replay.toml", None).unwrap();
    let mut kiln = wallflux::sim::scenario::Kiln::new(&settings).unwrap();
    let back = settings.zone_named("back").unwrap();
    let every = (60.0 / kiln.scan_s()).round().max(1.0) as usize;
    let mut csv = String::from("time,channel,value\n");
    let start_s = 1_800_000_000.0;
    for n in 0.. {
        kiln.scan();
        if kiln.time_s() > kiln.duration_s() {
            break;
        }
        if n % every != 0 {
            continue;
        }
        let t = start_s + kiln.time_s();
        // A dither of a few hundredths: no probe repeats a value exactly.
        let dither = 0.03 * ((n as f64) * 0.7).sin();
        for (zi, z) in settings.zones.iter_ids() {
            for p in &z.probes {
                let v = kiln.temperature_c(zi, p.depth_m) + dither;
                csv += &format!("{t},{},{v:.2}\n", settings.channels[p.channel].name);
            }
        }
        csv += &format!(
            "{t},back-hot,{:.2}\n",
            kiln.temperature_c(back, 0.0) + dither
        );
    }
    let samples = write(&dir, "samples.csv", &csv);
    let cfg = write(&dir, "replay.toml", REPLAY_CONFIG);
    let o = run(&[
        "analyze",
        "--config",
        cfg.to_str().unwrap(),
        "--samples",
        samples.to_str().unwrap(),
        "--outputs",
        "all",
    ]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );

    let mut c = Contract::load();
    let mut by_file: BTreeMap<&str, Vec<Value>> = BTreeMap::new();
    let mut statuses = BTreeSet::new();
    for line in String::from_utf8_lossy(&o.stdout).lines() {
        let v: Value = serde_json::from_str(line).unwrap();
        let kind = v["kind"].as_str().unwrap();
        let Some(file) = file_of_kind(kind) else {
            continue;
        };
        c.check(file, &v["output"], kind);
        if kind == "zone_state" {
            statuses.insert(v["output"]["status"].as_str().unwrap().to_string());
        }
        by_file.entry(file).or_default().push(v["output"].clone());
    }
    c.assert_seen(&REPLAY);
    assert!(c.checked > 1000, "{} outputs", c.checked);
    // The firing takes the zones through more than one status (numbers
    // withheld as null in some).
    assert!(statuses.len() >= 2, "{statuses:?}");
    for (file, outputs) in &by_file {
        assert_broken_copies_refused(&c, file, &outputs[0]);
    }
    // Of the zone state's optional fields, the ones this firing published.
    let zones = &by_file["zone.v1.json"];
    for field in [
        "interface_c",
        "interface_cold_c",
        "forecast",
        "time_to_limit_h",
        "filter_nis",
        "lining_baseline",
        "model_used",
        "uncertainty",
    ] {
        assert!(
            zones
                .iter()
                .any(|z| z.get(field).is_some_and(|f| !f.is_null())),
            "no zone state with {field}"
        );
    }
}

/// The parts above together meet every schema file and every alternative
/// at the top of one: a new schema, or a new alternative, needs a real
/// payload in one of them.
#[test]
fn every_schema_and_alternative_is_exercised_by_some_test() {
    let covered: BTreeSet<&str> = SPOOL_AND_WILL
        .iter()
        .chain(&LIVE)
        .chain(&REPLAY)
        .copied()
        .collect();
    let mut wanted = Vec::new();
    for f in schema_files() {
        assert!(f.ends_with(".json"), "{f}");
        let s: Value = serde_json::from_str(
            &std::fs::read_to_string(
                std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
                    .join("docs/schema")
                    .join(&f),
            )
            .unwrap(),
        )
        .unwrap();
        match s.get("oneOf").and_then(Value::as_array) {
            Some(alts) => {
                for a in alts {
                    wanted.push(format!("{f}{}", a["$ref"].as_str().unwrap()));
                }
            }
            None => wanted.push(f),
        }
    }
    let missing: Vec<&String> = wanted
        .iter()
        .filter(|w| !covered.contains(w.as_str()))
        .collect();
    assert!(missing.is_empty(), "exercised by no test: {missing:?}");
    assert!(wanted.len() >= 16, "{wanted:?}");
}
