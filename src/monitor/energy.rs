//! Energy accounting: heat lost through the walls integrated over time, per
//! UTC day and per firing, with its cost. Pure: fed with zone reports and
//! `now`; the daemon persists it (`serde`) in the state directory.
//!
//! A firing starts when the hottest zone's hot face rises above
//! `firing_start_c` and ends when every zone has fallen back below it.

use serde::{Deserialize, Serialize};

use crate::time::Timestamp;

/// 1 kWh in joules.
pub const J_PER_KWH: f64 = 3.6e6;

/// The persistent part of the meter.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct EnergyTotals {
    /// UTC day (days since 1970-01-01) that `today_kwh` belongs to.
    pub day: i64,
    pub today_kwh: f64,
    pub yesterday_kwh: f64,
    pub total_kwh: f64,
    /// Start of the firing under way, epoch seconds.
    pub firing_started: Option<f64>,
    pub firing_kwh: f64,
    pub last_firing_kwh: Option<f64>,
    pub last_firing_hours: Option<f64>,
}

#[derive(Debug, Clone)]
pub struct EnergyMeter {
    pub totals: EnergyTotals,
    firing_start_c: f64,
    /// Latest (heat loss W, hot face °C) of each zone.
    latest: Vec<Option<(f64, f64)>>,
}

impl EnergyMeter {
    pub fn new(zones: usize, firing_start_c: f64, totals: EnergyTotals) -> Self {
        EnergyMeter {
            totals,
            firing_start_c,
            latest: vec![None; zones],
        }
    }

    /// A zone's state: its heat loss over the `interval_s` that just ended
    /// (rectangle rule on the interval the state describes). A zone without
    /// numbers adds nothing (and its gap is not guessed).
    pub fn record(
        &mut self,
        zone: usize,
        heat_loss_w: Option<f64>,
        hot_face_c: Option<f64>,
        interval_s: f64,
        now: Timestamp,
    ) {
        self.roll_day(now);
        if let Some(slot) = self.latest.get_mut(zone) {
            *slot = heat_loss_w.zip(hot_face_c);
        }
        if let Some(w) = heat_loss_w.filter(|w| w.is_finite()) {
            let kwh = w * interval_s / J_PER_KWH;
            self.totals.today_kwh += kwh;
            self.totals.total_kwh += kwh;
            if self.totals.firing_started.is_some() {
                self.totals.firing_kwh += kwh;
            }
        }
        self.firing_edge(now);
    }

    fn roll_day(&mut self, now: Timestamp) {
        let day = (now.epoch_s() / 86_400.0).floor() as i64;
        if day != self.totals.day {
            self.totals.yesterday_kwh = if day == self.totals.day + 1 {
                self.totals.today_kwh
            } else {
                0.0
            };
            self.totals.today_kwh = 0.0;
            self.totals.day = day;
        }
    }

    fn firing_edge(&mut self, now: Timestamp) {
        let hottest = self
            .latest
            .iter()
            .flatten()
            .map(|&(_, t)| t)
            .fold(f64::NEG_INFINITY, f64::max);
        match self.totals.firing_started {
            None if hottest > self.firing_start_c => {
                self.totals.firing_started = Some(now.epoch_s());
                self.totals.firing_kwh = 0.0;
            }
            Some(start) if hottest.is_finite() && hottest < self.firing_start_c => {
                self.totals.last_firing_kwh = Some(self.totals.firing_kwh);
                self.totals.last_firing_hours = Some((now.epoch_s() - start) / 3600.0);
                self.totals.firing_started = None;
            }
            _ => {}
        }
    }

    /// Sum of the zones' latest heat losses, W, and how many zones have one.
    pub fn kiln_heat_loss_w(&self) -> (f64, usize) {
        let mut sum = 0.0;
        let mut n = 0;
        for &(w, _) in self.latest.iter().flatten() {
            sum += w;
            n += 1;
        }
        (sum, n)
    }
}

/// The `{root}/kiln/state` payload.
#[derive(Debug, Clone, Serialize)]
pub struct KilnReport<'a> {
    pub schema: &'static str,
    pub time: Timestamp,
    pub heat_loss_w: f64,
    pub zones_reporting: usize,
    pub zones: usize,
    pub energy_today_kwh: f64,
    pub energy_yesterday_kwh: f64,
    pub energy_total_kwh: f64,
    pub firing_active: bool,
    pub firing_started: Option<Timestamp>,
    pub energy_firing_kwh: Option<f64>,
    pub last_firing_kwh: Option<f64>,
    pub last_firing_hours: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub currency: Option<&'a str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cost_today: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cost_firing: Option<f64>,
}

impl EnergyMeter {
    pub fn report<'a>(&self, now: Timestamp, price: Option<(f64, &'a str)>) -> KilnReport<'a> {
        let (heat_loss_w, zones_reporting) = self.kiln_heat_loss_w();
        let t = &self.totals;
        let firing = t.firing_started.map(|_| t.firing_kwh);
        KilnReport {
            schema: "wallflux.kiln/1",
            time: now,
            heat_loss_w,
            zones_reporting,
            zones: self.latest.len(),
            energy_today_kwh: t.today_kwh,
            energy_yesterday_kwh: t.yesterday_kwh,
            energy_total_kwh: t.total_kwh,
            firing_active: t.firing_started.is_some(),
            firing_started: t.firing_started.map(Timestamp::from_epoch_s),
            energy_firing_kwh: firing,
            last_firing_kwh: t.last_firing_kwh,
            last_firing_hours: t.last_firing_hours,
            currency: price.map(|(_, c)| c),
            cost_today: price.map(|(p, _)| p * t.today_kwh),
            cost_firing: price.and_then(|(p, _)| firing.map(|f| p * f)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Three zones losing a constant 1000, 2000 and 500 W for one UTC day
    /// in 60 s intervals: 3500 W × 24 h = 84 kWh exactly (E = P t).
    #[test]
    fn constant_loss_over_a_day_is_exact() {
        let day0 = 20_000.0 * 86_400.0;
        let mut m = EnergyMeter::new(3, 100.0, EnergyTotals::default());
        for k in 1..=1440 {
            let now = Timestamp::from_epoch_s(day0 + f64::from(k) * 60.0 - 0.5);
            for (z, w) in [1000.0, 2000.0, 500.0].into_iter().enumerate() {
                m.record(z, Some(w), Some(900.0), 60.0, now);
            }
        }
        assert!(
            (m.totals.today_kwh - 84.0).abs() < 1e-9,
            "{}",
            m.totals.today_kwh
        );
        assert_eq!(m.kiln_heat_loss_w(), (3500.0, 3));
        // The next day starts at zero and keeps yesterday.
        m.record(
            0,
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
            Some((0.12, "EUR")),
        );
        assert!((r.cost_today.unwrap() - 0.12 * r.energy_today_kwh).abs() < 1e-12);
    }

    #[test]
    fn a_firing_is_counted_from_rise_to_fall() {
        let mut m = EnergyMeter::new(1, 100.0, EnergyTotals::default());
        let at = |s: f64| Timestamp::from_epoch_s(1_800_000_000.0 + s);
        m.record(0, Some(100.0), Some(40.0), 3600.0, at(3600.0));
        assert_eq!(m.totals.firing_started, None);
        // 10 h at 5 kW while hot: 50 kWh (the first hot state opens the
        // firing, so its own interval is counted from the next one).
        for h in 2..=11 {
            m.record(
                0,
                Some(5000.0),
                Some(800.0),
                3600.0,
                at(f64::from(h) * 3600.0),
            );
        }
        m.record(0, Some(200.0), Some(60.0), 3600.0, at(12.0 * 3600.0));
        assert!((m.totals.last_firing_kwh.unwrap() - 9.0 * 5.0 - 0.2).abs() < 1e-9);
        assert!((m.totals.last_firing_hours.unwrap() - 10.0).abs() < 1e-9);
        assert_eq!(m.totals.firing_started, None);
        // A zone with no numbers adds nothing.
        let before = m.totals.total_kwh;
        m.record(0, None, None, 3600.0, at(13.0 * 3600.0));
        assert_eq!(m.totals.total_kwh, before);
    }
}
