//! `wallflux demo`: an invented shuttle-kiln firing, end to end. A
//! finite-difference model of each wall (so the fit is checked against
//! physics, not against its own formula) drives line-protocol frames through
//! a real pseudo-terminal that the daemon opens as its serial port; the
//! daemon publishes to an embedded MQTT broker; the terminal shows one line
//! per zone as the firing goes.

use std::io::Write;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use anyhow::anyhow;
use tokio::sync::Notify;

use super::cli::DemoArgs;
use super::clock::Clock;
use super::Failure;
use crate::acquire::line::{encode_frame, Unit, Value, MAX_LINE_BYTES};
use crate::config::{self, Settings, Signal};
use crate::monitor::zone::{ZoneReport, ZoneStatus};
use crate::physics::thermocouple;
use crate::sim::firing::FiringSchedule;
use crate::sim::pty::Pty;
use crate::sim::rng::SplitMix64;
use crate::sim::wall::{Layer, WallSim};
use crate::time::Timestamp;

/// The built-in demo configuration.
pub const DEMO_CONFIG: &str = include_str!("../../config/demo.toml");

/// Simulated seconds between two scans of the thermocouple box.
const SCAN_S: f64 = 10.0;
/// Hot-face temperature of a demo zone at a kiln set-point: the door runs a
/// little cooler and the roof a little hotter than the set-point (demo data).
fn hot_face_c(zone: &str, setpoint_c: f64, ambient_c: f64) -> f64 {
    let factor = match zone {
        "door" => 0.975,
        "roof" => 1.01,
        _ => 1.0,
    };
    ambient_c + (setpoint_c - ambient_c) * factor
}
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
    let schedule = FiringSchedule::demo();
    let rt = super::runtime()?;
    rt.block_on(async move {
        if !args.no_broker {
            super::broker::start(args.broker_port).await.map_err(Failure::runtime)?;
        }
        let clock = Clock::accelerated(args.speed);
        let start = clock.now();
        let root = settings.topic_root();
        show!(
            "wallflux demo: simulated shuttle kiln {}/{}, firing of {:.1} h at {}x ({:.1} min)",
            settings.site.plant,
            settings.site.kiln,
            schedule.duration_s() / 3600.0,
            args.speed,
            schedule.duration_s() / args.speed / 60.0
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
        let sim = {
            let settings = settings.clone();
            let stop = stop.clone();
            let done = done.clone();
            let schedule = schedule.clone();
            std::thread::Builder::new()
                .name("wallflux-sim".into())
                .spawn(move || simulate(&settings, &schedule, ptys, clock, start, &stop, &done))
                .map_err(|e| Failure::runtime(anyhow!("cannot start the simulator: {e}")))?
        };
        let observer = terminal_view(start, schedule.clone(), settings.zones.len());
        let shutdown = async {
            tokio::select! {
                _ = super::shutdown_signal() => show!("stopping (signal)"),
                _ = done.notified() => show!("firing complete"),
            }
        };
        let result = super::run::run(settings, clock, shutdown, Some(observer)).await;
        stop.store(true, Ordering::Relaxed);
        let _ = sim.join();
        let _ = std::fs::remove_dir_all(&state_dir);
        result.map_err(Failure::runtime)
    })
}

/// The simulator thread: steps every zone's wall model in simulated time,
/// following the daemon's clock, and writes one frame per scan per source.
fn simulate(
    settings: &Settings,
    schedule: &FiringSchedule,
    mut ptys: Vec<Pty>,
    clock: Clock,
    start: Timestamp,
    stop: &AtomicBool,
    done: &Notify,
) {
    let mut walls: Vec<WallSim> = Vec::new();
    for z in &settings.zones {
        let layers = z
            .layers
            .iter()
            .map(|l| Layer {
                material: settings.materials[l.material].material.clone(),
                thickness_m: l.thickness_m,
            })
            .collect();
        match WallSim::new(layers, 24, schedule.setpoint_c(0.0), z.surface) {
            Ok(mut w) => {
                w.settle(hot_face_c(&z.name, schedule.setpoint_c(0.0), z.ambient_c));
                walls.push(w);
            }
            Err(e) => {
                super::say(&format!(
                    "wallflux demo: cannot simulate zone {}: {e}",
                    z.name
                ));
                done.notify_one();
                return;
            }
        }
    }
    // Where each channel sits: (zone, depth).
    let place: Vec<Option<(usize, f64)>> = (0..settings.channels.len())
        .map(|c| {
            settings.zones.iter().enumerate().find_map(|(zi, z)| {
                z.probes
                    .iter()
                    .find(|p| p.channel == c)
                    .map(|p| (zi, p.depth_m))
            })
        })
        .collect();
    let mut rng = SplitMix64::new(0x2545_F491_4F6C_DD1D);
    let mut seq: u32 = 0;
    let mut t_sim = 0.0;
    let mut finished = false;
    let mut line = heapless::String::<{ MAX_LINE_BYTES + 2 }>::new();
    let mut values: heapless::Vec<(u8, Value), 64> = heapless::Vec::new();
    while !stop.load(Ordering::Relaxed) {
        let now_s = clock.now().since(start);
        if t_sim + SCAN_S > now_s {
            std::thread::sleep(
                clock
                    .real_duration(t_sim + SCAN_S - now_s)
                    .min(Duration::from_millis(200)),
            );
            continue;
        }
        t_sim += SCAN_S;
        let setpoint = schedule.setpoint_c(t_sim);
        for (w, z) in walls.iter_mut().zip(&settings.zones) {
            w.step(SCAN_S, hot_face_c(&z.name, setpoint, z.ambient_c));
        }
        // The box's terminals warm a little with the kiln (demo data).
        let cj_c = 24.0 + 6.0 * ((setpoint - 20.0) / 1250.0).clamp(0.0, 1.0) + 0.05 * rng.normal();
        for (si, pty) in ptys.iter_mut().enumerate() {
            values.clear();
            for (ci, c) in settings.channels.iter().enumerate() {
                let (Some((zi, depth)), true) = (place[ci], c.source == si) else {
                    continue;
                };
                let t = walls[zi].temperature_at(depth) + 0.15 * rng.normal();
                let v = match c.signal {
                    Signal::Celsius => Value::Reading {
                        value: round(t, 1),
                        unit: Unit::Celsius,
                    },
                    Signal::Millivolts => {
                        let (Ok(e), Ok(e_cj)) = (
                            thermocouple::emf_mv(c.tc_type, t),
                            thermocouple::emf_mv(c.tc_type, cj_c),
                        ) else {
                            continue;
                        };
                        Value::Reading {
                            value: round(e - e_cj, 3),
                            unit: Unit::Millivolts,
                        }
                    }
                };
                let _ = values.push((c.input, v));
            }
            line.clear();
            if encode_frame(seq, &values, Some(round(cj_c, 1)), &mut line).is_ok() {
                // A full pty buffer (daemon not reading) drops this scan,
                // as a real box would overrun: never block the simulation.
                let _ = pty.master.write_all(line.as_bytes());
            }
        }
        seq = seq.wrapping_add(1);
        // Two more minutes of scans after the firing, so the daemon
        // publishes its last interval; the line stays up (and scanning)
        // until the daemon has stopped, so it reports no lost port.
        if !finished && t_sim >= schedule.duration_s() + 120.0 {
            finished = true;
            done.notify_one();
        }
    }
}

fn round(v: f64, decimals: i32) -> f64 {
    let p = 10f64.powi(decimals);
    (v * p).round() / p
}

/// Prints one line per zone every `PRINT_EVERY_S` of simulated time.
fn terminal_view(start: Timestamp, schedule: FiringSchedule, zones: usize) -> super::run::Observer {
    let mut latest: Vec<Option<ZoneReport>> = vec![None; zones];
    let mut next_print = start.plus_s(PRINT_EVERY_S);
    Box::new(move |r: &ZoneReport| {
        let slot = latest
            .iter()
            .position(|l| l.as_ref().is_some_and(|l| l.zone == r.zone));
        match slot {
            Some(i) => latest[i] = Some(r.clone()),
            None => {
                if let Some(free) = latest.iter_mut().find(|l| l.is_none()) {
                    *free = Some(r.clone());
                }
            }
        }
        if r.time < next_print {
            return;
        }
        next_print = next_print.plus_s(PRINT_EVERY_S);
        let t = r.time.since(start);
        show!(
            "t={:>5.1} h  kiln set-point {:>6.1} °C",
            t / 3600.0,
            schedule.setpoint_c(t)
        );
        for l in latest.iter().flatten() {
            let f =
                |v: Option<f64>, d: usize| v.map_or("     -".to_string(), |x| format!("{x:>6.d$}"));
            let status = match l.status {
                ZoneStatus::Ok => "ok",
                ZoneStatus::Degraded => "DEGRADED",
                ZoneStatus::Unconfirmed => "UNCONFIRMED",
                ZoneStatus::NotSteady => "NOT STEADY",
                ZoneStatus::Contradicted => "CONTRADICTED",
                ZoneStatus::Implausible => "IMPLAUSIBLE",
                ZoneStatus::InsufficientData => "NO DATA",
            };
            show!(
                "  {:<10} hot face {} °C  shell {} °C  q_shell {} W/m² (surface {})  loss {} kW  source {} W/m³  fit rms {} °C  {status}",
                l.zone,
                f(l.hot_face_c, 1),
                f(l.shell_c, 1),
                f(l.flux_shell_w_m2, 0),
                f(l.flux_surface_w_m2, 0),
                f(l.heat_loss_w.map(|w| w / 1000.0), 2),
                f(l.source_w_m3, 0),
                f(l.fit_rms_c, 2),
            );
        }
    })
}
