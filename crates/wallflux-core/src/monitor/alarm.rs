//! One alarm's state machine after ISA-18.2 / IEC 62682, pure and driven
//! with `now`.
//!
//! # The state diagram, in our words
//!
//! ISA-18.2 (and IEC 62682, its international twin) describes an alarm by
//! two things at once: whether its condition is present, and whether the
//! operator has acknowledged it. OPC UA Part 9 (Alarms & Conditions) maps the
//! same model openly (`ActiveState`, `AckedState`, `LatchedState`,
//! `ShelvingState`, `SuppressedState`, `OutOfServiceState`). The process part
//! has five states:
//!
//! | state | condition | acknowledged | leaves by |
//! |---|---|---|---|
//! | [`Normal`](AlarmState::Normal) | gone | nothing owed | condition appears → `Unacknowledged` |
//! | [`Unacknowledged`](AlarmState::Unacknowledged) | present | no | ack → `Acknowledged`; condition goes → `RtnUnacknowledged` (latching: `Latched`) |
//! | [`Acknowledged`](AlarmState::Acknowledged) | present | yes | condition goes → `Normal` (latching: `Latched`) |
//! | [`RtnUnacknowledged`](AlarmState::RtnUnacknowledged) | gone | no | ack → `Normal`; condition again → `Unacknowledged` |
//! | [`Latched`](AlarmState::Latched) | gone | either | reset, once acknowledged → `Normal`; condition again → `Unacknowledged` |
//!
//! Every new activation is unacknowledged, whatever came before: the operator
//! owes an acknowledgement for each one.
//!
//! Three overlays take an alarm away from the operator without stopping it:
//! **shelved** (an operator hides a nuisance alarm for a limited time),
//! **suppressed by design** (logic hides it, e.g. while its channel is faulty)
//! and **out of service** (maintenance takes it away). Under all three the
//! alarm is still evaluated — its `active` flag follows the process, so that
//! the right state shows the moment the overlay lifts — but nobody is told.
//!
//! ## Which state shows when several hold
//!
//! [`Alarm::state`] reports one state, in this order:
//! out of service > shelved > suppressed > latched > unacknowledged /
//! acknowledged / returned-unacknowledged > normal. The reasons:
//!
//! - *Out of service* is a management decision (a permit, a
//!   management-of-change record): the alarm is not a working alarm at all,
//!   so nothing under it means anything to the operator.
//! - *Shelved* is an operator's own, time-limited, audited act, and the
//!   alarm system is expected to keep a list of shelved alarms so that none
//!   is forgotten (ISA-18.2, from memory). So a shelve shows even when design
//!   logic also suppresses the alarm: the shelve is the one that will run
//!   out and must be tracked.
//! - *Suppressed by design* lifts by itself when its reason goes, and only
//!   then does the process state matter again.
//! - *Latched* is a process-normal state (ISA-18.2's state E) that still
//!   needs the operator: it outranks plain `Normal` and can only hold while
//!   the condition is gone, so it never hides an active alarm.
//!
//! The flag [`AlarmFlags::latched`] is the latch *holding after return*,
//! like ISA's state E. OPC UA's `LatchedState` turns true at activation
//! already; the two agree once the condition has gone.
//!
//! ## Delays and deadband
//!
//! An on-delay (ISA-18.2's *alarm on-delay*) requires the activation test to
//! pass on every value for `on_delay_s` before the alarm activates; an
//! off-delay does the same for the return test. The deadband applies on
//! return only: a high alarm activates at `value ≥ setpoint` and returns only
//! once `value < setpoint − deadband`. A missing value (`None`, or a value
//! that is not finite) breaks the "continuously" of a running delay: both
//! delay timers restart with the next valid value, and the `active` flag
//! holds meanwhile.
//!
//! [`Alarm::tick`] completes a running delay on the assumption that the last
//! valid value still holds (sample and hold); [`Alarm::evaluate`] judges by
//! the value it is given. A driver that wants delays to complete at a finer
//! resolution than its sample period calls `tick` at that resolution.
//!
//! ## Transitions
//!
//! Every call returns at most one [`Transition`], which says what changed
//! since the last one reported: the shown state, the `active` flag, or (for
//! operator and design commands) any flag. `seq` increases by one with each.
//! Nothing here allocates except the operator commands, which record the
//! user's name in the persistent flags.

use serde::{Deserialize, Serialize};

use crate::monitor::command::{check_text, CommandError, MAX_TEXT_CHARS};
use crate::time::Timestamp;

/// The longest shelve an operator may ask for, minutes (24 h). ISA-18.2
/// expects shelving to be time-limited (from memory); OPC UA Part 9 calls
/// the same limit `MaxTimeShelved`. A day covers a shift change and a
/// night, yet keeps a forgotten shelve from hiding an alarm for good.
pub const MAX_SHELVE_MIN: f64 = 24.0 * 60.0;

/// A diagnostic value at or above this is a fault (the channel sends 1.0 for
/// a fault, 0.0 for healthy; the midpoint tolerates a scaled or filtered
/// signal).
pub const DIAGNOSTIC_FAULT_AT: f64 = 0.5;

crate::word_enum! {
    /// What an alarm watches, and so how its value is compared with the setpoint.
    #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
    pub enum AlarmKind {
        /// Activates at `value ≥ setpoint`; returns at `value < setpoint − deadband`.
        High = "high",
        /// Activates at `value ≤ setpoint`; returns at `value > setpoint + deadband`.
        Low = "low",
        /// `value` is a rate per hour supplied by the caller (e.g. °C/h);
        /// activates at `|value| ≥ setpoint`, returns at
        /// `|value| < setpoint − deadband`.
        RateHigh = "rate_high",
        /// `value` is a percentage deviation from a baseline supplied by the
        /// caller; the same magnitude test as [`AlarmKind::RateHigh`].
        Deviation = "deviation",
        /// `value` 1.0 = fault present, 0.0 = healthy; setpoint and deadband are
        /// ignored (see [`DIAGNOSTIC_FAULT_AT`]).
        Diagnostic = "diagnostic",
    }
}

crate::word_enum! {
    /// How urgent an alarm is. Ordered most urgent first, so sorting ascending
    /// lists critical alarms at the top.
    #[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
    pub enum Priority {
        Critical = "critical",
        High = "high",
        Medium = "medium",
        Low = "low",
    }
}

/// The configured behaviour of one alarm.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AlarmSpec {
    pub kind: AlarmKind,
    /// Activation threshold, in the unit of the value the alarm watches.
    pub setpoint: f64,
    /// Return hysteresis, same unit, ≥ 0 (applies on return only).
    pub deadband: f64,
    /// How long the activation test must pass before the alarm activates, s.
    pub on_delay_s: f64,
    /// How long the return test must pass before the alarm returns, s.
    pub off_delay_s: f64,
    /// Latching: after return the alarm stays `Latched` until reset.
    pub latch: bool,
    pub priority: Priority,
}

/// Why an [`AlarmSpec`] cannot be used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum SpecError {
    /// The setpoint is not finite, or not above zero for a magnitude alarm.
    #[error("setpoint must be a finite number (above 0 for rate and deviation alarms)")]
    Setpoint,
    /// The deadband is negative or not finite, or so wide that a magnitude alarm never returns.
    #[error(
        "deadband must be a finite number ≥ 0 (below the setpoint for rate and deviation alarms)"
    )]
    Deadband,
    /// An on- or off-delay is negative or not finite.
    #[error("on_delay_s and off_delay_s must be finite numbers ≥ 0")]
    Delay,
}

impl AlarmSpec {
    /// Checks the numbers (for the configuration's validation stage). An
    /// alarm built from a spec that fails still never panics: a non-finite
    /// setpoint never activates, a bad deadband or delay counts as zero.
    pub fn validate(&self) -> Result<(), SpecError> {
        let magnitude = matches!(self.kind, AlarmKind::RateHigh | AlarmKind::Deviation);
        if !self.setpoint.is_finite() || (magnitude && self.setpoint <= 0.0) {
            return Err(SpecError::Setpoint);
        }
        if !self.deadband.is_finite()
            || self.deadband < 0.0
            || (magnitude && self.deadband >= self.setpoint)
        {
            return Err(SpecError::Deadband);
        }
        let delay_ok = |d: f64| d.is_finite() && d >= 0.0;
        if !delay_ok(self.on_delay_s) || !delay_ok(self.off_delay_s) {
            return Err(SpecError::Delay);
        }
        Ok(())
    }

    /// Does `value` pass the activation test?
    fn activates(&self, value: f64) -> bool {
        match self.kind {
            AlarmKind::High => value >= self.setpoint,
            AlarmKind::Low => value <= self.setpoint,
            AlarmKind::RateHigh | AlarmKind::Deviation => value.abs() >= self.setpoint,
            AlarmKind::Diagnostic => value >= DIAGNOSTIC_FAULT_AT,
        }
    }

    /// Does `value` pass the return test (beyond the deadband)?
    fn returns(&self, value: f64) -> bool {
        let db = self.deadband.max(0.0); // NaN counts as 0 (`f64::max` ignores NaN)
        match self.kind {
            AlarmKind::High => value < self.setpoint - db,
            AlarmKind::Low => value > self.setpoint + db,
            AlarmKind::RateHigh | AlarmKind::Deviation => value.abs() < self.setpoint - db,
            AlarmKind::Diagnostic => value < DIAGNOSTIC_FAULT_AT,
        }
    }
}

/// The persistent part of an alarm, saved to disk by the caller and given
/// back to [`Alarm::with_flags`] after a restart. Times are epoch seconds.
/// A field missing from a saved file takes its default, so files written
/// before a field was added still load.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct AlarmFlags {
    /// The condition is present (after its on-delay) and has not returned.
    pub active: bool,
    /// The latest activation has been acknowledged (false before any).
    pub acknowledged: bool,
    /// A latching alarm's latch is holding: the condition has gone and a
    /// reset is still due.
    pub latched: bool,
    /// Shelved until this time (the shelve ends by itself then).
    pub shelved_until: Option<f64>,
    /// Suppressed by design (e.g. its channel is faulty).
    pub suppressed: bool,
    /// Taken out of service (maintenance).
    pub out_of_service: bool,
    /// Start of the latest activation; kept after the condition returns as
    /// its record (None: never activated).
    pub active_since: Option<f64>,
    /// Time of the latest transition.
    pub last_transition: Option<f64>,
    /// Number of transitions so far (the latest transition's `seq`).
    pub seq: u64,
    /// The operator of the latest accepted command.
    pub last_user: Option<String>,
}

crate::word_enum! {
    /// The one state an alarm shows (see the module doc for the order).
    #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
    pub enum AlarmState {
        /// Condition gone, nothing owed.
        Normal = "normal",
        /// Condition present, not yet acknowledged.
        Unacknowledged = "unacknowledged",
        /// Condition present, acknowledged.
        Acknowledged = "acknowledged",
        /// Condition gone before it was acknowledged.
        RtnUnacknowledged = "rtn_unacknowledged",
        /// Condition gone, latch holding until reset.
        Latched = "latched",
        /// Hidden by an operator until `shelved_until`.
        Shelved = "shelved",
        /// Hidden by design logic.
        Suppressed = "suppressed",
        /// Taken away for maintenance.
        OutOfService = "out_of_service",
    }
}

crate::word_enum! {
    /// What made a transition.
    #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
    pub enum Cause {
        /// The condition appeared (after its on-delay).
        Activated = "activated",
        /// The condition went (after its off-delay).
        Returned = "returned",
        /// A shelve ran out.
        ShelveExpired = "shelve_expired",
        /// An operator acknowledged.
        Acknowledged = "acknowledged",
        /// An operator shelved (or shelved again, restarting the time).
        Shelved = "shelved",
        /// An operator unshelved.
        Unshelved = "unshelved",
        /// An operator reset a latch.
        Reset = "reset",
        /// Taken out of service.
        OutOfService = "out_of_service",
        /// Returned to service.
        InService = "in_service",
        /// Design logic suppressed it.
        Suppressed = "suppressed",
        /// Design logic lifted its suppression.
        Unsuppressed = "unsuppressed",
    }
}

/// An operator's name in a transition: at most [`MAX_TEXT_CHARS`]
/// characters, so four bytes each fit without allocation.
pub type User = heapless::String<{ 4 * MAX_TEXT_CHARS }>;

/// A change of an alarm, for the event log and the events topic.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Transition {
    /// When it happened (the `now` of the call).
    pub time: Timestamp,
    /// The state last reported before it.
    pub from: AlarmState,
    /// The state after it.
    pub to: AlarmState,
    /// The `active` flag after it.
    pub active: bool,
    /// The latest valid value (None if the latest was not valid).
    pub value: Option<f64>,
    /// 1 for an alarm's first transition, then one more each time.
    pub seq: u64,
    pub cause: Cause,
    /// The operator, for operator commands.
    pub by: Option<User>,
}

/// One alarm: its spec, its persistent flags and its delay timers.
#[derive(Debug, Clone)]
pub struct Alarm {
    spec: AlarmSpec,
    flags: AlarmFlags,
    /// Since when the activation test has passed on every value (on-delay).
    on_since: Option<Timestamp>,
    /// Since when the return test has passed on every value (off-delay).
    off_since: Option<Timestamp>,
    /// The latest valid value.
    last_value: Option<f64>,
    /// The state as of the latest reported transition (or as restored).
    reported: AlarmState,
}

impl Alarm {
    /// A new alarm in `Normal`.
    pub fn new(spec: AlarmSpec) -> Self {
        Self::with_flags(spec, AlarmFlags::default())
    }

    /// Restores an alarm after a restart. Consistent flags are kept as they
    /// are; a record that contradicts itself (hand-edited, or a spec changed
    /// since) loses what cannot hold, erring toward telling the operator again:
    ///
    /// - a time that is not finite is dropped;
    /// - an activation with no start time is dropped (if the condition is
    ///   still there, it activates anew, unacknowledged);
    /// - a latch holds only on a latching, inactive alarm.
    ///
    /// Delay timers are not persistent: a delay that was running starts
    /// again with the first value after the restart. A shelve that ran out
    /// while the daemon was down is reported by the first `tick`.
    pub fn with_flags(spec: AlarmSpec, flags: AlarmFlags) -> Self {
        let mut f = flags;
        let finite = |t: Option<f64>| t.filter(|s| s.is_finite());
        f.shelved_until = finite(f.shelved_until);
        f.active_since = finite(f.active_since);
        f.last_transition = finite(f.last_transition);
        if f.active_since.is_none() {
            f.active = false;
            f.acknowledged = false;
            f.latched = false;
        }
        if f.active || !spec.latch {
            f.latched = false;
        }
        let mut alarm = Alarm {
            spec,
            flags: f,
            on_since: None,
            off_since: None,
            last_value: None,
            reported: AlarmState::Normal,
        };
        alarm.reported = alarm.derive(alarm.flags.shelved_until.is_some());
        alarm
    }

    pub fn spec(&self) -> &AlarmSpec {
        &self.spec
    }

    pub fn flags(&self) -> &AlarmFlags {
        &self.flags
    }

    /// The next time [`Self::tick`] has work: a shelve running out or a
    /// delay completing (`None` when neither is pending).
    pub fn next_deadline(&self) -> Option<Timestamp> {
        let shelve = self.flags.shelved_until.map(Timestamp::from_epoch_s);
        // The instants `complete_delays` accepts, to the last bit.
        let after = |t0: Timestamp, delay_s: f64| {
            let d = delay_s.max(0.0);
            t0.plus_s(d).first_when(|t| t.since(t0) >= d)
        };
        let on = self
            .on_since
            .filter(|_| !self.flags.active)
            .map(|t0| after(t0, self.spec.on_delay_s));
        let off = self
            .off_since
            .filter(|_| self.flags.active)
            .map(|t0| after(t0, self.spec.off_delay_s));
        [shelve, on, off]
            .into_iter()
            .flatten()
            .filter(|t| t.epoch_s().is_finite())
            .min_by(|a, b| a.epoch_s().total_cmp(&b.epoch_s()))
    }

    /// Is the alarm shelved at `now`? A shelve ends at `shelved_until` itself.
    pub fn shelved(&self, now: Timestamp) -> bool {
        self.flags
            .shelved_until
            .is_some_and(|until| now.epoch_s() < until)
    }

    /// The state shown at `now`, derived from the flags alone (see the
    /// module doc for the order of the overlays).
    pub fn state(&self, now: Timestamp) -> AlarmState {
        self.derive(self.shelved(now))
    }

    /// The process part of the state (ISA-18.2's states A to E), ignoring
    /// shelving, suppression and out of service: what the alarm will show
    /// once those lift.
    pub fn base_state(&self) -> AlarmState {
        let f = &self.flags;
        if f.active {
            if f.acknowledged {
                AlarmState::Acknowledged
            } else {
                AlarmState::Unacknowledged
            }
        } else if f.latched {
            AlarmState::Latched
        } else if !f.acknowledged && f.active_since.is_some() {
            AlarmState::RtnUnacknowledged
        } else {
            AlarmState::Normal
        }
    }

    fn derive(&self, shelved: bool) -> AlarmState {
        if self.flags.out_of_service {
            AlarmState::OutOfService
        } else if shelved {
            AlarmState::Shelved
        } else if self.flags.suppressed {
            AlarmState::Suppressed
        } else {
            self.base_state()
        }
    }

    /// Would a person be told of this alarm at `now` (not shelved,
    /// suppressed or out of service)?
    pub fn announced(&self, now: Timestamp) -> bool {
        !(self.flags.out_of_service || self.shelved(now) || self.flags.suppressed)
    }

    /// Evaluates a new value at `now` (None, or a value that is not finite:
    /// no valid value — the condition holds as it is and any running delay
    /// restarts with the next valid value). Returns a transition when the
    /// shown state or the `active` flag changes (a shelve running out
    /// counts). Allocation-free.
    pub fn evaluate(&mut self, value: Option<f64>, now: Timestamp) -> Option<Transition> {
        let before_active = self.flags.active;
        self.expire_shelve(now);
        match value.filter(|v| v.is_finite()) {
            None => {
                self.last_value = None;
                self.on_since = None;
                self.off_since = None;
            }
            Some(v) => {
                self.last_value = Some(v);
                if self.flags.active {
                    self.on_since = None;
                    if self.spec.returns(v) {
                        self.off_since.get_or_insert(now);
                    } else {
                        self.off_since = None;
                    }
                } else {
                    self.off_since = None;
                    if self.spec.activates(v) {
                        self.on_since.get_or_insert(now);
                    } else {
                        self.on_since = None;
                    }
                }
                self.complete_delays(now);
            }
        }
        self.report_process(before_active, now)
    }

    /// Advances time without a new value: a shelve running out, and a
    /// running on- or off-delay completing on the last valid value.
    /// Allocation-free.
    pub fn tick(&mut self, now: Timestamp) -> Option<Transition> {
        let before_active = self.flags.active;
        self.expire_shelve(now);
        self.complete_delays(now);
        self.report_process(before_active, now)
    }

    /// Acknowledges the latest activation (in `Unacknowledged`,
    /// `RtnUnacknowledged`, or an unacknowledged `Latched`; also while
    /// shelved, suppressed or out of service).
    pub fn acknowledge(&mut self, by: &str, now: Timestamp) -> Result<Transition, CommandError> {
        check_text("by", by)?;
        if self.flags.acknowledged || self.flags.active_since.is_none() {
            return Err(CommandError::NothingToAcknowledge);
        }
        self.flags.acknowledged = true;
        Ok(self.record_command(Cause::Acknowledged, Some(by), now))
    }

    /// Shelves the alarm for `minutes` (above 0, at most
    /// [`MAX_SHELVE_MIN`]); shelving again restarts the time. Allowed in any
    /// state (as OPC UA Part 9's `TimedShelve`).
    pub fn shelve(
        &mut self,
        by: &str,
        minutes: f64,
        now: Timestamp,
    ) -> Result<Transition, CommandError> {
        check_text("by", by)?;
        check_shelve_minutes(minutes)?;
        self.flags.shelved_until = Some(now.epoch_s() + minutes * 60.0);
        Ok(self.record_command(Cause::Shelved, Some(by), now))
    }

    /// Ends a shelve before its time.
    pub fn unshelve(&mut self, by: &str, now: Timestamp) -> Result<Transition, CommandError> {
        check_text("by", by)?;
        if !self.shelved(now) {
            return Err(CommandError::NotShelved);
        }
        self.flags.shelved_until = None;
        Ok(self.record_command(Cause::Unshelved, Some(by), now))
    }

    /// Clears a holding latch. As OPC UA Part 9 (v1.05 §5.8.5 `Reset`) has it,
    /// the alarm must have returned to normal and been acknowledged: the
    /// condition must be gone (no activation test passing, not even inside
    /// a running on-delay) and the activation acknowledged.
    pub fn reset(&mut self, by: &str, now: Timestamp) -> Result<Transition, CommandError> {
        check_text("by", by)?;
        if !self.spec.latch {
            return Err(CommandError::NotLatched);
        }
        if self.flags.active || self.on_since.is_some() {
            return Err(CommandError::ConditionStillPresent);
        }
        if !self.flags.latched {
            return Err(CommandError::NotLatched);
        }
        if !self.flags.acknowledged {
            return Err(CommandError::NotAcknowledged);
        }
        self.flags.latched = false;
        Ok(self.record_command(Cause::Reset, Some(by), now))
    }

    /// Takes the alarm out of service (`oos` true) or returns it to service.
    pub fn set_out_of_service(
        &mut self,
        oos: bool,
        by: &str,
        now: Timestamp,
    ) -> Result<Transition, CommandError> {
        check_text("by", by)?;
        match (self.flags.out_of_service, oos) {
            (true, true) => return Err(CommandError::AlreadyOutOfService),
            (false, false) => return Err(CommandError::AlreadyInService),
            _ => {}
        }
        self.flags.out_of_service = oos;
        let cause = if oos {
            Cause::OutOfService
        } else {
            Cause::InService
        };
        Ok(self.record_command(cause, Some(by), now))
    }

    /// Suppression by design (no operator; e.g. the channel went faulty).
    /// Returns a transition when the flag changes; setting it to what it
    /// already is does nothing.
    pub fn set_suppressed(&mut self, suppressed: bool, now: Timestamp) -> Option<Transition> {
        if self.flags.suppressed == suppressed {
            return None;
        }
        self.flags.suppressed = suppressed;
        let cause = if suppressed {
            Cause::Suppressed
        } else {
            Cause::Unsuppressed
        };
        Some(self.record_command(cause, None, now))
    }

    fn expire_shelve(&mut self, now: Timestamp) {
        if self.flags.shelved_until.is_some() && !self.shelved(now) {
            self.flags.shelved_until = None;
        }
    }

    fn complete_delays(&mut self, now: Timestamp) {
        // `f64::max` maps a NaN delay to 0.
        if let Some(t0) = self.on_since {
            if !self.flags.active && now.since(t0) >= self.spec.on_delay_s.max(0.0) {
                self.flags.active = true;
                self.flags.acknowledged = false;
                self.flags.latched = false;
                self.flags.active_since = Some(now.epoch_s());
                self.on_since = None;
            }
        }
        if let Some(t0) = self.off_since {
            if self.flags.active && now.since(t0) >= self.spec.off_delay_s.max(0.0) {
                self.flags.active = false;
                self.flags.latched = self.spec.latch;
                self.off_since = None;
            }
        }
    }

    /// The transition of an `evaluate` or `tick`, if anything shown changed.
    fn report_process(&mut self, before_active: bool, now: Timestamp) -> Option<Transition> {
        let to = self.state(now);
        let cause = match (before_active, self.flags.active) {
            (false, true) => Cause::Activated,
            (true, false) => Cause::Returned,
            _ if to != self.reported => Cause::ShelveExpired,
            _ => return None,
        };
        Some(self.emit(to, cause, None, now))
    }

    /// The transition of an accepted command (always one: it is the audit
    /// record, even where the shown state stays the same).
    fn record_command(&mut self, cause: Cause, by: Option<&str>, now: Timestamp) -> Transition {
        self.expire_shelve(now);
        if let Some(by) = by {
            self.flags.last_user = Some(by.to_owned());
        }
        let to = self.state(now);
        // `by` passed `check_text`, so it fits; a failure would only drop the name.
        let by = by.and_then(|b| User::try_from(b).ok());
        self.emit(to, cause, by, now)
    }

    fn emit(
        &mut self,
        to: AlarmState,
        cause: Cause,
        by: Option<User>,
        now: Timestamp,
    ) -> Transition {
        self.flags.seq = self.flags.seq.saturating_add(1);
        self.flags.last_transition = Some(now.epoch_s());
        let from = core::mem::replace(&mut self.reported, to);
        Transition {
            time: now,
            from,
            to,
            active: self.flags.active,
            value: self.last_value,
            seq: self.flags.seq,
            cause,
            by,
        }
    }
}

/// Checks a shelve duration: above 0 and at most [`MAX_SHELVE_MIN`] minutes.
pub fn check_shelve_minutes(minutes: f64) -> Result<(), CommandError> {
    if minutes.is_finite() && minutes > 0.0 && minutes <= MAX_SHELVE_MIN {
        Ok(())
    } else {
        Err(CommandError::BadMinutes)
    }
}

#[cfg(test)]
mod tests {
    //! The expected states come from the ISA-18.2 / IEC 62682 alarm state
    //! diagram as publicly summarised (states A normal, B unacknowledged,
    //! C acknowledged, D returned unacknowledged, E latched, F shelved,
    //! G suppressed by design, H out of service) and its open mapping in
    //! OPC UA Part 9 (OPC 10000-9, §4.8 and §5.8, reference.opcfoundation.org).
    //! Times are on a quarter-second grid so that they are exact in binary
    //! and survive a JSON round trip bit for bit.

    use super::*;
    use proptest::prelude::*;

    /// 2026-12-02T08:00:00Z.
    const T0: f64 = 1_796_198_400.0;

    /// A log line and the events topic spell a cause the same way.
    #[test]
    fn cause_names_are_the_event_words() {
        use Cause::*;
        for c in [
            Activated,
            Returned,
            ShelveExpired,
            Acknowledged,
            Shelved,
            Unshelved,
            Reset,
            OutOfService,
            InService,
            Suppressed,
            Unsuppressed,
        ] {
            assert_eq!(serde_json::to_value(c).unwrap(), c.name(), "{c:?}");
        }
    }

    fn at(s: f64) -> Timestamp {
        Timestamp::from_epoch_s(T0 + s)
    }

    fn spec(kind: AlarmKind, setpoint: f64, deadband: f64) -> AlarmSpec {
        AlarmSpec {
            kind,
            setpoint,
            deadband,
            on_delay_s: 0.0,
            off_delay_s: 0.0,
            latch: false,
            priority: Priority::High,
        }
    }

    /// High alarm at 100 with a 2 deadband: activates at ≥ 100, returns below 98.
    fn high() -> Alarm {
        Alarm::new(spec(AlarmKind::High, 100.0, 2.0))
    }

    fn latching() -> Alarm {
        Alarm::new(AlarmSpec {
            latch: true,
            ..spec(AlarmKind::High, 100.0, 2.0)
        })
    }

    fn moved(t: Option<Transition>) -> (AlarmState, AlarmState, bool, Cause) {
        let t = t.expect("a transition");
        (t.from, t.to, t.active, t.cause)
    }

    fn cmd(t: Result<Transition, CommandError>) -> (AlarmState, AlarmState, Cause) {
        let t = t.expect("the command is accepted");
        (t.from, t.to, t.cause)
    }

    use AlarmState::*;

    // --- ISA-18.2 transitions, one by one ---

    #[test]
    fn normal_to_unacknowledged_when_the_value_reaches_the_setpoint() {
        let mut a = high();
        assert_eq!(a.state(at(0.0)), Normal);
        // 99.99 < 100: no activation; 100.0 ≥ 100: activation (the test is ≥).
        assert_eq!(a.evaluate(Some(99.99), at(0.0)), None);
        let t = a.evaluate(Some(100.0), at(1.0)).expect("activation");
        assert_eq!(
            (t.from, t.to, t.active, t.cause),
            (Normal, Unacknowledged, true, Cause::Activated)
        );
        assert_eq!((t.seq, t.value, t.by.as_deref()), (1, Some(100.0), None));
        assert_eq!(t.time, at(1.0));
        assert_eq!(a.flags().active_since, Some(T0 + 1.0));
        assert_eq!(a.flags().last_transition, Some(T0 + 1.0));
        // Staying above the setpoint changes nothing.
        assert_eq!(a.evaluate(Some(120.0), at(2.0)), None);
    }

    #[test]
    fn unacknowledged_to_acknowledged_then_normal_on_return() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        let t = a.acknowledge("j.smith", at(5.0)).unwrap();
        assert_eq!(
            (t.from, t.to, t.cause, t.seq),
            (Unacknowledged, Acknowledged, Cause::Acknowledged, 2)
        );
        assert_eq!(t.by.as_deref(), Some("j.smith"));
        assert_eq!(a.flags().last_user.as_deref(), Some("j.smith"));
        // 98.0 is inside the deadband (return needs < 100 − 2): no return.
        assert_eq!(a.evaluate(Some(98.0), at(6.0)), None);
        assert_eq!(
            moved(a.evaluate(Some(97.99), at(7.0))),
            (Acknowledged, Normal, false, Cause::Returned)
        );
        assert_eq!(a.flags().seq, 3);
    }

    #[test]
    fn unacknowledged_to_returned_unacknowledged_then_normal_on_ack() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        assert_eq!(
            moved(a.evaluate(Some(90.0), at(1.0))),
            (Unacknowledged, RtnUnacknowledged, false, Cause::Returned)
        );
        assert_eq!(
            cmd(a.acknowledge("op", at(2.0))),
            (RtnUnacknowledged, Normal, Cause::Acknowledged)
        );
    }

    #[test]
    fn returned_unacknowledged_back_to_unacknowledged_on_a_new_activation() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        a.evaluate(Some(90.0), at(1.0));
        assert_eq!(
            moved(a.evaluate(Some(101.0), at(2.0))),
            (RtnUnacknowledged, Unacknowledged, true, Cause::Activated)
        );
        assert_eq!(a.flags().active_since, Some(T0 + 2.0));
    }

    #[test]
    fn a_new_activation_after_acknowledged_normal_needs_a_new_ack() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        a.acknowledge("op", at(1.0)).unwrap();
        a.evaluate(Some(90.0), at(2.0));
        assert_eq!(a.state(at(2.0)), Normal);
        assert_eq!(
            moved(a.evaluate(Some(100.0), at(3.0))),
            (Normal, Unacknowledged, true, Cause::Activated)
        );
        assert!(!a.flags().acknowledged);
    }

    #[test]
    fn latching_alarm_acknowledged_then_returned_is_latched_until_reset() {
        let mut a = latching();
        a.evaluate(Some(105.0), at(0.0));
        a.acknowledge("op", at(1.0)).unwrap();
        assert_eq!(
            moved(a.evaluate(Some(90.0), at(2.0))),
            (Acknowledged, Latched, false, Cause::Returned)
        );
        assert_eq!(a.evaluate(Some(80.0), at(3.0)), None);
        assert_eq!(
            a.tick(at(10_000.0)),
            None,
            "a latch never lets go by itself"
        );
        assert_eq!(
            cmd(a.reset("op", at(10_001.0))),
            (Latched, Normal, Cause::Reset)
        );
        assert!(!a.flags().latched);
    }

    #[test]
    fn latching_alarm_returned_unacknowledged_must_be_acknowledged_before_reset() {
        // OPC 10000-9 §5.8.5 Reset: Bad_InvalidState while the alarm "still
        // requires acknowledgement".
        let mut a = latching();
        a.evaluate(Some(105.0), at(0.0));
        assert_eq!(
            moved(a.evaluate(Some(90.0), at(1.0))),
            (Unacknowledged, Latched, false, Cause::Returned)
        );
        assert_eq!(a.reset("op", at(2.0)), Err(CommandError::NotAcknowledged));
        // Acknowledging changes a flag, not the state: still an audit record.
        assert_eq!(
            cmd(a.acknowledge("op", at(3.0))),
            (Latched, Latched, Cause::Acknowledged)
        );
        assert_eq!(cmd(a.reset("op", at(4.0))), (Latched, Normal, Cause::Reset));
    }

    #[test]
    fn latched_alarm_activating_again_is_unacknowledged() {
        let mut a = latching();
        a.evaluate(Some(105.0), at(0.0));
        a.acknowledge("op", at(1.0)).unwrap();
        a.evaluate(Some(90.0), at(2.0));
        assert_eq!(
            moved(a.evaluate(Some(100.0), at(3.0))),
            (Latched, Unacknowledged, true, Cause::Activated)
        );
        assert!(!a.flags().latched && !a.flags().acknowledged);
    }

    #[test]
    fn reset_errors() {
        let mut plain = high();
        plain.evaluate(Some(105.0), at(0.0));
        assert_eq!(plain.reset("op", at(1.0)), Err(CommandError::NotLatched));

        let mut a = latching();
        assert_eq!(
            a.reset("op", at(0.0)),
            Err(CommandError::NotLatched),
            "nothing latched yet"
        );
        a.evaluate(Some(105.0), at(1.0));
        a.acknowledge("op", at(2.0)).unwrap();
        let seq = a.flags().seq;
        assert_eq!(
            a.reset("op", at(3.0)),
            Err(CommandError::ConditionStillPresent)
        );
        assert_eq!(a.flags().seq, seq, "a refused command changes nothing");
        assert_eq!(a.state(at(3.0)), Acknowledged);
        // Inside the deadband the condition has not gone either.
        a.evaluate(Some(99.0), at(4.0));
        assert_eq!(
            a.reset("op", at(5.0)),
            Err(CommandError::ConditionStillPresent)
        );
    }

    #[test]
    fn reset_is_refused_while_the_condition_is_back_inside_its_on_delay() {
        let mut a = Alarm::new(AlarmSpec {
            latch: true,
            on_delay_s: 30.0,
            ..spec(AlarmKind::High, 100.0, 2.0)
        });
        a.evaluate(Some(105.0), at(0.0));
        a.tick(at(30.0));
        a.acknowledge("op", at(31.0)).unwrap();
        a.evaluate(Some(90.0), at(32.0));
        assert_eq!(a.state(at(32.0)), Latched);
        a.evaluate(Some(101.0), at(33.0)); // not yet active: 30 s on-delay
        assert_eq!(
            a.reset("op", at(34.0)),
            Err(CommandError::ConditionStillPresent)
        );
        a.evaluate(Some(95.0), at(35.0));
        assert_eq!(
            cmd(a.reset("op", at(36.0))),
            (Latched, Normal, Cause::Reset)
        );
    }

    #[test]
    fn acknowledging_nothing_is_an_error_not_a_crash() {
        let mut a = high();
        assert_eq!(
            a.acknowledge("op", at(0.0)),
            Err(CommandError::NothingToAcknowledge)
        );
        a.evaluate(Some(105.0), at(1.0));
        a.acknowledge("op", at(2.0)).unwrap();
        assert_eq!(
            a.acknowledge("op", at(3.0)),
            Err(CommandError::NothingToAcknowledge)
        );
        a.evaluate(Some(50.0), at(4.0));
        assert_eq!(
            a.acknowledge("op", at(5.0)),
            Err(CommandError::NothingToAcknowledge)
        );
        assert_eq!(
            a.flags().seq,
            3,
            "activation, ack, return: refused acks add nothing"
        );
    }

    // --- Overlays: shelved, suppressed, out of service ---

    #[test]
    fn shelving_hides_the_alarm_and_ends_by_itself_at_shelved_until() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        let t = a.shelve("op", 1.0, at(10.0)).unwrap();
        assert_eq!(
            (t.from, t.to, t.cause),
            (Unacknowledged, Shelved, Cause::Shelved)
        );
        assert_eq!(a.flags().shelved_until, Some(T0 + 70.0));
        assert!(!a.announced(at(10.0)));
        // Still evaluated: the return shows in `active` while shelved.
        assert_eq!(
            moved(a.evaluate(Some(90.0), at(20.0))),
            (Shelved, Shelved, false, Cause::Returned)
        );
        assert_eq!(a.base_state(), RtnUnacknowledged);
        assert_eq!(a.tick(at(69.75)), None);
        assert_eq!(a.state(at(69.75)), Shelved);
        // At shelved_until itself the shelve is over.
        assert_eq!(a.state(at(70.0)), RtnUnacknowledged);
        assert!(a.announced(at(70.0)));
        assert_eq!(
            moved(a.tick(at(70.0))),
            (Shelved, RtnUnacknowledged, false, Cause::ShelveExpired)
        );
        assert_eq!(a.flags().shelved_until, None);
        assert_eq!(a.tick(at(71.0)), None);
    }

    #[test]
    fn shelve_limits() {
        let mut a = high();
        for bad in [0.0, -1.0, f64::NAN, f64::INFINITY, MAX_SHELVE_MIN + 0.25] {
            assert_eq!(
                a.shelve("op", bad, at(0.0)),
                Err(CommandError::BadMinutes),
                "{bad}"
            );
        }
        assert_eq!(a.flags().shelved_until, None);
        a.shelve("op", MAX_SHELVE_MIN, at(0.0)).unwrap();
        assert_eq!(a.flags().shelved_until, Some(T0 + 86_400.0));
        // Shelving again restarts the time.
        a.shelve("op", 0.25, at(100.0)).unwrap();
        assert_eq!(a.flags().shelved_until, Some(T0 + 115.0));
    }

    #[test]
    fn unshelve() {
        let mut a = high();
        assert_eq!(a.unshelve("op", at(0.0)), Err(CommandError::NotShelved));
        a.shelve("op", 5.0, at(0.0)).unwrap();
        assert_eq!(
            cmd(a.unshelve("op", at(1.0))),
            (Shelved, Normal, Cause::Unshelved)
        );
        a.shelve("op", 1.0, at(10.0)).unwrap();
        assert_eq!(
            a.unshelve("op", at(70.0)),
            Err(CommandError::NotShelved),
            "already ran out"
        );
    }

    #[test]
    fn out_of_service_is_never_announced_and_still_evaluated() {
        let mut a = high();
        assert_eq!(
            cmd(a.set_out_of_service(true, "maint", at(0.0))),
            (Normal, OutOfService, Cause::OutOfService)
        );
        assert_eq!(
            a.set_out_of_service(true, "maint", at(1.0)),
            Err(CommandError::AlreadyOutOfService)
        );
        assert!(!a.announced(at(1.0)));
        assert_eq!(
            moved(a.evaluate(Some(150.0), at(2.0))),
            (OutOfService, OutOfService, true, Cause::Activated)
        );
        assert!(!a.announced(at(2.0)));
        assert_eq!(
            cmd(a.set_out_of_service(false, "maint", at(3.0))),
            (OutOfService, Unacknowledged, Cause::InService)
        );
        assert_eq!(
            a.set_out_of_service(false, "maint", at(4.0)),
            Err(CommandError::AlreadyInService)
        );
    }

    #[test]
    fn suppression_by_design() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        assert_eq!(
            moved(a.set_suppressed(true, at(1.0))),
            (Unacknowledged, Suppressed, true, Cause::Suppressed)
        );
        assert_eq!(
            a.set_suppressed(true, at(2.0)),
            None,
            "no change, no transition"
        );
        assert!(!a.announced(at(2.0)));
        assert_eq!(
            moved(a.set_suppressed(false, at(3.0))),
            (Suppressed, Unacknowledged, true, Cause::Unsuppressed)
        );
        assert_eq!(a.flags().last_user, None, "design logic is no user");
    }

    #[test]
    fn overlay_order_out_of_service_then_shelved_then_suppressed_then_latched() {
        let mut a = latching();
        a.evaluate(Some(105.0), at(0.0));
        a.evaluate(Some(90.0), at(1.0));
        a.set_suppressed(true, at(2.0));
        a.shelve("op", 10.0, at(3.0)).unwrap();
        a.set_out_of_service(true, "maint", at(4.0)).unwrap();
        assert_eq!(a.state(at(5.0)), OutOfService);
        a.set_out_of_service(false, "maint", at(6.0)).unwrap();
        assert_eq!(a.state(at(6.0)), Shelved);
        a.unshelve("op", at(7.0)).unwrap();
        assert_eq!(a.state(at(7.0)), Suppressed);
        a.set_suppressed(false, at(8.0));
        assert_eq!(a.state(at(8.0)), Latched);
    }

    // --- Delays ---

    fn delayed(on_delay_s: f64, off_delay_s: f64) -> Alarm {
        Alarm::new(AlarmSpec {
            on_delay_s,
            off_delay_s,
            ..spec(AlarmKind::High, 100.0, 2.0)
        })
    }

    #[test]
    fn the_next_deadline_is_the_delay_or_the_shelve_end() {
        let mut a = delayed(30.0, 20.0);
        assert_eq!(a.next_deadline(), None);
        a.evaluate(Some(150.0), at(100.0));
        assert_eq!(a.next_deadline(), Some(at(130.0)), "the on-delay ends");
        assert!(a.tick(at(130.0)).is_some(), "and completes there");
        assert_eq!(a.next_deadline(), None);
        a.evaluate(Some(50.0), at(140.0));
        assert_eq!(a.next_deadline(), Some(at(160.0)), "the off-delay ends");
        a.shelve("op", 5.0, at(150.0)).unwrap();
        assert_eq!(a.next_deadline(), Some(at(160.0)), "the earlier of the two");
        a.tick(at(160.0));
        assert_eq!(a.next_deadline(), Some(at(450.0)), "the shelve's end");
        a.tick(at(450.0));
        assert_eq!(a.next_deadline(), None);
    }

    #[test]
    fn on_delay_completes_at_exactly_its_length() {
        let mut a = delayed(10.0, 0.0);
        assert_eq!(a.evaluate(Some(101.0), at(0.0)), None);
        assert_eq!(a.tick(at(9.75)), None);
        assert_eq!(
            moved(a.tick(at(10.0))),
            (Normal, Unacknowledged, true, Cause::Activated)
        );
        assert_eq!(a.flags().active_since, Some(T0 + 10.0));
        // The same through a value arriving at the boundary.
        let mut b = delayed(10.0, 0.0);
        b.evaluate(Some(101.0), at(0.0));
        assert_eq!(b.evaluate(Some(101.0), at(9.75)), None);
        assert!(b.evaluate(Some(101.0), at(10.0)).is_some());
    }

    #[test]
    fn an_interrupted_excursion_restarts_the_on_delay() {
        let mut a = delayed(10.0, 0.0);
        a.evaluate(Some(101.0), at(0.0));
        a.evaluate(Some(99.5), at(5.0)); // below the setpoint: no deadband before activation
        a.evaluate(Some(101.0), at(6.0));
        assert_eq!(a.tick(at(15.75)), None);
        assert!(a.tick(at(16.0)).is_some());
    }

    #[test]
    fn off_delay_completes_at_exactly_its_length() {
        let mut a = delayed(0.0, 20.0);
        a.evaluate(Some(101.0), at(0.0));
        assert_eq!(a.evaluate(Some(50.0), at(1.0)), None);
        assert_eq!(a.tick(at(20.75)), None);
        assert_eq!(
            moved(a.tick(at(21.0))),
            (Unacknowledged, RtnUnacknowledged, false, Cause::Returned)
        );
        // A value back inside the deadband restarts the off-delay.
        let mut b = delayed(0.0, 20.0);
        b.evaluate(Some(101.0), at(0.0));
        b.evaluate(Some(50.0), at(1.0));
        b.evaluate(Some(98.5), at(10.0));
        b.evaluate(Some(50.0), at(11.0));
        assert_eq!(b.tick(at(30.75)), None);
        assert!(b.tick(at(31.0)).is_some());
    }

    #[test]
    fn a_missing_value_holds_the_condition_and_breaks_a_running_delay() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        assert_eq!(a.evaluate(None, at(1.0)), None);
        assert_eq!(a.evaluate(Some(f64::NAN), at(2.0)), None);
        assert!(a.flags().active);

        let mut b = delayed(10.0, 0.0);
        b.evaluate(Some(105.0), at(0.0));
        b.evaluate(None, at(5.0));
        assert_eq!(
            b.tick(at(100.0)),
            None,
            "no activation without continuous evidence"
        );
        assert!(!b.flags().active);
    }

    // --- Kinds ---

    #[test]
    fn low_alarm_mirrors_high() {
        let mut a = Alarm::new(spec(AlarmKind::Low, 10.0, 1.0));
        assert_eq!(a.evaluate(Some(10.01), at(0.0)), None);
        assert!(a.evaluate(Some(10.0), at(1.0)).is_some());
        assert_eq!(
            a.evaluate(Some(11.0), at(2.0)),
            None,
            "return needs > 10 + 1"
        );
        assert!(!a.evaluate(Some(11.01), at(3.0)).expect("return").active);
    }

    #[test]
    fn rate_alarm_works_on_the_magnitude() {
        let mut a = Alarm::new(spec(AlarmKind::RateHigh, 50.0, 5.0));
        assert!(
            a.evaluate(Some(-50.0), at(0.0)).is_some(),
            "cooling at 50 °C/h"
        );
        assert_eq!(
            a.evaluate(Some(45.0), at(1.0)),
            None,
            "return needs |rate| < 45"
        );
        assert!(!a.evaluate(Some(-44.9), at(2.0)).expect("return").active);
    }

    #[test]
    fn deviation_alarm_works_on_the_magnitude() {
        let mut a = Alarm::new(spec(AlarmKind::Deviation, 10.0, 2.0));
        assert_eq!(a.evaluate(Some(-9.9), at(0.0)), None);
        assert!(a.evaluate(Some(-12.0), at(1.0)).is_some());
        assert!(!a.evaluate(Some(7.9), at(2.0)).expect("return").active);
    }

    #[test]
    fn diagnostic_alarm_ignores_setpoint_and_deadband() {
        let mut a = Alarm::new(spec(AlarmKind::Diagnostic, 1000.0, 50.0));
        assert!(a.evaluate(Some(1.0), at(0.0)).is_some());
        assert!(!a.evaluate(Some(0.0), at(1.0)).expect("return").active);
    }

    // --- Restore, validation, serialisation ---

    #[test]
    fn restore_keeps_consistent_flags_and_repairs_contradictions() {
        let mut a = latching();
        a.evaluate(Some(105.0), at(0.0));
        a.acknowledge("op", at(1.0)).unwrap();
        let b = Alarm::with_flags(*a.spec(), a.flags().clone());
        assert_eq!(b.flags(), a.flags());
        assert_eq!(b.state(at(2.0)), Acknowledged);

        let active_without_start = AlarmFlags {
            active: true,
            acknowledged: true,
            ..AlarmFlags::default()
        };
        let c = Alarm::with_flags(*a.spec(), active_without_start);
        assert_eq!(
            c.state(at(0.0)),
            Normal,
            "dropped: it activates anew if still present"
        );

        let latched_but_not_latching = AlarmFlags {
            latched: true,
            acknowledged: true,
            active_since: Some(T0),
            shelved_until: Some(f64::NAN),
            ..AlarmFlags::default()
        };
        let d = Alarm::with_flags(spec(AlarmKind::High, 100.0, 2.0), latched_but_not_latching);
        assert_eq!(d.state(at(0.0)), Normal);
        assert_eq!(d.flags().shelved_until, None);
    }

    #[test]
    fn saved_flags_missing_a_field_still_load_and_specs_reject_unknown_keys() {
        let f: AlarmFlags =
            serde_json::from_str(r#"{"active":true,"active_since":5.0,"seq":3}"#).unwrap();
        assert_eq!(
            (f.active, f.active_since, f.seq, f.acknowledged),
            (true, Some(5.0), 3, false)
        );
        let bad = r#"{"kind":"high","setpoint":1,"deadband":0,"on_delay_s":0,"off_delay_s":0,
                      "latch":false,"priority":"low","setpiont":2}"#;
        assert!(serde_json::from_str::<AlarmSpec>(bad).is_err());
    }

    #[test]
    fn a_shelve_that_ran_out_during_a_restart_is_reported_by_the_first_tick() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        a.shelve("op", 1.0, at(0.0)).unwrap();
        let mut b = Alarm::with_flags(*a.spec(), a.flags().clone());
        assert_eq!(b.state(at(120.0)), Unacknowledged);
        assert_eq!(
            moved(b.tick(at(120.0))),
            (Shelved, Unacknowledged, true, Cause::ShelveExpired)
        );
    }

    #[test]
    fn commands_check_the_user() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        assert_eq!(
            a.acknowledge("", at(1.0)),
            Err(CommandError::EmptyField("by"))
        );
        assert_eq!(
            a.acknowledge(&"x".repeat(65), at(1.0)),
            Err(CommandError::TooLong("by"))
        );
        assert_eq!(
            a.shelve("op\n", 5.0, at(1.0)),
            Err(CommandError::ControlCharacter("by"))
        );
        // 64 four-byte characters fit in a `User` (256 bytes).
        let t = a.acknowledge(&"😀".repeat(64), at(1.0)).unwrap();
        assert_eq!(t.by.map(|u| u.chars().count()), Some(64));
    }

    #[test]
    fn spec_validation() {
        let ok = spec(AlarmKind::High, 100.0, 2.0);
        assert_eq!(ok.validate(), Ok(()));
        assert_eq!(
            AlarmSpec {
                setpoint: f64::NAN,
                ..ok
            }
            .validate(),
            Err(SpecError::Setpoint)
        );
        assert_eq!(
            AlarmSpec {
                deadband: -1.0,
                ..ok
            }
            .validate(),
            Err(SpecError::Deadband)
        );
        assert_eq!(
            AlarmSpec {
                on_delay_s: f64::INFINITY,
                ..ok
            }
            .validate(),
            Err(SpecError::Delay)
        );
        let rate = spec(AlarmKind::RateHigh, 50.0, 50.0);
        assert_eq!(
            rate.validate(),
            Err(SpecError::Deadband),
            "|rate| < 0 never returns"
        );
        assert_eq!(
            AlarmSpec {
                setpoint: 0.0,
                ..rate
            }
            .validate(),
            Err(SpecError::Setpoint)
        );
    }

    #[test]
    fn transition_serialises_with_an_rfc3339_time_and_snake_case_states() {
        let mut a = high();
        a.evaluate(Some(105.0), at(0.0));
        let t = a.acknowledge("op", at(0.25)).unwrap();
        let json = serde_json::to_value(&t).unwrap();
        assert_eq!(json["time"], "2026-12-02T08:00:00.250Z");
        assert_eq!(json["from"], "unacknowledged");
        assert_eq!(json["to"], "acknowledged");
        assert_eq!(json["cause"], "acknowledged");
        assert_eq!(json["by"], "op");
        assert_eq!(json["seq"], 2);
        for s in [
            Normal,
            Unacknowledged,
            Acknowledged,
            RtnUnacknowledged,
            Latched,
            Shelved,
            Suppressed,
            OutOfService,
        ] {
            assert_eq!(serde_json::to_value(s).unwrap(), s.name());
        }
    }

    // --- Properties over random operation sequences ---

    #[derive(Debug, Clone)]
    enum Op {
        /// A value, negated for the magnitude kinds when the flag says so.
        Value(Option<f64>, bool),
        Tick,
        Ack,
        Shelve(f64),
        Unshelve,
        Reset,
        Oos(bool),
        Suppress(bool),
        Advance(f64),
        Restart,
    }

    fn op() -> impl Strategy<Value = Op> {
        prop_oneof![
            6 => ((-12i32..=12), any::<bool>())
                .prop_map(|(k, neg)| Op::Value(Some(100.0 + 0.5 * f64::from(k)), neg)),
            1 => Just(Op::Value(None, false)),
            3 => Just(Op::Tick),
            2 => Just(Op::Ack),
            1 => (1u32..=20).prop_map(|q| Op::Shelve(0.25 * f64::from(q))),
            1 => Just(Op::Unshelve),
            2 => Just(Op::Reset),
            1 => any::<bool>().prop_map(Op::Oos),
            1 => any::<bool>().prop_map(Op::Suppress),
            6 => (0u32..=160).prop_map(|q| Op::Advance(0.25 * f64::from(q))),
            1 => Just(Op::Restart),
        ]
    }

    fn any_spec() -> impl Strategy<Value = AlarmSpec> {
        (
            prop_oneof![
                Just(AlarmKind::High),
                Just(AlarmKind::Low),
                Just(AlarmKind::RateHigh),
                Just(AlarmKind::Deviation),
                Just(AlarmKind::Diagnostic),
            ],
            0u32..=8,
            0u32..=40,
            0u32..=40,
            any::<bool>(),
        )
            .prop_map(|(kind, db, on, off, latch)| AlarmSpec {
                kind,
                // Magnitude kinds see values around ±100 as well; a diagnostic
                // value ≥ 0.5 is always a fault here, so feed it 0/1 below.
                setpoint: 100.0,
                deadband: 0.5 * f64::from(db),
                on_delay_s: 0.25 * f64::from(on),
                off_delay_s: 0.25 * f64::from(off),
                latch,
                priority: Priority::Medium,
            })
    }

    /// The state derivation written out again from the module doc's rule, to
    /// check `Alarm::state` against.
    fn expected_state(f: &AlarmFlags, now: Timestamp) -> AlarmState {
        let shelved = f.shelved_until.is_some_and(|u| now.epoch_s() < u);
        match () {
            _ if f.out_of_service => OutOfService,
            _ if shelved => Shelved,
            _ if f.suppressed => Suppressed,
            _ if f.active && f.acknowledged => Acknowledged,
            _ if f.active => Unacknowledged,
            _ if f.latched => Latched,
            _ if !f.acknowledged && f.active_since.is_some() => RtnUnacknowledged,
            _ => Normal,
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(512))]

        #[test]
        fn invariants_over_random_sequences(spec in any_spec(), ops in prop::collection::vec(op(), 1..120)) {
            let mut a = Alarm::new(spec);
            let mut now = at(0.0);
            let mut last_seq = 0u64;
            let mut ever_activated = false;
            let mut reset_owed = false;
            for op in ops {
                let result: Option<Transition> = match op {
                    Op::Value(v, neg) => {
                        let v = match spec.kind {
                            AlarmKind::Diagnostic => v.map(|x| if x >= 100.0 { 1.0 } else { 0.0 }),
                            AlarmKind::RateHigh | AlarmKind::Deviation if neg => v.map(|x| -x),
                            _ => v,
                        };
                        a.evaluate(v, now)
                    }
                    Op::Tick => a.tick(now),
                    Op::Ack => a.acknowledge("op", now).ok(),
                    Op::Shelve(m) => a.shelve("op", m, now).ok(),
                    Op::Unshelve => a.unshelve("op", now).ok(),
                    Op::Reset => {
                        let r = a.reset("op", now).ok();
                        if r.is_some() {
                            reset_owed = false;
                        }
                        r
                    }
                    Op::Oos(b) => a.set_out_of_service(b, "op", now).ok(),
                    Op::Suppress(b) => a.set_suppressed(b, now),
                    Op::Advance(s) => {
                        now = now.plus_s(s);
                        None
                    }
                    Op::Restart => {
                        let restored = Alarm::with_flags(spec, a.flags().clone());
                        prop_assert_eq!(restored.flags(), a.flags());
                        a = restored;
                        None
                    }
                };
                if let Some(t) = &result {
                    prop_assert!(t.seq > last_seq, "seq {} after {}", t.seq, last_seq);
                    last_seq = t.seq;
                    prop_assert_eq!(t.seq, a.flags().seq);
                    prop_assert_eq!(t.to, a.state(now));
                    prop_assert_eq!(t.active, a.flags().active);
                    prop_assert_eq!(t.time, now);
                    if t.cause == Cause::Activated {
                        ever_activated = true;
                        reset_owed = spec.latch;
                    }
                }
                let f = a.flags();
                // Never acknowledged without an activation before it.
                prop_assert!(!f.acknowledged || ever_activated);
                // The shown state is the flags' state.
                prop_assert_eq!(a.state(now), expected_state(f, now));
                // A latched alarm reaches Normal only through a reset.
                if reset_owed {
                    prop_assert_ne!(a.base_state(), Normal);
                }
                // A shelve ends by itself at shelved_until.
                if let Some(until) = f.shelved_until {
                    if now.epoch_s() >= until {
                        prop_assert_ne!(a.state(now), Shelved);
                    }
                }
                // Out of service is never announced.
                if f.out_of_service {
                    prop_assert!(!a.announced(now));
                }
                // The flags survive a JSON round trip, and restore the same state.
                let json = serde_json::to_string(f).unwrap();
                let back: AlarmFlags = serde_json::from_str(&json).unwrap();
                prop_assert_eq!(&back, f);
                prop_assert_eq!(Alarm::with_flags(spec, back).state(now), a.state(now));
            }
            // After a tick past any shelve, the shelve flag is gone.
            let later = now.plus_s(MAX_SHELVE_MIN * 60.0);
            a.tick(later);
            prop_assert_eq!(a.flags().shelved_until, None);
        }

        #[test]
        fn deadband_prevents_chatter(
            kind in prop_oneof![Just(AlarmKind::High), Just(AlarmKind::Low), Just(AlarmKind::RateHigh), Just(AlarmKind::Deviation)],
            deadband in 0.5f64..20.0,
            noise in prop::collection::vec((-0.499f64..0.499, 0u32..40), 1..200),
        ) {
            let mut a = Alarm::new(AlarmSpec { deadband, ..spec(kind, 100.0, 0.0) });
            prop_assert!(a.evaluate(Some(100.0), at(0.0)).is_some());
            let mut now = at(0.0);
            for (n, step) in noise {
                now = now.plus_s(0.25 * f64::from(step));
                let v = 100.0 + n * deadband; // |noise| < deadband / 2
                let v = if kind == AlarmKind::Low { 200.0 - v } else { v };
                prop_assert_eq!(a.evaluate(Some(v), now), None);
                prop_assert_eq!(a.tick(now), None);
            }
            prop_assert!(a.flags().active);
        }

        #[test]
        fn on_delay_filters_every_shorter_excursion(
            on_delay_q in 4u32..400,
            excursions in prop::collection::vec((1u32..100, 0.0f64..1.0, 1u32..4), 1..40),
        ) {
            let on_delay_s = 0.25 * f64::from(on_delay_q);
            let mut a = Alarm::new(AlarmSpec { on_delay_s, ..spec(AlarmKind::High, 100.0, 1.0) });
            let mut now = at(0.0);
            for (gap_q, fraction, samples) in excursions {
                now = now.plus_s(0.25 * f64::from(gap_q));
                prop_assert_eq!(a.evaluate(Some(90.0), now), None);
                // An excursion lasting less than the on-delay (a whole number
                // of quarter seconds, at least one quarter short of it).
                let len_q = ((fraction * f64::from(on_delay_q - 1)).floor()).max(0.0);
                let start = now;
                for i in 0..samples {
                    let t = start.plus_s(0.25 * len_q * f64::from(i) / f64::from(samples));
                    prop_assert_eq!(a.evaluate(Some(150.0), t), None);
                    prop_assert_eq!(a.tick(t), None);
                }
                now = start.plus_s(0.25 * len_q);
                prop_assert_eq!(a.tick(now), None);
                prop_assert_eq!(a.evaluate(Some(90.0), now.plus_s(0.25)), None);
                now = now.plus_s(0.25);
            }
            prop_assert!(!a.flags().active);
            prop_assert_eq!(a.flags().seq, 0);
        }
    }
}
