//! The edges' one clock: UTC anchored once at start, advanced by the
//! monotonic clock (so intervals never jump when NTP steps the wall clock),
//! optionally accelerated for the demo, or driven by the demo's simulator.

use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use crate::time::Timestamp;

#[derive(Debug, Clone, Copy)]
pub struct Clock {
    anchor_utc: Timestamp,
    anchor: tokio::time::Instant,
    speed: f64,
    /// Seconds since `anchor_utc` as set by a [`ClockDriver`]; `None` for a
    /// clock that runs by itself.
    driven: Option<&'static AtomicU64>,
}

/// Sets the time of a clock made by [`Clock::driven`].
#[derive(Debug)]
pub struct ClockDriver(&'static AtomicU64);

impl ClockDriver {
    /// The clock now reads `sim_s` seconds after its start.
    pub fn set(&self, sim_s: f64) {
        self.0.store(sim_s.to_bits(), Ordering::Release);
    }
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
            driven: None,
        }
    }

    /// Simulated time that stands still until the returned driver moves it:
    /// the demo's simulator sets it as it sends, so the daemon never runs
    /// ahead of the frames. `speed` is the nominal pace, for the edges'
    /// real-time timeouts. The time cell lives as long as the process (one
    /// per demo run), which keeps the clock `Copy`.
    pub fn driven(speed: f64) -> (Self, ClockDriver) {
        let cell: &'static AtomicU64 = Box::leak(Box::new(AtomicU64::new(0f64.to_bits())));
        let clock = Clock {
            driven: Some(cell),
            ..Self::accelerated(speed)
        };
        (clock, ClockDriver(cell))
    }

    pub fn now(&self) -> Timestamp {
        let elapsed_s = match self.driven {
            Some(cell) => f64::from_bits(cell.load(Ordering::Acquire)),
            None => {
                let elapsed = tokio::time::Instant::now().duration_since(self.anchor);
                elapsed.as_secs_f64() * self.speed
            }
        };
        self.anchor_utc.plus_s(elapsed_s)
    }

    pub fn speed(&self) -> f64 {
        self.speed
    }

    /// Real duration of `sim_s` clock seconds at the clock's (nominal) speed.
    pub fn real_duration(&self, sim_s: f64) -> Duration {
        Duration::from_secs_f64((sim_s / self.speed).clamp(0.0, 86_400.0))
    }

    /// The real instant at which the clock will read `t` (at its nominal
    /// speed, for a driven clock).
    pub fn instant_of(&self, t: Timestamp) -> tokio::time::Instant {
        let sim = t.since(self.anchor_utc).max(0.0);
        self.anchor + Duration::from_secs_f64((sim / self.speed).min(1e9))
    }
}
