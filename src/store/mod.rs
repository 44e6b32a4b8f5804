//! The local database in the state directory (`store.db`, SQLite in WAL
//! mode): the spool of events not yet acknowledged by the broker, and the
//! history of zone states, kiln states and events.
//!
//! # The spool
//! Every event (alarm transition, trend alert, command reply and audit,
//! the spool's own drop notices) is written to `outbox` before it is
//! handed to the MQTT client and deleted only when the broker's PUBACK for
//! it has arrived. Rows are committed once per round of the engine (one
//! fsync for all that round wrote, `synchronous = FULL`), so a SIGKILL or a
//! power cut loses nothing that was committed, and the database is never
//! left half-written (SQLite's own journal). Delivery is at least once: an
//! event whose PUBACK arrived just before a kill, but whose deletion was
//! not yet committed, is sent again at the next start (the event's
//! `event_id` and `seq` let a subscriber see it is the same).
//!
//! The spool is bounded by `[store] spool_max_mb` and `spool_max_age_h`:
//! beyond them the oldest events go, and the loss is logged, counted and
//! announced by an event of its own. A dropped event is still in the
//! history, so `wallflux export` can recover it.
//!
//! # The history
//! `history` keeps every zone state, kiln state and event for
//! `[store] history_days`, pruned hourly; `wallflux export` reads it, also
//! while the daemon runs (WAL lets a reader in beside the writer).
//!
//! # A damaged database
//! A file that does not open as a database, or fails SQLite's quick check,
//! is moved aside (`store.db.bad`, with its `-wal` and `-shm`) and a new one
//! started, with one log line: never a crash loop.

pub mod export;

use std::path::{Path, PathBuf};

use rusqlite::{params, Connection, OpenFlags, OptionalExtension};

use crate::config::StoreSettings;
use crate::time::Timestamp;

/// The database's file name in the state directory.
pub const STORE_FILE: &str = "store.db";

/// The version of the tables below, in `PRAGMA user_version`.
const SCHEMA_VERSION: i64 = 1;

const SCHEMA: &str = "
CREATE TABLE IF NOT EXISTS outbox (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    time_ms INTEGER NOT NULL,
    topic TEXT NOT NULL,
    payload BLOB NOT NULL,
    offline INTEGER NOT NULL,
    correlation BLOB
);
CREATE TABLE IF NOT EXISTS history (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    time_ms INTEGER NOT NULL,
    kind TEXT NOT NULL,
    zone TEXT,
    payload BLOB NOT NULL
);
CREATE INDEX IF NOT EXISTS history_by_time ON history (time_ms);
CREATE TABLE IF NOT EXISTS state (
    name TEXT PRIMARY KEY,
    time_ms INTEGER NOT NULL,
    json BLOB NOT NULL
);
CREATE TABLE IF NOT EXISTS dropped (
    id INTEGER PRIMARY KEY CHECK (id = 1),
    count INTEGER NOT NULL,
    bytes INTEGER NOT NULL,
    first_ms INTEGER NOT NULL,
    last_ms INTEGER NOT NULL,
    bound TEXT NOT NULL
);
";

/// How many bytes a row costs beyond its payload (SQLite's record header,
/// the topic, the key and the page's share): for the spool's size bound,
/// an estimate on the safe side.
const ROW_OVERHEAD_BYTES: u64 = 96;

/// What the history holds, as `wallflux export --kind` names it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HistoryKind {
    Zone,
    Kiln,
    Event,
}

impl HistoryKind {
    pub fn word(self) -> &'static str {
        match self {
            HistoryKind::Zone => "zone",
            HistoryKind::Kiln => "kiln",
            HistoryKind::Event => "event",
        }
    }

    pub fn from_word(w: &str) -> Option<Self> {
        Some(match w {
            "zone" => HistoryKind::Zone,
            "kiln" => HistoryKind::Kiln,
            "event" => HistoryKind::Event,
            _ => return None,
        })
    }
}

/// An event in the spool.
#[derive(Debug, Clone, PartialEq)]
pub struct Spooled {
    pub seq: i64,
    pub time: Timestamp,
    pub topic: String,
    pub payload: Vec<u8>,
    /// Written while the broker was away (or before this start): sent as
    /// backfill.
    pub offline: bool,
    /// MQTT 5: the correlation data of the command this reply answers.
    pub correlation: Option<Vec<u8>>,
}

/// Events the bounds pushed out of the spool in one go.
#[derive(Debug, Clone, PartialEq)]
pub struct Dropped {
    pub count: u64,
    pub bytes: u64,
    pub first: Timestamp,
    pub last: Timestamp,
    /// The bound that was hit: `spool_max_mb` or `spool_max_age_h`.
    pub bound: &'static str,
}

/// The spool's counters, for the status.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct SpoolStats {
    pub events: u64,
    pub bytes: u64,
    pub oldest: Option<Timestamp>,
    pub dropped: u64,
}

/// How the database was found at start.
#[derive(Debug)]
pub enum Opened {
    /// A new, empty database.
    New,
    /// An existing one, with this many events still to send.
    Existing { unsent: u64 },
    /// The old file was damaged: moved aside to this path, for this reason;
    /// a new one was started.
    MovedAside { to: PathBuf, why: String },
}

pub struct Store {
    conn: Connection,
    limits: StoreSettings,
    in_tx: bool,
    /// Rows and estimated bytes in the outbox, and its oldest time (kept
    /// here so the bounds cost no query per event).
    events: u64,
    bytes: u64,
    oldest_ms: Option<i64>,
    dropped: u64,
}

fn ms(t: Timestamp) -> i64 {
    (t.epoch_s() * 1000.0).round() as i64
}

fn from_ms(ms: i64) -> Timestamp {
    Timestamp::from_epoch_s(ms as f64 / 1000.0)
}

impl Store {
    /// Opens (or creates) `dir/store.db`; a damaged file is moved aside and
    /// a new one started. An error only when even a new database cannot be
    /// made (the directory not writable, the disk full).
    pub fn open(dir: &Path, limits: StoreSettings) -> rusqlite::Result<(Store, Opened)> {
        Self::open_with(dir, limits, true)
    }

    /// As [`open`](Self::open); `power_safe = false` leaves the fsync of
    /// each commit to the system (a commit still survives a crash of the
    /// process, not a power cut): for simulated runs, whose clock runs many
    /// times faster than real time.
    pub fn open_with(
        dir: &Path,
        limits: StoreSettings,
        power_safe: bool,
    ) -> rusqlite::Result<(Store, Opened)> {
        let path = dir.join(STORE_FILE);
        let existed = path.exists();
        let opened = Self::open_at(&path, limits.clone()).and_then(|s| {
            if !power_safe {
                s.conn.pragma_update(None, "synchronous", "NORMAL")?;
            }
            Ok(s)
        });
        match opened {
            Ok(s) => {
                let how = if existed {
                    Opened::Existing { unsent: s.events }
                } else {
                    Opened::New
                };
                Ok((s, how))
            }
            Err(e) if existed => {
                let to = dir.join(format!("{STORE_FILE}.bad"));
                for ext in ["", "-wal", "-shm"] {
                    let from = dir.join(format!("{STORE_FILE}{ext}"));
                    let _ = std::fs::rename(&from, dir.join(format!("{STORE_FILE}.bad{ext}")));
                }
                let s = Self::open_at(&path, limits)?;
                if !power_safe {
                    s.conn.pragma_update(None, "synchronous", "NORMAL")?;
                }
                Ok((
                    s,
                    Opened::MovedAside {
                        to,
                        why: e.to_string(),
                    },
                ))
            }
            Err(e) => Err(e),
        }
    }

    fn open_at(path: &Path, limits: StoreSettings) -> rusqlite::Result<Store> {
        if let Some(d) = path.parent() {
            let _ = std::fs::create_dir_all(d);
        }
        let conn = Connection::open(path)?;
        conn.busy_timeout(std::time::Duration::from_secs(5))?;
        // Space freed by pruning goes back to the file system bit by bit
        // (only takes effect on a new database).
        conn.pragma_update(None, "auto_vacuum", "INCREMENTAL")?;
        let mode: String =
            conn.pragma_update_and_check(None, "journal_mode", "WAL", |r| r.get(0))?;
        if !mode.eq_ignore_ascii_case("wal") {
            return Err(rusqlite::Error::InvalidParameterName(format!(
                "the database would not go into WAL mode ({mode})"
            )));
        }
        conn.pragma_update(None, "synchronous", "FULL")?;
        // Keep the write-ahead log small on an SD card.
        conn.pragma_update(None, "journal_size_limit", 4 * 1024 * 1024)?;
        let check: String = conn.query_row("PRAGMA quick_check", [], |r| r.get(0))?;
        if check != "ok" {
            return Err(rusqlite::Error::InvalidParameterName(format!(
                "the database failed its check: {check}"
            )));
        }
        let version: i64 = conn.pragma_query_value(None, "user_version", |r| r.get(0))?;
        if version > SCHEMA_VERSION {
            return Err(rusqlite::Error::InvalidParameterName(format!(
                "the database was written by a newer wallflux (schema {version})"
            )));
        }
        conn.execute_batch(SCHEMA)?;
        conn.pragma_update(None, "user_version", SCHEMA_VERSION)?;
        let (events, bytes, oldest_ms): (i64, i64, Option<i64>) = conn.query_row(
            "SELECT count(*), coalesce(sum(length(payload) + length(topic)), 0), min(time_ms) FROM outbox",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )?;
        let events = events as u64;
        Ok(Store {
            conn,
            limits,
            in_tx: false,
            events,
            bytes: bytes as u64 + events * ROW_OVERHEAD_BYTES,
            oldest_ms,
            dropped: 0,
        })
    }

    fn begin(&mut self) -> rusqlite::Result<()> {
        if !self.in_tx {
            self.conn.execute_batch("BEGIN IMMEDIATE")?;
            self.in_tx = true;
        }
        Ok(())
    }

    /// Writes an event to the spool (in the open transaction: durable at
    /// [`commit`](Self::commit)); its sequence number.
    pub fn spool(
        &mut self,
        time: Timestamp,
        topic: &str,
        payload: &[u8],
        offline: bool,
    ) -> rusqlite::Result<i64> {
        self.spool_with(time, topic, payload, offline, None)
    }

    /// [`spool`](Self::spool) with the MQTT 5 correlation data of a reply.
    pub fn spool_with(
        &mut self,
        time: Timestamp,
        topic: &str,
        payload: &[u8],
        offline: bool,
        correlation: Option<&[u8]>,
    ) -> rusqlite::Result<i64> {
        self.begin()?;
        let t = ms(time);
        self.conn
            .prepare_cached(
                "INSERT INTO outbox (time_ms, topic, payload, offline, correlation) VALUES (?1, ?2, ?3, ?4, ?5)",
            )?
            .execute(params![t, topic, payload, offline, correlation])?;
        self.events += 1;
        self.bytes += (payload.len() + topic.len()) as u64 + ROW_OVERHEAD_BYTES;
        self.oldest_ms = Some(self.oldest_ms.map_or(t, |o| o.min(t)));
        Ok(self.conn.last_insert_rowid())
    }

    /// Writes a zone state, kiln state or event to the history (in the open
    /// transaction). Nothing when the history is off (`history_days = 0`).
    pub fn record(
        &mut self,
        kind: HistoryKind,
        zone: Option<&str>,
        time: Timestamp,
        payload: &[u8],
    ) -> rusqlite::Result<()> {
        if self.limits.history_days <= 0.0 {
            return Ok(());
        }
        self.begin()?;
        self.conn
            .prepare_cached(
                "INSERT INTO history (time_ms, kind, zone, payload) VALUES (?1, ?2, ?3, ?4)",
            )?
            .execute(params![ms(time), kind.word(), zone, payload])?;
        Ok(())
    }

    /// Keeps a piece of the daemon's state under `name` (the energy
    /// books), replacing the last one, in the open transaction: durable
    /// with the round it belongs to.
    pub fn put_state(&mut self, name: &str, time: Timestamp, json: &[u8]) -> rusqlite::Result<()> {
        self.begin()?;
        self.conn
            .prepare_cached(
                "INSERT INTO state (name, time_ms, json) VALUES (?1, ?2, ?3)
                 ON CONFLICT (name) DO UPDATE SET time_ms = ?2, json = ?3",
            )?
            .execute(params![name, ms(time), json])?;
        Ok(())
    }

    /// The state kept under `name`, if any.
    pub fn get_state(&self, name: &str) -> rusqlite::Result<Option<Vec<u8>>> {
        self.conn
            .query_row("SELECT json FROM state WHERE name = ?1", [name], |r| {
                r.get(0)
            })
            .optional()
    }

    /// Makes everything written since the last commit durable (one fsync).
    /// On failure the round is rolled back: the caller still holds what it
    /// wrote.
    pub fn commit(&mut self) -> rusqlite::Result<()> {
        if !self.in_tx {
            return Ok(());
        }
        self.in_tx = false;
        match self.conn.execute_batch("COMMIT") {
            Ok(()) => Ok(()),
            Err(e) => {
                let _ = self.conn.execute_batch("ROLLBACK");
                self.recount()?;
                Err(e)
            }
        }
    }

    /// Abandons the open transaction (after a write in it failed).
    pub fn rollback(&mut self) {
        if self.in_tx {
            self.in_tx = false;
            let _ = self.conn.execute_batch("ROLLBACK");
            let _ = self.recount();
        }
    }

    fn recount(&mut self) -> rusqlite::Result<()> {
        let (events, bytes, oldest_ms): (i64, i64, Option<i64>) = self.conn.query_row(
            "SELECT count(*), coalesce(sum(length(payload) + length(topic)), 0), min(time_ms) FROM outbox",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )?;
        self.events = events as u64;
        self.bytes = bytes as u64 + self.events * ROW_OVERHEAD_BYTES;
        self.oldest_ms = oldest_ms;
        Ok(())
    }

    /// The first committed event after `seq`, in order.
    pub fn next_after(&self, seq: i64) -> rusqlite::Result<Option<Spooled>> {
        self.conn
            .prepare_cached(
                "SELECT seq, time_ms, topic, payload, offline, correlation FROM outbox WHERE seq > ?1 ORDER BY seq LIMIT 1",
            )?
            .query_row([seq], |r| {
                Ok(Spooled {
                    seq: r.get(0)?,
                    time: from_ms(r.get(1)?),
                    topic: r.get(2)?,
                    payload: r.get(3)?,
                    offline: r.get(4)?,
                    correlation: r.get(5)?,
                })
            })
            .optional()
    }

    /// The highest sequence number in the spool (0 when empty).
    pub fn last_seq(&self) -> rusqlite::Result<i64> {
        self.conn
            .query_row("SELECT coalesce(max(seq), 0) FROM outbox", [], |r| r.get(0))
    }

    /// Deletes the events the broker acknowledged, in one transaction.
    pub fn delete_acked(&mut self, seqs: &[i64]) -> rusqlite::Result<()> {
        if seqs.is_empty() {
            return Ok(());
        }
        // Never inside an engine round's transaction: this commits at once.
        self.commit()?;
        self.begin()?;
        let mut freed = 0u64;
        let mut gone = 0u64;
        let result = (|| {
            let mut size = self.conn.prepare_cached(
                "SELECT length(payload) + length(topic) FROM outbox WHERE seq = ?1",
            )?;
            let mut del = self
                .conn
                .prepare_cached("DELETE FROM outbox WHERE seq = ?1")?;
            for s in seqs {
                if let Some(n) = size.query_row([s], |r| r.get::<_, i64>(0)).optional()? {
                    del.execute([s])?;
                    freed += n as u64 + ROW_OVERHEAD_BYTES;
                    gone += 1;
                }
            }
            Ok::<_, rusqlite::Error>(())
        })();
        if let Err(e) = result {
            self.rollback();
            return Err(e);
        }
        self.commit()?;
        self.events = self.events.saturating_sub(gone);
        self.bytes = self.bytes.saturating_sub(freed);
        if self.events == 0 {
            self.oldest_ms = None;
        } else {
            self.oldest_ms = self
                .conn
                .query_row("SELECT min(time_ms) FROM outbox", [], |r| r.get(0))?;
        }
        Ok(())
    }

    /// The events dropped since the last announcement (kept in the
    /// database, so a kill does not lose the count), taken to be announced
    /// now (in the open transaction).
    pub fn take_dropped(&mut self) -> rusqlite::Result<Option<Dropped>> {
        let row = self
            .conn
            .query_row(
                "SELECT count, bytes, first_ms, last_ms, bound FROM dropped WHERE id = 1",
                [],
                |r| {
                    Ok((
                        r.get::<_, i64>(0)?,
                        r.get::<_, i64>(1)?,
                        r.get::<_, i64>(2)?,
                        r.get::<_, i64>(3)?,
                        r.get::<_, String>(4)?,
                    ))
                },
            )
            .optional()?;
        let Some((count, bytes, first, last, bound)) = row else {
            return Ok(None);
        };
        self.begin()?;
        self.conn.execute("DELETE FROM dropped", [])?;
        Ok(Some(Dropped {
            count: count as u64,
            bytes: bytes as u64,
            first: from_ms(first),
            last: from_ms(last),
            bound: if bound == "spool_max_age_h" {
                "spool_max_age_h"
            } else {
                "spool_max_mb"
            },
        }))
    }

    /// Drops the oldest events while the spool is over a bound (in the open
    /// transaction); what went, if anything (for the log). The drops also
    /// add up in the database until [`take_dropped`](Self::take_dropped)
    /// takes them to be announced: one notice per outage, not one per
    /// event.
    pub fn enforce_bounds(&mut self, now: Timestamp) -> rusqlite::Result<Option<Dropped>> {
        let max_bytes = (self.limits.spool_max_mb * 1e6) as u64;
        let min_ms = ms(now) - (self.limits.spool_max_age_h * 3.6e6) as i64;
        let too_old = |o: Option<i64>| o.is_some_and(|o| o < min_ms);
        if self.bytes <= max_bytes && !too_old(self.oldest_ms) {
            return Ok(None);
        }
        let bound = if self.bytes > max_bytes {
            "spool_max_mb"
        } else {
            "spool_max_age_h"
        };
        self.begin()?;
        let mut out: Option<Dropped> = None;
        while self.events > 0 && (self.bytes > max_bytes || too_old(self.oldest_ms)) {
            let (seq, t, n): (i64, i64, i64) = self.conn.query_row(
                "SELECT seq, time_ms, length(payload) + length(topic) FROM outbox ORDER BY seq LIMIT 1",
                [],
                |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
            )?;
            self.conn
                .prepare_cached("DELETE FROM outbox WHERE seq = ?1")?
                .execute([seq])?;
            let b = n as u64 + ROW_OVERHEAD_BYTES;
            self.events -= 1;
            self.bytes = self.bytes.saturating_sub(b);
            self.dropped += 1;
            let d = out.get_or_insert(Dropped {
                count: 0,
                bytes: 0,
                first: from_ms(t),
                last: from_ms(t),
                bound,
            });
            d.count += 1;
            d.bytes += b;
            d.last = from_ms(t);
            self.oldest_ms = self
                .conn
                .query_row("SELECT min(time_ms) FROM outbox", [], |r| r.get(0))?;
        }
        if let Some(d) = &out {
            self.conn.execute(
                "INSERT INTO dropped (id, count, bytes, first_ms, last_ms, bound) VALUES (1, ?1, ?2, ?3, ?4, ?5)
                 ON CONFLICT (id) DO UPDATE SET count = count + ?1, bytes = bytes + ?2,
                    first_ms = min(first_ms, ?3), last_ms = max(last_ms, ?4), bound = ?5",
                params![d.count as i64, d.bytes as i64, ms(d.first), ms(d.last), d.bound],
            )?;
        }
        Ok(out)
    }

    /// Deletes history older than `history_days` (committed at once);
    /// how many rows went.
    pub fn prune_history(&mut self, now: Timestamp) -> rusqlite::Result<u64> {
        self.commit()?;
        let before = ms(now) - (self.limits.history_days * 86.4e6) as i64;
        let n = self
            .conn
            .execute("DELETE FROM history WHERE time_ms < ?1", [before])?;
        if n > 0 {
            // Give a little of the freed space back each time.
            let _ = self.conn.execute_batch("PRAGMA incremental_vacuum(2048)");
        }
        Ok(n as u64)
    }

    pub fn stats(&self) -> SpoolStats {
        SpoolStats {
            events: self.events,
            bytes: self.bytes,
            oldest: self.oldest_ms.map(from_ms),
            dropped: self.dropped,
        }
    }
}

/// Opens the database of `dir` to read only (for `export`, beside a
/// running daemon).
pub fn open_read_only(dir: &Path) -> rusqlite::Result<Connection> {
    let conn = Connection::open_with_flags(
        dir.join(STORE_FILE),
        OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )?;
    conn.busy_timeout(std::time::Duration::from_secs(5))?;
    Ok(conn)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(s: &str) -> Timestamp {
        Timestamp::parse(s).unwrap()
    }

    fn limits(mb: f64, h: f64) -> StoreSettings {
        StoreSettings {
            spool_max_mb: mb,
            spool_max_age_h: h,
            history_days: 90.0,
        }
    }

    fn dir(name: &str) -> PathBuf {
        let d = std::env::temp_dir().join(format!("wallflux-store-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    #[test]
    fn committed_events_survive_reopen_in_order_and_acked_ones_go() {
        let d = dir("reopen");
        let (mut s, how) = Store::open(&d, limits(64.0, 336.0)).unwrap();
        assert!(matches!(how, Opened::New));
        let a = s
            .spool(t("2026-05-01T10:00:00Z"), "r/events", b"{\"n\":1}", false)
            .unwrap();
        let b = s
            .spool(t("2026-05-01T10:00:01Z"), "r/events", b"{\"n\":2}", true)
            .unwrap();
        s.commit().unwrap();
        // Written but never committed: gone with the process.
        s.spool(t("2026-05-01T10:00:02Z"), "r/events", b"{\"n\":3}", false)
            .unwrap();
        drop(s);
        let (mut s, how) = Store::open(&d, limits(64.0, 336.0)).unwrap();
        assert!(matches!(how, Opened::Existing { unsent: 2 }), "{how:?}");
        let first = s.next_after(0).unwrap().unwrap();
        assert_eq!(
            (first.seq, first.payload.as_slice(), first.offline),
            (a, &b"{\"n\":1}"[..], false)
        );
        assert_eq!(s.next_after(a).unwrap().unwrap().seq, b);
        assert!(s.next_after(b).unwrap().is_none());
        s.delete_acked(&[a]).unwrap();
        assert_eq!(s.stats().events, 1);
        assert_eq!(s.stats().oldest, Some(t("2026-05-01T10:00:01Z")));
        assert_eq!(s.next_after(0).unwrap().unwrap().seq, b);
    }

    #[test]
    fn the_size_bound_drops_the_oldest_events_and_says_how_many() {
        let d = dir("bound");
        // 0.01 MB = 10 000 bytes; each row ~ 1000 + 8 + 96 bytes.
        let (mut s, _) = Store::open(&d, limits(0.01, 336.0)).unwrap();
        let payload = vec![b'x'; 1000];
        for i in 0..20 {
            s.spool(
                t("2026-05-01T10:00:00Z").plus_s(i as f64),
                "r/events",
                &payload,
                true,
            )
            .unwrap();
        }
        let dropped = s
            .enforce_bounds(t("2026-05-01T10:01:00Z"))
            .unwrap()
            .unwrap();
        s.commit().unwrap();
        let kept = s.stats();
        // 10 000 / 1104 → 9 rows fit.
        assert_eq!(kept.events, 9);
        assert_eq!(dropped.count, 11);
        assert_eq!(dropped.bound, "spool_max_mb");
        assert_eq!(dropped.first, t("2026-05-01T10:00:00Z"));
        assert_eq!(dropped.last, t("2026-05-01T10:00:10Z"));
        assert_eq!(kept.oldest, Some(t("2026-05-01T10:00:11Z")));
        assert_eq!(kept.dropped, 11);
        // A second drop adds up with the first until announced.
        s.spool(t("2026-05-01T10:00:30Z"), "r/events", &payload, true)
            .unwrap();
        assert_eq!(
            s.enforce_bounds(t("2026-05-01T10:01:00Z"))
                .unwrap()
                .unwrap()
                .count,
            1
        );
        let all = s.take_dropped().unwrap().unwrap();
        assert_eq!(
            (all.count, all.first, all.last),
            (12, t("2026-05-01T10:00:00Z"), t("2026-05-01T10:00:11Z"))
        );
        assert_eq!(s.take_dropped().unwrap(), None);
    }

    #[test]
    fn the_age_bound_drops_events_older_than_it() {
        let d = dir("age");
        let (mut s, _) = Store::open(&d, limits(64.0, 1.0)).unwrap();
        s.spool(t("2026-05-01T08:00:00Z"), "r/events", b"{}", true)
            .unwrap();
        s.spool(t("2026-05-01T09:30:00Z"), "r/events", b"{}", true)
            .unwrap();
        let d = s
            .enforce_bounds(t("2026-05-01T10:00:00Z"))
            .unwrap()
            .unwrap();
        assert_eq!((d.count, d.bound), (1, "spool_max_age_h"));
        assert_eq!(s.stats().events, 1);
        assert!(s
            .enforce_bounds(t("2026-05-01T10:00:00Z"))
            .unwrap()
            .is_none());
    }

    #[test]
    fn a_damaged_database_is_moved_aside_and_a_new_one_started() {
        let d = dir("damaged");
        std::fs::write(d.join(STORE_FILE), vec![0x5a; 8192]).unwrap();
        let (mut s, how) = Store::open(&d, limits(64.0, 336.0)).unwrap();
        match how {
            Opened::MovedAside { to, .. } => {
                assert_eq!(std::fs::read(&to).unwrap(), vec![0x5a; 8192]);
            }
            other => panic!("{other:?}"),
        }
        s.spool(t("2026-05-01T10:00:00Z"), "r/events", b"{}", false)
            .unwrap();
        s.commit().unwrap();
        assert_eq!(s.stats().events, 1);
    }

    #[test]
    fn state_is_kept_by_name_and_replaced() {
        let d = dir("state");
        let (mut s, _) = Store::open(&d, limits(64.0, 336.0)).unwrap();
        assert_eq!(s.get_state("energy").unwrap(), None);
        s.put_state("energy", t("2026-05-01T10:00:00Z"), b"{\"a\":1}")
            .unwrap();
        s.put_state("energy", t("2026-05-01T10:01:00Z"), b"{\"a\":2}")
            .unwrap();
        s.commit().unwrap();
        drop(s);
        let (s, _) = Store::open(&d, limits(64.0, 336.0)).unwrap();
        assert_eq!(s.get_state("energy").unwrap().unwrap(), b"{\"a\":2}");
    }

    #[test]
    fn history_is_pruned_by_age() {
        let d = dir("history");
        let mut l = limits(64.0, 336.0);
        l.history_days = 1.0;
        let (mut s, _) = Store::open(&d, l).unwrap();
        s.record(
            HistoryKind::Zone,
            Some("roof"),
            t("2026-05-01T10:00:00Z"),
            b"{}",
        )
        .unwrap();
        s.record(
            HistoryKind::Zone,
            Some("roof"),
            t("2026-05-02T09:00:00Z"),
            b"{}",
        )
        .unwrap();
        s.commit().unwrap();
        assert_eq!(s.prune_history(t("2026-05-02T12:00:00Z")).unwrap(), 1);
    }
}
