//! Trend estimation for the one-line trend alerts, and alarm-flood metering.
//!
//! A trend alert says, before an alarm fires, that a quantity moving at its
//! current rate will reach a limit, and when. It is linear extrapolation:
//! honest for the next hours of a heat-up or a creeping shell temperature,
//! and the text says "about". Pure: every call takes `now`.

use core::fmt::Write as _;

use heapless::{HistoryBuf, Vec as HVec};

use crate::physics::fit::linear_slope;
use crate::time::Timestamp;

/// Time for `value` moving at `rate_per_h` to reach `limit`, hours, by
/// linear extrapolation: `t = (limit − value) / rate_per_h`.
///
/// The direction of motion says which kind of limit it is: a rising value
/// approaches a limit above it, a falling value one below it. None when
/// the value moves away from the limit, the rate is zero, the value is
/// already at or beyond the limit, or any input is not finite (or the
/// result overflows).
pub fn time_to_limit_h(value: f64, rate_per_h: f64, limit: f64) -> Option<f64> {
    if !(value.is_finite() && rate_per_h.is_finite() && limit.is_finite()) {
        return None;
    }
    let gap = limit - value;
    let toward = (rate_per_h > 0.0 && gap > 0.0) || (rate_per_h < 0.0 && gap < 0.0);
    if !toward {
        return None;
    }
    let t_h = gap / rate_per_h;
    (t_h.is_finite() && t_h > 0.0).then_some(t_h)
}

/// Rate limiter for repeated trend alerts of one key (one zone and
/// quantity): emits at most once per `repeat_s`, and again at once if the
/// estimate shortens by more than half.
///
/// "Shortens" is measured against what the last emitted estimate has
/// become since — the estimate less the time elapsed — so a trend running on
/// course, whose estimate shrinks by exactly the time that passes, does not
/// re-trigger; a trend that speeds up does.
#[derive(Debug, Clone, PartialEq)]
pub struct TrendGate {
    repeat_s: f64,
    /// Time and estimate (h) of the last emitted alert.
    last: Option<(Timestamp, f64)>,
}

impl TrendGate {
    /// A gate that repeats an alert at most every `repeat_s` seconds (a
    /// negative or NaN value counts as 0: every call emits).
    pub fn new(repeat_s: f64) -> Self {
        TrendGate {
            repeat_s: repeat_s.max(0.0),
            last: None,
        }
    }

    /// Should an alert with this estimate be emitted at `now`? Records it
    /// if so. An estimate that is not a finite number ≥ 0 never emits.
    pub fn should_emit(&mut self, now: Timestamp, time_to_limit_h: f64) -> bool {
        if !(time_to_limit_h.is_finite() && time_to_limit_h >= 0.0) {
            return false;
        }
        let emit = match self.last {
            None => true,
            Some((at, eta_h)) => {
                let elapsed_s = now.since(at);
                let expected_h = eta_h - elapsed_s / 3600.0;
                elapsed_s >= self.repeat_s || time_to_limit_h < 0.5 * expected_h
            }
        };
        if emit {
            self.last = Some((now, time_to_limit_h));
        }
        emit
    }

    /// Forgets the last alert: the next one emits at once. (Not for a trend
    /// that merely left the horizon: that would break the repeat promise,
    /// see [`TrendWatch`].)
    pub fn clear(&mut self) {
        self.last = None;
    }
}

/// An estimate must grow beyond the horizon by this fraction before a trend
/// counts as gone (hysteresis at the horizon edge, a value of ours: an
/// estimate wavering around the horizon is one trend, not many).
pub const HORIZON_HYSTERESIS: f64 = 0.25;

/// One trend's life: it starts when the estimated time to the limit falls
/// within `horizon_h`, lasts until the estimate exceeds
/// `horizon_h × (1 + HORIZON_HYSTERESIS)` or the quantity stops moving
/// toward the limit, and emits through a [`TrendGate`] that is never reset
/// by the trend coming and going: at most one line per `repeat_s` for the
/// watched quantity, unless the estimate halves.
#[derive(Debug, Clone, PartialEq)]
pub struct TrendWatch {
    horizon_h: f64,
    gate: TrendGate,
    inside: bool,
}

impl TrendWatch {
    pub fn new(horizon_h: f64, repeat_s: f64) -> Self {
        TrendWatch {
            horizon_h,
            gate: TrendGate::new(repeat_s),
            inside: false,
        }
    }

    /// The estimate at `now` (None: no trend toward the limit, or no
    /// valid value): should a line go out?
    pub fn update(&mut self, now: Timestamp, eta_h: Option<f64>) -> bool {
        let eta = eta_h.filter(|e| e.is_finite() && *e >= 0.0);
        self.inside = match eta {
            None => false,
            Some(e) if self.inside => e <= self.horizon_h * (1.0 + HORIZON_HYSTERESIS),
            Some(e) => e <= self.horizon_h,
        };
        match eta {
            Some(e) if self.inside => self.gate.should_emit(now, e),
            _ => false,
        }
    }

    /// Is a trend running (within the horizon, with its hysteresis)?
    pub fn inside(&self) -> bool {
        self.inside
    }
}

/// Longest one-line trend alert, bytes.
pub const TREND_LINE_BYTES: usize = 256;

/// A one-line trend alert.
pub type TrendLine = heapless::String<TREND_LINE_BYTES>;

/// Writes the one-line trend alert into `out` (cleared first), e.g.
/// `zone side-wall: shell_c 58.2 °C rising 3.1 °C/h, reaches the 65.0 °C
/// limit in about 2.2 h (at 10:42 UTC)`. `place` names what is watched
/// with its kind: `zone side-wall`, `channel side-25`, `source tcbox-1`
/// (see `alarm_engine::trend_place`).
///
/// Under an hour the time reads in minutes. The arrival time is
/// `now + eta_h`, rounded to the minute, with the date when it falls on
/// another UTC day. Err if the text does not fit in [`TREND_LINE_BYTES`] or `eta_h` is
/// not a finite number ≥ 0.
#[allow(clippy::too_many_arguments)] // one line of text, each argument a part of it
pub fn trend_line(
    out: &mut TrendLine,
    place: &str,
    quantity: &str,
    unit: &str,
    value: f64,
    rate_per_h: f64,
    limit: f64,
    eta_h: f64,
    now: Timestamp,
) -> core::fmt::Result {
    out.clear();
    if !(eta_h.is_finite() && eta_h >= 0.0) {
        return Err(core::fmt::Error);
    }
    let direction = if rate_per_h < 0.0 {
        "falling"
    } else {
        "rising"
    };
    write!(
        out,
        "{place}: {quantity} {value:.1} {unit} {direction} {:.1} {unit}/h, \
         reaches the {limit:.1} {unit} limit in about ",
        rate_per_h.abs()
    )?;
    if eta_h < 1.0 {
        let minutes = (eta_h * 60.0).round().max(1.0);
        write!(out, "{minutes:.0} min")?;
    } else {
        write!(out, "{eta_h:.1} h")?;
    }
    let at_s = (now.epoch_s() / 60.0 + eta_h * 60.0).round() * 60.0;
    let at = Timestamp::from_epoch_s(at_s).rfc3339();
    let today = now.rfc3339();
    // RFC 3339 text: date in bytes 0..10, HH:MM in 11..16.
    let (Some(date), Some(hhmm)) = (at.get(0..10), at.get(11..16)) else {
        return Ok(());
    };
    if today.get(0..10) == Some(date) {
        write!(out, " (at {hhmm} UTC)")
    } else {
        write!(out, " (at {date} {hhmm} UTC)")
    }
}

/// The sliding window of the flood meter, s (10 minutes).
pub const FLOOD_WINDOW_S: f64 = 600.0;

/// More activations than this per window is a flood: ISA-18.2, as publicly
/// summarised, calls more than 10 alarms per 10 minutes (per operator) an
/// alarm flood.
pub const FLOOD_THRESHOLD: u32 = 10;

/// Activations the meter remembers; a count beyond it reads as this many.
pub const FLOOD_CAPACITY: usize = 64;

/// Alarm-flood meter: the activations of the last 10 minutes (a sliding
/// window over a fixed-capacity history) and whether they exceed the
/// flood threshold. Record only activations announced to a person (not
/// shelved, suppressed or out of service): a flood is what an operator sees.
#[derive(Debug, Clone, Default)]
pub struct FloodMeter {
    /// Epoch seconds of the latest activations.
    times: HistoryBuf<f64, FLOOD_CAPACITY>,
}

impl FloodMeter {
    pub fn new() -> Self {
        Self::default()
    }

    /// Records an activation at `now`.
    pub fn record(&mut self, now: Timestamp) {
        self.times.write(now.epoch_s());
    }

    /// Activations `t` with `0 ≤ now − t < 600 s`, at most [`FLOOD_CAPACITY`].
    pub fn rate_per_10min(&self, now: Timestamp) -> u32 {
        let n = self
            .times
            .as_slice()
            .iter()
            .filter(|&&t| {
                let age_s = now.epoch_s() - t;
                (0.0..FLOOD_WINDOW_S).contains(&age_s)
            })
            .count();
        u32::try_from(n).unwrap_or(u32::MAX)
    }

    /// More than [`FLOOD_THRESHOLD`] activations in the window at `now`?
    pub fn flooding(&self, now: Timestamp) -> bool {
        self.rate_per_10min(now) > FLOOD_THRESHOLD
    }
}

/// Least-squares rate of a history of `(time_s, value)` over the window of
/// `window_s` ending at `now_s`, per hour. Needs at least three points
/// spanning `min_span_s`, so that a single step does not read as a rate.
/// (The zone's measured probe rates and the rate alarms both use it.)
pub fn windowed_rate_per_h<const N: usize>(
    history: &HistoryBuf<(f64, f64), N>,
    now_s: f64,
    window_s: f64,
    min_span_s: f64,
) -> Option<f64> {
    // No more points than the history holds: nothing can be dropped.
    let (ts, vs): (HVec<f64, N>, HVec<f64, N>) = history
        .oldest_ordered()
        .filter(|(t, _)| now_s - t <= window_s)
        .copied()
        .unzip();
    let span = ts.last().zip(ts.first()).map(|(b, a)| b - a)?;
    if ts.len() < 3 || span < min_span_s {
        return None;
    }
    linear_slope(&ts, &vs).map(|(slope, _)| slope * 3600.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// 2026-12-02T08:30:00Z.
    const T0: f64 = 1_796_200_200.0;

    fn at(s: f64) -> Timestamp {
        Timestamp::from_epoch_s(T0 + s)
    }

    #[test]
    fn time_to_limit_hand_computed() {
        // (65.0 − 58.2) / 3.1 = 6.8 / 3.1 = 2.193548387… h (by hand); the
        // tolerance covers the rounding of 58.2 and 6.8 in binary.
        let t = time_to_limit_h(58.2, 3.1, 65.0).unwrap();
        assert!(
            (t - 6.8 / 3.1).abs() < 1e-12 && (t - 2.193_548_387).abs() < 1e-9,
            "{t}"
        );
        // Falling toward a low limit: (100 − 120) / −10 = 2 h exactly.
        assert_eq!(time_to_limit_h(120.0, -10.0, 100.0), Some(2.0));
        // 1 °C short at 0.5 °C/h: 2 h.
        assert_eq!(time_to_limit_h(-21.0, 0.5, -20.0), Some(2.0));
    }

    #[test]
    fn time_to_limit_none_cases() {
        assert_eq!(time_to_limit_h(58.2, -3.1, 65.0), None, "moving away");
        assert_eq!(time_to_limit_h(120.0, 10.0, 100.0), None, "moving away");
        assert_eq!(time_to_limit_h(58.2, 0.0, 65.0), None, "zero rate");
        assert_eq!(time_to_limit_h(65.0, 3.1, 65.0), None, "at the limit");
        assert_eq!(time_to_limit_h(70.0, 3.1, 65.0), None, "already beyond");
        assert_eq!(time_to_limit_h(f64::NAN, 3.1, 65.0), None);
        assert_eq!(time_to_limit_h(58.2, f64::INFINITY, 65.0), None);
        assert_eq!(
            time_to_limit_h(0.0, 1e-308, 1e308),
            None,
            "overflows to infinity"
        );
    }

    #[test]
    fn gate_repeats_after_repeat_s() {
        let mut g = TrendGate::new(900.0);
        assert!(g.should_emit(at(0.0), 4.0), "the first alert goes out");
        // On course: 4 h less the elapsed time.
        assert!(!g.should_emit(at(600.0), 4.0 - 600.0 / 3600.0));
        assert!(!g.should_emit(at(899.75), 4.0 - 899.75 / 3600.0));
        assert!(g.should_emit(at(900.0), 3.75));
        assert!(!g.should_emit(at(901.0), 3.75));
        assert!(!g.should_emit(at(902.0), f64::NAN));
        g.clear();
        assert!(g.should_emit(at(903.0), 3.7), "cleared: at once");
    }

    #[test]
    fn gate_emits_at_once_when_the_estimate_halves() {
        // 60 s after a 4 h estimate, on course would be 4 − 1/60 = 3.98333 h;
        // half of it is 1.991667 h (by hand).
        let mut g = TrendGate::new(900.0);
        assert!(g.should_emit(at(0.0), 4.0));
        assert!(!g.should_emit(at(60.0), 2.0), "2.0 h is not below 1.9917 h");
        assert!(g.should_emit(at(60.0), 1.99));
        // And the new estimate is the reference from then on.
        assert!(!g.should_emit(at(120.0), 1.0));
        assert!(g.should_emit(at(120.0), 0.9));
    }

    #[test]
    fn trend_line_wording() {
        let mut out = TrendLine::new();
        // 2.193548 h = 2 h 11 min 36.8 s after 08:30:00 → 10:41:37 → 10:42 (by hand).
        let eta = time_to_limit_h(58.2, 3.1, 65.0).unwrap();
        trend_line(
            &mut out,
            "zone side-wall",
            "shell_c",
            "°C",
            58.2,
            3.1,
            65.0,
            eta,
            at(0.0),
        )
        .unwrap();
        assert_eq!(
            out.as_str(),
            "zone side-wall: shell_c 58.2 °C rising 3.1 °C/h, reaches the 65.0 °C limit in about 2.2 h (at 10:42 UTC)"
        );
        // 6.8 / 30 h = 13.6 min → "14 min", at 08:43:36 → 08:44.
        trend_line(
            &mut out,
            "zone side-wall",
            "shell_c",
            "°C",
            58.2,
            30.0,
            65.0,
            6.8 / 30.0,
            at(0.0),
        )
        .unwrap();
        assert_eq!(
            out.as_str(),
            "zone side-wall: shell_c 58.2 °C rising 30.0 °C/h, reaches the 65.0 °C limit in about 14 min (at 08:44 UTC)"
        );
        // Falling toward a low limit: 100 °C at 25 °C/h is 4 h, 12:30.
        trend_line(
            &mut out,
            "zone roof",
            "hot_face_c",
            "°C",
            400.0,
            -25.0,
            300.0,
            4.0,
            at(0.0),
        )
        .unwrap();
        assert_eq!(
            out.as_str(),
            "zone roof: hot_face_c 400.0 °C falling 25.0 °C/h, reaches the 300.0 °C limit in about 4.0 h (at 12:30 UTC)"
        );
        // From 22:00 plus 3 h is the next UTC day.
        trend_line(
            &mut out,
            "zone roof",
            "shell_c",
            "°C",
            50.0,
            5.0,
            65.0,
            3.0,
            at(13.5 * 3600.0),
        )
        .unwrap();
        assert!(
            out.ends_with("in about 3.0 h (at 2026-12-03 01:00 UTC)"),
            "{out}"
        );
    }

    #[test]
    fn trend_line_refuses_what_it_cannot_write() {
        let mut out = TrendLine::new();
        let zone = format!("zone {}", "z".repeat(245));
        assert!(trend_line(
            &mut out,
            &zone,
            "shell_c",
            "°C",
            58.2,
            3.1,
            65.0,
            2.2,
            at(0.0)
        )
        .is_err());
        assert!(trend_line(
            &mut out,
            "zone z",
            "shell_c",
            "°C",
            58.2,
            3.1,
            65.0,
            f64::NAN,
            at(0.0)
        )
        .is_err());
        assert!(out.is_empty());
    }

    #[test]
    fn a_trend_wavering_at_the_horizon_edge_is_one_trend() {
        // Horizon 4 h, repeat 30 min. The estimate wavers between 3.9 and
        // 4.1 h every minute for 100 minutes: one trend, so a line at the
        // start and one per 30 min (at 0, 30, 60 and 90 min: 4). A gate
        // cleared whenever the estimate left the horizon would have
        // emitted on every return (50 lines).
        let mut w = TrendWatch::new(4.0, 1800.0);
        let mut lines = 0;
        for minute in 0..100 {
            let eta = if minute % 2 == 0 { 3.9 } else { 4.1 };
            if w.update(at(60.0 * f64::from(minute)), Some(eta)) {
                lines += 1;
            }
        }
        assert_eq!(lines, 4);
        // Beyond the hysteresis (4 × 1.25 = 5 h) the trend ends; coming
        // back within the repeat time gives no line, after it one.
        assert!(!w.update(at(6000.0), Some(5.01)));
        assert!(!w.inside());
        assert!(
            !w.update(at(6060.0), Some(3.0)),
            "11 min after the last line"
        );
        assert!(w.inside());
        assert!(w.update(at(5400.0 + 1800.0), Some(3.0)));
        // Gone (moving away), then back: still the same promise.
        assert!(!w.update(at(7260.0), None));
        assert!(!w.update(at(7320.0), Some(2.9)));
        // A trend that speeds up beyond half the estimate goes out at once:
        // 120 s on course from 3.0 h is 2.9667 h, half of it 1.4833 h.
        assert!(w.update(at(7320.0), Some(1.4)));
    }

    #[test]
    fn trend_lines_name_what_they_watch() {
        let mut out = TrendLine::new();
        trend_line(
            &mut out,
            "channel side-25",
            "celsius",
            "°C",
            590.0,
            20.0,
            600.0,
            0.5,
            at(0.0),
        )
        .unwrap();
        assert!(
            out.starts_with("channel side-25: celsius 590.0 °C rising 20.0 °C/h"),
            "{out}"
        );
    }

    #[test]
    fn flood_meter_counts_a_sliding_ten_minutes() {
        // ISA-18.2 as publicly summarised: a flood is more than 10 alarms in
        // 10 minutes, so 10 is not a flood and 11 is.
        let mut m = FloodMeter::new();
        for i in 0..10 {
            m.record(at(60.0 * f64::from(i)));
        }
        assert_eq!(m.rate_per_10min(at(590.0)), 10);
        assert!(!m.flooding(at(590.0)));
        m.record(at(590.0));
        assert_eq!(m.rate_per_10min(at(590.0)), 11);
        assert!(m.flooding(at(590.0)));
        // At 600 s the first activation (at 0) has left the window.
        assert_eq!(m.rate_per_10min(at(600.0)), 10);
        assert!(!m.flooding(at(600.0)));
        // Long after, nothing is left; activations in the future do not count.
        assert_eq!(m.rate_per_10min(at(10_000.0)), 0);
        assert_eq!(m.rate_per_10min(at(-1.0)), 0);
    }

    #[test]
    fn flood_meter_saturates_at_its_capacity() {
        let mut m = FloodMeter::new();
        for _ in 0..(FLOOD_CAPACITY + 36) {
            m.record(at(0.0));
        }
        assert_eq!(m.rate_per_10min(at(1.0)), FLOOD_CAPACITY as u32);
        assert!(m.flooding(at(1.0)));
    }
}
