//! The monitor: per-channel and per-zone state, driven by readings and time.
//!
//! Sans-IO like the physics: readings go in through `handle_*`, results
//! come out of `poll_*`, and every call takes `now`. The live daemon and
//! `analyze` drive the same engine, so a replay reproduces the live numbers.

pub mod alarm;
pub mod alarm_engine;
pub mod channel;
pub mod command;
pub mod energy;
pub mod lining;
pub mod source;
pub mod trend;
pub mod wall;
pub mod zone;

use std::sync::Arc;

use heapless::Deque;

use crate::config::{BaselineStart, Model, Settings, Zone};
use crate::protocol::scan::{self, InputAddress, Scan};
use crate::time::Timestamp;
use alarm::AlarmFlags;
use alarm_engine::{AlarmEngine, AlarmOutput, AlarmReport};
use channel::{ChannelReport, ChannelState, Health};
use command::{Command, CommandError};
use source::{SourceCounters, SourceState};
use zone::{ZoneEngine, ZoneReport, STALE_INTERVALS};

/// Something notable that the edges log and publish.
#[derive(Debug, Clone, PartialEq)]
pub enum Event {
    /// A channel's health changed (logged once per change).
    ChannelHealth {
        channel: usize,
        time: Timestamp,
        from: Health,
        to: Health,
        reason: &'static str,
    },
    /// A frame's input has no configured channel (counted; logged once).
    UnknownInput { source: usize, input: InputAddress },
}

/// Most events queued between two polls; beyond it the oldest are dropped
/// and counted (they are log lines; channel state is still published).
const EVENT_QUEUE: usize = 64;

pub struct Monitor {
    settings: Arc<Settings>,
    channels: Vec<ChannelState>,
    /// Staleness limit per channel: three intervals of the fastest zone
    /// using it, else the source's silence limit.
    stale_after_s: Vec<f64>,
    /// Next time each channel's state is due for publication.
    channel_due: Vec<Timestamp>,
    channel_period_s: f64,
    zones: Vec<ZoneEngine>,
    events: Deque<Event, EVENT_QUEUE>,
    unknown_inputs_seen: Vec<[bool; 65]>,
    /// Each source's health: last reading, silence, counters.
    sources: Vec<SourceState>,
    start: Timestamp,
    alarms: AlarmEngine,
    pub events_dropped: u64,
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
        let n = settings.channels.len();
        let mut stale_after_s: Vec<f64> = settings
            .channels
            .iter()
            .map(|c| settings.sources[c.source].silence_s)
            .collect();
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
            .iter()
            .enumerate()
            .map(|(i, z)| {
                let mut e = ZoneEngine::new(i, z, &settings.materials, start);
                if has_baseline(z) && z.baseline_start == BaselineStart::FirstRun {
                    e.baseline = lining::Baseline::learning_from_first_state();
                }
                e
            })
            .collect();
        Monitor {
            channels: vec![ChannelState::default(); n],
            stale_after_s,
            channel_due: vec![start; n],
            channel_period_s,
            zones,
            events: Deque::new(),
            unknown_inputs_seen: vec![[false; 65]; settings.sources.len()],
            sources: vec![SourceState::default(); settings.sources.len()],
            start,
            alarms: AlarmEngine::new(&settings, saved, start),
            events_dropped: 0,
            unknown_inputs: 0,
            settings,
        }
    }

    pub fn settings(&self) -> &Settings {
        &self.settings
    }

    fn push_event(&mut self, e: Event) {
        if let Err(e) = self.events.push_back(e) {
            self.events.pop_front();
            self.events_dropped += 1;
            let _ = self.events.push_back(e);
        }
    }

    /// A scan from source `source`, received at `now` (a source index the
    /// configuration does not have is ignored). The cold junction: the
    /// scan's own, else the source's cold-junction (terminal) sensor (its
    /// reading in this scan, or its latest reading while it is `ok`), else
    /// the source's fixed `cj_c`. A terminal sensor that is not `ok` makes
    /// the scan's millivolt readings invalid, with the sensor's fault as
    /// their reason.
    pub fn handle_scan(&mut self, source: usize, scan: &Scan, now: Timestamp) {
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
                Some(ch) => self.apply_value(ch, value, cj, now),
                None => {
                    self.unknown_inputs += 1;
                    let seen = &mut self.unknown_inputs_seen[source][usize::from(input.min(64))];
                    if !*seen {
                        *seen = true;
                        self.push_event(Event::UnknownInput { source, input });
                    }
                }
            }
        }
    }

    /// A frame from source `source` that its decoder rejected, at `now`
    /// (counted in the source's health; it is no reading, so it does not
    /// end a silence).
    pub fn handle_decode_error(&mut self, source: usize, _now: Timestamp) {
        if let Some(s) = self.sources.get_mut(source) {
            s.counters.decode_errors += 1;
        }
    }

    /// Source `s`'s counters (zero for an unknown index).
    pub fn source_counters(&self, s: usize) -> SourceCounters {
        self.sources
            .get(s)
            .map_or_else(SourceCounters::default, |s| s.counters)
    }

    /// The temperature of cold-junction (terminal) sensor `cc` at `now`,
    /// or, when it is not `ok`, why not (in words, for the millivolt
    /// channels it compensates).
    fn cold_junction_c(&self, cc: usize, now: Timestamp) -> Result<f64, &'static str> {
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
        ch: usize,
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
        ch: usize,
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
        if let Some(s) = self.sources.get_mut(cfg.source) {
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
    }

    fn check_health(&mut self, ch: usize, now: Timestamp) {
        let (health, reason) = self.channels[ch].health_at(now, self.stale_after_s[ch]);
        let from = self.channels[ch].announced;
        if health != from {
            self.channels[ch].announced = health;
            // A change is published at once, not at the next period.
            self.channel_due[ch] = now;
            self.push_event(Event::ChannelHealth {
                channel: ch,
                time: now,
                from,
                to: health,
                reason,
            });
        }
    }

    /// The next due zone cycle at `now`, if any (call until `None`). The
    /// report is stamped with its due time, so a replay and the live run
    /// give the same times.
    pub fn poll_zone(&mut self, now: Timestamp) -> Option<ZoneReport> {
        self.poll_due(now, false)
    }

    /// As [`Self::poll_zone`], but only cycles due strictly before `now`: a
    /// replay calls it before handling a row stamped `now`, so that a cycle
    /// due at `now` still sees that row's readings (its estimate holds for
    /// the time it is stamped with).
    pub fn poll_zone_before(&mut self, now: Timestamp) -> Option<ZoneReport> {
        self.poll_due(now, true)
    }

    /// At the end of a replay: every zone that has had readings since its
    /// last cycle gets a last cycle at `now` (a partial interval), so the
    /// readings after the last interval boundary are published too. Then
    /// call [`Self::poll_zone`] until `None`.
    pub fn close_partial_intervals(&mut self, now: Timestamp) {
        for (i, z) in self.zones.iter_mut().enumerate() {
            let interval = self.settings.zones[i].interval_s;
            let last_cycle = z.next_due.plus_s(-interval);
            if z.next_due > now && now > last_cycle {
                z.next_due = now;
            }
        }
    }

    fn poll_due(&mut self, now: Timestamp, strict: bool) -> Option<ZoneReport> {
        let (i, due) = self
            .zones
            .iter()
            .enumerate()
            .filter(|(_, z)| z.next_due < now || (!strict && z.next_due == now))
            .map(|(i, z)| (i, z.next_due))
            .min_by(|a, b| a.1.epoch_s().total_cmp(&b.1.epoch_s()))?;
        for ch in 0..self.channels.len() {
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
        Some(report)
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
        let i = self
            .settings
            .zones
            .iter()
            .position(|z| z.name.as_str() == zone)?;
        has_baseline(&self.settings.zones[i]).then(|| &self.zones[i].baseline)
    }

    /// A baseline command (`baseline_start`, `baseline_stop`,
    /// `baseline_reset`) for the zone named in `cmd.alarm`; `Ok(zone index)`.
    fn baseline_command(&mut self, cmd: &Command, now: Timestamp) -> Result<usize, CommandError> {
        let i = self
            .settings
            .zones
            .iter()
            .position(|z| z.name.as_str() == cmd.alarm)
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

    /// Number of cycles zone `i` has run.
    pub fn zone_cycles(&self, i: usize) -> u64 {
        self.zones.get(i).map_or(0, |z| z.cycles)
    }

    /// The next channel state due for publication at `now` (its period, or
    /// at once after a health change).
    pub fn poll_channel(&mut self, now: Timestamp) -> Option<ChannelReport> {
        let ch = (0..self.channels.len()).find(|&c| self.channel_due[c] <= now)?;
        self.check_health(ch, now);
        self.channel_due[ch] = now.plus_s(self.channel_period_s);
        let cfg = &self.settings.channels[ch];
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
    pub fn tick(&mut self, now: Timestamp) {
        for s in 0..self.sources.len() {
            let limit = self.settings.sources[s].silence_s;
            let silent = self.sources[s].silent_at(now, self.start, limit);
            if silent != self.sources[s].silent {
                self.sources[s].silent = silent;
                self.update_suppression(now);
            }
            self.alarms.on_source(s, silent, now);
        }
        self.alarms.tick(now);
    }

    /// For a channel-fault alarm (`{channel}-fault`) whose channel is not
    /// `ok` at `now`: the channel's reason, in words (e.g. its cold
    /// junction's failure).
    pub fn alarm_reason(&self, alarm: usize, now: Timestamp) -> Option<&'static str> {
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
    pub fn source_silent(&self, s: usize) -> bool {
        self.sources.get(s).is_some_and(|s| s.silent)
    }

    /// The next alarm transition or trend alert.
    pub fn poll_alarm(&mut self) -> Option<AlarmOutput> {
        self.alarms.poll()
    }

    /// An operator command; `Ok(alarm index)` when accepted (for the
    /// baseline actions, `Ok(zone index)`).
    pub fn command(&mut self, cmd: &Command, now: Timestamp) -> Result<usize, CommandError> {
        if cmd.action.is_baseline() {
            return self.baseline_command(cmd, now);
        }
        self.alarms.command(cmd, now)
    }

    pub fn alarms(&self) -> &AlarmEngine {
        &self.alarms
    }

    pub fn alarms_mut(&mut self) -> &mut AlarmEngine {
        &mut self.alarms
    }

    /// The `{root}/alarm/{name}` payload of alarm `i` at `now`.
    pub fn alarm_report(&self, i: usize, now: Timestamp) -> AlarmReport<'_> {
        self.alarms.report(&self.settings, i, now)
    }

    /// The next queued event.
    pub fn poll_event(&mut self) -> Option<Event> {
        self.events.pop_front()
    }

    /// The earliest time a zone cycle is due (for the driver's timer).
    pub fn next_zone_due(&self) -> Option<Timestamp> {
        self.zones
            .iter()
            .map(|z| z.next_due)
            .min_by(|a, b| a.epoch_s().total_cmp(&b.epoch_s()))
    }
}

/// Whether a zone keeps a lining baseline: the layered model with a
/// reading at the hot face (`hot_face_channel`).
pub fn has_baseline(zone: &Zone) -> bool {
    zone.model == Model::Layered && zone.hot_face_channel.is_some()
}
