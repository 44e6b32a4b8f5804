//! How the monitor turns alarm transitions, trend alerts, commands and
//! requests into outputs, and its alarm-flood policy: while a flood lasts
//! (ISA-18.2's more than 10 alarms in 10 minutes), announced alarm changes
//! that no operator made are grouped into one summary at most every
//! [`FLOOD_SUMMARY_EVERY_S`] instead of a log line each.

use super::alarm::{AlarmKind, AlarmState, Transition};
use super::alarm_engine::{event_id, target_names, trend_place, AlarmOutput, TrendAlert};
use super::command::{check_policy, command_id, parse_command};
use super::output::{
    AlarmEvent, AlarmStateReport, CommandReply, FloodNotice, Output, SourceStatus, StatusReport,
    TrendEvent,
};
use super::trend::trend_line;
use super::{Monitor, FLOOD_SUMMARY_EVERY_S};
use crate::ids::AlarmId;
use crate::time::Timestamp;

impl Monitor {
    /// An operator command's payload (from `{root}/cmd`): parsed, applied,
    /// answered with an [`Output::CommandReply`], followed by the alarm
    /// outputs it caused.
    pub fn handle_command(&mut self, payload: &[u8], now: Timestamp) {
        let reply = match parse_command(payload) {
            Ok(cmd) => CommandReply {
                id: Some(cmd.id.clone()),
                result: check_policy(&self.settings.commands, &cmd, now)
                    .and_then(|()| self.command(&cmd, now).map(|_| ())),
                command: Some(cmd),
                payload_bytes: payload.len(),
                time: now,
            },
            Err(e) => CommandReply {
                id: command_id(payload),
                result: Err(e),
                command: None,
                payload_bytes: payload.len(),
                time: now,
            },
        };
        self.push(Output::CommandReply(reply));
        self.collect_alarms(now);
    }

    /// Whether the edge could save the state it must keep (alarm flags,
    /// baselines, energy), at `now`: raises or clears the built-in
    /// `state-not-saved` alarm.
    pub fn handle_persistence(&mut self, saved: bool, now: Timestamp) {
        self.alarms.on_state_dir(!saved, now);
        self.collect_alarms(now);
    }

    /// Asks for an [`Output::Status`] with the monitor's counters at `now`.
    pub fn handle_status_request(&mut self, now: Timestamp) {
        let sources = self
            .settings
            .sources
            .iter()
            .zip(&self.sources)
            .map(|(c, s)| SourceStatus {
                frame_errors: s.counters.decode_errors,
                frames: s.counters.scans,
                lost_scans: s.counters.lost_scans,
                open: None,
                reopens: None,
                silent: s.silent,
                source: c.name.clone(),
                units: None,
            })
            .collect();
        let status = StatusReport {
            alarm_flood: self.alarms.flooding(now),
            alarm_rate_per_10min: self.alarms.flood_rate(now),
            alarms_active: self.active_alarms(now).count(),
            mqtt: None,
            schema: "wallflux.status/1",
            sources,
            state: "online",
            time: now,
            unknown_inputs: self.unknown_inputs,
            version: "",
        };
        self.push(Output::Status(status));
    }

    /// Asks for every alarm's [`Output::AlarmState`] at `now` (at start, and
    /// when a sink may have lost the retained ones).
    pub fn handle_alarm_states_request(&mut self, now: Timestamp) {
        for i in self.alarms.configs().ids() {
            if let Some(state) = self.alarm_state(i, now) {
                self.push(Output::AlarmState(state));
            }
        }
    }

    /// Moves the alarm engine's transitions and trend alerts to the outputs
    /// (each transition as the alarm's state, then its event), then applies
    /// the flood policy.
    pub(super) fn collect_alarms(&mut self, now: Timestamp) {
        while let Some(out) = self.alarms.poll() {
            match out {
                AlarmOutput::Transition {
                    alarm,
                    transition,
                    announced,
                } => {
                    if let Some(state) = self.alarm_state(alarm, now) {
                        self.push(Output::AlarmState(state));
                    }
                    let event = self.alarm_event(alarm, &transition, announced, now);
                    self.push(Output::AlarmEvent(event));
                }
                AlarmOutput::Trend(t) => {
                    let event = self.trend_event(&t);
                    self.push(Output::TrendAlert(event));
                }
            }
        }
        self.flood_policy(now);
    }

    /// Alarm `i`'s state output (the engine's own ids: always Some).
    fn alarm_state(&self, i: AlarmId, now: Timestamp) -> Option<AlarmStateReport> {
        Some(AlarmStateReport {
            report: self.alarm_report(i, now)?,
            reason: self.alarm_reason(i, now),
        })
    }

    fn alarm_event(
        &mut self,
        i: AlarmId,
        t: &Transition,
        announced: bool,
        now: Timestamp,
    ) -> AlarmEvent {
        let by = t.by.as_ref().map(|b| b.to_string());
        let grouped = self.alarms.flooding(now) && by.is_none() && announced;
        self.flood_grouped += u64::from(grouped);
        let c = &self.alarms.configs()[i];
        AlarmEvent {
            active: t.active,
            alarm: c.name.clone(),
            announced,
            by,
            cause: t.cause,
            event_id: event_id(&c.name, t.seq),
            from: t.from,
            message: c.message.clone(),
            priority: c.spec.priority,
            reason: self.alarm_reason(i, t.time),
            schema: "wallflux.event/1",
            seq: t.seq,
            setpoint: (c.spec.kind != AlarmKind::Diagnostic).then_some(c.spec.setpoint),
            time: t.time,
            to: t.to,
            event_type: "alarm",
            unit: c.unit(),
            value: t.value,
            configured_setpoint: c.spec.setpoint,
            grouped,
        }
    }

    fn trend_event(&self, t: &TrendAlert) -> TrendEvent {
        let c = &self.alarms.configs()[t.alarm];
        let (zone, channel, _, quantity) = target_names(&self.settings, c.target);
        let place = trend_place(&self.settings, c.target);
        let mut line = heapless::String::<256>::new();
        let unit = c.unit();
        let line_complete = trend_line(
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
        .is_ok();
        TrendEvent {
            alarm: c.name.clone(),
            channel: channel.map(str::to_owned),
            eta_h: t.eta_h,
            limit: t.limit,
            message: line.as_str().to_owned(),
            quantity,
            rate_per_h: t.rate_per_h,
            schema: "wallflux.event/1",
            time: t.time,
            event_type: "trend",
            unit,
            value: t.value,
            zone: zone.map(str::to_owned),
            line_complete,
        }
    }

    /// While a flood lasts, a summary at its start and then at most every
    /// [`FLOOD_SUMMARY_EVERY_S`]; when it is over, how many lines were
    /// grouped (if any).
    fn flood_policy(&mut self, now: Timestamp) {
        if !self.alarms.flooding(now) {
            if self.flood_grouped > 0 {
                let notice = self.flood_notice(now, true);
                self.push(Output::AlarmFlood(notice));
                self.flood_grouped = 0;
            }
            self.last_flood_summary = None;
            return;
        }
        if self
            .last_flood_summary
            .is_none_or(|l| now.since(l) >= FLOOD_SUMMARY_EVERY_S)
        {
            let notice = self.flood_notice(now, false);
            self.push(Output::AlarmFlood(notice));
            self.last_flood_summary = Some(now);
        }
    }

    fn flood_notice(&self, now: Timestamp, over: bool) -> FloodNotice {
        FloodNotice {
            time: now,
            over,
            rate_per_10min: self.alarms.flood_rate(now),
            grouped: self.flood_grouped,
            active: if over {
                Vec::new()
            } else {
                self.active_alarms(now)
                    .map(|i| self.alarms.configs()[i].name.clone())
                    .collect()
            },
        }
    }

    /// The alarms active at `now` (unacknowledged or acknowledged).
    fn active_alarms(&self, now: Timestamp) -> impl Iterator<Item = AlarmId> + '_ {
        self.alarms.configs().ids().filter(move |&i| {
            matches!(
                self.alarms.state(i, now),
                Some(AlarmState::Unacknowledged | AlarmState::Acknowledged)
            )
        })
    }
}
