//! Folding of repeated log lines. A line that can repeat without bound (a
//! refused command in a flood, a reconnect, an ignored message) is written
//! at most once per window; the line that ends a window says how many were
//! folded into it, so the journal keeps its alarm lines and still tells how
//! much happened.

use std::time::{Duration, Instant};

/// How often a folded line is written at most.
pub const FOLD_WINDOW: Duration = Duration::from_secs(60);

/// One kind of repeated line.
#[derive(Debug)]
pub struct Fold {
    window: Duration,
    last: Option<Instant>,
    folded: u64,
}

impl Default for Fold {
    fn default() -> Self {
        Fold::new(FOLD_WINDOW)
    }
}

impl Fold {
    /// At most one line per `window`.
    pub fn new(window: Duration) -> Self {
        Fold {
            window,
            last: None,
            folded: 0,
        }
    }

    /// One occurrence at `now`: `Some(n)` when its line may be written (`n`
    /// occurrences were folded since the last line), `None` when it is
    /// folded.
    pub fn admit(&mut self, now: Instant) -> Option<u64> {
        match self.last {
            Some(t) if now.saturating_duration_since(t) < self.window => {
                self.folded += 1;
                None
            }
            _ => {
                self.last = Some(now);
                Some(std::mem::take(&mut self.folded))
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_line_per_window_with_the_count_of_the_folded() {
        let t0 = Instant::now();
        let s = |x: u64| t0 + Duration::from_secs(x);
        let mut f = Fold::new(Duration::from_secs(60));
        assert_eq!(f.admit(s(0)), Some(0));
        // A flood: 1000 more within the window are folded.
        for i in 0..1000 {
            assert_eq!(f.admit(t0 + Duration::from_millis(i * 50)), None);
        }
        assert_eq!(f.admit(s(59)), None);
        // The first after the window says how many it stands for.
        assert_eq!(f.admit(s(60)), Some(1001));
        assert_eq!(f.admit(s(61)), None);
        assert_eq!(f.admit(s(200)), Some(1));
        assert_eq!(f.admit(s(400)), Some(0));
    }
}
