//! One source's health as the monitor sees it, whatever its kind: when it
//! last gave a reading (silence), how many scans it delivered, how many its
//! sequence says were lost, and how many of its frames failed to decode.
//! Facts about the transport itself (a port open or reopened) stay at the
//! edge that owns it.

use crate::time::Timestamp;

/// A source's counters since start, as published in the status.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SourceCounters {
    /// Scans handed to the monitor.
    pub scans: u64,
    /// Frames the decoder rejected (reported by the edge).
    pub decode_errors: u64,
    /// Scans lost, by gaps in the source's sequence.
    pub lost_scans: u64,
    /// Times the source's sequence restarted.
    pub restarts: u64,
}

/// One source's state.
#[derive(Debug, Clone, Default)]
pub struct SourceState {
    /// Latest reading of any kind from the source.
    pub seen: Option<Timestamp>,
    /// Whether it is silent: no reading within its silence limit.
    pub silent: bool,
    pub counters: SourceCounters,
}

impl SourceState {
    /// Counts one scan and what its sequence says.
    pub fn note_scan(&mut self, lost_before: u32, restarted: bool) {
        let c = &mut self.counters;
        c.scans += 1;
        c.lost_scans += u64::from(lost_before);
        c.restarts += u64::from(restarted);
    }

    /// Whether the source is silent at `now`: nothing seen for longer than
    /// `limit_s` (counted from `start` before its first reading).
    pub fn silent_at(&self, now: Timestamp, start: Timestamp, limit_s: f64) -> bool {
        now.since(self.seen.unwrap_or(start)) > limit_s
    }

    /// The first instant at which the source is silent unless a reading
    /// comes first (silence is "longer than the limit").
    pub fn silent_from(&self, start: Timestamp, limit_s: f64) -> Timestamp {
        let seen = self.seen.unwrap_or(start);
        seen.plus_s(limit_s)
            .first_when(|t| self.silent_at(t, start, limit_s))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_scans_losses_and_restarts() {
        let mut s = SourceState::default();
        s.note_scan(0, false);
        s.note_scan(3, false);
        s.note_scan(0, true);
        assert_eq!(
            s.counters,
            SourceCounters {
                scans: 3,
                decode_errors: 0,
                lost_scans: 3,
                restarts: 1
            }
        );
    }

    #[test]
    fn silent_only_after_the_limit() {
        let start = Timestamp::from_epoch_s(100.0);
        let mut s = SourceState::default();
        assert!(!s.silent_at(Timestamp::from_epoch_s(110.0), start, 10.0));
        assert!(s.silent_at(Timestamp::from_epoch_s(110.5), start, 10.0));
        s.seen = Some(Timestamp::from_epoch_s(120.0));
        assert!(!s.silent_at(Timestamp::from_epoch_s(125.0), start, 10.0));
        let from = s.silent_from(start, 10.0);
        assert!(s.silent_at(from, start, 10.0));
        assert!(!s.silent_at(
            Timestamp::from_epoch_s(from.epoch_s().next_down()),
            start,
            10.0
        ));
        assert!(from.since(Timestamp::from_epoch_s(130.0)) < 1e-9);
    }
}
