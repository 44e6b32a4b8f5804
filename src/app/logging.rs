//! Log set-up: tracing to stderr, one readable line per event by default or
//! JSON lines. rumqttc logs through `log`; the bridge shows those lines.

use tracing_subscriber::EnvFilter;

use super::cli::LogFormat;

pub fn init(format: LogFormat, level: Option<&str>) {
    // The embedded broker logs every probe and client hang-up as an error:
    // too noisy for the demo; its start-up failures come back as errors.
    let default = "info,rumqttd=off,rumqttc=warn";
    let filter = match level {
        Some(l) => EnvFilter::try_new(l).unwrap_or_else(|_| EnvFilter::new(default)),
        None => EnvFilter::try_from_default_env().unwrap_or_else(|_| EnvFilter::new(default)),
    };
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .with_target(false);
    let _ = match format {
        LogFormat::Text => builder.compact().try_init(),
        LogFormat::Json => builder.json().flatten_event(true).try_init(),
    };
}
