//! The daemon: wires sources → monitor → sinks and runs until shutdown.
//!
//! The engine loop only drives the monitor and routes its outputs: scans,
//! decode errors and commands go in as they arrive; it sleeps until the
//! monitor's `poll_timeout`; after every call it drains `poll_output` into
//! the log, the MQTT queue (`publish::route`) and the demo's observer, and
//! saves what must survive a restart.

use std::collections::BTreeMap;
use std::future::Future;
use std::sync::atomic::Ordering;
use std::sync::Arc;
use std::time::Duration;

use tokio::sync::{mpsc, watch};
use tracing::{info, warn};

use super::clock::Clock;
use super::record::Recorder;
use super::state;
use crate::acquire::modbus;
use crate::acquire::serial::{self, Delivery, FromSource, SourceHealth};
use crate::config::Settings;
use crate::config::{Signal, SourceKind};
use crate::monitor::alarm::AlarmFlags;
use crate::monitor::command::CommandError;
use crate::monitor::energy::EnergyTotals;
use crate::monitor::output::{LinkStatus, Output, StatusReport};
use crate::monitor::zone::ZoneReport;
use crate::monitor::Monitor;
use crate::protocol::scan::Unit;
use crate::publish::fold::Fold;
use crate::publish::log::Logger;
use crate::publish::mqtt::{self, LinkHealth, Outbound};
use crate::publish::queue::{Kind, Message, Queue};
use crate::publish::route;
use crate::publish::tls;
use crate::store::{HistoryKind, Opened, Store};
use crate::time::Timestamp;

/// Something that wants to see every zone report (the demo's terminal view).
pub type Observer = Box<dyn FnMut(&ZoneReport) + Send>;

/// How often (real time) the lining baselines and the recording are saved
/// (the energy totals are saved after every round of zone cycles).
const SAVE_EVERY: Duration = Duration::from_secs(300);
/// How often (real time) the status with counters is republished.
const STATUS_EVERY: Duration = Duration::from_secs(60);
/// The longest sleep when the monitor has nothing due (it always has: a
/// zone's next cycle), real time.
const IDLE: Duration = Duration::from_secs(3600);
/// A deadline this close ahead of the clock counts as reached (the
/// clock's and the deadline's float rounding), s of monitor time.
const ROUNDING_S: f64 = 1e-3;
/// How soon to look again when the clock was found short of a deadline,
/// real time.
const RECHECK: Duration = Duration::from_millis(5);
/// How long after a deadline the engine wakes for it (real time): a scan
/// stamped just before the deadline is on its way from its source task and
/// must be handled first, as a replay of the stamps would.
const IN_FLIGHT: Duration = Duration::from_millis(2);

/// Name of the energy totals in the local database's state.
const ENERGY_STATE: &str = "energy";
/// File of the energy totals in the state directory (when the local
/// database cannot be used).
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
    run_recording(settings, clock, shutdown, observer, None).await
}

/// As [`run`], writing every scan handled to `recorder`.
pub async fn run_recording(
    settings: Arc<Settings>,
    clock: Clock,
    shutdown: impl Future<Output = ()>,
    observer: Option<Observer>,
    recorder: Option<Recorder>,
) -> anyhow::Result<()> {
    let root = settings.topic_root();
    let queue = Arc::new(Queue::new(settings.mqtt.queue_capacity));
    let link = Arc::new(LinkHealth::default());
    let (stop_tx, stop_rx) = watch::channel(false);
    let (cmd_tx, mut cmd_rx) = mpsc::channel::<mqtt::Incoming>(64);

    let password = match &settings.mqtt.credentials {
        Some(c) => Some(mqtt::read_password(&c.password)?),
        None => None,
    };
    let tls = match &settings.mqtt.tls {
        Some(t) => Some(tls::client_config(t, &settings.mqtt.host)?),
        None => None,
    };
    let broker = mqtt::BrokerAccess {
        cfg: settings.mqtt.clone(),
        password,
        tls,
    };
    // The monitor starts before any source does: every scan is stamped at
    // or after its start, as a recording of them replays. (Before the
    // database opens: a simulated run's clock already runs.)
    let mut engine = Engine::new(
        settings.clone(),
        root.clone(),
        queue.clone(),
        clock,
        observer,
    );
    let store =
        open_store(&settings, clock.speed() <= 1.0).map(|s| Arc::new(std::sync::Mutex::new(s)));
    engine.store = store.clone();
    engine.restore_energy_from_store();
    if store.is_none() {
        // Said by the state-not-saved alarm too, for the whole run.
        engine.persisted(Saved::Store, false);
    }
    let outbound = Outbound {
        queue: queue.clone(),
        store,
    };
    let mqtt_task = tokio::spawn(mqtt::run(
        broker,
        root.clone(),
        outbound,
        link.clone(),
        clock,
        cmd_tx,
        stop_rx.clone(),
    ));
    engine.recorder = recorder;
    if let Some(r) = engine.recorder.as_mut() {
        r.start(engine.monitor.started());
    }
    let (tx, mut rx) = mpsc::channel(256);
    let mut source_health = Vec::new();
    let mut source_tasks = Vec::new();
    let mut bus_stats = Vec::new();
    for (i, s) in settings.sources.iter_ids() {
        let h = Arc::new(SourceHealth::default());
        source_health.push(h.clone());
        let stats = Arc::new(modbus::BusStats::default());
        bus_stats.push(stats.clone());
        let task = match s.kind {
            SourceKind::Line => tokio::spawn(serial::run(
                i,
                s.clone(),
                tx.clone(),
                h,
                clock,
                stop_rx.clone(),
            )),
            SourceKind::ModbusRtu => {
                let points = settings
                    .channels
                    .iter()
                    .filter(|c| c.source == i)
                    .filter_map(|c| {
                        let unit = match c.signal {
                            Signal::Celsius => Unit::Celsius,
                            Signal::Millivolts => Unit::Millivolts,
                        };
                        Some((c.input, c.point.clone()?, unit))
                    })
                    .collect();
                tokio::spawn(modbus::run(
                    i,
                    s.clone(),
                    points,
                    tx.clone(),
                    h,
                    stats,
                    clock,
                    stop_rx.clone(),
                ))
            }
        };
        source_tasks.push(task);
    }
    engine.bus_stats = bus_stats;
    drop(tx);

    info!(
        plant = %settings.site.plant, kiln = %settings.site.kiln,
        zones = settings.zones.len(), channels = settings.channels.len(),
        sources = settings.sources.len(), alarms = settings.alarms.len(),
        broker = %format!("{}:{}", settings.mqtt.host, settings.mqtt.port),
        topic_root = %root, state_dir = %settings.state_dir.display(), "wallflux started"
    );
    // Ready for systemd (Type=notify): the configuration is loaded, the
    // database open, the sources started (not waiting for the broker: the
    // daemon does its work without it). Nothing without NOTIFY_SOCKET.
    notify(&[
        sd_notify::NotifyState::Ready,
        sd_notify::NotifyState::Status("monitoring"),
    ]);
    // The watchdog is fed from this loop only: an engine that stalls stops
    // feeding it and systemd restarts the service.
    let watchdog = sd_notify::watchdog_enabled();
    if let Some(w) = watchdog {
        info!(
            every_s = w.as_secs_f64() / 2.0,
            "systemd watchdog fed from the engine loop"
        );
    }
    let mut watchdog_tick =
        tokio::time::interval(watchdog.map_or(Duration::from_secs(3600), |w| w / 2));
    watchdog_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);

    engine.monitor.handle_alarm_states_request(clock.now());
    engine.drain(&source_health, &link);
    let mut status_tick = tokio::time::interval(STATUS_EVERY);
    status_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut prune_tick = tokio::time::interval(PRUNE_EVERY);
    prune_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut save_tick = tokio::time::interval(SAVE_EVERY);
    save_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    tokio::pin!(shutdown);
    let mut sources_open = true;

    // Set when a wake found the clock short of the deadline (a driven clock
    // waits for its simulator): look again shortly instead of at once.
    let mut early = false;
    loop {
        let deadline = engine.monitor.poll_timeout();
        let wake = match deadline {
            None => tokio::time::Instant::now() + IDLE,
            Some(_) if early => tokio::time::Instant::now() + RECHECK,
            Some(t) => clock.instant_of(t) + IN_FLIGHT,
        };
        tokio::select! {
            msg = rx.recv(), if sources_open => match msg {
                Some(f) => engine.source(f),
                None => sources_open = false,
            },
            Some(c) = cmd_rx.recv() => engine.command(c),
            _ = tokio::time::sleep_until(wake) => {
                // Woken for `deadline`. A clock still short of it by more
                // than a rounding error (driven by the demo's simulator,
                // which waits for the daemon to read) is waited for: the
                // monitor never runs ahead of the clock. Otherwise the
                // scans already queued first (each after the deadlines
                // before its stamp), then the deadline itself.
                early = deadline.is_some_and(|d| d.since(clock.now()) > ROUNDING_S);
                if let Some(d) = deadline.filter(|_| !early) {
                    engine.take_queued(&mut rx);
                    engine.monitor.handle_timeout(d);
                }
            }
            // A new broker session may have lost retained alarm states.
            _ = link.reconnected.notified() => engine.monitor.handle_alarm_states_request(clock.now()),
            _ = status_tick.tick() => engine.monitor.handle_status_request(clock.now()),
            _ = prune_tick.tick() => engine.prune_history(),
            _ = save_tick.tick() => {
                engine.save_energy();
                if let Some(r) = engine.recorder.as_mut() {
                    r.flush();
                }
            }
            _ = watchdog_tick.tick(), if watchdog.is_some() => notify(&[sd_notify::NotifyState::Watchdog]),
            _ = &mut shutdown => break,
        }
        engine.drain(&source_health, &link);
    }

    info!("shutting down");
    notify(&[sd_notify::NotifyState::Stopping]);
    let now = clock.now();
    engine.take_queued(&mut rx);
    engine.monitor.handle_timeout(now);
    engine.drain(&source_health, &link);
    engine.save_energy();
    let _ = engine.save_alarms(); // a failure is logged
    if let Some(r) = engine.recorder.as_mut() {
        r.flush();
    }
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

/// A message to systemd (`NOTIFY_SOCKET`); a failure is logged, once.
fn notify(state: &[sd_notify::NotifyState]) {
    static SAID: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);
    if let Err(e) = sd_notify::notify(state) {
        if !SAID.swap(true, std::sync::atomic::Ordering::Relaxed) {
            warn!(error = %e, "cannot notify systemd (NOTIFY_SOCKET)");
        }
    }
}

/// How often (real time) the history is pruned to `[store] history_days`.
const PRUNE_EVERY: Duration = Duration::from_secs(3600);

/// Opens the local database; `None` (with the reason in the log) when even
/// a new one cannot be made: events then wait in memory only.
/// `power_safe`: every commit synced to the medium (a real-time run; a
/// simulated one, many times faster, leaves that to the system).
fn open_store(settings: &Settings, power_safe: bool) -> Option<Store> {
    match Store::open_with(&settings.state_dir, settings.store.clone(), power_safe) {
        Ok((s, how)) => {
            match how {
                Opened::New => info!(
                    file = crate::store::STORE_FILE,
                    "local database created (spool and history)"
                ),
                Opened::Existing { unsent } => info!(
                    file = crate::store::STORE_FILE,
                    unsent_events = unsent,
                    "local database opened (spool and history)"
                ),
                Opened::MovedAside { to, why } => {
                    warn!(file = %to.display(), error = %why, "local database damaged: moved aside, a new one started (its unsent events and history stay in the moved file)")
                }
            }
            Some(s)
        }
        Err(e) => {
            warn!(dir = %settings.state_dir.display(), error = %e, "cannot open the local database: events wait in memory only (lost at a restart) and there is no history");
            None
        }
    }
}

/// The engine loop's state: the monitor and where its outputs go.
struct Engine {
    settings: Arc<Settings>,
    root: String,
    queue: Arc<Queue>,
    store: Option<Arc<std::sync::Mutex<Store>>>,
    /// The last write to the database failed.
    store_failing: bool,
    /// The database's failure and recovery lines: a full disk can make
    /// its writes fail and work by turns, round after round (a commit
    /// that fits in pages the file already has goes through).
    store_lines: [Fold; 2],
    observer: Option<Observer>,
    monitor: Monitor,
    recorder: Option<Recorder>,
    logger: Logger,
    /// No `energy.json` is left to compete with the database's books.
    energy_file_gone: bool,
    /// MQTT 5: the response topic and correlation data of the command
    /// being handled.
    respond_to: Option<(String, Vec<u8>)>,
    /// MQTT 5: how long the broker keeps a retained measurement, s.
    state_expiry_s: u32,
    /// Each source's Modbus unit counters (empty for a line source).
    bus_stats: Vec<Arc<modbus::BusStats>>,
    /// Which of the things kept in the state directory could not be saved
    /// the last time (each said once in the log until it saves again):
    /// `state-not-saved` is raised while any of them is.
    unsaved: [bool; Saved::COUNT],
    clock: Clock,
}

/// What the engine keeps in the state directory.
#[derive(Clone, Copy)]
enum Saved {
    /// The local database (spool and history).
    Store,
    Energy,
    Alarms,
    Baselines,
}

impl Saved {
    const COUNT: usize = 4;
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
        if let Err(why) = totals.check() {
            let moved = state::move_aside(&settings.state_dir, ENERGY_FILE);
            warn!(file = %moved.display(), error = why, "energy totals are nonsense: moved aside, starting afresh");
            totals = EnergyTotals::default();
        }
        if let Some(note) = totals.upgrade() {
            info!(file = ENERGY_FILE, "{note}");
        }
        let flags = load_entries_or_default::<AlarmFlags>(&settings, ALARMS_FILE, "alarm states");
        let mut monitor = Monitor::with_alarm_flags(settings.clone(), clock.now(), &flags);
        monitor.restore_energy(totals);
        let baselines = load_entries_or_default::<crate::monitor::lining::Baseline>(
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
        let expiry = state_expiry_s(&settings);
        Engine {
            settings,
            root,
            queue,
            store: None,
            store_failing: false,
            store_lines: Default::default(),
            observer,
            monitor,
            recorder: None,
            logger: Logger::default(),
            energy_file_gone: false,
            respond_to: None,
            state_expiry_s: expiry,
            bus_stats: Vec::new(),
            unsaved: [false; Saved::COUNT],
            clock,
        }
    }

    /// A command from the broker; its reply goes where it asks (MQTT 5),
    /// when that is a topic we may publish to.
    fn command(&mut self, c: mqtt::Incoming) {
        self.respond_to = c.respond_to.filter(|(t, _)| valid_response_topic(t));
        self.monitor.handle_command(&c.payload, self.clock.now());
    }

    /// What a source delivered, after every deadline before its stamp (as
    /// `analyze` replays it).
    fn source(&mut self, f: FromSource) {
        self.monitor.handle_timeout_before(f.time);
        match f.delivery {
            Delivery::Scan(scan) => {
                if let Some(r) = self.recorder.as_mut() {
                    r.scan(&self.settings, f.source, &scan, f.time);
                }
                self.monitor.handle_scan(f.source, &scan, f.time)
            }
            Delivery::DecodeError => self.monitor.handle_decode_error(f.source, f.time),
        }
    }

    /// Handles what the sources delivered before this instant and still
    /// waits in the channel, so that a timeout never judges a source silent
    /// while its scans are queued (the demo's clock runs fast), and at
    /// shutdown none is lost.
    fn take_queued(&mut self, rx: &mut mpsc::Receiver<FromSource>) {
        for _ in 0..rx.len() {
            match rx.try_recv() {
                Ok(f) => self.source(f),
                Err(_) => break,
            }
        }
    }

    /// Routes every output of the monitor to the log, the MQTT queue and
    /// the observer; saves the alarm flags and baselines a change touched.
    fn drain(&mut self, sources: &[Arc<SourceHealth>], link: &LinkHealth) {
        let events_topic = format!("{}/events", self.root);
        let now = self.clock.now();
        let mut round = Round::default();
        let mut alarms_changed = false;
        let mut energy_booked = false;
        while let Some(mut out) = self.monitor.poll_output() {
            self.logger.output(&self.settings, &out);
            match &mut out {
                Output::ZoneState(z) => {
                    if let Some(obs) = self.observer.as_mut() {
                        obs(&z.report);
                    }
                }
                Output::AlarmEvent(_) => alarms_changed = true,
                Output::KilnState(_) => energy_booked = true,
                Output::CommandReply(r) if r.result.is_ok() => {
                    // `ok` only once the change is on disk: a shelve or a
                    // commissioning step must survive a power cut.
                    let baseline = r.command.as_ref().is_some_and(|c| c.action.is_baseline());
                    let saved = if baseline {
                        self.save_baselines()
                    } else {
                        self.save_alarms()
                    };
                    if let Err(e) = saved {
                        r.result = Err(CommandError::NotPersisted(e.to_string()));
                    }
                }
                Output::Status(s) => self.edge_status(s, sources, link),
                _ => {}
            }
            let history = self.history_of(&out);
            let is_reply = matches!(out, Output::CommandReply(_));
            for (i, m) in route::messages(&self.root, &out).enumerate() {
                match m {
                    Ok(mut m) => {
                        if is_reply && i == 0 {
                            // MQTT 5: to where the command asked, with its
                            // correlation data.
                            if let Some((topic, correlation)) = self.respond_to.take() {
                                m.topic = topic;
                                m.props.correlation = Some(correlation);
                            }
                        } else if m.retain() && matches!(m.kind, Kind::ZoneState | Kind::Channel) {
                            m.props.expiry_s = Some(self.state_expiry_s);
                        }
                        let is_event = m.topic == events_topic;
                        if let Some((kind, zone, time)) = &history {
                            if *kind != HistoryKind::Event || is_event {
                                round
                                    .history
                                    .push((*kind, zone.clone(), *time, m.payload.clone()));
                            }
                        }
                        if m.kind == Kind::Event {
                            round
                                .events
                                .push((history.as_ref().map_or(now, |h| h.2), m));
                        } else {
                            round.states.push((round.events.len(), m));
                        }
                    }
                    Err(e) => {
                        warn!(kind = out.kind().name(), error = %e, "message could not be encoded")
                    }
                }
            }
        }
        if energy_booked && self.store.is_some() {
            // Every round of zone cycles, with the round: a kill loses at
            // most one interval.
            round.energy = serde_json::to_vec(self.monitor.energy_totals()).ok();
        }
        if !round.is_empty() {
            self.write_round(round, !link.connected.load(Ordering::Relaxed));
        }
        if energy_booked {
            if self.store.is_none() {
                self.save_energy_totals();
            }
            // A save that failed is tried again as often, so that
            // state-not-saved clears only once all is on disk.
            if self.unsaved[Saved::Baselines as usize] {
                let _ = self.save_baselines(); // a failure is logged
            }
        }
        let dirty = alarms_changed && self.monitor.alarms_mut().take_dirty();
        if dirty || (energy_booked && self.unsaved[Saved::Alarms as usize]) {
            let _ = self.save_alarms(); // a failure is logged
        }
    }

    /// Where `out` goes in the history, if it does: its kind, zone and time.
    fn history_of(&self, out: &Output) -> Option<(HistoryKind, Option<String>, Timestamp)> {
        let zone_of_alarm = |name: &str| {
            let id = self.settings.alarm_named(name)?;
            match self.settings.alarms[id].target {
                crate::config::AlarmTarget::Zone { zone, .. } => {
                    Some(self.settings.zones[zone].name.to_string())
                }
                _ => None,
            }
        };
        Some(match out {
            Output::ZoneState(z) => (
                HistoryKind::Zone,
                Some(z.report.zone.to_string()),
                z.report.time,
            ),
            Output::KilnState(k) => (HistoryKind::Kiln, None, k.time),
            Output::AlarmEvent(e) => (HistoryKind::Event, zone_of_alarm(&e.alarm), e.time),
            Output::TrendAlert(t) => (HistoryKind::Event, zone_of_alarm(&t.alarm), t.time),
            Output::CommandReply(r) => (
                HistoryKind::Event,
                r.command.as_ref().and_then(|c| zone_of_alarm(&c.alarm)),
                r.time,
            ),
            _ => return None,
        })
    }

    /// Writes one round's events to the spool and its states and events to
    /// the history, in one transaction (one fsync), then wakes the link.
    /// When the database cannot take them, the events go to the memory
    /// queue instead (nothing is lost while the daemon runs) and the
    /// state-not-saved alarm says so.
    fn write_round(&mut self, mut round: Round, offline: bool) {
        // Each state names the last event the monitor gave before it, so
        // the link keeps their order (a command's reply before the alarm
        // state it changed; an alarm's state before its event).
        let mut states = std::mem::take(&mut round.states);
        let Some(store) = self.store.clone() else {
            self.queue_in_order(round.events, states);
            return;
        };
        let written = {
            let mut s = store.lock().unwrap_or_else(|e| e.into_inner());
            let mut write = || -> rusqlite::Result<()> {
                let mut seqs = Vec::with_capacity(round.events.len());
                for (t, m) in &round.events {
                    seqs.push(s.spool_with(
                        *t,
                        &m.topic,
                        &m.payload,
                        offline,
                        m.props.correlation.as_deref(),
                    )?);
                }
                for (i, m) in states.iter_mut() {
                    m.after = if *i == 0 { 0 } else { seqs[*i - 1] };
                }
                for (kind, zone, t, payload) in &round.history {
                    s.record(*kind, zone.as_deref(), *t, payload)?;
                }
                if let Some(e) = &round.energy {
                    s.put_state(ENERGY_STATE, self.clock.now(), e)?;
                }
                if let Some(d) = s.enforce_bounds(self.clock.now())? {
                    warn!(dropped = d.count, bytes = d.bytes, first = %d.first.rfc3339(), last = %d.last.rfc3339(), bound = d.bound,
                        "spool full: the oldest unsent events dropped (they stay in the history; `wallflux export --kind event` recovers them)");
                }
                // Announced once the broker is back: one notice for all the
                // drops of an outage (it goes after the events kept).
                if !offline {
                    if let Some(d) = s.take_dropped()? {
                        let now = self.clock.now();
                        let notice = spool_notice(&d, now);
                        s.spool(now, &format!("{}/events", self.root), &notice, false)?;
                        s.record(HistoryKind::Event, None, now, &notice)?;
                    }
                }
                s.commit()
            };
            let r = write();
            if r.is_err() {
                s.rollback();
            } else {
                // Into the queue before the lock goes: the link reads the
                // spool under it, so it cannot find this round's events
                // committed while the states the monitor gave before them
                // are not yet queued (an alarm's event before its state).
                for (_, m) in states.drain(..) {
                    self.queue.push(m);
                }
            }
            r
        };
        match written {
            Ok(()) => {
                if self.store_failing {
                    self.store_failing = false;
                    if let Some(folded) = self.store_lines[1].admit(std::time::Instant::now()) {
                        info!(
                            file = crate::store::STORE_FILE,
                            folded, "the local database takes writes again"
                        );
                    }
                }
                self.persisted(Saved::Store, true);
                if round.energy.is_some() {
                    self.energy_saved_in_store();
                }
                self.queue.wake();
            }
            Err(e) => {
                if !self.store_failing {
                    self.store_failing = true;
                    if let Some(folded) = self.store_lines[0].admit(std::time::Instant::now()) {
                        warn!(file = crate::store::STORE_FILE, error = %e, folded, "cannot write to the local database: events wait in memory until it works again (lost at a restart); said at most once a minute");
                    }
                }
                self.persisted(Saved::Store, false);
                if round.energy.is_some() {
                    // The file, then, if it can be written.
                    self.save_energy_file();
                }
                for (_, m) in states.iter_mut() {
                    m.after = 0;
                }
                self.queue_in_order(round.events, states);
            }
        }
    }

    /// Events and states into the memory queue in the monitor's order
    /// (the database cannot take the events).
    fn queue_in_order(&self, events: Vec<(Timestamp, Message)>, states: Vec<(usize, Message)>) {
        let mut states = states.into_iter().peekable();
        for (i, (_, e)) in events.into_iter().enumerate() {
            while let Some((_, m)) = states.next_if(|(j, _)| *j <= i) {
                self.queue.push(m);
            }
            self.queue.push(e);
        }
        for (_, m) in states {
            self.queue.push(m);
        }
    }

    /// Prunes the history to `[store] history_days`.
    fn prune_history(&mut self) {
        let Some(store) = &self.store else { return };
        let r = store
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .prune_history(self.clock.now());
        match r {
            Ok(0) => {}
            Ok(n) => info!(
                rows = n,
                days = self.settings.store.history_days,
                "history pruned"
            ),
            Err(e) => warn!(error = %e, "cannot prune the history"),
        }
    }

    /// The edge's part of the status: each port's state, the MQTT link's
    /// and the queue's counters, the program's version.
    fn edge_status(&self, s: &mut StatusReport, sources: &[Arc<SourceHealth>], link: &LinkHealth) {
        let r = Ordering::Relaxed;
        for (i, (st, h)) in s.sources.iter_mut().zip(sources).enumerate() {
            st.open = Some(h.open.load(r));
            st.reopens = Some(h.opens.load(r).saturating_sub(1));
            let Some(bus) = self.bus_stats.get(i) else {
                continue;
            };
            let units = bus.units.lock().unwrap_or_else(|e| e.into_inner());
            if units.is_empty() {
                continue;
            }
            st.units = Some(
                units
                    .iter()
                    .map(|(&unit, u)| crate::monitor::output::UnitStatus {
                        answers: u.answers,
                        bad_frames: u.bad_frames,
                        crc_errors: u.crc_errors,
                        exceptions: u
                            .exceptions
                            .iter()
                            .map(|(&code, &count)| crate::monitor::output::ExceptionCount {
                                code,
                                count,
                            })
                            .collect(),
                        last_answer: u.last_answer,
                        requests: u.requests,
                        silent: u.silent,
                        timeouts: u.timeouts,
                        unit,
                    })
                    .collect(),
            );
        }
        let q = &self.queue;
        let spool = self
            .store
            .as_ref()
            .map(|st| st.lock().unwrap_or_else(|e| e.into_inner()).stats())
            .unwrap_or_default();
        s.mqtt = Some(LinkStatus {
            backfilled: link.backfilled.load(r),
            spool_bytes: spool.bytes,
            spool_dropped: spool.dropped,
            spool_events: spool.events,
            spool_oldest: spool.oldest,
            store_ok: self.store.is_some() && !self.store_failing,
            coalesced: q.counters.coalesced.load(r),
            commands_dropped: link.commands_dropped.load(r),
            commands_retained: link.commands_retained.load(r),
            connections: link.connections.load(r),
            dropped_channels: q.counters.dropped_channels.load(r),
            dropped_zone_states: q.counters.dropped_zone_states.load(r),
            failed_attempts: link.failed_attempts.load(r),
            lost_events: q.counters.lost_events.load(r),
            oversize_packets: link.oversize_packets.load(r),
            published: link.published.load(r),
            refused_by_broker: link.refused_by_broker.load(r),
            queued: q.len() as u64,
        });
        s.version = env!("CARGO_PKG_VERSION");
    }

    /// Energy totals and lining baselines (slow-moving state), every few
    /// minutes and at shutdown.
    fn save_energy(&mut self) {
        self.save_energy_totals();
        let _ = self.save_baselines(); // a failure is logged
    }

    /// Whether a save of `what` worked. The monitor's `state-not-saved`
    /// alarm is raised while any of them fails, and cleared only once all
    /// of them save again (one that works must not clear it while another
    /// still fails); its outputs go with the next drain. Returns whether
    /// this is a new failure of `what`, to be said in the log.
    fn persisted(&mut self, what: Saved, saved: bool) -> bool {
        let was = std::mem::replace(&mut self.unsaved[what as usize], !saved);
        let now = self.clock.now();
        let all = !self.unsaved.iter().any(|u| *u);
        self.monitor.handle_persistence(all, now);
        !saved && !was
    }

    /// The energy totals: in the database, else in `energy.json`.
    fn save_energy_totals(&mut self) {
        if self.store.is_some() {
            let round = Round {
                energy: serde_json::to_vec(self.monitor.energy_totals()).ok(),
                ..Round::default()
            };
            self.write_round(round, false);
        } else {
            self.save_energy_file();
        }
    }

    /// The energy books are in the database: an `energy.json` left from a
    /// run without it (or an older version) would only compete at the next
    /// start, so it goes.
    fn energy_saved_in_store(&mut self) {
        self.persisted(Saved::Energy, true);
        if !self.energy_file_gone {
            let path = self.settings.state_dir.join(ENERGY_FILE);
            match std::fs::remove_file(&path) {
                Ok(()) => {
                    info!(file = %path.display(), "energy totals now kept in the local database; the file is removed")
                }
                Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
                Err(e) => {
                    warn!(file = %path.display(), error = %e, "cannot remove the old energy file")
                }
            }
            self.energy_file_gone = true;
        }
    }

    /// Restores the energy books from the database, unless `energy.json`
    /// exists (written when the database could not take them, so newer).
    fn restore_energy_from_store(&mut self) {
        let Some(store) = self.store.clone() else {
            return;
        };
        if self.settings.state_dir.join(ENERGY_FILE).exists() {
            return;
        }
        let json = store
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .get_state(ENERGY_STATE);
        let json = match json {
            Ok(Some(j)) => j,
            Ok(None) => return,
            Err(e) => {
                warn!(error = %e, "cannot read the energy totals from the local database: starting afresh");
                return;
            }
        };
        let mut totals = match serde_json::from_slice::<EnergyTotals>(&json) {
            Ok(t) => t,
            Err(e) => {
                warn!(error = %e, "energy totals in the local database unreadable: starting afresh");
                return;
            }
        };
        if let Err(why) = totals.check() {
            warn!(
                error = why,
                "energy totals in the local database are nonsense: starting afresh"
            );
            return;
        }
        if let Some(note) = totals.upgrade() {
            info!(file = crate::store::STORE_FILE, "{note}");
        }
        info!(file = crate::store::STORE_FILE, "energy totals restored");
        self.monitor.restore_energy(totals);
        self.energy_file_gone = true;
    }

    /// The energy totals to `energy.json`; a failure is logged once until
    /// a save succeeds again (it is tried every interval).
    fn save_energy_file(&mut self) {
        let saved = state::save(
            &self.settings.state_dir,
            ENERGY_FILE,
            self.monitor.energy_totals(),
        );
        if self.persisted(Saved::Energy, saved.is_ok()) {
            if let Err(e) = saved {
                warn!(dir = %self.settings.state_dir.display(), error = %e, "cannot save the energy totals (retried every interval; this is said once)");
            }
        }
    }

    /// The lining baselines; a failure is logged once until a save
    /// succeeds again (it is retried every interval).
    fn save_baselines(&mut self) -> std::io::Result<()> {
        let saved = state::save(
            &self.settings.state_dir,
            BASELINES_FILE,
            &self.monitor.baselines(),
        );
        if self.persisted(Saved::Baselines, saved.is_ok()) {
            if let Err(e) = &saved {
                warn!(dir = %self.settings.state_dir.display(), error = %e, "cannot save the lining baselines (retried every interval; this is said once)");
            }
        }
        saved
    }

    /// The alarm flags; a failure is logged once until a save succeeds
    /// again (it is retried every interval).
    fn save_alarms(&mut self) -> std::io::Result<()> {
        let saved = state::save(
            &self.settings.state_dir,
            ALARMS_FILE,
            &self.monitor.alarms().flags(),
        );
        if self.persisted(Saved::Alarms, saved.is_ok()) {
            if let Err(e) = &saved {
                warn!(dir = %self.settings.state_dir.display(), error = %e, "cannot save the alarm states: they will not survive a restart (retried every interval; this is said once)");
            }
        }
        saved
    }
}

/// MQTT 5: a retained zone, kiln or channel state expires at the broker
/// after three of the longest zone interval (at least 3 minutes): a screen
/// then shows no number rather than one from a daemon long gone.
fn state_expiry_s(settings: &Settings) -> u32 {
    let longest = settings
        .zones
        .iter()
        .map(|z| z.interval_s)
        .fold(60.0, f64::max);
    (3.0 * longest).clamp(180.0, u32::MAX as f64) as u32
}

/// A response topic a command may name: a topic, not a filter, and not a
/// broker's own (`$…`).
fn valid_response_topic(t: &str) -> bool {
    !t.is_empty() && t.len() <= 1024 && !t.starts_with('$') && !t.contains(['+', '#', '\0'])
}

/// What one round of the engine writes to the database.
#[derive(Default)]
struct Round {
    /// Events for the spool, with their time.
    events: Vec<(Timestamp, Message)>,
    /// States for the queue, each with the number of the round's events
    /// the monitor gave before it.
    states: Vec<(usize, Message)>,
    /// Zone states, kiln states and events for the history.
    history: Vec<(HistoryKind, Option<String>, Timestamp, Vec<u8>)>,
    /// The energy books, when the round booked energy.
    energy: Option<Vec<u8>>,
}

impl Round {
    fn is_empty(&self) -> bool {
        self.events.is_empty()
            && self.history.is_empty()
            && self.states.is_empty()
            && self.energy.is_none()
    }
}

/// The event that announces events dropped from the spool
/// (`wallflux.spool/1`, type `events_dropped`).
fn spool_notice(d: &crate::store::Dropped, now: Timestamp) -> Vec<u8> {
    serde_json::to_vec(&serde_json::json!({
        "schema": "wallflux.spool/1",
        "type": "events_dropped",
        "time": now,
        "count": d.count,
        "bytes": d.bytes,
        "first": d.first,
        "last": d.last,
        "bound": d.bound,
        "in_history": true,
    }))
    .unwrap_or_default()
}

/// A file of entries by name, entry by entry: a bad entry is left out with
/// one log line (naming at most the first few), the others are restored.
fn load_entries_or_default<T: serde::de::DeserializeOwned>(
    settings: &Settings,
    file: &str,
    what: &str,
) -> BTreeMap<String, T> {
    const NAMED: usize = 8;
    match state::load_entries::<T>(&settings.state_dir, file) {
        state::Loaded::Value((good, bad)) => {
            if !bad.is_empty() {
                let names: Vec<&str> = bad.iter().take(NAMED).map(|(k, _)| k.as_str()).collect();
                warn!(file, bad = bad.len(), entries = %names.join(","), first_error = %bad[0].1,
                    "{what}: unreadable entries left out, the others restored");
            }
            info!(file, entries = good.len(), "{what} restored");
            good
        }
        state::Loaded::Missing => BTreeMap::new(),
        state::Loaded::Corrupt(moved, e) => {
            warn!(file = %moved.display(), error = %e, "{what} unreadable: moved aside, starting afresh");
            BTreeMap::new()
        }
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
