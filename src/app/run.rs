//! The daemon: wires sources → monitor → publisher and runs until shutdown.

use std::future::Future;
use std::sync::atomic::Ordering;
use std::sync::Arc;
use std::time::Duration;

use serde_json::json;
use tokio::sync::{mpsc, watch};
use tracing::{info, warn};

use super::clock::Clock;
use super::state;
use crate::acquire::serial::{self, SourceHealth};
use crate::config::Settings;
use crate::monitor::energy::{EnergyMeter, EnergyTotals};
use crate::monitor::zone::{ZoneReport, ZoneStatus};
use crate::monitor::{Event, Monitor};
use crate::publish::mqtt::{self, LinkHealth};
use crate::publish::queue::{Kind, Message, Queue};

/// Something that wants to see every zone report (the demo's terminal view).
pub type Observer = Box<dyn FnMut(&ZoneReport) + Send>;

/// How often (real time) the engine looks for due work.
const TICK: Duration = Duration::from_millis(100);
/// How often (real time) the energy totals are saved.
const SAVE_EVERY: Duration = Duration::from_secs(300);
/// How often (real time) the status with counters is republished.
const STATUS_EVERY: Duration = Duration::from_secs(60);

/// Runs the daemon until `shutdown` completes; then publishes `offline` and
/// disconnects. Returns when everything has stopped.
pub async fn run(
    settings: Arc<Settings>,
    clock: Clock,
    shutdown: impl Future<Output = ()>,
    mut observer: Option<Observer>,
) -> anyhow::Result<()> {
    let root = settings.topic_root();
    let queue = Arc::new(Queue::new(settings.mqtt.queue_capacity));
    let link = Arc::new(LinkHealth::default());
    let (stop_tx, stop_rx) = watch::channel(false);

    let mqtt_task = tokio::spawn(mqtt::run(
        settings.mqtt.clone(),
        root.clone(),
        queue.clone(),
        link.clone(),
        clock,
        stop_rx.clone(),
    ));

    let (tx, mut rx) = mpsc::channel(256);
    let mut source_health = Vec::new();
    let mut source_tasks = Vec::new();
    for (i, s) in settings.sources.iter().enumerate() {
        let h = Arc::new(SourceHealth::default());
        source_health.push(h.clone());
        source_tasks.push(tokio::spawn(serial::run(
            i,
            s.clone(),
            tx.clone(),
            h,
            clock,
            stop_rx.clone(),
        )));
    }
    drop(tx);

    info!(
        plant = %settings.site.plant, kiln = %settings.site.kiln,
        zones = settings.zones.len(), channels = settings.channels.len(),
        sources = settings.sources.len(), broker = %format!("{}:{}", settings.mqtt.host, settings.mqtt.port),
        topic_root = %root, "wallflux started"
    );

    let mut monitor = Monitor::new(settings.clone(), clock.now());
    let totals = match state::load::<EnergyTotals>(&settings.state_dir, ENERGY_FILE) {
        state::Loaded::Value(t) => {
            info!(total_kwh = t.total_kwh, "energy totals restored");
            t
        }
        state::Loaded::Missing => EnergyTotals::default(),
        state::Loaded::Corrupt(moved, e) => {
            warn!(file = %moved.display(), error = %e, "energy totals unreadable: moved aside, counting from zero");
            EnergyTotals::default()
        }
    };
    let mut meter = EnergyMeter::new(settings.zones.len(), settings.site.firing_start_c, totals);
    let mut save_tick = tokio::time::interval(SAVE_EVERY);
    save_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut tick = tokio::time::interval(TICK);
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut status_tick = tokio::time::interval(STATUS_EVERY);
    status_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    tokio::pin!(shutdown);
    let mut sources_open = true;

    loop {
        tokio::select! {
            msg = rx.recv(), if sources_open => match msg {
                Some(f) => monitor.handle_frame(f.source, &f.frame, f.time),
                None => sources_open = false,
            },
            _ = tick.tick() => {
                drain(&mut monitor, &mut meter, &settings, &root, &queue, clock, &mut observer);
            }
            _ = save_tick.tick() => save_energy(&settings, &meter),
            _ = status_tick.tick() => {
                queue.push(Message {
                    topic: format!("{root}/status"),
                    payload: status_with_counters(&settings, &source_health, &queue, &link, &monitor, clock),
                    kind: Kind::Status,
                });
            }
            _ = &mut shutdown => break,
        }
    }

    info!("shutting down");
    save_energy(&settings, &meter);
    let _ = stop_tx.send(true);
    for t in source_tasks {
        let _ = tokio::time::timeout(Duration::from_secs(2), t).await;
    }
    match tokio::time::timeout(Duration::from_secs(8), mqtt_task).await {
        Ok(_) => {}
        Err(_) => warn!("MQTT task did not stop in time"),
    }
    info!("stopped");
    Ok(())
}

/// Moves every due output of the monitor to the queue and the log.
fn drain(
    monitor: &mut Monitor,
    meter: &mut EnergyMeter,
    settings: &Settings,
    root: &str,
    queue: &Queue,
    clock: Clock,
    observer: &mut Option<Observer>,
) {
    let now = clock.now();
    let mut any_zone = false;
    while let Some(report) = monitor.poll_zone(now) {
        any_zone = true;
        let zi = settings
            .zones
            .iter()
            .position(|z| z.name == report.zone)
            .unwrap_or(0);
        meter.record(
            zi,
            report.heat_loss_w,
            report.hot_face_c,
            settings.zones[zi].interval_s,
            report.time,
        );
        let cycles = monitor.zone_cycles(zi);
        if cycles % u64::from(settings.log.summary_every) == 1 || settings.log.summary_every == 1 {
            log_summary(&report);
        }
        match serde_json::to_vec(&report) {
            Ok(payload) => queue.push(Message {
                topic: format!("{root}/zone/{}/state", report.zone),
                payload,
                kind: Kind::ZoneState,
            }),
            Err(e) => warn!(zone = %report.zone, error = %e, "zone state could not be encoded"),
        }
        if let Some(obs) = observer.as_mut() {
            obs(&report);
        }
    }
    if any_zone {
        let price = settings
            .site
            .energy_price
            .as_ref()
            .map(|(p, c)| (*p, c.as_str()));
        match serde_json::to_vec(&meter.report(now, price)) {
            Ok(payload) => queue.push(Message {
                topic: format!("{root}/kiln/state"),
                payload,
                kind: Kind::ZoneState,
            }),
            Err(e) => warn!(error = %e, "kiln state could not be encoded"),
        }
    }
    while let Some(ch) = monitor.poll_channel(now) {
        match serde_json::to_vec(&ch) {
            Ok(payload) => queue.push(Message {
                topic: format!("{root}/channel/{}", ch.channel),
                payload,
                kind: Kind::Channel,
            }),
            Err(e) => {
                warn!(channel = %ch.channel, error = %e, "channel state could not be encoded")
            }
        }
    }
    while let Some(ev) = monitor.poll_event() {
        match ev {
            Event::ChannelHealth {
                channel,
                from,
                to,
                reason,
                ..
            } => {
                let name = settings.channels[channel].name.as_str();
                if to == crate::monitor::channel::Health::Ok {
                    info!(channel = name, from = from.name(), "channel ok");
                } else {
                    warn!(
                        channel = name,
                        status = to.name(),
                        from = from.name(),
                        reason,
                        "channel fault: excluded from fits"
                    );
                }
            }
            Event::UnknownInput { source, input } => {
                warn!(source = %settings.sources[source].name, input,
                    "frame carries an input that no [[channel]] reads (ignored; further ones counted)");
            }
        }
    }
}

/// File of the energy totals in the state directory.
pub const ENERGY_FILE: &str = "energy.json";

fn save_energy(settings: &Settings, meter: &EnergyMeter) {
    if let Err(e) = state::save(&settings.state_dir, ENERGY_FILE, &meter.totals) {
        warn!(dir = %settings.state_dir.display(), error = %e, "cannot save the energy totals");
    }
}

fn log_summary(r: &ZoneReport) {
    let f = |v: Option<f64>| v.map_or("-".to_string(), |x| format!("{x:.1}"));
    match r.status {
        ZoneStatus::InsufficientData => {
            warn!(zone = %r.zone, probes_used = r.probes_used, "zone has too few valid probes: no numbers published");
        }
        _ => info!(
            zone = %r.zone,
            status = r.status.name(),
            hot_face_c = %f(r.hot_face_c),
            shell_c = %f(r.shell_c),
            flux_shell_w_m2 = %f(r.flux_shell_w_m2),
            heat_loss_kw = %f(r.heat_loss_w.map(|w| w / 1000.0)),
            fit_rms_c = %r.fit_rms_c.map_or("-".into(), |x| format!("{x:.2}")),
            "zone"
        ),
    }
}

fn status_with_counters(
    settings: &Settings,
    sources: &[Arc<SourceHealth>],
    queue: &Queue,
    link: &LinkHealth,
    monitor: &Monitor,
    clock: Clock,
) -> Vec<u8> {
    let r = Ordering::Relaxed;
    let sources: Vec<_> = settings
        .sources
        .iter()
        .zip(sources)
        .map(|(s, h)| {
            json!({
                "source": s.name.as_str(),
                "open": h.open.load(r),
                "frames": h.frames.load(r),
                "frame_errors": h.frame_errors.load(r),
                "lost_scans": h.lost_scans.load(r),
                "reopens": h.opens.load(r).saturating_sub(1),
            })
        })
        .collect();
    let v = json!({
        "schema": "wallflux.status/1",
        "state": "online",
        "time": clock.now(),
        "version": env!("CARGO_PKG_VERSION"),
        "sources": sources,
        "mqtt": {
            "connections": link.connections.load(r),
            "failed_attempts": link.failed_attempts.load(r),
            "published": link.published.load(r),
            "queued": queue.len(),
            "coalesced": queue.counters.coalesced.load(r),
            "dropped_zone_states": queue.counters.dropped_zone_states.load(r),
            "dropped_channels": queue.counters.dropped_channels.load(r),
        },
        "unknown_inputs": monitor.unknown_inputs,
    });
    serde_json::to_vec(&v).unwrap_or_default()
}
