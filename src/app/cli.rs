//! The command line (README.md "Commands").

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand, ValueEnum};

#[derive(Debug, Parser)]
#[command(
    name = "wallflux",
    version,
    about = "Live through-wall heat flux of kiln, furnace and oven walls, from embedded thermocouples to MQTT."
)]
pub struct Cli {
    /// Log line format on stderr.
    #[arg(long, value_enum, default_value_t = LogFormat::Text, global = true)]
    pub log_format: LogFormat,
    /// Log filter, e.g. `info`, `debug`, `wallflux=debug` (overrides RUST_LOG).
    #[arg(long, global = true)]
    pub log_level: Option<String>,
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum LogFormat {
    /// One readable line per event.
    Text,
    /// One JSON object per line.
    Json,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the monitoring daemon.
    Run {
        #[arg(long, value_name = "FILE")]
        config: PathBuf,
        /// Also write every scan handled as `analyze` samples to this file
        /// (replaced if it exists), for an exact replay.
        #[arg(long, value_name = "FILE.csv")]
        record: Option<PathBuf>,
    },
    /// A simulated kiln firing end to end: pseudo-terminal serial line,
    /// embedded MQTT broker, live summary on the terminal.
    Demo(DemoArgs),
    /// Validate a configuration and print a summary.
    Check {
        #[arg(long, value_name = "FILE")]
        config: PathBuf,
        /// Refuse a configuration with warnings too (exit 2).
        #[arg(long)]
        strict: bool,
    },
    /// Run the engine over recorded samples; one zone-state JSON line per
    /// zone per interval on stdout.
    Analyze {
        #[arg(long, value_name = "FILE")]
        config: PathBuf,
        /// CSV with header `time,channel,value`.
        #[arg(long, value_name = "FILE.csv")]
        samples: PathBuf,
        /// What to write: `zone_states` (one zone state per line), or `all`
        /// (every output the daemon would give, as `{"kind":…,"output":…}`).
        #[arg(long, value_name = "WHICH", default_value = "zone_states", value_parser = parse_outputs)]
        outputs: Outputs,
    },
    /// ITS-90 thermocouple conversion, for field checks with a calibrator.
    Tc(TcArgs),
    /// Read registers of one Modbus RTU unit once and print them raw and
    /// decoded, for commissioning a bus (not while the daemon has the port).
    ProbeModbus(ProbeModbusArgs),
    /// Write out the history of the local database (zone states, kiln
    /// states, events) as CSV or JSON lines; works while the daemon runs.
    Export(ExportArgs),
    /// Run only the embedded MQTT broker on 127.0.0.1 (for trials and tests;
    /// plants use their own broker).
    Broker {
        #[arg(long, default_value_t = 1883)]
        port: u16,
    },
}

#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Port of the embedded MQTT broker on 127.0.0.1.
    #[arg(long, default_value_t = 1883)]
    pub broker_port: u16,
    /// Use the `[mqtt]` broker of the configuration instead of the embedded one.
    #[arg(long)]
    pub no_broker: bool,
    /// Simulated seconds per real second (0.01 to 100000).
    #[arg(long, default_value_t = 360.0, value_parser = parse_speed)]
    pub speed: f64,
    /// A configuration to demo instead of the built-in one (its sources are
    /// replaced by simulated pseudo-terminals; each zone fires to its
    /// `firing_setpoint_c`, 1240 °C without one).
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
}

/// `--speed`: a finite factor in 0.01..=100000 (beyond, the clock's
/// durations overflow or the demo never moves).
fn parse_speed(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if v.is_finite() && (0.01..=100_000.0).contains(&v) => Ok(v),
        Ok(_) => Err(format!(
            "{s} is outside 0.01 to 100000 simulated seconds per second"
        )),
        Err(_) => Err(format!("{s:?} is not a number")),
    }
}

#[derive(Debug, Args)]
pub struct ProbeModbusArgs {
    /// The bus adapter, e.g. /dev/ttyUSB0.
    #[arg(long)]
    pub port: String,
    #[arg(long, default_value_t = 9600)]
    pub baud: u32,
    /// none, even or odd.
    #[arg(long, default_value = "none", value_parser = ["none", "even", "odd"])]
    pub parity: String,
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u8).range(1..=2))]
    pub stop_bits: u8,
    /// The unit (slave) address, 1 to 247.
    #[arg(long, value_parser = clap::value_parser!(u8).range(1..=247))]
    pub unit: u8,
    /// input (function code 04) or holding (03).
    #[arg(long, default_value = "input", value_parser = ["input", "holding"])]
    pub function: String,
    /// The first register, 0-based as on the wire.
    #[arg(long, default_value_t = 0)]
    pub address: u16,
    /// How many registers, 1 to 125.
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u16).range(1..=125))]
    pub count: u16,
    /// Also decode the registers as this type: i16 u16 i32 u32 f32.
    #[arg(long, value_parser = ["i16", "u16", "i32", "u32", "f32"])]
    pub data_type: Option<String>,
    /// For 32-bit types: high_first or low_first.
    #[arg(long, default_value = "high_first", value_parser = ["high_first", "low_first"])]
    pub word_order: String,
    #[arg(long, default_value_t = 500)]
    pub timeout_ms: u64,
}

#[derive(Debug, Args)]
pub struct ExportArgs {
    /// The daemon's configuration (its state directory holds the history).
    #[arg(long, value_name = "FILE")]
    pub config: PathBuf,
    /// From this time on (RFC 3339, or a date: midnight UTC).
    #[arg(long, value_name = "TIME")]
    pub since: Option<String>,
    /// Up to (not including) this time.
    #[arg(long, value_name = "TIME")]
    pub until: Option<String>,
    /// Only this zone (its zone states, and events of alarms on it).
    #[arg(long, value_name = "ZONE")]
    pub zone: Option<String>,
    /// Only this kind: zone, kiln or event (needed for csv).
    #[arg(long, value_name = "KIND", value_parser = ["zone", "kiln", "event"])]
    pub kind: Option<String>,
    /// csv (one column per field of the kind) or jsonl (each payload as
    /// published).
    #[arg(long, value_name = "FORMAT", default_value = "jsonl", value_parser = ["csv", "jsonl"])]
    pub format: String,
}

#[derive(Debug, Args)]
#[command(group = clap::ArgGroup::new("input").required(true).args(["celsius", "mv"]))]
pub struct TcArgs {
    /// Thermocouple type: B E J K N R S T.
    #[arg(long = "type", value_name = "TYPE")]
    pub tc_type: String,
    /// Temperature, °C → EMF (0 °C reference junction).
    #[arg(long, allow_hyphen_values = true)]
    pub celsius: Option<f64>,
    /// Measured EMF, mV → temperature.
    #[arg(long, allow_hyphen_values = true)]
    pub mv: Option<f64>,
    /// Cold-junction (terminal) temperature for `--mv`, °C (default 0).
    #[arg(long, requires = "mv", allow_hyphen_values = true)]
    pub cj_c: Option<f64>,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

wallflux_core::word_enum! {
    /// What `analyze` writes.
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum Outputs {
        /// One zone state per line (the default).
        ZoneStates = "zone_states",
        /// Every output, each with its kind.
        All = "all",
    }
}

fn parse_outputs(s: &str) -> Result<Outputs, String> {
    Outputs::from_name(s).ok_or_else(|| format!("{s:?}: expected {}", Outputs::choices()))
}
