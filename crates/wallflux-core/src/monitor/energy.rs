//! Energy accounting: heat lost through the walls integrated over time, per
//! UTC day, over a rolling 24 h and (for a periodic kiln) per firing, with
//! its cost. Pure: fed with zone reports and `now`; the daemon persists it
//! (`serde`) in the state directory.
//!
//! The books keep loss and gain apart. A zone whose heat loss is negative
//! (its shell takes heat in from the surroundings: a sunlit shell, a hot
//! neighbour, a wall cooling below a warm hall) books that heat as a *gain*
//! of its own, never as a negative loss, so the loss books only ever grow
//! and a part (a day, a firing) can never exceed the whole (the total).
//!
//! `[site] operation = "periodic"` (the default): a firing starts when the
//! hottest zone's hot face rises above `firing_start_c` and ends when every
//! zone has fallen back below it. `"continuous"` (a tunnel or roller kiln,
//! always hot): no firings; the kiln reports per UTC day and a rolling 24 h.

use std::sync::Arc;

use serde::{Deserialize, Serialize};

use crate::config::Operation;
use crate::ids::{IdVec, ZoneId};
use crate::time::Timestamp;

/// 1 kWh in joules.
pub const J_PER_KWH: f64 = 3.6e6;

/// Version of the `energy.json` layout written now. Version 1 (no
/// `format` key) booked gains as negative losses and had no rolling 24 h.
pub const ENERGY_FORMAT: u32 = 2;

/// Width of one slot of the rolling 24 h, s (10 min: the rolling sum
/// is exact to within one slot at its old end).
pub const ROLLING_SLOT_S: f64 = 600.0;
/// Slots in 24 h.
pub const ROLLING_SLOTS: usize = 144;

fn format_v1() -> u32 {
    1
}

fn empty_slots() -> Vec<(f64, f64)> {
    vec![(0.0, 0.0); ROLLING_SLOTS]
}

/// The persistent part of the meter. Every `*_kwh` without `gain` is heat
/// lost (≥ 0); every `*gain*_kwh` is heat taken in from the surroundings
/// (≥ 0).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EnergyTotals {
    /// Layout version ([`ENERGY_FORMAT`]); absent in version-1 files.
    #[serde(default = "format_v1")]
    pub format: u32,
    /// UTC day (days since 1970-01-01) that `today_kwh` belongs to.
    pub day: i64,
    pub today_kwh: f64,
    pub yesterday_kwh: f64,
    pub total_kwh: f64,
    /// Start of the firing under way, epoch seconds (periodic only).
    pub firing_started: Option<f64>,
    pub firing_kwh: f64,
    pub last_firing_kwh: Option<f64>,
    pub last_firing_hours: Option<f64>,
    #[serde(default)]
    pub gain_today_kwh: f64,
    #[serde(default)]
    pub gain_yesterday_kwh: f64,
    #[serde(default)]
    pub gain_total_kwh: f64,
    #[serde(default)]
    pub firing_gain_kwh: f64,
    /// Rolling 24 h: (loss, gain) kWh per [`ROLLING_SLOT_S`] slot, a ring
    /// indexed by slot number modulo [`ROLLING_SLOTS`].
    #[serde(default = "empty_slots")]
    pub rolling: Vec<(f64, f64)>,
    /// Slot number (epoch s / [`ROLLING_SLOT_S`]) of the newest slot.
    #[serde(default)]
    pub rolling_slot: i64,
}

impl Default for EnergyTotals {
    fn default() -> Self {
        EnergyTotals {
            format: ENERGY_FORMAT,
            day: 0,
            today_kwh: 0.0,
            yesterday_kwh: 0.0,
            total_kwh: 0.0,
            firing_started: None,
            firing_kwh: 0.0,
            last_firing_kwh: None,
            last_firing_hours: None,
            gain_today_kwh: 0.0,
            gain_yesterday_kwh: 0.0,
            gain_total_kwh: 0.0,
            firing_gain_kwh: 0.0,
            rolling: empty_slots(),
            rolling_slot: 0,
        }
    }
}

impl EnergyTotals {
    /// Brings loaded totals to the current layout and makes them
    /// consistent; returns a note for the log when anything was changed.
    ///
    /// A version-1 file booked heat gains as negative losses, so its sums
    /// are net and may even be negative or smaller than the firing's: the
    /// sums are kept (they are the best record there is), clamped at 0, and
    /// the total raised to at least the firing's and the day's (a whole is
    /// never less than its part).
    /// Whether the totals can be true at all (a file that parses can still
    /// be nonsense): every day and time within 1970 to 2200, every
    /// duration and the rolling slots finite and not negative. What
    /// [`Self::upgrade`] can mend (a negative total) passes.
    pub fn check(&self) -> Result<(), &'static str> {
        const LAST_DAY: i64 = 84_000; // about the year 2200
        let last_s = LAST_DAY as f64 * 86_400.0;
        if !(0..=LAST_DAY).contains(&self.day) {
            return Err("its day lies outside 1970 to 2200");
        }
        if self
            .firing_started
            .is_some_and(|t| !(t.is_finite() && (0.0..=last_s).contains(&t)))
        {
            return Err("its firing start lies outside 1970 to 2200");
        }
        if !(0..=LAST_DAY * 86_400 / ROLLING_SLOT_S as i64).contains(&self.rolling_slot) {
            return Err("its rolling slot lies outside 1970 to 2200");
        }
        let bad = |v: f64| !(v.is_finite() && v >= 0.0);
        if self.last_firing_hours.is_some_and(bad) || self.last_firing_kwh.is_some_and(bad) {
            return Err("its last firing is negative or not a number");
        }
        if self.rolling.iter().any(|&(l, g)| bad(l) || bad(g)) {
            return Err("its rolling 24 h holds a negative or non-numeric slot");
        }
        Ok(())
    }

    pub fn upgrade(&mut self) -> Option<&'static str> {
        let old = self.format < ENERGY_FORMAT;
        let before = self.clone();
        for v in [
            &mut self.today_kwh,
            &mut self.yesterday_kwh,
            &mut self.total_kwh,
            &mut self.firing_kwh,
            &mut self.gain_today_kwh,
            &mut self.gain_yesterday_kwh,
            &mut self.gain_total_kwh,
            &mut self.firing_gain_kwh,
        ] {
            if !v.is_finite() || *v < 0.0 {
                *v = 0.0;
            }
        }
        if self.rolling.len() != ROLLING_SLOTS {
            self.rolling = empty_slots();
        }
        self.total_kwh = self
            .total_kwh
            .max(self.today_kwh)
            .max(if self.firing_started.is_some() {
                self.firing_kwh
            } else {
                0.0
            });
        self.gain_total_kwh = self.gain_total_kwh.max(self.gain_today_kwh);
        self.format = ENERGY_FORMAT;
        if old {
            Some("energy totals from an earlier version (gains were booked as negative losses): loaded, clamped at zero; loss and gain are booked apart from now on")
        } else if *self != before {
            Some("energy totals were inconsistent (negative, or a part larger than the total): corrected")
        } else {
            None
        }
    }
}

#[derive(Debug, Clone)]
pub struct EnergyMeter {
    pub totals: EnergyTotals,
    firing_start_c: f64,
    operation: Operation,
    /// Latest (heat loss W, hot face °C) of each zone.
    latest: IdVec<ZoneId, Option<(f64, f64)>>,
}

/// Splits a zone's heat loss into (loss, gain), both ≥ 0, W: a negative
/// loss is heat taken in through the shell.
pub fn loss_and_gain_w(heat_loss_w: f64) -> (f64, f64) {
    if heat_loss_w >= 0.0 {
        (heat_loss_w, 0.0)
    } else {
        (0.0, -heat_loss_w)
    }
}

impl EnergyMeter {
    pub fn new(
        zones: usize,
        firing_start_c: f64,
        operation: Operation,
        mut totals: EnergyTotals,
    ) -> Self {
        if operation == Operation::Continuous {
            // A kiln that never stops has no firing to keep open.
            totals.firing_started = None;
        }
        EnergyMeter {
            totals,
            firing_start_c,
            operation,
            latest: IdVec::from_fn(zones, |_| None),
        }
    }

    /// A zone's state: its heat loss over the `interval_s` that just ended
    /// (rectangle rule on the interval the state describes, E = P Δt),
    /// booked as a loss when positive and as a gain when negative. A zone
    /// without numbers adds nothing (and its gap is not guessed).
    pub fn record(
        &mut self,
        zone: ZoneId,
        heat_loss_w: Option<f64>,
        hot_face_c: Option<f64>,
        interval_s: f64,
        now: Timestamp,
    ) {
        self.roll_day(now);
        self.roll_slots(now);
        let heat_loss_w = heat_loss_w.filter(|w| w.is_finite());
        if let Some(slot) = self.latest.get_mut(zone) {
            *slot = heat_loss_w.zip(hot_face_c.filter(|t| t.is_finite()));
        }
        if let Some(w) = heat_loss_w.filter(|_| interval_s.is_finite() && interval_s > 0.0) {
            let (loss_w, gain_w) = loss_and_gain_w(w);
            let loss = loss_w * interval_s / J_PER_KWH;
            let gain = gain_w * interval_s / J_PER_KWH;
            let t = &mut self.totals;
            t.today_kwh += loss;
            t.total_kwh += loss;
            t.gain_today_kwh += gain;
            t.gain_total_kwh += gain;
            let k = t.rolling_slot.rem_euclid(ROLLING_SLOTS as i64) as usize;
            if let Some(s) = t.rolling.get_mut(k) {
                s.0 += loss;
                s.1 += gain;
            }
            if t.firing_started.is_some() {
                t.firing_kwh += loss;
                t.firing_gain_kwh += gain;
            }
        }
        if self.operation == Operation::Periodic {
            self.firing_edge(now);
        }
    }

    fn roll_day(&mut self, now: Timestamp) {
        let day = (now.epoch_s() / 86_400.0).floor() as i64;
        let t = &mut self.totals;
        if day != t.day {
            let next = day == t.day + 1;
            t.yesterday_kwh = if next { t.today_kwh } else { 0.0 };
            t.gain_yesterday_kwh = if next { t.gain_today_kwh } else { 0.0 };
            t.today_kwh = 0.0;
            t.gain_today_kwh = 0.0;
            t.day = day;
        }
    }

    /// Moves the rolling window to `now`'s slot, clearing the slots it
    /// passes (a clock stepped back books into the newest slot instead).
    fn roll_slots(&mut self, now: Timestamp) {
        let slot = (now.epoch_s() / ROLLING_SLOT_S).floor() as i64;
        let t = &mut self.totals;
        if t.rolling.len() != ROLLING_SLOTS {
            t.rolling = empty_slots();
        }
        if slot <= t.rolling_slot {
            return;
        }
        let passed = (slot - t.rolling_slot).min(ROLLING_SLOTS as i64);
        for s in (slot - passed + 1)..=slot {
            t.rolling[s.rem_euclid(ROLLING_SLOTS as i64) as usize] = (0.0, 0.0);
        }
        t.rolling_slot = slot;
    }

    /// (loss, gain) over the 24 h up to `now`, kWh: the slots newer than
    /// 24 h before `now`'s slot.
    pub fn rolling_24h_kwh(&self, now: Timestamp) -> (f64, f64) {
        let now_slot = (now.epoch_s() / ROLLING_SLOT_S).floor() as i64;
        let newest = self.totals.rolling_slot;
        let n = ROLLING_SLOTS as i64;
        let mut sum = (0.0, 0.0);
        for (k, &(l, g)) in self.totals.rolling.iter().enumerate() {
            let slot = newest - (newest - k as i64).rem_euclid(n);
            if slot > now_slot - n {
                sum.0 += l;
                sum.1 += g;
            }
        }
        sum
    }

    fn firing_edge(&mut self, now: Timestamp) {
        let hottest = self
            .latest
            .iter()
            .flatten()
            .map(|&(_, t)| t)
            .fold(f64::NEG_INFINITY, f64::max);
        let t = &mut self.totals;
        match t.firing_started {
            None if hottest > self.firing_start_c => {
                t.firing_started = Some(now.epoch_s());
                t.firing_kwh = 0.0;
                t.firing_gain_kwh = 0.0;
            }
            Some(start) if hottest.is_finite() && hottest < self.firing_start_c => {
                t.last_firing_kwh = Some(t.firing_kwh);
                t.last_firing_hours = Some((now.epoch_s() - start) / 3600.0);
                t.firing_started = None;
            }
            _ => {}
        }
    }

    /// Sums of the zones' latest heat losses and gains, W (both ≥ 0), and
    /// how many zones have one.
    pub fn kiln_heat_w(&self) -> (f64, f64, usize) {
        let (mut loss, mut gain, mut n) = (0.0, 0.0, 0);
        for &(w, _) in self.latest.iter().flatten() {
            let (l, g) = loss_and_gain_w(w);
            loss += l;
            gain += g;
            n += 1;
        }
        (loss, gain, n)
    }
}

/// The `{root}/kiln/state` payload. Firing fields are absent for a
/// continuous kiln.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct KilnReport {
    pub schema: &'static str,
    pub time: Timestamp,
    /// Σ of the zones' heat losses that are losses (≥ 0), W.
    pub heat_loss_w: f64,
    pub zones_reporting: usize,
    pub zones: usize,
    pub energy_today_kwh: f64,
    pub energy_yesterday_kwh: f64,
    pub energy_total_kwh: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub firing_active: Option<bool>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub firing_started: Option<Option<Timestamp>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub energy_firing_kwh: Option<Option<f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_firing_kwh: Option<Option<f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub last_firing_hours: Option<Option<f64>>,
    #[serde(skip_serializing_if = "Option::is_none", serialize_with = "as_str")]
    pub currency: Option<Arc<str>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cost_today: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cost_firing: Option<f64>,
    /// `periodic` or `continuous`.
    pub operation: Operation,
    /// Σ of the heat taken in through shells (zones with a negative heat
    /// loss), W, ≥ 0.
    pub heat_gain_w: f64,
    pub energy_gain_today_kwh: f64,
    pub energy_gain_yesterday_kwh: f64,
    pub energy_gain_total_kwh: f64,
    /// Heat lost over the 24 h up to `time` (to within one 10 min slot).
    pub energy_24h_kwh: f64,
    pub energy_gain_24h_kwh: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub energy_firing_gain_kwh: Option<Option<f64>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cost_24h: Option<f64>,
}

/// A shared currency name, written as the text it is.
fn as_str<S: serde::Serializer>(c: &Option<Arc<str>>, s: S) -> Result<S::Ok, S::Error> {
    match c {
        Some(c) => s.serialize_str(c),
        None => s.serialize_none(),
    }
}

impl EnergyMeter {
    /// The kiln state at `now`; `price` is the energy price per kWh and its
    /// currency (shared, so that a report does not allocate).
    pub fn report(&self, now: Timestamp, price: Option<(f64, &Arc<str>)>) -> KilnReport {
        let (heat_loss_w, heat_gain_w, zones_reporting) = self.kiln_heat_w();
        let (loss_24h, gain_24h) = self.rolling_24h_kwh(now);
        let t = &self.totals;
        let periodic = self.operation == Operation::Periodic;
        let firing = t.firing_started.map(|_| t.firing_kwh);
        let some = |v| periodic.then_some(v);
        KilnReport {
            schema: "wallflux.kiln/1",
            time: now,
            heat_loss_w,
            zones_reporting,
            zones: self.latest.len(),
            energy_today_kwh: t.today_kwh,
            energy_yesterday_kwh: t.yesterday_kwh,
            energy_total_kwh: t.total_kwh,
            firing_active: periodic.then_some(t.firing_started.is_some()),
            firing_started: periodic.then_some(t.firing_started.map(Timestamp::from_epoch_s)),
            energy_firing_kwh: some(firing),
            last_firing_kwh: some(t.last_firing_kwh),
            last_firing_hours: some(t.last_firing_hours),
            currency: price.map(|(_, c)| c.clone()),
            cost_today: price.map(|(p, _)| p * t.today_kwh),
            cost_firing: price
                .and_then(|(p, _)| firing.map(|f| p * f))
                .filter(|_| periodic),
            operation: self.operation,
            heat_gain_w,
            energy_gain_today_kwh: t.gain_today_kwh,
            energy_gain_yesterday_kwh: t.gain_yesterday_kwh,
            energy_gain_total_kwh: t.gain_total_kwh,
            energy_24h_kwh: loss_24h,
            energy_gain_24h_kwh: gain_24h,
            energy_firing_gain_kwh: some(t.firing_started.map(|_| t.firing_gain_kwh)),
            cost_24h: price.map(|(p, _)| p * loss_24h),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// The id of the meter's zone `i`.
    fn zone(i: usize) -> ZoneId {
        crate::ids::mint(i)
    }

    const PERIODIC: Operation = Operation::Periodic;

    /// Three zones losing a constant 1000, 2000 and 500 W for one UTC day
    /// in 60 s intervals: 3500 W × 24 h = 84 kWh exactly (E = P t).
    #[test]
    fn constant_loss_over_a_day_is_exact() {
        let day0 = 20_000.0 * 86_400.0;
        let mut m = EnergyMeter::new(3, 100.0, PERIODIC, EnergyTotals::default());
        for k in 1..=1440 {
            let now = Timestamp::from_epoch_s(day0 + f64::from(k) * 60.0 - 0.5);
            for (z, w) in [1000.0, 2000.0, 500.0].into_iter().enumerate() {
                m.record(zone(z), Some(w), Some(900.0), 60.0, now);
            }
        }
        assert!(
            (m.totals.today_kwh - 84.0).abs() < 1e-9,
            "{}",
            m.totals.today_kwh
        );
        // The rolling 24 h at the day's end holds the same day.
        let (l24, g24) = m.rolling_24h_kwh(Timestamp::from_epoch_s(day0 + 86_399.0));
        assert!((l24 - 84.0).abs() < 1e-9 && g24 == 0.0, "{l24} {g24}");
        assert_eq!(m.kiln_heat_w(), (3500.0, 0.0, 3));
        // The next day starts at zero and keeps yesterday.
        m.record(
            zone(0),
            Some(1000.0),
            Some(900.0),
            60.0,
            Timestamp::from_epoch_s(day0 + 86_400.0 + 30.0),
        );
        assert!((m.totals.yesterday_kwh - 84.0).abs() < 1e-9);
        assert!((m.totals.today_kwh - 1000.0 * 60.0 / 3.6e6).abs() < 1e-12);
        // The firing began with the first state above 100 °C.
        assert!(m.totals.firing_started.is_some());
        let r = m.report(
            Timestamp::from_epoch_s(day0 + 86_400.0 + 30.0),
            Some((0.12, &Arc::from("EUR"))),
        );
        assert!((r.cost_today.unwrap() - 0.12 * r.energy_today_kwh).abs() < 1e-12);
    }

    #[test]
    fn a_firing_is_counted_from_rise_to_fall() {
        let mut m = EnergyMeter::new(1, 100.0, PERIODIC, EnergyTotals::default());
        let at = |s: f64| Timestamp::from_epoch_s(1_800_000_000.0 + s);
        m.record(zone(0), Some(100.0), Some(40.0), 3600.0, at(3600.0));
        assert_eq!(m.totals.firing_started, None);
        // 10 h at 5 kW while hot: 50 kWh (the first hot state opens the
        // firing, so its own interval is counted from the next one).
        for h in 2..=11 {
            m.record(
                zone(0),
                Some(5000.0),
                Some(800.0),
                3600.0,
                at(f64::from(h) * 3600.0),
            );
        }
        m.record(zone(0), Some(200.0), Some(60.0), 3600.0, at(12.0 * 3600.0));
        assert!((m.totals.last_firing_kwh.unwrap() - 9.0 * 5.0 - 0.2).abs() < 1e-9);
        assert!((m.totals.last_firing_hours.unwrap() - 10.0).abs() < 1e-9);
        assert_eq!(m.totals.firing_started, None);
        // A zone with no numbers adds nothing.
        let before = m.totals.total_kwh;
        m.record(zone(0), None, None, 3600.0, at(13.0 * 3600.0));
        assert_eq!(m.totals.total_kwh, before);
    }

    /// A cold kiln whose shell takes in 2 kW from a warm hall for 10 h,
    /// then a 2 h firing losing 5 kW. Net booking (the earlier behaviour)
    /// gave total = −20 + 10 = −10 kWh against a firing of 10 kWh. Kept
    /// apart: loss total 10 kWh (the firing's 5 kW × 1 h counted, plus the
    /// opening hour), gain 20 kWh, and the firing never exceeds the total.
    #[test]
    fn heat_taken_in_is_a_gain_not_a_negative_loss() {
        let mut m = EnergyMeter::new(1, 150.0, PERIODIC, EnergyTotals::default());
        let at = |h: f64| Timestamp::from_epoch_s(1_800_000_000.0 + h * 3600.0);
        for h in 1..=10 {
            m.record(zone(0), Some(-2000.0), Some(30.0), 3600.0, at(f64::from(h)));
        }
        assert_eq!(m.kiln_heat_w(), (0.0, 2000.0, 1));
        for h in 11..=12 {
            m.record(zone(0), Some(5000.0), Some(700.0), 3600.0, at(f64::from(h)));
        }
        let t = &m.totals;
        assert!(
            (t.gain_total_kwh - 20.0).abs() < 1e-9,
            "{}",
            t.gain_total_kwh
        );
        assert!((t.total_kwh - 10.0).abs() < 1e-9, "{}", t.total_kwh);
        assert!((t.firing_kwh - 5.0).abs() < 1e-9, "{}", t.firing_kwh);
        assert!(t.firing_kwh <= t.total_kwh);
        let r = m.report(at(12.0), None);
        assert_eq!(r.heat_gain_w, 0.0);
        assert_eq!(r.energy_firing_kwh, Some(Some(t.firing_kwh)));
        assert!((r.energy_gain_24h_kwh - 20.0).abs() < 1e-9);
    }

    /// A roller kiln held at 1150 °C for 36 h, 3 kW through its walls,
    /// states every 60 s: no firing ever starts; the rolling 24 h is 72 kWh
    /// (3 kW × 24 h) and the first UTC day 3 kW × 24 h as well.
    #[test]
    fn a_continuous_kiln_reports_days_and_24_h_and_no_firing() {
        let day0 = 20_000.0 * 86_400.0;
        let mut m = EnergyMeter::new(1, 150.0, Operation::Continuous, EnergyTotals::default());
        for k in 1..=(36 * 60) {
            let now = Timestamp::from_epoch_s(day0 + f64::from(k) * 60.0);
            m.record(zone(0), Some(3000.0), Some(1150.0), 60.0, now);
            assert_eq!(m.totals.firing_started, None);
        }
        let now = Timestamp::from_epoch_s(day0 + 36.0 * 3600.0);
        // The state stamped 24:00 belongs to the new day (its slot too).
        assert!(
            (m.totals.yesterday_kwh - 72.0 + 0.05).abs() < 1e-9,
            "{}",
            m.totals.yesterday_kwh
        );
        let (l24, _) = m.rolling_24h_kwh(now);
        // 24 h of 10 min slots up to and including the one that opens at
        // 36:00 (one state of 0.05 kWh): 143 full slots of 0.5 kWh.
        assert!((l24 - (143.0 * 0.5 + 0.05)).abs() < 1e-9, "{l24}");
        // A day later with nothing recorded the window is empty.
        assert_eq!(m.rolling_24h_kwh(now.plus_s(86_400.0)), (0.0, 0.0));
        let r = serde_json::to_value(m.report(now, Some((0.1, &Arc::from("EUR"))))).unwrap();
        assert_eq!(r["operation"], "continuous");
        assert!(r.get("firing_active").is_none() && r.get("energy_firing_kwh").is_none());
        assert!((r["cost_24h"].as_f64().unwrap() - 0.1 * l24).abs() < 1e-9);
        // A restart with a firing left open by an earlier periodic set-up
        // closes it.
        let mut saved = m.totals.clone();
        saved.firing_started = Some(day0);
        let m2 = EnergyMeter::new(1, 150.0, Operation::Continuous, saved);
        assert_eq!(m2.totals.firing_started, None);
    }

    /// A version-1 `energy.json` (no `format`, no gain or rolling fields,
    /// with net books: a firing larger than the total) loads, is upgraded
    /// with a note, and satisfies the books' invariants.
    #[test]
    fn an_old_energy_file_loads_with_a_note() {
        let v1 = r#"{"day":20000,"today_kwh":-3.5,"yesterday_kwh":12.0,"total_kwh":4.0,
            "firing_started":1728000000.0,"firing_kwh":9.0,"last_firing_kwh":30.0,"last_firing_hours":20.0}"#;
        let mut t: EnergyTotals = serde_json::from_str(v1).unwrap();
        assert_eq!(t.format, 1);
        assert!(t.upgrade().unwrap().contains("earlier version"));
        assert_eq!(
            (t.format, t.today_kwh, t.total_kwh),
            (ENERGY_FORMAT, 0.0, 9.0)
        );
        assert_eq!((t.yesterday_kwh, t.last_firing_kwh), (12.0, Some(30.0)));
        assert_eq!(t.rolling.len(), ROLLING_SLOTS);
        // Saved again it is current and needs no note.
        let mut again: EnergyTotals =
            serde_json::from_str(&serde_json::to_string(&t).unwrap()).unwrap();
        assert_eq!(again.upgrade(), None);
        assert_eq!(again, t);
    }

    proptest! {
        /// The books add up, whatever the zones do: over random sequences
        /// of heat losses (either sign, or missing) and hot faces crossing
        /// the firing threshold, with restarts from the persisted totals
        /// (JSON round trip) along the way, every loss sum is ≥ 0, the
        /// firing's and the day's never exceed the total, and loss + gain
        /// books reproduce the net energy Σ P Δt.
        #[test]
        fn firing_never_exceeds_total(
            steps in proptest::collection::vec(
                (0usize..3, proptest::option::weighted(0.9, -5000.0f64..20000.0),
                 0.0f64..1300.0, 1.0f64..7200.0, proptest::bool::weighted(0.03)),
                1..300),
            start in 0.0f64..1e6,
        ) {
            let mut m = EnergyMeter::new(3, 150.0, PERIODIC, EnergyTotals::default());
            let mut now = 1_800_000_000.0 + start;
            let mut net_kwh = 0.0;
            for (z, w, hot, dt, restart) in steps {
                now += dt;
                m.record(zone(z), w, Some(hot), dt, Timestamp::from_epoch_s(now));
                net_kwh += w.unwrap_or(0.0) * dt / J_PER_KWH;
                if restart {
                    let json = serde_json::to_string(&m.totals).unwrap();
                    let mut t: EnergyTotals = serde_json::from_str(&json).unwrap();
                    prop_assert_eq!(t.upgrade(), None);
                    m = EnergyMeter::new(3, 150.0, PERIODIC, t);
                }
                let t = &m.totals;
                let eps = 1e-9 * (1.0 + t.total_kwh);
                prop_assert!(t.firing_kwh <= t.total_kwh + eps, "{} > {}", t.firing_kwh, t.total_kwh);
                prop_assert!(t.today_kwh <= t.total_kwh + eps);
                prop_assert!(t.firing_gain_kwh <= t.gain_total_kwh + eps);
                prop_assert!(t.today_kwh >= 0.0 && t.gain_total_kwh >= 0.0);
                let (l24, g24) = m.rolling_24h_kwh(Timestamp::from_epoch_s(now));
                prop_assert!(l24 <= t.total_kwh + eps && g24 <= t.gain_total_kwh + eps);
                if let Some(last) = t.last_firing_kwh {
                    prop_assert!(last <= t.total_kwh + eps);
                }
                let r = m.report(Timestamp::from_epoch_s(now), None);
                if let Some(Some(f)) = r.energy_firing_kwh {
                    prop_assert!(f <= r.energy_total_kwh + eps);
                }
            }
            let t = &m.totals;
            prop_assert!((t.total_kwh - t.gain_total_kwh - net_kwh).abs() < 1e-6 * (1.0 + t.total_kwh + t.gain_total_kwh));
        }
    }

    /// A file that parses but cannot be true is refused as a whole; what
    /// `upgrade` mends is not.
    #[test]
    fn nonsense_totals_are_refused() {
        let ok = EnergyTotals::default();
        assert_eq!(ok.check(), Ok(()));
        // The year 292278994, as a corrupted 64-bit time gives.
        let far = EnergyTotals {
            day: 106_751_991_167,
            ..ok.clone()
        };
        assert!(far.check().unwrap_err().contains("day"));
        let future_firing = EnergyTotals {
            firing_started: Some(9.2e18),
            ..ok.clone()
        };
        assert!(future_firing.check().unwrap_err().contains("firing start"));
        let negative_hours = EnergyTotals {
            last_firing_hours: Some(-3.0),
            ..ok.clone()
        };
        assert!(negative_hours.check().is_err());
        let mut slots = ok.clone();
        slots.rolling[3] = (-1.0, 0.0);
        assert!(slots.check().is_err());
        let mendable = EnergyTotals {
            total_kwh: -5.0,
            ..ok.clone()
        };
        assert_eq!(mendable.check(), Ok(()));
    }
}
