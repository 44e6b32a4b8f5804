//! The monitor: per-channel and per-zone state, driven by readings and time.
//!
//! Sans-IO like the physics: inputs go in through `handle_*`, results come
//! out of `poll_*`, and every call takes `now`. The live daemon and
//! `analyze` drive the same monitor, so a replay reproduces the live
//! outputs.
//!
//! # Driving it
//!
//! 1. Feed what arrives, in time order: [`Monitor::handle_scan`] (a
//!    decoder's scan), [`Monitor::handle_decode_error`] (a frame the
//!    decoder rejected), [`Monitor::handle_value`] (one reading, from a
//!    samples file), [`Monitor::handle_command`] (an operator command),
//!    and the requests of the sinks ([`Monitor::handle_status_request`],
//!    [`Monitor::handle_alarm_states_request`]).
//! 2. Ask [`Monitor::poll_timeout`] when the monitor next needs the time
//!    (a zone's interval, a channel's period, an alarm's delay or shelve,
//!    a source falling silent, the next flood summary) and call
//!    [`Monitor::handle_timeout`] with the time then (or later). A replay
//!    calls [`Monitor::handle_timeout_before`] with each row's time.
//! 3. After every `handle_*` call, drain [`Monitor::poll_output`] until it
//!    returns `None`, and route each [`output::Output`] to its sinks. Every
//!    output is queued in the order it happened; none is built by the
//!    driver.

pub mod alarm;
pub mod alarm_engine;
pub mod channel;
pub mod command;
mod emit;
pub mod energy;
pub mod lining;
pub mod model;
pub mod output;
pub mod source;
pub mod trend;
pub mod wall;
pub mod zone;

use std::collections::VecDeque;
use std::sync::Arc;

use crate::config::{BaselineStart, Model, Settings, Zone};
use crate::ids::{AlarmId, ChannelId, IdVec, SourceId, ZoneId};
use crate::protocol::scan::{self, Scan};
use crate::time::Timestamp;
use alarm::AlarmFlags;
use alarm_engine::{AlarmEngine, AlarmReport};
use channel::{ChannelReport, ChannelState, Health};
use command::{Command, CommandError};
use energy::{EnergyMeter, EnergyTotals};
use output::{ChannelHealthChange, Output, UnknownInput, ZoneState};
use source::{SourceCounters, SourceState};
use zone::{ZoneEngine, STALE_INTERVALS};

/// Outputs the queue holds without growing (it keeps its capacity; a
/// driver drains it after every call).
const OUTPUT_QUEUE: usize = 64;

/// While an alarm flood lasts, one grouped summary at most this often, s.
pub const FLOOD_SUMMARY_EVERY_S: f64 = 60.0;

/// One Modbus unit's health: when a channel of it last read, and whether
/// it is silent.
#[derive(Debug, Clone)]
struct UnitWatch {
    source: SourceId,
    unit: u8,
    state: SourceState,
}

pub struct Monitor {
    settings: Arc<Settings>,
    channels: IdVec<ChannelId, ChannelState>,
    /// Staleness limit per channel: three intervals of the fastest zone
    /// using it, else the source's silence limit.
    stale_after_s: IdVec<ChannelId, f64>,
    /// Next time each channel's state is due for publication.
    channel_due: IdVec<ChannelId, Timestamp>,
    channel_period_s: f64,
    zones: IdVec<ZoneId, ZoneEngine>,
    outputs: VecDeque<Output>,
    unknown_inputs_seen: IdVec<SourceId, [bool; 65]>,
    /// Each source's health: last reading, silence, counters.
    sources: IdVec<SourceId, SourceState>,
    /// Each Modbus unit's last reading and silence (its own silent alarm).
    units: Vec<UnitWatch>,
    /// The unit (an index into `units`) a channel's readings come from.
    unit_of: IdVec<ChannelId, Option<usize>>,
    start: Timestamp,
    alarms: AlarmEngine,
    meter: EnergyMeter,
    /// The energy price per kWh and its currency, if configured.
    price: Option<(f64, Arc<str>)>,
    /// Alarm lines grouped into the flood summary since the flood began.
    flood_grouped: u64,
    last_flood_summary: Option<Timestamp>,
    pub unknown_inputs: u64,
}

impl Monitor {
    pub fn new(settings: Arc<Settings>, start: Timestamp) -> Self {
        Self::with_alarm_flags(settings, start, &std::collections::BTreeMap::new())
    }

    /// A monitor whose alarms resume from saved flags (by alarm name).
    pub fn with_alarm_flags(
        settings: Arc<Settings>,
        start: Timestamp,
        saved: &std::collections::BTreeMap<String, AlarmFlags>,
    ) -> Self {
        let mut stale_after_s = settings
            .channels
            .map(|c| settings.sources[c.source].silence_s);
        for z in &settings.zones {
            for p in &z.probes {
                let limit = STALE_INTERVALS * z.interval_s;
                if stale_after_s[p.channel] > limit {
                    stale_after_s[p.channel] = limit;
                }
            }
        }
        let channel_period_s = settings
            .zones
            .iter()
            .map(|z| z.interval_s)
            .fold(f64::INFINITY, f64::min)
            .min(60.0);
        let zones = settings
            .zones
            .iter_ids()
            .map(|(i, z)| {
                let mut e = ZoneEngine::new(i, z, &settings.materials, start);
                if has_baseline(z) && z.baseline_start == BaselineStart::FirstRun {
                    e.baseline = lining::Baseline::learning_from_first_state();
                }
                e
            })
            .collect();
        // Every Modbus unit of every bus, once; each channel to its unit.
        let mut units: Vec<UnitWatch> = Vec::new();
        let unit_of = settings.channels.map(|c| {
            let unit = c.point.as_ref()?.unit;
            Some(
                match units
                    .iter()
                    .position(|u| u.source == c.source && u.unit == unit)
                {
                    Some(i) => i,
                    None => {
                        units.push(UnitWatch {
                            source: c.source,
                            unit,
                            state: SourceState::default(),
                        });
                        units.len() - 1
                    }
                },
            )
        });
        Monitor {
            channels: settings.channels.map(|_| ChannelState::default()),
            stale_after_s,
            channel_due: settings.channels.map(|_| start),
            channel_period_s,
            zones,
            outputs: VecDeque::with_capacity(OUTPUT_QUEUE),
            unknown_inputs_seen: settings.sources.map(|_| [false; 65]),
            sources: settings.sources.map(|_| SourceState::default()),
            units,
            unit_of,
            start,
            alarms: AlarmEngine::new(&settings, saved, start),
            meter: new_meter(&settings, EnergyTotals::default()),
            price: settings
                .site
                .energy_price
                .as_ref()
                .map(|(p, c)| (*p, Arc::from(c.as_str()))),
            flood_grouped: 0,
            last_flood_summary: None,
            unknown_inputs: 0,
            settings,
        }
    }

    /// Resumes the energy accounting from saved totals.
    pub fn restore_energy(&mut self, totals: EnergyTotals) {
        self.meter = new_meter(&self.settings, totals);
    }

    /// The energy totals (to persist).
    pub fn energy_totals(&self) -> &EnergyTotals {
        &self.meter.totals
    }

    pub fn settings(&self) -> &Settings {
        &self.settings
    }

    /// When the monitor started (its zones' interval grid begins there).
    pub fn started(&self) -> Timestamp {
        self.start
    }

    fn push(&mut self, o: Output) {
        self.outputs.push_back(o);
    }

    /// The next output, oldest first (drain until `None` after every
    /// `handle_*` call).
    #[must_use]
    pub fn poll_output(&mut self) -> Option<Output> {
        self.outputs.pop_front()
    }

    /// A scan from source `source`, received at `now` (the id of a source
    /// these settings do not have is ignored). The cold junction: the
    /// scan's own, else the source's cold-junction (terminal) sensor (its
    /// reading in this scan, or its latest reading while it is `ok`), else
    /// the source's fixed `cj_c`. A terminal sensor that is not `ok` makes
    /// the scan's millivolt readings invalid, with the sensor's fault as
    /// their reason.
    pub fn handle_scan(&mut self, source: SourceId, scan: &Scan, now: Timestamp) {
        let Some(state) = self.sources.get_mut(source) else {
            return;
        };
        state.note_scan(scan.lost_before, scan.source_restarted);
        let cj_channel = self.settings.sources[source].cj_channel;
        let cj = match (scan.cj_c, cj_channel) {
            (Some(c), _) => Ok(Some(c)),
            (None, Some(cc)) => {
                if let Some(r) = scan.reading(self.settings.channels[cc].input) {
                    self.apply_value(cc, r, Ok(None), now);
                }
                self.cold_junction_c(cc, now).map(Some)
            }
            (None, None) => Ok(self.settings.sources[source].cj_c),
        };
        for &(input, value) in &scan.readings {
            let channel = self.settings.channel_for(source, input);
            if channel.is_some() && channel == cj_channel {
                continue; // handled first, above
            }
            match channel {
                Some(ch) => {
                    self.apply_value(ch, value, cj, now);
                    self.unit_heard(ch, now);
                }
                None => {
                    self.unknown_inputs += 1;
                    let seen = &mut self.unknown_inputs_seen[source][usize::from(input.min(64))];
                    if !*seen {
                        *seen = true;
                        let source = self.settings.sources[source].name.clone();
                        self.push(Output::UnknownInput(UnknownInput { source, input }));
                    }
                }
            }
        }
    }

    /// A frame from source `source` that its decoder rejected, at `now`
    /// (counted in the source's health; it is no reading, so it does not
    /// end a silence).
    pub fn handle_decode_error(&mut self, source: SourceId, _now: Timestamp) {
        if let Some(s) = self.sources.get_mut(source) {
            s.counters.decode_errors += 1;
        }
    }

    /// Source `s`'s counters (zero for a source these settings do not have).
    pub fn source_counters(&self, s: SourceId) -> SourceCounters {
        self.sources
            .get(s)
            .map_or_else(SourceCounters::default, |s| s.counters)
    }

    /// The temperature of cold-junction (terminal) sensor `cc` at `now`,
    /// or, when it is not `ok`, why not (in words, for the millivolt
    /// channels it compensates).
    fn cold_junction_c(&self, cc: ChannelId, now: Timestamp) -> Result<f64, &'static str> {
        let (health, _) = self.channels[cc].health_at(now, self.stale_after_s[cc]);
        match self.channels[cc].latest {
            Some(r) if health == Health::Ok => Ok(r.celsius),
            _ => Err(channel::cold_junction_reason(health)),
        }
    }

    /// One reading for channel `ch` (from a samples file), with the
    /// cold-junction temperature that applies to it. A millivolt channel
    /// whose source has a cold-junction sensor that is not `ok` is invalid
    /// whatever `cj_c` says.
    pub fn handle_value(
        &mut self,
        ch: ChannelId,
        value: impl Into<scan::Reading>,
        cj_c: Option<f64>,
        now: Timestamp,
    ) {
        let value = value.into();
        let Some(cfg) = self.settings.channels.get(ch) else {
            return;
        };
        let cj = match self
            .settings
            .sources
            .get(cfg.source)
            .and_then(|s| s.cj_channel)
        {
            Some(cc) if cc != ch && cfg.signal == crate::config::Signal::Millivolts => {
                self.cold_junction_c(cc, now).map(|_| cj_c)
            }
            _ => Ok(cj_c),
        };
        self.apply_value(ch, value, cj, now);
    }

    /// One value for channel `ch` with its cold junction: a temperature (or
    /// none), or the reason its cold-junction sensor gives none.
    fn apply_value(
        &mut self,
        ch: ChannelId,
        value: scan::Reading,
        cj: Result<Option<f64>, &'static str>,
        now: Timestamp,
    ) {
        let Some(cfg) = self.settings.channels.get(ch) else {
            return;
        };
        let result = match (value, cj) {
            (
                scan::Reading::Measured {
                    unit: scan::Unit::Millivolts,
                    ..
                },
                Err(reason),
            ) if cfg.signal == crate::config::Signal::Millivolts => Err((Health::Invalid, reason)),
            (_, cj) => channel::convert(cfg, value, cj.ok().flatten()),
        };
        let source = cfg.source;
        if let Some(s) = self.sources.get_mut(source) {
            s.seen = Some(now);
        }
        let state = &mut self.channels[ch];
        state.last_seen = Some(now);
        match result {
            Ok(raw) => {
                let t = cfg.calibration.apply(raw);
                state.accept(t, channel::sigma_c(cfg, t), now, cfg.spike_c_per_min);
            }
            Err((health, reason)) => {
                state.value_health = health;
                state.reason = reason;
            }
        }
        self.check_health(ch, now);
        self.end_silence(source, now);
    }

    /// A reading of channel `ch` at `now`: its Modbus unit (if it has one)
    /// answered, which ends the unit's silence at once.
    fn unit_heard(&mut self, ch: ChannelId, now: Timestamp) {
        let Some(Some(u)) = self.unit_of.get(ch).copied() else {
            return;
        };
        let w = &mut self.units[u];
        w.state.seen = Some(now);
        if w.state.silent {
            w.state.silent = false;
            let (source, unit) = (w.source, w.unit);
            self.alarms.on_unit(source, unit, false, now);
            self.collect_alarms(now);
        }
    }

    /// A reading from source `s` at `now` ends its silence at once.
    fn end_silence(&mut self, s: SourceId, now: Timestamp) {
        if !self.sources.get(s).is_some_and(|s| s.silent) {
            return;
        }
        self.sources[s].silent = false;
        self.update_suppression(now);
        self.alarms.on_source(s, false, now);
        self.collect_alarms(now);
    }

    fn check_health(&mut self, ch: ChannelId, now: Timestamp) {
        let (health, reason) = self.channels[ch].health_at(now, self.stale_after_s[ch]);
        let from = self.channels[ch].announced;
        if health != from {
            self.channels[ch].announced = health;
            // A change is published at once, not at the next period.
            self.channel_due[ch] = now;
            self.push(Output::ChannelHealth(ChannelHealthChange {
                channel: self.settings.channels[ch].name.clone(),
                time: now,
                from,
                to: health,
                reason,
            }));
        }
    }

    /// Everything due at or before `now`, each deadline in turn and at its
    /// own time (so a late call gives what calls on time would have given):
    /// sources falling silent, alarm timers, zone cycles (each state
    /// stamped with its due time, and after the cycles of one instant the
    /// kiln state), channel states, alarm outputs.
    pub fn handle_timeout(&mut self, now: Timestamp) {
        self.run_due(now, false);
    }

    /// As [`Self::handle_timeout`], but only deadlines strictly before
    /// `now`: a replay calls it before handling a row stamped `now`, so that
    /// a cycle due at `now` still sees that row's readings (its estimate
    /// holds for the time it is stamped with).
    pub fn handle_timeout_before(&mut self, now: Timestamp) {
        self.run_due(now, true);
    }

    /// When the monitor next needs [`Self::handle_timeout`]: the earliest of
    /// the zones' next cycles, the channels' next states, a source falling
    /// silent, an alarm's delay or shelve ending, the next flood summary.
    pub fn poll_timeout(&self) -> Option<Timestamp> {
        let zones = self.zones.iter().map(|z| z.next_due);
        let channels = self.channel_due.iter().copied();
        let silence = self
            .sources
            .iter()
            .zip(&self.settings.sources)
            .filter(|(s, _)| !s.silent)
            .map(|(s, c)| s.silent_from(self.start, c.silence_s));
        let units = self.units.iter().filter(|w| !w.state.silent).map(|w| {
            w.state
                .silent_from(self.start, self.settings.sources[w.source].silence_s)
        });
        let flood = self.last_flood_summary.map(|l| {
            l.plus_s(FLOOD_SUMMARY_EVERY_S)
                .first_when(|t| t.since(l) >= FLOOD_SUMMARY_EVERY_S)
        });
        zones
            .chain(channels)
            .chain(silence)
            .chain(units)
            .chain(self.alarms.next_deadline())
            .chain(flood)
            .filter(|t| t.epoch_s().is_finite())
            .min_by(|a, b| a.epoch_s().total_cmp(&b.epoch_s()))
    }

    fn run_due(&mut self, now: Timestamp, strict: bool) {
        let mut last: Option<Timestamp> = None;
        while let Some(at) = self
            .poll_timeout()
            .filter(|&at| at < now || (!strict && at == now))
        {
            if last.is_some_and(|l| at <= l) {
                break; // no progress: never loop on a deadline
            }
            last = Some(at);
            self.step(at, now);
        }
    }

    /// The work due at deadline `at`, the driver being at `now` (≥ `at`;
    /// far beyond it when a replay crosses a gap in its readings).
    fn step(&mut self, at: Timestamp, now: Timestamp) {
        self.tick(at);
        let mut cycled = false;
        for i in self.zones.ids() {
            if self.zones[i].next_due == at {
                self.cycle_zone(i, at, now);
                cycled = true;
            }
        }
        if cycled {
            let kiln = self
                .meter
                .report(at, self.price.as_ref().map(|(p, c)| (*p, c)));
            self.push(Output::KilnState(kiln));
        }
        while let Some(ch) = self.poll_channel(at, now) {
            self.push(Output::ChannelState(ch));
        }
        self.collect_alarms(at);
    }

    /// At the end of a replay: every zone that has had readings since its
    /// last cycle gets a last cycle at `now` (a partial interval), so the
    /// readings after the last interval boundary are published too. Then
    /// call [`Self::handle_timeout`] with `now`.
    pub fn close_partial_intervals(&mut self, now: Timestamp) {
        for (i, z) in self.zones.iter_ids_mut() {
            let interval = self.settings.zones[i].interval_s;
            let last_cycle = z.next_due.plus_s(-interval);
            if z.next_due > now && now > last_cycle {
                z.next_due = now;
            }
        }
    }

    /// Zone `i`'s cycle due at `due` (handled at `now`): its state, its
    /// energy, its channels' zone faults, its alarms.
    fn cycle_zone(&mut self, i: ZoneId, due: Timestamp, now: Timestamp) {
        for ch in self.channels.ids() {
            self.check_health(ch, due);
        }
        let interval = self.settings.zones[i].interval_s;
        let mut report = self.zones[i].cycle(&self.settings, &self.channels, due);
        let zone = &self.settings.zones[i];
        if has_baseline(zone) {
            report.lining_baseline = Some(self.zones[i].baseline.report(due, zone.baseline_days));
        }
        let mut next = due.plus_s(interval);
        if report.status == zone::ZoneStatus::InsufficientData && next < now {
            // A gap in the readings (a replay across days the logger was
            // stopped): this state says so, and the zone resumes at the last
            // interval boundary before `now` rather than publishing every
            // empty interval of the gap.
            let skipped = (now.since(next) / interval).floor();
            next = next.plus_s(skipped * interval);
        }
        self.zones[i].next_due = next;
        // Zone-level faults (stuck, outlier) become the channels' health.
        let settings = self.settings.clone();
        for (p, d) in settings.zones[i]
            .probes
            .iter()
            .zip(self.zones[i].diagnosis.clone())
        {
            self.channels[p.channel].zone_fault = d;
            self.check_health(p.channel, due);
        }
        // Alarms: suppression from the channels' health, then the zone's
        // process alarms and its channels' alarms.
        self.update_suppression(due);
        self.alarms.on_zone(i, &report);
        for p in &settings.zones[i].probes {
            let (h, _) = self.channels[p.channel].health_at(due, self.stale_after_s[p.channel]);
            let c = self.channels[p.channel].latest.map(|r| r.celsius);
            self.alarms.on_channel(p.channel, h, c, due);
        }
        self.meter
            .record(i, report.heat_loss_w, report.hot_face_c, interval, due);
        let cycle = self.zones[i].cycles;
        self.push(Output::ZoneState(ZoneState { report, cycle }));
    }

    /// Every zone's learned lining baseline, by zone name (to persist).
    pub fn baselines(&self) -> std::collections::BTreeMap<String, lining::Baseline> {
        self.zones
            .iter()
            .zip(&self.settings.zones)
            .map(|(e, z)| (z.name.to_string(), e.baseline.clone()))
            .collect()
    }

    /// Restores saved baselines by zone name; returns, per zone, a note
    /// for the log when a saved baseline came from an earlier version.
    pub fn restore_baselines(
        &mut self,
        saved: &std::collections::BTreeMap<String, lining::Baseline>,
    ) -> Vec<(String, &'static str)> {
        let mut notes = Vec::new();
        for (e, z) in self.zones.iter_mut().zip(&self.settings.zones) {
            if let Some(b) = saved.get(z.name.as_str()) {
                e.baseline = b.clone();
                if let Some(note) = e.baseline.upgrade() {
                    notes.push((z.name.to_string(), note));
                }
            }
        }
        notes
    }

    /// The lining baseline of zone `zone` (by name), when it has one.
    pub fn baseline(&self, zone: &str) -> Option<&lining::Baseline> {
        let i = self.settings.zone_named(zone)?;
        has_baseline(&self.settings.zones[i]).then(|| &self.zones[i].baseline)
    }

    /// A baseline command (`baseline_start`, `baseline_stop`,
    /// `baseline_reset`) for the zone named in `cmd.alarm`; `Ok(zone)`.
    fn baseline_command(&mut self, cmd: &Command, now: Timestamp) -> Result<ZoneId, CommandError> {
        let i = self
            .settings
            .zone_named(&cmd.alarm)
            .ok_or_else(|| CommandError::UnknownZone(cmd.alarm.clone()))?;
        let zone = &self.settings.zones[i];
        if !has_baseline(zone) {
            return Err(CommandError::NoBaseline(cmd.alarm.clone()));
        }
        let days = zone.baseline_days;
        let b = &mut self.zones[i].baseline;
        match cmd.action {
            command::Action::BaselineStart => b.start(&cmd.by, now, days)?,
            command::Action::BaselineStop => b.stop(&cmd.by, now, days)?,
            _ => b.reset(&cmd.by, now, days)?,
        }
        Ok(i)
    }

    /// Number of cycles zone `i` has run (0 for a zone these settings do
    /// not have).
    pub fn zone_cycles(&self, i: ZoneId) -> u64 {
        self.zones.get(i).map_or(0, |z| z.cycles)
    }

    /// The next channel state due at `at` (its period, or at once after a
    /// health change); the one after it a period later, and not before the
    /// driver's `now` (a replay crossing a gap publishes it once).
    fn poll_channel(&mut self, at: Timestamp, now: Timestamp) -> Option<ChannelReport> {
        let ch = self.channel_due.position(|&due| due <= at)?;
        self.check_health(ch, at);
        let next = at.plus_s(self.channel_period_s);
        self.channel_due[ch] = if next < now { now } else { next };
        self.channel_state(ch, at)
    }

    /// Channel `ch`'s state at `now`, as its next publication would say
    /// (`None` for a channel these settings do not have).
    pub fn channel_state(&self, ch: ChannelId, now: Timestamp) -> Option<ChannelReport> {
        let cfg = self.settings.channels.get(ch)?;
        let state = &self.channels[ch];
        let (health, reason) = state.health_at(now, self.stale_after_s[ch]);
        let valid = health == Health::Ok;
        Some(ChannelReport {
            schema: "wallflux.channel/1",
            channel: cfg.name.clone(),
            time: state.last_seen.unwrap_or(now),
            celsius: state.latest.filter(|_| valid).map(|r| r.celsius),
            sigma_c: state.latest.filter(|_| valid).map(|r| r.sigma_c),
            status: health,
            reason,
            source: self.settings.sources[cfg.source].name.clone(),
            input: cfg.input,
            tc_type: channel::type_name(cfg),
            calibration_date: cfg.calibration.date,
            calibration_overdue: cfg.calibration.overdue(now),
        })
    }

    fn update_suppression(&mut self, now: Timestamp) {
        let channels = &self.channels;
        let stale = &self.stale_after_s;
        let sources = &self.sources;
        self.alarms.update_suppression(
            &self.settings,
            |c| channels[c].health_at(now, stale[c]).0,
            |s| sources[s].silent,
            now,
        );
    }

    /// Time-driven work that no reading triggers: sources falling silent,
    /// alarm timers (shelves running out, delays completing).
    fn tick(&mut self, now: Timestamp) {
        for s in self.sources.ids() {
            let limit = self.settings.sources[s].silence_s;
            let silent = self.sources[s].silent_at(now, self.start, limit);
            if silent != self.sources[s].silent {
                self.sources[s].silent = silent;
                self.update_suppression(now);
            }
            self.alarms.on_source(s, silent, now);
        }
        for w in &mut self.units {
            let limit = self.settings.sources[w.source].silence_s;
            w.state.silent = w.state.silent_at(now, self.start, limit);
            self.alarms.on_unit(w.source, w.unit, w.state.silent, now);
        }
        self.alarms.tick(now);
    }

    /// For a channel-fault alarm (`{channel}-fault`) whose channel is not
    /// `ok` at `now`: the channel's reason, in words (e.g. its cold
    /// junction's failure).
    pub fn alarm_reason(&self, alarm: AlarmId, now: Timestamp) -> Option<&'static str> {
        let c = self.alarms.configs().get(alarm)?;
        let crate::config::AlarmTarget::Channel { channel, health } = c.target else {
            return None;
        };
        if !health && c.spec.kind != alarm::AlarmKind::Diagnostic {
            return None;
        }
        let (h, reason) = self
            .channels
            .get(channel)?
            .health_at(now, self.stale_after_s[channel]);
        (h != Health::Ok && h != Health::NoData).then_some(reason)
    }

    /// Whether source `s` is silent (no value within its silence limit).
    pub fn source_silent(&self, s: SourceId) -> bool {
        self.sources.get(s).is_some_and(|s| s.silent)
    }

    /// An operator command, already parsed: what it acted on when
    /// accepted (an alarm, or for the baseline actions a zone). Its alarm
    /// outputs come with the next `handle_*` call ([`Self::handle_command`]
    /// takes the payload, replies and collects them at once).
    pub fn command(&mut self, cmd: &Command, now: Timestamp) -> Result<Commanded, CommandError> {
        if cmd.action.is_baseline() {
            return self.baseline_command(cmd, now).map(Commanded::Zone);
        }
        self.alarms.command(cmd, now).map(Commanded::Alarm)
    }

    pub fn alarms(&self) -> &AlarmEngine {
        &self.alarms
    }

    pub fn alarms_mut(&mut self) -> &mut AlarmEngine {
        &mut self.alarms
    }

    /// The `{root}/alarm/{name}` payload of alarm `i` at `now` (None for
    /// an id of other settings).
    pub fn alarm_report(&self, i: AlarmId, now: Timestamp) -> Option<AlarmReport> {
        self.alarms.report(&self.settings, i, now)
    }
}

/// What an accepted operator command acted on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Commanded {
    /// An alarm command (ack, shelve, …).
    Alarm(AlarmId),
    /// A baseline command, for this zone.
    Zone(ZoneId),
}

/// The kiln's energy meter for `settings`, resuming from `totals`.
fn new_meter(settings: &Settings, totals: EnergyTotals) -> EnergyMeter {
    EnergyMeter::new(
        settings.zones.len(),
        settings.site.firing_start_c,
        settings.site.operation,
        totals,
    )
}

/// Whether a zone keeps a lining baseline: the layered model with a
/// reading at the hot face (`hot_face_channel`).
pub fn has_baseline(zone: &Zone) -> bool {
    zone.model == Model::Layered && zone.hot_face_channel.is_some()
}

#[cfg(test)]
mod tests {
    use super::*;

    const EXAMPLE: &str = include_str!("../../../../config/example.toml");
    const DEMO: &str = include_str!("../../../../config/demo.toml");

    fn monitor(text: &str) -> Monitor {
        let settings = crate::config::parse(text, "t.toml", None).unwrap();
        Monitor::new(Arc::new(settings), Timestamp::from_epoch_s(0.0))
    }

    /// A baseline command for a zone that does not exist is refused with
    /// the zone named, and touches no other zone.
    #[test]
    fn a_baseline_command_for_an_unknown_zone_is_refused_naming_it() {
        let mut m = monitor(EXAMPLE);
        let cmd = command::parse_command(
            br#"{"id":"b-1","action":"baseline_start","zone":"nowhere","by":"j.smith","time":"1970-01-01T00:00:01Z"}"#,
        )
        .unwrap();
        let refused = m.command(&cmd, Timestamp::from_epoch_s(1.0));
        assert_eq!(refused, Err(CommandError::UnknownZone("nowhere".into())));
        assert_eq!(refused.unwrap_err().to_string(), "unknown zone \"nowhere\"");
        assert!(m.baseline("nowhere").is_none());
        // The one zone there is exists, but has no baseline: a different refusal.
        let cmd = command::parse_command(
            br#"{"id":"b-2","action":"baseline_start","zone":"north-wall","by":"j.smith","time":"1970-01-01T00:00:01Z"}"#,
        )
        .unwrap();
        assert_eq!(
            m.command(&cmd, Timestamp::from_epoch_s(1.0)),
            Err(CommandError::NoBaseline("north-wall".into()))
        );
    }

    /// Ids of a larger configuration are refused by a monitor of a smaller
    /// one: no state, no counters, no panic.
    #[test]
    fn ids_of_other_settings_are_refused() {
        let big = monitor(DEMO);
        let mut small = monitor(EXAMPLE);
        let roof = big.settings().zone_named("roof").unwrap();
        let channel = big.settings().channels.ids().next_back().unwrap();
        let alarm = big.settings().alarms.ids().next_back().unwrap();
        let now = Timestamp::from_epoch_s(1.0);
        assert_eq!(small.zone_cycles(roof), 0);
        assert!(small.channel_state(channel, now).is_none());
        assert!(small.alarm_reason(alarm, now).is_none());
        assert!(small.alarm_report(alarm, now).is_none());
        assert!(small.alarms().state(alarm, now).is_none());
        assert!(big.alarm_report(alarm, now).is_some());
        let reading = scan::Reading::Measured {
            value: 500.0,
            unit: scan::Unit::Celsius,
        };
        small.handle_value(channel, reading, None, now);
        assert!(small.poll_output().is_none());
    }
}
