//! `wallflux analyze`: the live monitor over recorded samples, driven by
//! the samples' timestamps as the daemon is driven by its clock: before
//! each row every deadline up to it is handled (`handle_timeout_before`),
//! and every output is drained. Streams: constant memory whatever the file
//! size. By default it writes the zone states; `--outputs all` writes every
//! output as `{"kind":…,"output":…}` (the output is the payload the daemon
//! publishes).
//!
//! Samples CSV: header `time,channel,value`; `time` RFC 3339 or epoch
//! seconds; `value` in the channel's signal unit (°C, or mV), or `open`.
//! A row whose channel is `<source>.cj`, or the source's `cj_channel`,
//! gives that source's cold-junction temperature (°C) for the millivolt
//! channels that follow; otherwise the source's `cj_c` applies. A row with
//! neither channel nor value (`<time>,,`, the first row of a recording by
//! `run --record`) says when the monitor started; otherwise it starts at
//! the first row. Rows must be in time order.

use std::collections::HashMap;
use std::io::{BufRead, BufReader, BufWriter, Write};
use std::path::Path;
use std::sync::Arc;

use anyhow::anyhow;

use super::Failure;
use crate::acquire::line::{Unit, Value};
use crate::config::Signal;
use crate::ids::{ChannelId, IdVec, SourceId};
use serde::Serialize;

use super::cli::Outputs;
use crate::monitor::output::{Output, OutputKind};
use crate::monitor::Monitor;
use crate::time::Timestamp;

/// Bad rows reported one by one before only counting.
const REPORT_ROWS: u64 = 20;

pub fn analyze(config: &Path, samples: &Path, outputs: Outputs) -> Result<(), Failure> {
    let settings = Arc::new(super::load(config)?);
    super::log_warnings(&settings, config);
    let file = std::fs::File::open(samples)
        .map_err(|e| Failure::usage(anyhow!("cannot read samples {}: {e}", samples.display())))?;
    let out = std::io::stdout().lock();
    let stats = replay(
        settings,
        BufReader::new(file),
        BufWriter::new(out),
        &samples.display().to_string(),
        outputs,
    )?;
    if stats.bad_rows > 0 || stats.unknown_rows > 0 || stats.out_of_order > 0 {
        super::say(&format!(
            "wallflux: {}: {} rows used, {} malformed, {} for unknown channels, {} out of time order (skipped)",
            samples.display(),
            stats.rows,
            stats.bad_rows,
            stats.unknown_rows,
            stats.out_of_order
        ));
    }
    Ok(())
}

#[derive(Debug, Default, Clone, Copy, PartialEq, Eq)]
pub struct ReplayStats {
    pub rows: u64,
    pub bad_rows: u64,
    pub unknown_rows: u64,
    pub out_of_order: u64,
    pub states: u64,
}

/// Replays `input` through a fresh monitor, writing JSON lines to `out`.
pub fn replay(
    settings: Arc<crate::config::Settings>,
    input: impl BufRead,
    mut out: impl Write,
    label: &str,
    outputs: Outputs,
) -> Result<ReplayStats, Failure> {
    let by_name: HashMap<&str, ChannelId> = settings
        .channels
        .iter_ids()
        .map(|(i, c)| (c.name.as_str(), i))
        .collect();
    let cj_names: HashMap<String, SourceId> = settings
        .sources
        .iter_ids()
        .map(|(i, s)| (format!("{}.cj", s.name), i))
        .collect();
    let mut cj: IdVec<SourceId, Option<f64>> = settings.sources.map(|s| s.cj_c);
    let mut stats = ReplayStats::default();
    let mut monitor: Option<Monitor> = None;
    let mut last: Option<Timestamp> = None;
    let write_err = |e: std::io::Error| {
        if e.kind() == std::io::ErrorKind::BrokenPipe {
            Failure::runtime(anyhow!(
                "output closed before the replay ended (broken pipe): zone states after the first ones are not written"
            ))
        } else {
            Failure::runtime(anyhow!("cannot write output: {e}"))
        }
    };
    let mut unknown_reported: Vec<String> = Vec::new();

    let mut lines = input.lines();
    let header = match lines.next() {
        Some(Ok(h)) => h,
        Some(Err(e)) => return Err(Failure::usage(anyhow!("{label}: cannot read: {e}"))),
        None => {
            return Err(Failure::usage(anyhow!(
                "{label}: empty file (expected header time,channel,value)"
            )))
        }
    };
    if header.trim().trim_start_matches('\u{feff}') != "time,channel,value" {
        return Err(Failure::usage(anyhow!(
            "{label}:1: header must be exactly `time,channel,value`, found {:?}",
            header.trim()
        )));
    }
    let bad = |stats: &mut ReplayStats, n: usize, why: &str| {
        stats.bad_rows += 1;
        if stats.bad_rows <= REPORT_ROWS {
            super::say(&format!("wallflux: {label}:{n}: {why} (row skipped)"));
        }
    };
    for (i, line) in lines.enumerate() {
        let n = i + 2;
        let line = line.map_err(|e| Failure::runtime(anyhow!("{label}:{n}: cannot read: {e}")))?;
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        let mut parts = line.splitn(3, ',');
        let (Some(t), Some(ch), Some(v)) = (parts.next(), parts.next(), parts.next()) else {
            bad(&mut stats, n, "expected three fields time,channel,value");
            continue;
        };
        let Ok(time) = Timestamp::parse(t) else {
            bad(&mut stats, n, "time is neither RFC 3339 nor epoch seconds");
            continue;
        };
        if last.is_some_and(|l| time < l) {
            stats.out_of_order += 1;
            continue;
        }
        let (ch, v) = (ch.trim(), v.trim());
        let mon = monitor.get_or_insert_with(|| Monitor::new(settings.clone(), time));
        // Everything due before this row's time is complete: emit it (a
        // cycle due at this very time waits for this row).
        if last != Some(time) {
            // (Rows of one scan share a time: once is enough.)
            mon.handle_timeout_before(time);
            drain(mon, &mut out, &mut stats, outputs).map_err(write_err)?;
        }
        last = Some(time);
        if ch.is_empty() && v.is_empty() {
            continue; // the start of a recording
        }
        if let Some(&src) = cj_names.get(ch) {
            match v.parse::<f64>() {
                Ok(c) if c.is_finite() => cj[src] = Some(c),
                _ => bad(&mut stats, n, "cold-junction value is not a number"),
            }
            continue;
        }
        let Some(&idx) = by_name.get(ch) else {
            stats.unknown_rows += 1;
            if unknown_reported.len() < 20 && !unknown_reported.iter().any(|u| u == ch) {
                super::say(&format!(
                    "wallflux: {label}:{n}: no [[channel]] is named {ch:?} (its rows are skipped)"
                ));
                unknown_reported.push(ch.to_string());
            }
            continue;
        };
        let c = &settings.channels[idx];
        let value = if v.eq_ignore_ascii_case("open") {
            Value::Open
        } else {
            match v.parse::<f64>() {
                Ok(x) if x.is_finite() => Value::Reading {
                    value: x,
                    unit: match c.signal {
                        Signal::Celsius => Unit::Celsius,
                        Signal::Millivolts => Unit::Millivolts,
                    },
                },
                _ => {
                    bad(&mut stats, n, "value is not a number");
                    continue;
                }
            }
        };
        stats.rows += 1;
        mon.handle_value(idx, value, cj[c.source], time);
        // A source's cold-junction channel sets its junction for the
        // millivolt rows after it (as in the daemon).
        if settings.sources[c.source].cj_channel == Some(idx) {
            if let Value::Reading { value, .. } = value {
                cj[c.source] = Some(value);
            }
        }
    }
    if let (Some(mon), Some(t)) = (monitor.as_mut(), last) {
        // The last partial interval too: its readings are published.
        mon.close_partial_intervals(t);
        mon.handle_timeout(t);
        drain(mon, &mut out, &mut stats, outputs).map_err(write_err)?;
    }
    out.flush().map_err(write_err)?;
    Ok(stats)
}

/// Writes the monitor's pending outputs as JSON lines: the zone states, or
/// with [`Outputs::All`] every output with its kind.
fn drain(
    mon: &mut Monitor,
    out: &mut impl Write,
    stats: &mut ReplayStats,
    outputs: Outputs,
) -> std::io::Result<()> {
    while let Some(o) = mon.poll_output() {
        let zone = matches!(o, Output::ZoneState(_));
        stats.states += u64::from(zone);
        match outputs {
            Outputs::ZoneStates if zone => serde_json::to_writer(&mut *out, &o)?,
            Outputs::ZoneStates => continue,
            Outputs::All => serde_json::to_writer(
                &mut *out,
                &Line {
                    kind: o.kind(),
                    output: &o,
                },
            )?,
        }
        out.write_all(b"\n")?;
    }
    Ok(())
}

/// One line of `--outputs all`.
#[derive(Serialize)]
struct Line<'a> {
    kind: OutputKind,
    output: &'a Output,
}
