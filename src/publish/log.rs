//! The log sink: the lines the daemon writes for the monitor's outputs.
//! What to say is decided here from the output alone (the alarm-flood
//! grouping is the monitor's, marked on each alarm event). Refused
//! commands, which a flood could repeat without bound, are folded: one line
//! a minute at most, with the count of those not written.

use std::time::Instant;

use tracing::{debug, info, warn};

use super::fold::Fold;

use crate::config::Settings;
use crate::monitor::alarm::{Cause, Priority};
use crate::monitor::channel::Health;
use crate::monitor::output::{AlarmEvent, CommandReply, FloodNotice, Output};
use crate::monitor::zone::{ZoneReport, ZoneStatus};

/// The log sink: writes each output's line(s), folding the lines that a
/// flood could repeat without bound (refused commands).
#[derive(Debug, Default)]
pub struct Logger {
    refused: Fold,
}

impl Logger {
    /// Writes the log line(s) of `out`, if it has any.
    pub fn output(&mut self, settings: &Settings, out: &Output) {
        match out {
            Output::CommandReply(r) if r.result.is_err() => {
                if let Some(folded) = self.refused.admit(Instant::now()) {
                    command(r, folded);
                }
            }
            _ => log_output(settings, out),
        }
    }
}

/// Writes the log line(s) of `out`, if it has any.
fn log_output(settings: &Settings, out: &Output) {
    match out {
        Output::ZoneState(z) => {
            let every = u64::from(settings.log.summary_every);
            if every == 1 || z.cycle % every == 1 {
                zone_summary(&z.report);
            }
        }
        Output::ChannelHealth(c) if c.to == Health::Ok => {
            info!(
                channel = c.channel.as_str(),
                from = c.from.name(),
                "channel ok"
            );
        }
        Output::ChannelHealth(c) => warn!(
            channel = c.channel.as_str(),
            status = c.to.name(),
            from = c.from.name(),
            reason = c.reason,
            "channel fault: excluded from fits"
        ),
        Output::UnknownInput(u) => {
            warn!(source = %u.source, input = u.input,
                "frame carries an input that no [[channel]] reads (ignored; further ones counted)");
        }
        Output::AlarmEvent(e) => alarm_transition(e),
        Output::TrendAlert(t) if t.line_complete => {
            warn!(alarm = %t.alarm, "trend: {}", t.message);
        }
        Output::CommandReply(r) => command(r, 0),
        Output::AlarmFlood(f) => flood(f),
        _ => {}
    }
}

fn zone_summary(r: &ZoneReport) {
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

fn alarm_transition(e: &AlarmEvent) {
    let value = e.value.map_or("-".to_string(), |v| format!("{v:.1}"));
    if e.grouped {
        debug!(alarm = %e.alarm, to = e.to.name(), value = %value, "alarm (grouped during flood)");
        return;
    }
    let by = e.by.as_deref().unwrap_or("");
    let operator = !by.is_empty();
    let priority = e.priority.name();
    let text = if e.message.is_empty() {
        e.alarm.as_str()
    } else {
        e.message.as_str()
    };
    match (e.cause, e.announced) {
        (Cause::Activated, true) if matches!(e.priority, Priority::Critical | Priority::High) => {
            warn!(alarm = %e.alarm, priority, value = %value, unit = e.unit, setpoint = e.configured_setpoint, "ALARM: {text}")
        }
        (Cause::Activated, true) => {
            let reason = e.reason.unwrap_or("");
            warn!(alarm = %e.alarm, priority, value = %value, unit = e.unit, reason, "alarm: {text}")
        }
        (_, false) if !operator => {
            info!(alarm = %e.alarm, to = e.to.name(), cause = e.cause.name(), value = %value, "alarm change not announced (shelved, suppressed or out of service)")
        }
        _ => {
            info!(alarm = %e.alarm, from = e.from.name(), to = e.to.name(), cause = e.cause.name(), by, "alarm")
        }
    }
}

/// The audit line of an operator command, with its user; a refused one
/// says how many refusals before it were folded (not written).
fn command(r: &CommandReply, folded: u64) {
    let Some(cmd) = &r.command else {
        if let Err(e) = &r.result {
            warn!(error = %e, bytes = r.payload_bytes, folded, "malformed operator command refused");
        }
        return;
    };
    let action = cmd.action.name();
    match (&r.result, cmd.action.is_baseline()) {
        (Ok(()), true) => {
            info!(id = %cmd.id, action, zone = %cmd.alarm, by = %cmd.by, "operator command")
        }
        (Err(e), true) => {
            warn!(id = %cmd.id, action, zone = %cmd.alarm, by = %cmd.by, error = %e, folded, "operator command refused")
        }
        (Ok(()), false) => {
            info!(id = %cmd.id, action, alarm = %cmd.alarm, by = %cmd.by, minutes = cmd.minutes.map_or(String::new(), |m| format!("{m} min")), "operator command")
        }
        (Err(e), false) => {
            warn!(id = %cmd.id, action, alarm = %cmd.alarm, by = %cmd.by, error = %e, folded, "operator command refused")
        }
    }
}

fn flood(f: &FloodNotice) {
    if f.over {
        info!(grouped = f.grouped, "alarm flood over");
    } else {
        warn!(
            rate_per_10min = f.rate_per_10min,
            grouped = f.grouped,
            active = %f.active.join(","),
            "ALARM FLOOD: more than 10 alarms in 10 minutes; alarm lines are grouped"
        );
    }
}
