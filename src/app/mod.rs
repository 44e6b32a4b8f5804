//! The application: command line, configuration loading, task start-up,
//! signals and exit codes. `main.rs` only calls [`main`].

pub mod analyze;
#[cfg(feature = "demo")]
pub mod broker;
pub mod check;
pub mod cli;
pub mod clock;
#[cfg(feature = "demo")]
pub mod demo;
pub mod logging;
pub mod record;
pub mod run;
pub mod state;
pub mod tc;

use std::path::Path;
use std::process::ExitCode;
use std::sync::Arc;

use clap::Parser;

use crate::config::{self, Settings};
use cli::{Cli, Command};

/// Exit code for a usage or configuration error.
pub const EXIT_USAGE: u8 = 2;
/// Exit code for a runtime failure.
pub const EXIT_RUNTIME: u8 = 1;

/// An error that ends the program with a given exit code.
#[derive(Debug)]
pub struct Failure {
    pub code: u8,
    pub error: anyhow::Error,
}

impl Failure {
    pub fn usage(error: impl Into<anyhow::Error>) -> Self {
        Failure {
            code: EXIT_USAGE,
            error: error.into(),
        }
    }
    pub fn runtime(error: impl Into<anyhow::Error>) -> Self {
        Failure {
            code: EXIT_RUNTIME,
            error: error.into(),
        }
    }
}

/// The whole program.
pub fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return match e.kind() {
                clap::error::ErrorKind::DisplayHelp | clap::error::ErrorKind::DisplayVersion => {
                    ExitCode::SUCCESS
                }
                _ => ExitCode::from(EXIT_USAGE),
            };
        }
    };
    logging::init(cli.log_format, cli.log_level.as_deref());
    match dispatch(cli.command) {
        Ok(()) => ExitCode::SUCCESS,
        Err(f) => {
            say(&format!("wallflux: {:#}", f.error));
            ExitCode::from(f.code)
        }
    }
}

fn dispatch(cmd: Command) -> Result<(), Failure> {
    match cmd {
        Command::Check { config, strict } => check::check(&config, strict),
        Command::Tc(args) => tc::tc(&args),
        Command::Export(args) => export(&args),
        Command::ProbeModbus(args) => runtime()?
            .block_on(crate::acquire::modbus::probe(&args))
            .map_err(Failure::runtime),
        Command::Analyze {
            config,
            samples,
            outputs,
        } => analyze::analyze(&config, &samples, outputs),
        Command::Run { config, record } => {
            let settings = Arc::new(load(&config)?);
            log_warnings(&settings, &config);
            let clock = clock::Clock::real();
            let recorder = match record {
                Some(path) => Some(record::Recorder::create(&path).map_err(|e| {
                    Failure::usage(anyhow::anyhow!(
                        "cannot create the recording {}: {e}",
                        path.display()
                    ))
                })?),
                None => None,
            };
            runtime()?.block_on(async move {
                let shutdown = shutdown_signal();
                check_on_hangup(config.clone());
                run::run_recording(settings, clock, shutdown, None, recorder)
                    .await
                    .map_err(Failure::runtime)
            })
        }
        #[cfg(feature = "demo")]
        Command::Demo(args) => demo::demo(&args),
        #[cfg(feature = "demo")]
        Command::Broker { port } => runtime()?.block_on(async move {
            let shutdown = shutdown_signal();
            broker::start(port).await.map_err(Failure::runtime)?;
            tracing::info!(port, "embedded MQTT broker listening on 127.0.0.1");
            shutdown.await;
            Ok(())
        }),
        #[cfg(not(feature = "demo"))]
        Command::Broker { .. } => Err(Failure::usage(anyhow::anyhow!(
            "this build has no embedded broker (built without the `demo` feature)"
        ))),
        #[cfg(not(feature = "demo"))]
        Command::Demo(_) => Err(Failure::usage(anyhow::anyhow!(
            "this build has no demo (built without the `demo` feature)"
        ))),
    }
}

/// SIGHUP: the configuration file is checked again and the log says
/// whether it is valid (each problem with its key and line); the running
/// configuration stays as it is. (Applying a new one in place is not in
/// this version: restart the service to apply it.) Without this, SIGHUP
/// would end the daemon without a word and without saving.
fn check_on_hangup(config: std::path::PathBuf) {
    use tokio::signal::unix::{signal, SignalKind};
    let mut hup = match signal(SignalKind::hangup()) {
        Ok(h) => h,
        Err(e) => {
            tracing::warn!(error = %e, "cannot listen for SIGHUP");
            return;
        }
    };
    tokio::spawn(async move {
        while hup.recv().await.is_some() {
            match load(&config) {
                Ok(s) => tracing::info!(
                    file = %config.display(), zones = s.zones.len(), channels = s.channels.len(),
                    warnings = s.warnings.len(),
                    "SIGHUP: the configuration file is valid; the running configuration is unchanged (applying a new one takes a restart: systemctl restart wallflux)"
                ),
                Err(f) => tracing::warn!(
                    file = %config.display(), problems = %format!("{:#}", f.error).replace('\n', "; "),
                    "SIGHUP: the configuration file is not valid; the running configuration stays"
                ),
            }
        }
    });
}

/// `wallflux export`: the history to stdout.
fn export(args: &cli::ExportArgs) -> Result<(), Failure> {
    use crate::store::export::{self as ex, Filter, Format};
    let settings = load(&args.config)?;
    let time = |t: &Option<String>| t.as_deref().map(ex::parse_time).transpose();
    let filter = Filter {
        since: time(&args.since).map_err(Failure::usage)?,
        until: time(&args.until).map_err(Failure::usage)?,
        zone: args.zone.clone(),
        kind: args
            .kind
            .as_deref()
            .and_then(crate::store::HistoryKind::from_word),
    };
    if let Some(z) = &filter.zone {
        if settings.zone_named(z).is_none() {
            let names: Vec<&str> = settings.zones.iter().map(|z| z.name.as_str()).collect();
            return Err(Failure::usage(anyhow::anyhow!(
                "--zone {z:?}: no such zone in {} (zones: {})",
                args.config.display(),
                names.join(", ")
            )));
        }
    }
    let format = if args.format == "csv" {
        Format::Csv
    } else {
        Format::Jsonl
    };
    let stdout = std::io::stdout();
    let mut out = std::io::BufWriter::new(stdout.lock());
    match ex::export(&settings.state_dir, &filter, format, &mut out) {
        Ok(_) => Ok(()),
        // `| head` closed the pipe: not an error.
        Err(e)
            if e.downcast_ref::<std::io::Error>()
                .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe) =>
        {
            Ok(())
        }
        Err(e) => Err(Failure::runtime(e)),
    }
}

/// Reads and validates a configuration file (exit 2 on any problem).
pub fn load(path: &Path) -> Result<Settings, Failure> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        Failure::usage(anyhow::anyhow!(
            "cannot read configuration {}: {e}",
            path.display()
        ))
    })?;
    let state_env = std::env::var("STATE_DIRECTORY").ok();
    config::parse(&text, &path.display().to_string(), state_env.as_deref()).map_err(Failure::usage)
}

/// Logs the configuration's warnings (implausible but usable settings).
pub fn log_warnings(settings: &Settings, path: &Path) {
    for w in &settings.warnings {
        tracing::warn!("{}", config::format_problem(&path.display().to_string(), w));
    }
}

/// Writes `text` to stdout. A reader that closed the pipe early (`| head`)
/// is no failure: Ok(false), and the caller stops writing.
pub fn write_stdout(text: &str) -> Result<bool, Failure> {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|()| out.flush()) {
        Ok(()) => Ok(true),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(false),
        Err(e) => Err(Failure::runtime(anyhow::anyhow!(
            "cannot write to stdout: {e}"
        ))),
    }
}

/// A line on stderr that never panics (a closed stderr loses it).
pub fn say(text: &str) {
    use std::io::Write;
    let _ = writeln!(std::io::stderr().lock(), "{text}");
}

pub fn runtime() -> Result<tokio::runtime::Runtime, Failure> {
    tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Failure::runtime(anyhow::anyhow!("cannot start the runtime: {e}")))
}

/// Completes on SIGINT (Ctrl-C) or SIGTERM (systemd stop). Both are
/// registered when this is called, not when the future is first polled,
/// so a stop that comes while the daemon is still starting is a clean stop
/// too (not the default action, which kills).
pub fn shutdown_signal() -> impl std::future::Future<Output = ()> {
    use tokio::signal::unix::{signal, SignalKind};
    let term = signal(SignalKind::terminate());
    let int = signal(SignalKind::interrupt());
    async move {
        match (term, int) {
            (Ok(mut t), Ok(mut i)) => {
                tokio::select! {
                    _ = t.recv() => {}
                    _ = i.recv() => {}
                }
            }
            (Ok(mut t), Err(_)) => {
                t.recv().await;
            }
            (Err(_), Ok(mut i)) => {
                i.recv().await;
            }
            (Err(e), Err(_)) => {
                tracing::warn!(error = %e, "cannot listen for SIGTERM or SIGINT: stop with SIGKILL");
                std::future::pending::<()>().await;
            }
        }
    }
}
