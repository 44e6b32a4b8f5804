//! Cold-junction compensation through the engine: the frame's `cj=`, a
//! configured cold-junction channel, or the source's fixed value, in that
//! order. Check value (docs/references.md, from the NIST ITS-90 type K function):
//! 4.096 mV with the terminals at 25 °C is 124.31 °C; adding temperatures
//! (100 °C + 25 °C) would be 0.7 °C off, ignoring the junction 24 °C off.

use std::sync::Arc;

use wallflux::acquire::line::{self, Frame, Unit, Value};
use wallflux::config;
use wallflux::monitor::channel::{ChannelReport, Health};
use wallflux::monitor::output::Output;
use wallflux::monitor::Monitor;
use wallflux::protocol::scan::Scan;
use wallflux::time::Timestamp;

const CONFIG: &str = r#"
[site]
plant = "p"
kiln = "k"
[mqtt]
host = "127.0.0.1"
[[source]]
name = "box"
kind = "line"
port = "/dev/null"
cj_channel = "terminals"
silence_s = 10
[[source]]
name = "box2"
kind = "line"
port = "/dev/null"
cj_c = 20.0
[[channel]]
name = "tc"
source = "box"
input = 1
type = "K"
signal = "millivolts"
[[channel]]
name = "terminals"
source = "box"
input = 2
type = "terminal"
[[channel]]
name = "tc-deep"
source = "box"
input = 3
type = "K"
[[channel]]
name = "tc2"
source = "box2"
input = 1
type = "K"
signal = "millivolts"
[[material]]
name = "m"
conductivity_w_mk = 1.0
density_kg_m3 = 2000.0
specific_heat_j_kgk = 1000.0
[[zone]]
name = "z"
area_m2 = 1.0
model = "quadratic"
interval_s = 10
layers = [{ material = "m", thickness_mm = 200 }]
probes = [{ channel = "tc", depth_mm = 20 }, { channel = "tc-deep", depth_mm = 120 }, { channel = "tc2", depth_mm = 200 }]
"#;

/// A line frame with `values` and `cj`, as the scan its decoder hands on.
fn frame(values: &[(u8, Value)], cj: Option<f64>) -> Scan {
    line::to_scan(&Frame {
        seq: 0,
        values: values.iter().copied().collect(),
        cj_c: cj,
        lost_before: 0,
        source_restarted: false,
    })
}

/// Every channel state due at `at`, by name (a state is due once per
/// period or at a change, so all are taken at once).
fn reports(m: &mut Monitor, at: f64) -> Vec<ChannelReport> {
    channel_states(m, Timestamp::from_epoch_s(at))
}

/// The channel states due at `now`.
fn channel_states(m: &mut Monitor, now: Timestamp) -> Vec<ChannelReport> {
    let mut out = Vec::new();
    m.handle_timeout(now);
    while let Some(o) = m.poll_output() {
        if let Output::ChannelState(c) = o {
            out.push(c);
        }
    }
    out
}

fn report(m: &mut Monitor, at: f64, name: &str) -> ChannelReport {
    pick(&reports(m, at), name)
}

fn pick(all: &[ChannelReport], name: &str) -> ChannelReport {
    all.iter()
        .rev()
        .find(|c| c.channel.as_str() == name)
        .cloned()
        .unwrap_or_else(|| panic!("{name} published"))
}

fn celsius(m: &mut Monitor, at: f64) -> f64 {
    report(m, at, "tc").celsius.expect("tc has a value")
}

#[test]
fn cold_junction_sources_in_order() {
    let s = Arc::new(config::parse(CONFIG, "t", None).unwrap());
    let box1 = s.source_named("box").unwrap();
    let box2 = s.source_named("box2").unwrap();
    let mut m = Monitor::new(s, Timestamp::from_epoch_s(0.0));
    let mv = Value::Reading {
        value: 4.096,
        unit: Unit::Millivolts,
    };
    let terminals = |c: f64| Value::Reading {
        value: c,
        unit: Unit::Celsius,
    };

    // The cold-junction channel in the same frame, no cj=.
    m.handle_scan(
        box1,
        &frame(&[(1, mv), (2, terminals(25.0))], None),
        Timestamp::from_epoch_s(1.0),
    );
    let t = celsius(&mut m, 1.0);
    assert!((t - 124.31).abs() < 0.01, "{t}");
    assert!(
        (t - 125.0).abs() > 0.5,
        "adding temperatures would be wrong by more than 0.5 °C"
    );

    // A frame's cj= wins over the channel.
    // (40 s later: a 24 °C change in a second would rightly be a spike.)
    m.handle_scan(
        box1,
        &frame(&[(1, mv), (2, terminals(25.0))], Some(0.0)),
        Timestamp::from_epoch_s(40.0),
    );
    let t = celsius(&mut m, 40.0);
    assert!(
        (t - 100.0).abs() < 0.01,
        "cj 0 °C: 4.096 mV is 100 °C (NIST table), got {t}"
    );

    // Without either for longer than the silence limit: no compensation
    // is possible, and the channel says why (a fixed value no longer
    // stands in for a configured terminal sensor).
    m.handle_scan(
        box1,
        &frame(&[(1, mv)], None),
        Timestamp::from_epoch_s(80.0),
    );
    let r = report(&mut m, 80.0, "tc");
    assert_eq!((r.status, r.celsius), (Health::Invalid, None));
    assert!(
        r.reason
            .contains("no fresh reading from the cold-junction (terminal) sensor"),
        "{}",
        r.reason
    );

    // A source with only a fixed cj_c uses it.
    m.handle_scan(
        box2,
        &frame(&[(1, mv)], None),
        Timestamp::from_epoch_s(81.0),
    );
    let t = report(&mut m, 81.0, "tc2").celsius.unwrap();
    let want = wallflux::physics::thermocouple::compensated_c(
        wallflux::physics::thermocouple::TcType::K,
        4.096,
        20.0,
    )
    .unwrap();
    assert!(
        (t - want).abs() < 1e-9 && (t - 119.5).abs() < 0.5,
        "{t} vs {want}"
    );
}

/// A calibration certificate's correction, t = gain × t_raw + offset
/// (1.001 × 500 + 1.5 = 502.0 °C), and its expiry carried to the channel
/// topic: dated 2025-01-01 with a 365-day interval, it is current on
/// 2025-06-01 and overdue on 2026-06-01.
#[test]
fn calibration_is_applied_and_its_expiry_reported() {
    let text = CONFIG.replace(
        "signal = \"millivolts\"",
        "signal = \"celsius\"\ncalibration_offset_c = 1.5\ncalibration_gain = 1.001\ncalibration_date = \"2025-01-01\"\ncalibration_interval_days = 365",
    );
    let s = Arc::new(config::parse(&text, "t", None).unwrap());
    let box1 = s.source_named("box").unwrap();
    let june_2025 = Timestamp::parse("2025-06-01T00:00:00Z").unwrap();
    let june_2026 = Timestamp::parse("2026-06-01T00:00:00Z").unwrap();
    for (now, overdue) in [(june_2025, false), (june_2026, true)] {
        let mut m = Monitor::new(s.clone(), now);
        m.handle_scan(
            box1,
            &frame(
                &[(
                    1,
                    Value::Reading {
                        value: 500.0,
                        unit: Unit::Celsius,
                    },
                )],
                None,
            ),
            now,
        );
        let mut seen = false;
        for c in channel_states(&mut m, now) {
            if c.channel.as_str() == "tc" {
                assert!((c.celsius.unwrap() - 502.0).abs() < 1e-9, "{:?}", c.celsius);
                assert_eq!(c.calibration_overdue, overdue);
                assert_eq!(
                    c.calibration_date,
                    Timestamp::parse("2025-01-01T00:00:00Z").ok()
                );
                seen = true;
            }
        }
        assert!(seen);
    }
    let bad = CONFIG.replace(
        "signal = \"millivolts\"",
        "signal = \"celsius\"\ncalibration_date = \"01/01/2025\"",
    );
    assert!(config::parse(&bad, "t", None).is_err());
}

fn terminal_c(c: f64) -> Value {
    Value::Reading {
        value: c,
        unit: Unit::Celsius,
    }
}

const MV: Value = Value::Reading {
    value: 4.096,
    unit: Unit::Millivolts,
};

/// The terminal sensor's own diagnostics, and what each does to the
/// millivolt channel it compensates: `open`, a value outside the plausible
/// −40…85 °C of a field box, a spike (a 30 °C jump in 10 s, above the
/// terminal default of 10 °C/min), and recovery. A terminal channel is
/// published as `type = "terminal"` with a class-B platinum σ
/// ((0.30 + 0.005 × 25) / √3 = 0.245 °C at 25 °C).
#[test]
fn terminal_sensor_faults_invalidate_the_millivolt_channels() {
    let s = Arc::new(config::parse(CONFIG, "t", None).unwrap());
    let box1 = s.source_named("box").unwrap();
    let mut m = Monitor::new(s, Timestamp::from_epoch_s(0.0));
    let mut at = 0.0;
    let mut step = |m: &mut Monitor, terminal: Value| {
        at += 10.0;
        m.handle_scan(
            box1,
            &frame(&[(1, MV), (2, terminal)], None),
            Timestamp::from_epoch_s(at),
        );
        let all = reports(m, at);
        (pick(&all, "terminals"), pick(&all, "tc"))
    };
    let (term, tc) = step(&mut m, terminal_c(25.0));
    assert_eq!((term.status, term.tc_type), (Health::Ok, "terminal"));
    assert!((term.sigma_c.unwrap() - 0.425 / 3f64.sqrt()).abs() < 1e-9);
    assert!((tc.celsius.unwrap() - 124.31).abs() < 0.01);

    let cases: [(Value, Health, &str); 3] = [
        (Value::Open, Health::Open, "open"),
        (terminal_c(120.0), Health::OutOfRange, "plausible range"),
        (terminal_c(-55.0), Health::OutOfRange, "plausible range"),
    ];
    for (value, health, words) in cases {
        let (term, tc) = step(&mut m, value);
        assert_eq!(term.status, health, "{}", term.reason);
        assert_eq!(
            (tc.status, tc.celsius),
            (Health::Invalid, None),
            "{}",
            tc.reason
        );
        assert!(
            tc.reason.contains(words) && tc.reason.contains("cold-junction"),
            "{}",
            tc.reason
        );
        // Back to normal: compensated again.
        let (term, tc) = step(&mut m, terminal_c(25.0));
        assert_eq!((term.status, tc.status), (Health::Ok, Health::Ok));
    }
    let (term, tc) = step(&mut m, terminal_c(55.0));
    assert_eq!(term.status, Health::Spike);
    assert_eq!(tc.status, Health::Invalid);
    assert!(tc.reason.contains("spike"), "{}", tc.reason);
    // A frame's own cj= is the box's measurement: it still compensates.
    at += 10.0;
    m.handle_scan(
        box1,
        &frame(&[(1, MV)], Some(0.0)),
        Timestamp::from_epoch_s(at),
    );
    let tc = report(&mut m, at, "tc");
    assert!((tc.celsius.unwrap() - 100.0).abs() < 0.01, "{}", tc.reason);
}

/// A failed cold junction raises the built-in thermocouple-fault alarm of
/// every millivolt probe it compensates (after its 30 s on-delay), with the
/// junction's failure as its reason; the celsius probe of the same box is
/// untouched.
#[test]
fn a_failed_cold_junction_raises_the_thermocouple_fault_alarm() {
    let s = Arc::new(config::parse(CONFIG, "t", None).unwrap());
    let box1 = s.source_named("box").unwrap();
    let box2 = s.source_named("box2").unwrap();
    let mut m = Monitor::new(s, Timestamp::from_epoch_s(0.0));
    let deep = Value::Reading {
        value: 60.0,
        unit: Unit::Celsius,
    };
    let index = |m: &Monitor, name: &str| m.settings().alarm_named(name).unwrap();
    let tc_fault = index(&m, "tc-fault");
    let deep_fault = index(&m, "tc-deep-fault");
    let run = |m: &mut Monitor, from: u32, to: u32, terminal: Value| {
        for k in from..to {
            let now = Timestamp::from_epoch_s(f64::from(k));
            m.handle_scan(
                box1,
                &frame(&[(1, MV), (2, terminal), (3, deep)], None),
                now,
            );
            m.handle_scan(box2, &frame(&[(1, MV)], None), now);
            m.handle_timeout(now);
            while m.poll_output().is_some() {}
        }
    };
    run(&mut m, 1, 60, terminal_c(24.0));
    let at = |k: f64| Timestamp::from_epoch_s(k);
    assert!(!m.alarms().configs().is_empty());
    assert_eq!(
        m.alarms().state(tc_fault, at(60.0)).unwrap().name(),
        "normal"
    );
    run(&mut m, 60, 120, Value::Open);
    assert_eq!(
        m.alarms().state(tc_fault, at(120.0)).unwrap().name(),
        "unacknowledged"
    );
    let reason = m.alarm_reason(tc_fault, at(120.0)).unwrap();
    assert!(
        reason.contains("cold-junction (terminal) sensor open"),
        "{reason}"
    );
    assert_eq!(
        m.alarms().state(deep_fault, at(120.0)).unwrap().name(),
        "normal"
    );
    assert_eq!(m.alarm_reason(deep_fault, at(120.0)), None);
    run(&mut m, 120, 180, terminal_c(24.0));
    assert_eq!(
        m.alarms().state(tc_fault, at(180.0)).unwrap().name(),
        "rtn_unacknowledged"
    );
}

/// Configuration: `type = "terminal"` reads °C only, measures a box (not a
/// wall probe, not the hot face), and excludes a fixed `cj_c` on the same
/// source; a cold-junction channel written with a thermocouple letter
/// (older files) is still diagnosed as a terminal sensor.
#[test]
fn terminal_channels_in_the_configuration() {
    let refused = [
        (
            CONFIG.replace(
                "type = \"terminal\"",
                "type = \"terminal\"\nsignal = \"millivolts\"",
            ),
            "channel[1].signal",
        ),
        (
            CONFIG.replace(
                "cj_channel = \"terminals\"",
                "cj_channel = \"terminals\"\ncj_c = 22.0",
            ),
            "source[0].cj_c",
        ),
        (
            CONFIG.replace(
                "{ channel = \"tc-deep\", depth_mm = 120 }",
                "{ channel = \"terminals\", depth_mm = 120 }",
            ),
            "zone[0].probes[1].channel",
        ),
    ];
    for (text, path) in refused {
        let e = config::parse(&text, "t", None).unwrap_err();
        assert!(
            e.problems
                .iter()
                .any(|p| p.path == path && p.line.is_some()),
            "{path}: {e}"
        );
    }
    let old = CONFIG.replace("type = \"terminal\"", "type = \"K\"");
    let s = Arc::new(config::parse(&old, "t", None).unwrap());
    let box1 = s.source_named("box").unwrap();
    let mut m = Monitor::new(s, Timestamp::from_epoch_s(0.0));
    m.handle_scan(
        box1,
        &frame(&[(1, MV), (2, terminal_c(120.0))], None),
        Timestamp::from_epoch_s(1.0),
    );
    let term = report(&mut m, 1.0, "terminals");
    assert_eq!(
        (term.status, term.tc_type),
        (Health::OutOfRange, "terminal")
    );
}

/// Source health is the monitor's, whatever the input kind: scans and the
/// losses their sequence shows, decode errors the edge reports, and
/// silence, which only a reading ends (a decode error is no reading).
#[test]
fn source_health_is_counted_per_source() {
    let s = Arc::new(config::parse(CONFIG, "t", None).unwrap());
    let box1 = s.source_named("box").unwrap();
    let box2 = s.source_named("box2").unwrap();
    let mut m = Monitor::new(s, Timestamp::from_epoch_s(0.0));
    let c = Value::Reading {
        value: 25.0,
        unit: Unit::Celsius,
    };
    let mut gap = frame(&[(2, c)], None);
    gap.lost_before = 4;
    m.handle_scan(box1, &frame(&[(2, c)], None), Timestamp::from_epoch_s(1.0));
    m.handle_scan(box1, &gap, Timestamp::from_epoch_s(2.0));
    m.handle_decode_error(box1, Timestamp::from_epoch_s(3.0));
    m.handle_decode_error(box2, Timestamp::from_epoch_s(3.0));
    m.handle_decode_error(box2, Timestamp::from_epoch_s(4.0));
    let (a, b) = (m.source_counters(box1), m.source_counters(box2));
    assert_eq!((a.scans, a.lost_scans, a.decode_errors), (1 + 1, 4, 1));
    assert_eq!((b.scans, b.lost_scans, b.decode_errors), (0, 0, 2));
    // silence_s = 10 for "box": silent 10 s after its last reading at 2 s.
    m.handle_timeout(Timestamp::from_epoch_s(11.5));
    assert!(!m.source_silent(box1));
    m.handle_timeout(Timestamp::from_epoch_s(12.5));
    assert!(m.source_silent(box1));
    m.handle_decode_error(box1, Timestamp::from_epoch_s(13.0));
    m.handle_timeout(Timestamp::from_epoch_s(13.0));
    assert!(
        m.source_silent(box1),
        "a rejected line does not end a silence"
    );
    m.handle_scan(box1, &frame(&[(2, c)], None), Timestamp::from_epoch_s(14.0));
    m.handle_timeout(Timestamp::from_epoch_s(14.0));
    assert!(!m.source_silent(box1));
}

/// The monitor says when it next needs the time: channel states at once
/// after a change and every zone interval (10 s here), the zone's cycle, a
/// source just after its silence limit (10 s after its last reading, the
/// start for one that never spoke); and `handle_timeout` then does that
/// work.
#[test]
fn poll_timeout_names_the_next_due_work() {
    let t = Timestamp::from_epoch_s;
    let s = Arc::new(config::parse(CONFIG, "t", None).unwrap());
    let box1 = s.source_named("box").unwrap();
    let box2 = s.source_named("box2").unwrap();
    let mut m = Monitor::new(s, t(0.0));
    assert_eq!(m.poll_timeout(), Some(t(0.0)), "first channel states");
    assert_eq!(channel_states(&mut m, t(0.0)).len(), 4);
    assert_eq!(m.poll_timeout(), Some(t(10.0)), "the zone and the channels");
    let terminals = Value::Reading {
        value: 25.0,
        unit: Unit::Celsius,
    };
    m.handle_scan(box1, &frame(&[(2, terminals)], None), t(5.0));
    assert_eq!(m.poll_timeout(), Some(t(5.0)), "a health change");
    let kinds = |m: &mut Monitor, now: f64| {
        m.handle_timeout(t(now));
        std::iter::from_fn(|| m.poll_output())
            .map(|o| o.kind().name())
            .collect::<Vec<_>>()
    };
    assert_eq!(kinds(&mut m, 5.0), ["channel_health", "channel_state"]);
    assert_eq!(m.poll_timeout(), Some(t(10.0)));
    let at_10 = kinds(&mut m, 10.0);
    assert_eq!(at_10[..2], ["zone_state", "kiln_state"], "{at_10:?}");
    // box2 never spoke: silent from 10 s after the start.
    let next = m.poll_timeout().unwrap();
    assert!(
        (next.epoch_s() - 10.0).abs() < 0.01 && next > t(10.0),
        "{next:?}"
    );
    assert!(!m.source_silent(box2));
    m.handle_timeout(next);
    assert!(m.source_silent(box2));
    // box spoke at 5 s: silent from 15 s, unless an alarm delay comes first.
    let next = m.poll_timeout().unwrap();
    assert!(next > t(10.0) && next <= t(15.01), "{next:?}");
    let box_silent = t(15.01);
    while m.poll_timeout().is_some_and(|n| n <= box_silent) {
        assert!(!m.source_silent(box1));
        let n = m.poll_timeout().unwrap();
        m.handle_timeout(n);
    }
    assert!(m.source_silent(box1));
    assert_eq!(m.poll_timeout(), Some(t(20.0)), "the next cycle");
}
