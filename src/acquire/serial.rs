//! The serial edge: open the port, read bytes, feed the line parser, hand
//! each frame to the engine as a scan (and each rejected line as a decode
//! error, which the monitor counts). On any error or disappearance of the
//! device it logs once, backs off (capped) and reopens; it never ends the
//! daemon. It keeps only the port's own facts (open, reopened).

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;
use std::time::Duration;

use tokio::io::AsyncReadExt;
use tokio::sync::{mpsc, watch};
use tokio_serial::SerialPortBuilderExt;
use tracing::{info, warn};

use super::line::{self, FrameError, LineCounters, LineParser};
use crate::app::clock::Clock;
use crate::config::Source;
use crate::ids::SourceId;
use crate::protocol::scan::Scan;
use crate::time::Timestamp;

/// What a line brought: a scan, or a line the decoder rejected. Moved by
/// value through the bounded channel: boxing the scan would allocate per
/// scan, which the acquisition path does not.
#[derive(Debug, Clone)]
#[allow(clippy::large_enum_variant)]
pub enum Delivery {
    Scan(Scan),
    DecodeError,
}

/// A delivery from source `source`, stamped when its line ended.
#[derive(Debug, Clone)]
pub struct FromSource {
    pub source: SourceId,
    pub time: Timestamp,
    pub delivery: Delivery,
}

/// The port's state, shared with the status report (the monitor keeps the
/// source's scan counters).
#[derive(Debug, Default)]
pub struct SourceHealth {
    pub open: AtomicBool,
    pub opens: AtomicU64,
    pub open_failures: AtomicU64,
}

const MIN_BACKOFF: Duration = Duration::from_millis(500);
const MAX_BACKOFF: Duration = Duration::from_secs(30);
/// Repeated conditions (port still missing, errors continuing) are logged
/// again at most this often.
const REMIND_EVERY: Duration = Duration::from_secs(300);
/// A summary of line errors at most this often while they continue.
const ERROR_SUMMARY_EVERY: Duration = Duration::from_secs(60);

/// Runs source `id` until `shutdown` turns true.
pub async fn run(
    id: SourceId,
    source: Source,
    tx: mpsc::Sender<FromSource>,
    health: Arc<SourceHealth>,
    clock: Clock,
    mut shutdown: watch::Receiver<bool>,
) {
    let mut parser = LineParser::new();
    let mut backoff = MIN_BACKOFF;
    let mut last_open_warning: Option<tokio::time::Instant> = None;
    let silence = Duration::from_secs_f64((source.silence_s / clock.speed()).max(0.05));
    let name = source.name.as_str();
    loop {
        if *shutdown.borrow() {
            return;
        }
        let port = match tokio_serial::new(&source.port, source.baud).open_native_async() {
            Ok(p) => p,
            Err(e) => {
                health.open_failures.fetch_add(1, Ordering::Relaxed);
                let now = tokio::time::Instant::now();
                if last_open_warning.is_none_or(|t| now.duration_since(t) >= REMIND_EVERY) {
                    let hint = if e.to_string().contains("exclusive lock") {
                        " (another program has the port open)"
                    } else {
                        ""
                    };
                    warn!(source = name, port = %source.port, error = %e,
                        "cannot open serial port{hint}; retrying with backoff up to {}s", MAX_BACKOFF.as_secs());
                    last_open_warning = Some(now);
                }
                if wait_or_shutdown(backoff, &mut shutdown).await {
                    return;
                }
                backoff = (backoff * 2).min(MAX_BACKOFF);
                continue;
            }
        };
        let mut port = port;
        health.open.store(true, Ordering::Relaxed);
        health.opens.fetch_add(1, Ordering::Relaxed);
        info!(source = name, port = %source.port, baud = source.baud, "serial port open");
        last_open_warning = None;
        // A reopened line starts a new sequence: the gap across the outage
        // is not a count of lost scans.
        parser.reset_sequence();
        // Nor is half a line from before it the start of the next one.
        parser.discard_partial_line();
        let mut errors = ErrorLog::default();
        let mut silent = false;
        // Silence is judged on the clock, which a demo's simulator drives
        // (slower than its nominal speed when the machine is busy).
        let mut last_bytes = clock.now();
        let mut buf = [0u8; 512];
        let reason = loop {
            let read = tokio::select! {
                r = tokio::time::timeout(silence, port.read(&mut buf)) => r,
                _ = shutdown.changed() => { if *shutdown.borrow() { return; } continue; }
            };
            match read {
                Err(_) => {
                    // A timer may fire a hair early on the clock's reading.
                    let quiet_s = clock.now().since(last_bytes) + 1e-3;
                    if !silent && quiet_s >= source.silence_s {
                        warn!(source = name, port = %source.port, silence_s = source.silence_s,
                            "serial line silent: no bytes received");
                        silent = true;
                    }
                }
                Ok(Ok(0)) => break "device gone (end of file)".to_string(),
                Ok(Err(e)) => break e.to_string(),
                Ok(Ok(n)) => {
                    last_bytes = clock.now();
                    if silent {
                        info!(source = name, "serial line receiving again");
                        silent = false;
                    }
                    for &b in &buf[..n] {
                        let delivery = match parser.push(b) {
                            None => continue,
                            Some(Ok(frame)) => Delivery::Scan(line::to_scan(&frame)),
                            Some(Err(e)) => {
                                errors.note(name, e, parser.counters());
                                Delivery::DecodeError
                            }
                        };
                        let msg = FromSource {
                            source: id,
                            time: clock.now(),
                            delivery,
                        };
                        if tx.send(msg).await.is_err() {
                            return; // the engine has stopped
                        }
                    }
                }
            }
        };
        health.open.store(false, Ordering::Relaxed);
        warn!(source = name, port = %source.port, reason = %reason,
            "serial port lost; reopening with backoff");
        drop(port);
        backoff = MIN_BACKOFF;
        if wait_or_shutdown(backoff, &mut shutdown).await {
            return;
        }
    }
}

/// Sleeps for `d`; true if shutdown was requested meanwhile.
pub(super) async fn wait_or_shutdown(d: Duration, shutdown: &mut watch::Receiver<bool>) -> bool {
    tokio::select! {
        _ = tokio::time::sleep(d) => *shutdown.borrow(),
        _ = shutdown.changed() => *shutdown.borrow(),
    }
}

/// Rate-limited logging of line errors: the first one in full, then a
/// summary of the counters at most once a minute while errors continue.
#[derive(Default)]
struct ErrorLog {
    first_logged: bool,
    last_summary: Option<tokio::time::Instant>,
    since_summary: u64,
}

impl ErrorLog {
    fn note(&mut self, source: &str, e: FrameError, counters: &LineCounters) {
        self.since_summary += 1;
        let now = tokio::time::Instant::now();
        if !self.first_logged {
            warn!(source, error = %e, "bad line on the serial source (further errors summarised once a minute)");
            self.first_logged = true;
            self.last_summary = Some(now);
            self.since_summary = 0;
        } else if self
            .last_summary
            .is_none_or(|t| now.duration_since(t) >= ERROR_SUMMARY_EVERY)
        {
            warn!(source, errors = self.since_summary, last_error = %e, counters = %counters,
                "bad lines on the serial source since the last report");
            self.last_summary = Some(now);
            self.since_summary = 0;
        }
    }
}
