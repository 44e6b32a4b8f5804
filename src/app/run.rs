//! The daemon: wires sources → monitor → publisher and runs until shutdown.

use std::collections::BTreeMap;
use std::future::Future;
use std::sync::atomic::Ordering;
use std::sync::Arc;
use std::time::Duration;

use serde_json::json;
use tokio::sync::{mpsc, watch};
use tracing::{debug, info, warn};

use super::clock::Clock;
use super::state;
use crate::acquire::serial::{self, SourceFrame, SourceHealth};
use crate::config::Settings;
use crate::monitor::alarm::{AlarmFlags, AlarmState, Cause, Priority};
use crate::monitor::alarm_engine::{event_id, target_names, trend_place, AlarmOutput, TrendAlert};
use crate::monitor::channel::Health;
use crate::monitor::command::{command_id, parse_command, reply_json};
use crate::monitor::energy::{EnergyMeter, EnergyTotals};
use crate::monitor::trend::trend_line;
use crate::monitor::zone::{ZoneReport, ZoneStatus};
use crate::monitor::{Event, Monitor};
use crate::publish::mqtt::{self, LinkHealth};
use crate::publish::queue::{Kind, Message, Queue};
use crate::time::Timestamp;

/// Something that wants to see every zone report (the demo's terminal view).
pub type Observer = Box<dyn FnMut(&ZoneReport) + Send>;

/// How often (real time) the engine looks for due work.
const TICK: Duration = Duration::from_millis(100);
/// How often (real time) the energy totals are saved.
const SAVE_EVERY: Duration = Duration::from_secs(300);
/// How often (real time) the status with counters is republished.
const STATUS_EVERY: Duration = Duration::from_secs(60);
/// While an alarm flood lasts, one grouped log line at most this often.
const FLOOD_SUMMARY_EVERY: Duration = Duration::from_secs(60);

/// File of the energy totals in the state directory.
pub const ENERGY_FILE: &str = "energy.json";
/// File of the alarm flags in the state directory.
pub const ALARMS_FILE: &str = "alarms.json";
/// File of the lining baselines in the state directory.
pub const BASELINES_FILE: &str = "baselines.json";

/// Runs the daemon until `shutdown` completes; then publishes `offline` and
/// disconnects. Returns when everything has stopped.
pub async fn run(
    settings: Arc<Settings>,
    clock: Clock,
    shutdown: impl Future<Output = ()>,
    observer: Option<Observer>,
) -> anyhow::Result<()> {
    let root = settings.topic_root();
    let queue = Arc::new(Queue::new(settings.mqtt.queue_capacity));
    let link = Arc::new(LinkHealth::default());
    let (stop_tx, stop_rx) = watch::channel(false);
    let (cmd_tx, mut cmd_rx) = mpsc::channel::<Vec<u8>>(64);

    let mqtt_task = tokio::spawn(mqtt::run(
        settings.mqtt.clone(),
        root.clone(),
        queue.clone(),
        link.clone(),
        clock,
        cmd_tx,
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
        sources = settings.sources.len(), alarms = settings.alarms.len(),
        broker = %format!("{}:{}", settings.mqtt.host, settings.mqtt.port),
        topic_root = %root, state_dir = %settings.state_dir.display(), "wallflux started"
    );

    let mut engine = Engine::new(settings.clone(), root, queue.clone(), clock, observer);
    engine.publish_all_alarms();
    let mut tick = tokio::time::interval(TICK);
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut status_tick = tokio::time::interval(STATUS_EVERY);
    status_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut save_tick = tokio::time::interval(SAVE_EVERY);
    save_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    tokio::pin!(shutdown);
    let mut sources_open = true;
    let mut connections_seen = 0;

    loop {
        tokio::select! {
            msg = rx.recv(), if sources_open => match msg {
                Some(f) => engine.monitor.handle_frame(f.source, &f.frame, f.time),
                None => sources_open = false,
            },
            Some(payload) = cmd_rx.recv() => engine.command(&payload),
            _ = tick.tick() => {
                // A new broker session may have lost retained alarm states.
                let c = link.connections.load(Ordering::Relaxed);
                if c != connections_seen {
                    connections_seen = c;
                    engine.publish_all_alarms();
                }
                engine.drain_with(&mut rx);
            }
            _ = status_tick.tick() => {
                let payload = engine.status_with_counters(&source_health, &link);
                queue.push(Message { topic: format!("{}/status", engine.root), payload, kind: Kind::Status });
            }
            _ = save_tick.tick() => engine.save_energy(),
            _ = &mut shutdown => break,
        }
    }

    info!("shutting down");
    engine.drain_with(&mut rx);
    engine.save_energy();
    engine.save_alarms();
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

/// The engine loop's state: the monitor and everything that turns its
/// outputs into messages, log lines and saved files.
struct Engine {
    settings: Arc<Settings>,
    root: String,
    queue: Arc<Queue>,
    clock: Clock,
    observer: Option<Observer>,
    monitor: Monitor,
    meter: EnergyMeter,
    last_flood_summary: Option<tokio::time::Instant>,
    flood_grouped: u64,
}

impl Engine {
    fn new(
        settings: Arc<Settings>,
        root: String,
        queue: Arc<Queue>,
        clock: Clock,
        observer: Option<Observer>,
    ) -> Self {
        let mut totals = load_or_default::<EnergyTotals>(&settings, ENERGY_FILE, "energy totals");
        if let Some(note) = totals.upgrade() {
            info!(file = ENERGY_FILE, "{note}");
        }
        let flags =
            load_or_default::<BTreeMap<String, AlarmFlags>>(&settings, ALARMS_FILE, "alarm states");
        let mut monitor = Monitor::with_alarm_flags(settings.clone(), clock.now(), &flags);
        let baselines = load_or_default::<BTreeMap<String, crate::monitor::lining::Baseline>>(
            &settings,
            BASELINES_FILE,
            "lining baselines",
        );
        for (zone, note) in monitor.restore_baselines(&baselines) {
            info!(file = BASELINES_FILE, zone, "{note}");
        }
        for z in settings.zones.iter() {
            if let Some(b) = monitor.baseline(&z.name) {
                let r = b.report(clock.now(), z.baseline_days);
                info!(zone = %z.name, state = r.state, started = %r.started.map_or("-".to_string(), |t| t.rfc3339().to_string()), reference_bins = r.reference_bins,
                    "lining baseline (commands baseline_start, baseline_stop, baseline_reset on {{root}}/cmd)");
            }
        }
        let meter = EnergyMeter::new(
            settings.zones.len(),
            settings.site.firing_start_c,
            settings.site.operation,
            totals,
        );
        Engine {
            settings,
            root,
            queue,
            clock,
            observer,
            monitor,
            meter,
            last_flood_summary: None,
            flood_grouped: 0,
        }
    }

    /// Handles the frames waiting in the channel (all stamped before now),
    /// then drains at that instant: a drain never judges a source silent
    /// while its frames wait (the demo's clock runs fast), and at shutdown
    /// none is lost.
    fn drain_with(&mut self, rx: &mut mpsc::Receiver<SourceFrame>) {
        let waiting = rx.len();
        let now = self.clock.now();
        for _ in 0..waiting {
            match rx.try_recv() {
                Ok(f) => self.monitor.handle_frame(f.source, &f.frame, f.time),
                Err(_) => break,
            }
        }
        self.drain_at(now);
    }

    /// Moves every due output of the monitor to the queue and the log.
    fn drain(&mut self) {
        self.drain_at(self.clock.now());
    }

    /// [`Self::drain`] at `now`.
    fn drain_at(&mut self, now: Timestamp) {
        self.monitor.tick(now);
        let settings = self.settings.clone();
        let root = self.root.clone();
        let mut any_zone = false;
        while let Some(report) = self.monitor.poll_zone(now) {
            any_zone = true;
            // The monitor names only configured zones; a report it could
            // not place is still published, but never booked to another
            // zone's energy.
            if let Some(zi) = settings.zones.iter().position(|z| z.name == report.zone) {
                self.meter.record(
                    zi,
                    report.heat_loss_w,
                    report.hot_face_c,
                    settings.zones[zi].interval_s,
                    report.time,
                );
                let cycles = self.monitor.zone_cycles(zi);
                let every = u64::from(settings.log.summary_every);
                if every == 1 || cycles % every == 1 {
                    log_summary(&report);
                }
            }
            self.push_json(
                format!("{root}/zone/{}/state", report.zone),
                &report,
                Kind::ZoneState,
            );
            if let Some(obs) = self.observer.as_mut() {
                obs(&report);
            }
        }
        if any_zone {
            let price = settings
                .site
                .energy_price
                .as_ref()
                .map(|(p, c)| (*p, c.as_str()));
            let kiln = self.meter.report(now, price);
            self.push_json(format!("{root}/kiln/state"), &kiln, Kind::ZoneState);
        }
        while let Some(ch) = self.monitor.poll_channel(now) {
            self.push_json(format!("{root}/channel/{}", ch.channel), &ch, Kind::Channel);
        }
        while let Some(ev) = self.monitor.poll_event() {
            match ev {
                Event::ChannelHealth {
                    channel,
                    from,
                    to,
                    reason,
                    ..
                } => {
                    let name = settings.channels[channel].name.as_str();
                    if to == Health::Ok {
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
        let mut alarms_changed = false;
        while let Some(out) = self.monitor.poll_alarm() {
            match out {
                AlarmOutput::Transition {
                    alarm,
                    transition,
                    announced,
                } => {
                    alarms_changed = true;
                    self.log_transition(alarm, &transition, announced, now);
                    self.publish_alarm(alarm, now);
                    let c = &self.monitor.alarms().configs()[alarm];
                    let event = json!({
                        "schema": "wallflux.event/1",
                        "type": "alarm",
                        "time": transition.time,
                        "alarm": c.name,
                        "event_id": event_id(&c.name, transition.seq),
                        "seq": transition.seq,
                        "from": transition.from,
                        "to": transition.to,
                        "cause": transition.cause,
                        "active": transition.active,
                        "announced": announced,
                        "value": transition.value,
                        "setpoint": (c.spec.kind != crate::monitor::alarm::AlarmKind::Diagnostic).then_some(c.spec.setpoint),
                        "unit": c.unit(),
                        "priority": c.spec.priority,
                        "by": transition.by.as_ref().map(|b| b.as_str()),
                        "message": c.message,
                        "reason": self.monitor.alarm_reason(alarm, transition.time),
                    });
                    self.push_json(format!("{root}/events"), &event, Kind::Event);
                }
                AlarmOutput::Trend(t) => self.trend(&t),
            }
        }
        if alarms_changed && self.monitor.alarms_mut().take_dirty() {
            self.save_alarms();
        }
        self.flood_summary(now);
    }

    fn push_json(&self, topic: String, value: &impl serde::Serialize, kind: Kind) {
        match serde_json::to_vec(value) {
            Ok(payload) => self.queue.push(Message {
                topic,
                payload,
                kind,
            }),
            Err(e) => warn!(topic, error = %e, "message could not be encoded"),
        }
    }

    /// The alarm's retained state; a channel-fault alarm carries its
    /// channel's `reason` in words while the channel is faulty.
    fn publish_alarm(&self, i: usize, now: Timestamp) {
        let r = self.monitor.alarm_report(i, now);
        let topic = format!("{}/alarm/{}", self.root, r.name);
        match (self.monitor.alarm_reason(i, now), serde_json::to_value(&r)) {
            (Some(reason), Ok(serde_json::Value::Object(mut v))) => {
                v.insert("reason".into(), reason.into());
                self.push_json(topic, &v, Kind::Alarm);
            }
            _ => self.push_json(topic, &r, Kind::Alarm),
        }
    }

    fn publish_all_alarms(&self) {
        let now = self.clock.now();
        for i in 0..self.monitor.alarms().len() {
            self.publish_alarm(i, now);
        }
    }

    fn log_transition(
        &mut self,
        i: usize,
        t: &crate::monitor::alarm::Transition,
        announced: bool,
        now: Timestamp,
    ) {
        let c = &self.monitor.alarms().configs()[i];
        let flooding = self.monitor.alarms().flooding(now);
        let value = t.value.map_or("-".to_string(), |v| format!("{v:.1}"));
        let by = t.by.as_ref().map_or("", |b| b.as_str());
        let operator = !by.is_empty();
        if flooding && !operator && announced {
            // Grouped: one summary a minute instead of a line each.
            self.flood_grouped += 1;
            debug!(alarm = %c.name, to = t.to.name(), value = %value, "alarm (grouped during flood)");
            return;
        }
        let priority = c.spec.priority.name();
        let text = if c.message.is_empty() {
            c.name.as_str()
        } else {
            c.message.as_str()
        };
        match (t.cause, announced) {
            (Cause::Activated, true)
                if matches!(c.spec.priority, Priority::Critical | Priority::High) =>
            {
                warn!(alarm = %c.name, priority, value = %value, unit = c.unit(), setpoint = c.spec.setpoint, "ALARM: {text}")
            }
            (Cause::Activated, true) => {
                let reason = self.monitor.alarm_reason(i, t.time).unwrap_or("");
                warn!(alarm = %c.name, priority, value = %value, unit = c.unit(), reason, "alarm: {text}")
            }
            (_, false) if !operator => {
                info!(alarm = %c.name, to = t.to.name(), cause = t.cause.name(), value = %value, "alarm change not announced (shelved, suppressed or out of service)")
            }
            _ => {
                info!(alarm = %c.name, from = t.from.name(), to = t.to.name(), cause = t.cause.name(), by, "alarm")
            }
        }
    }

    fn flood_summary(&mut self, now: Timestamp) {
        let alarms = self.monitor.alarms();
        if !alarms.flooding(now) {
            if self.flood_grouped > 0 {
                info!(grouped = self.flood_grouped, "alarm flood over");
                self.flood_grouped = 0;
            }
            self.last_flood_summary = None;
            return;
        }
        let t = tokio::time::Instant::now();
        if self
            .last_flood_summary
            .is_none_or(|l| t.duration_since(l) >= FLOOD_SUMMARY_EVERY)
        {
            let active: Vec<&str> = (0..alarms.len())
                .filter(|&i| {
                    matches!(
                        alarms.state(i, now),
                        AlarmState::Unacknowledged | AlarmState::Acknowledged
                    )
                })
                .map(|i| alarms.configs()[i].name.as_str())
                .collect();
            warn!(
                rate_per_10min = alarms.flood_rate(now),
                grouped = self.flood_grouped,
                active = %active.join(","),
                "ALARM FLOOD: more than 10 alarms in 10 minutes; alarm lines are grouped"
            );
            self.last_flood_summary = Some(t);
        }
    }

    fn trend(&self, t: &TrendAlert) {
        let c = &self.monitor.alarms().configs()[t.alarm];
        let (zone, channel, _, quantity) = target_names(&self.settings, c.target);
        let place = trend_place(&self.settings, c.target);
        let mut line = heapless::String::<256>::new();
        let unit = c.unit();
        if trend_line(
            &mut line,
            &place,
            quantity,
            unit,
            t.value,
            t.rate_per_h,
            t.limit,
            t.eta_h,
            t.time,
        )
        .is_ok()
        {
            warn!(alarm = %c.name, "trend: {line}");
        }
        let event = json!({
            "schema": "wallflux.event/1",
            "type": "trend",
            "time": t.time,
            "alarm": c.name,
            "zone": zone,
            "channel": channel,
            "quantity": quantity,
            "value": t.value,
            "rate_per_h": t.rate_per_h,
            "limit": t.limit,
            "unit": unit,
            "eta_h": t.eta_h,
            "message": line.as_str(),
        });
        self.push_json(format!("{}/events", self.root), &event, Kind::Event);
    }

    /// An operator command from `{root}/cmd`: applied, answered on
    /// `{root}/cmd/reply`, logged with its user (the audit trail).
    fn command(&mut self, payload: &[u8]) {
        let now = self.clock.now();
        let reply_topic = format!("{}/cmd/reply", self.root);
        let (id, result) = match parse_command(payload) {
            Ok(cmd) if cmd.action.is_baseline() => {
                let r = self.monitor.command(&cmd, now);
                match &r {
                    Ok(_) => {
                        info!(id = %cmd.id, action = cmd.action.name(), zone = %cmd.alarm, by = %cmd.by, "operator command")
                    }
                    Err(e) => {
                        warn!(id = %cmd.id, action = cmd.action.name(), zone = %cmd.alarm, by = %cmd.by, error = %e, "operator command refused")
                    }
                }
                if r.is_ok() {
                    // A commissioning step must survive a power cut.
                    self.save_baselines();
                }
                (Some(cmd.id.clone()), r.map(|_| ()))
            }
            Ok(cmd) => {
                let r = self.monitor.command(&cmd, now);
                match &r {
                    Ok(_) => {
                        info!(id = %cmd.id, action = cmd.action.name(), alarm = %cmd.alarm, by = %cmd.by, minutes = cmd.minutes.map_or(String::new(), |m| format!("{m} min")), "operator command")
                    }
                    Err(e) => {
                        warn!(id = %cmd.id, action = cmd.action.name(), alarm = %cmd.alarm, by = %cmd.by, error = %e, "operator command refused")
                    }
                }
                (Some(cmd.id.clone()), r.map(|_| ()))
            }
            Err(e) => {
                warn!(error = %e, bytes = payload.len(), "malformed operator command refused");
                (command_id(payload), Err(e))
            }
        };
        let reply = reply_json(id.as_deref(), result.as_ref().map(|_| ()));
        self.queue.push(Message {
            topic: reply_topic,
            payload: reply,
            kind: Kind::Event,
        });
        self.drain();
    }

    /// Energy totals and lining baselines (slow-moving state), every few
    /// minutes and at shutdown.
    fn save_energy(&self) {
        if let Err(e) = state::save(&self.settings.state_dir, ENERGY_FILE, &self.meter.totals) {
            warn!(dir = %self.settings.state_dir.display(), error = %e, "cannot save the energy totals");
        }
        self.save_baselines();
    }

    fn save_baselines(&self) {
        if let Err(e) = state::save(
            &self.settings.state_dir,
            BASELINES_FILE,
            &self.monitor.baselines(),
        ) {
            warn!(dir = %self.settings.state_dir.display(), error = %e, "cannot save the lining baselines");
        }
    }

    fn save_alarms(&self) {
        if let Err(e) = state::save(
            &self.settings.state_dir,
            ALARMS_FILE,
            &self.monitor.alarms().flags(),
        ) {
            warn!(dir = %self.settings.state_dir.display(), error = %e, "cannot save the alarm states: they will not survive a restart");
        }
    }

    fn status_with_counters(&self, sources: &[Arc<SourceHealth>], link: &LinkHealth) -> Vec<u8> {
        let r = Ordering::Relaxed;
        let now = self.clock.now();
        let sources: Vec<_> = self
            .settings
            .sources
            .iter()
            .zip(sources)
            .enumerate()
            .map(|(i, (s, h))| {
                json!({
                    "source": s.name.as_str(),
                    "open": h.open.load(r),
                    "silent": self.monitor.source_silent(i),
                    "frames": h.frames.load(r),
                    "frame_errors": h.frame_errors.load(r),
                    "lost_scans": h.lost_scans.load(r),
                    "reopens": h.opens.load(r).saturating_sub(1),
                })
            })
            .collect();
        let alarms = self.monitor.alarms();
        let active = (0..alarms.len())
            .filter(|&i| {
                matches!(
                    alarms.state(i, now),
                    AlarmState::Unacknowledged | AlarmState::Acknowledged
                )
            })
            .count();
        let q = &self.queue;
        let v = json!({
            "schema": "wallflux.status/1",
            "state": "online",
            "time": now,
            "version": env!("CARGO_PKG_VERSION"),
            "sources": sources,
            "alarms_active": active,
            "alarm_rate_per_10min": alarms.flood_rate(now),
            "alarm_flood": alarms.flooding(now),
            "mqtt": {
                "connections": link.connections.load(r),
                "failed_attempts": link.failed_attempts.load(r),
                "published": link.published.load(r),
                "queued": q.len(),
                "coalesced": q.counters.coalesced.load(r),
                "dropped_zone_states": q.counters.dropped_zone_states.load(r),
                "dropped_channels": q.counters.dropped_channels.load(r),
                "lost_events": q.counters.lost_events.load(r),
                "commands_dropped": link.commands_dropped.load(r),
            },
            "unknown_inputs": self.monitor.unknown_inputs,
        });
        serde_json::to_vec(&v).unwrap_or_default()
    }
}

fn load_or_default<T: serde::de::DeserializeOwned + Default>(
    settings: &Settings,
    file: &str,
    what: &str,
) -> T {
    match state::load::<T>(&settings.state_dir, file) {
        state::Loaded::Value(t) => {
            info!(file, "{what} restored");
            t
        }
        state::Loaded::Missing => T::default(),
        state::Loaded::Corrupt(moved, e) => {
            warn!(file = %moved.display(), error = %e, "{what} unreadable: moved aside, starting afresh");
            T::default()
        }
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
