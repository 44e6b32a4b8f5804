//! Lining condition: a baseline of the wall's thermal resistance learned
//! over a commissioning period and compared, at comparable hot-face
//! temperature, with today's. A wearing or cracking lining shows a falling
//! resistance (and a rising shell) long before a hot spot glows. Pure; the
//! daemon persists it.

use serde::{Deserialize, Serialize};

use crate::time::Timestamp;

/// Width of a hot-face temperature bin, °C: resistances are compared only
/// within a bin, since k (and so R) depends on temperature.
pub const BIN_C: f64 = 50.0;
/// Bins from 0 °C up.
pub const BINS: usize = 40;
/// States in a bin before it serves as a reference.
pub const MIN_SAMPLES: u32 = 10;

/// A zone's learned baseline.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Baseline {
    /// Start of learning, epoch s (the first state offered).
    pub started: Option<f64>,
    /// Per bin: (Σ R, n) of the states learned, m²K/W.
    pub bins: Vec<(f64, u32)>,
}

impl Default for Baseline {
    fn default() -> Self {
        Baseline {
            started: None,
            bins: vec![(0.0, 0); BINS],
        }
    }
}

fn bin(hot_face_c: f64) -> Option<usize> {
    let b = (hot_face_c / BIN_C).floor();
    (b >= 0.0 && b < BINS as f64).then_some(b as usize)
}

impl Baseline {
    /// Whether `now` is within the learning period of `days`.
    pub fn learning(&self, now: Timestamp, days: f64) -> bool {
        self.started
            .is_none_or(|s| now.epoch_s() - s < days * 86_400.0)
    }

    /// Offers a state: learned while in the learning period (only states the
    /// model check called consistent should be offered).
    pub fn record(&mut self, now: Timestamp, days: f64, hot_face_c: f64, resistance_m2k_w: f64) {
        if self.bins.len() != BINS {
            self.bins = vec![(0.0, 0); BINS];
        }
        if self.started.is_none() {
            self.started = Some(now.epoch_s());
        }
        if !self.learning(now, days) || !resistance_m2k_w.is_finite() || resistance_m2k_w <= 0.0 {
            return;
        }
        if let Some(b) = bin(hot_face_c).and_then(|b| self.bins.get_mut(b)) {
            b.0 += resistance_m2k_w;
            b.1 += 1;
        }
    }

    /// The baseline resistance at `hot_face_c`, when its bin has enough.
    pub fn reference(&self, hot_face_c: f64) -> Option<f64> {
        let &(sum, n) = self.bins.get(bin(hot_face_c)?)?;
        (n >= MIN_SAMPLES).then(|| sum / f64::from(n))
    }

    /// `(R − R_baseline) / R_baseline`, %, after the learning period.
    pub fn change_pct(
        &self,
        now: Timestamp,
        days: f64,
        hot_face_c: f64,
        resistance_m2k_w: f64,
    ) -> Option<f64> {
        if self.learning(now, days) {
            return None;
        }
        self.reference(hot_face_c)
            .map(|r| (resistance_m2k_w - r) / r * 100.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn learns_then_compares_within_a_bin() {
        let day = 86_400.0;
        let mut b = Baseline::default();
        let t = |d: f64| Timestamp::from_epoch_s(1_800_000_000.0 + d * day);
        // Two days of learning at 1000–1040 °C with R = 0.80 m²K/W, and a
        // few states at 500 °C (too few for a reference).
        for k in 0..100 {
            b.record(
                t(k as f64 * 0.02),
                2.0,
                1000.0 + (k % 5) as f64 * 10.0,
                0.80,
            );
        }
        for k in 0..5 {
            b.record(t(1.0 + k as f64 * 0.01), 2.0, 500.0, 0.9);
        }
        assert_eq!(
            b.change_pct(t(1.5), 2.0, 1010.0, 0.7),
            None,
            "still learning"
        );
        // After learning: a lining whose resistance fell to 0.72 is 10 % down.
        let c = b.change_pct(t(3.0), 2.0, 1020.0, 0.72).unwrap();
        assert!((c + 10.0).abs() < 1e-9, "{c}");
        assert_eq!(
            b.change_pct(t(3.0), 2.0, 520.0, 0.9),
            None,
            "bin with too few states"
        );
        assert_eq!(
            b.change_pct(t(3.0), 2.0, 1200.0, 0.8),
            None,
            "no baseline at that temperature"
        );
        // Nothing is learned after the period.
        b.record(t(4.0), 2.0, 1200.0, 0.1);
        assert_eq!(b.reference(1200.0), None);
        // Persisted and restored unchanged.
        let json = serde_json::to_string(&b).unwrap();
        assert_eq!(serde_json::from_str::<Baseline>(&json).unwrap(), b);
    }
}
