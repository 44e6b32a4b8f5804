//! Configuration: the TOML file (`raw`) and the validated settings built from
//! it (`Settings`), two stages as in ripgrep. Validation collects every
//! problem in one pass, each with its key path and line, so an engineer fixes
//! a file in one round trip instead of one error at a time.

mod keys;
mod raw;
mod validate;

use heapless::Vec as HVec;
use std::path::PathBuf;

use crate::ids::{AlarmId, ChannelId, IdVec, SourceId, ZoneId};
use crate::physics::material::Material;
use crate::physics::surface::{Orientation, SurfaceParams};
use crate::physics::thermocouple::TcType;
use crate::physics::tolerance::ToleranceClass;

pub use validate::{format_problem, parse, ConfigError, Problem, DEFAULT_SHELL_TOUCH_C};

/// Longest name of a zone, channel, source or material (they appear in MQTT
/// topics and fixed-capacity payloads).
pub const MAX_NAME: usize = 48;
/// Most probes in one zone and most layers in one wall: the physics'
/// fixed capacities (one definition each, in `physics::layered`), which
/// validation enforces.
pub use crate::physics::layered::{MAX_LAYERS, MAX_PROBES};
/// Most `forecast_h` horizons of a transient zone (fixed capacity of its
/// zone state).
pub const MAX_FORECASTS: usize = 8;
/// Most channels in one configuration.
pub const MAX_CHANNELS: usize = 256;

/// A validated name: 1..=48 characters of `A-Z a-z 0-9 _ -` (safe in an
/// MQTT topic level and a file name).
pub type Name = heapless::String<MAX_NAME>;

/// The whole validated configuration. Cross-references are ids of the
/// collections here (a channel's `source`, a probe's `channel`, an alarm's
/// target; a layer's `material` is an index into `materials`); validation
/// mints them, so each resolves in these settings.
#[derive(Debug, Clone)]
pub struct Settings {
    pub site: Site,
    /// Where persistent state lives (`state_dir`, else `$STATE_DIRECTORY`,
    /// else `/var/lib/wallflux`).
    pub state_dir: PathBuf,
    pub mqtt: MqttSettings,
    pub log: LogSettings,
    pub commands: CommandSettings,
    pub store: StoreSettings,
    pub sources: IdVec<SourceId, Source>,
    pub channels: IdVec<ChannelId, Channel>,
    pub materials: Vec<NamedMaterial>,
    pub zones: IdVec<ZoneId, Zone>,
    /// Every alarm: built-in ones (tuned or disabled by an `[[alarm]]` of the
    /// same name) and configured ones.
    pub alarms: IdVec<AlarmId, AlarmConfig>,
    pub trend: TrendSettings,
    /// Implausible settings that still give numbers (key path, line and
    /// message in the file's words): printed by `check` (errors with
    /// `--strict`), logged at start.
    pub warnings: Vec<Problem>,
}

/// What an alarm watches.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AlarmTarget {
    /// A numeric field of zone `zone`'s state.
    Zone {
        zone: ZoneId,
        quantity: ZoneQuantity,
    },
    /// Channel `channel`: its temperature, or its health (diagnostic).
    Channel { channel: ChannelId, health: bool },
    /// Source `source` silent (diagnostic).
    Source { source: SourceId },
    /// Modbus unit `unit` of source `source` silent: none of its channels
    /// read within the source's silence limit (diagnostic).
    Unit { source: SourceId, unit: u8 },
    /// The state directory cannot be written (diagnostic): what the daemon
    /// must keep (alarm flags, baselines, energy) will not survive a
    /// restart.
    StateDir,
}

/// The zone-state fields an alarm can watch.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ZoneQuantity {
    HotFaceC,
    ShellC,
    FluxHotFaceWM2,
    FluxShellWM2,
    HeatLossW,
    SourceWM3,
    FitRmsC,
    FluxSurfaceWM2,
    BalanceMismatchPct,
    StoredWM2,
    ThermalResistanceM2KW,
    ResistanceChangePct,
    LiningRemainingMm,
    /// `interface_c[i]`: interface `i` (0 = between the first two layers).
    InterfaceC(u8),
}

impl ZoneQuantity {
    pub const ALL: [(ZoneQuantity, &'static str, &'static str); 13] = [
        (ZoneQuantity::HotFaceC, "hot_face_c", "°C"),
        (ZoneQuantity::ShellC, "shell_c", "°C"),
        (ZoneQuantity::FluxHotFaceWM2, "flux_hot_face_w_m2", "W/m²"),
        (ZoneQuantity::FluxShellWM2, "flux_shell_w_m2", "W/m²"),
        (ZoneQuantity::HeatLossW, "heat_loss_w", "W"),
        (ZoneQuantity::SourceWM3, "source_w_m3", "W/m³"),
        (ZoneQuantity::FitRmsC, "fit_rms_c", "°C"),
        (ZoneQuantity::FluxSurfaceWM2, "flux_surface_w_m2", "W/m²"),
        (
            ZoneQuantity::BalanceMismatchPct,
            "balance_mismatch_pct",
            "%",
        ),
        (ZoneQuantity::StoredWM2, "stored_w_m2", "W/m²"),
        (
            ZoneQuantity::ThermalResistanceM2KW,
            "thermal_resistance_m2k_w",
            "m²K/W",
        ),
        (
            ZoneQuantity::ResistanceChangePct,
            "resistance_change_pct",
            "%",
        ),
        (ZoneQuantity::LiningRemainingMm, "lining_remaining_mm", "mm"),
    ];

    /// A field name of the zone state, or `interface_c[i]`.
    pub fn from_name(s: &str) -> Option<Self> {
        if let Some(i) = s
            .strip_prefix("interface_c[")
            .and_then(|r| r.strip_suffix(']'))
        {
            return i
                .parse::<u8>()
                .ok()
                .filter(|&i| usize::from(i) < MAX_LAYERS - 1)
                .map(ZoneQuantity::InterfaceC);
        }
        Self::ALL
            .iter()
            .find(|(_, n, _)| *n == s)
            .map(|(q, _, _)| *q)
    }

    pub fn name(self) -> &'static str {
        match self {
            ZoneQuantity::InterfaceC(_) => "interface_c",
            _ => Self::ALL
                .iter()
                .find(|(q, _, _)| *q == self)
                .map_or("", |(_, n, _)| n),
        }
    }

    pub fn unit(self) -> &'static str {
        match self {
            ZoneQuantity::InterfaceC(_) => "°C",
            _ => Self::ALL
                .iter()
                .find(|(q, _, _)| *q == self)
                .map_or("", |(_, _, u)| u),
        }
    }
}

/// One alarm, validated.
#[derive(Debug, Clone)]
pub struct AlarmConfig {
    /// Unique; safe in a topic level (built from validated names).
    pub name: String,
    pub target: AlarmTarget,
    pub spec: crate::monitor::alarm::AlarmSpec,
    /// For `deviation`: the reference the percentage is taken from.
    pub baseline: Option<f64>,
    pub builtin: bool,
    pub message: String,
    pub consequence: String,
    pub action: String,
}

impl AlarmConfig {
    /// Unit of the watched value (per hour for rates, % for deviations).
    pub fn unit(&self) -> &'static str {
        use crate::monitor::alarm::AlarmKind;
        match (self.spec.kind, self.target) {
            (AlarmKind::Diagnostic, _) => "",
            (AlarmKind::Deviation, _) => "%",
            (AlarmKind::RateHigh, AlarmTarget::Zone { quantity, .. }) => match quantity.unit() {
                "°C" => "°C/h",
                "W" => "W/h",
                _ => "/h",
            },
            (AlarmKind::RateHigh, _) => "°C/h",
            (_, AlarmTarget::Zone { quantity, .. }) => quantity.unit(),
            (_, _) => "°C",
        }
    }
}

/// Trend alerts: a watched quantity reaching its alarm limit within the
/// horizon at its current rate gets a log line and an event.
#[derive(Debug, Clone, Copy)]
pub struct TrendSettings {
    pub horizon_h: f64,
    pub repeat_min: f64,
}

#[derive(Debug, Clone)]
pub struct Site {
    pub plant: Name,
    pub kiln: Name,
    /// Energy price and its currency, for the cost of heat lost.
    pub energy_price: Option<(f64, String)>,
    /// A firing is under way while a zone's hot face is above this, °C.
    pub firing_start_c: f64,
    /// Batch firings, or a kiln that is always hot (`[site] operation`).
    pub operation: Operation,
}

#[derive(Debug, Clone)]
pub struct MqttSettings {
    pub host: String,
    pub port: u16,
    /// Fixed, so that the broker keeps our persistent session.
    pub client_id: String,
    pub topic_root: String,
    pub keep_alive_s: u64,
    /// Bound of the queue between the engine and the MQTT task.
    pub queue_capacity: usize,
    /// The broker account, if it needs one.
    pub credentials: Option<Credentials>,
    /// TLS to the broker (`[mqtt.tls]`); none: plain TCP.
    pub tls: Option<TlsSettings>,
    /// The MQTT version spoken (`protocol`, 3.1.1 unless set).
    pub protocol: MqttProtocol,
}

crate::word_enum! {
    /// The MQTT version (`[mqtt] protocol`).
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum MqttProtocol {
        /// MQTT 3.1.1: every broker speaks it.
        V311 = "3.1.1",
        /// MQTT 5: message expiry on retained measurements, response
        /// topics for commands, PUBACKs that say why.
        V5 = "5",
    }
}

/// `[mqtt.tls]`: the files the edge reads at start (the core only names
/// them) and the name the broker's certificate must carry.
#[derive(Debug, Clone, PartialEq)]
pub struct TlsSettings {
    /// The plant's CA certificate(s), PEM: the only roots the broker's
    /// certificate is checked against (a plant broker has its own CA, so
    /// the public web roots are never trusted here).
    pub ca_file: PathBuf,
    /// This daemon's certificate and key, when the broker asks for one.
    pub client: Option<ClientIdentity>,
    /// The DNS name or IP address the broker's certificate must be for
    /// (`server_name`, else `mqtt.host`).
    pub server_name: String,
}

/// A client certificate (PEM, the chain from the leaf) and its private
/// key (PEM; never printed).
#[derive(Debug, Clone, PartialEq)]
pub struct ClientIdentity {
    pub cert_file: PathBuf,
    pub key_file: PathBuf,
}

/// A broker account: the user name, and where its password is (never the
/// password itself, which the edge reads when it connects and nothing
/// prints).
#[derive(Debug, Clone, PartialEq)]
pub struct Credentials {
    pub username: String,
    pub password: PasswordSource,
}

/// Where the password of [`Credentials`] is read from.
#[derive(Debug, Clone, PartialEq)]
pub enum PasswordSource {
    /// A file holding the password (trailing line break ignored).
    File(PathBuf),
    /// A systemd credential: the file of that name in
    /// `$CREDENTIALS_DIRECTORY` (`LoadCredential=` in the unit).
    Credential(String),
}

/// `[commands]`: which commands this daemon takes, and from whom.
#[derive(Debug, Clone)]
pub struct CommandSettings {
    /// The actions this daemon takes (all, unless `[commands] enabled`
    /// lists fewer).
    pub enabled: Vec<crate::monitor::command::Action>,
    /// Who may command (anyone when empty). Only a name the sender states:
    /// the broker's access control decides who can publish at all.
    pub allowed_by: Vec<String>,
    /// The longest shelve accepted, minutes.
    pub max_shelve_min: f64,
    /// The oldest command applied (and the furthest ahead), s.
    pub max_age_s: f64,
}

/// `[store]`: the local database in the state directory, which holds the
/// events not yet acknowledged by the broker (the spool) and the history.
#[derive(Debug, Clone, PartialEq)]
pub struct StoreSettings {
    /// The most the spool of unsent events may hold, MB.
    pub spool_max_mb: f64,
    /// The oldest unsent event kept, hours.
    pub spool_max_age_h: f64,
    /// How long zone states, kiln states and events stay in the history,
    /// days.
    pub history_days: f64,
}

/// Default of `[store] spool_max_mb`.
pub const DEFAULT_SPOOL_MAX_MB: f64 = 64.0;
/// Default of `[store] spool_max_age_h`: a fortnight, longer than a plant
/// network is usually left broken.
pub const DEFAULT_SPOOL_MAX_AGE_H: f64 = 336.0;
/// Default of `[store] history_days`: a quarter of a year.
pub const DEFAULT_HISTORY_DAYS: f64 = 90.0;

impl Default for StoreSettings {
    fn default() -> Self {
        StoreSettings {
            spool_max_mb: DEFAULT_SPOOL_MAX_MB,
            spool_max_age_h: DEFAULT_SPOOL_MAX_AGE_H,
            history_days: DEFAULT_HISTORY_DAYS,
        }
    }
}

/// Name of the built-in alarm on the state directory.
pub const STATE_ALARM: &str = "state-not-saved";

/// Default of `[commands] max_command_age_s`: 5 minutes, room for a SCADA
/// client's clock a little off and a message a little late.
pub const DEFAULT_COMMAND_AGE_S: f64 = 300.0;
/// The largest `[commands] max_command_age_s`: a day.
pub const MAX_COMMAND_AGE_S: f64 = 86_400.0;

impl Default for CommandSettings {
    fn default() -> Self {
        CommandSettings {
            enabled: crate::monitor::command::Action::ALL.to_vec(),
            allowed_by: Vec::new(),
            max_shelve_min: crate::monitor::alarm::MAX_SHELVE_MIN,
            max_age_s: DEFAULT_COMMAND_AGE_S,
        }
    }
}

#[derive(Debug, Clone)]
pub struct LogSettings {
    /// One info line per zone every this many intervals.
    pub summary_every: u32,
}

crate::word_enum! {
    /// What a source speaks (`[[source]] kind`).
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum SourceKind {
        /// Line protocol v1 over a serial port.
        Line = "line",
        /// Modbus RTU input modules on an RS-485 bus.
        ModbusRtu = "modbus-rtu",
    }
}

crate::word_enum! {
    /// A serial line's parity (`[[source]] parity`).
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum Parity {
        None = "none",
        Even = "even",
        Odd = "odd",
    }
}

/// How a Modbus RTU bus is driven (`kind = "modbus-rtu"`).
#[derive(Debug, Clone, PartialEq)]
pub struct ModbusBus {
    pub parity: Parity,
    pub stop_bits: u8,
    /// One poll of every unit this often, ms.
    pub poll_ms: u64,
    /// A reply not complete this long after its request is a timeout, ms.
    pub timeout_ms: u64,
    /// Tries after the first before a unit is judged silent for this poll.
    pub retries: u32,
    /// The silence between frames, µs (3.5 characters unless set).
    pub inter_frame_us: u32,
}

#[derive(Debug, Clone)]
pub struct Source {
    pub name: Name,
    pub kind: SourceKind,
    /// Serial device path, e.g. `/dev/serial/by-id/...`.
    pub port: String,
    pub baud: u32,
    /// Fixed cold-junction temperature for millivolt channels when a frame
    /// carries no `cj=` and no cold-junction channel has a value.
    pub cj_c: Option<f64>,
    /// A channel of this source measuring its terminals (an RTD or
    /// thermistor sent as °C), used when a frame carries no `cj=`.
    pub cj_channel: Option<ChannelId>,
    /// No valid frame for this long: the source is reported silent.
    pub silence_s: f64,
    /// The bus settings of a `modbus-rtu` source.
    pub bus: Option<ModbusBus>,
}

crate::word_enum! {
    /// What a channel's values are.
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum Signal {
        /// Linearised °C from the source.
        Celsius = "celsius",
        /// Raw thermocouple EMF in mV; needs a cold-junction temperature.
        Millivolts = "millivolts",
    }
}

#[derive(Debug, Clone)]
pub struct Channel {
    pub name: Name,
    /// The source the channel is read from.
    pub source: SourceId,
    /// Input number on the source, 1..=64 (on a Modbus source, the
    /// channel's place among the source's channels, given by validation).
    pub input: u8,
    /// How a channel of a `modbus-rtu` source is read.
    pub point: Option<crate::protocol::modbus::Point>,
    pub tc_type: TcType,
    pub signal: Signal,
    pub tolerance: ToleranceClass,
    /// A measured standard uncertainty, °C, used instead of the class.
    pub uncertainty_c: Option<f64>,
    pub calibration: Calibration,
    /// A change faster than this between two readings is a spike, °C/min.
    pub spike_c_per_min: f64,
    /// A thermocouple, or a terminal sensor (`type = "terminal"`).
    pub kind: ChannelKind,
}

/// A channel's calibration correction, `t = gain × t_raw + offset`, from a
/// calibration certificate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Calibration {
    pub offset_c: f64,
    pub gain: f64,
    /// Certificate date (UTC midnight) and how long it is valid.
    pub date: Option<crate::time::Timestamp>,
    pub interval_days: f64,
}

impl Default for Calibration {
    fn default() -> Self {
        Calibration {
            offset_c: 0.0,
            gain: 1.0,
            date: None,
            interval_days: 365.0,
        }
    }
}

impl Calibration {
    pub fn apply(&self, t_c: f64) -> f64 {
        self.gain * t_c + self.offset_c
    }

    /// Whether the certificate has expired at `now` (false without a date).
    pub fn overdue(&self, now: crate::time::Timestamp) -> bool {
        self.date
            .is_some_and(|d| now.since(d) > self.interval_days * 86_400.0)
    }
}

#[derive(Debug, Clone)]
pub struct NamedMaterial {
    pub name: Name,
    pub material: Material,
    /// Surface emissivity, the default of a zone whose shell (last layer)
    /// is this material.
    pub emissivity: Option<f64>,
    /// Relative standard uncertainty of the conductivity, % (1 σ; default
    /// [`DEFAULT_CONDUCTIVITY_UNCERTAINTY_PCT`]), fully correlated within a
    /// layer.
    pub conductivity_uncertainty_pct: f64,
    /// Relative standard uncertainty of ρ c_p, % (1 σ; default
    /// [`DEFAULT_HEAT_CAPACITY_UNCERTAINTY_PCT`]; the transient model).
    pub heat_capacity_uncertainty_pct: f64,
}

/// Default relative standard uncertainty of a conductivity, %: a value of
/// our own within the ±10–25 % that separates a data-sheet conductivity
/// from a wall's in service (common practice; config/materials.toml gives
/// the reasoning per class).
pub const DEFAULT_CONDUCTIVITY_UNCERTAINTY_PCT: f64 = 15.0;

/// Default relative standard uncertainty of ρ c_p, %: a value of our own
/// (density and specific heat of a class are known better than its
/// conductivity; common practice).
pub const DEFAULT_HEAT_CAPACITY_UNCERTAINTY_PCT: f64 = 10.0;

/// Default standard uncertainty of a probe's depth inside the wall, mm: a
/// value of our own (a drilled hole and a thermocouple tip are rarely
/// placed better than a few millimetres). A probe at a face has 0.
pub const DEFAULT_DEPTH_SIGMA_MM: f64 = 2.0;

/// Largest accepted relative uncertainty of a material property, %: a
/// σ of the value itself no longer describes a positive property.
pub const MAX_PROPERTY_UNCERTAINTY_PCT: f64 = 100.0;

/// Largest accepted `depth_sigma_mm`: beyond it a probe's depth is not
/// known at all.
pub const MAX_DEPTH_SIGMA_MM: f64 = 50.0;

crate::word_enum! {
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum Model {
        /// One homogeneous layer; weighted quadratic fit of T(x).
        Quadratic = "quadratic",
        /// Any number of layers at steady state, k(T) solved exactly (Kirchhoff
        /// transform), hot-face temperature and flux fitted to the probes.
        Layered = "layered",
        /// The 1-D heat equation across the layers with a Kalman estimator of
        /// the nodal temperatures and the (unmeasured) hot face; forecasts.
        Transient = "transient",
    }
}

#[derive(Debug, Clone, Copy)]
pub struct ZoneLayer {
    /// Index into `Settings::materials`.
    pub material: usize,
    pub thickness_m: f64,
    /// Contact resistance at the layer's cold-side interface, m²K/W.
    pub contact_m2k_w: f64,
}

#[derive(Debug, Clone, Copy)]
pub struct Probe {
    /// The channel the probe is read through.
    pub channel: ChannelId,
    /// Depth from the hot face, m.
    pub depth_m: f64,
    /// Standard uncertainty of the depth, m (`depth_sigma_mm`; default
    /// [`DEFAULT_DEPTH_SIGMA_MM`] inside the wall, 0 at a face).
    pub depth_sigma_m: f64,
}

#[derive(Debug, Clone)]
pub struct Zone {
    pub name: Name,
    pub area_m2: f64,
    pub model: Model,
    pub interval_s: f64,
    pub orientation: Orientation,
    pub height_m: f64,
    pub emissivity: f64,
    pub ambient_c: f64,
    /// The shell's surface: orientation, length, emissivity, ambient,
    /// surroundings and wind, for the surface heat-loss cross-check.
    pub surface: SurfaceParams,
    /// A measured combined surface coefficient, W/(m²·K), used instead of
    /// the correlations when a site has one.
    pub surface_h_w_m2k: Option<f64>,
    /// Heating/cooling rate limit of the hot face (built-in alarm), °C/h.
    pub max_ramp_c_per_h: Option<f64>,
    /// Reference heat loss of the zone (built-in deviation alarm), W.
    pub heat_loss_baseline_w: Option<f64>,
    /// Forecast horizons of the transient model, h.
    pub forecast_h: HVec<f64, MAX_FORECASTS>,
    /// The firing's set-point: forecasts do not extrapolate the hot face
    /// beyond it (nor beyond the hot layer's `max_service_c`), °C.
    pub firing_setpoint_c: Option<f64>,
    /// Finite-volume cells per layer of the transient model.
    pub cells_per_layer: usize,
    /// Commissioning period over which the thermal-resistance baseline is
    /// learned (layered model), days.
    pub baseline_days: f64,
    /// A channel reading the hot face itself (or the kiln atmosphere at
    /// it): with it the layered model sizes the remaining hot layer.
    pub hot_face_channel: Option<ChannelId>,
    /// Built-in alarm when `lining_remaining_mm` falls below this, mm.
    pub lining_min_mm: Option<f64>,
    /// Window of the measured-rate regression, s.
    pub rate_window_s: f64,
    /// Hot face to shell; validation refuses more than [`MAX_LAYERS`].
    pub layers: HVec<ZoneLayer, MAX_LAYERS>,
    /// Validation refuses more than [`MAX_PROBES`].
    pub probes: HVec<Probe, MAX_PROBES>,
    /// When the lining baseline begins learning (`baseline_start`).
    pub baseline_start: BaselineStart,
    /// The model whose numbers a steady zone publishes while its own model
    /// is `not_steady` (only `transient`, for a quadratic or layered zone).
    pub fallback: Option<Model>,
}

impl Zone {
    /// Total wall thickness L, m.
    pub fn thickness_m(&self) -> f64 {
        self.layers.iter().map(|l| l.thickness_m).sum()
    }
}

impl Settings {
    /// MQTT topic root: `{topic_root}/{plant}/{kiln}`.
    pub fn topic_root(&self) -> String {
        format!(
            "{}/{}/{}",
            self.mqtt.topic_root, self.site.plant, self.site.kiln
        )
    }

    /// The channel fed by `input` of `source`, if any.
    pub fn channel_for(&self, source: SourceId, input: u8) -> Option<ChannelId> {
        self.channels
            .position(|c| c.source == source && c.input == input)
    }

    /// The source named `name`, if any.
    pub fn source_named(&self, name: &str) -> Option<SourceId> {
        self.sources.position(|s| s.name.as_str() == name)
    }

    /// The channel named `name`, if any.
    pub fn channel_named(&self, name: &str) -> Option<ChannelId> {
        self.channels.position(|c| c.name.as_str() == name)
    }

    /// The zone named `name`, if any (never another zone in its place).
    pub fn zone_named(&self, name: &str) -> Option<ZoneId> {
        self.zones.position(|z| z.name.as_str() == name)
    }

    /// The alarm named `name`, if any.
    pub fn alarm_named(&self, name: &str) -> Option<AlarmId> {
        self.alarms.position(|a| a.name == name)
    }
}

crate::word_enum! {
    /// How a kiln is run (`[site] operation`), for its energy books.
    #[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
    pub enum Operation {
        /// Batch firings (a periodic kiln): energy per firing as well as per day.
        #[default]
        Periodic = "periodic",
        /// Always hot (a tunnel or roller kiln): per day and rolling 24 h, no firings.
        Continuous = "continuous",
    }
}

crate::word_enum! {
    /// When a zone's lining baseline begins to learn (`[[zone]] baseline_start`).
    #[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
    pub enum BaselineStart {
        /// At the first consistent state after the first run (a wall in service).
        #[default]
        FirstRun = "first_run",
        /// Only on the `baseline_start` command (a new or relined wall, after dry-out).
        Command = "command",
    }
}

/// What a channel measures (`[[channel]] type`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ChannelKind {
    /// A thermocouple of the channel's `type` letter.
    #[default]
    Thermocouple,
    /// `type = "terminal"`: the temperature of a box's thermocouple
    /// terminals (an RTD or thermistor sent as °C), the cold junction of
    /// its millivolt channels. No thermocouple type; its own plausible range.
    Terminal,
}

#[cfg(test)]
mod tests;
