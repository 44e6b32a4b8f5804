//! Timestamps: UTC seconds since the Unix epoch, RFC 3339 on the wire.
//!
//! The core never reads a clock: every time-dependent call takes a
//! [`Timestamp`]. The live daemon derives it from a monotonic clock anchored
//! to UTC at start-up (so intervals never run backwards when the wall clock is
//! stepped); `analyze` takes it from the samples file.

use core::fmt::Write as _;

/// UTC seconds since 1970-01-01T00:00:00Z (POSIX time: no leap seconds).
#[derive(Debug, Clone, Copy, PartialEq, PartialOrd, Default)]
pub struct Timestamp(f64);

/// Why a timestamp could not be read.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum TimeError {
    /// Not `YYYY-MM-DDTHH:MM:SS[.frac](Z|±HH:MM)` nor a plain number of seconds.
    #[error("not an RFC 3339 time (YYYY-MM-DDTHH:MM:SS[.fff]Z) or epoch seconds")]
    Syntax,
    /// A field is out of its calendar range (month 13, minute 61, ...).
    #[error("a date or time field is out of range")]
    Range,
}

/// 0000-01-01T00:00:00Z in epoch seconds.
const EPOCH_MIN_S: f64 = -62_167_219_200.0;
/// 9999-12-31T23:59:59Z in epoch seconds.
const EPOCH_MAX_S: f64 = 253_402_300_799.0;

/// An RFC 3339 text, e.g. `2026-12-02T08:15:30.250Z` (at most 24 bytes).
pub type Rfc3339 = heapless::String<32>;

impl Timestamp {
    /// From seconds since the epoch.
    pub fn from_epoch_s(s: f64) -> Self {
        Timestamp(s)
    }

    /// Seconds since the epoch.
    pub fn epoch_s(self) -> f64 {
        self.0
    }

    /// This time plus `s` seconds.
    pub fn plus_s(self, s: f64) -> Self {
        Timestamp(self.0 + s)
    }

    /// The first instant from `self` on at which `due` holds, stepping up one
    /// representable instant at a time: a deadline computed as `t0 + d` can
    /// round to just below the instant a test such as `t.since(t0) >= d`
    /// accepts. A few steps always suffice for finite times; after them the
    /// last instant tried is returned.
    pub fn first_when(self, due: impl Fn(Timestamp) -> bool) -> Timestamp {
        let mut t = self;
        for _ in 0..8 {
            if due(t) {
                break;
            }
            t = Timestamp(t.0.next_up());
        }
        t
    }

    /// Seconds from `earlier` to `self` (negative if `earlier` is later).
    pub fn since(self, earlier: Timestamp) -> f64 {
        self.0 - earlier.0
    }

    /// Reads RFC 3339 (`2026-12-02T08:15:30Z`, fraction and `±HH:MM` offset
    /// allowed, `t`/space as separator, `z` as Zulu) or plain epoch seconds.
    pub fn parse(text: &str) -> Result<Self, TimeError> {
        let text = text.trim();
        if text.is_empty() {
            return Err(TimeError::Syntax);
        }
        let b = text.as_bytes();
        if b.len() >= 10 && b[4] == b'-' {
            return parse_rfc3339(b);
        }
        match text.parse::<f64>() {
            Ok(v)
                if v.is_finite()
                    && text
                        .bytes()
                        .all(|c| c.is_ascii_digit() || c == b'.' || c == b'-') =>
            {
                // The years RFC 3339 can write, 0000 to 9999: beyond, a
                // second is below the resolution of the f64 (at 1e20 s,
                // adding an interval changes nothing) and time stands still.
                if (EPOCH_MIN_S..=EPOCH_MAX_S).contains(&v) {
                    Ok(Timestamp(v))
                } else {
                    Err(TimeError::Range)
                }
            }
            _ => Err(TimeError::Syntax),
        }
    }

    /// RFC 3339 in UTC with millisecond precision, e.g. `2026-12-02T08:15:30.250Z`.
    pub fn rfc3339(self) -> Rfc3339 {
        let mut out = Rfc3339::new();
        let ms_total = (self.0 * 1000.0).round() as i64;
        let secs = ms_total.div_euclid(1000);
        let ms = ms_total.rem_euclid(1000);
        let days = secs.div_euclid(86_400);
        let sod = secs.rem_euclid(86_400);
        let (y, m, d) = civil_from_days(days);
        // 24 bytes always fit in 32 for years 0..=9999; outside that range
        // the text is truncated rather than panicking.
        let _ = write!(
            out,
            "{:04}-{:02}-{:02}T{:02}:{:02}:{:02}.{:03}Z",
            y,
            m,
            d,
            sod / 3600,
            (sod / 60) % 60,
            sod % 60,
            ms
        );
        out
    }
}

impl serde::Serialize for Timestamp {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&self.rfc3339())
    }
}

fn digits(b: &[u8], from: usize, n: usize) -> Result<i64, TimeError> {
    let s = b.get(from..from + n).ok_or(TimeError::Syntax)?;
    let mut v = 0i64;
    for &c in s {
        if !c.is_ascii_digit() {
            return Err(TimeError::Syntax);
        }
        v = v * 10 + i64::from(c - b'0');
    }
    Ok(v)
}

fn expect(b: &[u8], at: usize, what: &[u8]) -> Result<(), TimeError> {
    match b.get(at) {
        Some(c) if what.contains(c) => Ok(()),
        _ => Err(TimeError::Syntax),
    }
}

fn parse_rfc3339(b: &[u8]) -> Result<Timestamp, TimeError> {
    let year = digits(b, 0, 4)?;
    expect(b, 4, b"-")?;
    let month = digits(b, 5, 2)?;
    expect(b, 7, b"-")?;
    let day = digits(b, 8, 2)?;
    expect(b, 10, b"Tt ")?;
    let hour = digits(b, 11, 2)?;
    expect(b, 13, b":")?;
    let minute = digits(b, 14, 2)?;
    expect(b, 16, b":")?;
    let second = digits(b, 17, 2)?;
    let mut i = 19;
    let mut frac = 0.0;
    if b.get(i) == Some(&b'.') {
        i += 1;
        let start = i;
        let mut scale = 0.1;
        while let Some(c) = b.get(i).filter(|c| c.is_ascii_digit()) {
            frac += f64::from(c - b'0') * scale;
            scale /= 10.0;
            i += 1;
        }
        if i == start {
            return Err(TimeError::Syntax);
        }
    }
    let offset_s = match b.get(i) {
        Some(b'Z' | b'z') if i + 1 == b.len() => 0,
        Some(&sign @ (b'+' | b'-')) if i + 6 == b.len() => {
            let oh = digits(b, i + 1, 2)?;
            expect(b, i + 3, b":")?;
            let om = digits(b, i + 4, 2)?;
            if oh > 23 || om > 59 {
                return Err(TimeError::Range);
            }
            let s = oh * 3600 + om * 60;
            if sign == b'+' {
                s
            } else {
                -s
            }
        }
        _ => return Err(TimeError::Syntax),
    };
    if !(1..=12).contains(&month)
        || day < 1
        || day > days_in_month(year, month)
        || hour > 23
        || minute > 59
        || second > 60
    {
        return Err(TimeError::Range);
    }
    let days = days_from_civil(year, month, day);
    let secs = days * 86_400 + hour * 3600 + minute * 60 + second - offset_s;
    Ok(Timestamp(secs as f64 + frac))
}

fn is_leap(y: i64) -> bool {
    (y % 4 == 0 && y % 100 != 0) || y % 400 == 0
}

fn days_in_month(y: i64, m: i64) -> i64 {
    match m {
        2 if is_leap(y) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    }
}

/// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant,
/// "chrono-Compatible Low-Level Date Algorithms", `days_from_civil`).
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Inverse of [`days_from_civil`] (same source, `civil_from_days`).
fn civil_from_days(z: i64) -> (i64, i64, i64) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    (if m <= 2 { y + 1 } else { y }, m, d)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Reference instants: 2000-01-01T00:00:00Z is POSIX 946684800 and
    /// 2038-01-19T03:14:07Z is 2^31 − 1 (both well-known POSIX values,
    /// e.g. `date -u -d @946684800`).
    #[test]
    fn known_instants() {
        assert_eq!(
            Timestamp::parse("2000-01-01T00:00:00Z").unwrap().epoch_s(),
            946_684_800.0
        );
        assert_eq!(
            Timestamp::parse("2038-01-19T03:14:07Z").unwrap().epoch_s(),
            2_147_483_647.0
        );
        assert_eq!(
            Timestamp::from_epoch_s(946_684_800.0).rfc3339().as_str(),
            "2000-01-01T00:00:00.000Z"
        );
        assert_eq!(
            Timestamp::from_epoch_s(2_147_483_647.5).rfc3339().as_str(),
            "2038-01-19T03:14:07.500Z"
        );
        // Leap day and offsets: 2024-02-29T12:00:00+02:00 is 10:00Z.
        let t = Timestamp::parse("2024-02-29T12:00:00+02:00").unwrap();
        assert_eq!(t.rfc3339().as_str(), "2024-02-29T10:00:00.000Z");
        assert_eq!(Timestamp::parse("1709200800").unwrap(), t);
    }

    #[test]
    fn round_trip_many_days() {
        for day in -800_000i64..800_000 {
            if day % 997 != 0 {
                continue;
            }
            let (y, m, d) = civil_from_days(day);
            assert_eq!(days_from_civil(y, m, d), day);
        }
    }

    #[test]
    fn bad_times_are_errors() {
        for bad in [
            "",
            "2026-13-01T00:00:00Z",
            "2026-02-30T00:00:00Z",
            "2026-01-01T24:00:00Z",
            "2026-01-01T00:00:00",
            "2026-01-01T00:00:00.Z",
            "yesterday",
            "1e9",
            "NaN",
        ] {
            assert!(Timestamp::parse(bad).is_err(), "{bad:?} accepted");
        }
        // Epoch seconds beyond the years 0000..9999: at 1e20 s an f64 step
        // is 16384 s, and a replay starting there never advanced.
        for far in ["99999999999999999999", "253402300800", "-62167219201"] {
            assert_eq!(Timestamp::parse(far), Err(TimeError::Range), "{far}");
        }
        // The ends themselves: 9999-12-31T23:59:59Z and 0000-01-01T00:00:00Z.
        assert_eq!(
            Timestamp::parse("253402300799"),
            Timestamp::parse("9999-12-31T23:59:59Z")
        );
        assert_eq!(
            Timestamp::parse("-62167219200"),
            Timestamp::parse("0000-01-01T00:00:00Z")
        );
    }
}
