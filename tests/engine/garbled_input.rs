//! The three text entry points of the fuzz targets (fuzz/fuzz_targets/),
//! run under `cargo test` with proptest on stable: the configuration (TOML
//! text → validated settings → an engine that runs), `Timestamp::parse`, and
//! the MQTT command parser. Each must answer every input with a value or an
//! error, never a panic; what it accepts must hold its own rules.

use std::sync::Arc;

use proptest::prelude::*;
use wallflux::acquire::line::{Unit, Value};
use wallflux::config;
use wallflux::monitor::command::{check_text, parse_command};
use wallflux::monitor::Monitor;
use wallflux::time::Timestamp;

const EXAMPLE: &str = include_str!("../../config/example.toml");
const DEMO: &str = include_str!("../../config/demo.toml");

/// Values a garbled line may get: edge numbers, wrong types, broken syntax.
fn token() -> impl Strategy<Value = String> {
    prop_oneof![
        Just("nan".to_string()),
        Just("inf".to_string()),
        Just("-inf".to_string()),
        Just("1e308".to_string()),
        Just("-1e308".to_string()),
        Just("1e-300".to_string()),
        Just("0".to_string()),
        Just("-1".to_string()),
        Just("9223372036854775807".to_string()),
        Just("\"\"".to_string()),
        Just("[]".to_string()),
        Just("{}".to_string()),
        Just("[[1.0, 2.0], [1.0, 3.0]]".to_string()),
        Just("{ polynomial = [], from_c = 1.0, to_c = 1.0 }".to_string()),
        Just("true".to_string()),
        Just("\"x".to_string()),
        any::<f64>().prop_map(|v| format!("{v:e}")),
        any::<i64>().prop_map(|v| v.to_string()),
        "[a-z_]{0,12}".prop_map(|s| format!("\"{s}\"")),
        ".{0,20}",
    ]
}

/// One edit of a line of a good file.
#[derive(Debug, Clone)]
enum Edit {
    Value(usize, String),
    Delete(usize),
    Insert(usize, String),
    Cut(usize),
}

fn edit() -> impl Strategy<Value = Edit> {
    prop_oneof![
        (any::<usize>(), token()).prop_map(|(i, t)| Edit::Value(i, t)),
        any::<usize>().prop_map(Edit::Delete),
        (any::<usize>(), "[a-z_]{1,16} = [0-9.e-]{1,8}").prop_map(|(i, l)| Edit::Insert(i, l)),
        any::<usize>().prop_map(Edit::Cut),
    ]
}

fn apply(base: &str, edits: &[Edit]) -> String {
    let mut lines: Vec<String> = base.lines().map(str::to_string).collect();
    for e in edits {
        let n = lines.len().max(1);
        match e {
            Edit::Value(i, t) => {
                if let Some(l) = lines.get_mut(i % n) {
                    if let Some((k, _)) = l.split_once(" = ") {
                        *l = format!("{k} = {t}");
                    }
                }
            }
            Edit::Delete(i) => {
                if !lines.is_empty() {
                    lines.remove(i % n);
                }
            }
            Edit::Insert(i, l) => lines.insert(i % (n + 1), l.clone()),
            Edit::Cut(i) => {
                if let Some(l) = lines.get_mut(i % n) {
                    let cut = l
                        .char_indices()
                        .nth(i % (l.len() + 1))
                        .map_or(l.len(), |c| c.0);
                    l.truncate(cut);
                }
            }
        }
    }
    lines.join("\n")
}

/// Whatever validation accepts, the engine runs: a few readings on every
/// channel, a zone cycle, the timers.
fn run_engine(s: config::Settings) {
    let s = Arc::new(s);
    let t0 = Timestamp::parse("2026-01-01T00:00:00Z").unwrap();
    let mut m = Monitor::new(s.clone(), t0);
    for step in 0..4 {
        let now = t0.plus_s(f64::from(step) * 30.0);
        for (i, (ch, c)) in s.channels.iter_ids().enumerate() {
            let unit = match c.signal {
                config::Signal::Celsius => Unit::Celsius,
                config::Signal::Millivolts => Unit::Millivolts,
            };
            let value = 20.0 + 10.0 * i as f64 + f64::from(step);
            let v = if unit == Unit::Millivolts {
                value / 40.0
            } else {
                value
            };
            m.handle_value(ch, Value::Reading { value: v, unit }, Some(25.0), now);
        }
        m.handle_timeout(now);
        while m.poll_output().is_some() {}
        m.handle_timeout(now);
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    /// The Modbus reply check on any bytes (the `modbus_reply` fuzz
    /// target's property): a frame is taken only when it is the answer,
    /// then with exactly the registers asked for.
    #[test]
    fn garbled_modbus_replies_never_panic(
        unit in 1u8..=247,
        holding in any::<bool>(),
        address in 0u16..1000,
        count in 1u16..=125,
        frame in prop::collection::vec(any::<u8>(), 0..260),
        fix_crc in any::<bool>(),
    ) {
        use wallflux::protocol::modbus::{check_reply, crc16, Function, Request};
        let req = Request {
            unit,
            function: if holding { Function::Holding } else { Function::Input },
            address,
            count,
            points: heapless::Vec::new(),
        };
        let mut frame = frame;
        if fix_crc && frame.len() >= 3 {
            // A frame with a right CRC, to reach the checks behind it.
            let n = frame.len() - 2;
            let c = crc16(&frame[..n]).to_le_bytes();
            frame[n..].copy_from_slice(&c);
        }
        let mut regs = heapless::Vec::new();
        if check_reply(&req, &frame, &mut regs).is_ok() {
            prop_assert_eq!(regs.len(), count as usize);
            prop_assert_eq!(frame[0], unit);
            prop_assert_eq!(frame.len(), 5 + 2 * count as usize);
        }
    }

    #[test]
    fn garbled_configs_never_panic(
        base in prop_oneof![Just(EXAMPLE), Just(DEMO)],
        edits in prop::collection::vec(edit(), 1..6),
    ) {
        let text = apply(base, &edits);
        match config::parse(&text, "t.toml", None) {
            Ok(s) => {
                // Every warning names a key and a line of the file.
                let lines = text.lines().count().max(1);
                for w in &s.warnings {
                    prop_assert!(!w.path.is_empty());
                    prop_assert!(w.line.is_some_and(|l| (1..=lines).contains(&l)), "{:?}", w);
                }
                run_engine(s);
            }
            Err(e) => {
                prop_assert!(!e.problems.is_empty());
                let _ = e.to_string();
            }
        }
    }

    #[test]
    fn arbitrary_text_is_no_configuration(text in "\\PC{0,400}") {
        prop_assert!(config::parse(&text, "t.toml", None).is_err());
    }

    #[test]
    fn timestamps_parse_or_refuse(text in prop_oneof![
        "\\PC{0,40}",
        "[0-9]{4}-[0-9]{2}-[0-9]{2}[T ][0-9]{2}:[0-9]{2}:[0-9]{2}(\\.[0-9]{0,12})?(Z|[+-][0-9]{2}:[0-9]{2})?",
        "-?[0-9]{0,25}(\\.[0-9]{0,10})?",
    ]) {
        if let Ok(t) = Timestamp::parse(&text) {
            // Within the years RFC 3339 writes, and it writes them.
            let s = t.epoch_s();
            prop_assert!(s.is_finite() && (-62_167_219_200.0..=253_402_300_800.0).contains(&s), "{text} → {s}");
            let back = t.rfc3339();
            prop_assert_eq!(back.len(), 24, "{}", back);
            prop_assert!(Timestamp::parse(&back).is_ok());
        }
    }

    #[test]
    fn commands_parse_or_refuse(payload in prop_oneof![
        prop::collection::vec(any::<u8>(), 0..300),
        "\\{\"(id|action|alarm|by|minutes|zone)\": ?(\"\\PC{0,20}\"|-?[0-9e.]{1,12}|null|\\[\\]), ?\"(action|alarm|by)\": ?\"\\PC{0,12}\"\\}".prop_map(String::into_bytes),
    ]) {
        if let Ok(c) = parse_command(&payload) {
            prop_assert!(check_text("id", &c.id).is_ok() && check_text("by", &c.by).is_ok());
        }
    }
}
