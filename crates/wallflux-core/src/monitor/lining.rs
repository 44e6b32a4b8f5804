//! Lining condition: a baseline of the wall's thermal resistance learned
//! over a commissioning period and compared, at comparable hot-face
//! temperature, with today's. A wearing or cracking lining shows a falling
//! resistance (and a rising shell) long before a hot spot glows. Pure; the
//! daemon persists it (`baselines.json`).
//!
//! The baseline has a life an operator controls (commands `baseline_start`,
//! `baseline_stop`, `baseline_reset` on `{root}/cmd`):
//!
//! - `none`: nothing learned, nothing learning, no comparison. Where a zone
//!   with `baseline_start = "command"` begins, and where `baseline_reset`
//!   (after a reline) leads.
//! - `learning`: consistent states are learned until `baseline_days` after
//!   the start; no comparison yet. Where a zone with `baseline_start =
//!   "first_run"` (the default) begins, and where `baseline_start` leads.
//! - `learned`: the period is over (or `baseline_stop` ended it early);
//!   today's resistance is compared with the bins that hold enough states.

use serde::{Deserialize, Serialize};

use crate::time::Timestamp;

/// Width of a hot-face temperature bin, °C: resistances are compared only
/// within a bin, since k (and so R) depends on temperature.
pub const BIN_C: f64 = 50.0;
/// Bins from 0 °C up.
pub const BINS: usize = 40;
/// States in a bin before it serves as a reference.
pub const MIN_SAMPLES: u32 = 10;

crate::word_enum! {
    /// Where a baseline is in its life (see the module doc).
    #[derive(Debug, Clone, Copy, PartialEq, Eq)]
    pub enum Phase {
        None = "none",
        Learning = "learning",
        Learned = "learned",
    }
}

/// Why a baseline command was refused.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum BaselineError {
    /// `baseline_start` while learning.
    #[error("the lining baseline is already learning")]
    AlreadyLearning,
    /// `baseline_start` with a learned baseline (reset it first, after a reline).
    #[error("the lining baseline is already learned: reset it first (after a reline)")]
    AlreadyLearned,
    /// `baseline_stop` when not learning.
    #[error("the lining baseline is not learning")]
    NotLearning,
    /// `baseline_stop` before any temperature bin holds enough states.
    #[error(
        "nothing learned yet: no hot-face temperature bin holds {} consistent states",
        MIN_SAMPLES
    )]
    NotReady,
    /// `baseline_reset` with nothing to reset.
    #[error("there is no lining baseline to reset")]
    NothingToReset,
}

/// A zone's learned baseline.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Baseline {
    /// Start of learning, epoch s.
    pub started: Option<f64>,
    /// Per bin: (Σ R, n) of the states learned, m²K/W.
    pub bins: Vec<(f64, u32)>,
    /// The phase; absent in files written before the baseline had
    /// commands (then: learning from `started`, as those versions did).
    #[serde(default)]
    pub phase: Option<Phase>,
    /// When learning ended (period over or stopped), epoch s.
    #[serde(default)]
    pub ended: Option<f64>,
    /// Who started, stopped or reset it last (the audit log has the rest).
    #[serde(default)]
    pub by: Option<String>,
}

impl Default for Baseline {
    fn default() -> Self {
        Baseline {
            started: None,
            bins: vec![(0.0, 0); BINS],
            phase: Some(Phase::None),
            ended: None,
            by: None,
        }
    }
}

fn bin(hot_face_c: f64) -> Option<usize> {
    let b = (hot_face_c / BIN_C).floor();
    (b >= 0.0 && b < BINS as f64).then_some(b as usize)
}

/// The baseline as published on the zone state (`lining_baseline`).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct BaselineReport {
    /// `none`, `learning` or `learned`.
    pub state: &'static str,
    /// Start of learning.
    pub started: Option<Timestamp>,
    /// While learning: when the period will end.
    pub due: Option<Timestamp>,
    /// Learned: when learning ended.
    pub ended: Option<Timestamp>,
    /// Hot-face bins (50 °C wide) holding enough states to be a reference.
    pub reference_bins: usize,
}

impl Baseline {
    /// A baseline that starts learning at the first state offered (the
    /// behaviour of `baseline_start = "first_run"`).
    pub fn learning_from_first_state() -> Self {
        Baseline {
            phase: Some(Phase::Learning),
            ..Baseline::default()
        }
    }

    /// Brings a loaded baseline to the current layout; returns a note for
    /// the log when it came from an earlier version.
    pub fn upgrade(&mut self) -> Option<&'static str> {
        if self.bins.len() != BINS {
            self.bins = vec![(0.0, 0); BINS];
        }
        if self.phase.is_some() {
            return None;
        }
        // Those versions learned from the first state on, for the period.
        self.phase = Some(Phase::Learning);
        Some("lining baseline from an earlier version: loaded, learning from its saved start")
    }

    /// The phase at `now`: learning turns into learned when the period of
    /// `days` from the start is over.
    pub fn phase(&self, now: Timestamp, days: f64) -> Phase {
        match (self.phase.unwrap_or(Phase::Learning), self.started) {
            (Phase::Learning, Some(s)) if now.epoch_s() - s >= days * 86_400.0 => Phase::Learned,
            (p, _) => p,
        }
    }

    /// Whether `now` is within the learning period of `days` (or learning
    /// waits for its first state).
    pub fn learning(&self, now: Timestamp, days: f64) -> bool {
        self.phase(now, days) == Phase::Learning
    }

    fn settle(&mut self, now: Timestamp, days: f64) {
        let phase = self.phase(now, days);
        if phase == Phase::Learned && self.phase != Some(Phase::Learned) {
            self.ended = self.started.map(|s| s + days * 86_400.0);
        }
        self.phase = Some(phase);
    }

    /// Offers a state: learned while learning (only states the model check
    /// called consistent should be offered). The first state offered to a
    /// baseline that is learning but has no start yet starts its period.
    pub fn record(&mut self, now: Timestamp, days: f64, hot_face_c: f64, resistance_m2k_w: f64) {
        if self.bins.len() != BINS {
            self.bins = vec![(0.0, 0); BINS];
        }
        self.settle(now, days);
        if self.phase != Some(Phase::Learning) {
            return;
        }
        if self.started.is_none() {
            self.started = Some(now.epoch_s());
        }
        if !resistance_m2k_w.is_finite() || resistance_m2k_w <= 0.0 {
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

    /// Bins that serve as a reference.
    pub fn reference_bins(&self) -> usize {
        self.bins.iter().filter(|b| b.1 >= MIN_SAMPLES).count()
    }

    /// `(R − R_baseline) / R_baseline`, %, once learned.
    pub fn change_pct(
        &self,
        now: Timestamp,
        days: f64,
        hot_face_c: f64,
        resistance_m2k_w: f64,
    ) -> Option<f64> {
        if self.phase(now, days) != Phase::Learned {
            return None;
        }
        self.reference(hot_face_c)
            .map(|r| (resistance_m2k_w - r) / r * 100.0)
    }

    /// `baseline_start`: learning from `now` for `days`. From `none` only:
    /// a learned baseline is reset first, so that no command overwrites
    /// one by accident.
    pub fn start(&mut self, by: &str, now: Timestamp, days: f64) -> Result<(), BaselineError> {
        match self.phase(now, days) {
            Phase::Learning => Err(BaselineError::AlreadyLearning),
            Phase::Learned => Err(BaselineError::AlreadyLearned),
            Phase::None => {
                *self = Baseline {
                    started: Some(now.epoch_s()),
                    phase: Some(Phase::Learning),
                    by: Some(by.to_string()),
                    ..Baseline::default()
                };
                Ok(())
            }
        }
    }

    /// `baseline_stop`: ends learning now and uses what is learned; refused
    /// while no bin holds enough states to be a reference.
    pub fn stop(&mut self, by: &str, now: Timestamp, days: f64) -> Result<(), BaselineError> {
        if self.phase(now, days) != Phase::Learning {
            return Err(BaselineError::NotLearning);
        }
        if self.reference_bins() == 0 {
            return Err(BaselineError::NotReady);
        }
        self.phase = Some(Phase::Learned);
        self.ended = Some(now.epoch_s());
        self.by = Some(by.to_string());
        Ok(())
    }

    /// `baseline_reset`: forgets everything learned (after a reline); the
    /// baseline waits for `baseline_start`.
    pub fn reset(&mut self, by: &str, now: Timestamp, days: f64) -> Result<(), BaselineError> {
        if self.phase(now, days) == Phase::None && self.reference_bins() == 0 {
            return Err(BaselineError::NothingToReset);
        }
        *self = Baseline {
            by: Some(by.to_string()),
            ..Baseline::default()
        };
        Ok(())
    }

    /// The `lining_baseline` object of the zone state at `now`.
    pub fn report(&self, now: Timestamp, days: f64) -> BaselineReport {
        let phase = self.phase(now, days);
        let ts = Timestamp::from_epoch_s;
        BaselineReport {
            state: phase.name(),
            started: self.started.filter(|_| phase != Phase::None).map(ts),
            due: self
                .started
                .filter(|_| phase == Phase::Learning)
                .map(|s| ts(s + days * 86_400.0)),
            ended: match phase {
                Phase::Learned => self
                    .ended
                    .or(self.started.map(|s| s + days * 86_400.0))
                    .map(ts),
                _ => None,
            },
            reference_bins: self.reference_bins(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const DAY: f64 = 86_400.0;

    fn t(d: f64) -> Timestamp {
        Timestamp::from_epoch_s(1_800_000_000.0 + d * DAY)
    }

    #[test]
    fn learns_then_compares_within_a_bin() {
        let mut b = Baseline::learning_from_first_state();
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
        assert_eq!(b.report(t(1.5), 2.0).state, "learning");
        assert_eq!(b.report(t(1.5), 2.0).due, Some(t(2.0)));
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
        let r = b.report(t(4.0), 2.0);
        assert_eq!(
            (r.state, r.ended, r.reference_bins),
            ("learned", Some(t(2.0)), 1)
        );
        // Persisted and restored unchanged.
        let json = serde_json::to_string(&b).unwrap();
        assert_eq!(serde_json::from_str::<Baseline>(&json).unwrap(), b);
    }

    /// The commissioning life: a fresh `command` zone learns nothing until
    /// started; stop ends learning early (refused while nothing is
    /// learned); start on a learned baseline is refused; reset forgets it.
    #[test]
    fn start_stop_reset() {
        let mut b = Baseline::default();
        b.record(t(0.0), 7.0, 1000.0, 0.8);
        assert_eq!(
            (b.reference_bins(), b.started),
            (0, None),
            "none: nothing learned"
        );
        assert_eq!(b.stop("a", t(0.1), 7.0), Err(BaselineError::NotLearning));
        assert_eq!(
            b.reset("a", t(0.1), 7.0),
            Err(BaselineError::NothingToReset)
        );
        b.start("j.smith", t(1.0), 7.0).unwrap();
        assert_eq!(
            b.start("j.smith", t(1.0), 7.0),
            Err(BaselineError::AlreadyLearning)
        );
        assert_eq!(b.stop("j.smith", t(1.0), 7.0), Err(BaselineError::NotReady));
        for k in 0..12 {
            b.record(t(1.0 + k as f64 * 0.01), 7.0, 1010.0, 0.8);
        }
        b.stop("j.smith", t(1.5), 7.0).unwrap();
        let r = b.report(t(1.6), 7.0);
        assert_eq!(
            (r.state, r.started, r.ended),
            ("learned", Some(t(1.0)), Some(t(1.5)))
        );
        assert!((b.change_pct(t(1.6), 7.0, 1010.0, 0.76).unwrap() + 5.0).abs() < 1e-9);
        // Learning has ended: later states change nothing.
        b.record(t(1.7), 7.0, 1010.0, 0.1);
        assert!((b.reference(1010.0).unwrap() - 0.8).abs() < 1e-12);
        assert_eq!(
            b.start("x", t(2.0), 7.0),
            Err(BaselineError::AlreadyLearned)
        );
        b.reset("m.jones", t(30.0), 7.0).unwrap();
        assert_eq!(b.report(t(30.0), 7.0).state, "none");
        assert_eq!(b.reference(1010.0), None);
        assert_eq!(b.by.as_deref(), Some("m.jones"));
    }

    /// A `baselines.json` entry from before the commands (`started` and
    /// `bins` only) loads: learning from its saved start, learned after.
    #[test]
    fn an_old_baseline_loads() {
        let mut bins = vec![(0.0, 0); BINS];
        bins[20] = (8.0, 10);
        let old = serde_json::json!({"started": t(0.0).epoch_s(), "bins": bins}).to_string();
        let mut b: Baseline = serde_json::from_str(&old).unwrap();
        assert!(b.upgrade().is_some());
        assert_eq!(b.report(t(1.0), 7.0).state, "learning");
        assert_eq!(b.report(t(8.0), 7.0).state, "learned");
        assert!((b.change_pct(t(8.0), 7.0, 1020.0, 0.72).unwrap() + 10.0).abs() < 1e-9);
        let mut again: Baseline =
            serde_json::from_str(&serde_json::to_string(&b).unwrap()).unwrap();
        assert_eq!(again.upgrade(), None);
    }
}
