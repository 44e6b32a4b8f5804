//! One thermocouple channel: from a source value to a temperature with a
//! standard uncertainty, and the channel's health.

use serde::Serialize;

use crate::config::{Channel, ChannelKind, Name, Signal};
use crate::physics::thermocouple::{self, TcError};
use crate::physics::tolerance;
use crate::protocol::scan::{self, Unit};
use crate::time::Timestamp;

crate::word_enum! {
    /// Health of a channel, as published on its topic.
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum Health {
        /// A valid, fresh reading.
        Ok = "ok",
        /// The source reports an open thermocouple.
        Open = "open",
        /// A value outside the thermocouple type's range (reversed polarity,
        /// a short, a wrong type configured).
        OutOfRange = "out_of_range",
        /// A value the channel cannot use (millivolts with no cold junction,
        /// a unit that does not match the configured signal).
        Invalid = "invalid",
        /// A step faster than any wall can heat (rejected until confirmed).
        Spike = "spike",
        /// No change while the zone's other probes change.
        Stuck = "stuck",
        /// Inconsistent with the zone's other probes (leave-one-out residual).
        Outlier = "outlier",
        /// No reading for longer than the staleness limit.
        Stale = "stale",
        /// Nothing received yet since start.
        NoData = "no_data",
    }
}

/// A converted reading.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Reading {
    pub time: Timestamp,
    pub celsius: f64,
    /// Standard uncertainty, °C (the tolerance class / √3, or the measured one).
    pub sigma_c: f64,
}

/// What a channel knows now.
#[derive(Debug, Clone)]
pub struct ChannelState {
    /// The latest valid reading (kept when later values are faults, so that
    /// the age tells how stale it is).
    pub latest: Option<Reading>,
    /// Health from the latest value (before staleness is applied).
    pub value_health: Health,
    pub reason: &'static str,
    /// Time of the latest value of any kind.
    pub last_seen: Option<Timestamp>,
    /// Health as last announced (for change detection).
    pub announced: Health,
    /// A fault found by a zone that uses this channel (stuck, outlier).
    pub zone_fault: Option<(Health, &'static str)>,
    /// A large step waiting for confirmation: (°C, time, readings agreeing).
    pub spike_candidate: Option<(f64, Timestamp, u8)>,
}

impl Default for ChannelState {
    fn default() -> Self {
        ChannelState {
            latest: None,
            value_health: Health::NoData,
            reason: "nothing received yet",
            last_seen: None,
            announced: Health::NoData,
            zone_fault: None,
            spike_candidate: None,
        }
    }
}

/// Readings in a row at a new level that make a step real, not a spike.
pub const SPIKE_CONFIRMATIONS: u8 = 3;

/// Plausible range of a box's terminal temperature, °C: the industrial
/// temperature grade of electronic components, −40 to +85 °C (common
/// practice for field enclosures and their input modules). Beyond it the
/// terminal sensor or its wiring is faulty, or the box is outside its
/// rating and its readings cannot be trusted either.
pub const TERMINAL_MIN_C: f64 = -40.0;
pub const TERMINAL_MAX_C: f64 = 85.0;
/// Default spike limit of a terminal sensor, °C/min (a choice of ours): a
/// terminal block is a small thermal mass inside an enclosure, warmed by the
/// box and the room; a faster move is a wiring or sensor fault, not heat.
pub const TERMINAL_SPIKE_C_PER_MIN: f64 = 10.0;

/// Why a source's millivolt channels have no valid reading when its
/// cold-junction (terminal) sensor is not `ok`, in words.
pub fn cold_junction_reason(terminal: Health) -> &'static str {
    match terminal {
        Health::Open => "cold-junction (terminal) sensor open: no compensation possible",
        Health::OutOfRange => {
            "cold-junction (terminal) sensor outside its plausible range: no compensation possible"
        }
        Health::Spike => {
            "cold-junction (terminal) sensor jumped (held as a spike): compensation withheld"
        }
        Health::Stale => {
            "no fresh reading from the cold-junction (terminal) sensor: no compensation possible"
        }
        Health::NoData => "no reading yet from the cold-junction (terminal) sensor",
        _ => "cold-junction (terminal) sensor faulty: no compensation possible",
    }
}

impl ChannelState {
    /// Health at `now` given the staleness limit.
    pub fn health_at(&self, now: Timestamp, stale_after_s: f64) -> (Health, &'static str) {
        match self.last_seen {
            None => (Health::NoData, "nothing received yet"),
            Some(t) if now.since(t) > stale_after_s => {
                (Health::Stale, "no reading within the staleness limit")
            }
            Some(_) if self.value_health == Health::Ok => {
                self.zone_fault.unwrap_or((Health::Ok, ""))
            }
            Some(_) => (self.value_health, self.reason),
        }
    }

    /// The latest reading if valid and no older than `max_age_s` at `now`
    /// (zone faults aside: a zone re-examines those itself every cycle).
    pub fn fresh(&self, now: Timestamp, max_age_s: f64) -> Option<Reading> {
        if self.value_health != Health::Ok {
            return None;
        }
        self.latest.filter(|r| now.since(r.time) <= max_age_s)
    }

    /// Takes a converted, calibrated temperature: accepted, or held back as
    /// a spike when it moved faster than `spike_c_per_min` since the last
    /// accepted reading. A step is accepted once `SPIKE_CONFIRMATIONS`
    /// readings in a row agree with the new level (a real change, e.g. a
    /// burner relit), so a spike filter never hides a real event for long.
    pub fn accept(&mut self, t_c: f64, sigma_c: f64, now: Timestamp, spike_c_per_min: f64) {
        let rate = spike_c_per_min / 60.0;
        let plausible = |from_c: f64, from_t: Timestamp| {
            let dt = now.since(from_t).max(1.0);
            (t_c - from_c).abs() <= rate * dt + 3.0 * sigma_c
        };
        let is_step = self
            .latest
            .filter(|_| matches!(self.value_health, Health::Ok | Health::Spike))
            .is_some_and(|prev| !plausible(prev.celsius, prev.time));
        if is_step {
            let count = match self.spike_candidate {
                Some((c, t, n)) if plausible(c, t) => n + 1,
                _ => 1,
            };
            if count < SPIKE_CONFIRMATIONS {
                self.spike_candidate = Some((t_c, now, count));
                self.value_health = Health::Spike;
                self.reason = "a step faster than the wall can heat (spike_c_per_min): held back until confirmed";
                return;
            }
        }
        self.spike_candidate = None;
        self.latest = Some(Reading {
            time: now,
            celsius: t_c,
            sigma_c,
        });
        self.value_health = Health::Ok;
        self.reason = "";
    }
}

/// Converts one source value for `channel`: °C passes through (range
/// checked); mV is cold-junction compensated the ITS-90 way (EMF of the
/// junction added before inversion). `cj_c` is the frame's cold junction,
/// else the source's fixed one.
pub fn convert(
    channel: &Channel,
    value: scan::Reading,
    cj_c: Option<f64>,
) -> Result<f64, (Health, &'static str)> {
    if channel.kind == ChannelKind::Terminal {
        return convert_terminal(value);
    }
    let (v, unit) = match value {
        scan::Reading::Open => {
            return Err((Health::Open, "the source reports an open thermocouple"))
        }
        scan::Reading::Measured { value, unit } => (value, unit),
    };
    match (channel.signal, unit) {
        (Signal::Celsius, Unit::Celsius) => {
            // A linearised value is still checked against the type's range:
            // beyond it the source extrapolated or the wire is faulty.
            match thermocouple::emf_mv(channel.tc_type, v) {
                Ok(_) => Ok(v),
                Err(_) => Err((
                    Health::OutOfRange,
                    "temperature outside the thermocouple type's range",
                )),
            }
        }
        (Signal::Millivolts, Unit::Millivolts) => {
            let Some(cj) = cj_c else {
                return Err((
                    Health::Invalid,
                    "millivolts without a cold-junction temperature",
                ));
            };
            match thermocouple::compensated_c(channel.tc_type, v, cj) {
                Ok(t) => Ok(t),
                Err(TcError::ColdJunctionOutOfRange { .. }) => {
                    Err((Health::OutOfRange, "cold junction outside the thermocouple type's range"))
                }
                Err(_) => Err((
                    Health::OutOfRange,
                    "EMF outside the thermocouple type's range (reversed polarity, short or wrong type?)",
                )),
            }
        }
        (Signal::Celsius, Unit::Millivolts) => Err((
            Health::Invalid,
            "millivolts received on a channel configured for celsius",
        )),
        (Signal::Millivolts, Unit::Celsius) => Err((
            Health::Invalid,
            "celsius received on a channel configured for millivolts",
        )),
    }
}

/// A terminal sensor's value: °C within the plausible terminal range
/// ([`TERMINAL_MIN_C`] to [`TERMINAL_MAX_C`]).
fn convert_terminal(value: scan::Reading) -> Result<f64, (Health, &'static str)> {
    match value {
        scan::Reading::Open => Err((Health::Open, "the source reports the terminal sensor open")),
        scan::Reading::Measured {
            unit: Unit::Millivolts,
            ..
        } => Err((
            Health::Invalid,
            "millivolts received from a terminal sensor (it is read in °C)",
        )),
        scan::Reading::Measured { value, .. } if (TERMINAL_MIN_C..=TERMINAL_MAX_C).contains(&value) => {
            Ok(value)
        }
        scan::Reading::Measured { .. } => Err((
            Health::OutOfRange,
            "terminal temperature outside the plausible -40 to 85 °C of a field box (sensor or wiring fault)",
        )),
    }
}

/// Standard uncertainty of a reading at `t_c`: the measured one if
/// configured, else the tolerance class as a rectangular bound / √3
/// (GUM 4.3.7), extended from the nearest end of the class's stated range
/// when `t_c` lies outside it.
pub fn sigma_c(channel: &Channel, t_c: f64) -> f64 {
    if let Some(u) = channel.uncertainty_c {
        return u;
    }
    if channel.kind == ChannelKind::Terminal {
        // A terminal sensor without a stated uncertainty: the platinum
        // resistance class B tolerance ±(0.30 + 0.005 |t|) °C (IEC 60751,
        // from memory) as a rectangular bound.
        return (0.30 + 0.005 * t_c.abs()) / 3f64.sqrt();
    }
    let bound = tolerance::tolerance_or_nearest_c(channel.tolerance, channel.tc_type, t_c)
        .map(|n| n.tolerance_c)
        // The class defines no band for this type at all: a conservative
        // 1 % of |t|, at least 2.5 °C (wider than every published class; a
        // choice of ours, documented in the README).
        .unwrap_or_else(|| (0.01 * t_c.abs()).max(2.5));
    bound / 3f64.sqrt()
}

/// A channel's state as published on `{root}/channel/{channel}`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelReport {
    pub schema: &'static str,
    pub channel: Name,
    pub time: Timestamp,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub celsius: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sigma_c: Option<f64>,
    pub status: Health,
    pub reason: &'static str,
    pub source: Name,
    pub input: u8,
    /// The thermocouple letter, or `terminal`.
    #[serde(rename = "type")]
    pub tc_type: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub calibration_date: Option<Timestamp>,
    pub calibration_overdue: bool,
}

/// The `type` of a channel as published: its thermocouple letter, or
/// `terminal`.
pub fn type_name(channel: &Channel) -> &'static str {
    use crate::physics::thermocouple::TcType;
    if channel.kind == ChannelKind::Terminal {
        return "terminal";
    }
    match channel.tc_type {
        TcType::B => "B",
        TcType::E => "E",
        TcType::J => "J",
        TcType::K => "K",
        TcType::N => "N",
        TcType::R => "R",
        TcType::S => "S",
        TcType::T => "T",
    }
}
