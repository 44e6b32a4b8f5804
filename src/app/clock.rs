//! The edges' one clock: UTC anchored once at start, advanced by the
//! monotonic clock (so intervals never jump when NTP steps the wall clock),
//! optionally accelerated for the demo.

use std::time::{Duration, SystemTime, UNIX_EPOCH};

use crate::time::Timestamp;

#[derive(Debug, Clone, Copy)]
pub struct Clock {
    anchor_utc: Timestamp,
    anchor: tokio::time::Instant,
    speed: f64,
}

impl Clock {
    /// Real time.
    pub fn real() -> Self {
        Self::accelerated(1.0)
    }

    /// Simulated time running `speed` times faster than real time, from now.
    pub fn accelerated(speed: f64) -> Self {
        let utc = SystemTime::now()
            .duration_since(UNIX_EPOCH)
            .map_or(0.0, |d| d.as_secs_f64());
        Clock {
            anchor_utc: Timestamp::from_epoch_s(utc),
            anchor: tokio::time::Instant::now(),
            speed,
        }
    }

    pub fn now(&self) -> Timestamp {
        let elapsed = tokio::time::Instant::now().duration_since(self.anchor);
        self.anchor_utc.plus_s(elapsed.as_secs_f64() * self.speed)
    }

    pub fn speed(&self) -> f64 {
        self.speed
    }

    /// Real duration of `sim_s` clock seconds.
    pub fn real_duration(&self, sim_s: f64) -> Duration {
        Duration::from_secs_f64((sim_s / self.speed).clamp(0.0, 86_400.0))
    }

    /// The real instant at which the clock will read `t`.
    pub fn instant_of(&self, t: Timestamp) -> tokio::time::Instant {
        let sim = t.since(self.anchor_utc).max(0.0);
        self.anchor + Duration::from_secs_f64((sim / self.speed).min(1e9))
    }
}
