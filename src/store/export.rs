//! `wallflux export`: the history of the database as CSV or JSON lines,
//! streamed row by row (a year of history never sits in memory), readable
//! while the daemon writes.

use std::io::Write;
use std::path::Path;

use rusqlite::types::Value as SqlValue;
use serde_json::Value;

use super::{open_read_only, HistoryKind};
use crate::time::Timestamp;

/// What to write out.
#[derive(Debug, Clone)]
pub struct Filter {
    pub since: Option<Timestamp>,
    pub until: Option<Timestamp>,
    pub zone: Option<String>,
    pub kind: Option<HistoryKind>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Csv,
    Jsonl,
}

/// The CSV columns of each kind: a JSON field of the payload each.
pub fn columns(kind: HistoryKind) -> &'static [&'static str] {
    match kind {
        HistoryKind::Zone => &[
            "time",
            "zone",
            "status",
            "model",
            "hot_face_c",
            "shell_c",
            "flux_hot_face_w_m2",
            "flux_shell_w_m2",
            "heat_loss_w",
            "source_w_m3",
            "fit_rms_c",
            "balance_mismatch_pct",
            "hot_face_rate_c_per_h",
            "model_check",
        ],
        HistoryKind::Kiln => &[
            "time",
            "operation",
            "heat_loss_w",
            "zones_reporting",
            "zones",
            "energy_today_kwh",
            "energy_total_kwh",
        ],
        HistoryKind::Event => &[
            "time", "type", "alarm", "from", "to", "priority", "value", "setpoint", "unit",
            "action", "by", "ok", "reason", "event_id", "seq", "message",
        ],
    }
}

/// Writes the rows of `dir`'s database that pass `filter` to `out`; how
/// many. An error names what failed (no database yet, a write refused).
pub fn export(
    dir: &Path,
    filter: &Filter,
    format: Format,
    out: &mut impl Write,
) -> anyhow::Result<u64> {
    if !dir.join(super::STORE_FILE).exists() {
        anyhow::bail!(
            "no history in {}: the daemon has not run with this state directory yet",
            dir.display()
        );
    }
    let conn = open_read_only(dir)?;
    let mut sql = String::from("SELECT kind, zone, payload FROM history WHERE 1 = 1");
    let mut args: Vec<SqlValue> = Vec::new();
    if let Some(t) = filter.since {
        sql.push_str(" AND time_ms >= ?");
        args.push(SqlValue::Integer(super::ms(t)));
    }
    if let Some(t) = filter.until {
        sql.push_str(" AND time_ms < ?");
        args.push(SqlValue::Integer(super::ms(t)));
    }
    if let Some(k) = filter.kind {
        sql.push_str(" AND kind = ?");
        args.push(SqlValue::Text(k.word().into()));
    }
    if let Some(z) = &filter.zone {
        sql.push_str(" AND zone = ?");
        args.push(SqlValue::Text(z.clone()));
    }
    sql.push_str(" ORDER BY time_ms, id");
    let mut stmt = conn.prepare(&sql)?;
    let mut rows = stmt.query(rusqlite::params_from_iter(args))?;
    let cols = match (format, filter.kind) {
        (Format::Csv, Some(k)) => Some(columns(k)),
        (Format::Csv, None) => anyhow::bail!(
            "--format csv needs --kind (zone, kiln or event): each kind has its own columns"
        ),
        (Format::Jsonl, _) => None,
    };
    if let Some(cols) = cols {
        writeln!(out, "{}", cols.join(","))?;
    }
    let mut n = 0u64;
    while let Some(row) = rows.next()? {
        let payload: Vec<u8> = row.get(2)?;
        match cols {
            None => {
                out.write_all(&payload)?;
                out.write_all(b"\n")?;
            }
            Some(cols) => {
                let v: Value = serde_json::from_slice(&payload).unwrap_or(Value::Null);
                let mut first = true;
                for c in cols {
                    if !first {
                        out.write_all(b",")?;
                    }
                    first = false;
                    write_cell(out, v.get(*c))?;
                }
                out.write_all(b"\n")?;
            }
        }
        n += 1;
    }
    out.flush()?;
    Ok(n)
}

/// One CSV cell (RFC 4180 quoting where needed; empty for a missing or
/// null field).
fn write_cell(out: &mut impl Write, v: Option<&Value>) -> std::io::Result<()> {
    match v {
        None | Some(Value::Null) => Ok(()),
        Some(Value::String(s)) => quoted(out, s),
        Some(Value::Number(n)) => write!(out, "{n}"),
        Some(Value::Bool(b)) => write!(out, "{b}"),
        Some(other) => quoted(out, &other.to_string()),
    }
}

fn quoted(out: &mut impl Write, s: &str) -> std::io::Result<()> {
    if s.contains([',', '"', '\n', '\r']) {
        write!(out, "\"{}\"", s.replace('"', "\"\""))
    } else {
        out.write_all(s.as_bytes())
    }
}

/// A time given on the command line: RFC 3339, or a date (midnight UTC).
pub fn parse_time(text: &str) -> anyhow::Result<Timestamp> {
    let full = if text.len() == 10 {
        format!("{text}T00:00:00Z")
    } else {
        text.to_string()
    };
    Timestamp::parse(&full).map_err(|e| {
        anyhow::anyhow!("{text:?} is not a time: give RFC 3339 (2026-05-01T06:00:00Z) or a date (2026-05-01): {e}")
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cells_are_quoted_only_when_they_must_be() {
        let mut out = Vec::new();
        write_cell(&mut out, Some(&Value::String("a,b \"c\"".into()))).unwrap();
        out.push(b'|');
        write_cell(&mut out, Some(&serde_json::json!(12.5))).unwrap();
        out.push(b'|');
        write_cell(&mut out, None).unwrap();
        assert_eq!(String::from_utf8(out).unwrap(), "\"a,b \"\"c\"\"\"|12.5|");
    }

    #[test]
    fn a_date_is_midnight_utc() {
        assert_eq!(
            parse_time("2026-05-01").unwrap(),
            Timestamp::parse("2026-05-01T00:00:00Z").unwrap()
        );
        assert!(parse_time("yesterday").is_err());
    }
}
