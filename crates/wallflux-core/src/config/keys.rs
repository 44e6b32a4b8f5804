//! The known keys of the configuration file, table by table, and the walk
//! that reports every unknown key of a file in one run, each with its key
//! path and line (serde stops at the first one).
//!
//! Adding a key: add it to its `raw` struct and to the table here; the test
//! `tables_match_the_raw_structs` fails until both agree.

use toml_edit::{ImDocument, TableLike};

use super::validate::{line_of, Problem};

/// What is under a key.
#[derive(Debug, Clone, Copy)]
pub(super) enum Sub {
    /// A value whose inside has no keys of its own.
    Leaf,
    /// A table (`[site]`, or an inline `{ ... }`), when the value is one.
    Table(&'static [(&'static str, Sub)]),
    /// An array of tables (`[[zone]]`, or `[{ ... }, ...]`).
    Items(&'static [(&'static str, Sub)]),
}

use Sub::{Items, Leaf, Table};

/// A material property written as a polynomial (a number or a table of
/// points has no keys).
const PROPERTY: &[(&str, Sub)] = &[("polynomial", Leaf), ("from_c", Leaf), ("to_c", Leaf)];

pub(super) const SITE: &[(&str, Sub)] = &[
    ("plant", Leaf),
    ("kiln", Leaf),
    ("energy_price_per_kwh", Leaf),
    ("currency", Leaf),
    ("firing_start_c", Leaf),
    ("operation", Leaf),
];

pub(super) const MQTT: &[(&str, Sub)] = &[
    ("host", Leaf),
    ("port", Leaf),
    ("client_id", Leaf),
    ("topic_root", Leaf),
    ("keep_alive_s", Leaf),
    ("queue_capacity", Leaf),
    ("username", Leaf),
    ("password_file", Leaf),
    ("password_credential", Leaf),
    ("allow_plaintext_credentials", Leaf),
    ("protocol", Leaf),
    ("tls", Table(TLS)),
];

pub(super) const TLS: &[(&str, Sub)] = &[
    ("ca_file", Leaf),
    ("client_cert_file", Leaf),
    ("client_key_file", Leaf),
    ("server_name", Leaf),
];

pub(super) const LOG: &[(&str, Sub)] = &[("summary_every", Leaf)];

pub(super) const COMMANDS: &[(&str, Sub)] = &[
    ("enabled", Leaf),
    ("allowed_by", Leaf),
    ("max_shelve_min", Leaf),
    ("max_command_age_s", Leaf),
];

pub(super) const STORE: &[(&str, Sub)] = &[
    ("spool_max_mb", Leaf),
    ("spool_max_age_h", Leaf),
    ("history_days", Leaf),
];

pub(super) const SOURCE: &[(&str, Sub)] = &[
    ("name", Leaf),
    ("kind", Leaf),
    ("port", Leaf),
    ("baud", Leaf),
    ("cj_c", Leaf),
    ("cj_channel", Leaf),
    ("silence_s", Leaf),
    ("parity", Leaf),
    ("stop_bits", Leaf),
    ("poll_ms", Leaf),
    ("timeout_ms", Leaf),
    ("retries", Leaf),
    ("inter_frame_ms", Leaf),
];

pub(super) const CHANNEL: &[(&str, Sub)] = &[
    ("name", Leaf),
    ("source", Leaf),
    ("input", Leaf),
    ("unit_id", Leaf),
    ("function", Leaf),
    ("address", Leaf),
    ("data_type", Leaf),
    ("word_order", Leaf),
    ("scale", Leaf),
    ("offset", Leaf),
    ("open_values", Leaf),
    ("type", Leaf),
    ("signal", Leaf),
    ("tolerance", Leaf),
    ("uncertainty_c", Leaf),
    ("calibration_offset_c", Leaf),
    ("calibration_gain", Leaf),
    ("calibration_date", Leaf),
    ("calibration_interval_days", Leaf),
    ("spike_c_per_min", Leaf),
];

pub(super) const MATERIAL: &[(&str, Sub)] = &[
    ("name", Leaf),
    ("conductivity_w_mk", Table(PROPERTY)),
    ("density_kg_m3", Leaf),
    ("specific_heat_j_kgk", Table(PROPERTY)),
    ("max_service_c", Leaf),
    ("emissivity", Leaf),
    ("conductivity_uncertainty_pct", Leaf),
    ("heat_capacity_uncertainty_pct", Leaf),
];

pub(super) const LAYER: &[(&str, Sub)] = &[
    ("material", Leaf),
    ("thickness_mm", Leaf),
    ("contact_m2k_w", Leaf),
];

pub(super) const PROBE: &[(&str, Sub)] = &[
    ("channel", Leaf),
    ("depth_mm", Leaf),
    ("depth_sigma_mm", Leaf),
];

pub(super) const ZONE: &[(&str, Sub)] = &[
    ("name", Leaf),
    ("area_m2", Leaf),
    ("model", Leaf),
    ("interval_s", Leaf),
    ("orientation", Leaf),
    ("height_m", Leaf),
    ("emissivity", Leaf),
    ("ambient_c", Leaf),
    ("surroundings_c", Leaf),
    ("wind_m_s", Leaf),
    ("surface_h_w_m2k", Leaf),
    ("max_ramp_c_per_h", Leaf),
    ("forecast_h", Leaf),
    ("baseline_days", Leaf),
    ("hot_face_channel", Leaf),
    ("lining_min_mm", Leaf),
    ("firing_setpoint_c", Leaf),
    ("cells_per_layer", Leaf),
    ("heat_loss_baseline_w", Leaf),
    ("rate_window_s", Leaf),
    ("layers", Items(LAYER)),
    ("probes", Items(PROBE)),
    ("baseline_start", Leaf),
    ("fallback", Leaf),
];

pub(super) const ALARM_DEFAULTS: &[(&str, Sub)] = &[
    ("shell_touch_c", Leaf),
    ("shell_touch_enabled", Leaf),
    ("trend_horizon_h", Leaf),
    ("trend_repeat_min", Leaf),
];

pub(super) const ALARM: &[(&str, Sub)] = &[
    ("name", Leaf),
    ("zone", Leaf),
    ("channel", Leaf),
    ("source", Leaf),
    ("quantity", Leaf),
    ("kind", Leaf),
    ("setpoint", Leaf),
    ("baseline", Leaf),
    ("deadband", Leaf),
    ("on_delay_s", Leaf),
    ("off_delay_s", Leaf),
    ("priority", Leaf),
    ("latch", Leaf),
    ("enabled", Leaf),
    ("message", Leaf),
    ("consequence", Leaf),
    ("action", Leaf),
];

/// The top level of the file.
pub(super) const ROOT: &[(&str, Sub)] = &[
    ("state_dir", Leaf),
    ("site", Table(SITE)),
    ("mqtt", Table(MQTT)),
    ("log", Table(LOG)),
    ("commands", Table(COMMANDS)),
    ("store", Table(STORE)),
    ("source", Items(SOURCE)),
    ("channel", Items(CHANNEL)),
    ("material", Items(MATERIAL)),
    ("zone", Items(ZONE)),
    ("alarm_defaults", Table(ALARM_DEFAULTS)),
    ("alarm", Items(ALARM)),
];

/// Every unknown key of `text`, in file order. A file that does not parse
/// gives none here (the parser's own message reports it).
pub(super) fn unknown_keys(text: &str) -> Vec<Problem> {
    let mut out = Vec::new();
    if let Ok(doc) = ImDocument::parse(text) {
        walk(doc.as_table(), ROOT, "", "the top level", text, &mut out);
    }
    out
}

fn walk(
    t: &dyn TableLike,
    keys: &[(&str, Sub)],
    path: &str,
    table: &str,
    text: &str,
    out: &mut Vec<Problem>,
) {
    for (k, item) in t.iter() {
        let here = if path.is_empty() {
            k.to_string()
        } else {
            format!("{path}.{k}")
        };
        match keys.iter().find(|(n, _)| *n == k) {
            None => {
                let span = t
                    .get_key_value(k)
                    .and_then(|(key, _)| key.span())
                    .or_else(|| item.span());
                out.push(Problem {
                    line: span.map(|s| line_of(text, s.start)),
                    path: here,
                    message: unknown_message(k, keys, table),
                });
            }
            Some((_, Leaf)) => {}
            Some((_, Table(sub))) => {
                if let Some(st) = item.as_table_like() {
                    walk(st, sub, &here, &format!("`{here}`"), text, out);
                }
            }
            Some((_, Items(sub))) => {
                let name = format!("`{k}`");
                if let Some(a) = item.as_array_of_tables() {
                    for (i, st) in a.iter().enumerate() {
                        walk(st, sub, &format!("{here}[{i}]"), &name, text, out);
                    }
                } else if let Some(a) = item.as_array() {
                    for (i, v) in a.iter().enumerate() {
                        if let Some(st) = v.as_inline_table() {
                            walk(st, sub, &format!("{here}[{i}]"), &name, text, out);
                        }
                    }
                }
            }
        }
    }
}

fn unknown_message(k: &str, keys: &[(&str, Sub)], table: &str) -> String {
    let best = keys
        .iter()
        .map(|(n, _)| (edit_distance(k, n), *n))
        .min_by_key(|(d, _)| *d);
    let prefix = keys
        .iter()
        .map(|(n, _)| *n)
        .find(|n| n.len() >= 3 && k.len() >= 3 && (k.starts_with(n) || n.starts_with(k)));
    let close = match best {
        // Close enough to be a slip of the keyboard.
        Some((d, n)) if d <= 2 + k.len().min(n.len()) / 5 => Some(n),
        // A unit left out or added (`area_m` for `area_m2`).
        _ => prefix,
    };
    match close {
        Some(n) => format!("unknown key `{k}` in {table}; did you mean `{n}`?"),
        None => format!(
            "unknown key `{k}` in {table}; known keys: {}",
            keys.iter().map(|(n, _)| *n).collect::<Vec<_>>().join(", ")
        ),
    }
}

/// Levenshtein distance over characters.
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut diag = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let next = (row[j + 1] + 1)
                .min(row[j] + 1)
                .min(diag + usize::from(ca != *cb));
            diag = row[j + 1];
            row[j + 1] = next;
        }
    }
    row[b.len()]
}

#[cfg(test)]
mod tests {
    use super::super::raw::*;
    use super::*;

    /// A deserializer that only records the field names serde's derive
    /// passes to `deserialize_struct`: the keys each raw struct reads.
    struct Fields(std::cell::Cell<&'static [&'static str]>);

    #[derive(Debug)]
    struct Stop;
    impl std::fmt::Display for Stop {
        fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
            f.write_str("stop")
        }
    }
    impl std::error::Error for Stop {}
    impl serde::de::Error for Stop {
        fn custom<T: std::fmt::Display>(_: T) -> Self {
            Stop
        }
    }

    impl<'de> serde::Deserializer<'de> for &Fields {
        type Error = Stop;
        fn deserialize_any<V: serde::de::Visitor<'de>>(self, _: V) -> Result<V::Value, Stop> {
            Err(Stop)
        }
        fn deserialize_struct<V: serde::de::Visitor<'de>>(
            self,
            _: &'static str,
            fields: &'static [&'static str],
            _: V,
        ) -> Result<V::Value, Stop> {
            self.0.set(fields);
            Err(Stop)
        }
        serde::forward_to_deserialize_any! {
            bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char str string
            bytes byte_buf option unit unit_struct newtype_struct seq tuple
            tuple_struct map enum identifier ignored_any
        }
    }

    fn fields_of<T: for<'de> serde::Deserialize<'de>>() -> Vec<&'static str> {
        let f = Fields(std::cell::Cell::new(&[]));
        let _ = T::deserialize(&f);
        let mut v = f.0.get().to_vec();
        v.sort_unstable();
        v
    }

    fn names(keys: &[(&'static str, Sub)]) -> Vec<&'static str> {
        let mut v: Vec<_> = keys.iter().map(|(n, _)| *n).collect();
        v.sort_unstable();
        v
    }

    #[test]
    fn tables_match_the_raw_structs() {
        assert_eq!(names(ROOT), fields_of::<RawConfig>());
        assert_eq!(names(SITE), fields_of::<RawSite>());
        assert_eq!(names(MQTT), fields_of::<RawMqtt>());
        assert_eq!(names(TLS), fields_of::<RawTls>());
        assert_eq!(names(LOG), fields_of::<RawLog>());
        assert_eq!(names(COMMANDS), fields_of::<RawCommands>());
        assert_eq!(names(STORE), fields_of::<RawStore>());
        assert_eq!(names(SOURCE), fields_of::<RawSource>());
        assert_eq!(names(CHANNEL), fields_of::<RawChannel>());
        assert_eq!(names(MATERIAL), fields_of::<RawMaterial>());
        assert_eq!(names(LAYER), fields_of::<RawLayer>());
        assert_eq!(names(PROBE), fields_of::<RawProbe>());
        assert_eq!(names(ZONE), fields_of::<RawZone>());
        assert_eq!(names(ALARM_DEFAULTS), fields_of::<RawAlarmDefaults>());
        assert_eq!(names(ALARM), fields_of::<RawAlarm>());
        // The recorder itself sees fields (the comparison is not of two
        // empty lists).
        assert!(!fields_of::<RawZone>().contains(&"depth_mm"));
        assert!(fields_of::<RawProbe>().contains(&"depth_mm"));
    }

    #[test]
    fn edit_distance_counts_edits() {
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(edit_distance("depth_mm", "depth_mm"), 0);
        assert_eq!(edit_distance("dpeth_mm", "depth_mm"), 2);
    }
}
