//! `wallflux demo`: the configured kiln (the built-in demo kiln unless
//! `--config` names another), simulated end to end. The glue only: the
//! simulated kiln itself ([`crate::sim::scenario`]) writes its boxes' frames
//! through real pseudo-terminals that the daemon opens as its serial ports;
//! the daemon publishes to an embedded MQTT broker; the terminal shows one
//! line per zone as the firing goes.
//!
//! The simulator drives the daemon's clock ([`Clock::driven`]): it sets the
//! time of a scan, writes that scan's frames, and moves on only once the
//! daemon has read them. At any `--speed` the daemon's time never runs past
//! frames it has not seen, so no source is ever silent in simulated time.

use std::io::Write;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use anyhow::anyhow;
use tokio::sync::Notify;

use super::cli::DemoArgs;
use super::clock::{Clock, ClockDriver};
use super::Failure;
use crate::config::{self, Settings};
use crate::ids::{IdVec, ZoneId};
use crate::monitor::zone::{ZoneReport, ZoneStatus};
use crate::sim::pty::Pty;
use crate::sim::scenario::{FrameLine, Kiln};
use crate::time::Timestamp;

/// The built-in demo configuration.
pub const DEMO_CONFIG: &str = include_str!("../../config/demo.toml");

/// A line on the terminal; a closed stdout (`| head`) loses it instead of
/// ending the demo with a panic.
macro_rules! show {
    ($($t:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stdout(), $($t)*);
    }};
}

/// Simulated minutes between two terminal summaries.
const PRINT_EVERY_S: f64 = 30.0 * 60.0;

/// Simulated seconds of scans after the firing, so the daemon publishes its
/// last interval.
const AFTER_FIRING_S: f64 = 120.0;

/// How often the simulator looks whether the daemon has read a scan.
const READ_POLL: Duration = Duration::from_micros(500);

pub fn demo(args: &DemoArgs) -> Result<(), Failure> {
    if !(args.speed.is_finite() && args.speed > 0.0 && args.speed <= 100_000.0) {
        return Err(Failure::usage(anyhow!(
            "--speed must be between 0 and 100000, got {}",
            args.speed
        )));
    }
    let mut settings = match &args.config {
        Some(path) => {
            let s = super::load(path)?;
            super::log_warnings(&s, path);
            s
        }
        None => config::parse(DEMO_CONFIG, "built-in demo configuration", None)
            .map_err(Failure::usage)?,
    };
    let kiln = Kiln::new(&settings).map_err(|e| Failure::usage(anyhow!("wallflux demo: {e}")))?;
    // A fresh state directory per demo run: its energy totals start at zero.
    settings.state_dir = std::env::temp_dir().join(format!("wallflux-demo-{}", std::process::id()));
    if !args.no_broker {
        settings.mqtt.host = "127.0.0.1".into();
        settings.mqtt.port = args.broker_port;
    }
    // One pseudo-terminal per source.
    let mut ptys = Vec::new();
    for s in settings.sources.iter_mut() {
        let pty = Pty::open()
            .map_err(|e| Failure::runtime(anyhow!("cannot open a pseudo-terminal: {e}")))?;
        s.port = pty.path.clone();
        ptys.push(pty);
    }
    let state_dir = settings.state_dir.clone();
    let settings = Arc::new(settings);
    let rt = super::runtime()?;
    rt.block_on(async move {
        if !args.no_broker {
            super::broker::start(args.broker_port).await.map_err(Failure::runtime)?;
        }
        let (clock, driver) = Clock::driven(args.speed);
        let start = clock.now();
        let root = settings.topic_root();
        show!(
            "wallflux demo: simulated kiln {}/{}, {} zones, firing of {:.1} h at {}x (at least {:.1} min), a scan every {} s",
            settings.site.plant,
            settings.site.kiln,
            settings.zones.len(),
            kiln.duration_s() / 3600.0,
            args.speed,
            kiln.duration_s() / args.speed / 60.0,
            kiln.scan_s()
        );
        show!(
            "  serial line: {}   MQTT: {}:{}   watch with: mosquitto_sub -h {} -p {} -t '{root}/#' -v",
            ptys.iter().map(|p| p.path.as_str()).collect::<Vec<_>>().join(", "),
            settings.mqtt.host,
            settings.mqtt.port,
            settings.mqtt.host,
            settings.mqtt.port
        );
        show!("  Ctrl-C to stop. Simulated data only: this is not a real kiln.");

        let done = Arc::new(Notify::new());
        let stop = Arc::new(AtomicBool::new(false));
        let observer = terminal_view(start, kiln.clone(), &settings);
        let sim = {
            let settings = settings.clone();
            let stop = stop.clone();
            let done = done.clone();
            std::thread::Builder::new()
                .name("wallflux-sim".into())
                .spawn(move || simulate(&settings, kiln, ptys, clock, driver, &stop, &done))
                .map_err(|e| Failure::runtime(anyhow!("cannot start the simulator: {e}")))?
        };
        // The simulator stops first: the clock stands still while the daemon
        // shuts down, and the lines stay open until it has (no lost port).
        let signal = super::shutdown_signal();
        let shutdown = async {
            tokio::select! {
                _ = signal => show!("stopping (signal)"),
                _ = done.notified() => show!("firing complete"),
            }
            stop.store(true, Ordering::Relaxed);
        };
        let result = super::run::run(settings, clock, shutdown, Some(observer)).await;
        stop.store(true, Ordering::Relaxed);
        drop(sim.join());
        let _ = std::fs::remove_dir_all(&state_dir);
        result.map_err(Failure::runtime)
    })
}

/// The simulator thread: one scan of the kiln per scan period, paced at the
/// clock's speed in real time. Each scan sets the daemon's clock to the
/// scan's time, writes one frame per source, and waits until the daemon has
/// read them all before the next scan moves the clock on. Gives the lines
/// back when told to stop, for the caller to close once the daemon has.
fn simulate(
    settings: &Settings,
    mut kiln: Kiln,
    mut ptys: Vec<Pty>,
    clock: Clock,
    driver: ClockDriver,
    stop: &AtomicBool,
    done: &Notify,
) -> Vec<Pty> {
    let period = clock.real_duration(kiln.scan_s());
    let mut due = Instant::now();
    let mut line = FrameLine::new();
    let mut finished = false;
    while !stop.load(Ordering::Relaxed) {
        // Behind by more than a scan (the daemon read slowly): the lag is
        // dropped, not caught up in a burst.
        let now = Instant::now();
        due += period;
        if due + period < now {
            due = now;
        }
        std::thread::sleep(due.saturating_duration_since(now));
        if stop.load(Ordering::Relaxed) {
            break; // the clock stands still from here on
        }
        kiln.scan();
        driver.set(kiln.time_s());
        for (si, pty) in settings.sources.ids().zip(ptys.iter_mut()) {
            if kiln.frame(settings, si, &mut line).is_ok() {
                // One frame at a time, read before the next: the line's
                // buffer never fills (a full one would drop the frame, as a
                // real box overruns, never block the simulation).
                let _ = pty.master.write_all(line.as_bytes());
            }
        }
        wait_until_read(&ptys, stop);
        if !finished && kiln.time_s() >= kiln.duration_s() + AFTER_FIRING_S {
            finished = true;
            done.notify_one();
        }
    }
    ptys
}

/// Returns once the daemon has read everything written to every line (or
/// the demo stops, or a line cannot be polled).
fn wait_until_read(ptys: &[Pty], stop: &AtomicBool) {
    for pty in ptys {
        while matches!(pty.unread(), Ok(true)) && !stop.load(Ordering::Relaxed) {
            std::thread::sleep(READ_POLL);
        }
    }
}

/// Prints, every `PRINT_EVERY_S` of simulated time, one line per zone in
/// the configuration's order, the names padded to the longest.
fn terminal_view(start: Timestamp, kiln: Kiln, settings: &Settings) -> super::run::Observer {
    let names: IdVec<ZoneId, String> = settings.zones.map(|z| z.name.to_string());
    let width = names.iter().map(|n| n.chars().count()).max().unwrap_or(0);
    let mut latest: IdVec<ZoneId, Option<ZoneReport>> = names.map(|_| None);
    let mut next_print = start.plus_s(PRINT_EVERY_S);
    Box::new(move |r: &ZoneReport| {
        if let Some(i) = names.position(|n| n.as_str() == r.zone.as_str()) {
            latest[i] = Some(r.clone());
        }
        if r.time < next_print {
            return;
        }
        next_print = next_print.plus_s(PRINT_EVERY_S);
        let t = r.time.since(start);
        show!("t={:>5.1} h", t / 3600.0);
        for (zi, l) in latest.iter_ids() {
            let Some(l) = l else { continue };
            let f =
                |v: Option<f64>, d: usize| v.map_or("     -".to_string(), |x| format!("{x:>6.d$}"));
            show!(
                "  {:<width$}  set-point {:>6.1} °C (top {:>6.1})  hot face {} °C  shell {} °C  q_shell {} W/m² (surface {})  loss {} kW  source {} W/m³  fit rms {} °C  {}",
                l.zone,
                kiln.firing_c(zi, t),
                kiln.setpoint_c(zi),
                f(l.hot_face_c, 1),
                f(l.shell_c, 1),
                f(l.flux_shell_w_m2, 0),
                f(l.flux_surface_w_m2, 0),
                f(l.heat_loss_w.map(|w| w / 1000.0), 2),
                f(l.source_w_m3, 0),
                f(l.fit_rms_c, 2),
                status_word(l.status),
            );
        }
    })
}

/// The table's word for a zone status.
fn status_word(status: ZoneStatus) -> &'static str {
    match status {
        ZoneStatus::Ok => "ok",
        ZoneStatus::Degraded => "DEGRADED",
        ZoneStatus::Unconfirmed => "UNCONFIRMED",
        ZoneStatus::NotSteady => "NOT STEADY",
        ZoneStatus::Contradicted => "CONTRADICTED",
        ZoneStatus::Implausible => "IMPLAUSIBLE",
        ZoneStatus::InsufficientData => "NO DATA",
    }
}
