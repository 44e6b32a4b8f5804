//! Cold-junction compensation through the engine: the frame's `cj=`, a
//! configured cold-junction channel, or the source's fixed value, in that
//! order. Check value (REFERENCES.md, from the NIST ITS-90 type K function):
//! 4.096 mV with the terminals at 25 °C is 124.31 °C; adding temperatures
//! (100 °C + 25 °C) would be 0.7 °C off, ignoring the junction 24 °C off.

use std::sync::Arc;

use wallflux::acquire::line::{Frame, Unit, Value};
use wallflux::config;
use wallflux::monitor::Monitor;
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
type = "K"
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
probes = [{ channel = "tc", depth_mm = 20 }, { channel = "terminals", depth_mm = 200 }]
"#;

fn frame(values: &[(u8, Value)], cj: Option<f64>) -> Frame {
    Frame {
        seq: 0,
        values: values.iter().copied().collect(),
        cj_c: cj,
        lost_before: 0,
        source_restarted: false,
    }
}

fn celsius(m: &mut Monitor, at: f64) -> f64 {
    let mut out = None;
    while let Some(c) = m.poll_channel(Timestamp::from_epoch_s(at)) {
        if c.channel.as_str() == "tc" {
            out = c.celsius;
        }
    }
    out.expect("tc has a value")
}

#[test]
fn cold_junction_sources_in_order() {
    let s = Arc::new(config::parse(CONFIG, "t", None).unwrap());
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
    m.handle_frame(
        0,
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
    m.handle_frame(
        0,
        &frame(&[(1, mv), (2, terminals(25.0))], Some(0.0)),
        Timestamp::from_epoch_s(40.0),
    );
    let t = celsius(&mut m, 40.0);
    assert!(
        (t - 100.0).abs() < 0.01,
        "cj 0 °C: 4.096 mV is 100 °C (NIST table), got {t}"
    );

    // Without either for longer than the silence limit: the fixed cj_c.
    m.handle_frame(0, &frame(&[(1, mv)], None), Timestamp::from_epoch_s(80.0));
    let t = celsius(&mut m, 80.0);
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
    let june_2025 = Timestamp::parse("2025-06-01T00:00:00Z").unwrap();
    let june_2026 = Timestamp::parse("2026-06-01T00:00:00Z").unwrap();
    for (now, overdue) in [(june_2025, false), (june_2026, true)] {
        let mut m = Monitor::new(s.clone(), now);
        m.handle_frame(
            0,
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
        while let Some(c) = m.poll_channel(now) {
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
