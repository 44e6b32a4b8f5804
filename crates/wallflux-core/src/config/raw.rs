//! The configuration file as written: serde structs that mirror the TOML
//! one to one. Unknown keys are reported by `super::keys` (all of them, in
//! one run), so serde here ignores them. Values that validation checks carry
//! their position in the file (`Spanned`) so every problem can name its line.
//! Nothing here is checked beyond its TOML type; see `super::validate`.

use serde::Deserialize;
use toml::Spanned;

type S<T> = Spanned<T>;

#[derive(Debug, Deserialize)]
pub struct RawConfig {
    pub state_dir: Option<S<String>>,
    pub site: S<RawSite>,
    pub mqtt: S<RawMqtt>,
    #[serde(default)]
    pub log: Option<RawLog>,
    #[serde(default)]
    pub commands: Option<S<RawCommands>>,
    #[serde(default)]
    pub store: Option<S<RawStore>>,
    #[serde(default)]
    pub source: Vec<S<RawSource>>,
    #[serde(default)]
    pub channel: Vec<S<RawChannel>>,
    #[serde(default)]
    pub material: Vec<S<RawMaterial>>,
    #[serde(default)]
    pub zone: Vec<S<RawZone>>,
    #[serde(default)]
    pub alarm_defaults: Option<S<RawAlarmDefaults>>,
    #[serde(default)]
    pub alarm: Vec<S<RawAlarm>>,
}

#[derive(Debug, Deserialize)]
pub struct RawAlarmDefaults {
    pub shell_touch_c: Option<S<f64>>,
    pub shell_touch_enabled: Option<S<bool>>,
    pub trend_horizon_h: Option<S<f64>>,
    pub trend_repeat_min: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawAlarm {
    pub name: S<String>,
    pub zone: Option<S<String>>,
    pub channel: Option<S<String>>,
    pub source: Option<S<String>>,
    pub quantity: Option<S<String>>,
    pub kind: Option<S<String>>,
    pub setpoint: Option<S<f64>>,
    pub baseline: Option<S<f64>>,
    pub deadband: Option<S<f64>>,
    pub on_delay_s: Option<S<f64>>,
    pub off_delay_s: Option<S<f64>>,
    pub priority: Option<S<String>>,
    pub latch: Option<S<bool>>,
    pub enabled: Option<S<bool>>,
    pub message: Option<S<String>>,
    pub consequence: Option<S<String>>,
    pub action: Option<S<String>>,
}

#[derive(Debug, Deserialize)]
pub struct RawSite {
    pub plant: S<String>,
    pub kiln: S<String>,
    pub energy_price_per_kwh: Option<S<f64>>,
    pub currency: Option<S<String>>,
    pub firing_start_c: Option<S<f64>>,
    pub operation: Option<S<String>>,
}

#[derive(Debug, Deserialize)]
pub struct RawMqtt {
    pub host: S<String>,
    pub port: Option<S<i64>>,
    pub client_id: Option<S<String>>,
    pub topic_root: Option<S<String>>,
    pub keep_alive_s: Option<S<f64>>,
    pub queue_capacity: Option<S<i64>>,
    pub username: Option<S<String>>,
    pub password_file: Option<S<String>>,
    pub password_credential: Option<S<String>>,
    pub allow_plaintext_credentials: Option<S<bool>>,
    pub tls: Option<S<RawTls>>,
    pub protocol: Option<S<String>>,
}

#[derive(Debug, Deserialize)]
pub struct RawTls {
    pub ca_file: Option<S<String>>,
    pub client_cert_file: Option<S<String>>,
    pub client_key_file: Option<S<String>>,
    pub server_name: Option<S<String>>,
}

#[derive(Debug, Deserialize)]
pub struct RawCommands {
    pub enabled: Option<S<Vec<S<String>>>>,
    pub allowed_by: Option<S<Vec<S<String>>>>,
    pub max_shelve_min: Option<S<f64>>,
    pub max_command_age_s: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawStore {
    pub spool_max_mb: Option<S<f64>>,
    pub spool_max_age_h: Option<S<f64>>,
    pub history_days: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawLog {
    pub summary_every: Option<S<i64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawSource {
    pub name: S<String>,
    pub kind: S<String>,
    pub port: S<String>,
    pub baud: Option<S<i64>>,
    pub cj_c: Option<S<f64>>,
    pub cj_channel: Option<S<String>>,
    pub silence_s: Option<S<f64>>,
    pub parity: Option<S<String>>,
    pub stop_bits: Option<S<i64>>,
    pub poll_ms: Option<S<f64>>,
    pub timeout_ms: Option<S<f64>>,
    pub retries: Option<S<i64>>,
    pub inter_frame_ms: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawChannel {
    pub name: S<String>,
    pub source: S<String>,
    pub input: Option<S<i64>>,
    pub unit_id: Option<S<i64>>,
    pub function: Option<S<String>>,
    pub address: Option<S<i64>>,
    pub data_type: Option<S<String>>,
    pub word_order: Option<S<String>>,
    pub scale: Option<S<f64>>,
    pub offset: Option<S<f64>>,
    pub open_values: Option<S<Vec<S<f64>>>>,
    #[serde(rename = "type")]
    pub tc_type: S<String>,
    pub signal: Option<S<String>>,
    pub tolerance: Option<S<String>>,
    pub uncertainty_c: Option<S<f64>>,
    pub calibration_offset_c: Option<S<f64>>,
    pub calibration_gain: Option<S<f64>>,
    pub calibration_date: Option<S<String>>,
    pub calibration_interval_days: Option<S<f64>>,
    pub spike_c_per_min: Option<S<f64>>,
}

/// A number, a table of `[t_c, value]` points, or a polynomial
/// `{ polynomial = [a0, a1, …], from_c, to_c }` in °C.
#[derive(Debug)]
pub enum RawProperty {
    Constant(f64),
    Table(Vec<[f64; 2]>),
    Polynomial {
        coefficients: Vec<f64>,
        from_c: f64,
        to_c: f64,
    },
}

impl<'de> Deserialize<'de> for RawProperty {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> serde::de::Visitor<'de> for V {
            type Value = RawProperty;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str(
                    "a number, a table of [t_c, value] pairs (e.g. [[200.0, 1.1], [1000.0, 1.3]]), or { polynomial = [a0, a1, a2], from_c = 20.0, to_c = 1400.0 }",
                )
            }
            fn visit_f64<E: serde::de::Error>(self, v: f64) -> Result<RawProperty, E> {
                Ok(RawProperty::Constant(v))
            }
            fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<RawProperty, E> {
                Ok(RawProperty::Constant(v as f64))
            }
            fn visit_map<M: serde::de::MapAccess<'de>>(
                self,
                mut map: M,
            ) -> Result<RawProperty, M::Error> {
                use serde::de::Error;
                let (mut coefficients, mut from_c, mut to_c) = (None, None, None);
                while let Some(key) = map.next_key::<String>()? {
                    match key.as_str() {
                        "polynomial" => coefficients = Some(map.next_value::<Vec<f64>>()?),
                        "from_c" => from_c = Some(map.next_value::<f64>()?),
                        "to_c" => to_c = Some(map.next_value::<f64>()?),
                        // Reported by `super::keys` with the others.
                        _ => {
                            map.next_value::<serde::de::IgnoredAny>()?;
                        }
                    }
                }
                match (coefficients, from_c, to_c) {
                    (Some(coefficients), Some(from_c), Some(to_c)) => Ok(RawProperty::Polynomial {
                        coefficients,
                        from_c,
                        to_c,
                    }),
                    _ => Err(M::Error::custom(
                        "a polynomial needs `polynomial = [a0, a1, ...]`, `from_c` and `to_c`",
                    )),
                }
            }
            fn visit_seq<A: serde::de::SeqAccess<'de>>(
                self,
                mut seq: A,
            ) -> Result<RawProperty, A::Error> {
                let mut points = Vec::new();
                while let Some(p) = seq.next_element::<[f64; 2]>()? {
                    points.push(p);
                }
                Ok(RawProperty::Table(points))
            }
        }
        d.deserialize_any(V)
    }
}

#[derive(Debug, Deserialize)]
pub struct RawMaterial {
    pub name: S<String>,
    pub conductivity_w_mk: S<RawProperty>,
    pub density_kg_m3: S<f64>,
    pub specific_heat_j_kgk: S<RawProperty>,
    pub max_service_c: Option<S<f64>>,
    pub emissivity: Option<S<f64>>,
    pub conductivity_uncertainty_pct: Option<S<f64>>,
    pub heat_capacity_uncertainty_pct: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawLayer {
    pub material: S<String>,
    pub thickness_mm: S<f64>,
    pub contact_m2k_w: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawProbe {
    pub channel: S<String>,
    pub depth_mm: S<f64>,
    pub depth_sigma_mm: Option<S<f64>>,
}

#[derive(Debug, Deserialize)]
pub struct RawZone {
    pub name: S<String>,
    pub area_m2: S<f64>,
    pub model: S<String>,
    pub interval_s: S<f64>,
    pub orientation: Option<S<String>>,
    pub height_m: Option<S<f64>>,
    pub emissivity: Option<S<f64>>,
    pub ambient_c: Option<S<f64>>,
    pub surroundings_c: Option<S<f64>>,
    pub wind_m_s: Option<S<f64>>,
    pub surface_h_w_m2k: Option<S<f64>>,
    pub max_ramp_c_per_h: Option<S<f64>>,
    pub forecast_h: Option<S<Vec<f64>>>,
    pub baseline_days: Option<S<f64>>,
    pub hot_face_channel: Option<S<String>>,
    pub lining_min_mm: Option<S<f64>>,
    pub firing_setpoint_c: Option<S<f64>>,
    pub cells_per_layer: Option<S<i64>>,
    pub heat_loss_baseline_w: Option<S<f64>>,
    pub rate_window_s: Option<S<f64>>,
    pub layers: S<Vec<S<RawLayer>>>,
    pub probes: S<Vec<S<RawProbe>>>,
    pub baseline_start: Option<S<String>>,
    pub fallback: Option<S<String>>,
}
