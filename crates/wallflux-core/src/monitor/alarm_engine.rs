//! The alarm engine: every configured and built-in alarm, evaluated from
//! the zone reports and channel states the monitor produces, with
//! suppression by design, operator commands, trend alerts and the flood
//! meter. Pure like the rest of the monitor: values and `now` in,
//! transitions and alerts out through `poll`.
//!
//! Suppression by design: a process alarm is suppressed while a channel it
//! depends on is faulty, so a broken thermocouple raises its own diagnostic
//! alarm instead of looking like a hot shell. A zone alarm on the shell side
//! (`shell_c`, `flux_shell_w_m2`, `heat_loss_w`, `flux_surface_w_m2`,
//! `balance_mismatch_pct`) depends on the zone's deepest probe, one on the
//! hot side (`hot_face_c`, `flux_hot_face_w_m2`) on its shallowest, any
//! other on all its probes. A channel-fault alarm is suppressed while its
//! source is silent (the source's own alarm says why). Suppressed alarms are
//! still evaluated; their transitions are reported, marked not announced.
//!
//! A zone quantity the zone withholds (null under a status such as
//! `not_steady`) or a channel without a valid value is bad quality: the
//! alarm keeps its state (an active alarm is neither cleared nor raised by
//! it, ISA-18.2's handling of a bad-quality input) and no trend is drawn.

use std::collections::{BTreeMap, VecDeque};

use heapless::{HistoryBuf, Vec as HVec};
use serde::Serialize;

use super::alarm::{Alarm, AlarmFlags, AlarmKind, AlarmState, Priority, Transition};
use super::channel::Health;
use super::command::{Action, Command, CommandError};
use super::trend::{time_to_limit_h, windowed_rate_per_h, FloodMeter, TrendWatch};
use super::zone::ZoneReport;
use crate::config::{AlarmConfig, AlarmTarget, Settings, ZoneQuantity, MAX_PROBES};
use crate::ids::{AlarmId, ChannelId, IdVec, SourceId, ZoneId};
use crate::time::Timestamp;

/// Points kept per alarm for its rate (rate alarms, trend alerts).
const RATE_POINTS: usize = 32;
/// Window of an alarm's rate when its zone gives none, s.
const DEFAULT_RATE_WINDOW_S: f64 = 600.0;
/// Outputs held between two polls; beyond, the oldest trend alerts go first
/// (transitions are counted as lost only when nothing else can go).
const MAX_PENDING: usize = 1024;

/// Something for the edges to publish and log. (A transition carries the
/// operator's name inline, without allocation; outputs are rare and queued
/// in a bounded deque, so the size difference between variants is harmless.)
#[allow(clippy::large_enum_variant)]
#[derive(Debug, Clone, PartialEq)]
pub enum AlarmOutput {
    /// An alarm changed; `announced` is false while it is shelved,
    /// suppressed or out of service.
    Transition {
        alarm: AlarmId,
        transition: Transition,
        announced: bool,
    },
    /// A watched quantity will reach its alarm limit within the horizon.
    Trend(TrendAlert),
}

#[derive(Debug, Clone, PartialEq)]
pub struct TrendAlert {
    pub alarm: AlarmId,
    pub time: Timestamp,
    pub value: f64,
    pub rate_per_h: f64,
    pub limit: f64,
    pub eta_h: f64,
}

struct Slot {
    alarm: Alarm,
    /// `(t since origin, value)` of the watched quantity, for its rate.
    history: HistoryBuf<(f64, f64), RATE_POINTS>,
    window_s: f64,
    /// Latest value the alarm was evaluated with (rate or % for those kinds).
    value: Option<f64>,
    /// Latest value of the watched quantity itself.
    raw: Option<f64>,
    rate_per_h: Option<f64>,
    /// The trend toward the limit (horizon hysteresis and repeat gate).
    watch: TrendWatch,
    /// No trend line at all: a hot-face or interface limit above the zone's
    /// `firing_setpoint_c`, which the kiln's control keeps the face below.
    no_trend: bool,
}

pub struct AlarmEngine {
    configs: IdVec<AlarmId, AlarmConfig>,
    slots: IdVec<AlarmId, Slot>,
    /// Channels each alarm depends on (for suppression).
    deps: IdVec<AlarmId, HVec<ChannelId, MAX_PROBES>>,
    origin: Timestamp,
    flood: FloodMeter,
    pending: VecDeque<AlarmOutput>,
    pub lost_outputs: u64,
    /// Flags changed since the last `take_dirty` (for persistence).
    dirty: bool,
}

impl AlarmEngine {
    /// Builds the alarms of `settings`, restoring saved flags by name.
    pub fn new(
        settings: &Settings,
        saved: &BTreeMap<String, AlarmFlags>,
        start: Timestamp,
    ) -> Self {
        let configs = settings.alarms.clone();
        let slots = configs.map(|c| {
            let alarm = match saved.get(&c.name) {
                Some(f) => Alarm::with_flags(c.spec, f.clone()),
                None => Alarm::new(c.spec),
            };
            let window_s = match c.target {
                AlarmTarget::Zone { zone, .. } => settings.zones[zone].rate_window_s,
                _ => DEFAULT_RATE_WINDOW_S,
            };
            Slot {
                alarm,
                history: HistoryBuf::new(),
                window_s,
                value: None,
                raw: None,
                rate_per_h: None,
                watch: TrendWatch::new(settings.trend.horizon_h, settings.trend.repeat_min * 60.0),
                no_trend: beyond_setpoint(settings, c),
            }
        });
        let deps = configs.map(|c| dependencies(settings, c));
        AlarmEngine {
            configs,
            slots,
            deps,
            origin: start,
            flood: FloodMeter::new(),
            pending: VecDeque::new(),
            lost_outputs: 0,
            dirty: false,
        }
    }

    /// Every alarm's configuration, by id.
    pub fn configs(&self) -> &IdVec<AlarmId, AlarmConfig> {
        &self.configs
    }

    pub fn len(&self) -> usize {
        self.slots.len()
    }

    pub fn is_empty(&self) -> bool {
        self.slots.is_empty()
    }

    fn push(&mut self, o: AlarmOutput) {
        if self.pending.len() >= MAX_PENDING {
            match self
                .pending
                .iter()
                .position(|p| matches!(p, AlarmOutput::Trend(_)))
            {
                Some(i) => {
                    self.pending.remove(i);
                }
                None => {
                    self.pending.pop_front();
                }
            }
            self.lost_outputs += 1;
        }
        self.pending.push_back(o);
    }

    fn record(&mut self, i: AlarmId, t: Option<Transition>, now: Timestamp) {
        let Some(t) = t else { return };
        self.dirty = true;
        if t.active && t.cause == super::alarm::Cause::Activated {
            self.flood.record(now);
        }
        let announced = self.slots[i].alarm.announced(now);
        self.push(AlarmOutput::Transition {
            alarm: i,
            transition: t,
            announced,
        });
    }

    /// Suppression from the channels' health (`health(channel)`) and the
    /// sources' silence (`silent(source)`).
    pub fn update_suppression(
        &mut self,
        settings: &Settings,
        health: impl Fn(ChannelId) -> Health,
        silent: impl Fn(SourceId) -> bool,
        now: Timestamp,
    ) {
        for i in self.slots.ids() {
            let suppress = match (self.configs[i].spec.kind, self.configs[i].target) {
                (AlarmKind::Diagnostic, AlarmTarget::Channel { channel, .. }) => {
                    silent(settings.channels[channel].source)
                }
                (AlarmKind::Diagnostic, _) => false,
                _ => self.deps[i].iter().any(|&c| health(c) != Health::Ok),
            };
            if suppress != self.slots[i].alarm.flags().suppressed {
                let t = self.slots[i].alarm.set_suppressed(suppress, now);
                self.record(i, t, now);
            }
        }
    }

    /// Evaluates the alarms of zone `zone` on its new report.
    pub fn on_zone(&mut self, zone: ZoneId, report: &ZoneReport) {
        let now = report.time;
        for i in self.slots.ids() {
            let AlarmTarget::Zone { zone: z, quantity } = self.configs[i].target else {
                continue;
            };
            if z != zone {
                continue;
            }
            let value = zone_quantity(report, quantity);
            // A state made while a probe's reading is held back as a spike
            // stands on fewer probes: a valid value, but a step in the
            // quantity's history that is not the wall's, so it stays out
            // of the rate (and the trend).
            let spiked = report.probes.iter().any(|p| p.status == Health::Spike);
            self.evaluate_with(i, value, !spiked, now);
        }
    }

    /// Evaluates the alarms of channel `channel` (its temperature when
    /// valid, and its health).
    pub fn on_channel(
        &mut self,
        channel: ChannelId,
        health: Health,
        celsius: Option<f64>,
        now: Timestamp,
    ) {
        for i in self.slots.ids() {
            let AlarmTarget::Channel {
                channel: c,
                health: is_health,
            } = self.configs[i].target
            else {
                continue;
            };
            if c != channel {
                continue;
            }
            let value = if is_health || self.configs[i].spec.kind == AlarmKind::Diagnostic {
                Some(fault_value(health))
            } else {
                celsius.filter(|_| health == Health::Ok)
            };
            self.evaluate(i, value, now);
        }
    }

    /// Evaluates the silence alarm of source `source`.
    pub fn on_source(&mut self, source: SourceId, silent: bool, now: Timestamp) {
        for i in self.slots.ids() {
            if self.configs[i].target == (AlarmTarget::Source { source }) {
                self.evaluate(i, Some(if silent { 1.0 } else { 0.0 }), now);
            }
        }
    }

    /// Whether Modbus unit `unit` of `source` is silent, at `now`.
    pub fn on_unit(&mut self, source: SourceId, unit: u8, silent: bool, now: Timestamp) {
        for i in self.slots.ids() {
            if self.configs[i].target == (AlarmTarget::Unit { source, unit }) {
                self.evaluate(i, Some(if silent { 1.0 } else { 0.0 }), now);
            }
        }
    }

    /// Whether the state directory could be written, at `now`.
    pub fn on_state_dir(&mut self, failing: bool, now: Timestamp) {
        for i in self.slots.ids() {
            if self.configs[i].target == AlarmTarget::StateDir {
                self.evaluate(i, Some(if failing { 1.0 } else { 0.0 }), now);
            }
        }
    }

    fn evaluate(&mut self, i: AlarmId, raw: Option<f64>, now: Timestamp) {
        self.evaluate_with(i, raw, true, now);
    }

    /// Evaluates alarm `i` on `raw`; `for_rate`: the value also enters the
    /// history its rate is computed from. A `None` (no valid value, or a
    /// number the zone withholds) is bad quality: the alarm keeps its state.
    fn evaluate_with(&mut self, i: AlarmId, raw: Option<f64>, for_rate: bool, now: Timestamp) {
        let t = now.since(self.origin);
        let cfg = &self.configs[i];
        let slot = &mut self.slots[i];
        slot.raw = raw;
        if let (Some(v), true) = (raw, for_rate) {
            slot.history.write((t, v));
        }
        slot.rate_per_h = raw.and_then(|_| {
            windowed_rate_per_h(&slot.history, t, slot.window_s, slot.window_s / 4.0)
        });
        let value = match cfg.spec.kind {
            AlarmKind::RateHigh => slot.rate_per_h,
            AlarmKind::Deviation => raw.zip(cfg.baseline).map(|(v, b)| (v - b) / b * 100.0),
            _ => raw,
        };
        slot.value = value;
        let tr = slot.alarm.evaluate(value, now);
        self.record(i, tr, now);
        self.trend(i, now);
    }

    /// A trend alert when a high or low limit will be reached within the
    /// horizon at the current rate (and the alarm is not already active):
    /// at most one per `trend_repeat_min` for the alarm, unless the
    /// estimate halves (see `TrendWatch`).
    fn trend(&mut self, i: AlarmId, now: Timestamp) {
        let cfg = &self.configs[i];
        if !matches!(cfg.spec.kind, AlarmKind::High | AlarmKind::Low) {
            return;
        }
        let slot = &mut self.slots[i];
        let eta = match (slot.raw, slot.rate_per_h) {
            (Some(v), Some(r)) if !slot.alarm.flags().active && !slot.no_trend => {
                time_to_limit_h(v, r, cfg.spec.setpoint).map(|e| (v, r, e))
            }
            _ => None,
        };
        if slot.watch.update(now, eta.map(|(_, _, e)| e)) {
            if let Some((value, rate_per_h, eta_h)) = eta {
                let limit = cfg.spec.setpoint;
                self.push(AlarmOutput::Trend(TrendAlert {
                    alarm: i,
                    time: now,
                    value,
                    rate_per_h,
                    limit,
                    eta_h,
                }));
            }
        }
    }

    /// The next time [`Self::tick`] has work (a shelve running out, a delay
    /// completing), if any.
    pub fn next_deadline(&self) -> Option<Timestamp> {
        self.slots
            .iter()
            .filter_map(|s| s.alarm.next_deadline())
            .min_by(|a, b| a.epoch_s().total_cmp(&b.epoch_s()))
    }

    /// Timers: shelves running out, delays completing.
    pub fn tick(&mut self, now: Timestamp) {
        for i in self.slots.ids() {
            let t = self.slots[i].alarm.tick(now);
            self.record(i, t, now);
        }
    }

    /// An operator command (already parsed). The caller replies and logs.
    pub fn command(&mut self, cmd: &Command, now: Timestamp) -> Result<AlarmId, CommandError> {
        let i = self
            .configs
            .position(|c| c.name == cmd.alarm)
            .ok_or_else(|| CommandError::UnknownAlarm(cmd.alarm.clone()))?;
        let a = &mut self.slots[i].alarm;
        let t = match cmd.action {
            Action::Ack => a.acknowledge(&cmd.by, now),
            Action::Shelve => a.shelve(&cmd.by, cmd.minutes.unwrap_or(f64::NAN), now),
            Action::Unshelve => a.unshelve(&cmd.by, now),
            Action::Reset => a.reset(&cmd.by, now),
            Action::OutOfService => a.set_out_of_service(true, &cmd.by, now),
            Action::InService => a.set_out_of_service(false, &cmd.by, now),
            // Zone baseline commands are the monitor's, never an alarm's.
            Action::BaselineStart | Action::BaselineStop | Action::BaselineReset => {
                return Err(CommandError::UnknownAlarm(cmd.alarm.clone()))
            }
        }?;
        self.record(i, Some(t), now);
        Ok(i)
    }

    pub fn poll(&mut self) -> Option<AlarmOutput> {
        self.pending.pop_front()
    }

    /// Whether flags changed since the last call (then: save them).
    pub fn take_dirty(&mut self) -> bool {
        std::mem::take(&mut self.dirty)
    }

    /// Every alarm's persistent flags, by name.
    pub fn flags(&self) -> BTreeMap<String, AlarmFlags> {
        self.configs
            .iter()
            .zip(&self.slots)
            .map(|(c, s)| (c.name.clone(), s.alarm.flags().clone()))
            .collect()
    }

    /// The ISA-18.2 state of alarm `i` at `now`.
    /// Alarm `i`'s state at `now` (None for an id of other settings).
    pub fn state(&self, i: AlarmId, now: Timestamp) -> Option<AlarmState> {
        self.slots.get(i).map(|s| s.alarm.state(now))
    }

    pub fn flood_rate(&self, now: Timestamp) -> u32 {
        self.flood.rate_per_10min(now)
    }

    pub fn flooding(&self, now: Timestamp) -> bool {
        self.flood.flooding(now)
    }

    /// The `{root}/alarm/{name}` payload of alarm `i` (None for an id of
    /// other settings).
    pub fn report(&self, settings: &Settings, i: AlarmId, now: Timestamp) -> Option<AlarmReport> {
        let c = self.configs.get(i)?;
        let s = self.slots.get(i)?;
        let f = s.alarm.flags();
        let (zone, channel, source, quantity) = target_names(settings, c.target);
        Some(AlarmReport {
            schema: "wallflux.alarm/1",
            time: now,
            name: c.name.clone(),
            zone: zone.map(str::to_owned),
            channel: channel.map(str::to_owned),
            source: source.map(str::to_owned),
            quantity,
            kind: c.spec.kind,
            value: s.value,
            setpoint: (c.spec.kind != AlarmKind::Diagnostic).then_some(c.spec.setpoint),
            baseline: c.baseline,
            unit: c.unit(),
            priority: c.spec.priority,
            state: s.alarm.state(now),
            active: f.active,
            acknowledged: f.acknowledged,
            latched: f.latched,
            shelved: s.alarm.shelved(now),
            shelved_until: f
                .shelved_until
                .filter(|_| s.alarm.shelved(now))
                .map(Timestamp::from_epoch_s),
            suppressed: f.suppressed,
            out_of_service: f.out_of_service,
            announced: s.alarm.announced(now),
            active_since: f.active_since.map(Timestamp::from_epoch_s),
            last_transition: f.last_transition.map(Timestamp::from_epoch_s),
            seq: f.seq,
            event_id: event_id(&c.name, f.seq),
            last_user: f.last_user.clone(),
            builtin: c.builtin,
            message: c.message.clone(),
            consequence: c.consequence.clone(),
            action: c.action.clone(),
        })
    }
}

/// A stable id of an alarm's transition: `{alarm}:{seq}` (seq persists).
pub fn event_id(alarm: &str, seq: u64) -> String {
    format!("{alarm}:{seq}")
}

/// Names of what an alarm watches: (zone, channel, source, quantity).
pub fn target_names(
    settings: &Settings,
    t: AlarmTarget,
) -> (Option<&str>, Option<&str>, Option<&str>, &'static str) {
    match t {
        AlarmTarget::Zone { zone, quantity } => (
            Some(settings.zones[zone].name.as_str()),
            None,
            None,
            quantity.name(),
        ),
        AlarmTarget::Channel { channel, health } => (
            None,
            Some(settings.channels[channel].name.as_str()),
            None,
            if health { "health" } else { "celsius" },
        ),
        AlarmTarget::Source { source } => (
            None,
            None,
            Some(settings.sources[source].name.as_str()),
            "silent",
        ),
        AlarmTarget::Unit { source, .. } => (
            None,
            None,
            Some(settings.sources[source].name.as_str()),
            "unit_silent",
        ),
        AlarmTarget::StateDir => (None, None, None, "state_dir"),
    }
}

/// The `{root}/alarm/{name}` payload (owned: it leaves the monitor as an
/// output).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AlarmReport {
    pub schema: &'static str,
    pub time: Timestamp,
    pub name: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub zone: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub channel: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub source: Option<String>,
    pub quantity: &'static str,
    pub kind: AlarmKind,
    pub value: Option<f64>,
    pub setpoint: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub baseline: Option<f64>,
    pub unit: &'static str,
    pub priority: Priority,
    pub state: AlarmState,
    pub active: bool,
    pub acknowledged: bool,
    pub latched: bool,
    pub shelved: bool,
    pub shelved_until: Option<Timestamp>,
    pub suppressed: bool,
    pub out_of_service: bool,
    pub announced: bool,
    pub active_since: Option<Timestamp>,
    pub last_transition: Option<Timestamp>,
    pub seq: u64,
    pub event_id: String,
    pub last_user: Option<String>,
    pub builtin: bool,
    pub message: String,
    pub consequence: String,
    pub action: String,
}

fn fault_value(h: Health) -> f64 {
    match h {
        Health::Ok | Health::NoData => 0.0,
        _ => 1.0,
    }
}

fn zone_quantity(r: &ZoneReport, q: ZoneQuantity) -> Option<f64> {
    match q {
        ZoneQuantity::HotFaceC => r.hot_face_c,
        ZoneQuantity::ShellC => r.shell_c,
        ZoneQuantity::FluxHotFaceWM2 => r.flux_hot_face_w_m2,
        ZoneQuantity::FluxShellWM2 => r.flux_shell_w_m2,
        ZoneQuantity::HeatLossW => r.heat_loss_w,
        ZoneQuantity::SourceWM3 => r.source_w_m3,
        ZoneQuantity::FitRmsC => r.fit_rms_c,
        ZoneQuantity::FluxSurfaceWM2 => r.flux_surface_w_m2,
        ZoneQuantity::BalanceMismatchPct => r.balance_mismatch_pct,
        ZoneQuantity::StoredWM2 => r.stored_w_m2,
        ZoneQuantity::ThermalResistanceM2KW => r.thermal_resistance_m2k_w,
        ZoneQuantity::ResistanceChangePct => r.resistance_change_pct,
        ZoneQuantity::LiningRemainingMm => r.lining_remaining_mm,
        ZoneQuantity::InterfaceC(i) => r
            .interface_c
            .as_ref()
            .and_then(|v| v.get(usize::from(i)).copied()),
    }
}

/// The channels an alarm's value comes from (a zone alarm: its probes'),
/// for suppression by design: at most a zone's probes.
fn dependencies(settings: &Settings, c: &AlarmConfig) -> HVec<ChannelId, MAX_PROBES> {
    let mut d = HVec::new();
    match c.target {
        AlarmTarget::Zone { zone, quantity } => {
            let probes = &settings.zones[zone].probes;
            let by_depth = |deepest: bool| {
                probes
                    .iter()
                    .max_by(|a, b| {
                        let o = a.depth_m.total_cmp(&b.depth_m);
                        if deepest {
                            o
                        } else {
                            o.reverse()
                        }
                    })
                    .map(|p| p.channel)
            };
            use ZoneQuantity::*;
            match quantity {
                ShellC | FluxShellWM2 | HeatLossW | FluxSurfaceWM2 | BalanceMismatchPct => {
                    d.extend(by_depth(true));
                }
                HotFaceC | FluxHotFaceWM2 => d.extend(by_depth(false)),
                // As many as the zone's probes: the capacity is theirs.
                _ => d = probes.iter().map(|p| p.channel).collect(),
            }
        }
        AlarmTarget::Channel { channel, .. } => d.extend([channel]),
        AlarmTarget::Source { .. } | AlarmTarget::Unit { .. } | AlarmTarget::StateDir => {}
    }
    d
}

/// A high alarm on a zone's hot face or an interface whose limit lies above
/// the zone's `firing_setpoint_c`: the kiln's control stops the ramp at the
/// set-point, and a wall heated from its hot face is nowhere hotter than
/// that face, so a trend toward the limit would be a false promise.
fn beyond_setpoint(settings: &Settings, c: &AlarmConfig) -> bool {
    let AlarmTarget::Zone { zone, quantity } = c.target else {
        return false;
    };
    let bounded = matches!(
        quantity,
        ZoneQuantity::HotFaceC | ZoneQuantity::InterfaceC(_)
    );
    c.spec.kind == AlarmKind::High
        && bounded
        && settings.zones[zone]
            .firing_setpoint_c
            .is_some_and(|sp| c.spec.setpoint > sp)
}

/// What a trend line names, with its kind: `zone side-wall`, `channel
/// side-25`, `source tcbox-1`.
pub fn trend_place(settings: &Settings, t: AlarmTarget) -> String {
    match t {
        AlarmTarget::Zone { zone, .. } => format!("zone {}", settings.zones[zone].name),
        AlarmTarget::Channel { channel, .. } => {
            format!("channel {}", settings.channels[channel].name)
        }
        AlarmTarget::Source { source } => format!("source {}", settings.sources[source].name),
        AlarmTarget::Unit { source, unit } => {
            format!("unit {unit} of source {}", settings.sources[source].name)
        }
        AlarmTarget::StateDir => "the state directory".to_string(),
    }
}
