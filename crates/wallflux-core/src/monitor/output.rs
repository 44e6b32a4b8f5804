//! What the monitor hands its driver: typed outputs, drained with
//! [`super::Monitor::poll_output`].
//!
//! Each output is a struct that owns its payload: serialising it gives the
//! bytes published today (schema tag included), so a sink only decides
//! where an output goes (`wallflux::publish::route`), never what it says.
//! Payloads built as JSON objects in earlier versions were written with
//! their keys in alphabetical order; the structs standing in for them
//! declare their fields in that order, so the bytes stay the same.
//!
//! Some outputs are for the log only (a channel's health changing, an input
//! no channel reads, the alarm-flood notices); they serialise too, for
//! `analyze --outputs all`.

use serde::ser::{Error as _, Serializer};
use serde::Serialize;

use super::alarm::{AlarmState, Cause, Priority};
use super::alarm_engine::AlarmReport;
use super::channel::{ChannelReport, Health};
use super::command::{Command, CommandError, Reply};
use super::energy::KilnReport;
use super::zone::ZoneReport;
use crate::config::Name;
use crate::time::Timestamp;

crate::word_enum! {
    /// What an output is (its `kind` in `analyze --outputs all`).
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum OutputKind {
        ZoneState = "zone_state",
        ChannelState = "channel_state",
        KilnState = "kiln_state",
        AlarmState = "alarm_state",
        AlarmEvent = "alarm_event",
        TrendAlert = "trend_alert",
        CommandReply = "command_reply",
        Status = "status",
        ChannelHealth = "channel_health",
        UnknownInput = "unknown_input",
        AlarmFlood = "alarm_flood",
    }
}

/// One output of the monitor.
///
/// Outputs are moved by value through the monitor's queue, whose capacity
/// is kept: boxing the large zone state would allocate every zone cycle.
#[derive(Debug, Clone, PartialEq)]
#[allow(clippy::large_enum_variant)]
pub enum Output {
    /// A zone cycle's result (`wallflux.zone/…`).
    ZoneState(ZoneState),
    /// A channel's state, periodically and at once after a health change.
    ChannelState(ChannelReport),
    /// The kiln's heat and energy after the zone cycles of one instant.
    KilnState(KilnReport),
    /// An alarm's retained state.
    AlarmState(AlarmStateReport),
    /// An alarm's transition.
    AlarmEvent(AlarmEvent),
    /// A watched quantity heading for its alarm limit.
    TrendAlert(TrendEvent),
    /// The answer to an operator command.
    CommandReply(CommandReply),
    /// The service status with the monitor's counters (on request).
    Status(StatusReport),
    /// A channel's health changed (log only).
    ChannelHealth(ChannelHealthChange),
    /// A scan carried an input that no channel reads (log only, once per
    /// input).
    UnknownInput(UnknownInput),
    /// An alarm flood's grouped summary, or its end (log only).
    AlarmFlood(FloodNotice),
}

impl Output {
    pub fn kind(&self) -> OutputKind {
        match self {
            Output::ZoneState(_) => OutputKind::ZoneState,
            Output::ChannelState(_) => OutputKind::ChannelState,
            Output::KilnState(_) => OutputKind::KilnState,
            Output::AlarmState(_) => OutputKind::AlarmState,
            Output::AlarmEvent(_) => OutputKind::AlarmEvent,
            Output::TrendAlert(_) => OutputKind::TrendAlert,
            Output::CommandReply(_) => OutputKind::CommandReply,
            Output::Status(_) => OutputKind::Status,
            Output::ChannelHealth(_) => OutputKind::ChannelHealth,
            Output::UnknownInput(_) => OutputKind::UnknownInput,
            Output::AlarmFlood(_) => OutputKind::AlarmFlood,
        }
    }
}

/// The payload alone (what a sink publishes).
impl Serialize for Output {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            Output::ZoneState(o) => o.serialize(s),
            Output::ChannelState(o) => o.serialize(s),
            Output::KilnState(o) => o.serialize(s),
            Output::AlarmState(o) => o.serialize(s),
            Output::AlarmEvent(o) => o.serialize(s),
            Output::TrendAlert(o) => o.serialize(s),
            Output::CommandReply(o) => o.serialize(s),
            Output::Status(o) => o.serialize(s),
            Output::ChannelHealth(o) => o.serialize(s),
            Output::UnknownInput(o) => o.serialize(s),
            Output::AlarmFlood(o) => o.serialize(s),
        }
    }
}

/// A zone state and the count of cycles the zone has run (for the log's
/// `summary_every`).
#[derive(Debug, Clone, PartialEq)]
pub struct ZoneState {
    pub report: ZoneReport,
    pub cycle: u64,
}

impl Serialize for ZoneState {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        self.report.serialize(s)
    }
}

/// An alarm's state; a channel-fault alarm carries its channel's `reason`
/// while the channel is faulty.
#[derive(Debug, Clone, PartialEq)]
pub struct AlarmStateReport {
    pub report: AlarmReport,
    pub reason: Option<&'static str>,
}

impl Serialize for AlarmStateReport {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let Some(reason) = self.reason else {
            return self.report.serialize(s);
        };
        // As published since the first version: the state's object with
        // `reason` added, keys in alphabetical order.
        match serde_json::to_value(&self.report).map_err(S::Error::custom)? {
            serde_json::Value::Object(mut v) => {
                v.insert("reason".into(), reason.into());
                v.serialize(s)
            }
            other => other.serialize(s),
        }
    }
}

/// An alarm's transition (`wallflux.event/1`, `type` `alarm`). Fields in
/// alphabetical order (see the module doc).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AlarmEvent {
    pub active: bool,
    pub alarm: String,
    pub announced: bool,
    pub by: Option<String>,
    pub cause: Cause,
    pub event_id: String,
    pub from: AlarmState,
    pub message: String,
    pub priority: Priority,
    /// For a channel-fault alarm: its channel's reason, in words.
    pub reason: Option<&'static str>,
    pub schema: &'static str,
    pub seq: u64,
    /// The alarm's setpoint (none for a diagnostic alarm).
    pub setpoint: Option<f64>,
    pub time: Timestamp,
    pub to: AlarmState,
    #[serde(rename = "type")]
    pub event_type: &'static str,
    pub unit: &'static str,
    pub value: Option<f64>,
    /// The alarm's configured setpoint whatever its kind (for the log).
    #[serde(skip)]
    pub configured_setpoint: f64,
    /// Grouped into the flood summary instead of a log line of its own.
    #[serde(skip)]
    pub grouped: bool,
}

/// A trend alert (`wallflux.event/1`, `type` `trend`). Fields in
/// alphabetical order (see the module doc).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendEvent {
    pub alarm: String,
    pub channel: Option<String>,
    pub eta_h: f64,
    pub limit: f64,
    /// The trend line in words.
    pub message: String,
    pub quantity: &'static str,
    pub rate_per_h: f64,
    pub schema: &'static str,
    pub time: Timestamp,
    #[serde(rename = "type")]
    pub event_type: &'static str,
    pub unit: &'static str,
    pub value: f64,
    pub zone: Option<String>,
    /// The line fitted its buffer (else the log shows none).
    #[serde(skip)]
    pub line_complete: bool,
}

/// The answer to an operator command: `{"id":…,"ok":true}` or
/// `{"id":…,"ok":false,"error":"…","code":"…"}`. Carries the command (when
/// it could be read) and the payload's size, for the audit line and the
/// audit event ([`CommandReply::audit`]).
#[derive(Debug, Clone, PartialEq)]
pub struct CommandReply {
    pub id: Option<String>,
    pub result: Result<(), CommandError>,
    pub command: Option<Command>,
    pub payload_bytes: usize,
    /// When it was handled.
    pub time: Timestamp,
}

impl CommandReply {
    /// The command's audit event (`wallflux.command/1` on `{root}/events`):
    /// every command, accepted or refused, with who sent it.
    pub fn audit(&self) -> CommandAudit<'_> {
        let c = self.command.as_ref();
        let baseline = c.is_some_and(|c| c.action.is_baseline());
        let err = self.result.as_ref().err();
        CommandAudit {
            action: c.map(|c| c.action.name()),
            alarm: c.filter(|_| !baseline).map(|c| c.alarm.as_str()),
            by: c.map(|c| c.by.as_str()),
            bytes: self.payload_bytes,
            code: err.map(CommandError::code),
            error: err.map(ToString::to_string),
            id: self.id.as_deref(),
            minutes: c.and_then(|c| c.minutes),
            ok: err.is_none(),
            schema: "wallflux.command/1",
            sent: c.map(|c| c.time),
            time: self.time,
            event_type: "command",
            zone: c.filter(|_| baseline).map(|c| c.alarm.as_str()),
        }
    }
}

/// The audit event of one command. Fields in alphabetical order (see the
/// module doc); `sent` is the command's own `time`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CommandAudit<'a> {
    pub action: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub alarm: Option<&'a str>,
    pub by: Option<&'a str>,
    pub bytes: usize,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub code: Option<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
    pub id: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub minutes: Option<f64>,
    pub ok: bool,
    pub schema: &'static str,
    pub sent: Option<Timestamp>,
    pub time: Timestamp,
    #[serde(rename = "type")]
    pub event_type: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub zone: Option<&'a str>,
}

impl Serialize for CommandReply {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        Reply::new(self.id.as_deref(), self.result.as_ref().map(|_| ())).serialize(s)
    }
}

/// One source in the status. `open` and `reopens` are the transport's
/// facts, filled in by the edge that owns it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SourceStatus {
    pub frame_errors: u64,
    pub frames: u64,
    pub lost_scans: u64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub open: Option<bool>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reopens: Option<u64>,
    pub silent: bool,
    pub source: Name,
    /// A Modbus source: each unit's counters, filled in by the edge.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub units: Option<Vec<UnitStatus>>,
}

/// One Modbus unit's counters (`status`, under its source).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UnitStatus {
    pub answers: u64,
    /// Frames that were not the answer to their request (late, wrong
    /// length).
    pub bad_frames: u64,
    pub crc_errors: u64,
    /// Exception replies, by exception code.
    pub exceptions: Vec<ExceptionCount>,
    pub last_answer: Option<Timestamp>,
    pub requests: u64,
    pub silent: bool,
    pub timeouts: u64,
    pub unit: u8,
}

/// How many exception replies of one code a unit gave.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ExceptionCount {
    pub code: u8,
    pub count: u64,
}

/// The MQTT link's and hand-over queue's counters, filled in by the edge.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct LinkStatus {
    /// Events sent late, from the spool (`"backfill": true`).
    pub backfilled: u64,
    pub coalesced: u64,
    pub commands_dropped: u64,
    pub commands_retained: u64,
    pub connections: u64,
    pub dropped_channels: u64,
    pub dropped_zone_states: u64,
    pub failed_attempts: u64,
    pub lost_events: u64,
    pub oversize_packets: u64,
    pub published: u64,
    pub queued: u64,
    /// MQTT 5: messages the broker acknowledged with a refusal (its access
    /// list, a quota).
    pub refused_by_broker: u64,
    /// The spool's estimated size, bytes.
    pub spool_bytes: u64,
    /// Events the spool's bounds pushed out since start (each announced).
    pub spool_dropped: u64,
    /// Events in the spool, not yet acknowledged by the broker.
    pub spool_events: u64,
    /// The time of the oldest of them.
    pub spool_oldest: Option<Timestamp>,
    /// The local database works (else events wait in memory only).
    pub store_ok: bool,
}

/// The service status (`wallflux.status/1`). Fields in alphabetical order
/// (see the module doc).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StatusReport {
    pub alarm_flood: bool,
    pub alarm_rate_per_10min: u32,
    pub alarms_active: usize,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mqtt: Option<LinkStatus>,
    pub schema: &'static str,
    pub sources: Vec<SourceStatus>,
    pub state: &'static str,
    pub time: Timestamp,
    pub unknown_inputs: u64,
    /// The program's version, filled in by the edge.
    pub version: &'static str,
}

/// A channel's health changed.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelHealthChange {
    pub channel: Name,
    pub time: Timestamp,
    pub from: Health,
    pub to: Health,
    pub reason: &'static str,
}

/// A scan carried an input that no channel reads.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UnknownInput {
    pub source: Name,
    pub input: u8,
}

/// While an alarm flood lasts, a summary at most every
/// [`super::FLOOD_SUMMARY_EVERY_S`]; when it ends (`over`), how many alarm
/// lines were grouped.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FloodNotice {
    pub time: Timestamp,
    pub over: bool,
    pub rate_per_10min: u32,
    pub grouped: u64,
    /// The alarms active at the summary.
    pub active: Vec<String>,
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    /// The payloads that earlier versions built as `json!` objects: the
    /// structs give the very same bytes (keys in alphabetical order, none
    /// left out, `null` for an absent value).
    #[test]
    fn event_and_status_bytes_are_those_of_the_json_objects_they_replace() {
        let time = Timestamp::from_epoch_s(1_700_000_000.0);
        let event = AlarmEvent {
            active: true,
            alarm: "roof-hot".into(),
            announced: true,
            by: None,
            cause: Cause::Activated,
            event_id: "roof-hot-3".into(),
            from: AlarmState::Normal,
            message: "roof shell hot".into(),
            priority: Priority::High,
            reason: None,
            schema: "wallflux.event/1",
            seq: 3,
            setpoint: Some(120.0),
            time,
            to: AlarmState::Unacknowledged,
            event_type: "alarm",
            unit: "°C",
            value: Some(123.4),
            configured_setpoint: 120.0,
            grouped: false,
        };
        let old = json!({
            "schema": "wallflux.event/1", "type": "alarm", "time": time,
            "alarm": "roof-hot", "event_id": "roof-hot-3", "seq": 3,
            "from": AlarmState::Normal, "to": AlarmState::Unacknowledged,
            "cause": Cause::Activated, "active": true, "announced": true,
            "value": Some(123.4), "setpoint": Some(120.0), "unit": "°C",
            "priority": Priority::High, "by": None::<&str>,
            "message": "roof shell hot", "reason": None::<&str>,
        });
        assert_eq!(
            serde_json::to_string(&event).unwrap(),
            serde_json::to_string(&old).unwrap()
        );

        let trend = TrendEvent {
            alarm: "roof-hot".into(),
            channel: None,
            eta_h: 2.5,
            limit: 120.0,
            message: "roof shell about 2.5 h from 120 °C".into(),
            quantity: "shell_c",
            rate_per_h: 4.0,
            schema: "wallflux.event/1",
            time,
            event_type: "trend",
            unit: "°C",
            value: 110.0,
            zone: Some("roof".into()),
            line_complete: true,
        };
        let old = json!({
            "schema": "wallflux.event/1", "type": "trend", "time": time,
            "alarm": "roof-hot", "zone": Some("roof"), "channel": None::<&str>,
            "quantity": "shell_c", "value": 110.0, "rate_per_h": 4.0,
            "limit": 120.0, "unit": "°C", "eta_h": 2.5,
            "message": "roof shell about 2.5 h from 120 °C",
        });
        assert_eq!(
            serde_json::to_string(&trend).unwrap(),
            serde_json::to_string(&old).unwrap()
        );

        let status = StatusReport {
            alarm_flood: false,
            alarm_rate_per_10min: 2,
            alarms_active: 1,
            mqtt: Some(LinkStatus {
                connections: 1,
                published: 40,
                queued: 3,
                ..LinkStatus::default()
            }),
            schema: "wallflux.status/1",
            sources: vec![SourceStatus {
                frame_errors: 4,
                frames: 100,
                lost_scans: 2,
                open: Some(true),
                reopens: Some(0),
                silent: false,
                source: "box".try_into().unwrap(),
                units: None,
            }],
            state: "online",
            time,
            unknown_inputs: 5,
            version: "0.1.0",
        };
        let old = json!({
            "schema": "wallflux.status/1", "state": "online", "time": time,
            "version": "0.1.0",
            "sources": [{"source": "box", "open": true, "silent": false,
                "frames": 100, "frame_errors": 4, "lost_scans": 2, "reopens": 0}],
            "alarms_active": 1, "alarm_rate_per_10min": 2, "alarm_flood": false,
            "mqtt": {"connections": 1, "failed_attempts": 0, "published": 40,
                "queued": 3, "coalesced": 0, "dropped_zone_states": 0,
                "dropped_channels": 0, "lost_events": 0, "commands_dropped": 0,
                "commands_retained": 0, "oversize_packets": 0, "backfilled": 0,
                "refused_by_broker": 0,
                "spool_bytes": 0, "spool_dropped": 0, "spool_events": 0,
                "spool_oldest": null, "store_ok": false},
            "unknown_inputs": 5,
        });
        assert_eq!(
            serde_json::to_string(&status).unwrap(),
            serde_json::to_string(&old).unwrap()
        );
    }
}
